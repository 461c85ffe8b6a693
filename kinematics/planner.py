"""The motion planner: tool targets and jogs to timed joint segments (pure).

A plan is a tuple of :class:`benchjog.kinematics.model.Segment` (joint values at the end of
each segment, rad/mm, and its duration, whole milliseconds of 1 ms .. 60 s), the unit
every driver streams as PROTOCOL.md ``MOVE`` lines, plus a :class:`PlanSummary` for
the confirmation prompt and the reports, and ``problems``: the refusal reasons. A
refused plan has no segments. Bad arguments raise :class:`TargetError`.

Joint moves (:func:`plan_joint_move`) are one straight line in joint space, every
joint starting and arriving together, timed by a trapezoidal profile of the path
parameter (benchjog.kinematics.profile.trapezoid_segments documents how the ramps are cut into
segments). The rate is bounded by each joint's ``max_speed`` and ``max_accel`` and by
the tool speed cap, bounded over the path from the Jacobian (sweep.tool_speed_gain).

Straight-line moves (:func:`plan_line_move`) follow the tool line on one IK branch.
The joint path is cut into chords (in joint space) whose forward kinematics stays
within ``tolerance_mm`` of the line, each chord about as long as the tolerance allows:
a few vectorised passes balance the chords by the sagitta law (:func:`_balanced_knots`),
with the greedy cut (from each knot, the longest such chord) as the fallback. The line is then
timed by a speed profile of the line parameter capped, piece by piece, by the tool
speed cap and the joint speeds, with accelerations bounded as derived in
:func:`_line_timing`, and verified segment by segment (benchjog.kinematics.profile).

Every plan's swept path (all links, the quill) is checked against the keep-out zones
with the certified sampling of benchjog.kinematics.sweep.sweep_zones.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from benchjog.kinematics import planar, profile, scara, solve, sweep
from benchjog.kinematics.options import (JOINT, LINE, LINE_TOLERANCE_MAX_MM, LINE_TOLERANCE_MIN_MM,
                                         LINE_TOLERANCE_MM, PATHS)
from benchjog.kinematics.limits import TWO_PI, limit_clearance, limit_problem, wrap_pi
from benchjog.kinematics.model import Arm, Branch, Segment
from benchjog.kinematics.solve import TargetError

NEAR_LIMIT_RAD = math.radians(5.0)   # warn when a joint comes this close to a soft limit
NEAR_LIMIT_MM = 5.0
DENSE_STEP_MM = 0.5                  # refusal checks along a line: one IK pose per 0.5 mm
DENSE_MIN, DENSE_MAX = 65, 20001
DEVIATION_SAMPLES = 17               # FK samples per candidate chord
DEVIATION_SAFETY = 0.99              # accept a chord when its sampled deviation <= 0.99 tol
CANDIDATE_FACTORS = np.geomspace(0.8, 1.25, 15)  # step lengths tried at once (3.2 % apart)
BALANCE_FIRST_CHORDS = 16             # line knots: the first, uniform split that starts the estimate
BALANCE_MARGIN = 0.01                # chords aimed 1 % below the estimated longest
BALANCE_PASSES = 6                   # splits tried before falling back to the greedy cut
NO_MOTION = 1e-12
JOINT_GAIN_SAMPLES = 65              # Jacobian samples of the tool-speed bound of a joint move
LINE_NO_MOTION = 1e-9  # rad or mm: a line whose joints move less is planned as a joint move


# --------------------------------------------------------------------------- summary

def _fmt_tool(arm: Arm, pose: Sequence[float]) -> str:
    """A tool pose in words; the heading (roll) in (-180, 180] deg, as the DH chain's
    atan2 and the console's pose panel give it."""
    if arm.is_scara:
        x, y, z, roll = pose
        return (f"x {x:.2f} mm, y {y:.2f} mm, z {z:.2f} mm, "
                f"roll {math.degrees(wrap_pi(roll)):.2f} deg")
    x, y, heading = pose
    return f"x {x:.2f} mm, y {y:.2f} mm, heading {math.degrees(wrap_pi(heading)):.2f} deg"


def _tool_display(arm: Arm, pose: Sequence[float]) -> list[float]:
    out = [float(v) for v in pose]
    out[-1] = math.degrees(wrap_pi(out[-1]))
    return out


def _json_number(value: float) -> float | None:
    return float(value) if math.isfinite(value) else None


@dataclass(frozen=True)
class PlanSummary:
    """What a plan does and how close it comes to anything, for people and reports.

    Internal units (rad, mm, rad/s, mm/s); :meth:`lines` and :meth:`to_dict` give
    degrees and mm.
    """

    start_joints: tuple[float, ...]
    end_joints: tuple[float, ...]
    start_tool: tuple[float, ...]
    end_tool: tuple[float, ...]
    branch: Branch | None
    branch_change: bool
    kind: str
    duration_s: float
    segment_count: int
    peak_joint_speed: tuple[float, ...]
    peak_tool_speed_mm_s: float
    limit_clearance: tuple[float, ...]
    singular_distance_rad: float
    zone_clearance_mm: dict[str, float] = field(default_factory=dict)
    warnings: tuple[str, ...] = ()
    tolerance_mm: float | None = None      # lines: the chordal tolerance asked for
    chord_count: int | None = None         # lines: chords the tolerance alone needs
    continuous_s: float | None = None      # lines: the continuous speed profile's duration

    def lines(self, arm: Arm) -> list[str]:
        """Human text, degrees and mm."""
        def joints(values):
            return ", ".join(f"{j.name} {j.to_display(v):.2f} {j.unit}"
                             for j, v in zip(arm.joints, values))
        branch = str(self.branch) if self.branch else "no branch (singular pose)"
        if self.branch_change:
            branch += " (branch change)"
        out = [f"{self.kind} move, {branch}: {self.duration_s:.3f} s in "
               f"{self.segment_count} segments",
               f"from joints {joints(self.start_joints)}",
               f"  to joints {joints(self.end_joints)}",
               f"from tool {_fmt_tool(arm, self.start_tool)}",
               f"  to tool {_fmt_tool(arm, self.end_tool)}",
               "peak joint speed: " + ", ".join(
                   f"{j.name} {j.to_display(v):.1f} {j.unit}/s"
                   for j, v in zip(arm.joints, self.peak_joint_speed)),
               f"peak tool speed: {self.peak_tool_speed_mm_s:.1f} mm/s "
               f"(cap {arm.tool_speed_max_mm_s:g} mm/s)",
               "least room to the soft limits: " + ", ".join(
                   f"{j.name} {j.to_display(v):.2f} {j.unit}"
                   for j, v in zip(arm.joints, self.limit_clearance)),
               f"least elbow angle from a singular pose: "
               f"{math.degrees(self.singular_distance_rad):.2f} deg"]
        if self.chord_count is not None:
            out.append(self._segment_words())
        for name, gap in self.zone_clearance_mm.items():
            out.append(f"least gap to keep-out zone {name!r}: "
                       + (f"{gap:.1f} mm" if math.isfinite(gap) else "never at its height"))
        out += [f"warning: {w}" for w in self.warnings]
        return out

    def _segment_words(self) -> str:
        """Why a line has as many segments as it has."""
        n = self.chord_count
        words = (f"straight within {self.tolerance_mm:g} mm: {n} chord{'' if n == 1 else 's'} "
                 "for the tolerance")
        extra = self.segment_count - self.chord_count
        if extra > 0:
            words += (f", {extra} more to cut the speed ramps (no segment spans more than "
                      f"1/{profile.LINE_RAMP_SEGMENTS} of the peak speed) and to end on whole "
                      "milliseconds")
        if self.continuous_s:
            words += (f"; {self.duration_s:.3f} s against {self.continuous_s:.3f} s for the "
                      "continuous speed profile")
        return words

    def to_dict(self, arm: Arm) -> dict:
        """JSON-ready, degrees and mm (None for an infinite clearance)."""
        disp = lambda values: [j.to_display(v) for j, v in zip(arm.joints, values)]  # noqa: E731
        return {
            "kind": self.kind,
            "branch": str(self.branch) if self.branch else None,
            "branch_change": self.branch_change,
            "start_joints": disp(self.start_joints),
            "end_joints": disp(self.end_joints),
            "start_tool": _tool_display(arm, self.start_tool),
            "end_tool": _tool_display(arm, self.end_tool),
            "duration_s": self.duration_s,
            "segment_count": self.segment_count,
            "peak_joint_speed": disp(self.peak_joint_speed),
            "peak_tool_speed_mm_s": self.peak_tool_speed_mm_s,
            "limit_clearance": disp(self.limit_clearance),
            "singular_distance_deg": math.degrees(self.singular_distance_rad),
            "zone_clearance_mm": {k: _json_number(v) for k, v in self.zone_clearance_mm.items()},
            "warnings": list(self.warnings),
            **({"tolerance_mm": self.tolerance_mm, "chords_for_tolerance": self.chord_count,
                "continuous_duration_s": self.continuous_s}
               if self.chord_count is not None else {}),
        }


