"""Swept-path checks on joint-linear segments: vectorised points of the arm, tool-speed
bounds, and keep-out zones over the whole sweep of every link. Units: mm and radians.

A segment moves the joints linearly, q(tau) = qa + tau * dq for tau in [0, 1]. The
bounds here rest on one fact of planar geometry: a point at distance rho from a
revolute axis, turned by an angle dtheta, moves along an arc of length rho*|dtheta|,
so it moves by at most that much. On the 2R chain the tool point is
``a1 e(t1) + a2 e(t1 + t2)`` (e the unit vector at that angle), hence every point of
the arm moves in the base plane by at most

    lever_mm(dq) = a1 |dq1| + a2 |dq1 + dq2|

per unit of tau (a point of link 1 by at most a1 |dq1|, a point of link 2 at fraction
lambda by at most a1 |dq1| + lambda a2 |dq1 + dq2|), and the SCARA quill tip moves in z
by |dq3|. That is the "sum of lever arms times |dq|" bound the zone sweep uses.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from benchjog.kinematics.model import Arm
from benchjog.kinematics.scara import flange_z_mm

ZONE_STEP_MIN_MM = 1e-3   # the sweep stops refining once samples are this close in motion
ZONE_REPORT_MM = 0.25     # closest approaches are reported to within this much ...
ZONE_REPORT_REL = 0.05    # ... or 5 % of the clearance, whichever is larger
CONTACT_SCAN_MM = 0.05    # a contact is located to within this much motion of the arm ...
CONTACT_SCAN_MAX = 20001  # ... using at most this many poses


# --------------------------------------------------------------------------- points

def thetas(arm: Arm, q: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """DH thetas (t1, t1 + t2) of joint arrays ``q`` (..., n_joints)."""
    t1 = q[..., 0] + arm.joints[0].offset_rad
    return t1, t1 + q[..., 1] + arm.joints[1].offset_rad


def tool_z_mm(arm: Arm, q: np.ndarray) -> np.ndarray:
    """Tool-tip height (SCARA) for joint arrays; zeros on a planar arm."""
    if not arm.is_scara:
        return np.zeros(q.shape[:-1])
    j1, j2, j3, j4 = arm.joints
    return j1.d_mm + j2.d_mm - (j3.d_mm + q[..., 2]) - j4.d_mm


def points_from_joints(arm: Arm, q: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The elbow (..., 2) and the tool point (..., 3: x, y, z; z = 0 planar).

    >>> from benchjog.console.cell.armfile import builtin_arm
    >>> elbow, tool = points_from_joints(builtin_arm("planar-bench"), np.array([0.0, math.pi / 2]))
    >>> elbow.round(9).tolist(), tool.round(9).tolist()
    ([220.0, 0.0], [220.0, 160.0, 0.0])
    """
    q = np.asarray(q, dtype=float)
    t1, t12 = thetas(arm, q)
    a1, a2 = arm.link1_mm, arm.link2_mm
    ex, ey = a1 * np.cos(t1), a1 * np.sin(t1)
    tool = np.stack([ex + a2 * np.cos(t12), ey + a2 * np.sin(t12), tool_z_mm(arm, q)], axis=-1)
    return np.stack([ex, ey], axis=-1), tool


def lever_mm(arm: Arm, dq: np.ndarray) -> np.ndarray:
    """Upper bound of how far any point of the arm moves in the base plane for a
    joint step ``dq`` (..., n_joints): a1 |dq1| + a2 |dq1 + dq2| (module docstring).

    >>> from benchjog.console.cell.armfile import builtin_arm
    >>> float(lever_mm(builtin_arm("planar-bench"), np.array([0.1, -0.1])))
    22.0
    """
    dq = np.asarray(dq, dtype=float)
    return arm.link1_mm * np.abs(dq[..., 0]) + arm.link2_mm * np.abs(dq[..., 0] + dq[..., 1])


def z_step_mm(arm: Arm, dq: np.ndarray) -> np.ndarray:
    """How far the quill tip moves in z for a joint step (0 on a planar arm)."""
    dq = np.asarray(dq, dtype=float)
    return np.abs(dq[..., 2]) if arm.is_scara else np.zeros(dq.shape[:-1])


