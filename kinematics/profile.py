"""Timing of joint-linear segments: trapezoidal profiles cut into whole-millisecond
segments, and the discrete speed and acceleration every plan is verified against.

The controller moves every joint linearly within a segment (PROTOCOL.md MOVE), so a
plan's joint velocity is piecewise constant: segment j runs at w_j = dQ_j / T_j. Its
acceleration is taken between consecutive segments over their mean duration,
a_j = (w_{j+1} - w_j) / ((T_j + T_{j+1}) / 2), and from rest into the first segment
(and out of the last one) over half its duration, i.e. rest counts as a segment of
zero duration. For any continuous profile v(t) with |dv/dt| <= A, the averages over
adjacent intervals satisfy |avg_{j+1} - avg_j| <= A (T_j + T_{j+1}) / 2 (the mean of
v(t') - v(t) over t in I_j, t' in I_{j+1}), so this measure never exceeds the
continuous profile's acceleration: a constant acceleration gives it exactly.
"""

from __future__ import annotations

import math

import numpy as np

MS = 0.001
SEGMENT_MAX_S = 60.0       # PROTOCOL.md MOVE: 1..60000 ms
RAMP_STEP_S = 0.025        # joint moves: aim at one ramp segment per 25 ms of ramp ...
RAMP_SEGMENTS_MAX = 8      # ... with at most 8 per ramp (velocity step <= 1/8 of the peak)
LINE_RAMP_SEGMENTS = 4     # lines: no segment spans more than 1/4 of the peak speed
RATE_TOL = 1e-9            # relative slack on limit checks (float rounding)


def ceil_ms(seconds: float) -> float:
    """Round a duration up to whole milliseconds, at least 1 ms.

    >>> ceil_ms(0.0101), ceil_ms(0.0), ceil_ms(0.02)
    (0.011, 0.001, 0.02)
    """
    return max(1, math.ceil(seconds / MS - 1e-6)) * MS


def trapezoid_segments(v_max: float, a_max: float) -> list[tuple[float, float]]:
    """A synchronised trapezoidal (or triangular) profile of a path parameter s from 0
    to 1 at rest to rest, as whole-ms constant-rate segments: [(s_end, duration_s)].

    Rule: each ramp has k = clamp(ceil(Ta / RAMP_STEP_S), 1, RAMP_SEGMENTS_MAX)
    segments of equal duration dt = ceil_ms(Ta / k), Ta the continuous ramp time
    (V/A, or 1/sqrt(A) when the peak V is not reached); the rate of ramp segment i is
    V' (i + 1/2) / k, so consecutive rates differ by V'/k (from rest: V'/(2k)), and the
    cruise takes Tc = ceil_ms(1/V - k dt) (none when negative). The peak V' =
    1 / (k dt + Tc) then satisfies V' <= V and V'/(k dt) <= A, so the discrete
    acceleration (module docstring) is <= A.

    Args:
        v_max: max rate of s (1/s); a_max: max acceleration of s (1/s^2).

    With V = 2/s and A = 8/s^2 the continuous trapezoid has 0.25 s ramps and a
    0.25 s cruise (0.75 s); here 8 + 1 + 8 segments, each ramp segment 32 ms (31.25
    rounded up), 0.756 s in all:

    >>> segs = trapezoid_segments(2.0, 8.0)
    >>> len(segs), round(sum(t for _, t in segs), 3), segs[-1][0]
    (17, 0.756, 1.0)
    """
    if v_max * v_max <= a_max:
        ramp = v_max / a_max
    else:
        ramp = 1.0 / math.sqrt(a_max)
    k = min(RAMP_SEGMENTS_MAX, max(1, math.ceil(ramp / RAMP_STEP_S - 1e-9)))
    dt = ceil_ms(ramp / k)
    cruise = 1.0 / v_max - k * dt
    cruise = ceil_ms(cruise) if cruise > 1e-9 else 0.0
    peak = 1.0 / (k * dt + cruise)
    rates = [peak * (i + 0.5) / k for i in range(k)]
    pieces = [(r * dt, dt) for r in rates]
    if cruise:
        pieces.append((peak * cruise, cruise))
    pieces += [(r * dt, dt) for r in reversed(rates)]
    out, s = [], 0.0
    for ds, t in pieces:
        s += ds
        out.append((s, t))
    out[-1] = (1.0, out[-1][1])
    return out


