"""The safety gate: the one road from a wish to move to a driver's motion.

Everything that wants motion (the console, the command line, programs) asks an
:class:`Interlock` for a :class:`Proposal` (planning only, nothing moves), shows it, and
hands it back to :meth:`Interlock.execute` with a :class:`Confirmer`. The interlock holds
the only reference to the driver; no other module constructs or keeps one.

Before anything moves the gate checks, and refuses in words with the numbers:
- the driver: open, enabled, homed, nothing latched (e-stop, fault, link lost), its
  position fresh (last report under 0.5 s old), not already moving;
- the plan: every segment end within the soft limits less the arm's margin, the
  planner's reach, singularity and keep-out verdicts, the tool speed cap and each
  joint's speed cap, the cap on one jog step;
- the plan's whole swept path against the keep-out zones, by the gate itself (a plan
  with an empty problem list that drives into a zone is refused). A motion that starts
  inside a zone may only lead out of it: along the whole path its penetration never
  grows and it enters no other zone, at ESCAPE_SPEED_PCT of the speed caps;
- the approval: it binds to exactly that proposal (the very object the gate made, which
  is offered once, and its content: a digest of its actions), to the arm's position when
  it was made, to no stop since, and expires APPROVAL_TTL_S (10 s; a whole program:
  PROGRAM_APPROVAL_TTL_S, 60 s) after it was made;
- the journal: no motion starts while it cannot be written (``journal_error``).

:meth:`Interlock.stop` calls the driver's stop before anything else, from any thread;
the journal is written behind motion (drivers/journal.py) and never delays or prevents
a stop.

This is a software interlock, not a safety-rated function (README, Safety).
"""

from __future__ import annotations

import dataclasses
import hashlib
import itertools
import math
import threading
import time
from abc import ABC, abstractmethod
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from benchjog.drivers.base import Driver, DriverEvent, DriverState, LinkError, Mode
from benchjog.drivers.jog_session import (DEADMAN_S, TEACH_SPEED_MAX_MM_S, ActiveSession,
                                          SessionBounds, SessionError, SessionSlot, SessionStep,
                                          SessionView, frame_of, make_bounds, state_key,
                                          step_problems)
from benchjog.drivers.journal import Journal, NullJournal
from benchjog.drivers.registry import create_driver
from benchjog.kinematics.limits import fmt
from benchjog.kinematics.model import Arm, Segment
from benchjog.kinematics.planner import JOINT, LINE_TOLERANCE_MM, Plan, plan_jog, plan_joint_move, plan_move
from benchjog.kinematics.solve import check_joints, tool_from_joints
from benchjog.kinematics.sweep import (lever_mm, points_from_joints, sweep_zones,
                                       sweep_zones_many, z_step_mm, zone_gaps)
from benchjog.kinematics.scara import flange_z_mm

FRESH_S = 0.5              # the driver's position must be newer than this
STOP_SETTLE_S = 0.5        # a plan right after a stop waits this long for its fresh position
START_TOL_RAD = math.radians(0.05)  # the arm "has moved" beyond this since the proposal
START_TOL_MM = 0.05
SPEED_TOL = 1.01           # 1 % for the rounding of durations to whole milliseconds
JOINT_JOG_MAX_DEG = 15.0   # the largest single joint-jog step (deg, or mm on the quill)
TOOL_SPEED_SAMPLES = 8     # sub-samples per segment when bounding the tool speed
ESCAPE_SPEED_PCT = 25.0    # a motion out of a keep-out zone runs at this share of the caps
ESCAPE_STEP_MM = 0.02      # its penetration is sampled every this much motion of the arm ...
ESCAPE_SAMPLES_MAX = 20001  # ... with at most this many poses per segment
ESCAPE_TOL_MM = 1e-6       # rounding allowed when comparing penetrations
ISSUED_MAX = 64            # proposals waiting for an answer; older ones are dropped
AHEAD_MAX = 16             # jog plans made ahead of their key (prepare_session_jog)


@dataclass(frozen=True)
class Verdict:
    ok: bool
    reasons: tuple[str, ...] = ()

    @staticmethod
    def of(reasons: Sequence[str]) -> "Verdict":
        return Verdict(not reasons, tuple(reasons))


@dataclass(frozen=True)
class Dwell:
    seconds: float


@dataclass(frozen=True)
class SetOutput:
    channel: int
    on: bool


Action = Plan | Dwell | SetOutput


@dataclass
class _DryRunAhead:
    """Keep-out work done ahead for many plans of a dry run (Interlock.check_each):
    starts (pose bytes) clear of every zone, sweeps by their knots' bytes, and each
    segment's tool speed by the plan's knots and durations."""

    clear_starts: set[bytes] = dataclasses.field(default_factory=set)
    sweeps: dict[bytes, Any] = dataclasses.field(default_factory=dict)
    tool_speeds: dict[tuple, np.ndarray] = dataclasses.field(default_factory=dict)  # (knots, durations)


@dataclass(frozen=True)
class Proposal:
    """What the user is asked to confirm. Frozen; nothing has moved."""

    request: str
    actions: tuple[Action, ...]
    verdict: Verdict
    start_joints: tuple[float, ...]
    created_s: float
    token: int = 0
    notes: tuple[str, ...] = ()   # what the person must know: a zone escape, drives coming on
    enables: bool = False         # the drives are off and come on only after the yes

    @property
    def ok(self) -> bool:
        return self.verdict.ok

    @property
    def plans(self) -> tuple[Plan, ...]:
        return tuple(a for a in self.actions if isinstance(a, Plan))

    @property
    def duration_s(self) -> float:
        return sum(a.summary.duration_s if isinstance(a, Plan) else
                   a.seconds if isinstance(a, Dwell) else 0.0 for a in self.actions)

    def lines(self, arm: Arm) -> list[str]:
        """The text of the confirmation: request, plan summaries, refusal reasons."""
        out = [self.request]
        plans = self.plans
        for index, action in enumerate(self.actions):
            if isinstance(action, Plan):
                if len(plans) > 1:
                    out.append(f"step {index + 1}:")
                out.extend(("  " if len(plans) > 1 else "") + line for line in action.summary.lines(arm))
            elif isinstance(action, Dwell):
                out.append(f"step {index + 1}: dwell {action.seconds:g} s")
            else:
                out.append(f"step {index + 1}: output {action.channel} {'on' if action.on else 'off'}")
        if len(self.actions) > 1:
            out.append(f"total duration {self.duration_s:.2f} s")
        out.extend(f"NOTE: {note}" for note in self.notes)
        out.extend(f"REFUSED: {reason}" for reason in self.verdict.reasons)
        return out


class Confirmer(ABC):
    """Asks a person yes or no for a proposal (the console's modal, the CLI's prompt)."""

    @abstractmethod
    def confirm(self, proposal: Proposal) -> bool:
        """Blocking; True only for an explicit yes."""


@dataclass(frozen=True)
class RunResult:
    completed: bool
    outcome: str   # done, cancelled, refused, halted, stopped, expired
    detail: str
    segments_sent: int = 0
    step: int | None = None
    underruns: int = 0   # times the controller's queue ran empty mid-move (stop-and-go)


def _outside(joint: Any, margin: float, value: float) -> float:
    """How far a value lies inside the margin band or beyond a limit (0 when clear)."""
    return max(0.0, value - (joint.max - margin), (joint.min + margin) - value)


def _into_margin(joint: Any, margin: float, before: float, value: float) -> bool:
    """True when a segment end enters the margin band next to a soft limit, or goes
    deeper into it than where the segment started. An arm that rests in the band (a
    quill homed at its top stop) may move out of it, never further in, and never past
    the soft limit itself."""
    if value > joint.max + 1e-12 or value < joint.min - 1e-12:
        return True
    depth = _outside(joint, margin, value)
    return depth > 1e-12 and depth > _outside(joint, margin, before) + 1e-12


def wire_duration_s(duration_s: float) -> float:
    """A segment's duration as the drivers send it: whole milliseconds, at least 1
    (PROTOCOL.md MOVE). Speed caps are checked against this, not the planned value."""
    return max(1, round(duration_s * 1000.0)) / 1000.0


def _canon(value: Any) -> Any:
    """A canonical, exact text form of a proposal's parts for its digest."""
    if isinstance(value, float):
        return value.hex()
    if isinstance(value, (tuple, list)):
        return [_canon(v) for v in value]
    if isinstance(value, Plan):
        return ["plan", [[_canon(tuple(s.joints)), _canon(s.duration_s)] for s in value.segments],
                _canon(tuple(value.problems))]
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return [type(value).__name__] + [_canon(getattr(value, f.name))
                                         for f in dataclasses.fields(value)]
    return repr(value)


