"""Angle wrapping and joint-limit findings. Units: radians and mm."""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from kinematics.model import Arm, Joint

TWO_PI = 2.0 * math.pi
LIMIT_TOL = 1e-9  # rad or mm: a value this close to a limit counts as on it


def wrap_pi(angle_rad: float) -> float:
    """The equivalent angle in (-pi, pi].

    >>> round(math.degrees(wrap_pi(math.radians(270.0))), 9)
    -90.0
    >>> round(math.degrees(wrap_pi(math.radians(-180.0))), 9)
    180.0
    """
    wrapped = math.remainder(angle_rad, TWO_PI)  # in [-pi, pi]
    return math.pi if wrapped <= -math.pi else wrapped


def wrap_into_limits(angle_rad: float, lo: float, hi: float) -> float:
    """The equivalent angle (angle + 2*pi*k) that lies within [lo, hi] whenever one
    does; among several, the one nearest the (-pi, pi] representative. Otherwise the
    (-pi, pi] representative itself.

    >>> round(math.degrees(wrap_into_limits(math.radians(-170.0), 0.0, math.radians(200.0))), 9)
    190.0
    >>> round(math.degrees(wrap_into_limits(math.radians(170.0), math.radians(-90.0), 0.0)), 9)
    170.0
    """
    base = wrap_pi(angle_rad)
    if lo - LIMIT_TOL <= base <= hi + LIMIT_TOL:
        return base
    k_lo = math.ceil((lo - LIMIT_TOL - base) / TWO_PI)
    k_hi = math.floor((hi + LIMIT_TOL - base) / TWO_PI)
    if k_lo > k_hi:
        return base
    k = k_lo if abs(k_lo) <= abs(k_hi) else k_hi
    return base + k * TWO_PI


def wrap_into_limits_array(angle_rad: np.ndarray, lo: float, hi: float) -> np.ndarray:
    """Vectorised :func:`wrap_into_limits` (same rule, element by element)."""
    base = np.remainder(angle_rad, TWO_PI)  # [0, 2pi)
    base = np.where(base > math.pi, base - TWO_PI, base)  # (-pi, pi]
    k_lo = np.ceil((lo - LIMIT_TOL - base) / TWO_PI)
    k_hi = np.floor((hi + LIMIT_TOL - base) / TWO_PI)
    inside = (base >= lo - LIMIT_TOL) & (base <= hi + LIMIT_TOL)
    k = np.where(np.abs(k_lo) <= np.abs(k_hi), k_lo, k_hi)
    shifted = np.where(k_lo <= k_hi, base + k * TWO_PI, base)
    return np.where(inside, base, shifted)


def within(joint: Joint, value: float) -> bool:
    return joint.min - LIMIT_TOL <= value <= joint.max + LIMIT_TOL


def fmt(joint: Joint, value: float) -> str:
    """A joint value for people: '152.30 deg' or '12.50 mm'."""
    return f"{joint.to_display(value):.2f} {joint.unit}"


def limit_problem(joint: Joint, value: float) -> str | None:
    """The words for a value beyond a soft limit, or None when it is within."""
    if value > joint.max + LIMIT_TOL:
        return f"{joint.name} at {fmt(joint, value)} passes its max {fmt(joint, joint.max)}"
    if value < joint.min - LIMIT_TOL:
        return f"{joint.name} at {fmt(joint, value)} passes its min {fmt(joint, joint.min)}"
    return None


def limit_problems(arm: Arm, values: Sequence[float]) -> list[str]:
    """Every joint beyond its soft limits, in words with the numbers."""
    found = (limit_problem(j, v) for j, v in zip(arm.joints, values))
    return [p for p in found if p]


def wrap_joints(arm: Arm, values: Sequence[float]) -> tuple[float, ...]:
    """Each revolute value as its equivalent within limits where one exists."""
    return tuple(wrap_into_limits(v, j.min, j.max) if j.is_revolute else float(v)
                 for j, v in zip(arm.joints, values))


def limit_clearance(joint: Joint, value: float) -> float:
    """Distance to the nearer soft limit (negative when beyond it)."""
    return min(value - joint.min, joint.max - value)
