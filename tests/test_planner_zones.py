"""Keep-out zones over the swept path: accepted plans never enter a zone (dense check
of every link with benchjog.kinematics.zones), refusals say where, clearances are reported."""

from __future__ import annotations

import dataclasses
import math

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from benchjog.console.cell.armfile import builtin_arm
from benchjog.kinematics import planner, solve, sweep, zones
from benchjog.kinematics.model import Branch, Zone

PLANAR = builtin_arm("planar-bench")
SCARA = builtin_arm("scara-bench")


def dense_zone_check(arm, start, plan, step_mm=0.25):
    """Independent check: benchjog.kinematics.zones at poses along every segment, spaced so
    no point of the arm moves more than ``step_mm`` between them (a point at lever
    arm rho moves rho |dtheta|; the sum over the chain bounds it, from memory)."""
    q = np.vstack([start] + [s.joints for s in plan.segments])
    worst = {z.name: math.inf for z in arm.zones}
    for qa, qb in zip(q[:-1], q[1:]):
        dq = qb - qa
        move = arm.link1_mm * abs(dq[0]) + arm.link2_mm * (abs(dq[0]) + abs(dq[1]))
        if arm.is_scara:
            move = max(move, abs(dq[2]))
        n = max(2, math.ceil(move / step_mm) + 1)
        for tau in np.linspace(0.0, 1.0, n):
            pose = qa + tau * dq
            assert not zones.zone_problems(arm, pose), (pose, zones.zone_problems(arm, pose))
            for name, gap in zones.zone_clearances(arm, pose).items():
                worst[name] = min(worst[name], gap)
    return worst


def with_zones(arm, *zs, clearance=None):
    kw = {"zones": tuple(zs)}
    if clearance is not None:
        kw["link_clearance_mm"] = clearance
    return dataclasses.replace(arm, **kw)


def zone_strategy(scara: bool):
    circle = st.builds(lambda x, y, r: Zone("c", "circle", cx=x, cy=y, r=r),
                       st.floats(-350, 350), st.floats(-350, 350), st.floats(5, 60))
    box = st.builds(lambda x, y, w, h: Zone("b", "box", x_min=x, x_max=x + w, y_min=y, y_max=y + h),
                    st.floats(-350, 300), st.floats(-350, 300), st.floats(5, 120), st.floats(5, 120))
    base = st.one_of(circle, box)
    if not scara:
        return base
    return st.builds(lambda z, lo, hi: dataclasses.replace(z, z_min=lo, z_max=lo + hi),
                     base, st.floats(-50, 170), st.floats(5, 100))


@settings(max_examples=30, deadline=None)
@given(zone_strategy(False), st.floats(-2.5, 2.5), st.floats(-2.4, 2.4),
       st.floats(-2.5, 2.5), st.floats(-2.4, 2.4))
def test_random_planar_joint_moves_never_enter_a_zone(zone, a1, a2, b1, b2):
    arm = with_zones(PLANAR, zone)
    plan = planner.plan_joint_move(arm, (a1, a2), (b1, b2))
    if plan.ok and plan.segments:
        worst = dense_zone_check(arm, (a1, a2), plan)
        # the reported closest approach agrees with the dense one within the sweep's
        # stated reporting accuracy plus half the dense spacing
        rep = plan.summary.zone_clearance_mm[zone.name]
        slack = max(sweep.ZONE_REPORT_MM, sweep.ZONE_REPORT_REL * worst[zone.name]) + 0.125
        assert abs(rep - worst[zone.name]) <= slack + 1e-9
    elif not plan.ok:
        assert plan.segments == ()


@settings(max_examples=25, deadline=None)
@given(zone_strategy(False), st.floats(150.0, 330.0), st.floats(-3.0, 3.0),
       st.floats(10.0, 200.0), st.floats(0.0, 6.28))
def test_random_planar_lines_never_enter_a_zone(zone, r, angle, length, heading):
    arm = with_zones(PLANAR, zone)
    xy = (r * math.cos(angle), r * math.sin(angle))
    sol = solve.joints_from_tool(PLANAR, xy).solution(Branch.ELBOW_UP)
    if sol is None or not sol.usable:
        return
    target = (xy[0] + length * math.cos(heading), xy[1] + length * math.sin(heading))
    plan = planner.plan_line_move(arm, sol.joints, target)
    if plan.ok:
        dense_zone_check(arm, sol.joints, plan)


@settings(max_examples=25, deadline=None)
@given(zone_strategy(True), st.floats(-2.0, 2.0), st.floats(-2.3, 2.3), st.floats(0, 120),
       st.floats(-2.0, 2.0), st.floats(-2.3, 2.3), st.floats(0, 120))
def test_random_scara_joint_moves_never_enter_a_zone(zone, a1, a2, a3, b1, b2, b3):
    arm = with_zones(SCARA, zone)
    plan = planner.plan_joint_move(arm, (a1, a2, a3, 0.0), (b1, b2, b3, 0.5))
    if plan.ok and plan.segments:
        dense_zone_check(arm, (a1, a2, a3, 0.0), plan)


