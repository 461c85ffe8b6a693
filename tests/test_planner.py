"""Motion planner: line deviation, segment counts, speeds and accelerations, refusals.

Every check recomputes what it asserts independently of the planner: FK through the
DH chain (solve.tool_from_joints_dh), IK through the scalar path
(solve.joints_from_tool), speeds and accelerations from the segments themselves.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from benchjog.console.cell.armfile import builtin_arm
from benchjog.kinematics import planner, solve
from benchjog.kinematics.model import Branch
from benchjog.kinematics.solve import TargetError

PLANAR = builtin_arm("planar-bench")
SCARA = builtin_arm("scara-bench")
REL = 1e-6  # float slack on limit comparisons


# --------------------------------------------------------------------------- checkers

def position(arm, pose):
    return np.array(pose[:3] if arm.is_scara else (*pose[:2], 0.0))


def point_segment_3d(p, a, b):
    d = b - a
    dd = float(d @ d)
    s = 0.0 if dd == 0 else min(1.0, max(0.0, float((p - a) @ d) / dd))
    return float(np.linalg.norm(p - (a + s * d)))


def joint_path(start, plan):
    return np.vstack([start] + [s.joints for s in plan.segments])


def dense_line_deviation(arm, start, plan, a, b, per_segment=40):
    """Max distance from the segment ab of the DH forward kinematics at many points
    inside every joint-linear segment of the plan."""
    q = joint_path(start, plan)
    worst = 0.0
    for qa, qb in zip(q[:-1], q[1:]):
        for tau in np.linspace(0.0, 1.0, per_segment):
            pose = solve.tool_from_joints_dh(arm, qa + tau * (qb - qa))
            worst = max(worst, point_segment_3d(position(arm, pose), a, b))
    return worst


def check_timing(arm, start, plan, speed_pct=100.0):
    """Speeds = dq/dt per segment; accelerations from consecutive segment speeds over
    the mean duration (rest before and after counts as a segment of zero duration);
    wire durations; tool speed from dense FK differences."""
    t = np.array([s.duration_s for s in plan.segments])
    ms = t * 1000.0
    assert np.all(np.abs(ms - np.round(ms)) < 1e-6), "durations are whole ms"
    assert np.all(ms >= 1 - 1e-9) and np.all(ms <= 60000 + 1e-9)   # PROTOCOL.md MOVE
    q = joint_path(start, plan)
    w = np.diff(q, axis=0) / t[:, None]
    vmax = np.array([j.max_speed for j in arm.joints]) * speed_pct / 100.0
    amax = np.array([j.max_accel for j in arm.joints])
    assert np.all(np.abs(w) <= vmax * (1 + REL)), "joint speed within max_speed"
    wz = np.vstack([np.zeros(arm.n_joints), w, np.zeros(arm.n_joints)])
    tz = np.concatenate([[0.0], t, [0.0]])
    acc = np.diff(wz, axis=0) / ((tz[:-1] + tz[1:]) / 2)[:, None]
    assert np.all(np.abs(acc) <= amax * (1 + REL)), "joint acceleration within max_accel"
    cap = arm.tool_speed_max_mm_s * speed_pct / 100.0
    for qa, qb, dt in zip(q[:-1], q[1:], t):
        pts = [position(arm, solve.tool_from_joints_dh(arm, qa + s * (qb - qa)))
               for s in np.linspace(0, 1, 25)]
        speed = max(np.linalg.norm(p2 - p1) for p1, p2 in zip(pts[:-1], pts[1:])) * 24 / dt
        assert speed <= cap * (1 + 1e-6), f"tool speed {speed:.1f} mm/s over the cap"
    assert math.isclose(plan.summary.duration_s, float(t.sum()), abs_tol=1e-9)
    assert plan.summary.segment_count == len(plan.segments)


def scalar_ik_path(arm, start, target, branch, n):
    """Joint values along the straight line by the scalar IK, made continuous."""
    a = np.array(solve.tool_from_joints(arm, start))
    b = np.array(target, dtype=float)
    if arm.is_scara:
        b[3] = a[3] + math.remainder(b[3] - a[3], 2 * math.pi)
    rows = []
    for u in np.linspace(0.0, 1.0, n):
        tgt = a[:len(b)] + u * (b - a[:len(b)]) if arm.is_scara else a[:2] + u * (b - a[:2])
        sol = solve.joints_from_tool(arm, tgt).solution(branch)
        rows.append(sol.joints)
    q = np.array(rows)
    for i, j in enumerate(arm.joints):
        if j.is_revolute:
            q[:, i] = np.unwrap(q[:, i])
            q[:, i] += 2 * math.pi * round((start[i] - q[0, i]) / (2 * math.pi))
    return q


def chord_lower_bound(arm, start, target, tol, n=4001):
    """An independent lower bound on the number of joint-linear chords that keep the
    tool within ``tol`` of the line.

    Derivation: a chord of the joint path q(u) over a step h leaves the path at its
    middle by (h^2 / 8) q''(u) to leading order (the sagitta of a circular arc,
    s = L^2 / (8 R), elementary geometry; here in the parameter u), which the tool
    sees as (h^2 / 8) J q'' (J the Jacobian's position rows); only its component
    across the line is a deviation. So a chord within tol spans at most
    h(u) = sqrt(8 tol / k(u)), k = |(J q'')_perp|, and any split needs at least
    integral du / h(u) = integral sqrt(k / (8 tol)) du chords. Evaluated here from the
    scalar IK at n points, q'' by central differences, J from solve.jacobian."""
    branch = planner.branch_of(arm, start)
    q = scalar_ik_path(arm, start, target, branch, n)
    du = 1.0 / (n - 1)
    qpp = (q[2:] - 2 * q[1:-1] + q[:-2]) / du ** 2
    a = position(arm, solve.tool_from_joints(arm, start))
    b = position(arm, (*target[:3], 0.0) if arm.is_scara else (*target[:2], 0.0))
    d = (b - a) / np.linalg.norm(b - a)
    rows = 3 if arm.is_scara else 2
    k = []
    for qi, qppi in zip(q[1:-1], qpp):
        v = np.zeros(3)
        v[:rows] = (solve.jacobian(arm, qi) @ qppi)[:rows]
        k.append(np.linalg.norm(v - (v @ d) * d))
    return float(np.sum(np.sqrt(np.array(k) / (8 * tol))) * du)


# --------------------------------------------------------------------------- lines

LINES = [
    (PLANAR, PLANAR.home_joints, (300.0, -100.0)),
    (PLANAR, PLANAR.home_joints, (-120.0, 250.0)),
    (SCARA, SCARA.home_joints, (300.0, -100.0, 60.0, math.radians(30.0))),
    (SCARA, SCARA.home_joints, (40.0, 280.0, 120.0, math.radians(100.0))),
]


@pytest.mark.parametrize("arm, start, target", LINES)
@pytest.mark.parametrize("tol", [0.05, 0.01])
def test_line_stays_within_tolerance_and_limits(arm, start, target, tol):
    plan = planner.plan_line_move(arm, start, target, tolerance_mm=tol)
    assert plan.ok, plan.problems
    a = position(arm, solve.tool_from_joints(arm, start))
    b = position(arm, (*target[:3], 0.0) if arm.is_scara else (*target[:2], 0.0))
    assert dense_line_deviation(arm, start, plan, a, b) <= tol * (1 + 1e-9)
    end = solve.tool_from_joints_dh(arm, plan.segments[-1].joints)
    assert np.allclose(position(arm, end), b, atol=1e-6)
    if arm.is_scara:  # the roll arrives too
        assert abs(math.remainder(end[3] - target[3], 2 * math.pi)) < 1e-9
    check_timing(arm, start, plan)


@pytest.mark.parametrize("arm, start, target", LINES)
@pytest.mark.parametrize("tol", [0.05, 0.01])
def test_segment_count_near_the_sagitta_lower_bound(arm, start, target, tol):
    plan = planner.plan_line_move(arm, start, target, tolerance_mm=tol)
    bound = chord_lower_bound(arm, start, target, tol)
    assert bound > 10  # long lines: the bound is meaningful
    # the plan also cuts its speed ramps (planner docs), still within 1.5x the bound
    assert plan.summary.segment_count <= 1.5 * bound, (plan.summary.segment_count, bound)


@pytest.mark.parametrize("arm, start, target", LINES[::2])
def test_the_greedy_fallback_holds_the_tolerance_and_the_bound(monkeypatch, arm, start, target):
    # The balanced knot placement falls back to the greedy cut when it does not settle;
    # force that path and hold it to the same checks.
    monkeypatch.setattr(planner, "_balanced_knots", lambda *args, **kw: None)
    tol = 0.01
    plan = planner.plan_line_move(arm, start, target, tolerance_mm=tol)
    assert plan.ok, plan.problems
    a = position(arm, solve.tool_from_joints(arm, start))
    b = position(arm, (*target[:3], 0.0) if arm.is_scara else (*target[:2], 0.0))
    assert dense_line_deviation(arm, start, plan, a, b) <= tol * (1 + 1e-9)
    assert plan.summary.segment_count <= 1.5 * chord_lower_bound(arm, start, target, tol)
    check_timing(arm, start, plan)


def test_speed_override_scales_the_line():
    full = planner.plan_line_move(PLANAR, PLANAR.home_joints, (300.0, -100.0))
    half = planner.plan_line_move(PLANAR, PLANAR.home_joints, (300.0, -100.0), speed_pct=50)
    check_timing(PLANAR, PLANAR.home_joints, half, speed_pct=50)
    assert half.summary.duration_s > 1.5 * full.summary.duration_s
    assert half.summary.peak_tool_speed_mm_s <= 125.0 * (1 + 1e-6)


def test_roll_only_and_z_only_lines_on_scara():
    start = SCARA.home_joints
    x, y, z, roll = solve.tool_from_joints(SCARA, start)
    for target in ((x, y, z, roll + math.radians(40)), (x, y, z - 50.0, roll)):
        plan = planner.plan_line_move(SCARA, start, target)
        assert plan.ok, plan.problems
        a = position(SCARA, (x, y, z))
        b = position(SCARA, target)
        assert dense_line_deviation(SCARA, start, plan, a, b) <= 0.05
        end = solve.tool_from_joints_dh(SCARA, plan.segments[-1].joints)
        assert np.allclose(end[:3], target[:3], atol=1e-6)
        assert abs(math.remainder(end[3] - target[3], 2 * math.pi)) < 1e-9
        check_timing(SCARA, start, plan)


@settings(max_examples=15, deadline=None)
@given(st.floats(120.0, 350.0), st.floats(-1.2, 2.6), st.floats(5.0, 120.0),
       st.floats(0.0, 2 * math.pi))
def test_random_planar_lines_hold_tolerance_or_refuse(r, angle, length, heading):
    start_xy = (r * math.cos(angle), r * math.sin(angle))
    sol = solve.joints_from_tool(PLANAR, start_xy).solution(Branch.ELBOW_DOWN)
    if sol is None or not sol.usable:
        return
    target = (start_xy[0] + length * math.cos(heading), start_xy[1] + length * math.sin(heading))
    plan = planner.plan_line_move(PLANAR, sol.joints, target)
    if not plan.ok:
        assert not plan.segments and all(plan.problems)
        return
    a, b = position(PLANAR, start_xy), position(PLANAR, target)
    assert dense_line_deviation(PLANAR, sol.joints, plan, a, b, per_segment=12) <= 0.05 + 1e-9
    check_timing(PLANAR, sol.joints, plan)


# --------------------------------------------------------------------------- joint moves

@pytest.mark.parametrize("arm, end_deg", [
    (PLANAR, (60.0, 30.0)), (PLANAR, (-100.0, -60.0)), (PLANAR, (0.5, 90.2)),
    (SCARA, (100.0, -60.0, 110.0, 170.0)), (SCARA, (-20.0, 100.0, 5.0, -90.0)),
])
@pytest.mark.parametrize("pct", [100.0, 30.0])
def test_joint_move_synchronised_within_limits(arm, end_deg, pct):
    start = np.array(arm.home_joints)
    end = np.array([j.from_display(v) for j, v in zip(arm.joints, end_deg)])
    plan = planner.plan_joint_move(arm, start, end, speed_pct=pct)
    assert plan.ok, plan.problems
    q = joint_path(start, plan)
    # synchronised: every knot lies on the one joint-space line, at the same fraction
    # of every joint's travel, and all joints arrive at the end together
    frac = (q - start) / (end - start)
    assert np.allclose(frac, frac[:, :1], atol=1e-9)
    assert np.all(np.diff(frac[:, 0]) > 0)
    assert np.allclose(q[-1], end, atol=1e-12)
    check_timing(arm, start, plan, speed_pct=pct)


def test_long_slow_joint_move_splits_at_60_s():
    plan = planner.plan_joint_move(PLANAR, PLANAR.home_joints,
                                   (math.radians(140), math.radians(-140)), speed_pct=1.0)
    assert plan.ok
    assert plan.summary.duration_s > 60.0
    check_timing(PLANAR, PLANAR.home_joints, plan, speed_pct=1.0)


def test_joint_move_tool_cap_reduces_speed():
    # shoulder swing with a stretched-out arm: the tool cap binds before max_speed
    start = (math.radians(-90), math.radians(5))
    plan = planner.plan_joint_move(PLANAR, start, (math.radians(90), math.radians(5)))
    assert plan.ok
    # tool speed = r * shoulder rate, r the distance of the tool from the shoulder
    r = math.hypot(*solve.tool_from_joints(PLANAR, start)[:2])
    assert plan.summary.peak_joint_speed[0] <= 250.0 / r * (1 + 1e-6)
    assert any("tool speed cap" in w for w in plan.summary.warnings)
    check_timing(PLANAR, start, plan)


def test_zero_motion_is_an_empty_ok_plan():
    plan = planner.plan_joint_move(PLANAR, PLANAR.home_joints, PLANAR.home_joints)
    assert plan.ok and plan.segments == () and "no motion" in plan.summary.warnings[0]


# --------------------------------------------------------------------------- plan_move

def test_plan_move_picks_the_nearest_usable_branch():
    start = PLANAR.home_joints  # elbow-down
    target = (150.0, 250.0)
    plan = planner.plan_move(PLANAR, start, target)
    ik = solve.joints_from_tool(PLANAR, target)
    nearest = min(ik.usable, key=lambda s: max(abs(a - b) / j.max_speed for j, a, b in
                                                 zip(PLANAR.joints, start, s.joints)))
    assert plan.ok and plan.summary.branch == nearest.branch
    assert np.allclose(plan.segments[-1].joints, nearest.joints)
    other = planner.plan_move(PLANAR, start, target, branch=nearest.branch.other())
    assert other.ok and other.summary.branch_change
    assert any("branch change" in w for w in other.summary.warnings)
    line = planner.plan_move(PLANAR, start, target, path=planner.LINE)
    assert line.ok and line.summary.kind == "line"


def test_plan_move_refuses_when_no_branch_is_usable():
    # r = 100 mm needs |elbow| = 150.4 deg by the law of cosines, beyond +/-145 deg
    r = 100.0
    c2 = (r * r - 220.0 ** 2 - 160.0 ** 2) / (2 * 220.0 * 160.0)
    assert math.degrees(math.acos(c2)) > 145.0
    plan = planner.plan_move(PLANAR, PLANAR.home_joints, (r, 0.0))
    assert not plan.ok and plan.segments == ()
    assert "no usable IK solution" in plan.problems[0] and "elbow" in plan.problems[0]
    far = planner.plan_move(PLANAR, PLANAR.home_joints, (400.0, 0.0))
    assert not far.ok and "out of reach" in far.problems[0]


# --------------------------------------------------------------------------- refusals with positions

def first_u(radius_test, a, b, n=200001):
    u = np.linspace(0, 1, n)
    pts = a[None, :2] + u[:, None] * (b - a)[None, :2]
    hit = radius_test(np.hypot(pts[:, 0], pts[:, 1]))
    return float(u[np.argmax(hit)]) if hit.any() else None


def mm_in(problem: str) -> float:
    word = problem.split(" mm from the start")[0].split("at ")[-1]
    return float(word)


def test_refuses_line_through_the_min_reach_and_near_folded():
    start = solve.joints_from_tool(PLANAR, (150.0, 30.0)).solution(Branch.ELBOW_DOWN).joints
    a, b = np.array([150.0, 30.0]), np.array([-150.0, 30.0])
    plan = planner.plan_line_move(PLANAR, start, tuple(b))
    assert not plan.ok and plan.segments == ()
    # law of cosines: the elbow is within 5 deg of folded below
    # r = sqrt(a1^2 + a2^2 - 2 a1 a2 cos 5deg) (Spong et al. 2006, section 5.3, from memory)
    r_fold = math.sqrt(220.0 ** 2 + 160.0 ** 2 - 2 * 220 * 160 * math.cos(math.radians(5)))
    u_fold = first_u(lambda r: r < r_fold, a, b)
    u_hole = first_u(lambda r: r < 60.0, a, b)
    sing = [p for p in plan.problems if p.startswith("singularity")]
    reach = [p for p in plan.problems if p.startswith("out of reach")]
    assert sing and reach
    assert abs(mm_in(sing[0]) - u_fold * 300.0) < 0.1
    assert abs(mm_in(reach[0]) - u_hole * 300.0) < 0.1


def test_refuses_line_into_the_stretched_band():
    start = PLANAR.home_joints
    a = np.array(solve.tool_from_joints(PLANAR, start)[:2])
    b = np.array([379.8, 0.0])  # reachable (380 mm), but within 5 deg of stretched
    plan = planner.plan_line_move(PLANAR, start, tuple(b))
    r_str = math.sqrt(220.0 ** 2 + 160.0 ** 2 + 2 * 220 * 160 * math.cos(math.radians(5)))
    u = first_u(lambda r: r > r_str, a, b)
    assert not plan.ok
    assert plan.problems[0].startswith("singularity") and "stretched" in plan.problems[0]
    assert abs(mm_in(plan.problems[0]) - u * float(np.linalg.norm(b - a))) < 0.1


def test_refuses_line_that_needs_a_joint_beyond_its_limit():
    # elbow-down moving in towards the shoulder: the elbow reaches +145 deg at
    # r = sqrt(a1^2 + a2^2 + 2 a1 a2 cos 145deg) (law of cosines)
    start = solve.joints_from_tool(PLANAR, (200.0, 0.0)).solution(Branch.ELBOW_DOWN).joints
    b = np.array([90.0, 0.0])
    r145 = math.sqrt(220.0 ** 2 + 160.0 ** 2 + 2 * 220 * 160 * math.cos(math.radians(145)))
    plan = planner.plan_line_move(PLANAR, start, tuple(b))
    assert not plan.ok
    lim = [p for p in plan.problems if p.startswith("joint limit")]
    assert lim and "elbow" in lim[0] and "max 145.00 deg" in lim[0]
    assert abs(mm_in(lim[0]) - (200.0 - r145)) < 0.1


def test_refuses_line_across_branches_and_from_a_singular_pose():
    plan = planner.plan_line_move(PLANAR, PLANAR.home_joints, (250.0, 100.0),
                                  branch=Branch.ELBOW_UP)
    assert not plan.ok and "one branch" in plan.problems[0]
    stretched = planner.plan_line_move(PLANAR, (0.0, 0.0), (300.0, 50.0))
    assert not stretched.ok and stretched.problems[0].startswith("singularity")


# --------------------------------------------------------------------------- jogs

def test_jogs():
    start = PLANAR.home_joints
    x, y, _ = solve.tool_from_joints(PLANAR, start)
    plan = planner.plan_jog(PLANAR, start, "x", 10.0)
    assert plan.ok and plan.summary.kind == "line"
    assert np.allclose(solve.tool_from_joints_dh(PLANAR, plan.segments[-1].joints)[:2],
                       (x + 10.0, y), atol=1e-6)
    j = planner.plan_jog(PLANAR, start, "j2", math.radians(-5))
    assert j.ok and math.isclose(j.segments[-1].joints[1], start[1] - math.radians(5))
    big = planner.plan_jog(PLANAR, start, "y", 80.0)
    assert not big.ok and "largest single jog step" in big.problems[0]
    s = planner.plan_jog(SCARA, SCARA.home_joints, "z", -10.0)
    assert s.ok and math.isclose(s.segments[-1].joints[2], 10.0, abs_tol=1e-9)
    roll = planner.plan_jog(SCARA, SCARA.home_joints, "roll", math.radians(20), path=planner.JOINT)
    assert roll.ok


# --------------------------------------------------------------------------- bad input

@pytest.mark.parametrize("call", [
    lambda: planner.plan_joint_move(PLANAR, (0.0,), (0.0, 0.0)),
    lambda: planner.plan_joint_move(PLANAR, (0.0, math.nan), (0.0, 0.0)),
    lambda: planner.plan_joint_move(PLANAR, (0.0, 1.0), (0.0, 0.0), speed_pct=0.0),
    lambda: planner.plan_joint_move(PLANAR, (0.0, 1.0), (0.0, 0.0), speed_pct=100.5),
    lambda: planner.plan_joint_move(PLANAR, (0.0, 1.0), (0.0, 0.0), speed_pct=math.nan),
    lambda: planner.plan_line_move(PLANAR, (0.0, 1.0), (100.0, math.inf)),
    lambda: planner.plan_line_move(PLANAR, (0.0, 1.0), (100.0, 100.0, 3.0)),
    lambda: planner.plan_line_move(PLANAR, (0.0, 1.0), (100.0, 100.0), tolerance_mm=0.0),
    lambda: planner.plan_move(PLANAR, (0.0, 1.0), (100.0, 100.0), path="arc"),
    lambda: planner.plan_move(PLANAR, (0.0, 1.0), (100.0, 100.0), branch="elbow-sideways"),
    lambda: planner.plan_jog(PLANAR, (0.0, 1.0), "z", 1.0),
    lambda: planner.plan_jog(PLANAR, (0.0, 1.0), "x", math.nan),
])
def test_bad_arguments_raise_one_line_target_errors(call):
    with pytest.raises(TargetError) as err:
        call()
    assert "\n" not in str(err.value) and str(err.value)


# --------------------------------------------------------------------------- summary

def test_summary_text_and_json():
    import json
    plan = planner.plan_line_move(PLANAR, PLANAR.home_joints, (300.0, -100.0))
    s = plan.summary
    text = "\n".join(s.lines(PLANAR))
    assert "line move, elbow-down" in text and "parts-tray" in text and "deg" in text
    d = json.loads(json.dumps(s.to_dict(PLANAR)))
    assert d["kind"] == "line" and d["segment_count"] == len(plan.segments)
    assert math.isclose(d["start_joints"][1], 90.0)
    # limit clearance: every joint is linear between knots, so the closest approach
    # is at a knot; recomputed from the segments
    q = joint_path(PLANAR.home_joints, plan)
    for i, j in enumerate(PLANAR.joints):
        want = min(np.min(q[:, i] - j.min), np.min(j.max - q[:, i]))
        assert math.isclose(s.limit_clearance[i], want, abs_tol=1e-12)
    t2 = q[:, 1]
    assert math.isclose(s.singular_distance_rad, float(min(np.min(np.abs(t2)),
                                                           np.min(math.pi - np.abs(t2)))))


def test_a_line_to_where_the_arm_already_is_plans_no_motion():
    # Found by review: a line of ~1e-13 mm made the profile meet inf - inf.
    q = solve.joints_from_tool(PLANAR, (-166.6, 290.9)).usable[0].joints
    plan = planner.plan_move(PLANAR, q, (-166.6, 290.9), path="line")
    assert plan.ok and plan.segments == ()
    tiny = planner.plan_jog(PLANAR, PLANAR.home_joints, "x", 1e-12)
    assert tiny.ok and tiny.segments == ()


def test_joint_moves_take_the_short_way_round_on_wide_limits():
    # Shoulder limits of +/-200 deg: at 185 deg, a 1 mm jog must not swing a full turn to
    # the wrapped value -175 deg (both are the same pose; 185 +/- a little is nearer).
    wide = dataclasses.replace(PLANAR.joints[0], min=-math.radians(200), max=math.radians(200))
    arm = dataclasses.replace(PLANAR, joints=(wide,) + PLANAR.joints[1:], zones=())
    q0 = (math.radians(185.0), math.radians(60.0))
    for plan in (planner.plan_jog(arm, q0, "x", 1.0, path="joint"),
                 planner.plan_move(arm, q0, tuple(v + 0.5 for v in solve.tool_from_joints(arm, q0)[:2]))):
        assert plan.ok, plan.problems
        end = plan.segments[-1].joints
        assert abs(end[0] - q0[0]) < math.radians(2) and abs(end[1] - q0[1]) < math.radians(2)
        assert plan.summary.branch == Branch.ELBOW_DOWN   # no silent branch change
