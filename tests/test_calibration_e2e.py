"""End to end: a calibration on the simulated arm whose true geometry differs from its
arm file (deliberately wrong link lengths, zeros and base), through the command line:
touch (the interlock, reduced speed, a confirmation per approach), fit, apply. The
corrected file must bring the touched points within the simulated touching scatter.

The truth is the simulated bench's own geometry (drivers/sim.py ``true_errors``); the
corrected file is read back with the ordinary arm-file loader and checked by the
closed-form FK (kinematics/solve.py), not by the code that fitted it.
"""

from __future__ import annotations

import io
import json
import math
import shutil
from pathlib import Path

import numpy as np
import pytest
import tomllib

from benchjog.console.cell import calibration_files as cf
from benchjog.console.cell.armfile import builtin_arm, load_arm
from benchjog.console.cli.main import main
from benchjog.drivers.calibration import joints_from_counts
from benchjog.kinematics import identify as ident
from benchjog.kinematics.solve import tool_from_joints

ROOT = Path(__file__).resolve().parents[1]
CELLS = {
    "planar-bench": (ROOT / "examples/bench-cell/plate.toml",
                     "shoulder.a=1.5,elbow.a=-0.9,shoulder.zero=0.6,elbow.zero=-0.4,"
                     "base.x=201.2,base.y=-0.8,base.yaw=0.3"),
    "scara-bench": (ROOT / "examples/scara-cell/plate.toml",
                    "j1.a=1.2,j2.a=-0.7,j1.zero=0.5,j2.zero=-0.3,quill.zero=0.4,"
                    "base.x=175.8,base.y=0.6,base.z=-40.3,base.yaw=-0.2"),
}
NOISE_MM = 0.05


def run(monkeypatch, capsys, answer: str, *argv: str) -> tuple[int, str, str]:
    monkeypatch.setattr("sys.stdin", io.StringIO(answer))
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def builtin_text(name: str) -> str:
    return (ROOT / "console/cell/arms" / f"{name}.toml").read_text(encoding="utf-8")


@pytest.mark.slow
@pytest.mark.parametrize("name", sorted(CELLS))
def test_a_wrong_arm_file_is_corrected_within_the_touching_scatter(name, monkeypatch, capsys, tmp_path):
    plate, errors = CELLS[name]
    arm_path = tmp_path / "arm.toml"
    arm_path.write_text(builtin_text(name), encoding="utf-8")
    touches = tmp_path / "touches.toml"
    journal = tmp_path / "journal.log"
    code, _, err = run(monkeypatch, capsys, "y\n" * 20, "calibrate", "touch", "--arm", str(arm_path),
                       "--plate", str(plate), "--out", str(touches), "--count", "10",
                       "--sim-errors", errors, "--sim-noise", str(NOISE_MM), "--seed", "4",
                       "--journal", str(journal))
    assert code == 0, err
    assert "10 touches recorded" in err
    assert err.count("Approach this hole? [y/N]") == 10     # one confirmation per approach

    code, out, err = run(monkeypatch, capsys, "", "calibrate", "fit", str(touches), "--arm", str(arm_path),
                         "--plate", str(plate), "--json")
    assert code == 0, err
    report = json.loads(out)
    assert report["before"]["rms_mm"] > 20 * NOISE_MM    # the arm file really is wrong

    code, _, err = run(monkeypatch, capsys, "y\n", "calibrate", "apply", str(touches), "--arm",
                       str(arm_path), "--out", str(arm_path), "--plate", str(plate))
    assert code == 0, err
    assert "+a = " in err or "+a=" in err.replace(" ", "")      # the diff was shown
    assert (tmp_path / "arm.toml.bak").read_text(encoding="utf-8") == builtin_text(name)
    text = arm_path.read_text(encoding="utf-8")
    assert "(invented demo). Units: mm and degrees." in text    # the user's comments kept
    assert "# base height" in text or name == "planar-bench"

    # Check the corrected file independently: load it, read the recorded counts through
    # it, closed-form FK, lay it on the plate by the fitted base pose.
    fixed = load_arm(arm_path)
    table = tomllib.loads(text)["calibration"]
    base = table["base_in_plate"]
    yaw = math.radians(base[-1])
    rot = np.array([[math.cos(yaw), -math.sin(yaw)], [math.sin(yaw), math.cos(yaw)]])
    nominal = builtin_arm(name)
    truth_vec = ident.true_vector_from_errors(nominal, ident.parse_errors(errors))
    records = cf.load_touches(touches, nominal)
    predicted, truth, holes = [], [], []
    for rec in records:
        tool = tool_from_joints(fixed, joints_from_counts(fixed, rec.counts))
        xy = rot @ np.array(tool[:2]) + np.array(base[:2])
        p = list(xy) + ([tool[2] + base[2]] if fixed.is_scara else [])   # base: x, y, (z,) yaw
        predicted.append(p)
        holes.append(rec.hole_mm)
        truth.append(ident.plate_points_mm(nominal, ident.params_of(nominal), truth_vec,
                                           [joints_from_counts(nominal, rec.counts)])[0])
    predicted, truth, holes = map(np.array, (predicted, truth, holes))
    scatter = np.linalg.norm(truth - holes, axis=1)       # where the tip really was vs the hole
    after = np.linalg.norm(predicted - holes, axis=1)
    model_error = np.linalg.norm(predicted - truth, axis=1)
    rms = lambda v: float(np.sqrt(np.mean(v ** 2)))      # noqa: E731
    assert rms(after) <= rms(scatter) * 1.05               # within the simulated scatter
    assert model_error.max() < 3 * NOISE_MM                # and it knows where the tip really is
    before = np.linalg.norm(
        np.array([list(rot @ np.array(tool_from_joints(nominal, joints_from_counts(nominal, r.counts))[:2])
                       + np.array(base[:2])) for r in records]) - holes[:, :2], axis=1)
    assert rms(before) > 10 * rms(after)