def tool_speed_gain(arm: Arm, qa: np.ndarray, dq: np.ndarray, samples: int = 17) -> np.ndarray:
    """An upper bound of |dp/dtau| (mm per unit tau) of the tool point along joint-linear
    segments q = qa + tau dq: the tool's linear speed divided by the segment's rate.

    dp/dtau = J(q) dq (the Jacobian's position rows, as benchjog.kinematics.solve.jacobian) is
    sampled at ``samples`` points; between samples it changes at most by its
    derivative bound K = a1 dq1^2 + a2 (dq1 + dq2)^2 (the second derivative of each
    rotating lever), so the true max is at most the sampled max + K h / 2, h the
    sample spacing. Never above the global bound a1|dq1| + a2|dq1+dq2| (+ |dq3|).

    Args:
        qa: (n, n_joints) segment starts; dq: (n, n_joints) joint steps.
    Returns:
        (n,) mm per unit tau.
    """
    qa = np.atleast_2d(np.asarray(qa, dtype=float))
    dq = np.atleast_2d(np.asarray(dq, dtype=float))
    tau = np.linspace(0.0, 1.0, samples)
    q = qa[:, None, :] + tau[None, :, None] * dq[:, None, :]
    t1, t12 = thetas(arm, q)
    a1, a2 = arm.link1_mm, arm.link2_mm
    w1 = dq[:, None, 0]
    w12 = dq[:, None, 0] + dq[:, None, 1]
    vx = -a1 * np.sin(t1) * w1 - a2 * np.sin(t12) * w12
    vy = a1 * np.cos(t1) * w1 + a2 * np.cos(t12) * w12
    vz = -dq[:, None, 2] if arm.is_scara else 0.0
    sampled = np.sqrt(vx * vx + vy * vy + vz * vz).max(axis=1)
    k = a1 * dq[:, 0] ** 2 + a2 * (dq[:, 0] + dq[:, 1]) ** 2
    bound = sampled + k * (tau[1] - tau[0]) / 2.0
    whole = lever_mm(arm, dq) + z_step_mm(arm, dq)
    return np.minimum(bound, whole)


def singular_distance_array(t2_rad: np.ndarray) -> np.ndarray:
    """Vectorised benchjog.kinematics.planar.singular_distance_rad."""
    t = np.abs(np.remainder(np.asarray(t2_rad, dtype=float) + math.pi, 2 * math.pi) - math.pi)
    return np.minimum(t, math.pi - t)


def singular_distance_on_segment(t2a: float, t2b: float) -> float:
    """Closest approach of the elbow theta to a singular value (a multiple of pi) while
    it moves linearly from t2a to t2b: exact, since the distance is piecewise linear.

    >>> round(math.degrees(singular_distance_on_segment(math.radians(10), math.radians(-5))), 9)
    0.0
    >>> round(math.degrees(singular_distance_on_segment(math.radians(10), math.radians(30))), 9)
    10.0
    """
    lo, hi = min(t2a, t2b), max(t2a, t2b)
    if math.floor(hi / math.pi) * math.pi >= lo:  # a multiple of pi lies in [lo, hi]
        return 0.0
    return float(singular_distance_array(np.array([t2a, t2b])).min())


def singular_distance_on_segments(t2a: np.ndarray, t2b: np.ndarray) -> np.ndarray:
    """Vectorised :func:`singular_distance_on_segment` over arrays of segment ends.

    >>> singular_distance_on_segments(np.radians([10.0, 10.0]), np.radians([-5.0, 30.0])).round(9).tolist()
    [0.0, 0.174532925]
    """
    t2a, t2b = np.asarray(t2a, dtype=float), np.asarray(t2b, dtype=float)
    lo, hi = np.minimum(t2a, t2b), np.maximum(t2a, t2b)
    crosses = np.floor(hi / math.pi) * math.pi >= lo  # a multiple of pi lies in [lo, hi]
    ends = np.minimum(singular_distance_array(t2a), singular_distance_array(t2b))
    return np.where(crosses, 0.0, ends)


# --------------------------------------------------------------------------- zones