@dataclass(frozen=True)
class Plan:
    segments: tuple[Segment, ...]
    summary: PlanSummary
    problems: tuple[str, ...] = ()

    @property
    def ok(self) -> bool:
        return not self.problems


# --------------------------------------------------------------------------- helpers

def branch_of(arm: Arm, joints: Sequence[float]) -> Branch | None:
    """The branch of a joint pose: elbow-down when sin(theta2) > 0, elbow-up when < 0,
    None at a singular pose (CONTRACT.md)."""
    s = math.sin(joints[1] + arm.joints[1].offset_rad)
    if abs(s) < 1e-12:
        return None
    return Branch.ELBOW_DOWN if s > 0 else Branch.ELBOW_UP


def _check_pct(speed_pct: float) -> float:
    pct = float(speed_pct)
    if not (0.0 < pct <= 100.0):  # also refuses NaN
        raise TargetError(f"speed override must be in (0, 100] percent ({pct:g})")
    return pct / 100.0


def _check_branch(branch) -> Branch | None:
    if branch is None or isinstance(branch, Branch):
        return branch
    try:
        return Branch(str(branch))
    except ValueError:
        raise TargetError(f"unknown branch {branch!r} (elbow-up or elbow-down)") from None


def _limits(arm: Arm, p: float):
    """Joint speed and acceleration limits under the speed override p (0..1]. The
    override scales both, so that a short move, which never reaches its top speed,
    slows down too (common practice on motion controllers)."""
    v = np.array([j.max_speed for j in arm.joints])
    a = np.array([j.max_accel for j in arm.joints])
    return p * v, p * a


def _near_limit(arm: Arm, i: int) -> float:
    return NEAR_LIMIT_RAD if arm.joints[i].is_revolute else NEAR_LIMIT_MM


def _fmt_joint(arm: Arm, i: int, value: float) -> str:
    j = arm.joints[i]
    return f"{j.to_display(value):.2f} {j.unit}"


def _path_findings(arm: Arm, knots: np.ndarray, where) -> tuple[list[str], list[str], tuple, float]:
    """Limit problems/warnings, limit clearances and the singular distance of the
    joint-linear path through ``knots``; exact, since every joint is linear between
    knots (extremes at knots) and the singular distance is piecewise linear in t2.
    ``where(k)`` words the position of knot k."""
    problems, warnings = [], []
    clear = []
    for i, joint in enumerate(arm.joints):
        c = np.minimum(knots[:, i] - joint.min, joint.max - knots[:, i])
        clear.append(float(c.min()))
        bad = np.flatnonzero(c < -1e-9)
        if bad.size:
            k = int(bad[0])
            if k == 0 and not (c[1:] < c[0] - 1e-12).any():
                warnings.append(f"{limit_problem(joint, float(knots[0, i]))} at the start; "
                                "the move does not take it further")
            else:
                k = int(bad[bad > 0][0]) if (bad > 0).any() else k
                problems.append(f"joint limit {where(k)}: {limit_problem(joint, float(knots[k, i]))}")
        elif c[1:].min() < min(_near_limit(arm, i), c[0] - 1e-9):  # the move approaches it
            k = 1 + int(np.argmin(c[1:]))
            warnings.append(f"near limit: {joint.name} comes within {_fmt_joint(arm, i, c.min())} "
                            f"of its soft limit {where(k)}")
    t2 = knots[:, 1] + arm.joints[1].offset_rad
    if len(t2) > 1:
        sing = float(sweep.singular_distance_on_segments(t2[:-1], t2[1:]).min())
    else:
        sing = float(sweep.singular_distance_array(t2).min())
    return problems, warnings, tuple(clear), sing


def _zone_words(arm: Arm, contact: sweep.Contact, where: str) -> str:
    parts = ", ".join(contact.parts) if contact.parts else "the arm"
    return (f"keep-out zone {contact.zone!r} {where}: {parts} would come within "
            f"{arm.link_clearance_mm:g} mm of it (gap {contact.gap_mm:.2f} mm)")


def _segments(q: np.ndarray, t: np.ndarray) -> tuple[Segment, ...]:
    return tuple(Segment(tuple(row), d) for row, d in zip(q.tolist(), np.round(t, 3).tolist()))


def _peaks(arm: Arm, start: np.ndarray, q: np.ndarray, t: np.ndarray,
           gain: np.ndarray | None = None) -> tuple[tuple, float]:
    """Peak joint speeds and tool speed; ``gain``: the tool-speed bounds of exactly
    these segments when already known."""
    if not len(t):
        return tuple(0.0 for _ in arm.joints), 0.0
    prev = np.vstack([start, q[:-1]])
    w = np.abs(q - prev) / t[:, None]
    if gain is None:
        gain = sweep.tool_speed_gain(arm, prev, q - prev)
    return tuple(float(v) for v in w.max(axis=0)), float((gain / t).max())


