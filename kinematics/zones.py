"""Keep-out zones: distance from the arm's links to boxes and circles. Units: mm, rad.

A link is the straight segment between two joint axes in the base plane. A zone is hit
when a link comes closer to it than the arm's ``link_clearance_mm`` (the links'
half-width plus a gap) and, on a SCARA, the link's height lies in the zone's z range.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

from benchjog.kinematics.model import Arm, Zone
from benchjog.kinematics.scara import flange_z_mm, tool_from_values

Point = tuple[float, float]


def point_segment_distance(p: Point, a: Point, b: Point) -> float:
    """Euclidean distance from point p to segment ab.

    >>> point_segment_distance((0.0, 1.0), (-1.0, 0.0), (1.0, 0.0))
    1.0
    """
    ax, ay = a
    dx, dy = b[0] - ax, b[1] - ay
    length2 = dx * dx + dy * dy
    t = 0.0 if length2 == 0 else max(0.0, min(1.0, ((p[0] - ax) * dx + (p[1] - ay) * dy) / length2))
    return math.hypot(p[0] - (ax + t * dx), p[1] - (ay + t * dy))


def _point_box_distance(p: Point, zone: Zone) -> float:
    dx = max(zone.x_min - p[0], 0.0, p[0] - zone.x_max)
    dy = max(zone.y_min - p[1], 0.0, p[1] - zone.y_max)
    return math.hypot(dx, dy)


def _segments_cross(a: Point, b: Point, c: Point, d: Point) -> bool:
    def orient(p: Point, q: Point, r: Point) -> float:
        return (q[0] - p[0]) * (r[1] - p[1]) - (q[1] - p[1]) * (r[0] - p[0])
    d1, d2 = orient(c, d, a), orient(c, d, b)
    d3, d4 = orient(a, b, c), orient(a, b, d)
    return (d1 * d2 < 0) and (d3 * d4 < 0)


def segment_zone_distance(a: Point, b: Point, zone: Zone) -> float:
    """Distance from segment ab to the zone's footprint in the base plane (0 inside).

    For a box: 0 when the segment touches or crosses it, otherwise the least of the
    endpoint-to-box and corner-to-segment distances (for disjoint convex shapes the
    nearest points include a vertex of one of them).

    >>> from benchjog.kinematics.model import Zone
    >>> segment_zone_distance((0.0, 0.0), (10.0, 0.0), Zone("c", "circle", cx=5.0, cy=3.0, r=1.0))
    2.0
    """
    if zone.kind == "circle":
        return max(0.0, point_segment_distance((zone.cx, zone.cy), a, b) - zone.r)
    corners = [(zone.x_min, zone.y_min), (zone.x_max, zone.y_min),
               (zone.x_max, zone.y_max), (zone.x_min, zone.y_max)]
    if _point_box_distance(a, zone) == 0 or _point_box_distance(b, zone) == 0:
        return 0.0
    for i in range(4):
        if _segments_cross(a, b, corners[i], corners[(i + 1) % 4]):
            return 0.0
    return min(_point_box_distance(a, zone), _point_box_distance(b, zone),
               *(point_segment_distance(c, a, b) for c in corners))


def link_segments(arm: Arm, values: Sequence[float]) -> list[tuple[str, Point, Point, float, float]]:
    """The arm's parts that can touch a zone: (name, a, b, z_low, z_high).

    Planar: the two links (z is ignored: +/-inf). SCARA: the two links at the height
    of their joints, and the quill as a point (a == b) spanning from the tool tip up to
    the flange.
    """
    j1, j2 = arm.joints[0], arm.joints[1]
    t1 = values[0] + j1.offset_rad
    t12 = t1 + values[1] + j2.offset_rad
    elbow = (j1.a_mm * math.cos(t1), j1.a_mm * math.sin(t1))
    tool = (elbow[0] + j2.a_mm * math.cos(t12), elbow[1] + j2.a_mm * math.sin(t12))
    if not arm.is_scara:
        return [(f"{j1.name}-{j2.name} link", (0.0, 0.0), elbow, -math.inf, math.inf),
                (f"{j2.name}-tool link", elbow, tool, -math.inf, math.inf)]
    flange = flange_z_mm(arm)
    tip_z = tool_from_values(arm, tuple(values))[2]
    return [(f"{j1.name}-{j2.name} link", (0.0, 0.0), elbow, j1.d_mm, j1.d_mm),
            (f"{j2.name}-tool link", elbow, tool, flange, flange),
            ("tool", tool, tool, min(tip_z, flange), max(tip_z, flange))]


def part_gaps(arm: Arm, values: Sequence[float]) -> list[tuple[Zone, str, float]]:
    """(zone, part name, gap) for every zone and every part whose height range can meet
    it: the gap is the part's distance to the zone less the arm's link clearance
    (negative: the part is in the zone)."""
    found = []
    margin = arm.link_clearance_mm
    parts = link_segments(arm, values)
    for zone in arm.zones:
        for name, a, b, z_lo, z_hi in parts:
            if arm.is_scara and (z_lo > zone.z_max + margin or z_hi < zone.z_min - margin):
                continue
            found.append((zone, name, segment_zone_distance(a, b, zone) - margin))
    return found


def zone_clearances(arm: Arm, values: Sequence[float]) -> dict[str, float]:
    """For each zone, the smallest gap of any part of the arm (inf when no part can
    meet it in height; negative when the arm is in the zone)."""
    result = {zone.name: math.inf for zone in arm.zones}
    for zone, _name, gap in part_gaps(arm, values):
        result[zone.name] = min(result[zone.name], gap)
    return result


def is_hit(distance_mm: float, clearance_mm: float) -> bool:
    """A part this far from a zone is in it: closer than the clearance, or touching
    (which matters when the clearance is 0).

    >>> [is_hit(d, c) for d, c in ((0.0, 0.0), (0.5, 0.0), (3.0, 5.0), (5.0, 5.0))]
    [True, False, True, False]
    """
    return distance_mm < clearance_mm or distance_mm <= 0.0


def _bounds_gap(a: Point, b: Point, zone: Zone) -> float:
    """A lower bound of :func:`segment_zone_distance`: the gap between the segment's
    bounding box and the zone's (cheap; 0 when the boxes overlap)."""
    if zone.kind == "circle":
        zx0, zx1, zy0, zy1 = zone.cx - zone.r, zone.cx + zone.r, zone.cy - zone.r, zone.cy + zone.r
    else:
        zx0, zx1, zy0, zy1 = zone.x_min, zone.x_max, zone.y_min, zone.y_max
    dx = max(zx0 - max(a[0], b[0]), 0.0, min(a[0], b[0]) - zx1)
    dy = max(zy0 - max(a[1], b[1]), 0.0, min(a[1], b[1]) - zy1)
    return math.hypot(dx, dy)


def zone_problems(arm: Arm, values: Sequence[float]) -> list[str]:
    """Words for every zone the arm's parts enter at these joint values."""
    margin = arm.link_clearance_mm
    hits: dict[str, list[str]] = {}
    parts = link_segments(arm, values)
    for zone in arm.zones:
        for name, a, b, z_lo, z_hi in parts:
            if arm.is_scara and (z_lo > zone.z_max + margin or z_hi < zone.z_min - margin):
                continue
            if _bounds_gap(a, b, zone) > margin:
                continue  # cannot be closer than the bounding boxes
            if is_hit(segment_zone_distance(a, b, zone), margin):
                hits.setdefault(zone.name, []).append(name)
    return [f"{', '.join(names)} inside keep-out zone {zone!r} "
            f"(clearance {margin:g} mm)" for zone, names in hits.items()]
