"""User frames in the base plane: taught by two points, used to express tool targets.

A user frame is a planar coordinate frame lying in the base x-y plane: an origin
(``origin_x``, ``origin_y``), the direction of its x axis (``angle_rad``,
counter-clockwise from the base x axis seen from above, z up) and, for the SCARA, the
height of its origin ``z_mm``. Its z axis is parallel to the base z axis.

Targets are planar ``(x, y)`` or SCARA ``(x, y, z, roll)``. Between the frames the
position goes through the 2D homogeneous transform and the roll shifts by the frame
angle; z shifts by the frame height.

Units: mm and radians (CONTRACT.md: degrees only at the edges).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

from benchjog.kinematics.limits import wrap_pi

MIN_TEACH_SPAN_MM = 1.0  # the two taught points must be at least this far apart


class FrameError(ValueError):
    """A frame that cannot be built (points too close, bad name) or a malformed pose."""


@dataclass(frozen=True)
class UserFrame:
    """A user frame: origin (mm, base frame), x-axis angle (rad), origin height (mm)."""

    name: str
    origin_x: float
    origin_y: float
    angle_rad: float
    z_mm: float = 0.0


def transform_2d(frame: UserFrame) -> tuple[tuple[float, float, float], ...]:
    """The 3x3 homogeneous transform T_base_frame of the frame, as nested tuples.

    T = [[cos a, -sin a, ox], [sin a, cos a, oy], [0, 0, 1]]: a rotation about z by
    the frame angle a, then a translation to the origin (ox, oy); a point p in the
    frame lands at T p in the base frame.

    Source: Lynch & Park, *Modern Robotics* (2017), ch. 3, the planar case of the
    homogeneous transformation matrix T = [[R, p], [0, 1]] (from memory).

    >>> f = UserFrame("f", 100.0, 50.0, math.pi / 2)
    >>> [[round(v, 9) + 0.0 for v in row] for row in transform_2d(f)]
    [[0.0, -1.0, 100.0], [1.0, 0.0, 50.0], [0.0, 0.0, 1.0]]
    """
    c, s = math.cos(frame.angle_rad), math.sin(frame.angle_rad)
    return ((c, -s, frame.origin_x), (s, c, frame.origin_y), (0.0, 0.0, 1.0))


def frame_from_two_points(name: str, origin: Sequence[float], x_point: Sequence[float],
                          z: float = 0.0) -> UserFrame:
    """The frame whose origin is ``origin`` and whose +x axis passes through ``x_point``.

    Only the x and y of each point are used (a SCARA pose may be passed whole); the
    frame's height is ``z`` (mm), normally the z of the taught origin.

    Args:
        name: the frame's name (non-empty).
        origin: the taught origin, base frame (mm).
        x_point: a taught point on the frame's +x axis, base frame (mm).
        z: the height of the frame's origin (mm).

    Returns:
        The frame; its angle is atan2(dy, dx) of the two points, in (-pi, pi].

    Raises:
        FrameError: the points are closer than ``MIN_TEACH_SPAN_MM`` (the direction
            would be noise) or a value is not finite.

    >>> f = frame_from_two_points("fixture", (100.0, 50.0), (100.0, 150.0))
    >>> (f.origin_x, f.origin_y, round(math.degrees(f.angle_rad), 9))
    (100.0, 50.0, 90.0)
    >>> frame_from_two_points("f", (0.0, 0.0), (0.5, 0.0))
    Traceback (most recent call last):
    ...
    benchjog.kinematics.frames.FrameError: frame 'f': the two points are 0.500 mm apart (at least 1 mm needed)
    """
    if not name or not name.strip():
        raise FrameError("a frame needs a non-empty name")
    ox, oy = float(origin[0]), float(origin[1])
    px, py = float(x_point[0]), float(x_point[1])
    if not all(math.isfinite(v) for v in (ox, oy, px, py, z)):
        raise FrameError(f"frame {name!r}: the taught points must be finite numbers")
    span = math.hypot(px - ox, py - oy)
    if span < MIN_TEACH_SPAN_MM:
        raise FrameError(f"frame {name!r}: the two points are {span:.3f} mm apart "
                         f"(at least {MIN_TEACH_SPAN_MM:g} mm needed)")
    return UserFrame(name, ox, oy, math.atan2(py - oy, px - ox), float(z))


def _check_pose(pose: Sequence[float]) -> tuple[float, ...]:
    values = tuple(float(v) for v in pose)
    if len(values) not in (2, 4):
        raise FrameError(f"a pose is (x, y) or (x, y, z, roll), got {len(values)} values")
    if not all(math.isfinite(v) for v in values):
        raise FrameError("a pose must hold finite numbers")
    return values


def base_from_frame(frame: UserFrame, pose: Sequence[float]) -> tuple[float, ...]:
    """A pose given in ``frame`` expressed in the base frame.

    (x, y) -> T (x, y, 1) with T of :func:`transform_2d`; a SCARA pose also has
    z_base = z + frame.z_mm and roll_base = roll + frame angle (wrapped to (-pi, pi]).

    Example worked by hand: frame origin (100, 50), angle 90 deg. The frame point
    (10, 0) lies 10 mm along the frame's x axis, which points along base +y, so it is
    at base (100 + 0, 50 + 10) = (100, 60); (0, 10) is 10 mm along the frame's y axis
    (base -x): base (90, 50).

    >>> f = UserFrame("f", 100.0, 50.0, math.pi / 2, z_mm=20.0)
    >>> [round(v, 9) + 0.0 for v in base_from_frame(f, (10.0, 0.0))]
    [100.0, 60.0]
    >>> [round(v, 9) + 0.0 for v in base_from_frame(f, (0.0, 10.0))]
    [90.0, 50.0]
    >>> x, y, z, roll = base_from_frame(f, (0.0, 10.0, 5.0, 0.0))
    >>> (round(z, 9), round(math.degrees(roll), 9))
    (25.0, 90.0)
    """
    values = _check_pose(pose)
    (r00, r01, tx), (r10, r11, ty), _ = transform_2d(frame)
    x, y = values[0], values[1]
    bx, by = r00 * x + r01 * y + tx, r10 * x + r11 * y + ty
    if len(values) == 2:
        return bx, by
    return bx, by, values[2] + frame.z_mm, wrap_pi(values[3] + frame.angle_rad)


def frame_from_base(frame: UserFrame, pose: Sequence[float]) -> tuple[float, ...]:
    """A base-frame pose expressed in ``frame``: the inverse of :func:`base_from_frame`.

    (x, y) -> R^T ((x, y) - o), the inverse of T = [[R, o], [0, 1]] being
    [[R^T, -R^T o], [0, 1]] (Lynch & Park, *Modern Robotics*, 2017, ch. 3, from
    memory); z_frame = z - frame.z_mm, roll_frame = roll - frame angle.

    >>> f = UserFrame("f", 100.0, 50.0, math.pi / 2)
    >>> [round(v, 9) + 0.0 for v in frame_from_base(f, (100.0, 60.0))]
    [10.0, 0.0]
    """
    values = _check_pose(pose)
    c, s = math.cos(frame.angle_rad), math.sin(frame.angle_rad)
    dx, dy = values[0] - frame.origin_x, values[1] - frame.origin_y
    fx, fy = c * dx + s * dy, -s * dx + c * dy
    if len(values) == 2:
        return fx, fy
    return fx, fy, values[2] - frame.z_mm, wrap_pi(values[3] - frame.angle_rad)


__all__ = ["UserFrame", "FrameError", "frame_from_two_points", "base_from_frame",
           "frame_from_base", "transform_2d", "MIN_TEACH_SPAN_MM"]
