"""A controller emulator that speaks PROTOCOL.md on a pseudo-terminal.

It is the reference controller firmware itself: drivers/firmware/core.py, the same
module that runs on the board under MicroPython, on a simulated hardware layer
(:class:`SimHardware`), so what the tests prove about the emulator they prove about
the firmware's logic. This module adds only the pty, the clock and the test switches.

It behaves as a controller does after power-up: drives off, not homed. Segments run in
real time from a clock; the queue holds ``queue_depth`` segments (8); the 1000 ms
watchdog runs while the drives are enabled; homing takes ``home_s`` seconds and ends
with ``DONE``; counts outside the hard range (soft limits + 5 deg/mm) get
``ERR <seq> RANGE axis=<i>``. With ``pace`` on, bytes move at the configured baud
(10 bits per byte) in both directions, so a benchmark sees a realistic line.

Test switches (options): ``estop_at_s``, ``estop_after`` (MOVEs), ``fault_after``
(MOVEs; ``fault_code``, ``fault_axis``), ``drop_every`` (lose every Nth host line),
``garble_every`` (every Nth host line arrives with a bad CRC: ``ERR 0 BAD_CRC``),
``corrupt_every`` (every Nth reply leaves with a bad CRC), ``slow_ms`` (delay every
reply), ``counters`` (False: STATE without ``moves=``/``last=``, as an older
controller). ``true_errors``: the arm the emulated controller really drives differs from
its arm file (see drivers/sim.py; :meth:`Emulator.tool_in_plate_mm` is the bench's
ruler). :class:`Emulator` is used in-process by the tests; :func:`serve` runs it for
``benchjog emulate``.
"""

from __future__ import annotations

import os
import queue as queue_mod
import select
import signal
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass
from typing import TextIO

from benchjog.drivers import protocol as P
from benchjog.drivers.firmware import core
from benchjog.drivers.calibration import hard_ranges_counts
from benchjog.drivers.pty_pair import close_pty, open_raw_pty
from benchjog.kinematics.model import Arm

WATCHDOG_S = 1.0
BITS_PER_BYTE = 10  # 8N1: start bit, 8 data bits, stop bit
SPIN_S = 0.0003     # pacing: the last 0.3 ms of a wait is spun, not slept


@dataclass
class EmulatorOptions:
    """Everything ``Emulator`` can be told; see the module docstring."""

    queue_depth: int = 8
    home_s: float = 0.3
    baud: int = 115200
    pace: bool = False
    name: str = "benchjog-emulator"
    watchdog_s: float = WATCHDOG_S
    estop_at_s: float | None = None
    estop_after: int | None = None
    fault_after: int | None = None
    fault_code: str = "FOLLOWING"
    fault_axis: int = 1
    drop_every: int | None = None
    garble_every: int | None = None
    corrupt_every: int | None = None
    slow_ms: float = 0.0
    counters: bool = True
    true_errors: dict | None = None   # calibration rehearsals: the true arm's errors

    @classmethod
    def from_mapping(cls, values: dict) -> "EmulatorOptions":
        known = cls.__dataclass_fields__
        unknown = [k for k in values if k not in known]
        if unknown:
            raise ValueError(f"unknown emulator option {unknown[0]!r}")
        return cls(**{k: v for k, v in values.items() if v is not None})


class SimHardware:
    """The simulated hardware layer under the firmware core (see core.py for the
    methods): it keeps the last setpoints and outputs, and inputs a test or a typed
    command sets (``estop``, ``limit``, ``home_switch_at``)."""

    def __init__(self, n: int, home_switch_at: list[int | None] | None = None) -> None:
        self.n = n
        self.enabled = False
        self.counts = [0] * n
        self.outputs = 0
        self.estop = False
        self.limit = 0
        self.home_switch_at = home_switch_at or [None] * n
        self.writes = 0

    def enable(self, on: bool) -> None:
        self.enabled = bool(on)

    def write_counts(self, counts: list[int]) -> None:
        self.counts = list(counts)
        self.writes += 1

    def write_outputs(self, bits: int) -> None:
        self.outputs = bits

    def estop_active(self) -> bool:
        return self.estop

    def limit_active(self) -> int:
        return self.limit

    def reference(self, i: int, counts: int) -> None:
        self.counts[i] = counts

    def drive_fault(self) -> tuple[str, int] | None:
        return None

    def home_active(self, i: int) -> bool:
        """A home switch at ``home_switch_at[i]`` counts, approached from above."""
        at = self.home_switch_at[i]
        return at is not None and self.counts[i] <= at


