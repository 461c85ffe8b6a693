"""A controller emulator that speaks PROTOCOL.md on a pseudo-terminal.

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
reply). ``true_errors``: the arm the emulated controller really drives differs from its
arm file (see drivers/sim.py; :meth:`Emulator.tool_in_plate_mm` is the bench's ruler).
:class:`Emulator` is used in-process by the tests; :func:`serve` runs it for
``benchjog emulate``.
"""

from __future__ import annotations

import os
import queue as queue_mod
import select
import signal
import threading
import time
import tty
from collections import deque
from collections.abc import Callable
from dataclasses import dataclass
from typing import TextIO

from benchjog.drivers import protocol as P
from benchjog.drivers.calibration import hard_ranges_counts
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
    true_errors: dict | None = None   # calibration rehearsals: the true arm's errors

    @classmethod
    def from_mapping(cls, values: dict) -> "EmulatorOptions":
        known = cls.__dataclass_fields__
        unknown = [k for k in values if k not in known]
        if unknown:
            raise ValueError(f"unknown emulator option {unknown[0]!r}")
        return cls(**{k: v for k, v in values.items() if v is not None})


@dataclass
class _Seg:
    seq: int
    start: tuple[float, ...]
    target: tuple[int, ...]
    duration_s: float
    t0: float | None = None