def _segment_terms(ax, ay, bx, by):
    """What :func:`_point_segment` needs of a segment, computed once for many points."""
    dx, dy = bx - ax, by - ay
    length2 = dx * dx + dy * dy
    some = length2 > 0
    return dx, dy, some, np.where(some, length2, 1.0)


def _point_segment(px, py, ax, ay, bx, by, terms=None):
    dx, dy, some, den = _segment_terms(ax, ay, bx, by) if terms is None else terms
    t = np.where(some, ((px - ax) * dx + (py - ay) * dy) / den, 0.0)  # den > 0: no warnings
    t = np.minimum(np.maximum(t, 0.0), 1.0)
    return np.hypot(px - (ax + t * dx), py - (ay + t * dy))


def _point_box(px, py, zone):
    dx = np.maximum(np.maximum(zone.x_min - px, 0.0), px - zone.x_max)
    dy = np.maximum(np.maximum(zone.y_min - py, 0.0), py - zone.y_max)
    return np.hypot(dx, dy)


def _segment_hits_box(ax, ay, bx, by, zone):
    """Liang-Barsky clipping: True where segment ab meets the closed box."""
    dx, dy = bx - ax, by - ay
    t0 = np.zeros_like(ax)
    t1 = np.ones_like(ax)
    hit = np.ones(ax.shape, dtype=bool)
    for p, q in ((-dx, ax - zone.x_min), (dx, zone.x_max - ax),
                 (-dy, ay - zone.y_min), (dy, zone.y_max - ay)):
        parallel = p == 0
        hit &= ~(parallel & (q < 0))
        with np.errstate(over="ignore"):  # a subnormal p gives +/-inf: the right limit
            r = np.where(parallel, 0.0, q / np.where(parallel, 1.0, p))  # no zero divisor
        t0 = np.where(p < 0, np.maximum(t0, r), t0)  # p < 0 or p > 0: not parallel
        t1 = np.where(p > 0, np.minimum(t1, r), t1)
    return hit & (t0 <= t1)


def segment_zone_distance_array(a: np.ndarray, b: np.ndarray, zone) -> np.ndarray:
    """Vectorised benchjog.kinematics.zones.segment_zone_distance: a, b (..., 2) -> (...)."""
    ax, ay, bx, by = a[..., 0], a[..., 1], b[..., 0], b[..., 1]
    if zone.kind == "circle":
        return np.maximum(0.0, _point_segment(zone.cx, zone.cy, ax, ay, bx, by) - zone.r)
    d = np.minimum(_point_box(ax, ay, zone), _point_box(bx, by, zone))
    terms = _segment_terms(ax, ay, bx, by)
    for cx, cy in ((zone.x_min, zone.y_min), (zone.x_max, zone.y_min),
                   (zone.x_max, zone.y_max), (zone.x_min, zone.y_max)):
        d = np.minimum(d, _point_segment(cx, cy, ax, ay, bx, by, terms))
    return np.where(_segment_hits_box(ax, ay, bx, by, zone), 0.0, d)


def _parts(arm: Arm, q: np.ndarray):
    """(name, a, b, z_lo, z_hi) arrays of the parts benchjog.kinematics.zones.link_segments lists."""
    elbow, tool = points_from_joints(arm, q)
    origin = np.zeros_like(elbow)
    j1 = arm.joints[0]
    inf = np.full(q.shape[:-1], math.inf)
    if not arm.is_scara:
        return [(j1.name, origin, elbow, -inf, inf),
                (arm.joints[1].name, elbow, tool[..., :2], -inf, inf)]
    flange = flange_z_mm(arm)
    tip = tool[..., 2]
    ones = np.ones(q.shape[:-1])
    return [(j1.name, origin, elbow, j1.d_mm * ones, j1.d_mm * ones),
            (arm.joints[1].name, elbow, tool[..., :2], flange * ones, flange * ones),
            ("tool", tool[..., :2], tool[..., :2], np.minimum(tip, flange), np.maximum(tip, flange))]


