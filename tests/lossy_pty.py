"""A bad serial line for tests: a man-in-the-middle between the host driver and a
controller, on real pseudo-terminals.

The driver opens :attr:`LossyLink.path` (a pty) as it would a device; the proxy reads
whole lines from each side and forwards them to the other, unless a rule says to drop,
corrupt (one CRC digit changed, so the receiver's CRC check fails), delay or replace a
line. A serial line never reorders bytes, so a delayed line holds up the ones behind
it. ``gap_s`` spaces lines out (a slow link, or a slow controller reading its UART).

Every line is recorded as it arrived and what was done to it, so a test can check the
host's claims against what the controller really received and really answered
(:func:`controller_truth`), independently of the driver's own bookkeeping.
"""

from __future__ import annotations

import os
import queue
import select
import threading
import time
import tty
from collections.abc import Callable
from dataclasses import dataclass, field

from benchjog.drivers import protocol as P

TO_CTRL = ">"     # host to controller
TO_HOST = "<"     # controller to host


@dataclass
class Fate:
    """What happens to one line: dropped, corrupted, delayed and/or replaced."""

    drop: bool = False
    corrupt: bool = False
    delay_s: float = 0.0
    replace: bytes | None = None


PASS = Fate()
Rule = Callable[[str, bytes], Fate]


def corrupted(line: bytes) -> bytes:
    """The line with one CRC digit changed: its CRC no longer matches its body."""
    i = line.rfind(b"*") + 1
    if i <= 0 or i >= len(line):
        return b"#" + line
    digit = line[i:i + 1]
    return line[:i] + (b"0" if digit != b"0" else b"1") + line[i + 1:]


@dataclass
class Record:
    direction: str
    line: bytes          # as it arrived at the proxy
    fate: Fate
    t: float


@dataclass
class LossyLink:
    controller_path: str
    rule: Rule = field(default=lambda direction, line: PASS)
    gap_s: float = 0.0

    def __post_init__(self) -> None:
        self.records: list[Record] = []
        self._lock = threading.Lock()
        self._running = False
        self._threads: list[threading.Thread] = []
        self._fds: list[int] = []
        self.path: str | None = None

    # -- life cycle -------------------------------------------------------------------
    def start(self) -> str:
        master, slave = os.openpty()
        tty.setraw(master)
        tty.setraw(slave)
        ctrl = os.open(self.controller_path, os.O_RDWR | os.O_NOCTTY)
        tty.setraw(ctrl)
        self._host_master, self._host_slave, self._ctrl = master, slave, ctrl
        self._fds = [master, slave, ctrl]
        self.path = os.ttyname(slave)
        self._running = True
        self._queues = {TO_CTRL: queue.Queue(), TO_HOST: queue.Queue()}
        for target, args, name in ((self._read, (master, TO_CTRL), "read-host"),
                                   (self._read, (ctrl, TO_HOST), "read-ctrl"),
                                   (self._write, (ctrl, TO_CTRL), "write-ctrl"),
                                   (self._write, (master, TO_HOST), "write-host")):
            t = threading.Thread(target=target, args=args, name=f"lossy-{name}", daemon=True)
            t.start()
            self._threads.append(t)
        return self.path

    def stop(self) -> None:
        self._running = False
        for q in getattr(self, "_queues", {}).values():
            q.put(None)
        for t in self._threads:
            t.join(timeout=1.0)
        for fd in self._fds:
            try:
                os.close(fd)
            except OSError:
                pass
        self._fds = []

    def __enter__(self) -> "LossyLink":
        self.start()
        return self

    def __exit__(self, *exc) -> None:
        self.stop()

    # -- forwarding -------------------------------------------------------------------
    def _read(self, fd: int, direction: str) -> None:
        buf = b""
        due = 0.0
        while self._running:
            try:
                ready, _, _ = select.select([fd], [], [], 0.05)
                if not ready:
                    continue
                chunk = os.read(fd, 4096)
            except (OSError, ValueError):
                return
            buf += chunk
            while b"\n" in buf:
                line, buf = buf.split(b"\n", 1)
                line += b"\n"
                fate = self.rule(direction, line)
                now = time.monotonic()
                with self._lock:
                    self.records.append(Record(direction, line, fate, now))
                if fate.drop:
                    continue
                out = fate.replace if fate.replace is not None else line
                if fate.corrupt:
                    out = corrupted(out)
                # in order, never before the line ahead of it, spaced by gap_s
                due = max(now + fate.delay_s, due + self.gap_s)
                self._queues[direction].put((due, out))

    def _write(self, fd: int, direction: str) -> None:
        q = self._queues[direction]
        while True:
            item = q.get()
            if item is None or not self._running:
                return
            due, data = item
            delay = due - time.monotonic()
            if delay > 0:
                time.sleep(delay)
            try:
                os.write(fd, data)
            except OSError:
                return

    # -- what happened ----------------------------------------------------------------
    def lines(self, direction: str) -> list[tuple[bytes, Fate]]:
        with self._lock:
            return [(r.line, r.fate) for r in self.records if r.direction == direction]


@dataclass
class Truth:
    """What the controller did, read from the lines it received and sent: the MOVE
    lines it accepted (in order, with their targets) and the segments it finished."""

    accepted: list[tuple[int, tuple[int, ...]]]
    refused: list[int]
    done: set[int]


def controller_truth(link: LossyLink) -> Truth:
    """Rebuild the controller's MOVE history from the wire, independently of the host.

    Host lines are taken as delivered (after any replacement; dropped and corrupted
    ones never counted); controller lines as the controller sent them (before any
    corruption or loss on the way back). A MOVE's outcome is the controller's OK or ERR
    to its seq (a re-sent line gets the same answer again; BAD_SEQ means not executed).
    A HELLO starts a new session, whose seqs are counted apart.
    """
    targets: dict[tuple[int, int], tuple[int, ...]] = {}
    session = 0
    for line, fate in link.lines(TO_CTRL):
        if fate.drop or fate.corrupt:
            continue
        body = P.parse_line(fate.replace if fate.replace is not None else line)
        cmd = P.parse_host(body) if body else None
        if cmd is None:
            continue
        if cmd.verb == "HELLO":
            session += 1
        if cmd.verb == "MOVE" and len(cmd.args) > 1:
            targets[(session, cmd.seq)] = tuple(P.parse_int(a) or 0 for a in cmd.args[1:])
    # replies carry no session: pair them with the latest session's seqs (the tests
    # check runs that stay in one session after homing)
    accepted: list[tuple[int, tuple[int, ...]]] = []
    refused: list[int] = []
    seen: set[int] = set()
    done: set[int] = set()
    for line, _fate in link.lines(TO_HOST):
        body = P.parse_line(line)
        msg = P.parse_reply(body) if body else None
        if msg is None or isinstance(msg, P.Event):
            continue
        key = (session, msg.seq)
        if msg.kind == "DONE":
            done.add(msg.seq)
        elif msg.seq not in seen and key in targets and msg.kind == "OK" and msg.get("free") is not None:
            seen.add(msg.seq)
            accepted.append((msg.seq, targets[key]))
        elif msg.seq not in seen and msg.kind == "ERR" and msg.code != "BAD_SEQ" and msg.seq != 0:
            if key in targets:
                seen.add(msg.seq)
                refused.append(msg.seq)
    return Truth(accepted, refused, done)
