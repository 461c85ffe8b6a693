"""Accuracy at the target: ``solve`` (text and its extra JSON key) and the console's
branch panel show the tool step per count and the conditioning; a calibrated arm file
adds the position error its covariance implies."""

from __future__ import annotations

import io
import json
import math

import numpy as np

from benchjog.console.cell import calibration_files as cf
from benchjog.console.cell.armfile import builtin_arm
from benchjog.console.cli.main import main
from benchjog.console.tui.widgets.branch_table import branch_rows
from benchjog.drivers.calibration import counts_from_joints
from benchjog.kinematics import identify as ident
from benchjog.kinematics.solve import joints_from_tool


def run(monkeypatch, capsys, *argv):
    monkeypatch.setattr("sys.stdin", io.StringIO("y\n"))
    code = main(list(argv))
    return (code,) + tuple(capsys.readouterr())


def test_solve_json_keeps_the_contract_keys_and_adds_accuracy(monkeypatch, capsys):
    code, out, _ = run(monkeypatch, capsys, "solve", "379", "0", "--json")
    doc = json.loads(out)
    assert code == 0
    for sol in doc["solutions"]:
        assert {"branch", "joints", "usable", "problems"} <= set(sol)   # CONTRACT.md
        acc = sol["accuracy"]
        assert acc["position_sigma_mm"] is None                          # no calibration yet
        assert "from stretched" in acc["conditioning"]
        # 40 counts/deg: the elbow's step is its link length times one count in rad
        assert acc["step_per_count_mm"][1] == round(160.0 * math.radians(1 / 40), 9)


def test_a_calibrated_arm_file_gives_the_position_sigma(monkeypatch, capsys, tmp_path):
    arm = builtin_arm("planar-bench")
    truth = ident.true_vector_from_errors(arm, {"shoulder.a": 1.0, "elbow.zero": 0.3})
    rng = np.random.default_rng(0)
    q = np.column_stack([rng.uniform(-1.5, 1.5, 10), rng.uniform(0.5, 2.2, 10) * np.resize([1, -1], 10)])
    holes = ident.plate_points_mm(arm, ident.params_of(arm), truth, q) + rng.normal(0, 0.05, (10, 2))
    recs = [cf.TouchRecord(f"h{i}", tuple(float(v) for v in h), "", counts_from_joints(arm, qq))
            for i, (h, qq) in enumerate(zip(holes, q))]
    touches = tmp_path / "t.toml"
    cf.save_touches(touches, arm, "plate.toml", recs)
    out_arm = tmp_path / "fixed.toml"
    code, _, err = run(monkeypatch, capsys, "calibrate", "apply", str(touches), "--out", str(out_arm))
    assert code == 0, err
    code, out, _ = run(monkeypatch, capsys, "solve", "200", "150", "--arm", str(out_arm), "--json")
    sigmas = [s["accuracy"]["position_sigma_mm"] for s in json.loads(out)["solutions"]]
    assert all(0 < s < 0.2 for s in sigmas)
    code, out, _ = run(monkeypatch, capsys, "solve", "200", "150", "--arm", str(out_arm))
    assert "position 1-sigma from the calibration" in " ".join(out.split())   # rich wraps lines


def test_branch_panel_shows_step_per_count_and_ill_conditioning():
    arm = builtin_arm("planar-bench")
    rows = branch_rows(arm, joints_from_tool(arm, (220.0, 160.0)), None)
    assert rows[-1] == ("mm/count", "0.119", "0.119")
    rows = branch_rows(arm, joints_from_tool(arm, (378.0, 0.0)), None)
    assert rows[-1][0] == "mm/count" and all("ill-cond." in c for c in rows[-1][1:])
