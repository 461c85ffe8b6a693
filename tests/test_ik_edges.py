"""Edges of the IK front: reach boundaries, the origin, bad numbers, problems in words.

Outside facts used (from memory): a 2R arm reaches the annulus |a1 - a2| <= r <= a1 + a2
and its two IK branches coincide on both circles, where det J = a1 a2 sin t2 = 0
(Lynch & Park, "Modern Robotics", 2017, sections 5.1 and 6.1); with equal links the
origin is reached with the elbow folded and any shoulder angle (Spong, Hutchinson &
Vidyasagar, "Robot Modeling and Control", 2006, section 5.3). IEEE 754 double: 1e400
overflows to inf, as Python's float() and TOML readers give it.
"""

from __future__ import annotations

import math
import tomllib

import numpy as np
import pytest

from benchjog.console.cell.armfile import builtin_arm
from benchjog.kinematics import solve
from benchjog.kinematics.armspec import arm_from_mapping
from benchjog.kinematics.model import Branch
from benchjog.kinematics.solve import TargetError

PLANAR = builtin_arm("planar-bench")  # a1 = 220, a2 = 160: reach 60..380 mm
SCARA = builtin_arm("scara-bench")  # a1 = 200, a2 = 150: reach 50..350 mm
deg = math.radians


def fk_xy(a1, a2, t1, t2):
    """2R forward kinematics (Lynch & Park 2017, section 4.1, from memory)."""
    return a1 * math.cos(t1) + a2 * math.cos(t1 + t2), a1 * math.sin(t1) + a2 * math.sin(t1 + t2)


def planar_arm(a1, a2, lo=-360.0, hi=360.0, warn_deg=5.0):
    joint = dict(type="revolute", alpha=0.0, d=0.0, offset=0.0, min=lo, max=hi, max_speed=90.0,
                 counts_per_unit=10.0, zero=min(max(0.0, lo), hi), direction=1)
    return arm_from_mapping({"arm": {"name": "t", "geometry": "planar",
                                     "singularity_warn_deg": warn_deg},
                             "joints": [dict(joint, name="shoulder", a=a1),
                                        dict(joint, name="elbow", a=a2)]}, "t.toml")


def assert_reaches(arm, result, target):
    for sol in result.solutions:
        x, y = solve.tool_from_joints(arm, sol.joints)[:2]
        assert math.hypot(x - target[0], y - target[1]) <= 1e-9


DIRECTIONS_DEG = [0.0, 90.0, 180.0, -90.0, 37.0, 143.0, -121.0, -10.0]


@pytest.mark.parametrize("phi_deg", DIRECTIONS_DEG)
def test_exactly_at_max_reach_one_solution_and_a_singular_warning(phi_deg):
    r = PLANAR.max_reach_mm
    target = (r * math.cos(deg(phi_deg)), r * math.sin(deg(phi_deg)))
    if phi_deg in (0.0, 90.0, 180.0, -90.0):  # exactly on an axis
        target = tuple(round(v, 9) + 0.0 for v in target)
    result = solve.joints_from_tool(PLANAR, target)
    assert result.reachable and len(result.solutions) == 1
    assert result.solutions[0].joints[1] == pytest.approx(0.0, abs=1e-12)  # stretched
    assert any("singular" in w and "stretched" in w for w in result.warnings)
    assert_reaches(PLANAR, result, target)
    # the one solution serves both branches
    assert result.solution(Branch.ELBOW_UP) is result.solution(Branch.ELBOW_DOWN)


@pytest.mark.parametrize("phi_deg", DIRECTIONS_DEG)
def test_exactly_at_min_reach_one_folded_solution_and_a_warning(phi_deg):
    r = PLANAR.min_reach_mm
    target = (r * math.cos(deg(phi_deg)), r * math.sin(deg(phi_deg)))
    result = solve.joints_from_tool(PLANAR, target)
    assert result.reachable and len(result.solutions) == 1
    sol = result.solutions[0]
    assert abs(sol.joints[1]) == pytest.approx(math.pi, abs=1e-12)  # folded
    assert any("singular" in w and "folded" in w for w in result.warnings)
    assert_reaches(PLANAR, result, target)
    # the elbow's limit is 145 deg: folded (180) is beyond it, and the words say so
    assert not sol.usable
    assert "elbow at 180.00 deg passes its max 145.00 deg" in sol.problems