def _refused(arm: Arm, kind: str, start, end, branch, problems, warnings=(),
             zone_clearance=None) -> Plan:
    start = tuple(float(v) for v in start)
    end = tuple(float(v) for v in end) if end is not None else start
    clear = tuple(min(limit_clearance(j, a), limit_clearance(j, b))
                  for j, a, b in zip(arm.joints, start, end))
    t2a = start[1] + arm.joints[1].offset_rad
    t2b = end[1] + arm.joints[1].offset_rad
    summary = PlanSummary(
        start, end, solve.tool_from_joints(arm, start), solve.tool_from_joints(arm, end),
        branch, False, kind, 0.0, 0, tuple(0.0 for _ in arm.joints), 0.0, clear,
        sweep.singular_distance_on_segment(t2a, t2b),
        dict(zone_clearance or {}), tuple(warnings))
    return Plan((), summary, tuple(problems))


# --------------------------------------------------------------------------- ahead

@dataclass
class Prefetched:
    """The costly parts of many joint moves computed ahead, in one vectorised pass
    each (the dry run of a program, :func:`prefetch_joint_moves`): keep-out sweeps by
    their knots and tool-speed bounds by (start, step). A move finds its own results
    only when its knots are bit for bit the ones prefetched; anything else is computed
    as usual, so the plan is the same either way."""

    sweeps: dict[bytes, sweep.SweepResult] = field(default_factory=dict)
    gains: dict[bytes, float] = field(default_factory=dict)
    goals: dict[tuple, tuple] = field(default_factory=dict)   # (start, target, branch) -> _joint_goal

    def joint_goal(self, arm: Arm, q0: np.ndarray, tgt: tuple[float, ...], want: Branch | None):
        found = self.goals.get((q0.tobytes(), tgt, want))
        if found is None:
            return _joint_goal(arm, q0, tgt, want)
        refused, goal, branch, warnings = found
        return refused, goal, branch, None if warnings is None else list(warnings)

    def sweep(self, arm: Arm, knots: np.ndarray) -> sweep.SweepResult:
        found = self.sweeps.get(knots.tobytes())
        return found if found is not None else sweep.sweep_zones(arm, knots)

    def gain(self, arm: Arm, q0: np.ndarray, dq: np.ndarray) -> float:
        found = self.gains.get(q0.tobytes() + dq.tobytes())
        if found is not None:
            return found
        return float(sweep.tool_speed_gain(arm, q0[None], dq[None], samples=JOINT_GAIN_SAMPLES)[0])


def prefetch_joint_moves(arm: Arm, moves: Sequence[np.ndarray],
                         ahead: Prefetched | None = None) -> Prefetched:
    """Sweeps and tool-speed bounds of joint moves ``moves`` (each knots [start, goal],
    as :func:`joint_move_knots` gives), all at once, added to ``ahead`` (or a new one)."""
    ahead = Prefetched() if ahead is None else ahead
    if not moves:
        return ahead
    knots = [np.asarray(k, dtype=float) for k in moves]
    for k, result in zip(knots, sweep.sweep_zones_many(arm, knots)):
        ahead.sweeps[k.tobytes()] = result
    q0 = np.array([k[0] for k in knots])
    dq = np.array([k[1] - k[0] for k in knots])
    gains = sweep.tool_speed_gain(arm, q0, dq, samples=JOINT_GAIN_SAMPLES)
    for a, d, g in zip(q0, dq, gains.tolist()):
        ahead.gains[a.tobytes() + d.tobytes()] = g
    return ahead


# --------------------------------------------------------------------------- joint moves

def plan_joint_move(arm: Arm, start: Sequence[float], end: Sequence[float], *,
                    speed_pct: float = 100.0) -> Plan:
    """A synchronised joint move from ``start`` to ``end`` (joint values, rad/mm).

    Timing: the path q(s) = start + s (end - start) with s from 0 to 1 has rate caps
    V = min(p max_speed_i / |dq_i|, p cap / G), p the override fraction and G the
    bound of the tool speed per unit rate (sweep.tool_speed_gain), and acceleration
    cap A = min(max_accel_i / |dq_i|); profile.trapezoid_segments cuts it into
    whole-ms segments; the result is verified (profile.fit_durations).

    Raises:
        TargetError: wrong length, non-finite values, override outside (0, 100].
    """
    p = _check_pct(speed_pct)
    q0 = np.array(solve.check_joints(arm, start))
    q1 = np.array(solve.check_joints(arm, end))
    return _joint_plan(arm, q0, q1, p, branch_of(arm, q1), [])


def _joint_plan(arm: Arm, q0: np.ndarray, q1: np.ndarray, p: float, branch: Branch | None,
                warnings: list[str], ahead: Prefetched | None = None) -> Plan:
    dq = q1 - q0
    vmax, amax = _limits(arm, p)
    b0 = branch_of(arm, q0)
    change = b0 is not None and branch is not None and b0 != branch
    if change:
        warnings.append(f"branch change: {b0} to {branch}; the elbow swings through a "
                        "singular pose (the sweep is checked)")
    where = lambda k: "at the start" if k == 0 else "at the end"  # noqa: E731
    knots = np.vstack([q0, q1])
    problems, limit_warn, clear, sing = _path_findings(arm, knots, where)
    warnings += limit_warn
    end_sing = solve.singularity_words(arm, float(q1[1] + arm.joints[1].offset_rad))
    if end_sing:
        warnings.append(f"at the end: {end_sing}")
    sw = sweep.sweep_zones(arm, knots) if ahead is None else ahead.sweep(arm, knots)
    if sw.contact is not None:
        problems.append(_zone_words(arm, sw.contact, f"at {100 * sw.contact.tau:.0f}% of the move"))
    if problems:
        return _refused(arm, JOINT, q0, q1, branch, problems, warnings, sw.clearance_mm)
    if np.abs(dq).max() <= NO_MOTION:
        warnings.append("no motion: already there")
        q_seg, t_seg = np.empty((0, arm.n_joints)), np.empty(0)
        peak_w, peak_tool = tuple(0.0 for _ in arm.joints), 0.0
    else:
        moving = np.abs(dq) > NO_MOTION
        v_rate = float((vmax[moving] / np.abs(dq[moving])).min())
        a_rate = float((amax[moving] / np.abs(dq[moving])).min())
        gain = (float(sweep.tool_speed_gain(arm, q0[None], dq[None], samples=JOINT_GAIN_SAMPLES)[0])
                if ahead is None else ahead.gain(arm, q0, dq))
        cap = p * arm.tool_speed_max_mm_s
        if gain > 0 and cap / gain < v_rate:
            v_rate = cap / gain
            warnings.append(f"speed reduced by the tool speed cap of {cap:g} mm/s")
        pieces = profile.trapezoid_segments(v_rate, a_rate)
        s = np.array([x for x, _ in pieces])
        q_seg = q0 + s[:, None] * dq
        prev = np.vstack([q0, q_seg[:-1]])
        gains = sweep.tool_speed_gain(arm, prev, q_seg - prev)
        t, stretch = profile.fit_durations(q0, q_seg, np.array([t for _, t in pieces]),
                                           vmax, amax, gains, cap)
        q_cut, t_seg = profile.split_long(q0, q_seg, t)
        same = q_cut.shape == q_seg.shape and bool((q_cut == q_seg).all())  # nothing was cut
        q_seg = q_cut
        peak_w, peak_tool = _peaks(arm, q0, q_seg, t_seg, gains if same else None)
    if p < 1.0:
        warnings.append(f"speed override {100 * p:g}%")
    summary = PlanSummary(
        tuple(map(float, q0)), tuple(map(float, q1)), solve.tool_from_joints(arm, q0),
        solve.tool_from_joints(arm, q1), branch, change, JOINT, float(t_seg.sum()),
        len(t_seg), peak_w, peak_tool, clear, sing, sw.clearance_mm, tuple(warnings))
    return Plan(_segments(q_seg, t_seg), summary, ())


