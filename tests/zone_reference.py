"""An independent zone-depth checker for tests, built on Shapely (GEOS), not on
benchjog's zone code: how deep a planar arm's links are in each keep-out zone.

Depth of a link in a zone grown by the clearance c: if the link (a LineString) meets the
zone's footprint (a Polygon), c plus the greatest distance from a point of the link
inside the footprint to the footprint's boundary (sampled along the clipped part every
REF_STEP_MM); otherwise c minus the link's distance to the footprint. > 0: in the zone.
reference: shapely 2 (LineString.intersection, distance, Polygon.exterior)."""

from __future__ import annotations

import math

import numpy as np
import shapely
from shapely.geometry import LineString, Point, Polygon

REF_STEP_MM = 0.05


def _footprint(zone):
    if zone.kind == "circle":
        return Point(zone.cx, zone.cy).buffer(zone.r, quad_segs=256)
    return Polygon([(zone.x_min, zone.y_min), (zone.x_max, zone.y_min),
                    (zone.x_max, zone.y_max), (zone.x_min, zone.y_max)])


def _links(arm, joints):
    """Planar links by plain trigonometry: base -> elbow -> tool point."""
    j1, j2 = arm.joints[0], arm.joints[1]
    t1 = joints[0] + j1.offset_rad
    t12 = t1 + joints[1] + j2.offset_rad
    elbow = (j1.a_mm * math.cos(t1), j1.a_mm * math.sin(t1))
    tool = (elbow[0] + j2.a_mm * math.cos(t12), elbow[1] + j2.a_mm * math.sin(t12))
    return [LineString([(0.0, 0.0), elbow]), LineString([elbow, tool])]


def _depth(link: LineString, zone_shape) -> float:
    if not link.intersects(zone_shape):
        return -link.distance(zone_shape)
    inside = link.intersection(zone_shape)
    best = 0.0
    for piece in getattr(inside, "geoms", [inside]):
        if piece.length == 0:
            continue
        n = max(2, int(math.ceil(piece.length / REF_STEP_MM)) + 1)
        points = shapely.line_interpolate_point(piece, np.linspace(0.0, piece.length, n))
        best = max(best, float(shapely.distance(points, zone_shape.exterior).max()))
    return best


def penetrations_mm(arm, joints) -> dict[str, float]:
    """Zone name -> depth (mm) of the deepest link, clearance included (> 0: inside)."""
    links = _links(arm, joints)
    return {zone.name: arm.link_clearance_mm + max(_depth(link, _footprint(zone)) for link in links)
            for zone in arm.zones}