def line_speeds(du: np.ndarray, vlim: np.ndarray, alim: np.ndarray
                ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """A rest-to-rest speed profile of the line parameter u over pieces of length du,
    piecewise-constant speed caps vlim and acceleration caps alim (forward and
    backward passes, as in time-optimal path following).

    Returns:
        knot speeds (n+1,), the peak speed inside each piece (n,), durations (n,).
    """
    n = len(du)
    cap = np.minimum(np.concatenate([[0.0], vlim]), np.concatenate([vlim, [0.0]])).tolist()
    room = (2.0 * np.asarray(alim, dtype=float) * du).tolist()  # 2 a du per piece
    v = [0.0] * (n + 1)  # the passes on Python floats: the same arithmetic, less overhead
    for k in range(1, n + 1):
        v[k] = min(cap[k], math.sqrt(v[k - 1] * v[k - 1] + room[k - 1]))
    for k in range(n - 1, -1, -1):
        v[k] = min(v[k], math.sqrt(v[k + 1] * v[k + 1] + room[k]))
    v = np.array(v)
    va, vb = v[:-1], v[1:]
    peak = np.minimum(vlim, np.sqrt((va * va + vb * vb) / 2.0 + alim * du))
    peak = np.maximum(peak, np.maximum(va, vb))
    d_acc = (peak * peak - va * va) / (2.0 * alim)
    d_dec = (peak * peak - vb * vb) / (2.0 * alim)
    cruise = np.maximum(du - d_acc - d_dec, 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        t = (peak - va) / alim + (peak - vb) / alim + np.where(peak > 0, cruise / peak, np.inf)
    return v, peak, t


def line_positions(du: np.ndarray, v: np.ndarray, peak: np.ndarray, alim: np.ndarray,
                   durations: np.ndarray, at_s: np.ndarray) -> np.ndarray:
    """Where the line parameter is at the times ``at_s`` (s from the start) on the
    continuous profile of :func:`line_speeds`: in each piece the speed ramps at its
    acceleration cap from the knot speed to the piece's peak, cruises, and ramps down
    to the next knot speed. Times past the end give the end of the line.

    One piece of length 1 from rest to rest with peak 1 and acceleration 1 takes 2 s
    (1 s up, 1 s down); after 0.5 s it has covered a t^2 / 2 = 0.125:

    >>> line_positions(np.array([1.0]), np.array([0.0, 0.0]), np.array([1.0]),
    ...                np.array([1.0]), np.array([2.0]), np.array([0.5, 1.0, 1.5, 9.0])).tolist()
    [0.125, 0.5, 0.875, 1.0]
    """
    du = np.asarray(du, dtype=float)
    ends = np.cumsum(durations)
    starts = ends - durations
    u_starts = np.concatenate([[0.0], np.cumsum(du)[:-1]])
    at = np.clip(np.asarray(at_s, dtype=float), 0.0, ends[-1])
    j = np.minimum(np.searchsorted(ends, at, side="right"), len(du) - 1)
    tau = at - starts[j]
    va, vb, pk, a, d, tj = v[:-1][j], v[1:][j], peak[j], alim[j], du[j], durations[j]
    t_acc = (pk - va) / a
    t_dec = (pk - vb) / a
    d_acc = va * t_acc + a * t_acc * t_acc / 2.0
    sigma = np.maximum(tj - tau, 0.0)
    rising = va * tau + a * tau * tau / 2.0
    cruising = d_acc + pk * (tau - t_acc)
    falling = d - (vb * sigma + a * sigma * sigma / 2.0)
    local = np.where(tau <= t_acc, rising, np.where(sigma <= t_dec, falling, cruising))
    return np.minimum(u_starts[j] + np.clip(local, 0.0, d), u_starts[-1] + du[-1])


def segment_rates(start: np.ndarray, joints: np.ndarray, durations: np.ndarray
                  ) -> tuple[np.ndarray, np.ndarray]:
    """Per-segment joint speeds (n, J) and the accelerations (n+1, J) at the n+1
    transitions (rest -> first, ..., last -> rest), as defined in the module docstring.

    >>> w, a = segment_rates(np.zeros(1), np.array([[1.0], [3.0]]), np.array([1.0, 1.0]))
    >>> w.ravel().tolist(), a.ravel().tolist()
    ([1.0, 2.0], [2.0, 1.0, -4.0])
    """
    q = np.vstack([start, joints])
    w = np.diff(q, axis=0) / durations[:, None]
    wz = np.vstack([np.zeros_like(w[:1]), w, np.zeros_like(w[:1])])
    tz = np.concatenate([[0.0], durations, [0.0]])
    a = np.diff(wz, axis=0) / ((tz[:-1] + tz[1:]) / 2.0)[:, None]
    return w, a


def excess(start: np.ndarray, joints: np.ndarray, durations: np.ndarray,
           v_max: np.ndarray, a_max: np.ndarray, tool_gain: np.ndarray, tool_cap: float,
           ) -> float:
    """The time stretch c >= 1 that brings every joint speed, joint acceleration and
    the tool speed within limits (speeds scale as 1/c, accelerations as 1/c^2); 1.0
    when the timing is already within them."""
    w, a = segment_rates(start, joints, durations)
    ratio_v = float((np.abs(w) / v_max).max(initial=0.0))
    ratio_a = float((np.abs(a) / a_max).max(initial=0.0))
    ratio_t = float((tool_gain / durations).max(initial=0.0)) / tool_cap
    return max(1.0, ratio_v, ratio_t, math.sqrt(ratio_a))


def fit_durations(start: np.ndarray, joints: np.ndarray, durations: np.ndarray,
                  v_max: np.ndarray, a_max: np.ndarray, tool_gain: np.ndarray,
                  tool_cap: float) -> tuple[np.ndarray, float]:
    """Round durations up to whole ms, lengthen by whole ms the few segments whose own
    speed is over a limit, and only when that is not enough (an acceleration over its
    limit) stretch all of them together until the discrete speeds and accelerations
    are within limits.

    Returns:
        durations (whole ms), the overall stretch applied (1.0: none needed; the ratio
        of the total durations when only some segments were lengthened).
    """
    base = np.asarray(durations, dtype=float)
    t = np.array([ceil_ms(x) for x in base])
    for _ in range(4):  # local repair: a segment a hair too fast gets its own extra ms
        if excess(start, joints, t, v_max, a_max, tool_gain, tool_cap) <= 1.0 + RATE_TOL:
            return t, float(t.sum() / base.sum()) if base.sum() > 0 else 1.0
        w, _ = segment_rates(start, joints, t)
        ratio = np.maximum((np.abs(w) / v_max).max(axis=1), tool_gain / t / tool_cap)
        over = ratio > 1.0 + RATE_TOL
        if not over.any():
            break  # an acceleration: only a global stretch helps
        t = np.where(over, np.maximum(t + MS, [ceil_ms(x) for x in t * ratio]), t)
    stretch = 1.0
    for _ in range(40):
        t = np.array([ceil_ms(x * stretch) for x in base])
        c = excess(start, joints, t, v_max, a_max, tool_gain, tool_cap)
        if c <= 1.0 + RATE_TOL:
            return t, stretch
        stretch *= c * (1.0 + 1e-6)
    raise ArithmeticError("timing did not converge")  # not reached: stretch grows geometrically


def split_long(joints_from: np.ndarray, joints: np.ndarray, durations: np.ndarray
               ) -> tuple[np.ndarray, np.ndarray]:
    """Cut segments longer than SEGMENT_MAX_S into equal whole-ms pieces along the
    same joint-space line (the motion is unchanged: same path, same speed)."""
    ms_all = np.round(np.asarray(durations, dtype=float) / MS)
    if ms_all.size and ms_all.max() <= SEGMENT_MAX_S / MS:  # nothing to cut (the usual case)
        return np.array(joints, dtype=float), ms_all * MS
    q_prev = joints_from
    out_q, out_t = [], []
    for q, t in zip(joints, durations):
        ms = int(round(t / MS))
        pieces = math.ceil(ms / (SEGMENT_MAX_S / MS))
        base, extra = divmod(ms, pieces)
        done = 0
        for p in range(pieces):
            m = base + (1 if p < extra else 0)
            done += m
            out_q.append(q_prev + (q - q_prev) * (done / ms))
            out_t.append(m * MS)
        out_q[-1] = q
        q_prev = q
    return np.array(out_q), np.array(out_t)
