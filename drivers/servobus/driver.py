"""ServoBusDriver: an arm of Protocol 2.0 smart servos on one bus, behind the Driver
interface.

The servos hold a position each; they have no segment queue. So the host keeps the
queue: a streaming thread interpolates the queued segments (every axis linear in joint
space over the segment's duration, as PROTOCOL.md's MOVE) and, at a fixed rate
(``[bus] rate_hz``), sends one sync write of every goal position, then one sync read of
every present position for the state. The same thread watches what comes back:

- a status packet with its alert bit set: the servo's Hardware Error Status is read and
  latched as ``fault: DRIVE axis=i`` with its bits in words (the servo has dropped its
  torque itself; the others are switched off). Only :meth:`reset`, which the user asks
  for, reboots that servo to clear it.
- one missed status packet is tolerated (the state just ages); ``MISSES`` in a row from
  every servo means the servo supply is off (an e-stop contact in series with it, or a
  cable out): latched as ``estop``, cleared by :meth:`reset` once every servo answers
  again. ``MISSES`` in a row from some servos is ``fault: DRIVE axis=i``.
- a present position further than ``following`` from the goal for ``following_s``:
  ``fault: FOLLOWING axis=i``.
- a gap longer than the servos' bus watchdog between two writes (the host stalled): the
  servos have stopped themselves; latched as ``fault: WATCHDOG axis=0``.

The servos' bus watchdog is armed while the drives are on, so a host that dies stops the
arm within ``watchdog_ms``. Counts are PROTOCOL.md's ``direction * (value - zero) *
counts_per_unit`` on the host (the same calibration as the serial road); the servo's goal
and present position are ``2048 + counts`` (the middle of a one-turn range), its Homing
Offset register holds the joint's mechanical zero (``servo_offset``) and its Drive Mode
reverse bit is kept clear, so direction lives in one place.

Homing: the encoders are absolute, so nothing moves. :meth:`open` and :meth:`home` check
(and, with the drives off, write) operating mode, drive mode, homing offset and, in
one-turn mode, the position limits, then the arm counts as homed.
"""

from __future__ import annotations

import math
import threading
import time
from collections import deque
from dataclasses import dataclass

from benchjog.drivers.base import ControllerError, Driver, DriverEvent, DriverState, LinkError, Mode
from benchjog.drivers.calibration import counts_from_joints, hard_ranges_counts, joints_from_counts
from benchjog.drivers.servobus import packet as P
from benchjog.drivers.servobus import table as T
from benchjog.drivers.servobus.bus import DEFAULT_LATENCY_S, NoReply, PacketRefused, ServoBus
from benchjog.drivers.servobus.config import BusConfig, bus_config_for_arm
from benchjog.kinematics.model import Arm, Segment

MISSES = 3                 # status packets missed in a row before a servo counts as silent
DEFAULT_QUEUE_DEPTH = 16   # host-side segments
PROFILE_MARGIN = 1.5       # profile velocity/acceleration = margin x the joint's maxima
REBOOT_WAIT_S = 2.0


@dataclass
class _Seg:
    number: int
    start: tuple[int, ...]
    target: tuple[int, ...]
    duration_s: float
    t0: float | None = None


