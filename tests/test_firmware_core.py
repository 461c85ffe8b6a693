"""The controller firmware's core (drivers/firmware/core.py) on CPython with a scripted
clock and hardware: CRC, interpolation accuracy against the exact linear profile, the
watchdog, the e-stop input mid-segment, limit switches, homing on a switch, the
``moves``/``last`` counters, and the step/direction and servo arithmetic.

The same module runs on MicroPython in tests/test_firmware_mpy.py; on a pty, as the
emulator, under tests/test_serial_driver.py and tests/test_emulator_cli.py.
"""

from __future__ import annotations

import binascii
from fractions import Fraction

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from benchjog.drivers import protocol as P
from benchjog.drivers.firmware import core
from benchjog.drivers.firmware.hw_servo import pulse_ns_from_counts
from benchjog.drivers.firmware.hw_stepdir import StepCounter

from mpy import exchange  # the scripted hardware of the MicroPython exchanges (tests/mpy/)

FUZZ = settings(max_examples=150, deadline=None)
RANGE = 100000
TICK_US = 1000


class Hw(exchange.ScriptedHardware):
    """A scripted hardware layer (the one the MicroPython exchanges use, tests/mpy/):
    inputs set by the test, setpoints recorded; with ``steps_per_tick`` a step counter
    per axis follows the setpoints and reports a following error."""

    def __init__(self, n, steps_per_tick=None):
        super().__init__(n)
        self.history = []
        self.steppers = [StepCounter(steps_per_tick) for _ in range(n)] if steps_per_tick else None

    def write_counts(self, counts):
        super().write_counts(counts)
        self.history.append(list(counts))
        if self.steppers and self.on:
            for s, c in zip(self.steppers, counts):
                s.plan(c)

    def reference(self, i, counts):
        super().reference(i, counts)
        if self.steppers:
            self.steppers[i].at = counts

    def drive_fault(self):
        if self.steppers:
            for i, s in enumerate(self.steppers, start=1):
                if s.lag:
                    return ("FOLLOWING", i)
        return None


class Rig:
    def __init__(self, n=2, queue=8, home_ms=0, axes=None, steps_per_tick=None,
                 watchdog_us=core.WATCHDOG_US):
        axes = axes or [{"min_counts": -RANGE, "max_counts": RANGE} for _ in range(n)]
        self.hw = Hw(len(axes), steps_per_tick)
        self.c = core.Controller(core.Settings(axes, queue=queue, home_ms=home_ms,
                                               watchdog_us=watchdog_us), self.hw, 0)
        self.t = 0
        self.seq = 0
        self.lines = []     # (t_us, body) of everything sent, in order

    def _collect(self):
        for _, line in self.c.take():
            body = P.parse_line(line)      # the host's own parser checks every CRC
            assert body is not None, line
            self.lines.append((self.t, body))

    def at(self, t_us):
        self.t = t_us
        self.c.tick(t_us)
        self._collect()

    def send(self, body, seq=None):
        """Send one host line (the next seq unless given); its reply body."""
        if seq is None:
            self.seq = core.next_seq(self.seq)
            seq = self.seq
        before = len(self.lines)
        self.c.feed(P.frame(f"{seq} {body}"), self.t)
        self._collect()
        replies = [b for _, b in self.lines[before:] if b.startswith(("OK", "ERR"))]
        return replies[-1] if replies else None

    def bodies(self, since=0):
        return [b for _, b in self.lines[since:]]

    def ready(self):
        assert self.send("HELLO").startswith("OK ")
        assert self.send("ENABLE") == f"OK {self.seq}"
        self.send("HOME")
        self.at(self.t)
        assert self.c.homed

    def state(self):
        reply = P.parse_reply(self.send("STATE"))
        return reply


# -- framing ------------------------------------------------------------------------------

def test_crc_check_value():
    # the published check value of CRC-16/CCITT-FALSE (CRC catalogue): "123456789" -> 0x29B1
    assert core.crc16(b"123456789") == 0x29B1


@FUZZ
@given(st.binary(max_size=200))
def test_crc_agrees_with_the_standard_library(data):
    # reference: Python's binascii.crc_hqx with init 0xFFFF is CRC-16/CCITT-FALSE
    assert core.crc16(data) == binascii.crc_hqx(data, 0xFFFF)