# --------------------------------------------------------------------------- line moves

@dataclass
class _Line:
    """The tool line p(u) = p0 + u (p1 - p0), u in [0, 1], and its IK on one branch."""

    arm: Arm
    branch_row: int
    p0: np.ndarray          # x, y, z (z = 0 planar)
    p1: np.ndarray
    roll0: float
    droll: float
    length_mm: float
    table_u: np.ndarray
    table_q: np.ndarray

    def targets(self, u: np.ndarray) -> np.ndarray:
        pts = self.p0 + u[:, None] * (self.p1 - self.p0)
        if self.arm.is_scara:
            return np.column_stack([pts, self.roll0 + u * self.droll])
        return pts[:, :2]

    def raw_joints(self, u: np.ndarray) -> np.ndarray:
        """IK on the branch (benchjog.kinematics.planar.thetas_from_tool_xy_batch and the SCARA
        quill and roll rows of benchjog.kinematics.scara), not yet made continuous."""
        arm = self.arm
        pts = self.p0 + u[:, None] * (self.p1 - self.p0)
        t1, t2, _, _ = planar.thetas_from_tool_xy_batch(arm.link1_mm, arm.link2_mm,
                                                        pts[:, 0], pts[:, 1])
        t1, t2 = t1[self.branch_row], t2[self.branch_row]
        cols = [t1 - arm.joints[0].offset_rad, t2 - arm.joints[1].offset_rad]
        if arm.is_scara:
            cols += [np.full(u.shape, scara.quill_from_z(arm, 0.0)) - pts[:, 2],
                     scara.roll_joint_from_heading(arm, t1, t2, self.roll0 + u * self.droll)]
        return np.column_stack(cols)

    def joints(self, u: np.ndarray) -> np.ndarray:
        """IK on the branch, each revolute value made continuous with the table."""
        raw = self.raw_joints(u)
        ref = np.column_stack([np.interp(u, self.table_u, self.table_q[:, i])
                               for i in range(raw.shape[1])])
        for i, j in enumerate(self.arm.joints):
            if j.is_revolute:
                raw[:, i] += TWO_PI * np.round((ref[:, i] - raw[:, i]) / TWO_PI)
        return raw

    def where(self, u: float) -> str:
        if self.length_mm > 0:
            return f"at {u * self.length_mm:.1f} mm from the start"
        return f"at {100 * u:.0f}% of the turn"

    def deviation(self, qa: np.ndarray, qb: np.ndarray) -> np.ndarray:
        """Max distance of the FK of each joint chord qa -> qb[c] from the line
        segment, sampled at DEVIATION_SAMPLES points and refined by a parabola
        through the largest sample and its neighbours. ``qa``: one start (n_joints,)
        for every chord, or one per chord (n, n_joints)."""
        arm = self.arm
        tau = _TAU[None, :]
        o1, o2 = arm.joints[0].offset_rad, arm.joints[1].offset_rad
        qa = np.broadcast_to(qa, qb.shape)  # one start for all chords, or one per chord
        t1 = (qa[:, 0, None] + o1) + tau * (qb[:, 0, None] - qa[:, 0, None])
        t12 = t1 + (qa[:, 1, None] + o2) + tau * (qb[:, 1, None] - qa[:, 1, None])
        rx = arm.link1_mm * np.cos(t1) + arm.link2_mm * np.cos(t12) - self.p0[0]
        ry = arm.link1_mm * np.sin(t1) + arm.link2_mm * np.sin(t12) - self.p0[1]
        d = self.p1 - self.p0
        if arm.is_scara:
            rz = -(tau * (qb[:, 2, None] - qa[:, 2, None])
                   + (qa[:, 2, None] - q3_at(arm, self.p0[2])))
        else:
            rz = 0.0
        dd = float(d @ d)
        if dd > 0:
            s = np.clip((rx * d[0] + ry * d[1] + rz * d[2]) / dd, 0.0, 1.0)
            rx = rx - s * d[0]
            ry = ry - s * d[1]
            rz = rz - s * d[2]
        dist = np.sqrt(rx * rx + ry * ry + rz * rz)
        k = np.clip(dist.argmax(axis=1), 1, DEVIATION_SAMPLES - 2)
        rows = np.arange(len(k))
        ym, y0, yp = dist[rows, k - 1], dist[rows, k], dist[rows, k + 1]
        curv = 2 * y0 - ym - yp
        with np.errstate(divide="ignore", invalid="ignore"):
            vertex = np.where(curv > 0, y0 + (yp - ym) ** 2 / (8 * curv), y0)
        vertex = np.minimum(vertex, y0 + np.abs(yp - ym))
        return np.maximum(dist.max(axis=1), vertex)


_TAU = np.linspace(0.0, 1.0, DEVIATION_SAMPLES)


def q3_at(arm: Arm, z_mm: float) -> float:
    """The quill value at tool height z (benchjog.kinematics.scara.quill_from_z)."""
    return scara.quill_from_z(arm, z_mm)