class ServoBusDriver(Driver):
    """Options: ``port`` (required), ``baud`` (overrides the arm file's), ``bus`` (a
    :class:`BusConfig`; default: the arm file's ``[bus]`` keys), ``trace`` (a file that
    gets every packet as hex), ``latency_s`` (reply timeout margin, default 0.030),
    ``settle_counts`` (default 2: within this of the goal an axis is still),
    ``following_deg`` (default 10, mm for a prismatic joint) and ``following_s``
    (default 0.5), ``queue_depth`` (default 16)."""

    name = "servobus"
    homing_without_motion = ("homing on a servo bus moves nothing: the servos' absolute encoders "
                             "know where they are; their zero offsets, modes and limits are checked "
                             "against the arm file (written while the drives are off)")

    def __init__(self, arm: Arm, **options) -> None:
        super().__init__(arm, **options)
        if not options.get("port"):
            raise LinkError("servobus: no port given")
        cfg = options.get("bus") or bus_config_for_arm(arm)
        if options.get("baud"):
            cfg = BusConfig(**{**cfg.__dict__, "baud": int(options["baud"])})
        self.config: BusConfig = cfg
        self.period_s = 1.0 / cfg.rate_hz
        self.settle_counts = int(options.get("settle_counts", 2))
        self.following_s = float(options.get("following_s", 0.5))
        fol = float(options.get("following_deg", 10.0))
        self.following_counts = tuple(max(1, round(fol * j.counts_per_unit)) for j in arm.joints)
        self.queue_depth = int(options.get("queue_depth", DEFAULT_QUEUE_DEPTH))
        self._trace_path = options.get("trace")
        self._trace_file = None
        self.bus = ServoBus(options["port"], cfg.baud, float(options.get("latency_s", DEFAULT_LATENCY_S)),
                            trace=self._trace if self._trace_path else None)
        n = arm.n_joints
        self._ranges = self._servo_ranges()
        self._lock = threading.RLock()
        self._open = False
        self._enabled = False
        self._homed = False
        self._latched: str | None = None
        self._power_lost = False
        self._events: list[DriverEvent] = []
        self._outputs = 0
        self._present: list[int] = [0] * n
        self._t_present = 0.0
        self._goal: list[int] | None = None     # last goal written (counts)
        self._segs: deque[_Seg] = deque()
        self._numbers = 0
        self._stops = 0
        self._misses = [0] * n
        self._far_since: list[float | None] = [None] * n
        self._t_last_write: float | None = None
        self._thread: threading.Thread | None = None
        self._running = False
        self._t0 = time.monotonic()
        self.write_times: deque[float] = deque(maxlen=100_000)   # when each goal sync write went out
        self.setpoints_sent = 0
        self._fresh_needed = False   # a hold or halt: the state waits for a read after it
        self._hold_wanted = False    # a stop asked the streaming thread to hold the servos
        self._hold_said = False      # that stop flushed segments: the hold is reported
        self._held = threading.Event()   # set: no hold is waiting to be written
        self._held.set()
        self._wake = threading.Event()   # wakes the streaming thread at once (a stop)
        self._ran_dry = 0            # segments that started on an empty host queue
        self.segments_streamed = 0   # the last segment whose goals went out (segments count from 1)

    # -- helpers --------------------------------------------------------------------------
    def _trace(self, direction: str, data: bytes) -> None:
        f = self._trace_file
        if f is not None:
            try:
                f.write(f"{time.monotonic() - self._t0:10.4f} {direction} {data.hex(' ')}\n")
            except (OSError, ValueError):
                pass

    def _servo_ranges(self) -> tuple[tuple[int, int], ...]:
        """Allowed counts per axis: the hard range, inside what the servo's mode can reach."""
        lo_s, hi_s = T.POSITION_RANGE[self.config.mode]
        out = []
        for lo, hi in hard_ranges_counts(self.arm):
            out.append((max(lo, lo_s - T.CENTER), min(hi, hi_s - T.CENTER)))
        return tuple(out)

    def _axis_name(self, i: int) -> str:
        return f"servo id {self.config.ids[i]} ({self.arm.joints[i].name})"

    def _event(self, kind: str, detail: str) -> None:
        self._events.append(DriverEvent(kind, detail, time.monotonic() - self._t0))

    def _latch(self, reason: str, kind: str, detail: str) -> None:
        """Latch (first reason wins), halt the host queue, mark drives off."""
        with self._lock:
            self._segs.clear()
            self._enabled = False
            self._fresh_needed = True   # where it halted is known only from the next read
            if self._latched is None:
                self._latched = reason
                self._event(kind, detail)

    def _torque_off_all(self) -> None:
        try:
            self.bus.write_broadcast(T.TORQUE_ENABLE, 0)
        except Exception:  # noqa: BLE001 - best effort on a link that may be gone
            pass

    # -- life cycle -----------------------------------------------------------------------
    def open(self) -> None:
        if self._thread is not None:           # a reconnect after a lost link
            self._running = False
            if self._thread is not threading.current_thread():
                self._thread.join(timeout=2.0)
            self._thread = None
        with self._lock:
            self._latched, self._power_lost, self._enabled, self._goal = None, False, False, None
            self._segs.clear()
            self._misses = [0] * self.arm.n_joints
        if self._trace_path and self._trace_file is None:
            try:
                self._trace_file = open(self._trace_path, "a", encoding="utf-8", buffering=1)
            except OSError as exc:
                raise LinkError(f"servobus: cannot write the trace {self._trace_path}: {exc.strerror}") from None
        self.bus.open()
        try:
            with self.bus.lock:
                for i, sid in enumerate(self.config.ids):
                    pkt = self._retry(lambda sid=sid: self.bus.ping(sid), i)
                    model = pkt.params[0] | pkt.params[1] << 8 if len(pkt.params) >= 2 else -1
                    want = self.config.models[i] if self.config.models else None
                    if want is not None and model != want:
                        raise ControllerError(
                            f"{self._axis_name(i)} is a {T.model_name(model)} ({model}), the arm file says "
                            f"{T.model_name(want)} ({want})")
                self._torque_off_all()
                for i, sid in enumerate(self.config.ids):
                    self._retry(lambda sid=sid: self.bus.write(sid, T.TORQUE_ENABLE, 0), i)
                self._configure(write=True)
                self._read_present_blocking()
                errors = self._read_hardware_errors()
        except NoReply as exc:
            self.bus.close()
            raise LinkError(f"servobus: {self._who(exc.missing)} does not answer on {self.bus.port_name} "
                            f"at {self.config.baud} baud") from None
        except BaseException:
            self.bus.close()
            raise
        with self._lock:
            self._open = True
            self._homed = True
            if errors:
                i, bits = errors[0]
                self._latch(f"fault: DRIVE axis={i + 1}", "fault",
                            f"{self._axis_name(i)}: hardware error: {T.hardware_error_words(bits)}; "
                            "reset reboots it")
        self._running = True
        self._thread = threading.Thread(target=self._loop, name="servobus-stream", daemon=True)
        self._thread.start()

    def _who(self, ids) -> str:
        names = [self._axis_name(self.config.ids.index(s)) if s in self.config.ids else f"servo id {s}"
                 for s in ids]
        return ", ".join(names)

    def _retry(self, fn, axis: int, tries: int = MISSES):
        for k in range(tries):
            try:
                return fn()
            except NoReply:
                if k == tries - 1:
                    raise

    def _configure(self, write: bool) -> None:
        """Check (and with ``write``, set) each servo's EEPROM entries: operating mode,
        drive mode (reverse bit clear), homing offset, position limits in one-turn mode.
        Raises ControllerError listing the first mismatch when not writing."""
        for i, sid in enumerate(self.config.ids):
            wanted = [(T.OPERATING_MODE, self.config.mode),
                      (T.HOMING_OFFSET, self.config.offsets[i] if self.config.offsets else 0)]
            if self.config.mode == T.POSITION_MODE:
                lo, hi = self._ranges[i]
                wanted += [(T.MIN_POSITION, max(0, T.CENTER + lo)), (T.MAX_POSITION, min(4095, T.CENTER + hi))]
            drive, _ = self._retry(lambda sid=sid: self.bus.read(sid, T.DRIVE_MODE), i)
            if drive & T.DRIVE_MODE_REVERSE:
                wanted.append((T.DRIVE_MODE, drive & ~T.DRIVE_MODE_REVERSE))
            for entry, value in wanted:
                have, _ = self._retry(lambda sid=sid, e=entry: self.bus.read(sid, e), i)
                if have == value:
                    continue
                if not write:
                    raise ControllerError(f"{self._axis_name(i)}: {entry.name} is {have}, the arm file "
                                          f"wants {value} (switch the drives off, then home)")
                self._retry(lambda sid=sid, e=entry, v=value: self.bus.write(sid, e, v), i)

    def _read_present_blocking(self) -> None:
        got = self._retry(lambda: self.bus.sync_read(T.PRESENT_POSITION, self.config.ids), 0)
        with self._lock:
            self._present = [got[sid][0] - T.CENTER for sid in self.config.ids]
            self._t_present = time.monotonic()
            self._fresh_needed = False

    def _read_hardware_errors(self) -> list[tuple[int, int]]:
        out = []
        for i, sid in enumerate(self.config.ids):
            bits, _ = self._retry(lambda sid=sid: self.bus.read(sid, T.HARDWARE_ERROR), i)
            if bits:
                out.append((i, bits))
        return out

    def _close(self) -> None:
        self._running = False
        self._wake.set()
        if self._thread is not None and self._thread is not threading.current_thread():
            self._thread.join(timeout=2.0)
        self._thread = None
        self._give_up_hold()
        if self.bus.is_open:
            try:
                with self.bus.lock:
                    self._torque_off_all()
            except Exception:  # noqa: BLE001 - closing must not fail on a dead link
                pass
        self.bus.close()
        with self._lock:
            self._open = False
            self._enabled = False
            self._segs.clear()
        if self._trace_file is not None:
            self._trace_file.close()
            self._trace_file = None

    # -- commands -------------------------------------------------------------------------
    def _check_open_and_latch(self, verb: str) -> None:
        if not self._open:
            raise LinkError("servobus: the link is not open")
        if self._latched is not None:
            if self._latched.startswith("link lost"):
                raise LinkError(f"servobus: {self._latched}")
            raise ControllerError(f"refused {verb}: {self._latched} is latched (reset first)")

    def enable(self) -> None:
        with self._lock:
            self._check_open_and_latch("ENABLE")
        j = self.arm.joints
        try:
            with self.bus.lock:
                for i, sid in enumerate(self.config.ids):
                    pps = j[i].to_display(j[i].max_speed) * j[i].counts_per_unit * PROFILE_MARGIN
                    pps2 = j[i].to_display(j[i].max_accel) * j[i].counts_per_unit * PROFILE_MARGIN
                    rpm = pps / T.PULSES_PER_REV * 60.0
                    rpm2 = pps2 / T.PULSES_PER_REV * 3600.0
                    self._retry(lambda sid=sid: self.bus.write(sid, T.BUS_WATCHDOG, 0), i)
                    self._retry(lambda sid=sid, v=max(1, math.ceil(rpm / T.PROFILE_VELOCITY_UNIT_RPM)):
                                self.bus.write(sid, T.PROFILE_VELOCITY, v), i)
                    self._retry(lambda sid=sid, v=max(1, math.ceil(rpm2 / T.PROFILE_ACCELERATION_UNIT_RPM2)):
                                self.bus.write(sid, T.PROFILE_ACCELERATION, v), i)
                self._read_present_blocking()
                with self._lock:
                    goal = list(self._present)
                self.bus.sync_write(T.GOAL_POSITION, {sid: T.CENTER + c for sid, c in zip(self.config.ids, goal)})
                for i, sid in enumerate(self.config.ids):
                    self._retry(lambda sid=sid: self.bus.write(sid, T.TORQUE_ENABLE, 1), i)
                wd = max(1, round(self.config.watchdog_ms / 1000.0 / T.WATCHDOG_UNIT_S))
                for i, sid in enumerate(self.config.ids):
                    self._retry(lambda sid=sid: self.bus.write(sid, T.BUS_WATCHDOG, wd), i)
                with self._lock:
                    self._goal = goal
                    self._enabled = True
                    self._t_last_write = time.monotonic()
                    self._far_since = [None] * self.arm.n_joints
        except NoReply as exc:
            with self.bus.lock:
                self._torque_off_all()
            raise ControllerError(f"enable failed: {self._who(exc.missing)} does not answer") from None
        except PacketRefused as exc:
            with self.bus.lock:
                self._torque_off_all()
            raise ControllerError(f"enable refused: {exc}") from None

    def disable(self) -> None:
        with self._lock:
            if not self._open:
                raise LinkError("servobus: the link is not open")
            self._segs.clear()
            self._enabled = False
            self._stops += 1
        with self.bus.lock:
            self._torque_off_all()
            for sid in self.config.ids:
                try:
                    self.bus.write(sid, T.BUS_WATCHDOG, 0)
                except (NoReply, PacketRefused):
                    pass

    def home(self, timeout_s: float = 60.0) -> None:
        """Absolute encoders: nothing moves. Checks each servo's zero offset, mode and
        limits against the arm file (writing them while the drives are off)."""
        with self._lock:
            self._check_open_and_latch("HOME")
            if self._segs:
                raise ControllerError("refused HOME: segments are still queued (stop first)")
            enabled = self._enabled
        try:
            with self.bus.lock:
                self._configure(write=not enabled)
        except NoReply as exc:
            raise ControllerError(f"home failed: {self._who(exc.missing)} does not answer") from None
        with self._lock:
            self._homed = True
            self._event("done", "homing: absolute encoders, nothing moved; zero offsets checked")

    def _queue(self, segment: Segment, timeout_s: float) -> None:
        counts = counts_from_joints(self.arm, segment.joints)
        deadline = time.monotonic() + max(0.0, timeout_s)
        with self._lock:
            stops_at_entry = self._stops
        while True:
            with self._lock:
                if self._stops != stops_at_entry:
                    raise ControllerError("refused MOVE: stopped while waiting for a queue slot")
                self._require_motion_allowed(self._state_locked())
                for i, (c, (lo, hi)) in enumerate(zip(counts, self._ranges), start=1):
                    if not lo <= c <= hi:
                        raise ControllerError(f"controller refused MOVE: RANGE axis={i}")
                if len(self._segs) < self.queue_depth:
                    if self._segs:
                        start = self._segs[-1].target
                    else:
                        start = tuple(self._goal if self._goal is not None else self._present)
                    self._numbers += 1
                    self._segs.append(_Seg(self._numbers, tuple(start), counts, segment.duration_s))
                    return
            if time.monotonic() >= deadline:
                raise ControllerError(f"refused MOVE: QUEUE_FULL (no free slot after {timeout_s:g} s)")
            time.sleep(0.002)

    def stop(self) -> None:
        """Flush the queue at once (no further goal is written) and have the streaming
        thread hold every servo where it is (a fresh read, then that position as the
        goal) as soon as the bus is free. Returns without waiting for the bus: a tick in
        progress, or a servo that does not answer, never delays the caller;
        :meth:`wait_stopped` waits for the hold. The state shows MOVING and not fresh
        until a read after the hold."""
        with self._lock:
            self._stops += 1
            had = bool(self._segs)
            self._segs.clear()
            if not (self._open and self._enabled and self._running):
                return
            self._hold_wanted = True
            self._hold_said = self._hold_said or had
            self._fresh_needed = True
            self._held.clear()
        self._wake.set()

    def wait_stopped(self, timeout_s: float | None = None) -> bool:
        """Wait until the hold of every stop so far is written (or given up on: the
        link is gone or the driver closed); True when none is waiting any more."""
        return self._held.wait(timeout_s)

    def _hold(self) -> None:
        """The hold a stop asked for (the streaming thread, bus lock held): read where
        the servos are and write that as their goal."""
        self._read_tick(time.monotonic())
        with self._lock:
            hold = list(self._present)
            self._goal = hold
            self._fresh_needed = True   # the next read, after the hold, makes it fresh
        self.bus.sync_write(T.GOAL_POSITION, {sid: T.CENTER + c for sid, c in zip(self.config.ids, hold)})
        with self._lock:
            self._t_last_write = time.monotonic()
            self._hold_wanted = False
            if self._hold_said:
                self._event("info", "stopped: queue flushed, servos hold where they are")
            self._hold_said = False
            self._held.set()

    def _give_up_hold(self) -> None:
        with self._lock:
            self._hold_wanted = False
            self._hold_said = False
            self._held.set()

    def _state_locked(self) -> DriverState:
        moving = bool(self._segs) or self._fresh_needed
        if self._enabled and self._goal is not None and not moving:
            moving = any(abs(g - p) > self.settle_counts for g, p in zip(self._goal, self._present))
        if self._latched == "estop":
            mode = Mode.ESTOP
        elif self._latched is not None:
            mode = Mode.FAULT
        elif not self._enabled:
            mode = Mode.DISABLED
        elif not self._homed:
            mode = Mode.UNHOMED
        else:
            mode = Mode.MOVING if moving else Mode.IDLE
        return DriverState(
            mode=mode, joints=joints_from_counts(self.arm, self._present), queued=len(self._segs),
            outputs=self._outputs, age_s=time.monotonic() - self._t_present if self._t_present else math.inf,
            is_open=self._open, enabled=self._enabled, homed=self._homed, latched=self._latched,
            link=f"servobus {self.bus.port_name} {self.config.baud} baud",
            fresh=not (self._fresh_needed or self._power_lost), queue_ran_dry=self._ran_dry)

    def state(self) -> DriverState:
        with self._lock:
            return self._state_locked()

    def _set_output(self, channel: int, on: bool) -> None:
        with self._lock:
            self._check_open_and_latch("OUT")
            where = self.config.outputs.get(channel)
        if where is None:
            raise ControllerError(f"output {channel} is not wired on this bus (arm file: [bus.outputs])")
        sid, address = where
        try:
            with self.bus.lock:
                self._retry(lambda: self.bus.write(sid, T.Entry(f"output {channel}", address, 1), int(on)), 0)
        except NoReply:
            raise ControllerError(f"output {channel}: servo id {sid} does not answer") from None
        with self._lock:
            self._outputs = (self._outputs | (1 << channel)) if on else (self._outputs & ~(1 << channel))

    def reset(self) -> None:
        """Clear a latch. After an e-stop: only once every servo answers again. After a
        hardware error: reboots the servos that report one (torque comes back off)."""
        with self._lock:
            if not self._open:
                raise LinkError("servobus: the link is not open")
            latched = self._latched
            if latched is not None and latched.startswith("link lost"):
                raise LinkError(f"servobus: {latched}")
        try:
            with self.bus.lock:
                missing = []
                for sid in self.config.ids:
                    try:
                        self._retry(lambda sid=sid: self.bus.ping(sid), 0)
                    except NoReply:
                        missing.append(sid)
                if missing:
                    raise ControllerError(
                        f"reset refused: {self._who(missing)} does not answer (servo power still off: "
                        "is the e-stop released?)")
                for i, bits in self._read_hardware_errors():
                    self.bus.reboot(self.config.ids[i])
                    self._wait_answer(self.config.ids[i])
                self._torque_off_all()
                for sid in self.config.ids:
                    self.bus.write(sid, T.BUS_WATCHDOG, 0)
                self._configure(write=True)
                self._read_present_blocking()
        except NoReply as exc:
            raise ControllerError(f"reset failed: {self._who(exc.missing)} does not answer") from None
        with self._lock:
            self._latched = None
            self._power_lost = False
            self._enabled = False
            self._goal = None
            self._misses = [0] * self.arm.n_joints
            self._homed = True

    def _wait_answer(self, sid: int) -> None:
        deadline = time.monotonic() + REBOOT_WAIT_S
        while True:
            try:
                self.bus.ping(sid)
                return
            except NoReply:
                if time.monotonic() >= deadline:
                    raise

    def poll_events(self) -> list[DriverEvent]:
        with self._lock:
            events, self._events = self._events, []
            return events

    # -- the streaming thread -------------------------------------------------------------
    def _loop(self) -> None:
        t_next = time.monotonic()
        while self._running:
            now = time.monotonic()
            if now < t_next and not self._hold_wanted:
                self._wake.wait(min(t_next - now, 0.05))
                self._wake.clear()
                continue
            try:
                self._tick(now)
            except LinkError as exc:
                # The port is gone: nothing more can be sent. The state says so (not open,
                # latched); the interlock's reset opens the link again.
                with self._lock:
                    self._open = False
                    self._latch(f"link lost: {exc}", "link-lost", f"{exc}; the servos' bus watchdog stops them")
                self._running = False
                self._give_up_hold()
                self.bus.close()
                return
            except Exception as exc:  # noqa: BLE001 - a bug here must stop the arm, not hide
                self._give_up_hold()
                with self.bus.lock:
                    self._torque_off_all()
                self._latch(f"fault: DRIVE axis=0", "fault", f"servobus internal error: {type(exc).__name__}: {exc}")
            t_next = max(t_next + self.period_s, time.monotonic() - self.period_s)

    def _setpoint(self, now: float) -> list[int] | None:
        """The goal counts for ``now`` from the host queue (None: nothing queued)."""
        if not self._segs:
            return None
        while self._segs:
            seg = self._segs[0]
            if seg.t0 is None:          # it starts on an empty queue (not chained to the last)
                seg.t0 = now
                self._ran_dry += 1
            if seg.number > self.segments_streamed:
                self.segments_streamed = seg.number
            t_end = seg.t0 + seg.duration_s
            if now < t_end:
                f = (now - seg.t0) / seg.duration_s
                return [round(a + (b - a) * f) for a, b in zip(seg.start, seg.target)]
            self._segs.popleft()
            self._event("done", f"segment {seg.number} done")
            if self._segs:
                self._segs[0].t0 = t_end
            else:
                return list(seg.target)
        return None

    def _tick(self, now: float) -> None:
        with self.bus.lock:
            now = time.monotonic()   # after the lock: a wait for the bus counts as a gap too
            if self._hold_wanted:
                with self._lock:
                    holding = self._enabled and not self._power_lost
                if not holding:
                    self._give_up_hold()
                else:
                    self._hold()
                    return
            with self._lock:
                if self._power_lost:
                    power_lost = True
                else:
                    power_lost = False
                    enabled = self._enabled
                    goal = self._setpoint(now) if enabled else None
                    if enabled and self._t_last_write is not None and \
                            now - self._t_last_write > self.config.watchdog_ms / 1000.0:
                        gap = now - self._t_last_write
                        self._latch("fault: WATCHDOG axis=0", "fault",
                                    f"the host wrote nothing for {gap * 1000:.0f} ms, longer than the servos' "
                                    f"bus watchdog ({self.config.watchdog_ms} ms): they stopped themselves")
                        enabled, goal = False, None
            if power_lost:
                self._look_for_power()
                return
            if goal is not None:
                self.bus.sync_write(T.GOAL_POSITION,
                                    {sid: T.CENTER + c for sid, c in zip(self.config.ids, goal)})
                with self._lock:
                    self._goal = goal
                    self.setpoints_sent += 1
                t_write = time.monotonic()
                self.write_times.append(t_write)
            self._read_tick(now)
            with self._lock:
                if self._enabled:
                    self._t_last_write = time.monotonic()   # the sync read counts for the watchdog too

    def _read_tick(self, now: float) -> None:
        """One sync read of present position; alerts, silence and following checks."""
        ids = self.config.ids
        try:
            got = self.bus.sync_read(T.PRESENT_POSITION, ids)
            missing: tuple[int, ...] = ()
        except NoReply as exc:
            got = {}
            for sid, pkt in exc.got.items():
                if len(pkt.params) == 4 and not pkt.packet_error:
                    got[sid] = (P.int_from(pkt.params), pkt)
            missing = exc.missing
        except PacketRefused:
            return
        alerts = [ids.index(sid) for sid, (_, pkt) in got.items() if pkt.alert]
        with self._lock:
            for i, sid in enumerate(ids):
                if sid in got:
                    self._present[i] = got[sid][0] - T.CENTER
                    self._misses[i] = 0
                else:
                    self._misses[i] += 1
            if got:
                self._t_present = time.monotonic()
                if not missing:
                    self._fresh_needed = False
            silent = [i for i, m in enumerate(self._misses) if m >= MISSES]
            if self._latched is not None:
                return   # already latched: keep the position fresh, report nothing new
        if silent and len(silent) == len(ids):
            with self._lock:
                self._power_lost = True
            self._latch("estop", "estop",
                        "no servo answers: servo power is off (e-stop pressed?) or the bus cable is out; "
                        "motion halted")
            return
        if silent:
            self._torque_off_all()
            i = silent[0]
            self._latch(f"fault: DRIVE axis={i + 1}", "fault", f"{self._axis_name(i)} does not answer; "
                        "the other servos were switched off")
            return
        if alerts:
            self._torque_off_all()
            i = alerts[0]
            try:
                bits, _ = self.bus.read(ids[i], T.HARDWARE_ERROR)
                words = T.hardware_error_words(bits)
            except (NoReply, PacketRefused):
                words = "(its error status could not be read)"
            self._latch(f"fault: DRIVE axis={i + 1}", "fault",
                        f"{self._axis_name(i)}: hardware error: {words}; the servos were switched off; "
                        "reset reboots it")
            return
        with self._lock:
            if not self._enabled or self._goal is None:
                return
            for i, (g, p) in enumerate(zip(self._goal, self._present)):
                if abs(g - p) > self.following_counts[i]:
                    if self._far_since[i] is None:
                        self._far_since[i] = now
                    elif now - self._far_since[i] >= self.following_s:
                        break
                else:
                    self._far_since[i] = None
            else:
                return
        self._torque_off_all()
        self._latch(f"fault: FOLLOWING axis={i + 1}", "fault",
                    f"{self._axis_name(i)} is {abs(g - p)} counts from its goal for "
                    f"{self.following_s:g} s; the servos were switched off")

    def _look_for_power(self) -> None:
        """While the servos are silent: ping them; once all answer, the supply is back."""
        for sid in self.config.ids:
            try:
                self.bus.ping(sid)
            except NoReply:
                return
        with self._lock:
            if self._power_lost:
                self._power_lost = False
                self._event("estop-clear", "every servo answers again: reset, then enable")