def zone_gaps(arm: Arm, q: np.ndarray) -> tuple[np.ndarray, np.ndarray, list[list[str]]]:
    """Gaps of every part to every zone at joint arrays q (N, n_joints).

    Returns:
        combined (N, Z, P): max(planar gap, height gap): negative exactly when
            benchjog.kinematics.zones.part_gaps reports the part inside the zone;
        reported (N, Z, P): the planar gap where the part meets the zone in height
            (the benchjog.kinematics.zones.part_gaps value), inf where it cannot;
        names: part names per zone.
    """
    margin = arm.link_clearance_mm
    parts = _parts(arm, q)
    n = q.shape[0]
    combined = np.empty((n, len(arm.zones), len(parts)))
    reported = np.empty_like(combined)
    for zi, zone in enumerate(arm.zones):
        for pi, (_name, a, b, z_lo, z_hi) in enumerate(parts):
            planar_gap = segment_zone_distance_array(a, b, zone) - margin
            if arm.is_scara:
                with np.errstate(invalid="ignore"):
                    z_gap = np.maximum(z_lo - zone.z_max, zone.z_min - z_hi) - margin
                z_gap = np.nan_to_num(z_gap, nan=-math.inf)
            else:
                z_gap = np.full(n, -math.inf)
            combined[:, zi, pi] = np.maximum(planar_gap, z_gap)
            reported[:, zi, pi] = np.where(z_gap > 0, math.inf, planar_gap)
    return combined, reported, [[p[0] for p in parts] for _ in arm.zones]


@dataclass(frozen=True)
class Contact:
    """The first place a swept path enters a keep-out zone."""

    segment: int         # index of the joint-linear piece
    tau: float           # where in that piece, 0..1
    zone: str
    parts: tuple[str, ...]
    gap_mm: float        # the (negative, or unresolved small) gap found there


def _first_entry(arm: Arm, knots: np.ndarray, found: Contact) -> Contact:
    """Locate where the path first enters a zone on the piece of ``found`` (a pose
    found inside, not necessarily the first): poses from the piece's start to
    ``found.tau`` spaced so that no point moves more than CONTACT_SCAN_MM between them
    (at most CONTACT_SCAN_MAX poses), the first one inside. A contact at the start
    of its piece (a path of one pose, or one that starts inside) is the entry itself."""
    if found.tau <= 0.0 or found.segment + 1 >= len(knots):
        return found
    qa, qb = knots[found.segment], knots[found.segment + 1]
    dq = qb - qa
    rate = float(max(lever_mm(arm, dq), z_step_mm(arm, dq)))
    n = int(min(CONTACT_SCAN_MAX, max(2, math.ceil(rate * found.tau / CONTACT_SCAN_MM) + 1)))
    tau = np.linspace(0.0, found.tau, n)
    comb, _, part_names = zone_gaps(arm, qa + tau[:, None] * dq)
    c = comb.min(axis=2)
    inside = (c < 0).any(axis=1)
    if not inside.any():
        return found
    k = int(np.argmax(inside))
    zi = int(np.argmin(c[k]))
    parts = tuple(part_names[zi][p] for p in np.flatnonzero(comb[k, zi] < 0))
    return Contact(found.segment, float(tau[k]), arm.zones[zi].name, parts, float(c[k, zi]))


@dataclass(frozen=True)
class SweepResult:
    clearance_mm: dict[str, float]   # closest approach per zone: the combined gap (zone_gaps)
    contact: Contact | None          # first entry into a zone along the path, or None
    samples: int                     # poses evaluated