def _line_setup(arm: Arm, q0: np.ndarray, target: tuple[float, ...], branch: Branch
                ) -> tuple[_Line | None, list[str]]:
    """The line and its dense IK table, or the refusal reasons (reach, singularity)."""
    tool0 = solve.tool_from_joints(arm, q0)
    p0 = np.array([tool0[0], tool0[1], tool0[2] if arm.is_scara else 0.0])
    p1 = np.array([target[0], target[1], target[2] if arm.is_scara else 0.0])
    length = float(np.linalg.norm(p1 - p0))
    roll0 = tool0[3] if arm.is_scara else 0.0
    droll = math.remainder(target[3] - roll0, TWO_PI) if arm.is_scara else 0.0
    where = (lambda u: f"at {u * length:.1f} mm from the start") if length > 0 else \
        (lambda u: f"at {100 * u:.0f}% of the turn")
    problems = []
    ik = solve.joints_from_tool(arm, target)
    if not ik.reachable:
        return None, [f"out of reach at the end ({length:.1f} mm from the start): "
                      + "; ".join(ik.warnings)]
    # reach and singular bands: r(u) = |p(u)| in the base plane is convex in u
    a1, a2 = arm.link1_mm, arm.link2_mm
    thr = arm.singularity_warn_rad
    r_hi = math.sqrt(a1 * a1 + a2 * a2 + 2 * a1 * a2 * math.cos(thr))
    r_lo = math.sqrt(max(0.0, a1 * a1 + a2 * a2 - 2 * a1 * a2 * math.cos(thr)))
    c, d = p0[:2], (p1 - p0)[:2]
    aa, bb, cc = float(d @ d), 2 * float(c @ d), float(c @ c)

    def first_below(radius: float) -> float | None:
        # first u in [0, 1] with |c + u d| < radius
        if cc < radius * radius:
            return 0.0
        if aa == 0:
            return None
        disc = bb * bb - 4 * aa * (cc - radius * radius)
        if disc <= 0:
            return None
        u = (-bb - math.sqrt(disc)) / (2 * aa)
        return u if 0.0 <= u <= 1.0 else None

    def first_above(radius: float) -> float | None:
        if cc > radius * radius:
            return 0.0
        end = aa + bb + cc
        if end <= radius * radius:
            return None
        disc = bb * bb - 4 * aa * (cc - radius * radius)
        return (-bb + math.sqrt(disc)) / (2 * aa)

    u_hole = first_below(arm.min_reach_mm)
    if u_hole is not None and u_hole > 0:
        problems.append(f"out of reach {where(u_hole)}: the line passes inside the min reach "
                        f"{arm.min_reach_mm:g} mm around the shoulder")
    u_fold = first_below(r_lo) if r_lo > 0 or thr > 0 else None
    u_stretch = first_above(r_hi)
    for u, kind in sorted(((u, k) for u, k in ((u_fold, "folded"), (u_stretch, "stretched"))
                           if u is not None), key=lambda x: x[0]):
        problems.append(f"singularity {where(u)}: the elbow comes within "
                        f"{math.degrees(thr):g} deg of {kind}")
    if problems:
        return None, problems
    line = _Line(arm, 0 if branch is Branch.ELBOW_DOWN else 1, p0, p1, roll0, droll, length,
                 np.zeros(0), np.zeros((0, arm.n_joints)))
    if arm.is_scara:
        # turn the roll the way that ends within the roll joint's limits, shortest first
        j4 = arm.joints[3]
        for cand in (droll, droll - math.copysign(TWO_PI, droll or 1.0)):
            line.droll = cand
            end4 = _continuous_table(line, q0, 65)[1][-1, 3]
            if j4.min - 1e-9 <= end4 <= j4.max + 1e-9:
                break
        else:
            line.droll = droll
    n = int(min(DENSE_MAX, max(DENSE_MIN, math.ceil(length / DENSE_STEP_MM) + 1)))
    line.table_u, line.table_q = _continuous_table(line, q0, n)
    return line, []


def _continuous_table(line: _Line, q0: np.ndarray, n: int) -> tuple[np.ndarray, np.ndarray]:
    u = np.linspace(0.0, 1.0, n)
    q = line.raw_joints(u)
    for i, j in enumerate(line.arm.joints):
        if j.is_revolute:
            q[:, i] = np.unwrap(q[:, i])
            q[:, i] += TWO_PI * round((q0[i] - q[0, i]) / TWO_PI)
    return u, q


def _table_limit_problems(arm: Arm, line: _Line) -> list[str]:
    """Joints beyond their limits along the line (dense table; the crossing located by
    linear interpolation between table poses)."""
    out = []
    u, q = line.table_u, line.table_q
    for i, joint in enumerate(arm.joints):
        for bound, over in ((joint.max, q[:, i] > joint.max + 1e-9),
                            (joint.min, q[:, i] < joint.min - 1e-9)):
            if over[0] or not over.any():
                continue
            k = int(np.argmax(over))
            frac = (bound - q[k - 1, i]) / (q[k, i] - q[k - 1, i])
            ux = float(u[k - 1] + frac * (u[k] - u[k - 1]))
            out.append((ux, f"joint limit {line.where(ux)}: "
                            f"{limit_problem(joint, float(q[k, i]))}"))
    return [w for _, w in sorted(out)]


def _balanced_knots(line: _Line, q0: np.ndarray, tol: float
                    ) -> tuple[np.ndarray, np.ndarray] | None:
    """Knots whose chords all stay within ``tol`` of the line (the same acceptance test
    as :func:`_greedy_knots`: sampled deviation <= DEVIATION_SAFETY tol), found with a
    few vectorised passes instead of one search per knot; None when the passes do not
    settle (the caller then cuts greedily).

    A short chord of length h deviates by about c(u) h^2 (the sagitta law), so a chord
    within the limit spans about sqrt(limit / c), and a split into n chords of equal
    "sagitta measure" N(u) = integral sqrt(c / limit) du, n = ceil(N(1) (1 + margin)),
    meets the limit on every chord with a little to spare. Each pass measures the
    deviation of every chord of the current split, estimates sqrt(c) at the chords'
    middles as sqrt(deviation) / h (interpolated linearly in between), and splits
    again; a split is accepted once every one of its chords passes (never the first,
    uniform, split: it only starts the estimate)."""
    limit = tol * DEVIATION_SAFETY
    grid = line.table_u
    u = np.linspace(0.0, 1.0, BALANCE_FIRST_CHORDS + 1)
    margin = BALANCE_MARGIN
    for rnd in range(BALANCE_PASSES):
        q = np.vstack([q0, line.joints(u[1:])])
        dev = line.deviation(q[:-1], q[1:])
        ok = dev <= limit
        if rnd and ok.all():
            return u, q
        if rnd and not ok.all():
            margin *= 2.0  # a missed split: aim lower next time
        du = np.diff(u)
        rho = np.sqrt(np.maximum(dev, 0.0) / limit) / du  # chords per unit of u
        if not np.isfinite(rho).all():
            return None
        dens = np.interp(grid, (u[:-1] + u[1:]) / 2.0, rho)
        dens += 1e-9 * float(dens.max()) + 1e-12  # keep N(u) strictly increasing
        cum = np.concatenate([[0.0], np.cumsum((dens[1:] + dens[:-1]) / 2.0 * np.diff(grid))])
        step = 1.0 / (1.0 + margin)
        n = max(1, math.ceil(cum[-1] / step))
        spare = n * step - cum[-1]  # taken off the first and the last chord, half each
        marks = np.minimum(step * np.arange(n + 1) - spare / 2.0, cum[-1])
        marks[0] = 0.0
        u = np.interp(marks, cum, grid)
        u[0], u[-1] = 0.0, 1.0
    return None


