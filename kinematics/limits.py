"""Angle wrapping and joint-limit findings. Units: radians and mm.

The scalar functions need no numpy (``benchjog fk``/``solve`` start without it); the
``*_array`` ones import it when called."""

from __future__ import annotations

import math
from collections.abc import Sequence

from benchjog.kinematics.model import Arm, Joint

TYPE_CHECKING = False  # typing.TYPE_CHECKING without importing typing
if TYPE_CHECKING:
    import numpy as np

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
    if not math.isfinite(angle_rad):
        return angle_rad
    base = wrap_pi(angle_rad)
    if lo - LIMIT_TOL <= base <= hi + LIMIT_TOL:
        return base
    k_lo = math.ceil((lo - LIMIT_TOL - base) / TWO_PI)
    k_hi = math.floor((hi + LIMIT_TOL - base) / TWO_PI)
    if k_lo > k_hi:
        return base
    k = k_lo if abs(k_lo) <= abs(k_hi) else k_hi
    return base + k * TWO_PI


def _wrap_pi_into(a: np.ndarray, mask: np.ndarray) -> np.ndarray:
    """(-pi, pi] representatives of ``a`` (a new array), ``mask`` a bool scratch.

    base = a - 2 pi n with n = rint(a / 2 pi) in {0, +-1, +-2}: 2 pi n is exact and so
    is the subtraction (Sterbenz's lemma), so this is math.remainder's exact result;
    two exact +-2 pi steps then fix a rounded tie. Wider angles go through ``fmod``
    (exact, but slower) first.
    """
    import numpy as np

    if not (a.size and float(a.max()) < 4.9 * math.pi and float(a.min()) > -4.9 * math.pi):
        a = np.fmod(a, TWO_PI)  # exact; NaN stays NaN
    base = np.multiply(a, 1.0 / TWO_PI)
    np.rint(base, out=base)
    base *= TWO_PI
    np.subtract(a, base, out=base)
    np.greater(base, math.pi, out=mask)
    base -= mask * TWO_PI
    np.less_equal(base, -math.pi, out=mask)
    base += mask * TWO_PI
    return base


def wrap_pi_array(angle_rad: np.ndarray) -> np.ndarray:
    """Vectorised :func:`wrap_pi`, equal to it bit for bit.

    Exact, like math.remainder: see :func:`_wrap_pi_into`.

    >>> import numpy as np
    >>> np.degrees(wrap_pi_array(np.radians([270.0, -180.0, 540.0, 10.0]))).round(9).tolist()
    [-90.0, 180.0, 180.0, 10.0]
    """
    import numpy as np

    a = np.asarray(angle_rad, dtype=np.float64)
    return _wrap_pi_into(a, np.empty(a.shape, dtype=bool))


def wrap_into_limits_array(angle_rad: np.ndarray, lo: float, hi: float) -> np.ndarray:
    """Vectorised :func:`wrap_into_limits` (same rule, element by element, bit for bit).

    With k_lo, k_hi the least and greatest k that put base + 2 pi k within
    [lo, hi], the k nearest 0 is clip(0, k_lo, k_hi); when k_lo > k_hi there is none
    and k = 0.

    >>> import numpy as np
    >>> np.degrees(wrap_into_limits_array(np.radians([-170.0, 170.0]), 0.0,
    ...                                   math.radians(200.0))).round(9).tolist()
    [190.0, 170.0]
    """
    import numpy as np

    a = np.asarray(angle_rad, dtype=np.float64)
    mask = np.empty(a.shape, dtype=bool)
    base = _wrap_pi_into(a, mask)
    k_lo = np.subtract(lo - LIMIT_TOL, base)
    k_lo /= TWO_PI
    np.ceil(k_lo, out=k_lo)
    k_hi = np.subtract(hi + LIMIT_TOL, base)
    k_hi /= TWO_PI
    np.floor(k_hi, out=k_hi)
    np.less_equal(k_lo, k_hi, out=mask)  # some equivalent angle is within limits
    np.minimum(k_hi, 0.0, out=k_hi)
    k = np.maximum(k_lo, k_hi, out=k_lo)
    k *= mask
    k *= TWO_PI
    return np.add(base, k, out=k)


def within(joint: Joint, value: float) -> bool:
    return joint.min - LIMIT_TOL <= value <= joint.max + LIMIT_TOL


def fmt(joint: Joint, value: float) -> str:
    """A joint value for people: '152.30 deg' or '12.50 mm' (a huge one as '1e+308 deg')."""
    shown = joint.to_display(value)
    return f"{shown:.4g} {joint.unit}" if abs(shown) >= 1e7 else f"{shown:.2f} {joint.unit}"


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