def test_too_few_touches_are_refused_in_one_line(monkeypatch, capsys, tmp_path):
    arm = builtin_arm("planar-bench")
    touches = tmp_path / "t.toml"
    cf.save_touches(touches, arm, "plate.toml", [
        cf.TouchRecord(f"h{i}", (100.0 + i, 50.0), "elbow-down", (i * 100, 1000 + i)) for i in range(3)])
    code, out, err = run(monkeypatch, capsys, "", "calibrate", "fit", str(touches))
    assert code == 1 and out == ""
    assert err.startswith("benchjog: 3 touches give 6 equations for 6 parameters") and err.count("\n") == 1


@pytest.mark.parametrize("argv, words", [
    (["--sim-errors", "wrist.a=1"], "--sim-errors: unknown arm error 'wrist.a'"),
    (["--sim-errors", "shoulder.a=lots"], "--sim-errors: arm error shoulder.a: not a number"),
    (["--speed", "0"], "--speed: must be in (0, 100]"),
])
def test_bad_touch_options_are_one_line_and_move_nothing(monkeypatch, capsys, tmp_path, argv, words):
    out_file = tmp_path / "t.toml"
    code, _, err = run(monkeypatch, capsys, "y\n" * 5, "calibrate", "touch", "--plate",
                       str(CELLS["planar-bench"][0]), "--out", str(out_file), "--journal",
                       str(tmp_path / "j.log"), *argv)
    assert code == 2 and err.startswith(f"benchjog: {words}") and err.count("\n") == 1
    assert not out_file.exists()


def test_a_declined_approach_records_nothing_and_moves_nothing(monkeypatch, capsys, tmp_path):
    out_file = tmp_path / "t.toml"
    journal = tmp_path / "j.log"
    code, _, err = run(monkeypatch, capsys, "n\n" * 12, "calibrate", "touch", "--plate",
                       str(CELLS["planar-bench"][0]), "--out", str(out_file), "--journal", str(journal),
                       "--sim-errors", "shoulder.a=1")
    assert code == 1
    assert "0 touches recorded" in err
    assert '"segment"' not in journal.read_text(encoding="utf-8")    # the journal: nothing sent