def _greedy_knots(line: _Line, q0: np.ndarray, tol: float) -> tuple[np.ndarray, np.ndarray]:
    """From each knot, the longest step of the line parameter whose joint chord stays
    within ``tol`` of the line: 15 candidate steps 3.2 % apart around a predicted step
    are evaluated at once, and the largest whose candidates all pass is taken (a
    deviation of a short chord grows as the square of its length, the sagitta law, so
    the prediction is the last step scaled by sqrt(tol / deviation))."""
    limit = tol * DEVIATION_SAFETY
    us, qs = [0.0], [q0]
    ua, qa = 0.0, q0
    h = 1.0
    while ua < 1.0:
        accepted = None
        for _ in range(40):
            cand = np.unique(np.minimum(ua + h * CANDIDATE_FACTORS, 1.0))
            qb = line.joints(cand)
            dev = line.deviation(qa, qb)
            ok = dev <= limit
            prefix = int(np.argmin(ok)) if not ok.all() else len(ok)
            if prefix == 0:
                h = (cand[0] - ua) * max(0.1, min(0.9, math.sqrt(limit / dev[0]) * 0.95))
                if h < 1e-12:
                    raise ArithmeticError("the line tolerance cannot be met")
                continue
            best = prefix - 1
            accepted = (cand[best], qb[best], dev[best])
            if prefix == len(ok) and cand[-1] < 1.0:
                grow = math.sqrt(limit / dev[-1]) if dev[-1] > 0 else 4.0
                h = (cand[-1] - ua) * min(4.0, max(1.05, grow)) / CANDIDATE_FACTORS[10]
                continue
            break
        ub, qb_best, dev_best = accepted
        h = (ub - ua) if ub < 1.0 else h
        ua, qa = float(ub), qb_best
        us.append(ua)
        qs.append(qa)
    return np.array(us), np.array(qs)


def _line_timing(arm: Arm, q0: np.ndarray, u: np.ndarray, q: np.ndarray, p: float):
    """Speed caps and durations of the pieces of a line.

    Per piece j (line-parameter length du_j, joint step dQ_j, g_j = dQ_j / du_j):
    speed cap (u per s) = min(p cap du_j / G_j, p max_speed_i du_j / |dQ_ji|), G_j
    the tool-speed bound of the piece; tangential acceleration cap of u:
    max_accel_i / (2 |g_ji|) over the piece and its neighbours. The discrete joint
    acceleration at a junction splits as g_{j+1} (w'_{j+1} - w'_j) + (g_{j+1} - g_j) w'_j
    (w' the mean u-rates); the first term is then <= max_accel / 2 times the mean
    duration (profile module docstring), and capping both pieces' speed at
    sqrt(max_accel_i (du_j + du_{j+1}) / (4 |g_{j+1,i} - g_{j,i}|)) keeps the second
    below the other half. The result is verified and stretched if needed.
    """
    vmax, amax = _limits(arm, p)
    du = np.diff(u)
    dq = np.diff(q, axis=0)
    g = dq / du[:, None]
    gain = sweep.tool_speed_gain(arm, q[:-1], dq)
    cap = p * arm.tool_speed_max_mm_s
    with np.errstate(divide="ignore"):
        v_tool = np.where(gain > 0, cap * du / gain, np.inf)
        v_joint = (vmax[None, :] * du[:, None] / np.abs(dq)).min(axis=1)
        a_seg = (amax[None, :] / (2 * np.abs(g))).min(axis=1)
    vlim = np.minimum(v_tool, v_joint)
    reason = np.where(v_tool <= v_joint, "tool", "joint")
    if len(du) > 1:
        with np.errstate(divide="ignore"):
            cj = np.sqrt(amax[None, :] * (du[:-1] + du[1:])[:, None]
                         / (4 * np.abs(g[1:] - g[:-1]))).min(axis=1)
        curv = np.minimum(np.concatenate([cj, [np.inf]]), np.concatenate([[np.inf], cj]))
        reason = np.where(curv < vlim, "joint", reason)
        vlim = np.minimum(vlim, curv)
    a_lim = a_seg.copy()
    a_lim[1:] = np.minimum(a_lim[1:], a_seg[:-1])
    a_lim[:-1] = np.minimum(a_lim[:-1], a_seg[1:])
    # A piece whose joints do not move has no cap from them: bound it by the rest of the
    # line instead of infinity, so the speed profile never meets inf - inf.
    finite = np.isfinite(vlim)
    vlim = np.where(finite, vlim, vlim[finite].max() if finite.any() else 1.0)
    finite_a = np.isfinite(a_lim)
    a_lim = np.where(finite_a, a_lim, a_lim[finite_a].max() if finite_a.any() else 1.0)
    v, peak, t = profile.line_speeds(du, vlim, a_lim)
    return vlim, reason, v, peak, t, gain, a_lim


def check_tolerance(tolerance_mm: float) -> float:
    """A line's chordal tolerance (mm) if it is within the planner's bounds, else a
    TargetError in words.

    >>> check_tolerance(0.01)
    0.01
    """
    tol = float(tolerance_mm)
    if not (math.isfinite(tol) and LINE_TOLERANCE_MIN_MM <= tol <= LINE_TOLERANCE_MAX_MM):
        raise TargetError(f"line tolerance must be {LINE_TOLERANCE_MIN_MM:g}..{LINE_TOLERANCE_MAX_MM:g}"
                          f" mm ({tol:g})")
    return tol


