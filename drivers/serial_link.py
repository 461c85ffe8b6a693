"""The serial driver: PROTOCOL.md over pyserial.

Options: ``port`` (a device path or any pyserial URL: ``loop://``, ``socket://``,
``spy://``...), ``baud`` (115200), ``timeout_s`` (reply timeout, 0.3), ``retries``
(re-sends of an unanswered line before the link is declared lost, 3), ``trace`` (a
file path: every line sent and received, timestamped, flushed per line) and
``heartbeat_s`` (the STATE period, 0.2; 0 turns the heartbeat off, for tests only),
``window`` (pipelined MOVE lines, 4; 1 waits for each OK) and ``first_seq`` (HELLO's
seq, 1).

Replies are matched by seq, so a late duplicate is never taken for another line's
reply. Segments stream without waiting for their DONE, up to the controller's
``queue`` depth (flow control), and MOVE lines are pipelined: up to ``window`` (4)
may be on the wire without their OK, so both directions of the line stay busy. The
first segment of a stream (nothing queued before it) waits for its OK, so a refusal
raises from that ``queue()`` call; a segment refused in mid-stream cannot be taken back
from the ones already sent behind it, so the driver stops the arm at once and latches
``"fault: controller refused MOVE: ..."`` until :meth:`SerialDriver.reset`. A lost
pipelined line is re-sent alone (on a ``BAD_SEQ`` naming it or when its reply is
overdue), then the lines behind it; every other verb is one line at a time, after the
pipeline has drained (STOP and HELLO abandon it instead: they never wait).

A pipelined MOVE whose reply was lost while a later line was answered is not taken as
accepted (PROTOCOL.md): no MOVE goes out until a STATE's ``moves=`` count (or the
segment's DONE) shows it was; a count short of it is a gap: the driver stops the arm and
latches ``"fault: the segment to ... (MOVE n) was not accepted ..."``, which the next
``queue()`` raises and the interlock reports (never as done). A controller whose STATE
has no ``moves=``/``last=`` is not pipelined (``window`` is taken as 1).

After :meth:`SerialDriver.stop`, DISABLE, an e-stop, a fault or a lost link the position
is stale (``DriverState.fresh`` False) until a STATE sent after the stop's OK (or after
the event) is answered; ``stop()`` asks for one at once. ``DriverState.queue_ran_dry``
counts the MOVEs the controller took into an empty queue (its ``free=``), so a caller
can tell stop-and-go streaming (the queue running empty mid-motion) from a start.

A background reader dispatches replies, DONE and EVT lines; a heartbeat thread sends
STATE every ``heartbeat_s`` while the port is open (the watchdog needs a line every
second; PROTOCOL.md asks for a STATE at least every 250 ms while enabled). After an
e-stop, a fault or a lost link no MOVE goes out until :meth:`SerialDriver.reset`.
"""

from __future__ import annotations

import os
import select
import threading
import time
from collections import OrderedDict, deque
from collections.abc import Callable
from dataclasses import dataclass

import serial

from benchjog.drivers import protocol as P
from benchjog.drivers.base import ControllerError, Driver, DriverError, DriverEvent, DriverState, LinkError, Mode
from benchjog.drivers.calibration import counts_from_joints, joints_from_counts
from benchjog.kinematics.limits import fmt
from benchjog.kinematics.model import Arm, Segment

READ_POLL_S = 0.05
MAX_EVENTS = 256
STOP_SEND_WAIT_S = 0.015   # stop() waits at most this for its line to be written (one frame)


@dataclass
class _PipeLine:
    line: bytes
    t_sent: float
    tries: int = 1


def _seq_before(a: int, b: int) -> bool:
    """``a`` comes before ``b`` in the wrapping 1..65535 sequence (within half of it)."""
    return 0 < (b - a) % P.MAX_SEQ < P.MAX_SEQ // 2