def test_apply_answered_no_writes_nothing(monkeypatch, capsys, tmp_path):
    arm = builtin_arm("planar-bench")
    truth = ident.true_vector_from_errors(arm, {"shoulder.a": 1.0, "elbow.zero": 0.3})
    rng = np.random.default_rng(0)
    q = np.column_stack([rng.uniform(-1.5, 1.5, 8), rng.uniform(0.5, 2.2, 8) * np.resize([1, -1], 8)])
    holes = ident.plate_points_mm(arm, ident.params_of(arm), truth, q)
    from benchjog.drivers.calibration import counts_from_joints
    recs = [cf.TouchRecord(f"h{i}", tuple(h), "", counts_from_joints(arm, qq)) for i, (h, qq) in
            enumerate(zip(holes, q))]
    touches = tmp_path / "t.toml"
    cf.save_touches(touches, arm, "plate.toml", recs)
    arm_path = tmp_path / "arm.toml"
    shutil.copy(ROOT / "console/cell/arms/planar-bench.toml", arm_path)
    before = arm_path.read_bytes()
    code, _, err = run(monkeypatch, capsys, "n\n", "calibrate", "apply", str(touches), "--arm",
                       str(arm_path), "--out", str(arm_path))
    assert code == 1 and "cancelled: nothing written" in err
    assert arm_path.read_bytes() == before and not (tmp_path / "arm.toml.bak").exists()


def test_bad_plate_files_are_one_line(monkeypatch, capsys, tmp_path):
    plate = tmp_path / "plate.toml"
    plate.write_text("[grid]\npitch = -5\nrows = 2\ncols = 2\n", encoding="utf-8")
    code, _, err = run(monkeypatch, capsys, "", "calibrate", "plan", "--plate", str(plate))
    assert code == 2 and err == f"benchjog: {plate}: grid.pitch: must be > 0 (-5)\n"


def test_plan_lists_both_branches_and_the_indices(monkeypatch, capsys):
    code, out, err = run(monkeypatch, capsys, "", "calibrate", "plan", "--plate",
                         str(CELLS["planar-bench"][0]), "--count", "8", "--json")
    assert code == 0, err
    doc = json.loads(out)
    assert len(doc["touches"]) == 8
    assert {t["branch"] for t in doc["touches"]} == {"elbow-up", "elbow-down"}
    assert doc["condition_number"] < ident.COND_WARN and doc["o4"] > 0


def test_typed_steps_finish_a_touch_on_the_controller_path(tmp_path):
    """Without a rehearsal arm the user finishes each touch by typed steps; a bad or
    too-large step is refused in words and moves nothing; ok records where the arm is.
    (The flow of ``calibrate touch`` without --sim-errors, on a time-scaled simulated arm.)"""
    from benchjog.console.cell import touching
    from benchjog.console.cli.confirm import PromptConfirmer
    from benchjog.drivers.interlock import Interlock

    arm = builtin_arm("planar-bench")
    plate = cf.load_plate(CELLS["planar-bench"][0], arm)
    visits = [(name, hole, None) for name, hole in plate.holes[10:13]]
    stdin = io.StringIO("y\nx+0.5\nwiggle\ny+9\nj1-0.1\nok\n" + "y\nskip\n" + "y\nok\n")
    out = io.StringIO()
    saved = []
    with Interlock.open(arm, "sim", journal=False, time_scale=50.0) as gate:
        gate.enable()
        records = touching.capture(
            gate, arm, plate, visits, PromptConfirmer(arm, stdin=stdin, out=out),
            finish=lambda name, hole: touching.finish_by_hand(gate, arm, name, stdin, out),
            on_record=lambda recs: saved.append(len(recs)), out=out)
        moves = [c for c in gate.sim.commands if c[0] == "MOVE"]
    words = out.getvalue()
    assert "not a step: 'wiggle'" in words
    assert "9 is larger than a touching step may be (5 mm or deg)" in words
    assert [r.hole for r in records] == [visits[0][0], visits[2][0]] and saved == [1, 2]
    assert moves
    # the first touch: the approach end, then +0.5 mm in x and -0.1 deg on the shoulder
    x, y = touching.hole_in_base(plate, records[0].hole_mm)
    tool = tool_from_joints(arm, joints_from_counts(arm, records[0].counts))
    reach = math.hypot(x, y)
    expect = np.array([x + 0.5, y]) + reach * math.radians(-0.1) * np.array([-y, x]) / reach
    assert math.hypot(tool[0] - expect[0], tool[1] - expect[1]) < 0.3    # count rounding
