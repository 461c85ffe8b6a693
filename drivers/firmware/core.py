"""The benchjog reference controller: PROTOCOL.md (setpoint line protocol, version 1).

Everything but the pins: framing and CRC, sequence numbers and retransmissions, the
segment queue with its free count, time-based interpolation of segments in integer
counts, homing (seek a home switch, or go to count 0 where an axis has none), the link
watchdog, the e-stop input, limit switch inputs, and fault latching.

This one module runs unchanged on MicroPython (on the board) and on CPython (in
``benchjog emulate`` and the tests): no imports, no dataclasses, no type annotations,
no f-strings, integer counts and integer microseconds only. Time is a microsecond count
that never wraps, kept by the caller (``main.py`` sums ``time.ticks_diff``).

A hardware layer is any object with these methods (``hw_servo.py``, ``hw_stepdir.py``
on the board; a simulated one in drivers/emulator.py):

- ``enable(on)``: drives on or off.
- ``write_counts(counts)``: the setpoint of every axis (a list of ints), once a tick.
- ``write_outputs(bits)``: the digital outputs, bit n is output n.
- ``estop_active()``: True while the e-stop input is active (its normally-closed
  contact open, or its wire broken).
- ``limit_active()``: 0, or the axis (from 1) whose limit switch input is active.
- ``home_active(i)``: True while axis i's (from 0) home switch input is active.
- ``reference(i, counts)``: axis i now stands at ``counts`` (its home switch was
  found): take that as its position, without moving.
- ``drive_fault()``: None, or ``(code, axis)`` while a drive reports a fault (a
  step/direction axis that cannot keep up is ``("FOLLOWING", axis)``).

The software e-stop input is NOT a safety function: the e-stop contact must also break
the drives' power in hardware (ISO 10218, ISO 13849).

Use: ``c = Controller(settings, hw)``; feed received bytes with ``c.feed(data, now_us)``,
call ``c.tick(now_us)`` at a fixed period, and send what ``c.take()`` returns.
"""

PROTO = 1
MAX_LINE = 120          # bytes, with the newline
MAX_SEQ = 65535
MAX_MS = 60000
WATCHDOG_US = 1000000   # PROTOCOL.md "Flow control and liveness"
US_PER_S = 1000000
OUTPUT_CHANNELS = 8

VERBS = ("HELLO", "ENABLE", "DISABLE", "HOME", "MOVE", "STOP", "STATE", "OUT", "RESET")

# what take() hands out: (kind, framed line)
REPLY = 0      # the answer to a host line
AGAIN = 1      # a reply sent again for a retransmitted host line
EVENT = 2      # DONE and EVT lines

_HEX = "0123456789ABCDEF"


def _crc_table():
    table = []
    for byte in range(256):
        crc = byte << 8
        for _ in range(8):
            crc = ((crc << 1) ^ 0x1021) if crc & 0x8000 else (crc << 1)
        table.append(crc & 0xFFFF)
    return table


_CRC_TABLE = _crc_table()


def crc16(data):
    """CRC-16/CCITT-FALSE of ``data`` (bytes): poly 0x1021, init 0xFFFF, no reflection,
    no final xor. The published check value: ``crc16(b"123456789") == 0x29B1``."""
    crc = 0xFFFF
    for b in data:
        crc = ((crc << 8) & 0xFFFF) ^ _CRC_TABLE[((crc >> 8) ^ b) & 0xFF]
    return crc


def hex4(value):
    return (_HEX[(value >> 12) & 15] + _HEX[(value >> 8) & 15]
            + _HEX[(value >> 4) & 15] + _HEX[value & 15])


def frame(body):
    """``BODY*CCCC\\n`` as bytes, for a str body."""
    raw = body.encode()
    return raw + b"*" + hex4(crc16(raw)).encode() + b"\n"