def test_joint_sweep_through_a_zone_is_refused_though_both_ends_are_clear():
    # a post at 45 deg, 300 mm out: the stretched-ish arm swinging from -30 to 120 deg
    # passes it; neither end is near it
    post = Zone("post", "circle", cx=300 * math.cos(math.radians(45)),
                cy=300 * math.sin(math.radians(45)), r=20.0)
    arm = with_zones(PLANAR, post)
    start, end = (math.radians(-30), math.radians(20)), (math.radians(120), math.radians(20))
    for pose in (start, end):
        assert not zones.zone_problems(arm, pose)
    plan = planner.plan_joint_move(arm, start, end)
    assert not plan.ok and plan.segments == ()
    assert "keep-out zone 'post'" in plan.problems[0]
    # where: the first pose along the joint line that benchjog.kinematics.zones finds inside
    taus = np.linspace(0, 1, 20001)
    first = next(t for t in taus
                 if zones.zone_problems(arm, np.array(start) + t * (np.subtract(end, start))))
    pct = float(plan.problems[0].split("at ")[1].split("%")[0])
    assert abs(pct - 100 * first) <= 1.0


def test_branch_change_sweep_is_checked():
    # same target on both branches: the elbow swings through stretched, the second
    # link sweeps a fan; a zone in the fan refuses the change
    target = (250.0, 100.0)
    ik = solve.joints_from_tool(PLANAR, target)
    down, up = ik.solution(Branch.ELBOW_DOWN).joints, ik.solution(Branch.ELBOW_UP).joints
    free = planner.plan_move(PLANAR, down, target, branch=Branch.ELBOW_UP)
    assert free.ok and free.summary.branch_change
    assert free.summary.singular_distance_rad == 0.0  # the elbow passes stretched
    mid = np.add(down, up) / 2  # a pose in the middle of the swing
    _, tool = sweep.points_from_joints(PLANAR, mid)
    zone = Zone("fan", "circle", cx=float(tool[0]), cy=float(tool[1]), r=5.0)
    arm = with_zones(PLANAR, zone)
    assert not zones.zone_problems(arm, down) and not zones.zone_problems(arm, up)
    blocked = planner.plan_move(arm, down, target, branch=Branch.ELBOW_UP)
    assert not blocked.ok and "keep-out zone 'fan'" in blocked.problems[0]


def test_line_into_a_zone_is_refused_with_its_position():
    # the demo tray (x -300..-200, |y| <= 70, links grown by 12 mm): a line along
    # y = 100 to the left brings the tool within 12 mm of the tray's top edge
    # from where x passes -200 - sqrt(12^2 - 30^2)... i.e. never; along y = 80 it does
    start_xy, target = (-100.0, 80.0), (-280.0, 80.0)
    start = solve.joints_from_tool(PLANAR, start_xy).solution(Branch.ELBOW_UP).joints
    plan = planner.plan_line_move(PLANAR, start, target)
    assert not plan.ok and "parts-tray" in plan.problems[-1]
    # independent: first pose on the line (scalar IK) that benchjog.kinematics.zones puts in it
    us = np.linspace(0, 1, 4001)
    first = next(u for u in us if zones.zone_problems(PLANAR, solve.joints_from_tool(
        PLANAR, (start_xy[0] + u * (target[0] - start_xy[0]), 80.0)).solution(Branch.ELBOW_UP).joints))
    mm = float(plan.problems[-1].split("at ")[1].split(" mm")[0])
    assert abs(mm - first * 180.0) < 0.5


def test_scara_quill_over_a_post_counts_only_at_its_height():
    # the demo post reaches z = 100; the tool tip is at z = 140 - quill
    post = SCARA.zones[0]
    above = solve.joints_from_tool(SCARA, (post.cx, post.cy, 130.0, 0.0)).usable
    assert above, "the tool can hover over the post"
    start = above[0].joints
    down = planner.plan_line_move(SCARA, start, (post.cx, post.cy, 60.0, 0.0))
    assert not down.ok and "fixture-post" in down.problems[-1]
    # the tip passes z_max + clearance = 115 mm after 15 mm of the 70 mm descent
    mm = float(down.problems[-1].split("at ")[1].split(" mm")[0])
    assert abs(mm - 15.0) < 0.1
    side = planner.plan_line_move(SCARA, start, (post.cx + 40.0, post.cy, 130.0, 0.0))
    assert side.ok, side.problems
    dense_zone_check(SCARA, start, side)


def test_vectorised_distances_match_kinematics_zones():
    rng = np.random.default_rng(7)
    zs = [Zone("c", "circle", cx=10.0, cy=-20.0, r=30.0),
          Zone("b", "box", x_min=-40.0, x_max=25.0, y_min=5.0, y_max=60.0)]
    a = rng.uniform(-120, 120, (400, 2))
    b = a + rng.uniform(-80, 80, (400, 2))
    b[:20] = a[:20]  # points
    for z in zs:
        got = sweep.segment_zone_distance_array(a, b, z)
        want = [zones.segment_zone_distance(tuple(p), tuple(q), z) for p, q in zip(a, b)]
        assert np.allclose(got, want, atol=1e-9)


def test_tool_speed_gain_bounds_the_jacobian():
    # reference: the Jacobian of benchjog.kinematics.solve (Lynch & Park 2017, example 5.1)
    rng = np.random.default_rng(3)
    for arm in (PLANAR, SCARA):
        qa = rng.uniform(-2, 2, (30, arm.n_joints))
        dq = rng.uniform(-1, 1, (30, arm.n_joints))
        gain = sweep.tool_speed_gain(arm, qa, dq)
        rows = 3 if arm.is_scara else 2
        for g, a, d in zip(gain, qa, dq):
            dense = max(np.linalg.norm((solve.jacobian(arm, a + t * d) @ d)[:rows])
                        for t in np.linspace(0, 1, 401))
            assert dense <= g * (1 + 1e-9)
            # and no looser than its stated margin K h / 2 (17 samples: h = 1/16)
            k = arm.link1_mm * d[0] ** 2 + arm.link2_mm * (d[0] + d[1]) ** 2
            assert g <= dense + k / 32 + 1e-9
