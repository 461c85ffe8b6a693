"""Closed-form kinematics of the planar two-link (2R) arm. Units: mm and radians.

Angles are the DH thetas (joint value + offset), counter-clockwise positive seen from
above. Elbow-down has theta2 > 0, elbow-up theta2 < 0 (CONTRACT.md).

The scalar functions need no numpy (``benchjog fk``/``solve`` start without it); the
batch functions and :func:`jacobian` import it when called.
"""

from __future__ import annotations

import math

TYPE_CHECKING = False  # typing.TYPE_CHECKING without importing typing
if TYPE_CHECKING:
    import numpy as np

REACH_REL_TOL = 1e-13  # a target this close (relative to the reach) to a boundary is on it
BATCH_CHUNK = 16384  # targets per block in the batch IK: the temporaries stay in cache


def tool_xy_from_thetas(a1_mm: float, a2_mm: float, t1_rad: float, t2_rad: float,
                        ) -> tuple[float, float]:
    """Forward kinematics of the 2R arm: the tool point.

    Source: Lynch & Park, *Modern Robotics* (2017), section 4.1 (from memory):
    x = a1 cos t1 + a2 cos(t1 + t2), y = a1 sin t1 + a2 sin(t1 + t2).

    >>> [round(v, 9) for v in tool_xy_from_thetas(300.0, 200.0, 0.0, math.pi / 2)]
    [300.0, 200.0]
    """
    t12 = t1_rad + t2_rad
    return (a1_mm * math.cos(t1_rad) + a2_mm * math.cos(t12),
            a1_mm * math.sin(t1_rad) + a2_mm * math.sin(t12))


def reach_tolerance_mm(a1_mm: float, a2_mm: float) -> float:
    """The band around the reach boundaries that counts as on the boundary: below
    1e-9 mm for any arm shorter than 10 m (a target in the band is put on the
    boundary, so this bounds the FK error there), far above the rounding error of the
    formulas (a few units in the last place of r)."""
    return REACH_REL_TOL * max(1.0, a1_mm + a2_mm)


def radius_mm(x_mm: float, y_mm: float) -> float:
    """Distance of (x, y) from the shoulder axis, as sqrt(x*x + y*y): every step is
    one correctly rounded IEEE operation, so the batch path gets the very same r
    (math.hypot and numpy.hypot differ in the last place, which the elbow angle
    amplifies next to a reach boundary)."""
    return math.sqrt(x_mm * x_mm + y_mm * y_mm)


def is_reachable(a1_mm: float, a2_mm: float, x_mm: float, y_mm: float) -> bool:
    """True when |a1 - a2| <= r <= a1 + a2 (within :func:`reach_tolerance_mm`)."""
    r = radius_mm(x_mm, y_mm)
    tol = reach_tolerance_mm(a1_mm, a2_mm)
    return abs(a1_mm - a2_mm) - tol <= r <= a1_mm + a2_mm + tol


def elbow_sin_cos(a1_mm: float, a2_mm: float, r_mm: float) -> tuple[float, float]:
    """|sin t2| and cos t2 of the elbow for a tool at distance r from the shoulder.

    Law of cosines: cos t2 = (r^2 - a1^2 - a2^2) / (2 a1 a2). The sine is formed from
    the factored 1 - cos t2 = (a1+a2-r)(a1+a2+r) / (2 a1 a2) and
    1 + cos t2 = (r-|a1-a2|)(r+|a1-a2|) / (2 a1 a2), which keeps full precision next to
    the stretched and folded boundaries; both are clamped at 0 so a target on a
    boundary (within the tolerance) gives sin t2 = 0.

    Source: Spong, Hutchinson & Vidyasagar, *Robot Modeling and Control* (2006),
    section 5.3 (from memory).

    >>> [round(v, 9) for v in elbow_sin_cos(300.0, 200.0, math.hypot(300.0, 200.0))]
    [1.0, 0.0]
    """
    two_a1a2 = 2.0 * a1_mm * a2_mm
    one_minus = max(0.0, (a1_mm + a2_mm - r_mm) * (a1_mm + a2_mm + r_mm) / two_a1a2)
    diff = abs(a1_mm - a2_mm)
    one_plus = max(0.0, (r_mm - diff) * (r_mm + diff) / two_a1a2)
    s = math.sqrt(one_minus * one_plus)
    c = (one_plus - one_minus) / 2.0
    return min(s, 1.0), max(-1.0, min(1.0, c))