def _whole_ms_knots(line: _Line, q0: np.ndarray, u: np.ndarray, v: np.ndarray,
                    peak: np.ndarray, a_lim: np.ndarray, t: np.ndarray, tol: float
                    ) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
    """Knots placed at whole milliseconds of the continuous speed profile.

    The wire takes whole-ms segments. Rounding each chord's duration up (a 5 ms chord
    becomes 6 ms) and stretching all of them to match slows a tight line by up to 2x;
    instead each knot moves to the whole millisecond at or before the time the
    continuous profile reaches it, so the rounding remainder is carried along and only
    the last segment ends up to 1 ms late. A moved chord that leaves ``tol`` is split
    at its middle millisecond. Because every segment is the average of the continuous
    profile over its interval, the discrete speeds and accelerations stay within what
    the profile respects (profile module docstring); fit_durations still verifies.

    Returns:
        (u, q, durations) with q[0] = q0, or None when a 1 ms chord would still leave
        the tolerance (the caller then rounds up and stretches, as before).
    """
    du = np.diff(u)
    ends = np.cumsum(t)
    end_ms = max(1, math.ceil(ends[-1] / profile.MS - 1e-6))
    marks = np.unique(np.floor(ends[:-1] / profile.MS + 1e-6).astype(np.int64))
    marks = np.append(marks[(marks > 0) & (marks < end_ms)], end_ms)
    for _ in range(30):
        un = profile.line_positions(du, v, peak, a_lim, t, marks * profile.MS)
        un[-1] = 1.0
        qn = line.joints(un)
        qa = np.vstack([q0[None, :], qn[:-1]])
        bad = np.flatnonzero(line.deviation(qa, qn) > tol)
        if not bad.size:
            durations = np.diff(np.concatenate([[0], marks])) * profile.MS
            return np.concatenate([[0.0], un]), np.vstack([q0[None, :], qn]), durations
        lo = np.concatenate([[0], marks])[bad]
        hi = marks[bad]
        if (hi - lo < 2).any():
            return None
        marks = np.unique(np.concatenate([marks, (lo + hi) // 2]))
    return None


def plan_line_move(arm: Arm, start: Sequence[float], target: Sequence[float], *,
                   branch: Branch | str | None = None, speed_pct: float = 100.0,
                   tolerance_mm: float = LINE_TOLERANCE_MM) -> Plan:
    """A straight tool line from the pose at ``start`` to the tool ``target``
    (solve.check_target shape), on the start's branch.

    Refuses (problems, no segments) a line that leaves the reach, comes within the
    arm's singularity threshold, needs a joint beyond its limit, or sweeps a link into
    a keep-out zone, saying where along the line.

    Raises:
        TargetError: bad target, joints, override, tolerance or branch name.
    """
    p = _check_pct(speed_pct)
    q0 = np.array(solve.check_joints(arm, start))
    tgt = solve.check_target(arm, target)
    want = _check_branch(branch)
    tol = check_tolerance(tolerance_mm)
    b0 = branch_of(arm, q0)
    if b0 is None:
        return _refused(arm, LINE, q0, None, None, [
            "singularity at 0.0 mm from the start: the arm is fully stretched or folded, "
            "so a line cannot choose a branch; make a joint move first"])
    if want is not None and want != b0:
        return _refused(arm, LINE, q0, None, b0, [
            f"a straight line stays on one branch: the arm is {b0}, {want} was asked; "
            "use a joint move to change branch"])
    line, problems = _line_setup(arm, q0, tgt, b0)
    if line is None:
        return _refused(arm, LINE, q0, None, b0, problems)
    q_end = line.table_q[-1]
    problems = _table_limit_problems(arm, line)
    if problems:
        return _refused(arm, LINE, q0, q_end, b0, problems)
    warnings: list[str] = []
    if (line.length_mm == 0 and line.droll == 0) or np.abs(q_end - q0).max() <= LINE_NO_MOTION:
        return _joint_plan(arm, q0, q_end, p, b0, warnings)  # nothing (measurable) to draw
    knots = _balanced_knots(line, q0, tol)
    u, q = knots if knots is not None else _greedy_knots(line, q0, tol)
    chord_count = len(u) - 1
    for _ in range(12):  # subdivide pieces that span too much of the speed ramp
        vlim, reason, v, peak, t, gain, a_lim = _line_timing(arm, q0, u, q, p)
        top = float(peak.max())
        span = np.maximum(peak - v[:-1], peak - v[1:])
        wide = np.flatnonzero(span > top / profile.LINE_RAMP_SEGMENTS * (1 + 1e-9))
        if not wide.size:
            break
        mids = (u[wide] + u[wide + 1]) / 2
        u = np.insert(u, wide + 1, mids)
        q = np.insert(q, wide + 1, line.joints(mids), axis=0)
    vmax, amax = _limits(arm, p)
    continuous_s = float(t.sum())
    u_timing = u  # the knots the speed caps were computed on (for the words below)
    whole = _whole_ms_knots(line, q0, u, v, peak, a_lim, t, tol)
    if whole is not None:  # knots at whole ms of the continuous profile: no rounding up
        u, q, t = whole
        gain = sweep.tool_speed_gain(arm, q[:-1], np.diff(q, axis=0))
    t, stretch = profile.fit_durations(q0, q[1:], t, vmax, amax, gain,
                                       p * arm.tool_speed_max_mm_s)
    where_knot = lambda k: line.where(float(u[k]))  # noqa: E731
    lim_problems, lim_warn, clear, sing = _path_findings(arm, q, where_knot)
    warnings += lim_warn
    if sing < arm.singularity_warn_rad:
        lim_problems.append(f"singularity: the elbow comes within {math.degrees(sing):.2f} deg "
                            "of a singular pose between knots")
    sw = sweep.sweep_zones(arm, q)
    if sw.contact is not None:
        c = sw.contact
        uc = float(u[c.segment] + c.tau * (u[c.segment + 1] - u[c.segment]))
        lim_problems.append(_zone_words(arm, c, line.where(uc)))
    if lim_problems:
        return _refused(arm, LINE, q0, q[-1], b0, lim_problems, warnings, sw.clearance_mm)
    q_seg, t_seg = profile.split_long(q0, q[1:], t)
    peak_w, peak_tool = _peaks(arm, q0, q_seg, t_seg)
    cap = p * arm.tool_speed_max_mm_s
    top = float(peak.max())
    if line.length_mm > 0:
        if (reason == "joint").any() and (vlim <= top * 1.000001)[reason == "joint"].any():
            k = int(np.flatnonzero(reason == "joint")[np.argmin(vlim[reason == "joint"])])
            slow = vlim[k] * line.length_mm
            if slow < cap * 0.999:
                warnings.append(f"speed reduced to {slow:.1f} mm/s by joint speed or "
                                f"acceleration limits {line.where(float(u_timing[k]))}")
        if peak_tool >= cap * 0.98:
            warnings.append(f"speed limited by the tool speed cap of {cap:g} mm/s")
    if stretch > 1.0 + 1e-6:
        warnings.append(f"timing stretched by {100 * (stretch - 1):.1f}% to keep within limits")
    if p < 1.0:
        warnings.append(f"speed override {100 * p:g}%")
    summary = PlanSummary(
        tuple(map(float, q0)), tuple(map(float, q[-1])), solve.tool_from_joints(arm, q0),
        solve.tool_from_joints(arm, q[-1]), b0, False, LINE, float(t_seg.sum()), len(t_seg),
        peak_w, peak_tool, clear, sing, sw.clearance_mm, tuple(warnings),
        tolerance_mm=tol, chord_count=chord_count, continuous_s=continuous_s)
    return Plan(_segments(q_seg, t_seg), summary, ())


# --------------------------------------------------------------------------- front doors

def nearest_equivalent(arm: Arm, start: Sequence[float], goal: Sequence[float],
                       ) -> tuple[float, ...]:
    """The goal with each revolute joint moved by whole turns to the equivalent that lies
    within its limits and nearest the start: a joint move then never swings a joint a
    full turn when a shorter way to the same pose exists (limits wider than +/-180 deg).

    >>> from benchjog.console.cell.armfile import builtin_arm
    >>> import dataclasses
    >>> arm = builtin_arm("planar-bench")
    >>> wide = dataclasses.replace(arm.joints[0], min=-math.radians(200), max=math.radians(200))
    >>> arm = dataclasses.replace(arm, joints=(wide,) + arm.joints[1:])
    >>> goal = nearest_equivalent(arm, (math.radians(185), 0.0), (math.radians(-175), 0.0))
    >>> round(math.degrees(goal[0]), 9)
    185.0
    """
    out = []
    for joint, a, b in zip(arm.joints, start, goal):
        if joint.is_revolute:
            k_lo = math.ceil((joint.min - 1e-9 - b) / (2 * math.pi))
            k_hi = math.floor((joint.max + 1e-9 - b) / (2 * math.pi))
            choices = [b + 2 * math.pi * k for k in range(k_lo, k_hi + 1)] or [b]
            b = min(choices, key=lambda v: abs(v - a))
        out.append(float(b))
    return tuple(out)


def _joint_distance_s(arm: Arm, a: Sequence[float], b: Sequence[float]) -> float:
    """How far apart two poses are, as the synchronised move time at full joint speed
    (max_i |b_i - a_i| / max_speed_i): comparable across rad and mm."""
    return max(abs(y - x) / j.max_speed for j, x, y in zip(arm.joints, a, b))


def plan_move(arm: Arm, start: Sequence[float], target: Sequence[float], *,
              branch: Branch | str | None = None, path: str = JOINT, speed_pct: float = 100.0,
              tolerance_mm: float = LINE_TOLERANCE_MM, ahead: Prefetched | None = None) -> Plan:
    """One move to a tool target (CONTRACT.md ``move``).

    ``branch`` None: for a joint move, the usable IK solution nearest the start joints
    (by :func:`_joint_distance_s`); a line keeps the start's branch. Refuses when the
    wanted (or every) solution is unusable.

    ``ahead``: results computed ahead for this move (:func:`prefetch_joint_moves`);
    the plan is the same with or without.

    Raises:
        TargetError: bad target, joints, override, path or branch name.
    """
    if path not in PATHS:
        raise TargetError(f"unknown path {path!r} (joint or line)")
    p = _check_pct(speed_pct)
    q0 = np.array(solve.check_joints(arm, start))
    tgt = solve.check_target(arm, target)
    want = _check_branch(branch)
    if path == LINE:
        return plan_line_move(arm, q0, tgt, branch=want, speed_pct=speed_pct,
                              tolerance_mm=tolerance_mm)
    refused, goal, goal_branch, warnings = (_joint_goal(arm, q0, tgt, want) if ahead is None
                                            else ahead.joint_goal(arm, q0, tgt, want))
    if refused is not None:
        return refused
    return _joint_plan(arm, q0, goal, p, goal_branch, warnings, ahead)


def _joint_goal(arm: Arm, q0: np.ndarray, tgt: tuple[float, ...], want: Branch | None):
    """The goal joints of a joint move to a checked target: (refused plan, None, None,
    None) when no solution can be used, else (None, goal, its branch, warnings)."""
    ik = solve.joints_from_tool(arm, tgt)
    if not ik.reachable:
        return _refused(arm, JOINT, q0, None, want, list(ik.warnings)), None, None, None
    if want is not None:
        sol = ik.solution(want)
        if sol is None or not sol.usable:
            why = "; ".join(sol.problems) if sol else "no such solution"
            return _refused(arm, JOINT, q0, None, want,
                            [f"no usable {want} solution for the target: {why}"]), None, None, None
    else:
        usable = ik.usable
        if not usable:
            why = "; ".join(f"{s.branch}: {'; '.join(s.problems)}" for s in ik.solutions)
            return _refused(arm, JOINT, q0, None, None,
                            [f"no usable IK solution for the target: {why}"]), None, None, None
        sol = min(usable, key=lambda s: _joint_distance_s(
            arm, q0, nearest_equivalent(arm, q0, s.joints)))
    goal = np.array(nearest_equivalent(arm, q0, sol.joints))
    branch = sol.branch if len(ik.solutions) > 1 else branch_of(arm, sol.joints)
    return None, goal, branch, list(ik.warnings)


def joint_move_knots(arm: Arm, start: Sequence[float], target: Sequence[float], *,
                     branch: Branch | str | None = None, ahead: Prefetched | None = None,
                     ) -> np.ndarray | None:
    """The knots [start, goal] that ``plan_move(path=JOINT)`` sweeps for this move, or
    None when it refuses before sweeping (no usable solution). For planning ahead
    (:func:`prefetch_joint_moves`); ``ahead`` keeps the goal found, for the move's own
    plan. Raises TargetError as :func:`plan_move`."""
    q0 = np.array(solve.check_joints(arm, start))
    tgt, want = solve.check_target(arm, target), _check_branch(branch)
    found = _joint_goal(arm, q0, tgt, want)
    if ahead is not None:
        ahead.goals[(q0.tobytes(), tgt, want)] = (found[0], found[1], found[2],
                                                 None if found[3] is None else tuple(found[3]))
    return None if found[0] is not None else np.vstack([q0, found[1]])


def joint_move_end(knots: np.ndarray) -> tuple[float, ...] | None:
    """Where the segments of a joint move through ``knots`` [start, goal] end when it
    is planned (the path parameter ends at exactly 1: start + 1.0 * (goal - start)),
    or None when nothing moves (no segments). For planning ahead only: a plan's own
    segments are what counts."""
    dq = knots[1] - knots[0]
    if np.abs(dq).max() <= NO_MOTION:
        return None
    return tuple((knots[0] + 1.0 * dq).tolist())


CARTESIAN_AXES = {"x": 0, "y": 1, "z": 2, "roll": 3}
JOINT_AXES = ("j1", "j2", "j3", "j4")


def plan_jog(arm: Arm, start: Sequence[float], axis: str, delta: float, *,
             path: str = LINE, speed_pct: float = 100.0,
             base: Sequence[float] | None = None) -> Plan:
    """One jog step from ``start``: ``axis`` "x", "y" (and on a SCARA "z", "roll"),
    delta in mm or rad, Cartesian, on the start's branch (a straight line, or a joint
    move with ``path=JOINT``); or "j1".."jn", a joint jog of delta rad/mm.

    ``base``: the joints the step is measured from, when not ``start`` (the commanded
    end of the previous motion, so that a run of jogs does not gather the rounding of
    the controller's counts: ten 1 mm steps make 10 mm). The motion still starts at
    ``start``, where the arm is.

    Raises:
        TargetError: unknown axis, non-finite delta, bad joints or override.
    """
    q0 = solve.check_joints(arm, start)
    _check_pct(speed_pct)
    d = float(delta)
    if not math.isfinite(d):
        raise TargetError(f"jog step is not a finite number ({d})")
    if path not in PATHS:
        raise TargetError(f"unknown path {path!r} (joint or line)")
    joint_axes = JOINT_AXES[:arm.n_joints]
    cart_axes = ("x", "y", "z", "roll") if arm.is_scara else ("x", "y")
    if axis in joint_axes:
        end = list(q0)
        end[joint_axes.index(axis)] += d
        return plan_joint_move(arm, q0, end, speed_pct=speed_pct)
    if axis not in cart_axes:
        raise TargetError(f"unknown jog axis {axis!r} for a {arm.geometry} arm "
                          f"({', '.join(cart_axes + joint_axes)})")
    tool = list(solve.tool_from_joints(arm, q0 if base is None else solve.check_joints(arm, base)))
    target = tool[:4] if arm.is_scara else tool[:2]
    target[CARTESIAN_AXES[axis]] += d
    if axis != "roll" and abs(d) > arm.jog_step_max_mm:
        return _refused(arm, path, q0, None, branch_of(arm, q0), [
            f"jog step {abs(d):g} mm exceeds the largest single jog step "
            f"{arm.jog_step_max_mm:g} mm"])
    b0 = branch_of(arm, q0)
    if path == LINE:
        return plan_line_move(arm, q0, target, speed_pct=speed_pct)
    return plan_move(arm, q0, target, branch=b0, path=JOINT, speed_pct=speed_pct)


__all__ = ["JOINT", "LINE", "Plan", "PlanSummary", "Prefetched", "plan_joint_move",
           "plan_line_move", "plan_move", "plan_jog", "branch_of", "joint_move_knots",
           "joint_move_end", "prefetch_joint_moves"]