def sweep_zones(arm: Arm, knots: np.ndarray) -> SweepResult:
    """Check the whole sweep of every part of the arm along the joint-linear path
    through ``knots`` (n+1, n_joints) against every keep-out zone.

    Certification: on piece j between samples tau_a and tau_b (spacing h), every part's
    combined gap g(tau) changes at most at the rate K_j = max(lever_mm(dq_j),
    z_step_mm(dq_j)) per unit tau (module docstring), so over the interval
    g >= (g_a + g_b - K_j h) / 2. An interval whose bound is >= 0 is certified free.
    Intervals that are not are bisected (vectorised) until certified, a sample with
    g < 0 is found (contact), or K_j h < ZONE_STEP_MIN_MM (a contact within 1 um of
    the grown zone: treated as contact). Intervals are also refined while their bound
    is more than max(ZONE_REPORT_MM, ZONE_REPORT_REL * gap) below the closest sampled gap
    of that zone, so the reported clearance is the true closest approach to within that.
    """
    knots = np.atleast_2d(np.asarray(knots, dtype=float))
    names = [z.name for z in arm.zones]
    if not arm.zones:
        return SweepResult({}, None, 0)
    dq = np.diff(knots, axis=0)
    rate = np.maximum(lever_mm(arm, dq), z_step_mm(arm, dq))
    comb, rep, part_names = zone_gaps(arm, knots)
    c = comb.min(axis=2)  # (N, Z) per zone
    best = c.min(axis=0)
    samples = knots.shape[0]
    contacts: list[Contact] = []

    def note_contacts(seg, tau, cz, comb_full):
        for k in np.flatnonzero((cz < 0).any(axis=1)):
            zi = int(np.argmin(cz[k]))
            parts = tuple(part_names[zi][p] for p in np.flatnonzero(comb_full[k, zi] < 0))
            contacts.append(Contact(int(seg[k]), float(tau[k]), names[zi], parts, float(cz[k, zi])))

    # knot k ends piece k - 1 (tau 1); knot 0 starts piece 0
    knot = np.arange(samples)
    note_contacts(np.maximum(knot - 1, 0), np.where(knot > 0, 1.0, 0.0), c, comb)
    seg = np.arange(len(dq))
    ta = np.zeros(len(dq))
    tb = np.ones(len(dq))
    ca, cb = c[:-1], c[1:]
    while seg.size:
        h = tb - ta
        step = rate[seg] * h
        lower = (ca + cb - step[:, None]) / 2.0
        free = (ca >= 0) & (cb >= 0)
        slack = np.maximum(ZONE_REPORT_MM, ZONE_REPORT_REL * np.abs(best))[None, :]
        need = ((lower < 0) | (lower < best[None, :] - slack)) & free[:, :]
        unresolved = need.any(axis=1) & (step >= ZONE_STEP_MIN_MM)
        tiny = (lower < 0).any(axis=1) & free.all(axis=1) & (step < ZONE_STEP_MIN_MM)
        for k in np.flatnonzero(tiny):
            zi = int(np.argmin(lower[k]))
            contacts.append(Contact(int(seg[k]), float(ta[k]), names[zi], (), float(lower[k, zi])))
        keep = unresolved & free.all(axis=1)
        if not keep.any():
            break
        seg, ta, tb, ca, cb = seg[keep], ta[keep], tb[keep], ca[keep], cb[keep]
        tm = (ta + tb) / 2.0
        qm = knots[seg] + tm[:, None] * dq[seg]
        comb_m, rep_m, _ = zone_gaps(arm, qm)
        cm = comb_m.min(axis=2)
        samples += len(tm)
        best = np.minimum(best, cm.min(axis=0))
        note_contacts(seg, tm, cm, comb_m)
        seg = np.concatenate([seg, seg])
        ta, tb = np.concatenate([ta, tm]), np.concatenate([tm, tb])
        ca, cb = np.concatenate([ca, cm]), np.concatenate([cm, cb])
    first = min(contacts, key=lambda k: (k.segment, k.tau)) if contacts else None
    if first is not None:
        first = _first_entry(arm, knots, first)
        samples += CONTACT_SCAN_MAX
    clearance = {name: float(best[i]) for i, name in enumerate(names)}
    if first is not None:
        clearance[first.zone] = min(clearance[first.zone], first.gap_mm)
    return SweepResult(clearance, first, samples)