def proposal_digest(proposal: "Proposal") -> str:
    """SHA-256 over everything a proposal would do and everything it showed: the
    approval binds to this, so a proposal changed in place after it was made is refused."""
    parts = [proposal.request, _canon(proposal.actions), _canon(proposal.verdict.ok),
             _canon(proposal.verdict.reasons), _canon(tuple(proposal.start_joints)),
             _canon(proposal.created_s), proposal.token, _canon(proposal.notes), proposal.enables]
    return hashlib.sha256(repr(parts).encode("utf-8")).hexdigest()


def _box_signed_mm(px: np.ndarray, py: np.ndarray, zone: Any) -> np.ndarray:
    """Signed distance from points to a zone's footprint (negative inside: minus the
    distance to the nearest edge). Box: outside, the Euclidean distance; circle:
    |p - c| - r."""
    if zone.kind == "circle":
        return np.hypot(px - zone.cx, py - zone.cy) - zone.r
    dx = np.maximum(zone.x_min - px, px - zone.x_max)
    dy = np.maximum(zone.y_min - py, py - zone.y_max)
    outside = np.hypot(np.maximum(dx, 0.0), np.maximum(dy, 0.0))
    return np.where((dx > 0) | (dy > 0), outside, np.maximum(dx, dy))


def _segment_min_signed_mm(ax, ay, bx, by, zone, iterations: int = 64) -> np.ndarray:
    """The least signed distance of any point of segments ab to a zone. The signed
    distance to a convex set is a convex function, so along a segment it has one
    minimum: a ternary search finds it (to 1e-11 of the segment's length)."""
    lo = np.zeros_like(ax)
    hi = np.ones_like(ax)
    for _ in range(iterations):
        m1 = lo + (hi - lo) / 3.0
        m2 = hi - (hi - lo) / 3.0
        f1 = _box_signed_mm(ax + m1 * (bx - ax), ay + m1 * (by - ay), zone)
        f2 = _box_signed_mm(ax + m2 * (bx - ax), ay + m2 * (by - ay), zone)
        lower = f1 < f2
        hi = np.where(lower, m2, hi)
        lo = np.where(lower, lo, m1)
    t = (lo + hi) / 2.0
    ends = np.minimum(_box_signed_mm(ax, ay, zone), _box_signed_mm(bx, by, zone))
    return np.minimum(ends, _box_signed_mm(ax + t * (bx - ax), ay + t * (by - ay), zone))


def zone_penetrations_mm(arm: Arm, q: np.ndarray) -> np.ndarray:
    """How deep the arm is in each keep-out zone at joint arrays q (N, n_joints) -> (N, Z):
    the most any part would have to move (in the base plane, or in height on a SCARA)
    to be clear of the zone grown by the link clearance. > 0 exactly when a part is in
    the zone (as benchjog.kinematics.zones sees it); <= 0 clear.

    Worked example (by hand): the planar demo arm at joints (0, 90 deg) has its forearm
    on x = 220 mm from y = 0 to 160; a box x 210..250, y 100..200 holds the forearm's
    top, 10 mm inside the box's left edge, plus the 12 mm link clearance: 22 mm.

    >>> from benchjog.console.cell.armfile import builtin_arm
    >>> from benchjog.kinematics.model import Zone
    >>> box = Zone("fixture", "box", x_min=210.0, x_max=250.0, y_min=100.0, y_max=200.0)
    >>> arm = dataclasses.replace(builtin_arm("planar-bench"), zones=(box,))
    >>> round(float(zone_penetrations_mm(arm, [(0.0, math.pi / 2)])[0, 0]), 6)
    22.0
    """
    q = np.atleast_2d(np.asarray(q, dtype=float))
    elbow, tool = points_from_joints(arm, q)
    origin = np.zeros_like(elbow)
    inf = np.full(q.shape[0], math.inf)
    if arm.is_scara:
        j1 = arm.joints[0]
        flange = flange_z_mm(arm)
        tip = tool[:, 2]
        base = np.full(q.shape[0], j1.d_mm)
        top = np.full(q.shape[0], flange)
        parts = [(origin, elbow, base, base), (elbow, tool[:, :2], top, top),
                 (tool[:, :2], tool[:, :2], np.minimum(tip, flange), np.maximum(tip, flange))]
    else:
        parts = [(origin, elbow, -inf, inf), (elbow, tool[:, :2], -inf, inf)]
    margin = arm.link_clearance_mm
    out = np.full((q.shape[0], len(arm.zones)), -math.inf)
    for zi, zone in enumerate(arm.zones):
        for a, b, z_lo, z_hi in parts:
            planar = _segment_min_signed_mm(a[:, 0], a[:, 1], b[:, 0], b[:, 1], zone)
            with np.errstate(invalid="ignore"):
                z_gap = np.maximum(z_lo - zone.z_max, zone.z_min - z_hi)
            z_gap = np.nan_to_num(z_gap, nan=-math.inf, posinf=math.inf, neginf=-math.inf)
            out[:, zi] = np.maximum(out[:, zi], margin - np.maximum(planar, z_gap))
    return out


class SimHooks:
    """What tests may do to the simulated arm behind an interlock: inject trouble and
    read its command record. No motion calls."""

    def __init__(self, driver: Any):
        self._driver = driver

    def inject_estop(self) -> None:
        self._driver.inject_estop()

    def release_estop(self) -> None:
        self._driver.release_estop()

    def inject_fault(self, code: str = "DRIVE", axis: int = 0) -> None:
        self._driver.inject_fault(code, axis)

    def inject_stall(self, axis: int = 1) -> None:
        self._driver.inject_stall(axis)

    def tool_in_plate_mm(self) -> tuple[float, ...]:
        """The simulated bench's ruler: where the true arm's tool tip is on the plate."""
        return self._driver.tool_in_plate_mm()

    @property
    def commands(self) -> tuple:
        return tuple(self._driver.commands)