class Emulator:
    """The emulated controller on a pty. ``start()`` returns the device path of the
    slave side; ``stop()`` ends it (the port then goes away, as if unplugged)."""

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
        # controller state
        self.enabled = False
        self.homed = False
        self.estop_input = False
        self.latched: str | None = None    # None, "ESTOP" or "FAULT"
        self.pos: list[float] = [0.0] * self.n
        self.segs: deque[_Seg] = deque()
        self.homing: tuple[int, float, float, tuple[float, ...]] | None = None  # seq, t0, t_end, start
        self.outputs = 0
        self.last_seq: int | None = None
        self.last_reply: list[bytes] = []
        self.last_valid_t = clock()
        self.t_start = clock()
        self.moves_accepted = 0
        self.lines_in = 0
        self.replies_out = 0
        self.received: list[str] = []   # every valid host body, for tests
        self._rx_busy_until = 0.0
        self._tx_busy_until = 0.0

    # -- life cycle -----------------------------------------------------------------
    def start(self) -> str:
        master, slave = os.openpty()
        tty.setraw(master)
        tty.setraw(slave)
        self._master, self._slave = master, slave
        self.path = os.ttyname(slave)
        self._running = True
        self.t_start = self.last_valid_t = self.clock()
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
        for fd in (self._master, self._slave):
            if fd is not None:
                try:
                    os.close(fd)
                except OSError:
                    pass
        self._master = self._slave = None

    def __enter__(self) -> "Emulator":
        self.start()
        return self

    def __exit__(self, *exc) -> None:
        self.stop()

    # -- runtime switches -----------------------------------------------------------
    def press_estop(self) -> None:
        with self._lock:
            self._advance(self.clock())
            self.estop_input = True
            self._halt()
            self.enabled = False
            self.latched = "ESTOP"
            self._send_line("EVT ESTOP")

    def release_estop(self) -> None:
        with self._lock:
            self.estop_input = False
            self._send_line("EVT ESTOP_CLEAR")

    def inject_fault(self, code: str = "DRIVE", axis: int = 0) -> None:
        with self._lock:
            self._advance(self.clock())
            self._fault(code, axis)

    @property
    def mode(self) -> str:
        with self._lock:
            if self.latched == "ESTOP":
                return "ESTOP"
            if self.latched == "FAULT":
                return "FAULT"
            if not self.enabled:
                return "DISABLED"
            if self.homing is not None:
                return "MOVING"
            if not self.homed:
                return "UNHOMED"
            return "MOVING" if self.segs else "IDLE"

    def position_counts(self) -> tuple[int, ...]:
        with self._lock:
            self._advance(self.clock())
            return tuple(round(p) for p in self.pos)

    def tool_in_plate_mm(self) -> tuple[float, ...]:
        """Where the true arm's tool tip is on the fixture plate (``true_errors``)."""
        from benchjog.drivers.calibration import joints_from_counts
        from benchjog.kinematics import identify

        vec = identify.true_vector_from_errors(self.arm, dict(self.opts.true_errors or {}))
        joints = joints_from_counts(self.arm, self.position_counts())
        point = identify.plate_points_mm(self.arm, identify.params_of(self.arm), vec, [joints])[0]
        return tuple(float(v) for v in point)

    # -- output ---------------------------------------------------------------------
    def _send_line(self, body: str, reply: bool = False) -> bytes:
        """Frame and queue one outgoing line (lock held). Replies may be delayed or
        corrupted by the test switches; returns the framed (uncorrupted) line."""
        line = P.frame(body)
        not_before = self.clock()
        wire = line
        if reply:
            self.replies_out += 1
            not_before += self.opts.slow_ms / 1000.0
            n = self.opts.corrupt_every
            if n and self.replies_out % n == 0:
                wire = line[:-3] + (b"0" if line[-3:-2] != b"0" else b"1") + line[-2:]
        self._enqueue(wire, not_before)
        return line

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
        with self._lock:
            self.lines_in += 1
            n = self.opts.drop_every
            if n and self.lines_in % n == 0:
                return  # lost on the wire
            body = P.parse_line(line)
            g = self.opts.garble_every
            if g and self.lines_in % g == 0:
                body = None
            if body is None:
                self._send_line("ERR 0 BAD_CRC", reply=True)
                return
            now = self.clock()
            self._advance(now)   # a watchdog that expired before this line still fires
            self.last_valid_t = now
            self.received.append(body)
            self._handle(body)
            self._wake.notify_all()

    def _handle(self, body: str) -> None:
        cmd = P.parse_host(body)
        if cmd is None:
            seq = P.parse_int(body.split(" ", 1)[0]) if body else None
            if seq is None or not 1 <= seq <= P.MAX_SEQ:
                self._send_line("ERR 0 SYNTAX", reply=True)  # no seq to trust
                return
            if self._out_of_sequence(seq):
                return
            self.last_seq = seq  # answered like any other refused line: the count goes on
            self.last_reply = [self._send_line(f"ERR {seq} SYNTAX", reply=True)]
            return
        if cmd.verb != "HELLO" and self._out_of_sequence(cmd.seq):
            return
        self.last_seq = cmd.seq
        reply = self._execute(cmd)
        self.last_reply = [self._send_line(reply, reply=True)]
        self._after_reply(cmd)

    def _out_of_sequence(self, seq: int) -> bool:
        """A retransmission (the last reply again) or an unexpected seq (BAD_SEQ): True
        when the line is answered that way and must not be executed."""
        if self.last_seq is not None:
            if seq == self.last_seq:
                for line in self.last_reply:   # a retransmission: the same reply again
                    self.replies_out += 1
                    self._enqueue(line, self.clock() + self.opts.slow_ms / 1000.0)
                return True
            expected = P.next_seq(self.last_seq)
            if seq != expected:
                self._send_line(f"ERR {seq} BAD_SEQ expected={expected}", reply=True)
                return True
        return False

    def _execute(self, cmd: P.HostLine) -> str:
        seq, verb, args = cmd.seq, cmd.verb, cmd.args
        if verb not in P.HOST_VERBS:
            return f"ERR {seq} UNKNOWN"
        if verb == "MOVE":
            return self._move(cmd)
        if verb == "OUT":
            if len(args) != 2 or P.parse_int(args[0]) is None or args[1] not in ("0", "1"):
                return f"ERR {seq} SYNTAX"
            ch = int(args[0])
            if not 0 <= ch <= 7:
                return f"ERR {seq} SYNTAX"
            if self.latched:
                return f"ERR {seq} {self.latched}"
            self.outputs = (self.outputs | (1 << ch)) if args[1] == "1" else (self.outputs & ~(1 << ch))
            return f"OK {seq}"
        if args:
            return f"ERR {seq} SYNTAX"
        if verb == "HELLO":
            return f"OK {seq} proto={P.PROTO_VERSION} axes={self.n} queue={self.opts.queue_depth} name={self.opts.name}"
        if verb == "ENABLE":
            if self.latched:
                return f"ERR {seq} {self.latched}"
            self.enabled = True
            return f"OK {seq}"
        if verb == "DISABLE":
            self._halt()
            self.enabled = False
            return f"OK {seq}"
        if verb == "HOME":
            if self.latched:
                return f"ERR {seq} {self.latched}"
            if not self.enabled:
                return f"ERR {seq} NOT_ENABLED"
            self._halt()
            now = self.clock()
            self.homed = False
            self.homing = (seq, now, now + self.opts.home_s, tuple(self.pos))
            return f"OK {seq}"
        if verb == "STOP":
            self._halt()
            return f"OK {seq}"
        if verb == "STATE":
            pos = ",".join(str(round(p)) for p in self.pos)
            return f"OK {seq} mode={self.mode} pos={pos} queued={len(self.segs)} out={self.outputs}"
        if verb == "RESET":
            if self.estop_input:
                return f"ERR {seq} ESTOP"
            self.latched = None
            return f"OK {seq}"
        return f"ERR {seq} UNKNOWN"  # pragma: no cover - every verb handled above

    def _move(self, cmd: P.HostLine) -> str:
        seq, args = cmd.seq, cmd.args
        if len(args) != 1 + self.n:
            return f"ERR {seq} SYNTAX"
        values = [P.parse_int(a) for a in args]
        if any(v is None for v in values) or not 1 <= values[0] <= 60000:  # type: ignore[operator]
            return f"ERR {seq} SYNTAX"
        ms, counts = values[0], tuple(values[1:])
        if self.latched:
            return f"ERR {seq} {self.latched}"
        if not self.enabled:
            return f"ERR {seq} NOT_ENABLED"
        if not self.homed:
            return f"ERR {seq} NOT_HOMED"
        for i, ((lo, hi), c) in enumerate(zip(self.hard, counts), start=1):
            if not lo <= c <= hi:  # type: ignore[operator]
                return f"ERR {seq} RANGE axis={i}"
        if len(self.segs) >= self.opts.queue_depth:
            return f"ERR {seq} QUEUE_FULL"
        start = tuple(float(c) for c in self.segs[-1].target) if self.segs else tuple(self.pos)
        seg = _Seg(seq, start, counts, ms / 1000.0)  # type: ignore[arg-type]
        if not self.segs:
            seg.t0 = self.clock()
        self.segs.append(seg)
        self.moves_accepted += 1
        return f"OK {seq} free={self.opts.queue_depth - len(self.segs)}"

    def _after_reply(self, cmd: P.HostLine) -> None:
        if cmd.verb != "MOVE" or not self.last_reply or not self.last_reply[0].startswith(b"OK"):
            return
        if self.opts.estop_after and self.moves_accepted == self.opts.estop_after:
            self.press_estop()
        if self.opts.fault_after and self.moves_accepted == self.opts.fault_after:
            self._fault(self.opts.fault_code, self.opts.fault_axis)

    # -- motion ---------------------------------------------------------------------
    def _halt(self) -> None:
        self.segs.clear()
        self.homing = None

    def _fault(self, code: str, axis: int) -> None:
        self._halt()
        self.enabled = False
        if self.latched != "ESTOP":
            self.latched = "FAULT"
        self._send_line(f"EVT FAULT code={code} axis={axis}")

    def _advance(self, now: float) -> None:
        """Run segments, homing and the watchdog forward to ``now`` (lock held)."""
        if self.enabled and now - self.last_valid_t > self.opts.watchdog_s:
            t_dog = self.last_valid_t + self.opts.watchdog_s
            self._advance_motion(t_dog)
            self._fault("WATCHDOG", 0)
            return
        self._advance_motion(now)
        if (self.opts.estop_at_s is not None and not self.estop_input and self.latched != "ESTOP"
                and now - self.t_start >= self.opts.estop_at_s):
            self.opts.estop_at_s = None
            self.press_estop()

    def _advance_motion(self, now: float) -> None:
        if self.homing is not None:
            seq, t0, t_end, start = self.homing
            if now >= t_end:
                self.pos = [0.0] * self.n
                self.homing = None
                self.homed = True
                self._send_line(f"DONE {seq}")
            else:
                f = (now - t0) / (t_end - t0)
                self.pos = [s * (1.0 - f) for s in start]
            return
        while self.segs:
            seg = self.segs[0]
            if seg.t0 is None:
                seg.t0 = now
            t_end = seg.t0 + seg.duration_s
            if now < t_end:
                f = (now - seg.t0) / seg.duration_s
                self.pos = [a + (b - a) * f for a, b in zip(seg.start, seg.target)]
                return
            self.pos = [float(c) for c in seg.target]
            self.segs.popleft()
            self._send_line(f"DONE {seg.seq}")
            if self.segs:
                self.segs[0].t0 = t_end

    def _next_deadline(self, now: float) -> float:
        times = [now + 0.05]
        if self.homing is not None:
            times.append(self.homing[2])
        if self.segs and self.segs[0].t0 is not None:
            times.append(self.segs[0].t0 + self.segs[0].duration_s)
        if self.enabled:
            times.append(self.last_valid_t + self.opts.watchdog_s + 1e-4)
        if self.opts.estop_at_s is not None:
            times.append(self.t_start + self.opts.estop_at_s)
        return min(times)

    def _motion(self) -> None:
        with self._lock:
            while self._running:
                now = self.clock()
                self._advance(now)
                wait = self._next_deadline(now) - self.clock()
                if wait > 0:
                    self._wake.wait(timeout=wait)


CONSOLE_COMMANDS = {
    "estop": "press the e-stop button",
    "release": "release the e-stop button (the controller then waits for RESET)",
    "fault": "a DRIVE fault on axis 1",
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
