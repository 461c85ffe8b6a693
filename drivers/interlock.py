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
- the approval: it binds to exactly that proposal (the very object the gate made, which
  is offered once), to the arm's position when it was made, and expires APPROVAL_TTL_S (10 s; a whole program:
  PROGRAM_APPROVAL_TTL_S, 60 s) after it was made.

This is a software interlock, not a safety-rated function (README, Safety).
"""

from __future__ import annotations

import itertools
import math
import threading
import time
from abc import ABC, abstractmethod
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from benchjog.drivers.base import Driver, DriverEvent, DriverState, LinkError
from benchjog.drivers.jog_session import (DEADMAN_S, ActiveSession, SessionBounds, SessionSlot,
                                          SessionStep,
                                          SessionView, frame_of, make_bounds, state_key,
                                          step_problems)
from benchjog.drivers.journal import Journal, NullJournal
from benchjog.drivers.registry import create_driver
from benchjog.kinematics.limits import fmt
from benchjog.kinematics.model import Arm, Segment
from benchjog.kinematics.planner import JOINT, Plan, plan_jog, plan_joint_move, plan_move
from benchjog.kinematics.solve import check_joints, tool_from_joints

FRESH_S = 0.5              # the driver's position must be newer than this
START_TOL_RAD = math.radians(0.05)  # the arm "has moved" beyond this since the proposal
START_TOL_MM = 0.05
SPEED_TOL = 1.01           # 1 % for the rounding of durations to whole milliseconds
JOINT_JOG_MAX_DEG = 15.0   # the largest single joint-jog step (deg, or mm on the quill)
TOOL_SPEED_SAMPLES = 8     # sub-samples per segment when bounding the tool speed


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


@dataclass(frozen=True)
class Proposal:
    """What the user is asked to confirm. Frozen; nothing has moved."""

    request: str
    actions: tuple[Action, ...]
    verdict: Verdict
    start_joints: tuple[float, ...]
    created_s: float
    token: int = 0

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
                 clock: Callable[[], float] = time.monotonic):
        self._arm = arm
        self.__driver = driver
        self._journal = journal if journal is not None else NullJournal()
        self._clock = clock
        self._stop = threading.Event()
        self._resume = threading.Event()
        self._resume.set()
        self._busy = threading.Lock()
        self._tokens = itertools.count(1)
        self._issued: dict[int, Proposal] = {}  # proposals made here and not yet used
        self._events: list[DriverEvent] = []
        self._events_lock = threading.Lock()
        self.sim = SimHooks(driver) if getattr(driver, "name", "") == "sim" else None
        self.link_error: str | None = None  # why the driver could not be opened, if so
        self._last_end: tuple[float, ...] | None = None  # where the last finished plan ended

    # -- life cycle --------------------------------------------------------------------
    @classmethod
    def open(cls, arm: Arm, driver: str = "sim", *, journal: Any = None,
             clock: Callable[[], float] = time.monotonic, require_link: bool = True,
             **driver_options: Any) -> "Interlock":
        """Build the driver by registry name, open it, and wrap it.

        Args:
            journal: None for a new journal file in the user's data directory, a path
                (file) to append to, or False for none.
            require_link: False lets a console start while the controller cannot be
                reached: the gate then reports "not connected" (``link_error`` says why)
                and :meth:`reset` tries to connect again.
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
        gate = cls(arm, instance, journal=journal_obj, clock=clock)
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

    def close(self) -> None:
        self.stop()
        try:
            self.__driver.close()
        finally:
            self._journal.record("close")
            self._journal.close()

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
            self._journal.record("event", event=event.kind, detail=event.detail)
        with self._events_lock:
            pending, self._events = self._events + fresh, []
        return pending

    def _collect_events(self) -> list[DriverEvent]:
        """Events read while a plan runs are kept for the next poll_events()."""
        fresh = self.__driver.poll_events()
        for event in fresh:
            self._journal.record("event", event=event.kind, detail=event.detail)
        with self._events_lock:
            self._events.extend(fresh)
        return fresh

    # -- checks ------------------------------------------------------------------------
    def _state_reasons(self, state: DriverState, *, need_homed: bool = True) -> list[str]:
        reasons = []
        if not state.is_open:
            reasons.append("the driver is not connected")
            return reasons
        if state.latched:
            reasons.append(f"latched: {state.latched} (reset first)")
        if not state.enabled:
            reasons.append("drives are off (enable first)")
        if need_homed and not state.homed:
            reasons.append("the arm is not homed (home first)")
        if state.age_s > FRESH_S:
            reasons.append(f"position report is {state.age_s:.2f} s old (limit {FRESH_S:g} s)")
        if state.queued > 0 or state.mode.value == "MOVING":
            reasons.append("the arm is still moving")
        return reasons

    def _segment_reasons(self, start: Sequence[float], segments: Sequence[Segment]) -> list[str]:
        arm = self._arm
        reasons: list[str] = []
        previous = tuple(start)
        for n, seg in enumerate(segments, 1):
            if len(seg.joints) != arm.n_joints or not all(math.isfinite(v) for v in seg.joints):
                return [f"segment {n}: malformed joint values"]
            if not (0.0005 <= seg.duration_s <= 60.0):
                return [f"segment {n}: duration {seg.duration_s:.4f} s outside 0.001..60 s"]
            wire_s = wire_duration_s(seg.duration_s)  # what the controller will be told
            for joint, value, before in zip(arm.joints, seg.joints, previous):
                margin = arm.margin(joint)
                if _into_margin(joint, margin, before, value):
                    reasons.append(
                        f"segment {n}: {joint.name} at {fmt(joint, value)} is outside its soft "
                        f"limits {fmt(joint, joint.min)}..{fmt(joint, joint.max)} less the "
                        f"margin {joint.to_display(margin):g} {joint.unit}")
                speed = abs(value - before) / wire_s
                if speed > joint.max_speed * SPEED_TOL:
                    reasons.append(
                        f"segment {n}: {joint.name} speed {joint.to_display(speed):.1f} "
                        f"{joint.unit}/s exceeds its cap {joint.to_display(joint.max_speed):g} "
                        f"{joint.unit}/s")
            tool_speed = self._tool_speed(previous, seg.joints, wire_s)
            if tool_speed > arm.tool_speed_max_mm_s * SPEED_TOL:
                reasons.append(f"segment {n}: tool speed {tool_speed:.1f} mm/s exceeds the cap "
                               f"{arm.tool_speed_max_mm_s:g} mm/s")
            if reasons:
                return reasons
            previous = seg.joints
        return reasons

    def _tool_speed(self, start: Sequence[float], end: Sequence[float], duration_s: float,
                    ) -> float:
        """Peak tool speed over a segment, bounded by sub-sampled chords (mm/s)."""
        arm = self._arm
        points = []
        for k in range(TOOL_SPEED_SAMPLES + 1):
            f = k / TOOL_SPEED_SAMPLES
            values = tuple(a + (b - a) * f for a, b in zip(start, end))
            pose = tool_from_joints(arm, values)
            points.append(pose[:3] if arm.is_scara else pose[:2])
        dt = duration_s / TOOL_SPEED_SAMPLES
        return max(math.dist(p, q) / dt for p, q in zip(points, points[1:]))

    def check_actions(self, actions: Sequence[Action], start_joints: Sequence[float] | None = None,
                      ) -> Verdict:
        """The static checks, without the driver's state: for dry runs."""
        start = tuple(start_joints) if start_joints is not None else None
        reasons: list[str] = []
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
                reasons += [prefix + r for r in self._segment_reasons(begin, action.segments)]
                start = action.segments[-1].joints if action.segments else begin
            elif isinstance(action, Dwell):
                if not (math.isfinite(action.seconds) and 0 <= action.seconds <= 3600):
                    reasons.append(f"{prefix}dwell {action.seconds} s outside 0..3600 s")
            elif isinstance(action, SetOutput):
                if not 0 <= action.channel <= 7:
                    reasons.append(f"{prefix}output channel {action.channel} outside 0..7")
            else:
                reasons.append(f"{prefix}unknown action {action!r}")
        return Verdict.of(reasons)

    # -- proposals (planning only) -----------------------------------------------------
    def _propose(self, request: str, actions: Sequence[Action], *, jog_mm: float | None = None,
                 jog_joint: tuple[int, float] | None = None,
                 start_joints: Sequence[float] | None = None) -> Proposal:
        state = self.state()
        start = tuple(start_joints) if start_joints is not None else state.joints
        reasons = self._state_reasons(state)
        if jog_mm is not None and abs(jog_mm) > self._arm.jog_step_max_mm:
            reasons.append(f"jog step {abs(jog_mm):g} mm exceeds the cap "
                           f"{self._arm.jog_step_max_mm:g} mm")
        if jog_joint is not None:
            joint = self._arm.joints[jog_joint[0]]
            step = abs(joint.to_display(jog_joint[1]))
            if step > JOINT_JOG_MAX_DEG:
                reasons.append(f"jog step {step:g} {joint.unit} on {joint.name} exceeds the cap "
                               f"{JOINT_JOG_MAX_DEG:g} {joint.unit}")
        reasons += self.check_actions(actions, start).reasons
        token = next(self._tokens)
        now = self._clock()
        proposal = Proposal(request, tuple(actions), Verdict.of(reasons), start, now, token)
        stale = [t for t, p in self._issued.items()
                 if now - p.created_s > self.PROGRAM_APPROVAL_TTL_S]
        for old in stale:  # past every approval limit: they could only expire
            del self._issued[old]
        self._issued[token] = proposal
        self._journal.record("request", token=token, request=request, ok=proposal.ok,
                             reasons=list(proposal.verdict.reasons),
                             segments=sum(len(p.segments) for p in proposal.plans),
                             duration_s=proposal.duration_s)
        return proposal

    def propose_move(self, target: Sequence[float], *, branch: Any = None, path: str = JOINT,
                     speed_pct: float = 100.0) -> Proposal:
        start = self.state().joints
        plan = plan_move(self._arm, start, tuple(target), branch=branch, path=path,
                         speed_pct=speed_pct)
        words = self._target_words(tuple(target))
        chosen = plan.summary.branch.value if plan.summary.branch else "no branch"
        return self._propose(f"move to {words} ({chosen}, {path} path, {speed_pct:g} %)", [plan],
                             start_joints=start)

    def propose_joints(self, joints: Sequence[float], *, speed_pct: float = 100.0) -> Proposal:
        joints = check_joints(self._arm, joints)
        start = self.state().joints
        plan = plan_joint_move(self._arm, start, joints, speed_pct=speed_pct)
        shown = ", ".join(f"{j.name} {fmt(j, v)}" for j, v in zip(self._arm.joints, joints))
        return self._propose(f"move joints to {shown}", [plan], start_joints=start)

    def propose_jog(self, axis: str, delta: float, *, speed_pct: float = 100.0) -> Proposal:
        start = self.state().joints
        last = self._last_end
        base = last if last is not None and self._moved_since(last, start) is None else None
        plan = plan_jog(self._arm, start, axis, delta, speed_pct=speed_pct, base=base)
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
        self._journal.record("result", token=token, outcome=result.outcome, detail=result.detail,
                             segments_sent=result.segments_sent, step=result.step)
        return result

    def execute(self, proposal: Proposal, confirmer: Confirmer) -> RunResult:
        """Confirm, then run a proposal; blocks until it finished or halted."""
        token = proposal.token
        if self._issued.get(token) is not proposal:
            return self._end(token, RunResult(False, "refused",
                                              "refused: this plan was not made by the interlock, "
                                              "was changed after it was made, or was used already"))
        del self._issued[token]  # a proposal is offered once, whatever the outcome
        if not proposal.ok:
            return self._end(token, RunResult(False, "refused",
                                              "refused: " + "; ".join(proposal.verdict.reasons)))
        if not self._busy.acquire(blocking=False):
            return self._end(token, RunResult(False, "refused", "refused: another plan is running"))
        try:
            return self._end(token, self._confirm_and_run(proposal, confirmer))
        finally:
            self._busy.release()

    def _confirm_and_run(self, proposal: Proposal, confirmer: Confirmer) -> RunResult:
        reasons = self._state_reasons(self.state())
        if reasons:
            return RunResult(False, "refused", "refused: " + "; ".join(reasons))
        self._stop.clear()  # from here on, a stop (even during the question) wins
        self._journal.record("confirm-asked", token=proposal.token)
        answer = bool(confirmer.confirm(proposal))
        waited = self._clock() - proposal.created_s
        self._journal.record("confirmation", token=proposal.token, yes=answer,
                             after_s=round(waited, 3))
        if not answer:
            return RunResult(False, "cancelled", "cancelled: nothing moved")
        if self._stop.is_set():
            return RunResult(False, "stopped", "stopped: stop was pressed while the question was "
                             "open; nothing moved")
        limit = self.approval_ttl_s(proposal)
        if waited > limit:
            return RunResult(False, "expired", f"expired: confirmed {waited:.1f} s after the plan "
                             f"was made (limit {limit:g} s); plan again")
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
        sent = 0
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
                    for n, seg in enumerate(action.segments, 1):
                        trouble = self._trouble()
                        if trouble:
                            return self._halted(trouble, sent, step, where, n, len(action.segments))
                        self.__driver.queue(seg)
                        sent += 1
                        self._journal.record("segment", token=proposal.token, step=index,
                                             n=n, joints=list(seg.joints),
                                             duration_s=seg.duration_s)
                    trouble = self._wait_done(action.summary.duration_s + 5.0)
                    if trouble:
                        return self._halted(trouble, sent, step, where, None, None)
                elif isinstance(action, Dwell):
                    deadline = time.monotonic() + action.seconds
                    while time.monotonic() < deadline:
                        trouble = self._trouble()
                        if trouble:
                            return self._halted(trouble, sent, step, where, None, None)
                        time.sleep(min(0.02, max(0.0, deadline - time.monotonic())))
                else:
                    self.__driver.set_output(action.channel, action.on)
                    self._journal.record("output", token=proposal.token, step=index,
                                         channel=action.channel, on=action.on)
            except Exception as exc:  # noqa: BLE001 - any driver failure halts, in one line
                self._safe_stop()
                return RunResult(False, "halted", f"halted{where}: {exc}", sent, step)
        ends = [p.segments[-1].joints for p in proposal.plans if p.segments]
        if ends:
            self._last_end = tuple(ends[-1])
        return RunResult(True, "done", "done", sent, None)

    def _trouble(self) -> str | None:
        if self._stop.is_set():
            return "stop"
        return self._halt_reason()

    def _halted(self, trouble: str, sent: int, step: int | None, where: str,
                n: int | None, total: int | None) -> RunResult:
        self.__driver.stop()
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

    def home(self, confirmer: Confirmer) -> RunResult:
        """The controller's homing cycle, after confirmation."""
        state = self.state()
        reasons = [r for r in self._state_reasons(state, need_homed=False)
                   if not r.startswith("position report")]
        token = next(self._tokens)
        proposal = Proposal("home: run the controller's homing cycle", (), Verdict.of(reasons),
                            state.joints, self._clock(), token)
        self._journal.record("request", token=token, request=proposal.request, ok=proposal.ok,
                             reasons=list(reasons))
        if not proposal.ok:
            return self._end(token, RunResult(False, "refused", "refused: " + "; ".join(reasons)))
        if not self._busy.acquire(blocking=False):
            return self._end(token, RunResult(False, "refused", "refused: another plan is running"))
        try:
            self._stop.clear()
            answer = bool(confirmer.confirm(proposal))
            self._journal.record("confirmation", token=token, yes=answer)
            if not answer:
                return self._end(token, RunResult(False, "cancelled", "cancelled: nothing moved"))
            if self._stop.is_set():
                return self._end(token, RunResult(False, "stopped", "stopped: stop was pressed "
                                                  "while the question was open; nothing moved"))
            if self._clock() - proposal.created_s > self.APPROVAL_TTL_S:
                return self._end(token, RunResult(False, "expired", "expired: confirm again"))
            self.__driver.home()
            return self._end(token, RunResult(True, "done", "homed"))
        except Exception as exc:  # noqa: BLE001 - any driver failure halts, in one line
            self._safe_stop()
            return self._end(token, RunResult(False, "halted", f"halted: {exc}"))
        finally:
            self._busy.release()

    # -- immediate commands ------------------------------------------------------------
    def stop(self) -> None:
        """Stop at once, from any thread; never asks for confirmation."""
        self._stop.set()
        self._resume.set()
        self._journal.record("stop")
        self._safe_stop()
        self._jog_session_hook("a stop")  # jog sessions: a stop ends one

    def _safe_stop(self) -> None:
        try:
            self.__driver.stop()
        except Exception:  # noqa: BLE001 - a dead link cannot move the arm either
            pass

    def pause(self) -> None:
        self._resume.clear()
        self._journal.record("pause")

    def resume(self) -> None:
        self._resume.set()
        self._journal.record("resume")

    def enable(self) -> None:
        self._journal.record("enable")
        self.__driver.enable()

    def disable(self) -> None:
        self._jog_session_hook("drives switched off")  # jog sessions: ends one
        self._journal.record("disable")
        self.__driver.disable()

    def reset(self) -> None:
        """Clear a latched e-stop (once released) or fault; reconnect a lost link; and
        connect a driver that could not be opened at start."""
        self._jog_session_hook("a reset")  # jog sessions: a reset ends one
        self._journal.record("reset")
        if not self.__driver.state().is_open:
            self.__driver.open()
            self.link_error = None
            self._journal.record("connected", link=self.__driver.state().link)
            return
        self.__driver.reset()

    def set_output(self, channel: int, on: bool) -> None:
        if not 0 <= channel <= 7:
            raise ValueError(f"output channel {channel} outside 0..7")
        self._journal.record("output", channel=channel, on=on)
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
        return min(float(speed_pct), 100.0 * bounds.speed_cap_mm_s / self._arm.tool_speed_max_mm_s)

    def propose_jog_session(self, axis: str, delta: float, *, step: float,
                            speed_pct: float = 100.0, **bounds_options: Any) -> Proposal:
        """A jog step offered as the first of a session around the present pose. Run it
        with :meth:`execute_jog_session`; :meth:`jog_session_lines` gives the bounds to
        show. ``step`` is the largest step (mm / deg); ``bounds_options`` go to
        :func:`make_bounds` (box_mm, z_mm, roll_deg, speed_cap_mm_s, idle_s).

        Raises:
            SessionError: bounds that cannot make a session.
        """
        joints = self.state().joints
        bounds = make_bounds(self._arm, joints, frame_of(axis), step, **bounds_options)
        proposal = self.propose_jog(axis, delta, speed_pct=self._session_pct(bounds, speed_pct))
        problems: list[str] = []
        if proposal.ok:
            problems = step_problems(self._arm, bounds, axis, delta, proposal.plans[0],
                                     proposal.start_joints, self._tool_speed, wire_duration_s)
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
        self._journal.record("session-start", session=session.number, token=proposal.token,
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
            self._journal.record("result", token=token, outcome="refused",
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
        self._journal.record("session-step", session=session.number, token=token)
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
        self._journal.record("session-end", session=session.number, reason=why,
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