def test_just_outside_max_reach_by_1e_9_mm_is_out_of_reach():
    result = solve.joints_from_tool(PLANAR, (PLANAR.max_reach_mm + 1e-9, 0.0))
    assert not result.reachable and result.solutions == ()
    (words,) = result.warnings
    assert words.startswith("out of reach")
    assert "1.0e-09 mm beyond the max reach 380 mm" in words


def test_just_inside_min_reach_by_1e_9_mm_is_out_of_reach():
    result = solve.joints_from_tool(PLANAR, (0.0, -(PLANAR.min_reach_mm - 1e-9)))
    assert not result.reachable and result.solutions == ()
    assert "inside the min reach 60 mm" in result.warnings[0]


def test_far_out_of_reach_gives_the_distance_in_mm():
    result = solve.joints_from_tool(PLANAR, (500.0, 0.0))
    assert result.warnings == ("out of reach: the target is 120.000 mm beyond the max reach 380 mm",)


@pytest.mark.parametrize("target", [(380.0 - 1e-9, 0.0), (60.0 + 1e-9, 0.0),
                                    (0.0, 380.0 - 1e-6), (-60.0 - 1e-6, 0.0)])
def test_just_inside_the_boundaries_two_solutions_near_singular(target):
    result = solve.joints_from_tool(PLANAR, target)
    assert result.reachable and len(result.solutions) == 2
    assert [s.branch for s in result.solutions] == [Branch.ELBOW_DOWN, Branch.ELBOW_UP]
    assert_reaches(PLANAR, result, target)
    assert any(w.startswith("near singularity") for w in result.warnings)


@pytest.mark.parametrize("a", [50.0, 200.0, 999.0])
def test_origin_with_equal_links_one_solution_shoulder_arbitrary(a):
    arm = planar_arm(a, a)
    result = solve.joints_from_tool(arm, (0.0, 0.0))
    assert result.reachable and len(result.solutions) == 1
    sol = result.solutions[0]
    assert abs(sol.joints[1]) == pytest.approx(math.pi)
    assert any("shoulder angle is arbitrary" in w for w in result.warnings)
    assert any("folded" in w for w in result.warnings)
    assert_reaches(arm, result, (0.0, 0.0))
    # any shoulder works there: the textbook fact the warning rests on
    for t1 in (0.0, 1.0, -2.5):
        assert math.hypot(*fk_xy(a, a, t1, math.pi)) <= 1e-9 * a


def test_origin_with_unequal_links_is_out_of_reach():
    result = solve.joints_from_tool(PLANAR, (0.0, 0.0))
    assert not result.reachable
    assert "60.000 mm inside the min reach 60 mm" in result.warnings[0]


@pytest.mark.parametrize("target", [(300.0, 0.0), (0.0, 300.0), (-300.0, 0.0), (0.0, -300.0),
                                    (-250.0, -1e-12), (-250.0, 1e-12), (-200.0, -150.0)])
def test_axes_and_behind_the_base(target):
    arm = planar_arm(220.0, 160.0)
    result = solve.joints_from_tool(arm, target)
    assert len(result.solutions) == 2
    assert_reaches(arm, result, target)
    down, up = result.solutions
    assert down.joints[1] > 0 > up.joints[1]


BAD_NUMBERS = [
    (math.nan, 1.0, "x is not a finite number"),
    (1.0, math.inf, "y is not a finite number"),
    (-math.inf, 1.0, "x is not a finite number"),
    (float("1e400"), 0.0, "x is not a finite number"),  # IEEE 754: 1e400 overflows to inf
    (tomllib.loads("v = 1e400")["v"], 0.0, "x is not a finite number"),
    (tomllib.loads("v = nan")["v"], 0.0, "x is not a finite number"),
    ("1e400", 0.0, "x is not a finite number"),
    ("abc", 0.0, "x is not a number ('abc')"),
    ("", 0.0, "x is not a number ('')"),
    (0.0, None, "y is not a number (None)"),
    (0.0, [1.0], "y is not a number ([1.0])"),
    (True, 0.0, "x is not a number (True)"),
    (1 + 2j, 0.0, "x is not a number"),
    (np.float64("nan"), 0.0, "x is not a finite number"),
    (10 ** 400, 0.0, "x is not a number"),  # an int too big for a float
]