def thetas_from_tool_xy(a1_mm: float, a2_mm: float, x_mm: float, y_mm: float,
                        ) -> list[tuple[float, float]]:
    """Inverse kinematics of the 2R arm by the law of cosines and atan2.

    Returns the elbow-down solution (t2 > 0) first, then elbow-up (t2 < 0); a single
    solution when the target is on a reach boundary (the branches coincide), and an
    empty list when it is out of reach. At the origin with equal links the shoulder
    is arbitrary; t1 = 0 is returned.

    The shoulder is t1 = atan2(y, x) - atan2(a2 sin t2, a1 + a2 cos t2) with the
    *signed* sin t2 of each branch: on elbow-up (t2 < 0) the correction angle is
    negative, so it is added. Forming it from |sin t2| on both branches is the classic
    mistake: the elbow-up shoulder then comes out wrong.

    Source: Lynch & Park, *Modern Robotics* (2017), section 6.1; Spong et al. (2006),
    section 5.3 (both from memory).

    >>> [tuple(round(math.degrees(t), 6) for t in sol)
    ...  for sol in thetas_from_tool_xy(300.0, 200.0, 300.0, 200.0)]
    [(0.0, 90.0), (67.380135, -90.0)]
    """
    # The arithmetic of radius_mm, reach_tolerance_mm and elbow_sin_cos, inlined (this
    # is the hot path of the jog loop): the batch path repeats it operation for operation.
    r = math.sqrt(x_mm * x_mm + y_mm * y_mm)
    top = a1_mm + a2_mm
    diff = abs(a1_mm - a2_mm)
    tol = REACH_REL_TOL * max(1.0, top)
    if r > top + tol or r < diff - tol:
        return []
    gamma = math.atan2(y_mm, x_mm)
    if r >= top - tol or r <= diff + tol:  # on a boundary: the branches coincide
        t2 = 0.0 if elbow_sin_cos(a1_mm, a2_mm, r)[1] > 0 else math.pi
        return [(gamma - math.atan2(0.0, a1_mm + a2_mm * math.cos(t2)), t2)]
    two_a1a2 = 2.0 * a1_mm * a2_mm
    one_minus = max(0.0, (top - r) * (top + r) / two_a1a2)
    one_plus = max(0.0, (r - diff) * (r + diff) / two_a1a2)
    s2 = min(math.sqrt(one_minus * one_plus), 1.0)
    c2 = max(-1.0, min(1.0, (one_plus - one_minus) / 2.0))
    t2 = math.atan2(s2, c2)
    beta = math.atan2(a2_mm * s2, a1_mm + a2_mm * c2)  # signed sin t2: -beta on elbow-up
    return [(gamma - beta, t2), (gamma + beta, -t2)]


def thetas_from_tool_xy_block(a1_mm: float, a2_mm: float, x: np.ndarray, y: np.ndarray,
                              t1: np.ndarray, t2: np.ndarray, reachable: np.ndarray,
                              on_boundary: np.ndarray) -> None:
    """One block of :func:`thetas_from_tool_xy_batch`, written into the given output
    arrays (x, y, reachable, on_boundary of shape (n,), t1, t2 of shape (2, n)). The
    same operations, in the same order, as :func:`thetas_from_tool_xy`, with in-place
    ufuncs."""
    import numpy as np

    tol = reach_tolerance_mm(a1_mm, a2_mm)
    top, diff = a1_mm + a2_mm, abs(a1_mm - a2_mm)
    two_a1a2 = 2.0 * a1_mm * a2_mm
    r = np.multiply(x, x)
    tmp = np.multiply(y, y)
    r += tmp
    np.sqrt(r, out=r)
    np.less_equal(r, top + tol, out=reachable)
    reachable &= r >= diff - tol
    np.greater_equal(r, top - tol, out=on_boundary)
    on_boundary |= r <= diff + tol
    on_boundary &= reachable
    one_minus = np.subtract(top, r)
    np.add(r, top, out=tmp)
    one_minus *= tmp
    one_minus /= two_a1a2
    np.maximum(one_minus, 0.0, out=one_minus)
    np.add(r, diff, out=tmp)
    one_plus = np.subtract(r, diff, out=r)  # r is not needed past this point
    one_plus *= tmp
    one_plus /= two_a1a2
    np.maximum(one_plus, 0.0, out=one_plus)
    s2 = np.multiply(one_minus, one_plus, out=tmp)
    np.sqrt(s2, out=s2)
    np.minimum(s2, 1.0, out=s2)
    c2 = np.subtract(one_plus, one_minus, out=one_plus)
    c2 *= 0.5
    np.clip(c2, -1.0, 1.0, out=c2)
    if on_boundary.any():
        s2[on_boundary] = 0.0
        c2[on_boundary] = np.where(c2[on_boundary] > 0, 1.0, -1.0)
    gamma = np.arctan2(y, x, out=one_minus)
    np.arctan2(s2, c2, out=t2[0])
    np.negative(t2[0], out=t2[1])
    c2 *= a2_mm
    c2 += a1_mm
    s2 *= a2_mm
    beta = np.arctan2(s2, c2, out=s2)
    np.subtract(gamma, beta, out=t1[0])
    np.add(gamma, beta, out=t1[1])
    if on_boundary.any():
        t1[1][on_boundary] = t1[0][on_boundary]
        t2[1][on_boundary] = t2[0][on_boundary]
    if not reachable.all():
        unreachable = ~reachable
        t1[:, unreachable] = np.nan
        t2[:, unreachable] = np.nan


