"""``benchjog commission AXIS``: the per-axis walk-through on the simulated arm, scripted
answers on stdin. Expected values are worked by hand from PROTOCOL.md's conversion
``counts = direction * (value - zero) * counts_per_unit``."""

from __future__ import annotations

import io
import shutil
import tomllib
from pathlib import Path

import pytest

from benchjog.console.cli.main import main

ROOT = Path(__file__).resolve().parents[1]
PLANAR = ROOT / "console/cell/arms/planar-bench.toml"

# the demo elbow: zero 90 deg, 40 counts/deg, direction -1, limits -145..145
SCRIPT = ("y\nn\ny\n"            # jog +2, "it moved the wrong way", jog back
          "y\n10.5\ny\n"         # the 10 deg test move (400 counts) measured 10.5 deg, back
          "+1\nok\n90\n"         # onto the mark, one degree on; the mark is at 90 deg
          "+15\nok\n"            # one end
          "-15\n-15\n-15\nok\n"  # the other end
          "y\n")                 # homing


def run(monkeypatch, capsys, answer, *argv):
    monkeypatch.setattr("sys.stdin", io.StringIO(answer))
    code = main(list(argv))
    return (code,) + tuple(capsys.readouterr())


def test_the_walk_through_writes_the_axis_after_a_diff_and_keeps_a_backup(monkeypatch, capsys, tmp_path):
    arm = tmp_path / "arm.toml"
    shutil.copy(PLANAR, arm)
    code, _, err = run(monkeypatch, capsys, SCRIPT + "y\n", "commission", "elbow", "--arm", str(arm),
                       "--out", str(arm), "--journal", str(tmp_path / "j.log"))
    assert code == 0, err
    assert "-direction = -1" in err and "+direction = 1" in err        # the diff was shown
    elbow = tomllib.loads(arm.read_text(encoding="utf-8"))["joints"][1]
    assert elbow["direction"] == 1
    cpu = 400 / 10.5
    assert elbow["counts_per_unit"] == pytest.approx(cpu, abs=1e-6)
    # on the mark: 91 deg by the old file = -40 counts; new zero = 90 - (-40) / cpu
    assert elbow["zero"] == pytest.approx(90 + 40 / cpu, abs=1e-5)
    # ends at old 106 deg (-640 counts) and old 61 deg (+1160 counts), 2 deg margin
    zero = 90 + 40 / cpu
    assert elbow["min"] == pytest.approx(zero - 640 / cpu + 2, abs=1e-4)
    assert elbow["max"] == pytest.approx(zero + 1160 / cpu - 2, abs=1e-4)
    assert "homing done, elbow at count 0" in err
    text = arm.read_text(encoding="utf-8")
    assert "# A two-link planar bench arm (invented demo)" in text           # comments kept
    assert (tmp_path / "arm.toml.bak").read_bytes() == PLANAR.read_bytes()


@pytest.mark.parametrize("last, outcome, code", [("y\n", "written", 0), ("n\n", "cancelled", 1)])
def test_json_is_one_document_whether_written_or_not(monkeypatch, capsys, tmp_path, last, outcome, code):
    # docs/cli-json.md: every command with --json prints one document on stdout
    import json

    arm = tmp_path / "arm.toml"
    shutil.copy(PLANAR, arm)
    got, out, err = run(monkeypatch, capsys, SCRIPT + last, "commission", "elbow", "--arm", str(arm),
                        "--out", str(arm), "--journal", str(tmp_path / "j.log"), "--json")
    assert got == code, err
    doc = json.loads(out)
    assert doc["outcome"] == outcome and doc["axis"] == "elbow" and doc["direction"] == 1
    assert doc["counts_per_unit"] == pytest.approx(400 / 10.5, abs=1e-6)
    assert (doc["written"] == str(arm)) is (outcome == "written")


def test_quitting_midway_writes_nothing(monkeypatch, capsys, tmp_path):
    out = tmp_path / "new.toml"
    code, _, err = run(monkeypatch, capsys, "y\nquit\n", "commission", "1", "--out", str(out),
                       "--journal", str(tmp_path / "j.log"))
    assert code == 1 and "commissioning ended: nothing written" in err
    assert not out.exists()


def test_declining_the_first_jog_moves_nothing(monkeypatch, capsys, tmp_path):
    journal = tmp_path / "j.log"
    code, _, err = run(monkeypatch, capsys, "n\n", "commission", "shoulder", "--out",
                       str(tmp_path / "x.toml"), "--journal", str(journal))
    assert code == 1
    assert '"segment"' not in journal.read_text(encoding="utf-8")


@pytest.mark.parametrize("argv, words", [
    (["wrist"], "AXIS: no joint 'wrist' (shoulder, elbow, or 1..2)"),
    (["1", "--margin", "-1"], "--margin: must be in (0, 20]"),
    (["1", "--step", "50"], "--step: must be in (0, 5]"),
])
def test_bad_input_is_one_line(monkeypatch, capsys, tmp_path, argv, words):
    code, _, err = run(monkeypatch, capsys, "y\n", "commission", *argv, "--out", str(tmp_path / "x.toml"))
    assert code == 2 and err.startswith(f"benchjog: {words}") and err.count("\n") == 1


@pytest.mark.slow
def test_the_simulated_arm_commissions_cleanly_and_then_calibrates(monkeypatch, capsys, tmp_path):
    """The README's demo: commissioning the simulated arm's elbow finds the file right
    (nothing to write); the calibration rehearsal then runs on that file."""
    arm = tmp_path / "my-arm.toml"
    shutil.copy(PLANAR, arm)
    answers = "y\ny\ny\ny\n10\ny\nok\n90\nkeep\ny\n"
    code, _, err = run(monkeypatch, capsys, answers, "commission", "elbow", "--arm", str(arm),
                       "--out", str(arm), "--journal", str(tmp_path / "j.log"))
    assert code == 0, err
    assert "nothing to write" in err and arm.read_bytes() == PLANAR.read_bytes()
    touches = tmp_path / "touches.toml"
    code, _, err = run(monkeypatch, capsys, "y\n" * 5, "calibrate", "touch", "--arm", str(arm), "--plate",
                       str(ROOT / "examples/bench-cell/plate.toml"), "--out", str(touches),
                       "--count", "5", "--sim-errors", "shoulder.a=1.5,elbow.zero=-0.4,base.x=200.5",
                       "--seed", "2", "--journal", str(tmp_path / "j.log"))
    assert code == 0, err
    code, out, err = run(monkeypatch, capsys, "", "calibrate", "fit", str(touches), "--arm", str(arm))
    assert code == 0 and "residuals after" in out