@FUZZ
@given(st.binary(max_size=130))
def test_line_parser_agrees_with_the_hosts(raw):
    assert core.parse_line(raw) == P.parse_line(raw)


def test_frame_matches_the_hosts():
    for body in ("1 HELLO", "OK 4 free=7", "EVT FAULT code=WATCHDOG axis=0"):
        assert core.frame(body) == P.frame(body)


def test_an_over_long_line_is_answered_bad_crc_and_the_next_one_works():
    r = Rig()
    r.c.feed(b"1 " + b"X" * 200, 0)
    r.c.feed(b"Y" * 50 + b"\n", 0)
    r._collect()
    assert r.bodies() == ["ERR 0 BAD_CRC"]
    assert r.send("HELLO").startswith("OK 1 proto=1 axes=2 queue=8")


# -- interpolation ------------------------------------------------------------------------

def _exact(start, target, elapsed_us, duration_us):
    """The segment's exact linear profile (PROTOCOL.md MOVE: linear in joint space,
    all axes arriving together), as a Fraction."""
    f = Fraction(min(max(elapsed_us, 0), duration_us), duration_us)
    return start + (target - start) * f


QUIET = 10**12   # a watchdog that never fires, where a test plays no heartbeat


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(st.integers(1, 400),
                          st.tuples(st.integers(-RANGE, RANGE), st.integers(-RANGE, RANGE))),
                min_size=1, max_size=3),
       st.integers(0, 999))