class Interlock:
    APPROVAL_TTL_S = 10.0          # a jog, a move, homing
    PROGRAM_APPROVAL_TTL_S = 60.0  # a whole program: its plan takes longer to read

    def approval_ttl_s(self, proposal: Proposal) -> float:
        """How long after it was made a proposal may still be confirmed."""
        return self.PROGRAM_APPROVAL_TTL_S if len(proposal.actions) > 1 else self.APPROVAL_TTL_S

    def __init__(self, arm: Arm, driver: Driver, *, journal: Journal | NullJournal | None = None,
                 clock: Callable[[], float] = time.monotonic, enable_on_yes: bool = False):
        self._arm = arm
        self.__driver = driver
        self._journal = journal if journal is not None else NullJournal()
        self._observers: tuple[Callable[..., None], ...] = ()   # watch(): read-only taps
        self._clock = clock
        self._stop = threading.Event()
        self._resume = threading.Event()
        self._resume.set()
        self._busy = threading.Lock()
        self._tokens = itertools.count(1)
        # Proposals made here, not yet used: token -> (proposal, digest, stop count).
        # The lock guards only the dict (never held over I/O or a driver call).
        self._issued: dict[int, tuple[Proposal, str, int]] = {}
        self._issued_lock = threading.Lock()
        self._stops = 0            # stop() calls so far: an approval made before one is void
        self._events: list[DriverEvent] = []
        self._events_lock = threading.Lock()
        self.sim = SimHooks(driver) if getattr(driver, "name", "") == "sim" else None
        self.link_error: str | None = None  # why the driver could not be opened, if so
        self._last_end: tuple[float, ...] | None = None  # where the last finished plan ended
        # Jog plans made ahead of their key (prepare_session_jog), by exactly what
        # plan_jog was given; each is taken at most once, by propose_jog.
        self._ahead: dict[tuple, Plan] = {}
        # ... and, for a first step, the session it would offer: that key and the
        # session's step -> (bounds, why the step cannot open it, the plan checked)
        self._ahead_offers: dict[tuple, tuple[SessionBounds, tuple[str, ...], Plan]] = {}
        self._ahead_lock = threading.Lock()
        # The command line: the drives stay off until the person says yes (then the gate
        # switches them on); the console leaves them to the person's drives key.
        self.enable_on_yes = enable_on_yes

    # -- life cycle --------------------------------------------------------------------
    @classmethod
    def open(cls, arm: Arm, driver: str = "sim", *, journal: Any = None,
             clock: Callable[[], float] = time.monotonic, require_link: bool = True,
             enable_on_yes: bool = False, **driver_options: Any) -> "Interlock":
        """Build the driver by registry name, open it, and wrap it.

        Args:
            journal: None for a new journal file in the user's state directory (rotated),
                a path (file) to append to, a Journal, or False for none.
            require_link: False lets a console start while the controller cannot be
                reached: the gate then reports "not connected" (``link_error`` says why)
                and :meth:`reset` tries to connect again.
            enable_on_yes: proposals may be made with the drives off; :meth:`execute`
                and :meth:`home` switch them on after the yes, never before.
        """
        if journal is None:
            journal_obj: Journal | NullJournal = Journal.for_run()
        elif journal is False:
            journal_obj = NullJournal()
        elif isinstance(journal, (Journal, NullJournal)):
            journal_obj = journal
        else:
            journal_obj = Journal(Path(journal))
        try:
            instance = create_driver(driver, arm, **driver_options)
        except BaseException:
            journal_obj.close()
            raise
        link_error = None
        try:
            instance.open()
        except LinkError as exc:
            if require_link:
                instance.close()
                journal_obj.close()
                raise
            link_error = str(exc)
        except BaseException:
            instance.close()
            journal_obj.close()
            raise
        gate = cls(arm, instance, journal=journal_obj, clock=clock, enable_on_yes=enable_on_yes)
        gate.link_error = link_error
        journal_obj.record("open", arm=arm.name, driver=driver, link=instance.state().link,
                           error=link_error)
        return gate

    @property
    def arm(self) -> Arm:
        return self._arm

    @property
    def journal_path(self) -> Path | None:
        return getattr(self._journal, "path", None)

    @property
    def journal_error(self) -> str | None:
        """Why the motion journal is not being written (one line), or None. While it is
        set no motion starts; stop still works. :meth:`reset` tries the journal again."""
        return getattr(self._journal, "error", None)

    @property
    def journal_lines_lost(self) -> int:
        return int(getattr(self._journal, "lost", 0))

    def watch(self, observer: Callable[..., None]) -> Callable[[], None]:
        """Call ``observer(kind, **fields)`` with every record the gate journals (a
        ``segment`` or ``output`` record names its program ``step``), on the thread that
        records it, after the record is queued; returns the function that ends the
        watch. Observers only look: what one raises is ignored, and nothing waits on one
        longer than it takes (keep it quick; a motion thread calls it)."""
        with self._issued_lock:
            self._observers = self._observers + (observer,)

        def unwatch() -> None:
            with self._issued_lock:
                self._observers = tuple(o for o in self._observers if o is not observer)

        return unwatch

    def _record(self, kind: str, **fields: Any) -> None:
        """Journal one record (never waits, never raises) and show it to the watchers."""
        self._journal.record(kind, **fields)
        for observer in self._observers:
            try:
                observer(kind, **fields)
            except Exception:  # noqa: BLE001 - a watcher never changes what the gate does
                pass

    def wait_journal(self, timeout_s: float) -> bool:
        """Wait until the journal has written what was recorded so far (the end of a
        command, tests). Never on a motion path: motion never waits on the journal."""
        return self._journal.wait_written(timeout_s)

    def close(self) -> None:
        """Stop (the driver's stop first), release the driver, then write and close the
        journal."""
        self.stop()
        try:
            self.__driver.close()
        except Exception:  # noqa: BLE001 - the arm was stopped first; a dead link is closed
            pass
        finally:
            try:
                self._record("close")
                self._journal.close()
            except Exception:  # noqa: BLE001 - a broken journal object: journal_error says so
                pass

    def __enter__(self) -> "Interlock":
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    # -- state -------------------------------------------------------------------------
    def state(self) -> DriverState:
        return self.__driver.state()

    def poll_events(self) -> list[DriverEvent]:
        """Events since the last call (each is also journalled)."""
        fresh = self.__driver.poll_events()
        for event in fresh:
            self._record("event", event=event.kind, detail=event.detail)
        with self._events_lock:
            pending, self._events = self._events + fresh, []
        return pending

    def _collect_events(self) -> list[DriverEvent]:
        """Events read while a plan runs are kept for the next poll_events()."""
        fresh = self.__driver.poll_events()
        for event in fresh:
            self._record("event", event=event.kind, detail=event.detail)
        with self._events_lock:
            self._events.extend(fresh)
        return fresh

    # -- checks ------------------------------------------------------------------------
    def _state_reasons(self, state: DriverState, *, need_homed: bool = True,
                       need_enabled: bool = True) -> list[str]:
        reasons = []
        journal_error = self.journal_error
        if journal_error:
            reasons.append(f"the motion journal cannot be written ({journal_error}): no motion "
                           f"starts until it can (reset tries again; stop always works)")
        if not state.is_open:
            reasons.append("the driver is not connected")
            return reasons
        if state.latched:
            reasons.append(f"latched: {state.latched} (reset first)")
        if need_enabled and not state.enabled:
            reasons.append("drives are off (enable first)")
        if need_homed and not state.homed:
            reasons.append("the arm is not homed (home first)")
        if not getattr(state, "fresh", True):  # PROTOCOL.md: no plan from a pose older than a stop
            reasons.append("position report is stale: the arm stopped or halted since (wait for a fresh one)")
        if state.age_s > FRESH_S:
            reasons.append(f"position report is {state.age_s:.2f} s old (limit {FRESH_S:g} s)")
        if state.queued > 0 or state.mode.value == "MOVING":
            reasons.append("the arm is still moving")
        return reasons

    def _segment_reasons(self, start: Sequence[float], segments: Sequence[Segment]) -> list[str]:
        """Every check of one plan's segments from ``start``: malformed values, soft
        limits less the margin, joint and tool speed caps, and the keep-out zones over
        the whole swept path (a start inside a zone: the escape rule, at reduced speed)."""
        return self._segment_findings(start, segments)[0]

    def _segment_findings(self, start: Sequence[float], segments: Sequence[Segment],
                          ahead: _DryRunAhead | None = None) -> tuple[list[str], list[str]]:
        """(refusal reasons, notes for the confirmation) of :meth:`_segment_reasons`."""
        arm = self._arm
        reasons: list[str] = []
        previous = tuple(start)
        for n, seg in enumerate(segments, 1):
            if len(seg.joints) != arm.n_joints or not all(math.isfinite(v) for v in seg.joints):
                return [f"segment {n}: malformed joint values"], []
            if not (0.0005 <= seg.duration_s <= 60.0):
                return [f"segment {n}: duration {seg.duration_s:.4f} s outside 0.001..60 s"], []
        if len(tuple(start)) != arm.n_joints or not all(math.isfinite(v) for v in start):
            return ["the plan's start is malformed"], []
        tool_speeds = None if ahead is None else ahead.tool_speeds.get(
            (np.array([previous] + [tuple(seg.joints) for seg in segments], dtype=float).tobytes(),
             tuple(seg.duration_s for seg in segments)))
        if tool_speeds is None:
            tool_speeds = self._tool_speeds(previous, segments)  # all at once: the hot path of a check
        inside = self._zones_inside(start, ahead)
        share = ESCAPE_SPEED_PCT / 100.0 if inside else 1.0
        for n, seg in enumerate(segments, 1):
            wire_s = wire_duration_s(seg.duration_s)  # what the controller will be told
            for joint, value, before in zip(arm.joints, seg.joints, previous):
                margin = arm.margin(joint)
                if _into_margin(joint, margin, before, value):
                    reasons.append(
                        f"segment {n}: {joint.name} at {fmt(joint, value)} is outside its soft "
                        f"limits {fmt(joint, joint.min)}..{fmt(joint, joint.max)} less the "
                        f"margin {joint.to_display(margin):g} {joint.unit}")
                speed = abs(value - before) / wire_s
                if speed > joint.max_speed * share * SPEED_TOL:
                    reasons.append(
                        f"segment {n}: {joint.name} speed {joint.to_display(speed):.1f} "
                        f"{joint.unit}/s exceeds its cap {joint.to_display(joint.max_speed * share):g} "
                        f"{joint.unit}/s" + (" (reduced: out of a keep-out zone)" if inside else ""))
            tool_speed = float(tool_speeds[n - 1])
            if tool_speed > arm.tool_speed_max_mm_s * share * SPEED_TOL:
                reasons.append(f"segment {n}: tool speed {tool_speed:.1f} mm/s exceeds the cap "
                               f"{arm.tool_speed_max_mm_s * share:g} mm/s"
                               + (" (reduced: out of a keep-out zone)" if inside else ""))
            if reasons:
                return reasons, []
            previous = seg.joints
        return self._zone_findings(start, segments, inside, ahead)

    def _zones_inside(self, joints: Sequence[float], ahead: _DryRunAhead | None = None,
                      ) -> dict[int, float]:
        """Zone index -> penetration (mm) for every keep-out zone the arm is in."""
        if not self._arm.zones:
            return {}
        pose = np.array([tuple(joints)], dtype=float)
        if ahead is not None and pose.tobytes() in ahead.clear_starts:
            return {}   # found clear of every zone by the same test, for many starts at once
        gaps = zone_gaps(self._arm, pose)[0]
        if not (gaps.min(axis=2) < 0).any():
            return {}   # clear of every zone (the cheap, exact test first)
        depth = zone_penetrations_mm(self._arm, np.array([tuple(joints)]))[0]
        return {i: float(d) for i, d in enumerate(depth) if d > 0}

    def _zone_findings(self, start: Sequence[float], segments: Sequence[Segment],
                       inside: dict[int, float], ahead: _DryRunAhead | None = None,
                       ) -> tuple[list[str], list[str]]:
        """The gate's own keep-out check of the whole swept path. Zones the arm is not
        in: certified sweep (benchjog.kinematics.sweep.sweep_zones), no contact allowed.
        Zones it starts in: the penetration, sampled every ESCAPE_STEP_MM of the arm's
        motion, must never grow."""
        arm = self._arm
        if not arm.zones or not segments:
            return [], []
        knots = np.array([tuple(start)] + [tuple(s.joints) for s in segments], dtype=float)
        reasons: list[str] = []
        others = tuple(z for i, z in enumerate(arm.zones) if i not in inside)
        if others:
            sweep = ahead.sweeps.get(knots.tobytes()) if ahead is not None and not inside else None
            if sweep is None:
                sweep = sweep_zones(dataclasses.replace(arm, zones=others), knots)
            if sweep.contact is not None:
                c = sweep.contact
                parts = ", ".join(c.parts) or "the arm"
                reasons.append(f"segment {c.segment + 1}: {parts} would enter keep-out zone "
                               f"{c.zone!r} at {100 * c.tau:.0f}% of that segment (clearance "
                               f"{arm.link_clearance_mm:g} mm)")
        if not inside:
            return reasons, []
        names = [arm.zones[i].name for i in inside]
        zone_idx = np.array(sorted(inside))
        depth_before = np.array([inside[i] for i in sorted(inside)])
        depth_end = depth_before
        for n in range(len(segments)):
            qa, qb = knots[n], knots[n + 1]
            dq = qb - qa
            rate = float(max(lever_mm(arm, dq), z_step_mm(arm, dq)))
            count = int(min(ESCAPE_SAMPLES_MAX, max(2, math.ceil(rate / ESCAPE_STEP_MM) + 1)))
            tau = np.linspace(0.0, 1.0, count)
            depth = zone_penetrations_mm(arm, qa + tau[:, None] * dq)[:, zone_idx]
            track = np.vstack([depth_before[None, :], depth])
            rise = np.diff(track, axis=0) > ESCAPE_TOL_MM
            if rise.any():
                k, z = np.argwhere(rise)[0]
                reasons.append(
                    f"segment {n + 1}: would go deeper into keep-out zone "
                    f"{names[z]!r} (from {track[k, z]:.2f} to {track[k + 1, z]:.2f} mm deep at "
                    f"{100 * tau[max(k - 1, 0)]:.0f}% of that segment): from inside a zone only "
                    f"a motion that leads out of it is allowed")
                return reasons, []
            depth_before = depth[-1]
            depth_end = depth[-1]
        words = ", ".join(f"{names[k]!r} ({inside[i]:.2f} mm deep)"
                          for k, i in enumerate(sorted(inside)))
        ends = ", ".join(f"{names[k]!r} {'clear' if d <= 0 else f'{d:.2f} mm deep'}"
                         for k, d in enumerate(depth_end))
        notes = [f"the arm starts inside keep-out zone {words}: this motion only leads out of "
                 f"it (its depth never grows along the whole path; at the end: {ends}) and "
                 f"enters no other zone; it runs at reduced speed, {ESCAPE_SPEED_PCT:g} % of "
                 f"the caps"]
        return reasons, notes

    def _tool_speed(self, start: Sequence[float], end: Sequence[float], duration_s: float,
                    ) -> float:
        """Peak tool speed over one segment (mm/s), as :meth:`_tool_speeds`."""
        return float(self._tool_speeds(start, [Segment(tuple(end), duration_s)])[0])

    def _tool_speeds(self, start: Sequence[float], segments: Sequence[Segment]) -> np.ndarray:
        """Peak tool speed over each segment (mm/s) at its wire duration, bounded by
        sub-sampled chords: the tool point at TOOL_SPEED_SAMPLES + 1 poses along each
        joint-linear segment, by the closed-form forward kinematics, all at once."""
        if not segments:
            return np.zeros(0)
        q = np.array([tuple(start)] + [seg.joints for seg in segments], dtype=float)
        a, step = q[:-1, None, :], np.diff(q, axis=0)[:, None, :]
        f = np.linspace(0.0, 1.0, TOOL_SPEED_SAMPLES + 1)[None, :, None]
        _, tool = points_from_joints(self._arm, a + f * step)
        if not self._arm.is_scara:
            tool = tool[..., :2]
        chords = np.linalg.norm(np.diff(tool, axis=1), axis=2).max(axis=1)
        wire = np.array([wire_duration_s(seg.duration_s) for seg in segments])
        return chords * TOOL_SPEED_SAMPLES / wire

    def check_actions(self, actions: Sequence[Action], start_joints: Sequence[float] | None = None,
                      ) -> Verdict:
        """The static checks, without the driver's state: for dry runs."""
        return Verdict.of(self._check_actions(actions, start_joints)[0])

    def check_each(self, items: Sequence[tuple[Action, Sequence[float] | None]]) -> list[Verdict]:
        """``check_actions([action], start)`` for every (action, start) of a dry run, each
        verdict the same, with the keep-out work of all plans done ahead in one
        vectorised pass (benchjog.kinematics.sweep.sweep_zones_many): the starts' zone
        test and the sweeps of the plans that start clear of every zone. For dry runs
        only: :meth:`execute` checks every motion it runs on its own."""
        ahead = self._dry_run_ahead(items)
        return [Verdict.of(self._check_actions([action], start, ahead)[0])
                for action, start in items]

    def _dry_run_ahead(self, items: Sequence[tuple[Action, Sequence[float] | None]],
                       ) -> _DryRunAhead:
        arm = self._arm
        ahead = _DryRunAhead()
        paths, wire, durations = [], [], []
        for action, start in items:
            if not isinstance(action, Plan) or action.problems or not action.segments:
                continue
            if not all(0.0005 <= seg.duration_s <= 60.0 for seg in action.segments):
                continue   # refused before any of this (_segment_findings)
            begin = start if start is not None else action.summary.start_joints
            rows = [tuple(begin)] + [tuple(seg.joints) for seg in action.segments]
            if any(len(r) != arm.n_joints for r in rows):
                continue
            knots = np.array(rows, dtype=float)
            if np.isfinite(knots).all():
                paths.append(knots)
                durations.append(tuple(seg.duration_s for seg in action.segments))
                wire += [wire_duration_s(seg.duration_s) for seg in action.segments]
        if not paths:
            return ahead
        # the tool speeds of every segment of every plan (Interlock._tool_speeds, row by row)
        q_from = np.concatenate([k[:-1] for k in paths])
        steps = np.concatenate([np.diff(k, axis=0) for k in paths])
        f = np.linspace(0.0, 1.0, TOOL_SPEED_SAMPLES + 1)[None, :, None]
        _, tool = points_from_joints(arm, q_from[:, None, :] + f * steps[:, None, :])
        if not arm.is_scara:
            tool = tool[..., :2]
        chords = np.linalg.norm(np.diff(tool, axis=1), axis=2).max(axis=1)
        speeds = chords * TOOL_SPEED_SAMPLES / np.array(wire)
        ends = np.cumsum([len(k) - 1 for k in paths])
        for k, d, part in zip(paths, durations, np.split(speeds, ends[:-1])):
            ahead.tool_speeds[(k.tobytes(), d)] = part
        if not arm.zones:
            return ahead
        starts = np.array([k[0] for k in paths])
        clear = ~(zone_gaps(arm, starts)[0].min(axis=2) < 0).any(axis=1)
        ahead.clear_starts = {starts[i:i + 1].tobytes() for i in np.flatnonzero(clear)}
        swept = [paths[i] for i in np.flatnonzero(clear)]
        ahead.sweeps = {k.tobytes(): r for k, r in zip(swept, sweep_zones_many(arm, swept))}
        return ahead

    def _check_actions(self, actions: Sequence[Action], start_joints: Sequence[float] | None,
                       ahead: _DryRunAhead | None = None) -> tuple[list[str], list[str]]:
        start = tuple(start_joints) if start_joints is not None else None
        reasons: list[str] = []
        notes: list[str] = []
        for index, action in enumerate(actions):
            prefix = f"step {index + 1}: " if len(actions) > 1 else ""
            if isinstance(action, Plan):
                reasons += [prefix + p for p in action.problems]
                if action.problems:
                    start = None  # where the arm would be is unknown after a refused step
                    continue
                if start is not None:
                    moved = self._moved_since(action.summary.start_joints, start)
                    if moved:
                        reasons.append(f"{prefix}the plan starts elsewhere than the arm will be: "
                                       f"{moved}")
                        start = None
                        continue
                begin = start if start is not None else action.summary.start_joints
                found, said = self._segment_findings(begin, action.segments, ahead)
                reasons += [prefix + r for r in found]
                notes += [prefix + r for r in said]
                start = action.segments[-1].joints if action.segments else begin
            elif isinstance(action, Dwell):
                if not (math.isfinite(action.seconds) and 0 <= action.seconds <= 3600):
                    reasons.append(f"{prefix}dwell {action.seconds} s outside 0..3600 s")
            elif isinstance(action, SetOutput):
                if not 0 <= action.channel <= 7:
                    reasons.append(f"{prefix}output channel {action.channel} outside 0..7")
            else:
                reasons.append(f"{prefix}unknown action {action!r}")
        return reasons, notes

    # -- proposals (planning only) -----------------------------------------------------
    def _enabling(self, state: DriverState) -> bool:
        """True when the drives are off and this gate switches them on after a yes."""
        return self.enable_on_yes and state.is_open and not state.enabled

    def _propose(self, request: str, actions: Sequence[Action], *, jog_mm: float | None = None,
                 jog_joint: tuple[int, float] | None = None,
                 start_joints: Sequence[float] | None = None) -> Proposal:
        state = self.state()
        start = tuple(start_joints) if start_joints is not None else state.joints
        enables = self._enabling(state)
        # A controller with its drives off may not say whether it is homed (PROTOCOL.md:
        # mode DISABLED): then that is checked right after the drives come on.
        homed_unknown = enables and not state.homed
        reasons = self._state_reasons(state, need_enabled=not enables, need_homed=not homed_unknown)
        if jog_mm is not None and abs(jog_mm) > self._arm.jog_step_max_mm:
            reasons.append(f"jog step {abs(jog_mm):g} mm exceeds the cap "
                           f"{self._arm.jog_step_max_mm:g} mm")
        if jog_joint is not None:
            joint = self._arm.joints[jog_joint[0]]
            step = abs(joint.to_display(jog_joint[1]))
            if step > JOINT_JOG_MAX_DEG:
                reasons.append(f"jog step {step:g} {joint.unit} on {joint.name} exceeds the cap "
                               f"{JOINT_JOG_MAX_DEG:g} {joint.unit}")
        found, notes = self._check_actions(actions, start)
        reasons += found
        if enables:
            notes.append("the drives are off: they are switched on only after your yes"
                          + ("; whether the arm is homed is read then, and an unhomed arm is "
                             "refused before anything moves" if homed_unknown else ""))
        token = next(self._tokens)
        now = self._clock()
        with self._issued_lock:
            stops = self._stops
        proposal = Proposal(request, tuple(actions), Verdict.of(reasons), start, now, token,
                            tuple(notes), enables)
        self._issue(proposal, stops)
        self._record("request", token=token, request=request, ok=proposal.ok,
                             start=list(start), reasons=list(proposal.verdict.reasons),
                             notes=list(notes),
                             segments=sum(len(p.segments) for p in proposal.plans),
                             duration_s=proposal.duration_s)
        return proposal

    def _issue(self, proposal: Proposal, stops: int) -> None:
        """Keep a proposal that may be confirmed; a refused one is never kept. Safe from
        any number of threads at once."""
        if not proposal.ok:
            return
        digest = proposal_digest(proposal)
        now = proposal.created_s
        with self._issued_lock:
            if stops != self._stops:
                return   # a stop came while it was being made: it is void already
            for old in [t for t, (p, _, _) in self._issued.items()
                        if now - p.created_s > self.PROGRAM_APPROVAL_TTL_S]:
                del self._issued[old]   # past every approval limit: they could only expire
            while len(self._issued) >= ISSUED_MAX:
                del self._issued[min(self._issued)]
            self._issued[proposal.token] = (proposal, digest, stops)

    def _settled_state(self) -> DriverState:
        """The state a plan starts from. Right after a stop whose answer is still on its
        way (the serial driver's stop returns once STOP is written) the position is
        stale; wait for the stop's fresh position, at most STOP_SETTLE_S, rather than
        refuse a plan made a moment too early. Still stale after that: the plan is
        refused as stale (``_state_reasons``)."""
        state = self.state()
        if not getattr(state, "fresh", True):
            self.wait_stopped(STOP_SETTLE_S)
            state = self.state()
        return state

    def _planning(self, start: Sequence[float], speed_pct: float) -> tuple[Arm, float]:
        """The arm and speed to plan with from ``start``: inside a keep-out zone, the
        planner is shown the other zones only (the gate checks the way out itself) and
        the speed is cut to ESCAPE_SPEED_PCT."""
        inside = self._zones_inside(start)
        if not inside:
            return self._arm, speed_pct
        others = tuple(z for i, z in enumerate(self._arm.zones) if i not in inside)
        return dataclasses.replace(self._arm, zones=others), min(speed_pct, ESCAPE_SPEED_PCT)

    def propose_move(self, target: Sequence[float], *, branch: Any = None, path: str = JOINT,
                     speed_pct: float = 100.0, tolerance_mm: float = LINE_TOLERANCE_MM) -> Proposal:
        start = self._settled_state().joints
        arm, pct = self._planning(start, speed_pct)
        plan = plan_move(arm, start, tuple(target), branch=branch, path=path, speed_pct=pct,
                         tolerance_mm=tolerance_mm)
        words = self._target_words(tuple(target))
        chosen = plan.summary.branch.value if plan.summary.branch else "no branch"
        return self._propose(f"move to {words} ({chosen}, {path} path, {pct:g} %)", [plan],
                             start_joints=start)

    def propose_joints(self, joints: Sequence[float], *, speed_pct: float = 100.0) -> Proposal:
        joints = check_joints(self._arm, joints)
        start = self._settled_state().joints
        arm, pct = self._planning(start, speed_pct)
        plan = plan_joint_move(arm, start, joints, speed_pct=pct)
        shown = ", ".join(f"{j.name} {fmt(j, v)}" for j, v in zip(self._arm.joints, joints))
        return self._propose(f"move joints to {shown}", [plan], start_joints=start)

    def _jog_inputs(self, start: tuple[float, ...], axis: str, delta: float,
                    speed_pct: float) -> tuple[Arm, tuple, dict, tuple | None]:
        """What plan_jog is given for a jog step from ``start``: the arm and arguments,
        and the key a plan made ahead is kept under (None: not kept, as inside a
        keep-out zone, where the planner sees a reduced arm)."""
        last = self._last_end
        base = last if last is not None and self._moved_since(last, start) is None else None
        arm, pct = self._planning(start, speed_pct)
        key = (start, base, axis, float(delta), float(pct)) if arm is self._arm else None
        return arm, (start, axis, delta), {"speed_pct": pct, "base": base}, key

    def prepare_session_jog(self, axis: str, delta: float, *, speed_pct: float = 100.0,
                            step: float | None = None) -> bool:
        """Plan, while nothing waits for it, the jog step a key may soon ask for, from
        where the arm rests now: a step of the active jog session, or with none the
        first step a jog key offers as a new session (at the session's default speed
        cap). The step then asked for (same axis, step and speed, from the very same
        pose and the same last end) takes this plan instead of planning again, so its
        first setpoint (or its question) comes sooner; it is checked, journaled,
        confirmed and bounded exactly as one planned then (the plan is the same:
        plan_jog is a function of what it is given). With no session, ``step`` (the
        session's largest step) also has the session it would offer worked out (its
        bounds and whether the step fits them, as :meth:`propose_jog_session` with no
        bounds options would). Planning only: nothing is issued, journaled or moved.
        Returns whether a plan is kept (not from a stale or moving pose, nor inside a
        keep-out zone)."""
        slot = self._jog_slot()
        with slot.lock:
            session = slot.active
        state = self.state()
        if not getattr(state, "fresh", True) or state.queued or state.mode == Mode.MOVING:
            return False
        cap = session.bounds.speed_cap_mm_s if session is not None else TEACH_SPEED_MAX_MM_S
        start = tuple(state.joints)
        arm, args, options, key = self._jog_inputs(start, axis, delta,
                                                   self._capped_pct(cap, speed_pct))
        if key is None:
            return False
        okey = key + (float(step),) if session is None and step is not None else None
        with self._ahead_lock:
            plan = self._ahead.get(key)
            if plan is not None and (okey is None or okey in self._ahead_offers):
                return True   # planned already
        if plan is None:
            plan = plan_jog(arm, *args, **options)
        offer = None
        if okey is not None and not plan.problems:
            try:
                bounds = make_bounds(self._arm, start, frame_of(axis), float(step))
            except SessionError:
                bounds = None
            if bounds is not None:
                offer = (bounds, tuple(step_problems(self._arm, bounds, axis, delta, plan, start,
                                                     self._tool_speed, wire_duration_s)), plan)
        with self._ahead_lock:
            for table in (self._ahead, self._ahead_offers):
                for old in [k for k in table if k[:2] != key[:2]]:
                    del table[old]   # from a pose the arm has left: it would never match
                if len(table) >= AHEAD_MAX:
                    table.clear()
            self._ahead[key] = plan
            if offer is not None:
                self._ahead_offers[okey] = offer
        return True

    def propose_jog(self, axis: str, delta: float, *, speed_pct: float = 100.0) -> Proposal:
        start = self._settled_state().joints
        arm, args, options, key = self._jog_inputs(tuple(start), axis, delta, speed_pct)
        with self._ahead_lock:
            plan = self._ahead.pop(key, None) if key is not None else None
        if plan is None:
            plan = plan_jog(arm, *args, **options)
        if axis.startswith("j"):
            index = int(axis[1:]) - 1
            joint = self._arm.joints[index]
            words = f"jog {joint.name} {joint.to_display(delta):+g} {joint.unit}"
            return self._propose(words, [plan], jog_joint=(index, delta), start_joints=start)
        if axis == "roll":
            return self._propose(f"jog roll {math.degrees(delta):+g} deg", [plan],
                                 jog_joint=(3, delta), start_joints=start)
        return self._propose(f"jog {axis} {delta:+g} mm", [plan], jog_mm=delta, start_joints=start)

    def propose_actions(self, actions: Sequence[Action], request: str, *,
                        start_joints: Sequence[float] | None = None) -> Proposal:
        return self._propose(request, actions, start_joints=start_joints)

    def _target_words(self, target: tuple[float, ...]) -> str:
        if self._arm.is_scara and len(target) == 4:
            return (f"x {target[0]:.2f} y {target[1]:.2f} z {target[2]:.2f} mm "
                    f"roll {math.degrees(target[3]):.2f} deg")
        return " ".join(f"{n} {v:.2f}" for n, v in zip("xy", target)) + " mm"

    # -- the only road to motion ---------------------------------------------------------
    def _moved_since(self, start: Sequence[float], now: Sequence[float]) -> str | None:
        for joint, a, b in zip(self._arm.joints, start, now):
            tol = START_TOL_RAD if joint.is_revolute else START_TOL_MM
            if abs(a - b) > tol:
                return (f"{joint.name} moved from {fmt(joint, a)} to {fmt(joint, b)} since the "
                        f"plan was made")
        return None

    def _end(self, token: int, result: RunResult) -> RunResult:
        self._record("result", token=token, outcome=result.outcome, detail=result.detail,
                             segments_sent=result.segments_sent, step=result.step)
        return result

    def _take(self, proposal: Proposal) -> str | None:
        """Take a proposal out of the issued ones (it is offered once, whatever the
        outcome); None when it may go on to the question, else the refusal. A stop
        since the proposal was made voids it (stop() also empties the issued ones)."""
        token = proposal.token
        with self._issued_lock:
            entry = self._issued.get(token)
            if entry is not None and entry[0] is proposal:
                del self._issued[token]   # offered once: a copy does not use it up
            stops = self._stops
        if entry is None or entry[0] is not proposal:
            if not proposal.verdict.ok and entry is None:
                return "refused: " + "; ".join(proposal.verdict.reasons)
            return ("refused: this plan was not made by the interlock, was refused, was "
                    "used already, or was cancelled by a stop")
        _, digest, made_at = entry
        if made_at != stops:
            return "refused: a stop came after this plan was made; plan again"
        if proposal_digest(proposal) != digest:
            return "refused: this plan was changed after it was made; plan again"
        if not proposal.ok:
            return "refused: " + "; ".join(proposal.verdict.reasons)
        return None

    def execute(self, proposal: Proposal, confirmer: Confirmer) -> RunResult:
        """Confirm, then run a proposal; blocks until it finished or halted."""
        token = proposal.token
        with self._issued_lock:
            stops = self._stops
        refusal = self._take(proposal)
        if refusal:
            return self._end(token, RunResult(False, "refused", refusal))
        if not self._busy.acquire(blocking=False):
            return self._end(token, RunResult(False, "refused", "refused: another plan is running"))
        try:
            return self._end(token, self._confirm_and_run(proposal, confirmer, stops))
        finally:
            self._busy.release()

    def _switch_on(self, proposal: Proposal) -> RunResult | None:
        """After the yes: the drives on, when this proposal said they would come on.
        None when all is well, else why nothing moves."""
        if not proposal.enables or self.state().enabled:
            return None
        self._record("enable", token=proposal.token, after_yes=True)
        try:
            self.__driver.enable()
        except Exception as exc:  # noqa: BLE001 - one line; nothing moved
            self._safe_stop()
            return RunResult(False, "halted", f"halted: the drives could not be switched on: {exc}")
        if self._stop.is_set():
            self._safe_stop()
            return RunResult(False, "stopped", "stopped: stop was pressed as the drives came on; "
                             "nothing moved")
        return None

    def _stopped_since(self, stops: int) -> bool:
        with self._issued_lock:
            return stops != self._stops

    def _confirm_and_run(self, proposal: Proposal, confirmer: Confirmer, stops: int) -> RunResult:
        # Before the drives come on (enable_on_yes) homing may be unknown; the full check
        # follows once they are on.
        relaxed = {"need_enabled": not proposal.enables, "need_homed": not proposal.enables}
        reasons = self._state_reasons(self.state(), **relaxed)
        if reasons:
            return RunResult(False, "refused", "refused: " + "; ".join(reasons))
        self._stop.clear()  # from here on, a stop (even during the question) wins
        if self._stopped_since(stops):
            return RunResult(False, "stopped", "stopped: stop was pressed; nothing moved")
        self._record("confirm-asked", token=proposal.token)
        answer = bool(confirmer.confirm(proposal))
        waited = self._clock() - proposal.created_s
        self._record("confirmation", token=proposal.token, yes=answer,
                             after_s=round(waited, 3))
        if not answer:
            return RunResult(False, "cancelled", "cancelled: nothing moved")
        if self._stop.is_set() or self._stopped_since(stops):
            return RunResult(False, "stopped", "stopped: stop was pressed while the question was "
                             "open; nothing moved")
        limit = self.approval_ttl_s(proposal)
        if waited > limit:
            return RunResult(False, "expired", f"expired: confirmed {waited:.1f} s after the plan "
                             f"was made (limit {limit:g} s); plan again")
        reasons = self._state_reasons(self.state(), **relaxed)
        if reasons:
            return RunResult(False, "refused", "refused: " + "; ".join(reasons))
        failed = self._switch_on(proposal)
        if failed is not None:
            return failed
        state = self.state()
        reasons = self._state_reasons(state)
        if reasons:
            return RunResult(False, "refused", "refused: " + "; ".join(reasons))
        moved = self._moved_since(proposal.start_joints, state.joints)
        if moved:
            return RunResult(False, "expired", f"expired: {moved}; plan again")
        return self._run(proposal)

    def _halt_reason(self) -> str | None:
        for event in self._collect_events():
            if event.kind in ("estop", "fault", "link-lost"):
                return f"{event.kind}: {event.detail}"
        latched = self.state().latched
        return latched

    def _run(self, proposal: Proposal) -> RunResult:
        sent = underruns = 0
        for index, action in enumerate(proposal.actions):
            step = index if len(proposal.actions) > 1 else None
            where = f" at step {index + 1}" if step is not None else ""
            while not self._resume.is_set() and not self._stop.is_set():
                self._resume.wait(0.05)
            trouble = self._trouble()
            if trouble:
                return self._halted(trouble, sent, step, where, None, None)
            try:
                if isinstance(action, Plan):
                    dry = self.__driver.state().queue_ran_dry
                    for n, seg in enumerate(action.segments, 1):
                        trouble = self._trouble()
                        if trouble:
                            return self._halted(trouble, sent, step, where, n, len(action.segments))
                        self.__driver.queue(seg)
                        sent += 1
                        self._record("segment", token=proposal.token, step=index,
                                             n=n, joints=list(seg.joints),
                                             duration_s=seg.duration_s)
                    trouble = self._wait_done(action.summary.duration_s + 5.0)
                    if trouble:
                        return self._halted(trouble, sent, step, where, None, None)
                    # every start from an empty queue after the first is a stop-and-go
                    underruns += max(0, self.__driver.state().queue_ran_dry - dry - 1)
                elif isinstance(action, Dwell):
                    deadline = time.monotonic() + action.seconds
                    while time.monotonic() < deadline:
                        trouble = self._trouble()
                        if trouble:
                            return self._halted(trouble, sent, step, where, None, None)
                        time.sleep(min(0.02, max(0.0, deadline - time.monotonic())))
                else:
                    self.__driver.set_output(action.channel, action.on)
                    self._record("output", token=proposal.token, step=index,
                                         channel=action.channel, on=action.on)
            except Exception as exc:  # noqa: BLE001 - any driver failure halts, in one line
                self._safe_stop()
                try:
                    cause = self._halt_reason()   # name a latch (e-stop, fault) when there is one
                except Exception:  # noqa: BLE001 - the failure itself is reported below
                    cause = None
                detail = f"{cause} ({exc})" if cause and cause not in str(exc) else str(exc)
                return RunResult(False, "halted", f"halted{where}: {detail}", sent, step)
        ends = [p.segments[-1].joints for p in proposal.plans if p.segments]
        if ends:
            self._last_end = tuple(ends[-1])
        if underruns:
            return RunResult(True, "done", f"done (stop-and-go: the controller's queue ran empty "
                             f"{underruns} time(s) mid-move; the link or the host is too slow for "
                             f"these segments)", sent, None, underruns)
        return RunResult(True, "done", "done", sent, None)

    def _trouble(self) -> str | None:
        if self._stop.is_set():
            return "stop"
        return self._halt_reason()

    def _halted(self, trouble: str, sent: int, step: int | None, where: str,
                n: int | None, total: int | None) -> RunResult:
        self._safe_stop()
        self._last_end = None
        seg = f" before segment {n} of {total}" if n is not None else ""
        if trouble == "stop":
            return RunResult(False, "stopped", f"stopped by the user{where}{seg}", sent, step)
        return RunResult(False, "halted", f"halted{where}{seg}: {trouble}", sent, step)

    def _wait_done(self, timeout_s: float) -> str | None:
        deadline = time.monotonic() + timeout_s
        while True:
            trouble = self._trouble()
            if trouble:
                return trouble
            state = self.state()
            if state.queued == 0 and state.mode.value != "MOVING":
                return None
            if time.monotonic() > deadline:
                return "the motion did not finish in time"
            time.sleep(0.01)

    HOME_NOTE = ("homing runs the controller's own cycle: its path is NOT checked against "
                 "the keep-out zones or the soft limits; clear the way before you say yes")

    def home(self, confirmer: Confirmer) -> RunResult:
        """The controller's homing cycle, after confirmation. The gate cannot check its
        path (the controller chooses it): the confirmation says so in words."""
        state = self.state()
        enables = self._enabling(state)
        reasons = [r for r in self._state_reasons(state, need_homed=False, need_enabled=not enables)
                   if not r.startswith("position report")]
        token = next(self._tokens)
        notes = [type(self.__driver).homing_without_motion or self.HOME_NOTE]
        if enables:
            notes.append("the drives are off: they are switched on only after your yes")
        with self._issued_lock:
            stops = self._stops
        proposal = Proposal("home: run the controller's homing cycle", (), Verdict.of(reasons),
                            state.joints, self._clock(), token, tuple(notes), enables)
        self._record("request", token=token, request=proposal.request, ok=proposal.ok,
                             reasons=list(reasons), notes=notes)
        if not proposal.ok:
            return self._end(token, RunResult(False, "refused", "refused: " + "; ".join(reasons)))
        if not self._busy.acquire(blocking=False):
            return self._end(token, RunResult(False, "refused", "refused: another plan is running"))
        try:
            self._stop.clear()
            if self._stopped_since(stops):
                return self._end(token, RunResult(False, "stopped", "stopped: nothing moved"))
            answer = bool(confirmer.confirm(proposal))
            self._record("confirmation", token=token, yes=answer)
            if not answer:
                return self._end(token, RunResult(False, "cancelled", "cancelled: nothing moved"))
            if self._stop.is_set() or self._stopped_since(stops):
                return self._end(token, RunResult(False, "stopped", "stopped: stop was pressed "
                                                  "while the question was open; nothing moved"))
            if self._clock() - proposal.created_s > self.APPROVAL_TTL_S:
                return self._end(token, RunResult(False, "expired", "expired: confirm again"))
            if self.journal_error:
                return self._end(token, RunResult(False, "refused", "refused: " + "; ".join(
                    self._state_reasons(self.state(), need_homed=False, need_enabled=False))))
            failed = self._switch_on(proposal)
            if failed is not None:
                return self._end(token, failed)
            self.__driver.home()
            if self._stop.is_set():
                return self._end(token, RunResult(False, "stopped", "stopped by the user while "
                                                  "homing; the arm is not homed"))
            return self._end(token, RunResult(True, "done", "homed"))
        except Exception as exc:  # noqa: BLE001 - any driver failure halts, in one line
            self._safe_stop()
            if self._stop.is_set():
                return self._end(token, RunResult(False, "stopped", f"stopped by the user while "
                                                  f"homing: {exc}"))
            return self._end(token, RunResult(False, "halted", f"halted: {exc}"))
        finally:
            self._busy.release()

    # -- immediate commands ------------------------------------------------------------
    def stop(self) -> None:
        """Stop at once, from any thread; never asks for confirmation, never raises.

        The driver's stop is the very first thing: nothing that can block or raise (no
        lock a running plan holds, no journal write) stands before it, only the stop flag
        (an Event, set first so that a motion thread the driver's stop interrupts already
        sees it as a stop, not a failure). Then a plan running or waiting for its yes
        ends, and every proposal not yet confirmed is void (the next motion is planned
        and asked for again). The journal line is queued last (drivers/journal.py: never
        waits)."""
        self._stop.set()
        self._safe_stop()
        self._resume.set()
        try:
            with self._issued_lock:   # held only around dict operations, never over I/O
                self._stops += 1
                cancelled = len(self._issued)
                self._issued.clear()
            self._record("stop", cancelled=cancelled)
        except Exception:  # noqa: BLE001 - the arm is stopped; nothing else may raise here
            pass
        self._jog_session_hook("a stop")  # jog sessions: a stop ends one (never raises)

    def wait_stopped(self, timeout_s: float) -> bool:
        """Wait until the driver has its answer to every stop sent so far (the serial
        driver's stop returns once STOP is on the wire and awaits its OK in a thread of
        its own); True when no stop is under way. Never needed for safety: the stop is
        out already."""
        try:
            return bool(self.__driver.wait_stopped(timeout_s))
        except Exception:  # noqa: BLE001 - a dead link has nothing more to answer
            return True

    def _safe_stop(self) -> None:
        try:
            self.__driver.stop()
        except Exception:  # noqa: BLE001 - a dead link cannot move the arm either
            pass

    def pause(self) -> None:
        self._resume.clear()
        self._record("pause")

    def resume(self) -> None:
        self._resume.set()
        self._record("resume")

    def enable(self) -> None:
        self._record("enable")
        self.__driver.enable()

    def disable(self) -> None:
        self._jog_session_hook("drives switched off")  # jog sessions: ends one
        self._record("disable")
        self.__driver.disable()

    def reset(self) -> None:
        """Clear a latched e-stop (once released) or fault; reconnect a lost link; and
        connect a driver that could not be opened at start."""
        self._jog_session_hook("a reset")  # jog sessions: a reset ends one
        self._record("reset")
        self._journal.recover()   # a journal that failed is tried again (journal_error)
        if not self.__driver.state().is_open:
            self.__driver.open()
            self.link_error = None
            self._record("connected", link=self.__driver.state().link)
            return
        self.__driver.reset()

    def set_output(self, channel: int, on: bool) -> None:
        if not 0 <= channel <= 7:
            raise ValueError(f"output channel {channel} outside 0..7")
        self._record("output", channel=channel, on=on)
        self.__driver.set_output(channel, on)

    # -- jog sessions --------------------------------------------------------------------
    # One confirmation for a run of jog steps near one pose (drivers/jog_session.py).
    # The approval is issued and held here: a step runs only through session_jog, which
    # plans and checks it exactly as propose_jog + execute do, then against the bounds
    # the person approved, and answers the confirmation itself only for a step it
    # cleared. Starts and ends are journaled (session-start, session-step, session-end).
    def _jog_slot(self) -> SessionSlot:
        slot = self.__dict__.get("_jog_slot_obj")
        return slot if slot is not None else self.__dict__.setdefault("_jog_slot_obj",
                                                                      SessionSlot())

    def _session_pct(self, bounds: SessionBounds, speed_pct: float) -> float:
        """The speed override that keeps the tool under the session's cap."""
        return self._capped_pct(bounds.speed_cap_mm_s, speed_pct)

    def _capped_pct(self, cap_mm_s: float, speed_pct: float) -> float:
        return min(float(speed_pct), 100.0 * cap_mm_s / self._arm.tool_speed_max_mm_s)

    def propose_jog_session(self, axis: str, delta: float, *, step: float,
                            speed_pct: float = 100.0, **bounds_options: Any) -> Proposal:
        """A jog step offered as the first of a session around the present pose. Run it
        with :meth:`execute_jog_session`; :meth:`jog_session_lines` gives the bounds to
        show. ``step`` is the largest step (mm / deg); ``bounds_options`` go to
        :func:`make_bounds` (box_mm, z_mm, roll_deg, speed_cap_mm_s, idle_s).

        Raises:
            SessionError: bounds that cannot make a session.
        """
        joints = self._settled_state().joints
        offer = None
        if not bounds_options:   # the session prepare_session_jog worked out, if it did
            _, _, _, key = self._jog_inputs(tuple(joints), axis, delta,
                                            self._capped_pct(TEACH_SPEED_MAX_MM_S, speed_pct))
            if key is not None:
                with self._ahead_lock:
                    offer = self._ahead_offers.pop(key + (float(step),), None)
        bounds = offer[0] if offer is not None else make_bounds(
            self._arm, joints, frame_of(axis), step, **bounds_options)
        proposal = self.propose_jog(axis, delta, speed_pct=self._session_pct(bounds, speed_pct))
        problems: list[str] = []
        if proposal.ok:
            if offer is not None and proposal.plans[0] is offer[2]:
                problems = list(offer[1])   # worked out for this very plan and these bounds
            else:
                problems = step_problems(self._arm, bounds, axis, delta, proposal.plans[0],
                                         proposal.start_joints, self._tool_speed,
                                         wire_duration_s)
        slot = self._jog_slot()
        with slot.lock:
            for token in [t for t in slot.offers if t not in self._issued]:
                del slot.offers[token]   # used or expired proposals
            slot.offers[proposal.token] = (bounds, tuple(problems))
        return proposal

    def jog_session_lines(self, proposal: Proposal) -> list[str]:
        """The session's bounds for the confirmation of ``proposal`` (or why the step
        cannot open a session and runs alone)."""
        offer = self._jog_slot().offers.get(proposal.token)
        if offer is None:
            return []
        bounds, problems = offer
        if problems:
            return [f"single step (no jog session: {problems[0]})"]
        return bounds.lines(self._arm)

    def execute_jog_session(self, proposal: Proposal, confirmer: Confirmer) -> RunResult:
        """Ask once, run the first step; a yes and a completed step open the session."""
        slot = self._jog_slot()
        with slot.lock:
            offer = slot.offers.get(proposal.token)   # shown by the confirmer, then dropped
        self.end_jog_session("a new session was asked for")
        asked = {"yes": False}

        class _Remember(Confirmer):
            def confirm(self, p: Proposal) -> bool:
                asked["yes"] = bool(confirmer.confirm(p))
                return asked["yes"]

        try:
            result = self.execute(proposal, _Remember())
        finally:
            with slot.lock:
                slot.offers.pop(proposal.token, None)
        if offer is None or offer[1] or not (asked["yes"] and result.completed):
            return result
        bounds = offer[0]
        now = self._clock()
        with slot.lock:
            session = ActiveSession(next(slot.numbers), bounds, now, now,
                                    state_key(self.state()), proposal.token)
            slot.active = session
            slot.last_end = None
        self._record("session-start", session=session.number, token=proposal.token,
                             center=list(bounds.center), half=list(bounds.half),
                             branch=str(bounds.branch), frame=bounds.frame, step=bounds.step,
                             speed_cap_mm_s=bounds.speed_cap_mm_s, idle_s=bounds.idle_s)
        return result

    def session_jog(self, axis: str, delta: float, *, speed_pct: float = 100.0,
                    end_within_s: float | None = None) -> SessionStep:
        """One jog step inside the active session, without a question. When there is no
        session, or the step does not fit it (the session then ends), nothing moves and
        ``ended`` says why: the caller asks again. ``end_within_s``: the step runs only
        if it would end within this many seconds (a key repeat that waited; outcome
        "lapsed" otherwise, and the session goes on)."""
        slot = self._jog_slot()
        with slot.lock:
            session = slot.active
        if session is None:
            return SessionStep(None, "no jog session")
        why = self._session_over(session, self._clock())
        if why is None and state_key(self.state()) != session.state_key:
            why = "the driver's state changed"
        if why:
            return SessionStep(None, self._finish_session(session, why))
        proposal = self.propose_jog(axis, delta,
                                    speed_pct=self._session_pct(session.bounds, speed_pct))
        token = proposal.token
        with slot.lock:
            current = slot.active is session
            in_turn = token == session.last_token + 1
            session.last_token = token
        if not current:
            return SessionStep(None, slot.last_end or "the jog session ended", token)
        if not in_turn:
            return SessionStep(None, self._finish_session(
                session, "another motion was asked for since the last step"), token)
        if not proposal.ok:   # refused by the gate's own checks: nothing moves
            self._issued.pop(token, None)
            self._record("result", token=token, outcome="refused",
                                 detail="; ".join(proposal.verdict.reasons), segments_sent=0,
                                 step=None)
            return SessionStep(RunResult(False, "refused",
                                         "refused: " + "; ".join(proposal.verdict.reasons)),
                               None, token)
        problems = step_problems(self._arm, session.bounds, axis, delta, proposal.plans[0],
                                 proposal.start_joints, self._tool_speed, wire_duration_s)
        if problems:
            self._issued.pop(token, None)
            return SessionStep(None, self._finish_session(session, problems[0]), token)
        if end_within_s is not None and proposal.duration_s > end_within_s:
            self._issued.pop(token, None)
            return SessionStep(RunResult(False, "lapsed", "not moved: the step would end more "
                                         f"than the dead-man window {DEADMAN_S:g} s after its "
                                         "key"), None, token)
        with slot.lock:
            slot.step_tokens.add(token)
        self._record("session-step", session=session.number, token=token)
        gate = self

        class _SessionYes(Confirmer):
            def confirm(self, p: Proposal) -> bool:
                return gate._session_confirms(session, p.token)

        try:
            result = self.execute(proposal, _SessionYes())
        finally:
            with slot.lock:
                slot.step_tokens.discard(token)
        ended = None
        if result.outcome in ("stopped", "halted", "expired") or (
                result.outcome == "cancelled" and slot.active is session):
            ended = self._finish_session(session, f"the step {result.outcome}: {result.detail}")
        else:
            with slot.lock:
                if slot.active is session:
                    session.last_step_s = self._clock()
                    session.steps += int(result.completed)
                else:
                    ended = slot.last_end or "the jog session ended"
        end = proposal.plans[0].segments[-1].joints if result.completed else None
        return SessionStep(result, ended, token, end)

    def _session_confirms(self, session: ActiveSession, token: int) -> bool:
        """The session's yes: only for a step session_jog cleared, while it is active."""
        slot = self._jog_slot()
        with slot.lock:
            return (slot.active is session and token in slot.step_tokens
                    and not self._stop.is_set())

    def _session_over(self, session: ActiveSession, now: float) -> str | None:
        if now - session.last_step_s > session.bounds.idle_s:
            return f"idle for more than {session.bounds.idle_s:g} s"
        if self._stop.is_set():
            return "a stop"
        return None

    def _finish_session(self, session: ActiveSession, why: str) -> str:
        slot = self._jog_slot()
        with slot.lock:
            if slot.active is not session:
                return slot.last_end or why
            slot.active = None
            slot.last_end = why
        self._record("session-end", session=session.number, reason=why,
                             steps=session.steps)
        return why

    def jog_session(self) -> SessionView | None:
        """A read-only picture of the active session (None when there is none); ends
        one that has timed out or was stopped. Reads no driver state (UI-thread safe)."""
        slot = self._jog_slot()
        with slot.lock:
            session = slot.active
        if session is None:
            return None
        now = self._clock()
        why = self._session_over(session, now)
        if why:
            self._finish_session(session, why)
            return None
        return session.view(now)

    def jog_session_ended(self) -> str | None:
        """Why the last session ended (None while one is active or none ran)."""
        return self._jog_slot().last_end

    def end_jog_session(self, why: str) -> None:
        """End the active session, if any (a change of branch, frame or step, quitting)."""
        with self._jog_slot().lock:
            session = self._jog_slot().active
        if session is not None:
            self._finish_session(session, why)

    def _jog_session_hook(self, why: str) -> None:
        """Called by stop, reset and disable: they end any session. Never raises."""
        try:
            self.end_jog_session(why)
        except Exception:  # noqa: BLE001 - a journal fault must not stop a stop
            pass