@pytest.mark.parametrize("x,y,words", BAD_NUMBERS)
def test_bad_numbers_raise_target_error_with_a_clear_line(x, y, words):
    with pytest.raises(TargetError) as info:
        solve.check_target(PLANAR, (x, y))
    message = str(info.value)
    assert words in message and "\n" not in message
    with pytest.raises(TargetError):
        solve.joints_from_tool(PLANAR, (x, y))


@pytest.mark.parametrize("target,words", [
    ((1.0,), "a planar arm takes a target of x, y, got 1 values"),
    ((1.0, 2.0, 3.0), "a planar arm takes a target of x, y, got 3 values"),
    ("12", "the target must be a sequence of 2 numbers"),
    (12.0, "the target must be a sequence of 2 numbers"),
    (None, "the target must be a sequence of 2 numbers"),
])
def test_bad_target_shapes_raise_target_error(target, words):
    with pytest.raises(TargetError, match=words):
        solve.check_target(PLANAR, target)


def test_scara_names_its_coordinates():
    with pytest.raises(TargetError, match="roll is not a finite number"):
        solve.joints_from_tool(SCARA, (200.0, 100.0, 50.0, math.nan))
    with pytest.raises(TargetError, match="z is not a number"):
        solve.joints_from_tool(SCARA, (200.0, 100.0, "low", 0.0))
    with pytest.raises(TargetError, match="takes a target of x, y, z, roll"):
        solve.joints_from_tool(SCARA, (200.0, 100.0))


def test_numeric_text_is_taken_as_the_number():
    assert solve.check_target(PLANAR, (" 12.5", "-3")) == (12.5, -3.0)


def test_check_joints_names_the_joint():
    with pytest.raises(TargetError, match="elbow is not a finite number"):
        solve.check_joints(PLANAR, (0.0, math.inf))
    with pytest.raises(TargetError, match="has 2 joints, got 3 values"):
        solve.check_joints(PLANAR, (0.0, 0.0, 0.0))


def test_batch_refuses_the_wrong_shape():
    with pytest.raises(TargetError, match=r"shape \(N, 2\)"):
        solve.joints_from_tool_batch(PLANAR, np.zeros((3, 4)))
    with pytest.raises(TargetError):
        solve.joints_from_tool_batch(PLANAR, [["a", "b"]])


# -- limit problems in words ---------------------------------------------------------

def textbook_branches(a1, a2, x, y):
    """Spong et al. (2006) section 5.3 (from memory), degrees, elbow-down first."""
    d = (x * x + y * y - a1 * a1 - a2 * a2) / (2 * a1 * a2)
    out = []
    for sign in (1.0, -1.0):
        t2 = math.atan2(sign * math.sqrt(1 - d * d), d)
        t1 = math.atan2(y, x) - math.atan2(a2 * math.sin(t2), a1 + a2 * math.cos(t2))
        out.append((math.degrees(math.remainder(t1, 2 * math.pi)), math.degrees(t2)))
    return out


def test_limit_problem_names_the_joint_its_value_and_the_limit():
    # (-100, -200) on planar-bench: elbow-down needs the shoulder near -158.8 deg, past
    # its min of -150; elbow-up is within limits.
    target = (-100.0, -200.0)
    (down_t1, down_t2), (up_t1, up_t2) = textbook_branches(220.0, 160.0, *target)
    result = solve.joints_from_tool(PLANAR, target)
    down, up = result.solution(Branch.ELBOW_DOWN), result.solution(Branch.ELBOW_UP)
    assert f"shoulder at {down_t1:.2f} deg passes its min -150.00 deg" in down.problems
    assert not down.usable
    assert up.usable and up.problems == ()
    assert math.degrees(up.joints[0]) == pytest.approx(up_t1)


def test_limit_problem_on_the_max_side_and_on_the_quill():
    arm = SCARA
    # quill: z below the lowest tool height (180 - 120 - 40 = 20 mm) needs more than 120 mm
    result = solve.joints_from_tool(arm, (250.0, 0.0, 10.0, 0.0))
    for sol in result.solutions:
        assert "quill at 130.00 mm passes its max 120.00 mm" in sol.problems
    # and above the top stop (142 mm at quill -2) needs a quill beyond its min of -2 mm
    result = solve.joints_from_tool(arm, (250.0, 0.0, 150.0, 0.0))
    for sol in result.solutions:
        assert "quill at -10.00 mm passes its min -2.00 mm" in sol.problems


