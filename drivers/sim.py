"""The built-in simulated arm: a controller in memory, for the tests and the default
console.

It behaves like a controller that has already been homed: it starts at its home pose
(every axis at count 0), drives off (mode DISABLED) until :meth:`SimDriver.enable`.
Segments run in real time from a clock (option ``clock``, a callable returning
seconds; ``time_scale`` speeds it up), advanced lazily on every call, so a test with
a fake clock is deterministic. It keeps its own hard range (soft limits + 5 deg/mm):
a segment outside is refused with ``RANGE axis=i`` and nothing moves.

Every command it accepted and acted on is appended to :attr:`SimDriver.commands`
(tuples named by the PROTOCOL.md verbs, e.g. ``("MOVE", 500, (1800, -3600))``);
refused ones go to :attr:`SimDriver.refused` with the reason. So a test can assert
that nothing moved: ``not [c for c in sim.commands if c[0] == "MOVE"]``.

A "true" arm (option ``true_errors``, a mapping as
:func:`benchjog.kinematics.identify.true_vector_from_errors` takes it): the arm the
simulated controller really drives differs from its arm file by those link lengths and
joint zeros, and its base stands at that pose on a fixture plate.
:meth:`SimDriver.tool_in_plate_mm` is the simulated bench's ruler: where the tool tip
really is on the plate, for calibration rehearsals and tests. The controller itself
still speaks counts only, as a real one does.
"""

from __future__ import annotations

import threading
import time
from collections import deque
from collections.abc import Callable
from dataclasses import dataclass

from benchjog.drivers.base import ControllerError, Driver, DriverEvent, DriverState, LinkError, Mode
from benchjog.drivers.calibration import counts_from_joints, joints_from_counts, range_violation
from benchjog.kinematics import identify
from benchjog.kinematics.model import Arm, Segment

DEFAULT_QUEUE_DEPTH = 8


@dataclass
class _SimSegment:
    number: int
    start: tuple[float, ...]
    target: tuple[int, ...]
    duration_s: float
    t0: float | None = None