def parse_line(line):
    """The body (str) of one received line, or None when it is too long, not printable
    ASCII, malformed or fails its CRC. ``\\n`` or ``\\r\\n`` (or none) at the end."""
    if len(line) > MAX_LINE:
        return None
    raw = bytes(line)
    if raw[-1:] == b"\n":
        raw = raw[:-1]
    if raw[-1:] == b"\r":
        raw = raw[:-1]
    for b in raw:
        if b < 0x20 or b > 0x7E:
            return None
    n = len(raw)
    if n < 5 or raw[n - 5] != 0x2A:      # '*'
        return None
    body = raw[:n - 5]
    if b"*" in body:
        return None
    want = hex4(crc16(body)).encode()
    if raw[n - 4:] != want:
        return None
    return body.decode()


def parse_int(token):
    """A decimal integer token (an optional minus sign, at most 12 digits), or None."""
    digits = token[1:] if token[:1] == "-" else token
    if not digits or len(digits) > 12:
        return None
    for ch in digits:
        if ch < "0" or ch > "9":
            return None
    return int(token)


def parse_seq(token):
    """A seq token 1..65535, or None."""
    if not token or len(token) > 5:
        return None
    for ch in token:
        if ch < "0" or ch > "9":
            return None
    value = int(token)
    if value < 1 or value > MAX_SEQ:
        return None
    return value


def next_seq(seq):
    return 1 if seq >= MAX_SEQ else seq + 1


def _is_verb(token):
    if not token:
        return False
    for ch in token:
        if ch < "A" or ch > "Z":
            return False
    return True


def div_round(num, den):
    """``num / den`` rounded to the nearest integer, halves up, for ``den > 0``:
    integer arithmetic only, so it is exact for any size of numbers."""
    return (2 * num + den) // (2 * den)


class Settings:
    """What a controller is told: axis count, hard ranges in counts, queue depth, name,
    and homing. ``axes`` is a list of dicts, one per axis, with the keys:

    - ``min_counts``, ``max_counts``: the hard range (a MOVE outside is ``RANGE``).
    - ``home_switch``: True when the axis seeks a home switch, else it goes to count 0
      from where it is believed to be.
    - ``home_dir`` (1 or -1), ``home_speed`` (counts/s), ``home_at`` (the count at the
      switch), ``home_travel`` (counts searched before giving up): for a switch.

    ``home_ms`` is how long the move to count 0 takes at least; ``counters`` False
    leaves ``moves=``/``last=`` out of STATE (an older controller); ``watchdog_us`` is
    PROTOCOL.md's 1000 ms unless a test says otherwise.
    """

    def __init__(self, axes, queue=8, name="benchjog", home_ms=2000, counters=True,
                 watchdog_us=WATCHDOG_US):
        if not axes:
            raise ValueError("at least one axis")
        if queue < 1:
            raise ValueError("queue must be 1 or more")
        self.axes = []
        for i, ax in enumerate(axes):
            lo = int(ax["min_counts"])
            hi = int(ax["max_counts"])
            if lo > hi:
                raise ValueError("axis %d: min_counts above max_counts" % (i + 1))
            a = {"min_counts": lo, "max_counts": hi,
                 "home_switch": bool(ax.get("home_switch", False)),
                 "home_dir": -1 if ax.get("home_dir", -1) < 0 else 1,
                 "home_speed": int(ax.get("home_speed", 1000)),
                 "home_at": int(ax.get("home_at", 0)),
                 "home_travel": int(ax.get("home_travel", hi - lo))}
            if a["home_switch"] and a["home_speed"] < 1:
                raise ValueError("axis %d: home_speed must be 1 or more" % (i + 1))
            self.axes.append(a)
        self.n = len(self.axes)
        self.queue = int(queue)
        self.name = str(name)
        if not self.name or " " in self.name or "*" in self.name or "=" in self.name:
            raise ValueError("name must be one word without '*' or '='")
        self.home_us = int(home_ms * 1000)
        self.counters = bool(counters)
        self.watchdog_us = int(watchdog_us)


