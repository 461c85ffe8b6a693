"""Keep-out geometry: the quick bounding-box pre-check never changes a verdict, and the
segment distances agree with a brute-force sampling of the segment."""

from __future__ import annotations

import dataclasses
import math

from hypothesis import given, settings
from hypothesis import strategies as st

from benchjog.kinematics import zones
from benchjog.kinematics.model import Zone
from benchjog.console.cell.armfile import builtin_arm

coord = st.floats(-400, 400)


@st.composite
def a_zone(draw):
    if draw(st.booleans()):
        x0, y0 = draw(coord), draw(coord)
        return Zone("b", "box", x_min=x0, x_max=x0 + draw(st.floats(1, 200)),
                    y_min=y0, y_max=y0 + draw(st.floats(1, 200)))
    return Zone("c", "circle", cx=draw(coord), cy=draw(coord), r=draw(st.floats(1, 150)))


def brute_distance(a, b, zone, n=2000):
    """Distance from n+1 points along ab to the zone, by the definitions of a box and a
    circle (elementary geometry): an upper bound that converges on the true distance."""
    best = math.inf
    for k in range(n + 1):
        f = k / n
        p = (a[0] + (b[0] - a[0]) * f, a[1] + (b[1] - a[1]) * f)
        if zone.kind == "circle":
            d = max(0.0, math.hypot(p[0] - zone.cx, p[1] - zone.cy) - zone.r)
        else:
            dx = max(zone.x_min - p[0], 0.0, p[0] - zone.x_max)
            dy = max(zone.y_min - p[1], 0.0, p[1] - zone.y_max)
            d = math.hypot(dx, dy)
        best = min(best, d)
    return best


@settings(max_examples=150, deadline=None)
@given(coord, coord, coord, coord, a_zone())
def test_segment_distance_matches_brute_force(ax, ay, bx, by, zone):
    exact = zones.segment_zone_distance((ax, ay), (bx, by), zone)
    brute = brute_distance((ax, ay), (bx, by), zone)
    step = math.hypot(bx - ax, by - ay) / 2000
    assert exact <= brute + 1e-9
    assert brute - exact <= step + 1e-9  # sampling can only be off by half a step or so
    assert zones._bounds_gap((ax, ay), (bx, by), zone) <= exact + 1e-9


@settings(max_examples=150, deadline=None)
@given(st.floats(-math.pi, math.pi), st.floats(-math.pi, math.pi),
       st.sampled_from(["planar-bench", "scara-bench"]), st.sampled_from([None, 0.0, 30.0]))
def test_zone_problems_agree_with_part_gaps(q1, q2, name, clearance):
    arm = builtin_arm(name)
    if clearance is not None:
        arm = dataclasses.replace(arm, link_clearance_mm=clearance)
    values = (q1, q2) if not arm.is_scara else (q1, q2, 110.0, 0.0)
    margin = arm.link_clearance_mm
    inside = {zone.name for zone, _part, gap in zones.part_gaps(arm, values)
              if zones.is_hit(gap + margin, margin)}
    said = {p.split("'")[1] for p in zones.zone_problems(arm, values)}
    assert said == inside


def test_a_tool_inside_a_zone_is_found_with_no_clearance():
    # The demo tray spans x -300..-200, |y| <= 70; the tool at (-250, 0) is inside it.
    arm = dataclasses.replace(builtin_arm("planar-bench"), link_clearance_mm=0.0)
    from benchjog.kinematics.solve import joints_from_tool
    result = joints_from_tool(arm, (-250.0, 0.0))
    assert result.solutions and all(not s.usable for s in result.solutions)
    assert all(any("parts-tray" in p for p in s.problems) for s in result.solutions)


def test_a_path_of_one_pose_inside_a_zone_is_a_contact_at_that_pose():
    # The demo tray spans x -300..-200, |y| <= 70 (the arm file); the tool at (-250, 0)
    # is inside it (and the link to it within the 12 mm clearance). A path of that one
    # pose is a contact at its start, as the same pose held (two equal knots) is; a pose
    # clear of every zone is no contact.
    import numpy as np

    from benchjog.kinematics.solve import joints_from_tool
    from benchjog.kinematics.sweep import sweep_zones

    arm = builtin_arm("planar-bench")
    q = np.array(joints_from_tool(arm, (-250.0, 0.0)).solutions[0].joints)
    assert zones.zone_problems(arm, tuple(q))            # the gate's words: inside
    one, held = sweep_zones(arm, q[None, :]), sweep_zones(arm, np.array([q, q]))
    assert one.contact is not None and (one.contact.segment, one.contact.tau) == (0, 0.0)
    assert one.contact.zone == held.contact.zone == "parts-tray"
    clear = np.array(joints_from_tool(arm, (150.0, 200.0)).solutions[0].joints)
    assert sweep_zones(arm, clear[None, :]).contact is None
