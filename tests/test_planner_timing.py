"""Tight lines do not slow the arm: a straight line's duration stays within 2 % of
its continuous speed profile at every chordal tolerance down to the arm's count
resolution, on whole-millisecond segments, with every speed and acceleration limit
and the tool speed cap still held.

The limit checks are the independent ones of tests/test_planner.py (check_timing:
speeds and accelerations from the segments themselves, tool speed from dense DH
forward kinematics). The physical floor, line length / tool speed cap, is a bound no
plan can beat (elementary kinematics).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from benchjog.console.cell.armfile import builtin_arm
from benchjog.console.cli.main import main
from benchjog.console.cell.programs import MoveStep, ProgramError, check_step, step_from_mapping
from benchjog.console.cell.safe_files import FileError
from benchjog.kinematics import planner, solve
from benchjog.kinematics.model import Branch
from benchjog.kinematics.solve import TargetError
from test_planner import check_timing, dense_line_deviation, position

PLANAR = builtin_arm("planar-bench")
SCARA = builtin_arm("scara-bench")


def tool_count_resolution_mm(arm, joints) -> float:
    """How far the tool moves for one count of the joint that moves it most: for the
    shoulder and the elbow, the tool's distance from the joint's axis times one count
    in radians (arc length, s = r theta); for the quill, one count in mm. (The roll
    turns the tool about its own axis: no position change.)"""
    tool = position(arm, solve.tool_from_joints_dh(arm, joints))[:2]
    t1 = joints[0] + arm.joints[0].offset_rad
    elbow = np.array([arm.link1_mm * math.cos(t1), arm.link1_mm * math.sin(t1)])
    steps = [float(np.linalg.norm(tool)) * math.radians(1.0 / arm.joints[0].counts_per_unit),
             float(np.linalg.norm(tool - elbow)) * math.radians(1.0 / arm.joints[1].counts_per_unit)]
    if arm.is_scara:
        steps.append(1.0 / arm.joints[2].counts_per_unit)
    return max(steps)


# (arm, start tool pose, target): long lines across the reach, clear of the zones.
LONG_LINES = [
    (PLANAR, (60.0, 300.0), (260.0, 76.4)),
    (SCARA, (60.0, 300.0, 130.0, 0.0), (260.0, 80.0, 50.0, math.radians(40.0))),
]


def _start(arm, pose):
    return solve.joints_from_tool(arm, pose).solution(Branch.ELBOW_DOWN).joints


@pytest.mark.parametrize("arm, a, b", LONG_LINES, ids=["planar", "scara"])
def test_duration_does_not_grow_as_the_tolerance_tightens(arm, a, b):
    start = _start(arm, a)
    resolution = max(tool_count_resolution_mm(arm, start), planner.LINE_TOLERANCE_MIN_MM)
    length = float(np.linalg.norm(position(arm, (*b[:3], 0.0) if arm.is_scara else (*b, 0.0))
                                  - position(arm, solve.tool_from_joints(arm, start))))
    durations = {}
    for tol in (0.1, 0.05, 0.01, 0.001, resolution):
        plan = planner.plan_line_move(arm, start, b, tolerance_mm=tol)
        assert plan.ok, plan.problems
        s = plan.summary
        assert s.duration_s <= s.continuous_s * 1.02, (tol, s.duration_s, s.continuous_s)
        assert s.duration_s >= length / arm.tool_speed_max_mm_s  # the physical floor
        durations[tol] = s.duration_s
        if tol <= 0.001:
            check_timing(arm, start, plan)  # every limit and the tool speed cap still hold
    coarse = durations[0.1]
    for tol, d in durations.items():
        assert d <= coarse * 1.02, f"{tol} mm: {d:.3f} s against {coarse:.3f} s at 0.1 mm"


def test_a_tight_line_still_holds_its_tolerance_and_the_caps():
    arm, a, b = LONG_LINES[0]
    start = _start(arm, a)
    tol = 0.002
    plan = planner.plan_line_move(arm, start, b, tolerance_mm=tol)
    assert plan.ok, plan.problems
    pa = position(arm, solve.tool_from_joints(arm, start))
    assert dense_line_deviation(arm, start, plan, pa, np.array([*b, 0.0]), per_segment=9) <= tol * (1 + 1e-9)
    check_timing(arm, start, plan)


def test_the_summary_says_why_a_short_line_has_more_segments_than_chords():
    start = _start(PLANAR, (60.0, 300.0))
    plan = planner.plan_line_move(PLANAR, start, (70.0, 300.0), tolerance_mm=0.1)
    s = plan.summary
    assert s.chord_count < s.segment_count
    words = [line for line in s.lines(PLANAR) if line.startswith("straight within 0.1 mm")]
    assert len(words) == 1
    assert f"{s.chord_count} chord" in words[0]
    assert f"{s.segment_count - s.chord_count} more to cut the speed ramps" in words[0]
    d = s.to_dict(PLANAR)
    assert d["chords_for_tolerance"] == s.chord_count and d["tolerance_mm"] == 0.1


@pytest.mark.parametrize("tol", [0.0, -1.0, 1e-7, 6.0, math.inf, math.nan])
def test_a_tolerance_out_of_bounds_is_refused_in_words(tol):
    with pytest.raises(TargetError, match="line tolerance must be"):
        planner.plan_line_move(PLANAR, PLANAR.home_joints, (300.0, 0.0), tolerance_mm=tol)


def test_move_tolerance_option(capsys):
    assert main(["move", "200", "150", "--tolerance", "0.01"]) == 2
    assert "for --path line only" in capsys.readouterr().err
    assert main(["move", "200", "150", "--path", "line", "--tolerance", "0"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "line tolerance must be" in err


def test_help_states_the_default_tolerance(capsys):
    with pytest.raises(SystemExit):
        main(["move", "--help"])
    assert f"default {planner.LINE_TOLERANCE_MM:g}" in capsys.readouterr().out


def test_program_line_steps_take_a_tolerance():
    step = step_from_mapping({"action": "move", "point": "p", "path": "line",
                              "tolerance_mm": 0.01}, "prog.toml", 1)
    assert step == MoveStep("p", "line", 100.0, "", 0.01)
    assert "within 0.01 mm" in step.describe()
    with pytest.raises(FileError, match="line moves only"):
        step_from_mapping({"action": "move", "point": "p", "tolerance_mm": 0.01}, "prog.toml", 1)
    with pytest.raises(FileError, match="line tolerance must be"):
        step_from_mapping({"action": "move", "point": "p", "path": "line", "tolerance_mm": 9.0},
                          "prog.toml", 1)
    with pytest.raises(ProgramError):
        check_step(MoveStep("p", "joint", 100.0, "", 0.01))