def sweep_zones_many(arm: Arm, paths) -> list[SweepResult]:
    """:func:`sweep_zones` of many paths in one vectorised pass: the same result for
    each path as its own call (the same samples, the same refinement, the same
    contact), for the dry run of a whole program.

    Every decision of the certification is taken per interval, except the closest
    sampled gap ``best`` (the report refinement), which is kept per path and per zone;
    the bisection runs level by level as in :func:`sweep_zones`, so each path sees
    exactly the intervals of its own call, in the same order. The gates of real motion
    (benchjog.drivers.interlock) call :func:`sweep_zones` on every motion they run.

    Args:
        paths: a sequence of knot arrays (n_i + 1, n_joints), each one path.
    """
    paths = [np.atleast_2d(np.asarray(k, dtype=float)) for k in paths]
    if not arm.zones or not paths:
        return [SweepResult({}, None, 0) for _ in paths]
    names = [z.name for z in arm.zones]
    sizes = np.array([len(k) for k in paths])
    first_knot = np.concatenate([[0], np.cumsum(sizes)[:-1]])
    knots = np.concatenate(paths)
    knot_group = np.repeat(np.arange(len(paths)), sizes)
    knot_local = np.arange(len(knots)) - first_knot[knot_group]
    piece_knot = np.flatnonzero(knot_local < (sizes - 1)[knot_group])  # first knot of each piece
    piece_group = knot_group[piece_knot]
    piece_local = knot_local[piece_knot]
    dq = knots[piece_knot + 1] - knots[piece_knot]
    rate = np.maximum(lever_mm(arm, dq), z_step_mm(arm, dq))
    comb, _rep, part_names = zone_gaps(arm, knots)
    c = comb.min(axis=2)
    best = np.minimum.reduceat(c, first_knot, axis=0)  # (G, Z)
    samples = sizes.copy()
    contacts: list[list[Contact]] = [[] for _ in paths]

    def note_contacts(group, seg, tau, cz, comb_full):
        for k in np.flatnonzero((cz < 0).any(axis=1)):
            zi = int(np.argmin(cz[k]))
            parts = tuple(part_names[zi][p] for p in np.flatnonzero(comb_full[k, zi] < 0))
            contacts[group[k]].append(Contact(int(seg[k]), float(tau[k]), names[zi], parts,
                                              float(cz[k, zi])))

    note_contacts(knot_group, np.maximum(knot_local - 1, 0),
                  np.where(knot_local > 0, 1.0, 0.0), c, comb)
    seg = np.arange(len(dq))  # global piece index
    ta = np.zeros(len(dq))
    tb = np.ones(len(dq))
    ca, cb = c[piece_knot], c[piece_knot + 1]
    while seg.size:
        group = piece_group[seg]
        h = tb - ta
        step = rate[seg] * h
        lower = (ca + cb - step[:, None]) / 2.0
        free = (ca >= 0) & (cb >= 0)
        slack = np.maximum(ZONE_REPORT_MM, ZONE_REPORT_REL * np.abs(best))[group]
        need = ((lower < 0) | (lower < best[group] - slack)) & free[:, :]
        unresolved = need.any(axis=1) & (step >= ZONE_STEP_MIN_MM)
        tiny = (lower < 0).any(axis=1) & free.all(axis=1) & (step < ZONE_STEP_MIN_MM)
        for k in np.flatnonzero(tiny):
            zi = int(np.argmin(lower[k]))
            contacts[group[k]].append(Contact(int(piece_local[seg[k]]), float(ta[k]), names[zi],
                                              (), float(lower[k, zi])))
        keep = unresolved & free.all(axis=1)
        if not keep.any():
            break
        seg, ta, tb, ca, cb = seg[keep], ta[keep], tb[keep], ca[keep], cb[keep]
        group = piece_group[seg]
        tm = (ta + tb) / 2.0
        qm = knots[piece_knot[seg]] + tm[:, None] * dq[seg]
        comb_m, _rep_m, _ = zone_gaps(arm, qm)
        cm = comb_m.min(axis=2)
        samples += np.bincount(group, minlength=len(paths))
        np.minimum.at(best, group, cm)
        note_contacts(group, piece_local[seg], tm, cm, comb_m)
        seg = np.concatenate([seg, seg])
        ta, tb = np.concatenate([ta, tm]), np.concatenate([tm, tb])
        ca, cb = np.concatenate([ca, cm]), np.concatenate([cm, cb])
    results = []
    for g, path in enumerate(paths):
        found = contacts[g]
        first = min(found, key=lambda k: (k.segment, k.tau)) if found else None
        count = int(samples[g])
        if first is not None:
            first = _first_entry(arm, path, first)
            count += CONTACT_SCAN_MAX
        clearance = {name: float(best[g, i]) for i, name in enumerate(names)}
        if first is not None:
            clearance[first.zone] = min(clearance[first.zone], first.gap_mm)
        results.append(SweepResult(clearance, first, count))
    return results