class SimDriver(Driver):
    """A simulated controller. Options: ``clock`` (callable -> seconds, default
    ``time.monotonic``), ``time_scale`` (default 1.0), ``queue_depth`` (default 8),
    ``true_errors`` (default none: the arm is its arm file, its base at the plate's
    origin)."""

    name = "sim"

    def __init__(self, arm: Arm, **options) -> None:
        super().__init__(arm, **options)
        self._clock: Callable[[], float] = options.get("clock", time.monotonic)
        self._scale = float(options.get("time_scale", 1.0))
        if not self._scale > 0:
            raise ValueError(f"time_scale must be > 0, got {self._scale}")
        self.queue_depth = int(options.get("queue_depth", DEFAULT_QUEUE_DEPTH))
        self._lock = threading.RLock()
        self._t_clock0 = self._clock()
        self._open = False
        self._enabled = False
        self._homed = True
        self._pos: list[float] = [0.0] * arm.n_joints   # counts, float while moving
        self._segs: deque[_SimSegment] = deque()
        self._outputs = 0
        self._estop_input = False
        self._latched: str | None = None
        self._events: list[DriverEvent] = []
        self._stall: tuple[int, float] | None = None  # (axis, armed at)
        self._numbers = 0
        self._stops = 0  # counts stop() calls: a queue() waiting for a slot gives up on one
        self.commands: list[tuple] = []
        self.refused: list[tuple[tuple, str]] = []
        self.true_vector = identify.true_vector_from_errors(arm, dict(options.get("true_errors") or {}))

    # -- time -----------------------------------------------------------------------
    def _now(self) -> float:
        return (self._clock() - self._t_clock0) * self._scale

    def _event(self, kind: str, detail: str, t: float | None = None) -> None:
        self._events.append(DriverEvent(kind, detail, self._now() if t is None else t))

    def _advance(self) -> None:
        """Run the queue forward to the clock's now (call with the lock held)."""
        now = self._now()
        while self._segs:
            seg = self._segs[0]
            if seg.t0 is None:
                seg.t0 = now
            t_end = seg.t0 + seg.duration_s
            if self._stall is not None:
                axis, armed_at = self._stall
                t_stall = min(max(seg.t0 + seg.duration_s / 2.0, armed_at), t_end)
                if now >= t_stall:
                    self._set_pos_at(seg, (t_stall - seg.t0) / seg.duration_s)
                    self._stall = None
                    self._halt()
                    self._latch_fault("FOLLOWING", axis, t_stall)
                    return
            if now < t_end:
                self._set_pos_at(seg, (now - seg.t0) / seg.duration_s)
                return
            self._pos = [float(c) for c in seg.target]
            self._segs.popleft()
            self._event("done", f"segment {seg.number} done", t_end)
            if self._segs:
                self._segs[0].t0 = t_end

    def _set_pos_at(self, seg: _SimSegment, fraction: float) -> None:
        f = min(max(fraction, 0.0), 1.0)
        self._pos = [a + (b - a) * f for a, b in zip(seg.start, seg.target)]

    def _halt(self) -> None:
        self._segs.clear()

    def _latch_fault(self, code: str, axis: int, t: float | None = None) -> None:
        self._enabled = False
        self._latched = f"fault: {code} axis={axis}"
        self._event("fault", f"controller fault {code} on axis {axis}", t)

    def _mode(self) -> Mode:
        if self._latched == "estop":
            return Mode.ESTOP
        if self._latched is not None:
            return Mode.FAULT
        if not self._enabled:
            return Mode.DISABLED
        if not self._homed:
            return Mode.UNHOMED
        return Mode.MOVING if self._segs else Mode.IDLE

    def _refuse(self, command: tuple, reason: str) -> ControllerError:
        self.refused.append((command, reason))
        return ControllerError(f"controller refused {command[0]}: {reason}")

    def _check_latch(self, command: tuple) -> None:
        if not self._open:
            raise LinkError("sim: the driver is not open")
        if self._latched == "estop":
            raise self._refuse(command, "ESTOP")
        if self._latched is not None:
            raise self._refuse(command, "FAULT")

    # -- Driver ---------------------------------------------------------------------
    def open(self) -> None:
        with self._lock:
            self._open = True
            self.commands.append(("OPEN",))

    def _close(self) -> None:
        with self._lock:
            self._advance()
            self._halt()
            self._enabled = False
            self._open = False

    def enable(self) -> None:
        with self._lock:
            self._advance()
            self._check_latch(("ENABLE",))
            self._enabled = True
            self.commands.append(("ENABLE",))

    def disable(self) -> None:
        with self._lock:
            if not self._open:
                raise LinkError("sim: the driver is not open")
            self._advance()
            self._halt()
            self._enabled = False
            self.commands.append(("DISABLE",))

    def home(self, timeout_s: float = 60.0) -> None:
        """Homing is instant on the simulated arm: every axis goes to count 0."""
        with self._lock:
            self._advance()
            command = ("HOME",)
            self._check_latch(command)
            if not self._enabled:
                raise self._refuse(command, "NOT_ENABLED")
            if self._segs:
                raise self._refuse(command, "segments are still queued (stop first)")
            self._pos = [0.0] * self.arm.n_joints
            self._homed = True
            self.commands.append(command)
            self._event("done", "homing done")

    def _queue(self, segment: Segment, timeout_s: float) -> None:
        counts = counts_from_joints(self.arm, segment.joints)
        ms = max(1, round(segment.duration_s * 1000.0))
        command = ("MOVE", ms, counts)
        deadline = time.monotonic() + max(0.0, timeout_s)
        with self._lock:
            stops_at_entry = self._stops
        while True:
            with self._lock:
                if self._stops != stops_at_entry:  # a stop came while waiting for a slot
                    raise self._refuse(command, "stopped while waiting for a queue slot")
                self._advance()
                self._check_latch(command)
                self._require_motion_allowed(self._state_locked())
                axis = range_violation(self.arm, counts)
                if axis is not None:
                    raise self._refuse(command, f"RANGE axis={axis}")
                if len(self._segs) < self.queue_depth:
                    start = tuple(float(c) for c in self._segs[-1].target) if self._segs \
                        else tuple(self._pos)
                    self._numbers += 1
                    self._segs.append(_SimSegment(self._numbers, start, counts, ms / 1000.0))
                    self._advance()  # a segment queued on an idle arm starts now
                    self.commands.append(command)
                    return
            if time.monotonic() >= deadline:
                with self._lock:
                    raise self._refuse(command, f"QUEUE_FULL (no free slot after {timeout_s:g} s)")
            time.sleep(0.002)

    def stop(self) -> None:
        with self._lock:
            self._stops += 1
            self._advance()
            self._halt()
            self.commands.append(("STOP",))

    def _state_locked(self) -> DriverState:
        return DriverState(
            mode=self._mode(),
            joints=joints_from_counts(self.arm, [round(p) for p in self._pos]),
            queued=len(self._segs),
            outputs=self._outputs,
            age_s=0.0,
            is_open=self._open,
            enabled=self._enabled,
            homed=self._homed,
            latched=self._latched,
            link="sim",
        )

    def state(self) -> DriverState:
        with self._lock:
            self._advance()
            return self._state_locked()

    def _set_output(self, channel: int, on: bool) -> None:
        with self._lock:
            self._advance()
            command = ("OUT", channel, int(on))
            self._check_latch(command)
            if on:
                self._outputs |= 1 << channel
            else:
                self._outputs &= ~(1 << channel)
            self.commands.append(command)

    def reset(self) -> None:
        with self._lock:
            self._advance()
            command = ("RESET",)
            if not self._open:
                raise LinkError("sim: the driver is not open")
            if self._estop_input:
                raise self._refuse(command, "ESTOP (the e-stop input is still active)")
            self._latched = None
            self.commands.append(command)

    def poll_events(self) -> list[DriverEvent]:
        with self._lock:
            self._advance()
            events, self._events = self._events, []
            return events

    # -- test hooks -----------------------------------------------------------------
    def tool_in_plate_mm(self) -> tuple[float, ...]:
        """Where the tool tip of the true arm is on the fixture plate (mm; planar x, y;
        SCARA x, y, z), from the axes' counts now."""
        with self._lock:
            self._advance()
            counts = [round(p) for p in self._pos]
        joints = joints_from_counts(self.arm, counts)
        point = identify.plate_points_mm(self.arm, identify.params_of(self.arm), self.true_vector,
                                         [joints])[0]
        return tuple(float(v) for v in point)

    @property
    def position_counts(self) -> tuple[int, ...]:
        """Where the simulated axes are, in counts (rounded)."""
        with self._lock:
            self._advance()
            return tuple(round(p) for p in self._pos)

    def inject_estop(self) -> None:
        """The e-stop input becomes active: halt, flush, drives off, ESTOP latched."""
        with self._lock:
            self._advance()
            self._estop_input = True
            self._halt()
            self._enabled = False
            self._latched = "estop"
            self._event("estop", "e-stop pressed: motion halted, drives off")

    def release_estop(self) -> None:
        """The e-stop input is released; the latch stays until reset()."""
        with self._lock:
            self._advance()
            self._estop_input = False
            self._event("estop-clear", "e-stop released: reset, then enable")

    def inject_fault(self, code: str = "DRIVE", axis: int = 0) -> None:
        """A controller fault now: halt, flush, drives off, FAULT latched."""
        with self._lock:
            self._advance()
            self._halt()
            if self._latched != "estop":
                self._latch_fault(code, axis)

    def inject_stall(self, axis: int) -> None:
        """Axis ``axis`` (from 1) stalls halfway through the next segment that runs
        (or the one running now, if past its half it stalls at once):
        a FOLLOWING fault, everything halts there."""
        with self._lock:
            self._advance()
            self._stall = (axis, self._now())
            self._advance()