def test_wrapped_value_inside_the_limits_is_reported_not_the_raw_one():
    # the roll joint of scara-bench spans -180..180: a heading that needs -190 deg of
    # roll is given as 170 deg and is usable (CONTRACT.md: the equivalent within limits)
    arm = SCARA
    result = solve.joints_from_tool(arm, (200.0, 150.0, 100.0, deg(90.0 + 190.0)))
    for sol in result.solutions:
        assert -math.pi - 1e-9 <= sol.joints[3] <= math.pi + 1e-9
        assert not any(p.startswith("roll") for p in sol.problems)


# -- singularity warnings: threshold and distance ---------------------------------------

@pytest.mark.parametrize("t2_deg,warns,kind,dist", [
    (4.0, True, "stretched", 4.0), (-4.0, True, "stretched", 4.0),
    (6.0, False, "", 0.0), (177.0, True, "folded", 3.0), (-176.5, True, "folded", 3.5),
    (170.0, False, "", 0.0), (90.0, False, "", 0.0),
])
def test_singularity_warning_threshold_and_distance(t2_deg, warns, kind, dist):
    arm = planar_arm(220.0, 160.0, warn_deg=5.0)
    target = fk_xy(220.0, 160.0, deg(20.0), deg(t2_deg))
    result = solve.joints_from_tool(arm, target)
    near = [w for w in result.warnings if "singular" in w]
    if not warns:
        assert near == []
        return
    assert near == [f"near singularity: elbow {dist:.2f} deg from {kind} (warning below 5 deg)"]


def test_singularity_threshold_comes_from_the_arm():
    arm = planar_arm(220.0, 160.0, warn_deg=10.0)
    result = solve.joints_from_tool(arm, fk_xy(220.0, 160.0, 0.0, deg(8.0)))
    assert any("8.00 deg from stretched (warning below 10 deg)" in w for w in result.warnings)


def test_pose_warnings_on_a_static_pose():
    words = solve.pose_warnings(PLANAR, (deg(160.0), deg(2.0)))
    assert "shoulder at 160.00 deg passes its max 150.00 deg" in words
    assert any(w.startswith("near singularity: elbow 2.00 deg from stretched") for w in words)


# -- keep-out zones on a static pose ----------------------------------------------------

def test_zone_hit_when_the_tool_is_in_the_box():
    # planar-bench parts-tray: x -300..-200, y -70..70, link clearance 12 mm
    result = solve.joints_from_tool(PLANAR, (-250.0, 0.0))
    for sol in result.solutions:
        assert any("inside keep-out zone 'parts-tray' (clearance 12 mm)" in p for p in sol.problems)
        assert not sol.usable


def test_zone_clearance_margin_by_hand():
    # Target (-189, 0): the tool is 11 mm from the box's edge x = -200, inside the 12 mm
    # clearance; at (-187, 0) it is 13 mm away. The elbows there are at about
    # (-154, +-157) (law of cosines), farther from the box than the tool.
    hit = solve.joints_from_tool(PLANAR, (-189.0, 0.0))
    clear = solve.joints_from_tool(PLANAR, (-187.0, 0.0))
    for sol in hit.solutions:
        assert any("parts-tray" in p for p in sol.problems)
    for sol in clear.solutions:
        assert not any("parts-tray" in p for p in sol.problems)


def test_zone_height_range_on_the_scara():
    # fixture-post: circle at (120, -180), r 35, z 0..100; clearance 15 mm. With the tool
    # over the post at z = 50 the quill is in it; at z = 130 (above 100 + 15) it is not.
    low = solve.joints_from_tool(SCARA, (120.0, -180.0, 50.0, 0.0))
    high = solve.joints_from_tool(SCARA, (120.0, -180.0, 130.0, 0.0))
    for sol in low.solutions:
        assert any("inside keep-out zone 'fixture-post'" in p and p.startswith("tool")
                   for p in sol.problems)
    for sol in high.solutions:
        assert not any("fixture-post" in p for p in sol.problems)