def settings_for_arm(arm: Arm, opts: EmulatorOptions) -> core.Settings:
    """The firmware core's settings for an arm: its hard ranges in counts (soft limits
    + 5 deg/mm, drivers/calibration.py), and the emulator's queue, name and homing time."""
    axes = [{"min_counts": lo, "max_counts": hi} for lo, hi in hard_ranges_counts(arm)]
    return core.Settings(axes, queue=opts.queue_depth, name=opts.name,
                         home_ms=opts.home_s * 1000.0, counters=opts.counters,
                         watchdog_us=round(opts.watchdog_s * 1e6))


class Emulator:
    """The emulated controller on a pty: the firmware core (drivers/firmware/core.py)
    on :class:`SimHardware`. ``start()`` returns the device path of the slave side;
    ``stop()`` ends it (the port then goes away, as if unplugged)."""

    def __init__(self, arm: Arm, options: EmulatorOptions | dict | None = None,
                 clock: Callable[[], float] = time.monotonic) -> None:
        if isinstance(options, dict):
            options = EmulatorOptions.from_mapping(options)
        self.arm = arm
        self.opts = options or EmulatorOptions()
        self.clock = clock
        self.n = arm.n_joints
        self.hard = hard_ranges_counts(arm)
        self._lock = threading.RLock()
        self._wake = threading.Condition(self._lock)
        self._out: queue_mod.Queue[tuple[float, bytes] | None] = queue_mod.Queue()
        self._running = False
        self._threads: list[threading.Thread] = []
        self._master: int | None = None
        self._slave: int | None = None
        self.path: str | None = None
        self._t0 = clock()
        self.t_start = self._t0
        self.hw = SimHardware(self.n)
        self.core = core.Controller(settings_for_arm(arm, self.opts), self.hw, now_us=0)
        self.lines_in = 0
        self.replies_out = 0
        self.received: list[str] = []   # every valid host body, for tests
        self._rx_busy_until = 0.0
        self._tx_busy_until = 0.0

    # -- the core's state, as the tests and the old emulator name it ----------------
    def _us(self, t: float) -> int:
        return round((t - self._t0) * 1e6)

    @property
    def enabled(self) -> bool:
        return self.core.enabled

    @enabled.setter
    def enabled(self, on: bool) -> None:
        with self._lock:
            self.core._drives(bool(on))

    @property
    def homed(self) -> bool:
        return self.core.homed

    @homed.setter
    def homed(self, value: bool) -> None:
        self.core.homed = bool(value)

    @property
    def last_seq(self) -> int | None:
        return self.core.last_seq

    @last_seq.setter
    def last_seq(self, seq: int | None) -> None:
        self.core.last_seq = seq

    @property
    def last_valid_t(self) -> float:
        return self._t0 + self.core.last_valid_us / 1e6

    @last_valid_t.setter
    def last_valid_t(self, t: float) -> None:
        self.core.last_valid_us = self._us(t)

    @property
    def latched(self) -> str | None:
        return self.core.latched

    @property
    def estop_input(self) -> bool:
        return self.hw.estop

    @property
    def segs(self) -> list:
        return self.core.queue

    @property
    def pos(self) -> list[int]:
        return list(self.core.pos)

    @property
    def outputs(self) -> int:
        return self.core.outputs

    @property
    def moves_accepted(self) -> int:
        return self.core.accepted

    # -- life cycle -----------------------------------------------------------------
    def start(self) -> str:
        self._master, self._slave, self.path = open_raw_pty()
        with self._lock:
            self._running = True
            self.t_start = now = self.clock()
            self.core.last_valid_us = self._us(now)
        for target, name in ((self._reader, "rx"), (self._motion, "motion"), (self._writer, "tx")):
            t = threading.Thread(target=target, name=f"emulator-{name}", daemon=True)
            t.start()
            self._threads.append(t)
        return self.path

    def stop(self) -> None:
        with self._lock:
            if not self._running:
                return
            self._running = False
            self._wake.notify_all()
        self._out.put(None)
        for t in self._threads:
            t.join(timeout=2.0)
        close_pty(self._master, self._slave)
        self._master = self._slave = None

    def __enter__(self) -> "Emulator":
        self.start()
        return self

    def __exit__(self, *exc) -> None:
        self.stop()

    # -- runtime switches -----------------------------------------------------------
    def press_estop(self) -> None:
        """The e-stop input goes active (its normally-closed contact opens)."""
        with self._lock:
            self.hw.estop = True
            self._tick(self.clock())

    def release_estop(self) -> None:
        with self._lock:
            self.hw.estop = False
            self._tick(self.clock())

    def set_limit(self, axis: int) -> None:
        """Axis ``axis``'s limit switch input goes active (0: none is)."""
        with self._lock:
            self.hw.limit = axis
            self._tick(self.clock())

    def inject_fault(self, code: str = "DRIVE", axis: int = 0) -> None:
        with self._lock:
            self._tick(self.clock())
            self.core.fault(code, axis)
            self._flush()

    @property
    def mode(self) -> str:
        with self._lock:
            return self.core.mode()

    def position_counts(self) -> tuple[int, ...]:
        with self._lock:
            self._tick(self.clock())
            return tuple(self.core.pos)

    def tool_in_plate_mm(self) -> tuple[float, ...]:
        """Where the true arm's tool tip is on the fixture plate (``true_errors``)."""
        from benchjog.drivers.calibration import joints_from_counts
        from benchjog.kinematics import identify

        vec = identify.true_vector_from_errors(self.arm, dict(self.opts.true_errors or {}))
        joints = joints_from_counts(self.arm, self.position_counts())
        point = identify.plate_points_mm(self.arm, identify.params_of(self.arm), vec, [joints])[0]
        return tuple(float(v) for v in point)

    # -- output ---------------------------------------------------------------------
    def _flush(self) -> None:
        """Queue what the core has to send (lock held). Replies may be delayed or
        corrupted by the test switches; a reply sent again is delayed, not corrupted."""
        for kind, line in self.core.take():
            not_before = self.clock()
            wire = line
            if kind != core.EVENT:
                self.replies_out += 1
                not_before += self.opts.slow_ms / 1000.0
                n = self.opts.corrupt_every
                if kind == core.REPLY and n and self.replies_out % n == 0:
                    wire = line[:-3] + (b"0" if line[-3:-2] != b"0" else b"1") + line[-2:]
            self._enqueue(wire, not_before)

    def _enqueue(self, data: bytes, not_before: float) -> None:
        """Queue bytes for the wire. With pacing, the time the last byte is out is
        fixed here (the line waits behind the ones before it), so the writer
        thread's own wake-up latency does not add to the wire time."""
        start = max(self.clock(), not_before)
        if self.opts.pace:
            start = max(start, self._tx_busy_until)
            start += len(data) * BITS_PER_BYTE / self.opts.baud
            self._tx_busy_until = start
        self._out.put((start, data))

    def _writer(self) -> None:
        while True:
            item = self._out.get()
            if item is None or not self._running:
                return
            done, data = item
            self._sleep_until(done)
            try:
                os.write(self._master, data)  # type: ignore[arg-type]
            except OSError:
                return

    def _sleep_until(self, t: float) -> None:
        """Sleep until the clock reads ``t``; the last fraction of a millisecond is
        spun (yielding), since a plain sleep overshoots by ~0.1 ms and a UART does not."""
        while True:
            delay = t - self.clock()
            if delay <= 0:
                return
            time.sleep(delay - SPIN_S if delay > 2 * SPIN_S else 0)

    # -- input ----------------------------------------------------------------------
    def _reader(self) -> None:
        buf = b""
        while self._running:
            try:
                ready, _, _ = select.select([self._master], [], [], 0.05)
                if not ready:
                    continue
                chunk = os.read(self._master, 4096)  # type: ignore[arg-type]
            except (OSError, ValueError):
                return
            if not chunk:
                continue
            t_read = self.clock()
            buf += chunk
            while b"\n" in buf:
                line, buf = buf.split(b"\n", 1)
                line += b"\n"
                if self.opts.pace:
                    start = max(t_read, self._rx_busy_until)
                    done = start + len(line) * BITS_PER_BYTE / self.opts.baud
                    self._rx_busy_until = done
                    self._sleep_until(done)
                self._receive(line)
            if len(buf) > 4 * P.MAX_LINE_BYTES:
                buf = b""  # no newline in sight: noise

    def _receive(self, line: bytes) -> None:
        """One line from the wire, through the test switches, to the core."""
        with self._lock:
            self.lines_in += 1
            n = self.opts.drop_every
            if n and self.lines_in % n == 0:
                return  # lost on the wire
            g = self.opts.garble_every
            if g and self.lines_in % g == 0:
                line = b"\xff"  # arrives damaged: fails its check
            body = P.parse_line(line)
            if body is not None:
                self.received.append(body)
            before = self.core.accepted
            self.core.receive_line(line, self._us(self.clock()))
            if self.core.accepted != before:
                self._after_move(self.core.accepted)
            self._flush()
            self._wake.notify_all()

    def _after_move(self, accepted: int) -> None:
        if self.opts.estop_after and accepted == self.opts.estop_after:
            self.hw.estop = True
            self.core.tick(self.core.now_us)
        if self.opts.fault_after and accepted == self.opts.fault_after:
            self.core.fault(self.opts.fault_code, self.opts.fault_axis)

    # -- motion ---------------------------------------------------------------------
    def _tick(self, now: float) -> None:
        """The core forward to ``now``, with the timed e-stop switch (lock held)."""
        at = self.opts.estop_at_s
        if at is not None and now - self.t_start >= at:
            self.opts.estop_at_s = None
            self.hw.estop = True
        self.core.tick(self._us(now))
        self._flush()

    def _motion(self) -> None:
        with self._lock:
            while self._running:
                now = self.clock()
                self._tick(now)
                wait = 0.05
                nxt = self.core.next_event_us()
                if nxt is not None:
                    wait = min(wait, self._t0 + nxt / 1e6 - self.clock())
                if self.opts.estop_at_s is not None:
                    wait = min(wait, self.t_start + self.opts.estop_at_s - self.clock())
                self._wake.wait(timeout=max(wait, 0.0002))