def run_blocks(n: int, block, chunk: int = BATCH_CHUNK) -> None:
    """Call ``block(start, stop)`` over [0, n) in chunks of ``chunk`` (one thread:
    on a 2-core machine a second one bought nothing measurable)."""
    for start in range(0, n, chunk):
        block(start, min(n, start + chunk))


def thetas_from_tool_xy_batch(a1_mm: float, a2_mm: float, x_mm: np.ndarray, y_mm: np.ndarray,
                              ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Vectorised :func:`thetas_from_tool_xy` over arrays of targets.

    Returns (t1, t2) of shape (2, N) each (row 0 elbow-down, row 1 elbow-up; on a
    boundary both rows hold the one solution), ``reachable`` (N,) and
    ``on_boundary`` (N,). Unreachable entries hold NaN. ``x_mm`` and ``y_mm``
    broadcast together; N is their flattened size (shapes are kept: (2, *shape)).

    >>> t1, t2, ok, edge = thetas_from_tool_xy_batch(300.0, 200.0, [300.0, 500.0, 0.0],
    ...                                              [200.0, 0.0, 0.0])
    >>> import numpy as np
    >>> np.degrees(t2).round(6).tolist(), ok.tolist(), edge.tolist()
    ([[90.0, 0.0, nan], [-90.0, 0.0, nan]], [True, True, False], [False, True, False])
    """
    import numpy as np

    x, y = np.broadcast_arrays(np.asarray(x_mm, dtype=np.float64),
                               np.asarray(y_mm, dtype=np.float64))
    shape = x.shape
    x, y = np.ascontiguousarray(x).reshape(-1), np.ascontiguousarray(y).reshape(-1)
    n = x.size
    t1 = np.empty((2, n))
    t2 = np.empty((2, n))
    reachable = np.empty(n, dtype=bool)
    on_boundary = np.empty(n, dtype=bool)

    def block(start: int, stop: int) -> None:
        thetas_from_tool_xy_block(a1_mm, a2_mm, x[start:stop], y[start:stop], t1[:, start:stop],
                     t2[:, start:stop], reachable[start:stop], on_boundary[start:stop])

    run_blocks(n, block)
    return (t1.reshape((2,) + shape), t2.reshape((2,) + shape), reachable.reshape(shape),
            on_boundary.reshape(shape))


def jacobian_rows(a1_mm: float, a2_mm: float, t1_rad: float, t2_rad: float,
                  ) -> list[list[float]]:
    """The analytic 2x2 Jacobian d(x, y)/d(t1, t2), mm per radian, as plain rows (no
    numpy: the accuracy ``solve`` prints uses it).

    Source: Lynch & Park (2017), example 5.1 (from memory). Its determinant is
    a1 a2 sin t2 (zero when stretched or folded).

    >>> [[round(v, 9) for v in row] for row in jacobian_rows(300.0, 200.0, 0.0, math.pi / 2)]
    [[-200.0, -200.0], [300.0, 0.0]]
    """
    s1, c1 = math.sin(t1_rad), math.cos(t1_rad)
    s12, c12 = math.sin(t1_rad + t2_rad), math.cos(t1_rad + t2_rad)
    return [[-a1_mm * s1 - a2_mm * s12, -a2_mm * s12],
            [a1_mm * c1 + a2_mm * c12, a2_mm * c12]]


def jacobian(a1_mm: float, a2_mm: float, t1_rad: float, t2_rad: float) -> np.ndarray:
    """:func:`jacobian_rows` as a 2x2 numpy array.

    >>> jacobian(300.0, 200.0, 0.0, math.pi / 2).round(9).tolist()
    [[-200.0, -200.0], [300.0, 0.0]]
    """
    import numpy as np

    return np.array(jacobian_rows(a1_mm, a2_mm, t1_rad, t2_rad))


def manipulability(a1_mm: float, a2_mm: float, t2_rad: float) -> float:
    """Yoshikawa's measure sqrt(det(J J^T)) = |det J| = a1 a2 |sin t2| (mm^2).

    Source: Yoshikawa, "Manipulability of robotic mechanisms", IJRR 4(2), 1985
    (from memory).

    >>> manipulability(300.0, 200.0, math.pi / 2)
    60000.0
    """
    return a1_mm * a2_mm * abs(math.sin(t2_rad))


def singular_distance_rad(t2_rad: float) -> float:
    """How far the elbow is from the nearest singular pose (stretched t2 = 0 or folded
    t2 = +/-pi), radians.

    >>> round(math.degrees(singular_distance_rad(math.radians(-175.0))), 9)
    5.0
    """
    t = abs(math.remainder(t2_rad, 2.0 * math.pi))
    return min(t, math.pi - t)


def is_singular(t2_rad: float, tol_rad: float = 1e-9) -> bool:
    """True when the elbow is stretched or folded (within ``tol_rad``)."""
    return singular_distance_rad(t2_rad) <= tol_rad