class Controller:
    """The controller's state and its answers. Not thread-safe: one caller at a time."""

    def __init__(self, settings, hw, now_us=0):
        self.s = settings
        self.hw = hw
        self.n = settings.n
        self.enabled = False
        self.homed = False
        self.latched = None           # None, "ESTOP" or "FAULT"
        self.estop_in = False         # the input as last seen
        self.limit_in = 0             # the limit input as last seen (axis or 0)
        self.pos = [0] * self.n       # counts; believed 0 at power-up
        self.queue = []               # segments: [seq, start, target, dur_us, t0]
        self.homing = None            # [seq, phase, t0, start, dur_us, found]
        self.outputs = 0
        self.last_seq = None          # None until the first line is accepted
        self.last_reply = []
        self.last_valid_us = now_us
        self.now_us = now_us
        self.accepted = 0             # MOVE lines accepted since power-up (for tests)
        self.moves = 0                # MOVE lines accepted since HELLO, modulo 65536
        self.last_move = 0            # the seq of the last one
        self.out = []
        self._rx = b""
        self._rx_overflow = False
        hw.enable(False)
        hw.write_outputs(0)

    # -- the caller's side ------------------------------------------------------------
    def take(self):
        """The lines to send since the last call, as (kind, bytes), oldest first."""
        out = self.out
        self.out = []
        return out

    def feed(self, data, now_us):
        """Received bytes, any amount: complete lines are handled at once."""
        buf = self._rx + bytes(data)
        while True:
            i = buf.find(b"\n")
            if i < 0:
                break
            line = buf[:i + 1]
            buf = buf[i + 1:]
            if self._rx_overflow:
                self._rx_overflow = False
                self._send_reply("ERR 0 BAD_CRC")  # the over-long line, dropped
                continue
            self.receive_line(line, now_us)
        if len(buf) >= MAX_LINE:
            buf = b""
            self._rx_overflow = True
        self._rx = buf

    def mode(self):
        if self.latched is not None:
            return self.latched
        if not self.enabled:
            return "DISABLED"
        if self.homing is not None:
            return "MOVING"
        if not self.homed:
            return "UNHOMED"
        return "MOVING" if self.queue else "IDLE"

    def tick(self, now_us):
        """Inputs, watchdog and motion up to ``now_us``; the setpoints to the hardware."""
        if now_us < self.now_us:
            now_us = self.now_us          # time never runs backwards here
        dog = self.s.watchdog_us
        if self.enabled and now_us - self.last_valid_us > dog:
            self._advance(self.last_valid_us + dog)
            self.fault("WATCHDOG", 0)
        self._advance(now_us)
        self.now_us = now_us
        self._inputs()
        self.hw.write_counts(self.pos)
        if self.enabled:
            f = self.hw.drive_fault()     # a drive that could not follow this setpoint
            if f:
                self.fault(f[0], f[1])

    def next_event_us(self):
        """The next time (us) something happens by itself (a segment or homing phase
        ends, the watchdog expires), or None: an event-driven caller ticks then."""
        times = []
        if self.homing is not None and self.homing[1] == 1:
            times.append(self.homing[2] + self.homing[4])
        elif self.homing is not None:
            times.append(self.now_us + 1000)   # seeking: poll the switches each ms
        if self.queue and self.queue[0][4] is not None:
            times.append(self.queue[0][4] + self.queue[0][3])
        if self.enabled:
            times.append(self.last_valid_us + self.s.watchdog_us + 1)
        return min(times) if times else None

    def estop(self):
        """The e-stop input became active: halt, drives off, latch, tell the host."""
        self.halt()
        self._drives(False)
        self.latched = "ESTOP"
        self._send_event("EVT ESTOP")

    def fault(self, code, axis):
        """Halt, drives off, FAULT latched (an e-stop latch stays ESTOP), tell the host."""
        self.halt()
        self._drives(False)
        if self.latched != "ESTOP":
            self.latched = "FAULT"
        self._send_event("EVT FAULT code=%s axis=%d" % (code, axis))

    def halt(self):
        """Motion stops where it is; the queue is flushed (no DONE for what is flushed)."""
        self.queue = []
        self.homing = None

    # -- lines ------------------------------------------------------------------------
    def receive_line(self, line, now_us):
        """One received line (bytes, its newline optional)."""
        self.tick(now_us)       # a watchdog that expired before this line still fires
        body = parse_line(line)
        if body is None:
            self._send_reply("ERR 0 BAD_CRC")
            return
        self.last_valid_us = self.now_us
        tokens = body.split(" ")
        seq = parse_seq(tokens[0])
        if seq is None:
            self._send_reply("ERR 0 SYNTAX")        # no seq to trust
            return
        well_formed = len(tokens) >= 2 and _is_verb(tokens[1])
        for t in tokens:
            if not t:
                well_formed = False
        if not (well_formed and tokens[1] == "HELLO") and self._out_of_sequence(seq):
            return
        self.last_seq = seq
        if not well_formed:
            self.last_reply = [self._send_reply("ERR %d SYNTAX" % seq)]
            return
        reply = self._execute(seq, tokens[1], tokens[2:])
        self.last_reply = [self._send_reply(reply)]

    def _out_of_sequence(self, seq):
        if self.last_seq is None:
            return False
        if seq == self.last_seq:
            for line in self.last_reply:
                self.out.append((AGAIN, line))
            return True
        expected = next_seq(self.last_seq)
        if seq != expected:
            self._send_reply("ERR %d BAD_SEQ expected=%d" % (seq, expected))
            return True
        return False

    def _execute(self, seq, verb, args):
        if verb not in VERBS:
            return "ERR %d UNKNOWN" % seq
        if verb == "MOVE":
            return self._move(seq, args)
        if verb == "OUT":
            return self._out(seq, args)
        if args:
            return "ERR %d SYNTAX" % seq
        if verb == "HELLO":
            self.moves = 0
            self.last_move = 0
            return "OK %d proto=%d axes=%d queue=%d name=%s" % (
                seq, PROTO, self.n, self.s.queue, self.s.name)
        if verb == "STATE":
            return self._state(seq)
        if verb == "STOP":
            self.halt()
            return "OK %d" % seq
        if verb == "DISABLE":
            self.halt()
            self._drives(False)
            return "OK %d" % seq
        if verb == "RESET":
            if self.estop_in:
                return "ERR %d ESTOP" % seq
            self.latched = None
            return "OK %d" % seq
        if self.latched is not None:               # ENABLE, HOME
            return "ERR %d %s" % (seq, self.latched)
        if verb == "ENABLE":
            self._drives(True)
            return "OK %d" % seq
        # HOME
        if not self.enabled:
            return "ERR %d NOT_ENABLED" % seq
        self.halt()
        self.homed = False
        self._start_homing(seq)
        return "OK %d" % seq

    def _state(self, seq):
        pos = ",".join([str(c) for c in self.pos])
        text = "OK %d mode=%s pos=%s queued=%d out=%d" % (
            seq, self.mode(), pos, len(self.queue), self.outputs)
        if self.s.counters:
            text += " moves=%d last=%d" % (self.moves, self.last_move)
        return text

    def _out(self, seq, args):
        if len(args) != 2 or args[1] not in ("0", "1"):
            return "ERR %d SYNTAX" % seq
        ch = parse_int(args[0])
        if ch is None or ch < 0 or ch >= OUTPUT_CHANNELS:
            return "ERR %d SYNTAX" % seq
        if self.latched is not None:
            return "ERR %d %s" % (seq, self.latched)
        if args[1] == "1":
            self.outputs |= 1 << ch
        else:
            self.outputs &= ~(1 << ch)
        self.hw.write_outputs(self.outputs)
        return "OK %d" % seq

    def _move(self, seq, args):
        if len(args) != 1 + self.n:
            return "ERR %d SYNTAX" % seq
        values = []
        for a in args:
            v = parse_int(a)
            if v is None:
                return "ERR %d SYNTAX" % seq
            values.append(v)
        ms = values[0]
        if ms < 1 or ms > MAX_MS:
            return "ERR %d SYNTAX" % seq
        if self.latched is not None:
            return "ERR %d %s" % (seq, self.latched)
        if not self.enabled:
            return "ERR %d NOT_ENABLED" % seq
        if not self.homed:
            return "ERR %d NOT_HOMED" % seq
        target = values[1:]
        for i in range(self.n):
            ax = self.s.axes[i]
            if target[i] < ax["min_counts"] or target[i] > ax["max_counts"]:
                return "ERR %d RANGE axis=%d" % (seq, i + 1)
        if len(self.queue) >= self.s.queue:
            return "ERR %d QUEUE_FULL" % seq
        seg = [seq, None, target, ms * 1000, None]
        if not self.queue:
            seg[1] = list(self.pos)
            seg[4] = self.now_us
        self.queue.append(seg)
        self.accepted += 1
        self.moves = (self.moves + 1) & 0xFFFF
        self.last_move = seq
        return "OK %d free=%d" % (seq, self.s.queue - len(self.queue))

    # -- motion -----------------------------------------------------------------------
    def _advance(self, now):
        if self.homing is not None:
            self._advance_homing(now)
            return
        while self.queue:
            seg = self.queue[0]
            if seg[4] is None:
                seg[4] = now
                seg[1] = list(self.pos)
            start, target, dur, t0 = seg[1], seg[2], seg[3], seg[4]
            end = t0 + dur
            if now < end:
                el = now - t0
                for i in range(self.n):
                    self.pos[i] = start[i] + div_round((target[i] - start[i]) * el, dur)
                return
            self.pos = list(target)
            self.queue.pop(0)
            self._send_event("DONE %d" % seg[0])
            if self.queue:
                self.queue[0][4] = end
                self.queue[0][1] = list(target)

    def _start_homing(self, seq):
        seeking = False
        for ax in self.s.axes:
            if ax["home_switch"]:
                seeking = True
        # [seq, phase (0 seek, 1 go to 0), t0, start, duration, found per axis]
        self.homing = [seq, 0, self.now_us, list(self.pos), 0, [False] * self.n]
        if not seeking:
            self._homing_return(self.now_us)

    def _homing_return(self, t0):
        h = self.homing
        dur = self.s.home_us
        for i in range(self.n):
            ax = self.s.axes[i]
            if ax["home_switch"]:
                need = div_round(abs(self.pos[i]) * US_PER_S, ax["home_speed"])
                if need > dur:
                    dur = need
        h[1], h[2], h[3], h[4] = 1, t0, list(self.pos), dur

    def _advance_homing(self, now):
        h = self.homing
        if h[1] == 0:
            el = now - h[2]
            for i in range(self.n):
                ax = self.s.axes[i]
                if not ax["home_switch"] or h[5][i]:
                    continue
                travel = ax["home_speed"] * el // US_PER_S
                if travel > ax["home_travel"]:
                    self.fault("LIMIT_SWITCH", i + 1)    # the home switch never closed
                    return
                self.pos[i] = h[3][i] + ax["home_dir"] * travel
            return
        seq, t0, start, dur = h[0], h[2], h[3], h[4]
        if now < t0 + dur:
            el = now - t0
            for i in range(self.n):
                self.pos[i] = start[i] - div_round(start[i] * el, dur)
            return
        self.pos = [0] * self.n
        self.homing = None
        self.homed = True
        self._send_event("DONE %d" % seq)

    def _inputs(self):
        active = bool(self.hw.estop_active())
        if active and not self.estop_in:
            self.estop_in = True
            self.estop()
        elif not active and self.estop_in:
            self.estop_in = False
            self._send_event("EVT ESTOP_CLEAR")
        axis = self.hw.limit_active()
        if axis and axis != self.limit_in and self.enabled:
            self.fault("LIMIT_SWITCH", axis)   # on the switch closing, so the arm can back off
        self.limit_in = axis
        h = self.homing
        if h is not None and h[1] == 0:
            done = True
            for i in range(self.n):
                if self.s.axes[i]["home_switch"] and not h[5][i]:
                    if self.hw.home_active(i):
                        h[5][i] = True
                        self.pos[i] = self.s.axes[i]["home_at"]
                        self.hw.reference(i, self.pos[i])
                    else:
                        done = False
            if done:
                self._homing_return(self.now_us)

    def _drives(self, on):
        self.enabled = on
        self.hw.enable(on)

    # -- output -----------------------------------------------------------------------
    def _send_reply(self, body):
        line = frame(body)
        self.out.append((REPLY, line))
        return line

    def _send_event(self, body):
        self.out.append((EVENT, frame(body)))