CONSOLE_COMMANDS = {
    "estop": "press the e-stop button",
    "release": "release the e-stop button (the controller then waits for RESET)",
    "fault": "a DRIVE fault on axis 1",
    "limit": "open axis 1's limit switch (a LIMIT_SWITCH fault while the drives are on)",
    "clear": "close the limit switches again",
}


def run_console_command(emulator: "Emulator", line: str) -> str | None:
    """One typed command for a running emulator (``benchjog emulate`` reads them from
    its standard input): returns what it did, or None for an unknown word.

    The emulator is the bench's stand-in for the controller's own panel: a person
    rehearsing must be able to press the e-stop button, and release it again.
    """
    word = line.strip().lower()
    if word == "estop":
        emulator.press_estop()
    elif word == "release":
        emulator.release_estop()
    elif word == "fault":
        emulator.inject_fault("DRIVE", 1)
    elif word == "limit":
        emulator.set_limit(1)
    elif word == "clear":
        emulator.set_limit(0)
    else:
        return None
    return CONSOLE_COMMANDS[word]


def serve(arm: Arm, options: EmulatorOptions | dict | None, stdout: TextIO,
          stdin: TextIO | None = None, stderr: TextIO | None = None) -> int:
    """Run the emulator for ``benchjog emulate``: print the device path alone on the
    first line of ``stdout``, serve until SIGINT or SIGTERM (or the end of ``stdin``
    when it is a terminal), return 0. Lines typed on ``stdin`` are commands
    (:data:`CONSOLE_COMMANDS`); replies go to ``stderr``."""
    emulator = Emulator(arm, options)
    done = threading.Event()
    previous = {}

    def _quit(signum, frame):  # noqa: ARG001
        done.set()

    def _commands() -> None:
        for line in stdin:  # type: ignore[union-attr]
            if not line.strip():
                continue
            said = run_console_command(emulator, line)
            if stderr is not None:
                print(f"emulator: {said}" if said else
                      f"emulator: commands are {', '.join(CONSOLE_COMMANDS)}", file=stderr,
                      flush=True)

    for sig in (signal.SIGINT, signal.SIGTERM):
        previous[sig] = signal.signal(sig, _quit)
    try:
        path = emulator.start()
        stdout.write(path + "\n")
        stdout.flush()
        if stdin is not None:
            threading.Thread(target=_commands, name="emulator-commands", daemon=True).start()
        while not done.wait(0.2):
            pass
    finally:
        emulator.stop()
        for sig, handler in previous.items():
            signal.signal(sig, handler)
    return 0