class SerialDriver(Driver):
    """A controller on a serial link (see the module docstring for the options)."""

    name = "serial"

    def __init__(self, arm: Arm, **options) -> None:
        super().__init__(arm, **options)
        port = options.get("port")
        if not port:
            raise LinkError("the serial driver needs a port (a device path or pyserial URL)")
        self.port = str(port)
        self.baud = int(options.get("baud", 115200))
        self.timeout_s = float(options.get("timeout_s", 0.3))
        self.retries = int(options.get("retries", 3))
        self.heartbeat_s = float(options.get("heartbeat_s", 0.2) or 0.0)
        self.trace_path = options.get("trace")
        self.first_seq = int(options.get("first_seq", 1))  # HELLO's seq; the count starts there
        if not 1 <= self.first_seq <= P.MAX_SEQ:
            raise LinkError(f"first_seq must be 1..{P.MAX_SEQ}, got {self.first_seq}")
        self._lock = threading.RLock()
        self._cond = threading.Condition(self._lock)
        self._txn_lock = threading.Lock()
        self._write_lock = threading.Lock()
        self._ser = None
        self._trace = None
        self._threads: list[threading.Thread] = []
        self._stop_threads: list[threading.Thread] = []   # stops awaiting their OK
        self._running = False
        self._is_open = False
        self._t0 = time.monotonic()
        self._seq = 0
        self._waiting: int | None = None
        self._waiting_verb = ""
        self._reply: P.Reply | None = None
        self.window = max(1, int(options.get("window", 4)))
        self._pipe: OrderedDict[int, _PipeLine] = OrderedDict()  # MOVE lines sent, no reply yet
        self._resend_from: int | None = None   # re-send from this pipelined seq
        self._resend_single = True             # ...that line alone, or it and all behind it
        self._recovering: int | None = None    # a lost line re-sent alone, awaiting its reply
        self._outstanding: OrderedDict[int, tuple[int, ...]] = OrderedDict()  # MOVE seq -> target
        self._home_seq: int | None = None
        self._home_done = False
        self._stop_gen = 0
        self._stop_pending = 0   # stop() calls under way: other waits give up at once
        self._stop_written = 0   # the _stop_gen the last STOP line written covers
        self._mode = Mode.DISABLED
        self._pos: tuple[int, ...] = (0,) * arm.n_joints
        self._outputs = 0
        self._t_state: float | None = None
        self._t_state_sent = 0.0
        self._t_tx = 0.0
        self._homed = False
        self._latched: str | None = None
        self._events: deque[DriverEvent] = deque(maxlen=MAX_EVENTS)
        self.queue_depth = 1
        self.controller_name: str | None = None
        # the position is stale after a stop, halt, e-stop or fault until a STATE sent
        # after the stop's OK (or the event) answers: epochs tell such a STATE apart
        self._stale = True
        self._stale_epoch = 0
        self._epoch_open = True        # a STATE sent now can make the position fresh
        self._waiting_tag: int | None = None
        # the MOVE counters of STATE (moves=, last=): None until the first STATE after
        # HELLO tells whether the controller sends them; without them, no pipelining
        self.counters: bool | None = None
        self._moves_ok = 0             # MOVEs known accepted since HELLO (mod 65536)
        self._moves_sync = True        # _moves_ok matches the controller's count
        self._unconfirmed: OrderedDict[int, tuple[int, ...]] = OrderedDict()  # reply lost
        self._gap: str | None = None   # why the last stream was stopped, in words
        self._ran_dry = 0              # MOVEs the controller took into an empty queue

    # -- plumbing -------------------------------------------------------------------
    def _now(self) -> float:
        return time.monotonic()

    def _event(self, kind: str, detail: str) -> None:
        self._events.append(DriverEvent(kind, detail, self._now()))

    def _trace_line(self, direction: str, data: bytes) -> None:
        if self._trace is None:
            return
        text = data.decode("ascii", errors="backslashreplace").rstrip("\n")
        try:
            self._trace.write(f"{self._now() - self._t0:11.6f} {direction} {text}\n")
            self._trace.flush()
        except (OSError, ValueError):
            pass

    def _write(self, line: bytes) -> None:
        with self._write_lock:
            ser = self._ser
            if ser is None:
                raise LinkError(f"{self.port}: the port is not open")
            self._trace_line(">", line)  # first, so the trace never shows a reply before its line
            try:
                ser.write(line)
                self._t_tx = self._now()
            except Exception as exc:  # noqa: BLE001 - any port failure is a lost link
                self._lose_link(f"port error: {exc}")
                raise LinkError(f"{self.port}: link lost: port error: {exc}") from None

    def _lose_link(self, reason: str) -> None:
        with self._cond:
            if self._latched is not None and self._latched.startswith("link lost"):
                return
            self._latched = f"link lost: {reason}"
            self._mark_stale(False)
            self._event("link-lost", f"{self.port}: link lost: {reason}")
            self._cond.notify_all()

    def _mark_stale(self, open_now: bool) -> None:
        """The position is stale from here (lock held). ``open_now``: a STATE sent from
        now on makes it fresh (after an event); else only once :meth:`_open_epoch` is
        set again (after the stop's OK)."""
        self._stale = True
        self._stale_epoch += 1
        self._epoch_open = open_now

    def _move_words(self, seq: int, counts: tuple[int, ...] | None) -> str:
        """A MOVE line for people: its target in joint units and its seq."""
        if counts is None:
            return f"the segment sent as MOVE {seq}"
        where = ", ".join(f"{j.name} {fmt(j, v)}" for j, v in
                          zip(self.arm.joints, joints_from_counts(self.arm, counts)))
        return f"the segment to {where} (MOVE {seq})"

    def _link_lost(self) -> bool:
        return self._latched is not None and self._latched.startswith("link lost")

    def _transact(self, verb: str, *args: int | str,
                  guard: Callable[[], None] | None = None, hello: bool = False) -> P.Reply:
        """Send one line and wait for its reply, re-sending the same line (same seq) on
        a timeout or ``ERR 0 BAD_CRC``. ``guard`` runs under the state lock before every
        (re)send and may raise to keep the line from going out. A STOP line, once
        written, covers every stop() call made before it (stop() waits for that)."""
        with self._txn_lock:
            if verb in ("STOP", "HELLO"):
                with self._cond:
                    self._pipe.clear()   # abandoned: never re-sent after a STOP or a new session
                    self._resend_from = self._recovering = None
            else:
                self._drain_pipe()
            with self._cond:
                if self._link_lost() and not hello:
                    raise LinkError(f"{self.port}: {self._latched}")
                if guard is not None:
                    guard()
                seq = self.first_seq if hello else P.next_seq(self._seq)
                self._seq = seq
                line = P.host_line(seq, verb, *args)
                if verb == "MOVE":
                    self._outstanding[seq] = tuple(int(a) for a in args[1:])
                elif verb == "HOME":  # before it goes out: its DONE may follow the OK at once
                    self._home_seq, self._home_done, self._homed = seq, False, False
                self._waiting, self._waiting_verb, self._reply = seq, verb, None
                self._waiting_tag = self._stale_epoch if self._epoch_open else None
            reply: P.Reply | None = None
            tries = 0
            try:
                while True:
                    tries += 1
                    if tries > 1 and guard is not None:
                        with self._cond:
                            guard()
                    if verb == "STATE":
                        self._t_state_sent = self._now()
                    if verb == "STOP":
                        with self._cond:
                            covers = self._stop_gen   # every stop() up to here is answered by it
                    self._write(line)
                    if verb == "STOP":
                        with self._cond:
                            self._stop_written = max(self._stop_written, covers)
                            self._cond.notify_all()
                    deadline = self._now() + self.timeout_s
                    with self._cond:
                        while self._reply is None and not self._link_lost():
                            if self._stop_pending and verb not in ("STOP", "HELLO"):
                                raise ControllerError(f"{verb} interrupted by stop()")
                            remaining = deadline - self._now()
                            if remaining <= 0:
                                break
                            self._cond.wait(remaining)
                        reply, self._reply = self._reply, None
                        if self._link_lost() and not hello:
                            raise LinkError(f"{self.port}: {self._latched}")
                    if reply is not None and not (reply.kind == "ERR" and reply.code == "BAD_CRC"):
                        return reply
                    if tries > self.retries:
                        what = "no reply" if reply is None else "BAD_CRC"
                        self._lose_link(f"{what} after {tries} tries")
                        raise LinkError(f"{self.port}: link lost: {what} to {verb} after {tries} tries")
            finally:
                with self._cond:
                    self._waiting = None
                    if reply is not None and reply.kind == "OK":
                        if verb == "MOVE":
                            self._count_ok(reply)
                        elif hello:   # a new session: the controller counts from 0
                            self._moves_ok, self._moves_sync = 0, True
                            self._unconfirmed.clear()
                            self.counters = None
                    if reply is None or reply.kind != "OK":
                        if verb == "MOVE":
                            self._outstanding.pop(seq, None)
                            if reply is None:   # sent, maybe taken: re-read the count
                                self._moves_sync = False
                        elif verb == "HOME" and self._home_seq == seq:
                            self._home_seq = None
                        self._cond.notify_all()

    # -- the MOVE pipeline ------------------------------------------------------------
    def _service_pipe(self) -> None:
        """Re-send pipelined lines; txn lock held. A lost line is re-sent alone (after
        a BAD_SEQ naming it, or when the oldest line's reply is overdue); once it is
        answered, the lines sent behind it (which the controller refused as out of
        sequence) go out again together. No new line goes out meanwhile. After
        ``retries`` re-sends of one line the link is declared lost."""
        with self._cond:
            if not self._pipe or self._latched is not None:
                if self._pipe:
                    self._moves_sync = False  # abandoned: whether they were taken is unknown
                self._pipe.clear()  # nothing re-sent once anything is latched
                self._resend_from, self._recovering = None, None
                return
            now = self._now()
            if self._resend_from in self._pipe:
                start, single = self._resend_from, self._resend_single
            else:
                oldest_seq, oldest = next(iter(self._pipe.items()))
                if now - oldest.t_sent < self.timeout_s:
                    return
                start, single = oldest_seq, True
            self._resend_from = None
            self._recovering = start if single else None
            first = self._pipe[start]
            first.tries += 1
            if first.tries > self.retries + 1:
                self._lose_link(f"no reply after {first.tries - 1} tries")
                raise LinkError(f"{self.port}: {self._latched}")
            resend = []
            going = False
            for seq, pl in self._pipe.items():
                going = going or seq == start
                if going:
                    pl.t_sent = now
                    resend.append(pl.line)
                    if single:
                        break
        for line in resend:
            self._write(line)

    def _drain_pipe(self) -> None:
        """Wait until every pipelined line has its reply (txn lock held)."""
        while True:
            self._service_pipe()
            with self._cond:
                if not self._pipe:
                    return
                if self._link_lost():
                    raise LinkError(f"{self.port}: {self._latched}")
                if self._stop_pending:
                    raise ControllerError("interrupted by stop()")
                self._cond.wait(self.timeout_s / 4)

    def _on_pipe_reply(self, msg: P.Reply) -> None:
        """A reply to a pipelined MOVE (state lock held)."""
        if msg.kind == "ERR" and msg.code == "BAD_SEQ":
            expected = msg.int_field("expected")
            if expected is None:
                return
            # the controller has answered every line before ``expected``: those whose
            # reply was lost were taken or refused, which only the counters can tell
            lost = []
            for seq in list(self._pipe):
                if seq == expected or not _seq_before(seq, expected):
                    break
                self._pipe.pop(seq)
                lost.append(seq)
            self._unanswered(lost)
            if self._recovering is not None and self._recovering not in self._pipe:
                self._recovering = None
            if expected in self._pipe and self._recovering is None and self._resend_from is None:
                self._resend_from, self._resend_single = expected, True
            return
        # OK or a refusal: this line and every line before it were answered in order;
        # a line before it without its own reply is not taken for accepted (PROTOCOL.md)
        lost = []
        for seq in list(self._pipe):
            self._pipe.pop(seq)
            if seq == msg.seq:
                break
            lost.append(seq)
        self._unanswered(lost)
        if self._recovering is not None and self._recovering not in self._pipe:
            self._recovering = None   # the lost line is in: the ones behind it go again
            if self._pipe:
                self._resend_from, self._resend_single = next(iter(self._pipe)), False
        if msg.kind == "OK":
            self._count_ok(msg)
            if msg.seq in self._outstanding and self._mode in (Mode.IDLE, Mode.MOVING):
                self._mode = Mode.MOVING
            return
        words = self._move_words(msg.seq, self._outstanding.pop(msg.seq, None))
        if self._latched is None:
            # a refused segment in mid-stream breaks the planned path: stop everything
            self._gap = f"controller refused MOVE: {msg.describe()}: {words}; the arm was stopped"
            self._latched = f"fault: {self._gap}"
            self._event("fault", self._gap)
            self._halt_stream()

    def _count_ok(self, reply: P.Reply) -> None:
        """A MOVE's OK (lock held): one more accepted; ``free=`` one less than the
        queue depth means it went into an empty queue (the arm stood still)."""
        self._moves_ok = (self._moves_ok + 1) % P.COUNTER_MOD
        if reply.int_field("free") == self.queue_depth - 1:
            self._ran_dry += 1

    def _halt_stream(self) -> None:
        """Stop the arm from the reader thread (lock held): the position is stale."""
        self._mark_stale(False)
        self._cond.notify_all()
        threading.Thread(target=self.stop, name="serial-stop", daemon=True).start()

    def _unanswered(self, seqs: list[int]) -> None:
        """Pipelined MOVEs whose reply was lost while a later line was answered (lock
        held): not accepted until a STATE's counters (or their DONE) show it. Without
        the counters nothing can show it: the stream is stopped at once."""
        if not seqs:
            return
        for seq in seqs:
            self._unconfirmed[seq] = self._outstanding.get(seq)  # type: ignore[assignment]
        if not self.counters:
            self._declare_gap("its reply was lost and this controller sends no MOVE counters")
            return
        self._t_state_sent = 0.0   # the heartbeat asks for a STATE at once

    def _declare_gap(self, why: str) -> None:
        """A MOVE sent but neither answered nor counted (lock held): stop the arm and
        latch, naming the segment(s); the stream is never reported as done."""
        seqs = list(self._unconfirmed)
        words = "; ".join(self._move_words(s, self._unconfirmed[s]) for s in seqs)
        self._unconfirmed.clear()
        for seq in seqs:
            self._outstanding.pop(seq, None)
        if self._latched is not None:
            return
        which = "was" if len(seqs) == 1 else "were (one or more)"
        self._gap = f"{words} {which} not accepted by the controller ({why}); the arm was stopped"
        self._latched = f"fault: {self._gap}"
        self._event("fault", self._gap)
        self._moves_sync = False
        self._halt_stream()

    # -- reader ---------------------------------------------------------------------
    def _reader(self) -> None:
        buf = b""
        fd = self._posix_fd()
        while self._running:
            ser = self._ser
            try:
                if ser is None:
                    return
                if fd is not None:  # a posix port: one select and one read per burst
                    ready, _, _ = select.select([fd], [], [], READ_POLL_S)
                    if not ready:
                        continue
                    data = os.read(fd, 4096)
                    if not data:
                        raise serial.SerialException("the device reports data but returned none "
                                                     "(disconnected?)")
                else:
                    data = ser.read(max(1, ser.in_waiting))
            except Exception as exc:  # noqa: BLE001 - the port went away
                if self._running:
                    self._lose_link(f"port error: {exc}")
                return
            if not data:
                continue
            buf += data
            while b"\n" in buf:
                line, buf = buf.split(b"\n", 1)
                self._dispatch(line + b"\n")
            if len(buf) > P.MAX_LINE_BYTES:
                self._trace_line("<", buf + b"  (dropped: too long)")
                buf = b""

    def _posix_fd(self) -> int | None:
        """The file descriptor of a posix serial port (a device or pty), else None
        (URL handlers such as loop:// and socket:// are read through pyserial)."""
        if not isinstance(self._ser, serial.Serial) or os.name != "posix":
            return None
        try:
            return self._ser.fileno()
        except Exception:  # noqa: BLE001
            return None

    def _dispatch(self, line: bytes) -> None:
        self._trace_line("<", line)
        body = P.parse_line(line)
        msg = P.parse_reply(body) if body is not None else None
        if msg is None:
            return  # garbage or a bad CRC: the sender's timeout deals with it
        with self._cond:
            if isinstance(msg, P.Event):
                self._on_event(msg)
            elif msg.kind == "DONE":
                self._on_done(msg.seq)
            elif msg.seq in self._pipe:
                self._on_pipe_reply(msg)
            elif self._waiting is not None and (
                    msg.seq == self._waiting or (msg.seq == 0 and msg.code == "BAD_CRC")):
                if msg.kind == "OK" and self._waiting_verb == "STATE":
                    self._on_state(msg)
                self._reply = msg
            else:
                return  # a duplicate or late reply to an earlier line: not ours now
            self._cond.notify_all()

    def _on_event(self, evt: P.Event) -> None:
        if evt.name == "ESTOP":
            if not self._link_lost():
                self._latched = "estop"
            self._after_halt(Mode.ESTOP)
            self._event("estop", "e-stop pressed: motion halted, drives off")
        elif evt.name == "ESTOP_CLEAR":
            self._event("estop-clear", "e-stop released: reset, then enable")
        elif evt.name == "FAULT":
            code, axis = evt.get("code", "?"), evt.get("axis", "0")
            if not self._link_lost() and self._latched != "estop":
                self._latched = f"fault: {code} axis={axis}"
            self._after_halt(Mode.FAULT)
            self._event("fault", f"controller fault {code} on axis {axis}")
        else:
            self._event("info", f"controller event {evt.name}")

    def _after_halt(self, mode: Mode) -> None:
        self._mark_stale(True)      # a STATE sent after the event gives the position
        self._t_state_sent = 0.0
        if self._pipe or self._unconfirmed:
            self._moves_sync = False
        self._unconfirmed.clear()
        self._outstanding.clear()
        self._pipe.clear()  # pipelined MOVEs are never re-sent after an e-stop or fault
        self._resend_from = self._recovering = None
        self._home_seq = None
        self._mode = mode

    def _on_done(self, seq: int) -> None:
        if seq == self._home_seq:
            self._home_seq = None
            self._home_done = True
            self._homed = True
            self._pos = (0,) * self.arm.n_joints
            self._event("done", "homing done")
        elif seq in self._outstanding:
            if seq in self._unconfirmed:  # its DONE shows it was accepted
                del self._unconfirmed[seq]
                self._moves_ok = (self._moves_ok + 1) % P.COUNTER_MOD
            self._pos = self._outstanding.pop(seq)  # that segment's end is where the axes are
            self._t_state = self._now()
            self._event("done", f"segment {seq} done")
            if not self._outstanding and self._mode is Mode.MOVING:
                self._mode = Mode.IDLE

    def _on_state(self, reply: P.Reply) -> None:
        try:
            mode = Mode(reply.get("mode", ""))
        except ValueError:
            return
        pos = P.parse_counts(reply.get("pos", ""), self.arm.n_joints)
        queued = reply.int_field("queued")
        out = reply.int_field("out")
        if pos is None or queued is None or out is None:
            return
        moves, last = reply.int_field("moves"), reply.int_field("last")
        if self.counters is None:
            self.counters = moves is not None and last is not None
        if self.counters and moves is not None:
            self._check_counters(moves)
        self._mode, self._pos, self._outputs = mode, pos, out
        self._t_state = self._now()
        if self._waiting_tag is not None and self._waiting_tag == self._stale_epoch:
            self._stale = False   # sent after the stop's OK (or the event): fresh
        # Every DONE sent before this reply has been read by now: the controller's
        # queue is the newest ``queued`` of ours (a DONE lost on the wire is made good).
        while len(self._outstanding) > queued:
            self._outstanding.popitem(last=False)
        if self._home_seq is None:
            if mode in (Mode.IDLE, Mode.MOVING):
                self._homed = True
            elif mode is Mode.UNHOMED:
                self._homed = False
        if not self._link_lost():
            if mode is Mode.ESTOP and self._latched != "estop":
                self._latched = "estop"
                self._event("estop", "e-stop reported by the controller")
            elif mode is Mode.FAULT and self._latched is None:
                self._latched = "fault: reported by the controller"
                self._event("fault", "controller reports a fault")

    def _check_counters(self, moves: int) -> None:
        """Compare the controller's MOVE count with the host's (lock held). Every MOVE
        line went out before this STATE line (one transaction at a time, the pipeline
        drained first), and the controller answers lines in order, so ``moves`` counts
        them all: the lines whose reply was lost were accepted exactly when the count is
        ours plus theirs."""
        if not self._moves_sync:
            if not self._pipe and not self._unconfirmed:
                self._moves_ok, self._moves_sync = moves, True
            return
        extra = (moves - self._moves_ok) % P.COUNTER_MOD
        if extra == len(self._unconfirmed):
            self._moves_ok = moves
            self._unconfirmed.clear()   # all of them were taken: their DONEs will come
            return
        if not self._unconfirmed:
            # the controller took a MOVE the host does not know of: nothing can be trusted
            self._moves_ok = moves
            if self._latched is None:
                self._gap = (f"the controller counted {extra} MOVE line(s) more than the host "
                             f"knows of; the arm was stopped")
                self._latched = f"fault: {self._gap}"
                self._event("fault", self._gap)
                self._halt_stream()
            return
        if extra < len(self._unconfirmed):
            self._declare_gap(f"its reply was lost on the link and the controller counted only "
                              f"{extra} of the {len(self._unconfirmed)} unanswered MOVE line(s)")
        else:
            self._declare_gap(f"its reply was lost on the link and the controller counted {extra} "
                              f"MOVE line(s) for {len(self._unconfirmed)} unanswered: the counts disagree")

    # -- heartbeat ------------------------------------------------------------------
    def _heartbeat(self) -> None:
        while self._running:
            time.sleep(min(0.02, self.heartbeat_s / 4))
            if not self._running or self._link_lost():
                continue
            if self._now() - self._t_state_sent < self.heartbeat_s:
                continue
            try:
                self._transact("STATE")
            except DriverError:
                pass

    # -- life cycle -----------------------------------------------------------------
    def open(self) -> None:
        if self._is_open:
            return
        if self.trace_path:
            try:
                self._trace = open(self.trace_path, "a", encoding="ascii")
            except OSError as exc:
                raise LinkError(f"{self.trace_path}: cannot write the trace: {exc.strerror}") from None
        self._connect()
        self._is_open = True

    def _connect(self) -> None:
        try:
            self._ser = serial.serial_for_url(self.port, baudrate=self.baud, timeout=READ_POLL_S)
        except (serial.SerialException, ValueError, OSError) as exc:
            raise LinkError(f"{self.port}: cannot open: {exc}") from None
        try:
            self._ser.reset_input_buffer()
        except Exception:  # noqa: BLE001 - not every URL handler has a buffer to reset
            pass
        self._running = True
        reader = threading.Thread(target=self._reader, name="serial-reader", daemon=True)
        reader.start()
        self._threads = [reader]
        try:
            self._hello()
            self._transact("STATE")
        except DriverError:
            self._disconnect()
            raise
        if self.heartbeat_s > 0:
            hb = threading.Thread(target=self._heartbeat, name="serial-heartbeat", daemon=True)
            hb.start()
            self._threads.append(hb)

    def _hello(self) -> None:
        with self._cond:
            self._latched = None if self._link_lost() else self._latched
        reply = self._transact("HELLO", hello=True)
        if reply.kind != "OK":
            raise ControllerError(f"{self.port}: controller refused HELLO: {reply.describe()}")
        axes, depth = reply.int_field("axes"), reply.int_field("queue")
        if reply.get("proto") != str(P.PROTO_VERSION) or axes is None or depth is None or depth < 1:
            raise ControllerError(f"{self.port}: not a protocol {P.PROTO_VERSION} controller "
                                  f"(HELLO reply: {reply.describe()})")
        if axes != self.arm.n_joints:
            raise ControllerError(f"{self.port}: the controller has {axes} axes, "
                                  f"the arm {self.arm.name} has {self.arm.n_joints} joints")
        self.queue_depth = depth
        self.controller_name = reply.get("name")
        with self._cond:
            self._mark_stale(True)   # a new session: the STATE that follows gives the position

    def _disconnect(self) -> None:
        self._running = False
        ser, self._ser = self._ser, None
        if ser is not None:
            try:
                ser.close()
            except Exception:  # noqa: BLE001
                pass
        for t in self._threads:
            if t is not threading.current_thread():
                t.join(timeout=1.0)
        self._threads = []

    def _close(self) -> None:
        # a stop still waiting for its answer gets it before the drives go off
        self.wait_stopped(self.timeout_s * (self.retries + 2) * 2)
        if self._is_open and not self._link_lost():
            try:
                self._transact("DISABLE")
            except DriverError:
                pass
        self._disconnect()
        self._is_open = False
        if self._trace is not None:
            self._trace.close()
            self._trace = None

    # -- commands -------------------------------------------------------------------
    def _require_open(self) -> None:
        if not self._is_open:
            raise LinkError(f"{self.port}: the driver is not open")

    def _command(self, verb: str, *args: int | str) -> P.Reply:
        self._require_open()
        reply = self._transact(verb, *args)
        if reply.kind != "OK":
            if reply.code in ("ESTOP", "FAULT"):
                self._transact_quiet("STATE")
            raise ControllerError(f"controller refused {verb}: {reply.describe()}")
        return reply

    def _transact_quiet(self, verb: str) -> None:
        try:
            self._transact(verb)
        except DriverError:
            pass

    def enable(self) -> None:
        self._command("ENABLE")
        self._transact("STATE")

    def disable(self) -> None:
        with self._cond:
            self._mark_stale(False)   # drives off halts the arm
        try:
            self._command("DISABLE")
        finally:
            with self._cond:
                self._epoch_open = True   # from here a STATE tells where the arm is
        with self._cond:
            self._outstanding.clear()
            self._cond.notify_all()
        self._transact("STATE")

    def home(self, timeout_s: float = 60.0) -> None:
        self._require_open()
        with self._cond:
            if self._outstanding:
                raise ControllerError("refused HOME: segments are still queued (stop first)")
        self._command("HOME")
        with self._cond:
            deadline = self._now() + timeout_s
            while not self._home_done:
                if self._link_lost():
                    raise LinkError(f"{self.port}: {self._latched}")
                if self._home_seq is None:
                    raise ControllerError(f"homing did not finish: {self._latched or 'stopped'}")
                remaining = deadline - self._now()
                if remaining <= 0:
                    break
                self._cond.wait(min(remaining, 0.05))
        if not self._home_done:
            self.stop()
            raise ControllerError(f"homing did not finish within {timeout_s:g} s")
        self._transact("STATE")

    def _queue(self, segment: Segment, timeout_s: float) -> None:
        try:
            self._queue_one(segment, timeout_s)
        except ControllerError:
            with self._cond:  # a stream stopped for a lost or refused segment says which
                gap = self._gap if self._latched == f"fault: {self._gap}" else None
            if gap is not None:
                raise ControllerError(gap) from None
            raise

    def _queue_one(self, segment: Segment, timeout_s: float) -> None:
        self._require_open()
        counts = counts_from_joints(self.arm, segment.joints)
        ms = max(1, round(segment.duration_s * 1000.0))
        gen = self._stop_gen
        deadline = self._now() + max(0.0, timeout_s)

        def guard() -> None:  # under the state lock, before the MOVE (re)goes out
            if self._gap is not None and self._latched == f"fault: {self._gap}":
                raise ControllerError(self._gap)
            if self._stop_gen != gen:
                raise ControllerError("refused MOVE: stop() was called while it waited")
            self._require_motion_allowed(self._state_locked())

        def room() -> bool:
            window = self.window if self.counters else 1  # PROTOCOL.md: no counters, no pipelining
            return (len(self._outstanding) < self.queue_depth and len(self._pipe) < window
                    and self._recovering is None and self._resend_from is None
                    and not self._unconfirmed)

        while True:
            ask_state = False
            with self._cond:
                while True:
                    guard()
                    if room():
                        break
                    if self._unconfirmed and not self._pipe:
                        ask_state = True   # a reply was lost: the counters say if it was taken
                        break
                    remaining = deadline - self._now()
                    if remaining <= 0:
                        raise ControllerError(f"queue full: no segment finished within {timeout_s:g} s")
                    self._cond.wait(min(remaining, self.timeout_s / 4))
                    if self._pipe:
                        break  # service the pipeline (re-sends) below, then look again
            if ask_state:
                self._transact("STATE")
                continue
            with self._txn_lock:
                self._service_pipe()
                with self._cond:
                    guard()
                    if not room():
                        continue
                    idle = not self._pipe and not self._outstanding
                    if not idle:
                        # mid-stream: send it and go on; its OK is checked as it comes
                        seq = self._seq = P.next_seq(self._seq)
                        line = P.host_line(seq, "MOVE", ms, *counts)
                        self._outstanding[seq] = counts
                        self._pipe[seq] = _PipeLine(line, self._now())
                if not idle:
                    self._write(line)
                    return
            # the first segment of a stream waits for its reply, so a refusal raises here
            reply = self._transact("MOVE", ms, *counts, guard=guard)
            if reply.kind == "OK":
                with self._cond:
                    if reply.seq in self._outstanding and self._mode in (Mode.IDLE, Mode.MOVING):
                        self._mode = Mode.MOVING
                return
            if reply.code == "QUEUE_FULL" and self._now() < deadline:
                time.sleep(0.005)
                continue
            if reply.code in ("ESTOP", "FAULT"):
                self._transact_quiet("STATE")
            raise ControllerError(f"controller refused MOVE: {reply.describe()}")

    def stop(self) -> None:
        """Halt at once, and return as soon as STOP is on the wire: whatever line
        another thread waits on is given up (its caller gets a ControllerError), then a
        background thread sends STOP, waits for its OK (re-sending it on a timeout), and
        asks for a fresh STATE. Should that line have been lost, so that STOP is out of
        sequence, a HELLO restarts the count first. The caller waits for nothing but the
        write itself (at most ``STOP_SEND_WAIT_S``): a controller that has gone quiet
        costs the console no frame (see ``wait_stopped`` to wait for the OK)."""
        with self._cond:
            self._stop_gen += 1
            self._stop_pending += 1
            self._mark_stale(False)   # until a STATE sent after the STOP's OK answers
            if self._pipe or self._unconfirmed:
                self._moves_sync = False
            self._unconfirmed.clear()
            self._outstanding.clear()
            self._home_seq = None
            if self._mode is Mode.MOVING:
                self._mode = Mode.IDLE
            self._cond.notify_all()
            usable = self._is_open and self._ser is not None and not self._link_lost()
            mine = self._stop_gen
        if not usable:
            with self._cond:
                self._stop_pending -= 1
            return
        ended = threading.Event()
        worker = threading.Thread(target=self._stop_confirm, args=(ended,), daemon=True,
                                  name=f"stop {self.port}")
        with self._cond:
            self._stop_threads = [t for t in self._stop_threads if t.is_alive()] + [worker]
        worker.start()
        # back as soon as a STOP written after this call's bookkeeping is on the wire (this
        # call's own, or a concurrent stop's), the link is lost, or the wait is over
        deadline = time.monotonic() + STOP_SEND_WAIT_S
        with self._cond:
            while (self._stop_written < mine and not ended.is_set()
                   and not self._link_lost()):
                remaining = deadline - time.monotonic()
                if remaining <= 0:
                    break
                self._cond.wait(remaining)

    def _stop_confirm(self, ended: threading.Event) -> None:
        """The stop's own thread: STOP (HELLO first after BAD_SEQ), its OK, then STATE."""
        stopped = False
        try:
            reply = self._transact("STOP")
            if reply.kind == "ERR" and reply.code == "BAD_SEQ":
                self._transact("HELLO", hello=True)
                reply = self._transact("STOP")
            if reply.kind == "OK":
                with self._cond:
                    self._outstanding.clear()
                    self._epoch_open = True
                    self._cond.notify_all()
                stopped = True
        except Exception:  # noqa: BLE001 - stop never raises for a dead link
            pass
        finally:
            ended.set()
            with self._cond:
                self._stop_pending -= 1
                self._cond.notify_all()
        if stopped:
            self._transact_quiet("STATE")   # where the arm came to rest: fresh again

    def wait_stopped(self, timeout_s: float | None = None) -> bool:
        """Wait until every stop sent so far has its answer (or was given up on) and
        the STATE after it is back; True when none is under way any more."""
        deadline = None if timeout_s is None else time.monotonic() + timeout_s
        with self._cond:
            threads = list(self._stop_threads)
        for t in threads:
            if t is threading.current_thread():
                continue
            t.join(None if deadline is None else max(0.0, deadline - time.monotonic()))
        return not any(t.is_alive() for t in threads)

    def _state_locked(self) -> DriverState:
        enabled = self._mode in (Mode.UNHOMED, Mode.IDLE, Mode.MOVING)
        return DriverState(
            mode=self._mode,
            joints=joints_from_counts(self.arm, self._pos),
            queued=len(self._outstanding),
            outputs=self._outputs,
            age_s=(self._now() - self._t_state) if self._t_state is not None else float("inf"),
            is_open=self._is_open,
            enabled=enabled and self._latched is None,
            homed=self._homed,
            latched=self._latched,
            link=f"{self.port} @ {self.baud}",
            fresh=not self._stale,
            queue_ran_dry=self._ran_dry,
        )

    def state(self) -> DriverState:
        with self._lock:
            return self._state_locked()

    def _set_output(self, channel: int, on: bool) -> None:
        self._command("OUT", channel, int(on))
        with self._cond:
            self._outputs = (self._outputs | (1 << channel)) if on else (self._outputs & ~(1 << channel))

    def reset(self) -> None:
        """Clear a latched e-stop (once released) or fault; after a lost link, open the
        port again and greet the controller."""
        self._require_open()
        if self._link_lost():
            self._disconnect()
            self._connect()
            return
        reply = self._transact("RESET")
        if reply.kind != "OK":
            raise ControllerError(f"controller refused RESET: {reply.describe()}"
                                  + (" (the e-stop input is still active)" if reply.code == "ESTOP" else ""))
        with self._cond:
            self._latched = None
            self._gap = None
        self._transact("STATE")

    def poll_events(self) -> list[DriverEvent]:
        with self._lock:
            events = list(self._events)
            self._events.clear()
            return events