def test_counts_at_each_tick_follow_the_exact_profile(segments, phase_us):
    r = Rig(watchdog_us=QUIET)
    r.ready()
    t_begin = r.t + phase_us                 # the first MOVE arrives between two ticks
    r.at(t_begin)
    for ms, target in segments:
        assert r.send(f"MOVE {ms} {target[0]} {target[1]}").startswith("OK ")
    # the segments chain with no gap: each starts where and when the previous ends
    plan, t0, start = [], t_begin, (0, 0)
    for ms, target in segments:
        plan.append((t0, ms * 1000, start, target))
        t0, start = t0 + ms * 1000, target
    t_end = t0
    t = t_begin
    done_seen = 0
    while t < t_end + 2 * TICK_US:
        t = (t // TICK_US + 1) * TICK_US     # the next tick of a fixed 1 ms clock
        r.at(t)
        seg = next((p for p in plan if p[0] <= t < p[0] + p[1]), plan[-1])
        for axis in range(2):
            exact = _exact(seg[2][axis], seg[3][axis], t - seg[0], seg[1])
            assert abs(r.hw.counts[axis] - exact) <= Fraction(1, 2), (t, axis, exact)
        done_seen = sum(1 for b in r.bodies() if b.startswith("DONE"))
        finished = sum(1 for p in plan if p[0] + p[1] <= t)
        assert done_seen == finished + 1   # + the HOME's DONE; each DONE on its own tick
    assert tuple(r.hw.counts) == segments[-1][1]


def test_a_worked_segment():
    # by hand: 0 -> (1000, -333) over 100 ms; at 50 ms exactly (500, -166.5) -> 500, -166
    r = Rig()
    r.ready()
    assert r.send("MOVE 100 1000 -333") == f"OK {r.seq} free=7"
    r.at(50000)
    assert r.hw.counts == [500, -166]
    r.at(99999)
    assert r.hw.counts == [1000, -333]         # 999.99, -332.997
    r.at(100000)
    assert r.bodies()[-1] == f"DONE {r.seq}"


# -- watchdog -----------------------------------------------------------------------------

@pytest.mark.parametrize("tick_us", [1000, 7000, 250000])
def test_watchdog_stops_within_its_period(tick_us):
    r = Rig()
    r.ready()
    last_line = r.t
    r.send("MOVE 5000 50000 0")               # a long move, then the host goes quiet
    t = last_line
    while not any("WATCHDOG" in b for b in r.bodies()):
        t += tick_us
        r.at(t)
        assert t <= last_line + core.WATCHDOG_US + tick_us
    assert t > last_line + core.WATCHDOG_US   # and not before its 1000 ms
    assert r.bodies()[-1] == "EVT FAULT code=WATCHDOG axis=0"
    assert not r.hw.on and r.c.mode() == "FAULT" and not r.c.queue
    # halted where the profile was when the watchdog expired, however late the tick
    exact = _exact(0, 50000, core.WATCHDOG_US, 5000 * 1000)
    assert abs(r.hw.counts[0] - exact) <= Fraction(1, 2)
    held = list(r.hw.counts)
    r.at(t + 500000)
    assert r.hw.counts == held


def test_watchdog_sleeps_while_disabled_and_each_line_feeds_it():
    r = Rig()
    r.send("HELLO")
    r.at(5 * core.WATCHDOG_US)
    assert not r.bodies()[1:]
    r.send("ENABLE")
    for k in range(1, 9):
        r.at(r.t + 900000)
        r.send("STATE")
    assert not any("FAULT" in b for b in r.bodies())


# -- e-stop and limits --------------------------------------------------------------------

def test_estop_input_mid_segment_stops_and_latches():
    r = Rig()
    r.ready()
    r.send("MOVE 1000 10000 -10000")
    move_seq = r.seq
    r.send("MOVE 1000 0 0")
    r.at(400000)
    r.hw.estop = True                          # the NC contact opens
    r.at(400500)
    assert r.bodies()[-1] == "EVT ESTOP"
    assert not r.hw.on and not r.c.queue and r.c.mode() == "ESTOP"
    halted = list(r.hw.counts)
    assert abs(halted[0] - 4005) <= 1
    r.at(3000000)
    assert r.hw.counts == halted               # stays put; no DONE for the flushed ones
    assert f"DONE {move_seq}" not in r.bodies()
    assert r.send("ENABLE") == f"ERR {r.seq} ESTOP"
    assert r.send("MOVE 10 0 0") == f"ERR {r.seq} ESTOP"
    assert r.send("RESET") == f"ERR {r.seq} ESTOP"   # input still active
    r.hw.estop = False
    r.at(3100000)
    assert r.bodies()[-1] == "EVT ESTOP_CLEAR"
    assert r.state().get("mode") == "ESTOP"          # latched until RESET
    assert r.send("RESET") == f"OK {r.seq}"
    assert r.state().get("mode") == "DISABLED"


def test_a_limit_switch_hit_latches_a_fault():
    r = Rig()
    r.ready()
    r.send("MOVE 1000 10000 0")
    r.at(300000)
    r.hw.limit = 2
    r.at(301000)
    assert r.bodies()[-1] == "EVT FAULT code=LIMIT_SWITCH axis=2"
    assert not r.hw.on and r.c.mode() == "FAULT" and not r.c.queue
    assert r.send("MOVE 10 0 0") == f"ERR {r.seq} FAULT"
    assert r.send("RESET") == f"OK {r.seq}"
    # the switch still open: drives may go on again to back off, no new fault until
    # the switch closes and opens again
    assert r.send("ENABLE") == f"OK {r.seq}"
    n = len(r.lines)
    r.at(400000)
    assert not r.bodies(n)
    r.hw.limit = 0
    r.at(401000)
    r.hw.limit = 1
    r.at(402000)
    assert r.bodies()[-1] == "EVT FAULT code=LIMIT_SWITCH axis=1"


def test_a_stepper_that_cannot_keep_up_is_a_following_fault():
    r = Rig(steps_per_tick=5, watchdog_us=QUIET)                  # 5 steps a 1 ms tick: 5000 counts/s at most
    r.ready()
    r.send("MOVE 1000 4000 0")                 # 4000 counts/s: fine
    for t in range(TICK_US, 1001 * TICK_US, TICK_US):
        r.at(t)
    assert r.hw.steppers[0].at == 4000 and r.c.mode() == "IDLE"
    r.send("MOVE 100 5000 0")                  # 10000 counts/s: too fast
    r.at(1002 * TICK_US)
    assert r.bodies()[-1] == "EVT FAULT code=FOLLOWING axis=1"
    assert not r.hw.on


# -- homing -------------------------------------------------------------------------------

def _switch_axes():
    return [{"min_counts": -5000, "max_counts": 5000, "home_switch": True, "home_dir": -1,
             "home_speed": 1000, "home_at": -2000, "home_travel": 3000},
            {"min_counts": -5000, "max_counts": 5000}]


def test_homing_seeks_the_switch_then_goes_to_zero():
    r = Rig(axes=_switch_axes(), home_ms=100, watchdog_us=QUIET)
    r.hw.home_below[0] = -700                  # the switch closes 700 counts below power-up
    r.send("HELLO")
    r.send("ENABLE")
    assert r.send("HOME") == f"OK {r.seq}"
    t = 0
    while r.c.homing is not None and t < 10 * 10**6:
        t += TICK_US
        r.at(t)
        assert r.c.mode() == ("MOVING" if r.c.homing is not None else "IDLE")
    assert r.bodies()[-1] == f"DONE {r.seq}"
    assert r.c.homed and r.hw.counts == [0, 0]
    # seek: 700 counts at 1000 counts/s = 0.7 s; back: 2000 counts at 1000 counts/s = 2 s
    assert 2_650_000 <= t <= 2_750_000
    assert min(h[0] for h in r.hw.history) == -2000   # the switch spot became -2000 counts


def test_homing_without_finding_the_switch_is_a_fault():
    r = Rig(axes=_switch_axes(), watchdog_us=QUIET)
    r.send("HELLO")
    r.send("ENABLE")
    r.send("HOME")
    for t in range(TICK_US, 4 * 10**6, TICK_US):
        r.at(t)
        if r.c.mode() == "FAULT":
            break
    assert r.bodies()[-1] == "EVT FAULT code=LIMIT_SWITCH axis=1"
    assert not r.c.homed and 3_000_000 <= t <= 3_002_000   # 3000 counts at 1000 counts/s


# -- counters -----------------------------------------------------------------------------

def test_moves_and_last_count_accepted_moves_since_hello():
    r = Rig(queue=2)
    r.ready()
    assert (r.state().get("moves"), r.state().get("last")) == ("0", "0")
    r.send("MOVE 100 10 10")
    first = r.seq
    r.send("MOVE 100 10 10", seq=first)        # a retransmission: not counted again
    assert r.send(f"MOVE 100 {RANGE + 1} 0") == f"ERR {r.seq} RANGE axis=1"
    r.send("MOVE 100 20 20")
    second = r.seq
    assert r.send("MOVE 100 30 30") == f"ERR {r.seq} QUEUE_FULL"
    s = r.state()
    assert (s.get("moves"), s.get("last")) == ("2", str(second))
    r.send("HELLO")                            # a new session starts the count again
    s = r.state()
    assert (s.get("moves"), s.get("last")) == ("0", "0")


def test_moves_wraps_modulo_65536():
    r = Rig()
    r.ready()
    r.c.moves = 65535
    r.send("MOVE 10 1 1")
    assert r.state().get("moves") == "0"


def test_an_older_controller_leaves_the_counters_out():
    axes = [{"min_counts": -10, "max_counts": 10}]
    c = core.Controller(core.Settings(axes, counters=False), Hw(1), 0)
    c.feed(P.frame("1 STATE"), 0)
    assert P.parse_line(c.take()[0][1]) == "OK 1 mode=DISABLED pos=0 queued=0 out=0"


# -- hardware arithmetic ------------------------------------------------------------------

def test_servo_pulse_per_count_with_limits():
    axis = {"pulse_at_zero_us": 1500, "us_per_count": 0.25, "pulse_min_us": 1000,
            "pulse_max_us": 2100}
    assert pulse_ns_from_counts(0, axis) == 1_500_000
    assert pulse_ns_from_counts(400, axis) == 1_600_000      # 1500 + 400 * 0.25 us
    assert pulse_ns_from_counts(-4000, axis) == 1_000_000    # clamped low
    assert pulse_ns_from_counts(4000, axis) == 2_100_000     # clamped high


@FUZZ
@given(st.lists(st.integers(-50, 50), min_size=1, max_size=50))
def test_step_counts_add_up_to_the_setpoints(moves):
    s = StepCounter(1000)
    total = 0
    for target in moves:
        direction, n = s.plan(target)
        total += direction * n
        assert total == target == s.at and not s.lag
