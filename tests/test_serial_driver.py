"""SerialDriver: the driver contract against the emulator over a real pty, framing over
pyserial's ``loop://``, and the link faults PROTOCOL.md makes the host survive:
corrupted, lost and slow lines, an e-stop mid-move, the watchdog, a port that goes
away."""

from __future__ import annotations

import threading
import time

import pytest
import serial

from benchjog.console.cell.armfile import builtin_arm
from driver_contract import DEG, DriverContract, events_of, ready, wait_for
from benchjog.drivers import protocol as P
from benchjog.drivers.base import ControllerError, LinkError, Mode
from benchjog.drivers.emulator import Emulator
from benchjog.drivers.serial_link import SerialDriver
from benchjog.kinematics.model import Segment

ARM = builtin_arm("planar-bench")


class _EmuRig:
    def __init__(self, emulator: Emulator, driver: SerialDriver):
        self.emulator, self.driver = emulator, driver

    def press_estop(self):
        self.emulator.press_estop()

    def release_estop(self):
        self.emulator.release_estop()

    def fault(self, code, axis):
        self.emulator.inject_fault(code, axis)

    def moves_accepted(self):
        return self.emulator.moves_accepted

    def counts(self):
        return self.emulator.position_counts()


def _rig(tmp_path, emu_options=None, **driver_options):
    opts = {"home_s": 0.05}
    opts.update(emu_options or {})
    emu = Emulator(ARM, opts)
    path = emu.start()
    driver_options.setdefault("trace", str(tmp_path / "trace.txt"))
    d = SerialDriver(ARM, port=path, **driver_options)
    d.open()
    return _EmuRig(emu, d)


@pytest.fixture
def make_rig(tmp_path):
    made = []

    def make(emu_options=None, **driver_options):
        r = _rig(tmp_path, emu_options, **driver_options)
        made.append(r)
        return r

    yield make
    for r in made:
        r.driver.close()
        r.emulator.stop()


class TestSerialContract(DriverContract):
    @pytest.fixture
    def rig(self, make_rig):
        return make_rig()


class TestSerialContractOneLineAtATime(DriverContract):
    """The same contract with the MOVE pipeline off (window 1: each OK awaited)."""

    @pytest.fixture
    def rig(self, make_rig):
        return make_rig(window=1)


def _trace(tmp_path) -> list[str]:
    return (tmp_path / "trace.txt").read_text().splitlines()


def _sent_bodies(tmp_path) -> list[str]:
    return [line.split(" > ", 1)[1] for line in _trace(tmp_path) if " > " in line]


def _stream(d, n, step_deg=1.0, duration_s=0.01):
    for k in range(1, n + 1):
        d.queue(Segment((DEG(k * step_deg), DEG(90.0)), duration_s))
    assert d.wait_idle(5.0)


# -- framing over loop:// -----------------------------------------------------------------

def test_framing_round_trip_over_loop_url():
    port = serial.serial_for_url("loop://", timeout=0.2)
    lines = [P.host_line(7, "MOVE", 1500, 4500, -9000), P.frame("OK 7 free=7"),
             P.frame("EVT FAULT code=WATCHDOG axis=0")]
    port.write(b"".join(lines))
    back = [port.readline() for _ in lines]
    port.close()
    assert back == lines
    assert P.parse_host(P.parse_line(back[0])) == P.HostLine(7, "MOVE", ("1500", "4500", "-9000"))
    assert P.parse_reply(P.parse_line(back[1])).int_field("free") == 7
    assert P.parse_reply(P.parse_line(back[2])).get("code") == "WATCHDOG"


def test_an_echoing_line_is_not_a_controller():
    # loop:// echoes the host's own lines; none of them is a reply, so HELLO goes
    # unanswered and the link is declared lost after 1 + retries tries
    d = SerialDriver(ARM, port="loop://", timeout_s=0.05, retries=2)
    with pytest.raises(LinkError, match="after 3 tries"):
        d.open()
    d.close()


def test_unopenable_port_is_a_link_error():
    with pytest.raises(LinkError, match="cannot open"):
        SerialDriver(ARM, port="/dev/no-such-port-benchjog").open()
    with pytest.raises(LinkError):
        SerialDriver(ARM)


# -- session ------------------------------------------------------------------------------

def test_hello_reads_the_controller_and_it_starts_unhomed(make_rig, tmp_path):
    r = make_rig({"queue_depth": 5, "name": "bench-a"})
    d = r.driver
    assert d.queue_depth == 5 and d.controller_name == "bench-a"
    assert _sent_bodies(tmp_path)[0].startswith("1 HELLO*")
    d.enable()
    st = d.state()
    # CONTRACT.md: the emulator starts as after power-up, not homed
    assert st.mode is Mode.UNHOMED and not st.homed
    with pytest.raises(ControllerError, match="not homed"):
        d.queue(Segment((DEG(1.0), DEG(90.0)), 0.05))
    assert r.emulator.moves_accepted == 0
    d.home(timeout_s=2.0)
    assert d.state().homed and d.state().mode is Mode.IDLE


def test_axes_mismatch_is_refused(tmp_path):
    emu = Emulator(builtin_arm("scara-bench"))
    path = emu.start()
    try:
        d = SerialDriver(ARM, port=path)
        with pytest.raises(ControllerError, match="4 axes"):
            d.open()
        assert not d.state().is_open
    finally:
        emu.stop()


def test_trace_has_every_line_both_ways(make_rig, tmp_path):
    r = make_rig()
    ready(r.driver)
    lines = _trace(tmp_path)
    sent = [ln for ln in lines if " > " in ln]
    got = [ln for ln in lines if " < " in ln]
    assert any("ENABLE" in ln for ln in sent) and any(ln.split(" < ")[1].startswith("DONE") for ln in got)
    assert all(P.parse_line(ln.split(" > ", 1)[1].encode() + b"\n") is not None for ln in sent)


def test_seq_wraps_from_65535_to_1(make_rig, tmp_path):
    r = make_rig(first_seq=65531)   # HELLO 65531 restarts the count there
    d = r.driver
    ready(d)
    _stream(d, 5)
    seqs = [int(b.split(" ")[0]) for b in _sent_bodies(tmp_path)]
    i = seqs.index(65535)
    assert seqs[i + 1] == 1
    assert r.emulator.moves_accepted == 5
    assert not any("BAD_SEQ" in ln for ln in _trace(tmp_path))


# -- flow control -------------------------------------------------------------------------

def test_never_more_outstanding_than_the_queue(make_rig, tmp_path):
    r = make_rig({"queue_depth": 2})
    d = r.driver
    ready(d)
    peak = []
    stop = threading.Event()

    def watch():
        while not stop.is_set():
            peak.append(d.state().queued)
            peak.append(len(r.emulator.segs))
            time.sleep(0.002)

    t = threading.Thread(target=watch)
    t.start()
    _stream(d, 8, duration_s=0.03)
    stop.set()
    t.join()
    assert max(peak) == 2
    assert r.emulator.moves_accepted == 8
    assert not any("QUEUE_FULL" in ln for ln in _trace(tmp_path))
    assert r.counts() == (8 * 40, 0)


def test_stop_from_another_thread_releases_a_blocked_queue(make_rig):
    r = make_rig({"queue_depth": 1})
    d = r.driver
    ready(d)
    d.queue(Segment((DEG(30.0), DEG(90.0)), 1.0))
    errors = []

    def second():
        try:
            d.queue(Segment((DEG(60.0), DEG(90.0)), 1.0))
        except ControllerError as exc:
            errors.append(exc)

    t = threading.Thread(target=second)
    t.start()
    time.sleep(0.1)
    d.stop()
    t.join(2.0)
    assert errors and "stop" in str(errors[0])
    assert r.emulator.moves_accepted == 1


# -- faults on the line -------------------------------------------------------------------

@pytest.mark.parametrize("switch", [{"corrupt_every": 3}, {"drop_every": 4}, {"garble_every": 5}])
def test_bad_lines_are_recovered_by_resending(make_rig, tmp_path, switch):
    r = make_rig(switch, timeout_s=0.05)
    d = r.driver
    ready(d)
    _stream(d, 12)
    assert r.counts() == (12 * 40, 0)
    assert r.emulator.moves_accepted == 12           # each exactly once, re-sends not re-run
    sent = _sent_bodies(tmp_path)
    assert len(sent) > len(set(sent))                 # the same line (same seq) went out again
    assert d.state().latched is None


def test_slow_replies_within_the_timeout(make_rig, tmp_path):
    r = make_rig({"slow_ms": 60}, timeout_s=0.3)
    ready(r.driver)
    _stream(r.driver, 3)
    sent = _sent_bodies(tmp_path)
    assert len(sent) == len(set(sent))                # no re-sends needed
    assert r.counts() == (120, 0)


def test_replies_slower_than_the_timeout_duplicate_oks_are_not_mistaken(make_rig, tmp_path):
    # each reply comes after 0.15 s, the host gives up after 0.1 s and re-sends: the
    # controller answers the re-sent line again, so every OK arrives twice; the late
    # copy must not count as the reply to the next line
    r = make_rig({"slow_ms": 150}, timeout_s=0.1, retries=3)
    d = r.driver
    ready(d)
    _stream(d, 3, duration_s=0.05)
    assert r.counts() == (120, 0)
    assert r.emulator.moves_accepted == 3
    got = [ln.split(" < ", 1)[1] for ln in _trace(tmp_path) if " < " in ln]
    oks = [g for g in got if g.startswith("OK ")]
    assert len(oks) > len(set(oks))                   # duplicates did arrive
    assert not any("BAD_SEQ" in g for g in got)


def test_estop_mid_move_after_n_moves(make_rig):
    r = make_rig({"estop_after": 3})
    d = r.driver
    ready(d)
    for k in range(1, 7):
        try:  # 1 s a segment: on a loaded machine the first is still under way at the e-stop
            d.queue(Segment((DEG(10.0 * k), DEG(90.0)), 1.0))
        except ControllerError:
            pass
    # lines already in the pipeline when the e-stop hit were refused by the controller;
    # once the host knew, nothing more went out
    assert r.emulator.moves_accepted == 3
    assert events_of(d, "estop")
    assert d.state().latched == "estop" and d.state().queued == 0
    assert r.counts()[0] < 400                        # halted short of the first 10 deg
    sent = len(r.emulator.received)
    with pytest.raises(ControllerError):
        d.queue(Segment((DEG(5.0), DEG(90.0)), 0.2))
    assert not [b for b in r.emulator.received[sent:] if " MOVE " in b]


def test_watchdog_fires_without_heartbeats(make_rig):
    r = make_rig(heartbeat_s=0)
    d = r.driver
    ready(d)
    faults = events_of(d, "fault", timeout_s=3.0)    # PROTOCOL.md: 1000 ms without a line
    assert faults and "WATCHDOG" in faults[0].detail
    assert d.state().latched == "fault: WATCHDOG axis=0"
    assert r.emulator.mode == "FAULT"


def test_heartbeat_keeps_the_watchdog_quiet(make_rig):
    r = make_rig()
    ready(r.driver)
    time.sleep(1.3)
    assert r.emulator.mode == "IDLE"
    assert r.driver.state().age_s < 0.5
    assert not [e for e in r.driver.poll_events() if e.kind == "fault"]


def test_port_gone_mid_move_is_link_lost(make_rig):
    r = make_rig()
    d = r.driver
    ready(d)
    d.queue(Segment((DEG(90.0), DEG(90.0)), 2.0))
    time.sleep(0.1)
    r.emulator.stop()                                  # the cable is pulled
    assert wait_for(lambda: (d.state().latched or "").startswith("link lost"), 3.0)
    assert events_of(d, "link-lost")
    with pytest.raises(LinkError):
        d.queue(Segment((DEG(10.0), DEG(90.0)), 0.1))
    d.stop()                                           # never raises for a dead link
    with pytest.raises(LinkError):
        d.reset()                                      # the port itself is gone
    d.close()
    d.close()


def test_no_reply_at_all_is_link_lost_after_retries():
    emu = Emulator(ARM, {"home_s": 0.05})
    path = emu.start()
    d = SerialDriver(ARM, port=path, timeout_s=0.05, retries=2, heartbeat_s=0)
    try:
        d.open()
        emu.opts.drop_every = 1                        # from now on every line is lost
        with pytest.raises(LinkError, match="after 3 tries"):
            d.enable()
        assert d.state().latched.startswith("link lost: no reply after 3 tries")
        with pytest.raises(LinkError):
            d.queue(Segment((DEG(1.0), DEG(90.0)), 0.1))
        emu.opts.drop_every = None                     # the line is good again
        d.reset()                                      # after a lost link: open and HELLO again
        assert d.state().latched is None
        d.enable()
        assert d.state().enabled
    finally:
        d.close()
        emu.stop()


def test_refusal_mid_stream_stops_and_latches(make_rig):
    r = make_rig()
    d = r.driver
    ready(d)
    d.queue(Segment((DEG(20.0), DEG(90.0)), 0.3))      # the first waits for its OK
    d.queue(Segment((DEG(40.0), DEG(90.0)), 0.3))      # pipelined
    d.queue(Segment((DEG(156.0), DEG(90.0)), 0.3))     # 156 * 40 = 6240 > 6200: RANGE axis=1
    assert wait_for(lambda: (d.state().latched or "").startswith("fault: controller refused MOVE"))
    assert "RANGE axis=1" in d.state().latched
    assert wait_for(lambda: any(b.split(" ")[1] == "STOP" for b in r.emulator.received))
    assert r.emulator.moves_accepted == 2
    assert wait_for(lambda: r.emulator.mode == "IDLE")  # the STOP flushed the second segment
    with pytest.raises(ControllerError, match="refused MOVE"):
        d.queue(Segment((DEG(10.0), DEG(90.0)), 0.1))
    d.reset()
    assert d.state().latched is None
    d.queue(Segment((DEG(10.0), DEG(90.0)), 0.05))
    assert d.wait_idle(2.0) and r.counts() == (400, 0)


def test_pipeline_never_has_more_than_window_unanswered(make_rig, tmp_path):
    r = make_rig({"slow_ms": 30}, window=3)
    d = r.driver
    ready(d)
    _stream(d, 6, duration_s=0.1)   # long enough that the stream never runs dry
    # replay the trace: MOVE lines sent minus MOVE replies received, at every step
    unanswered, peak = set(), 0
    for ln in _trace(tmp_path):
        body = ln.split(" > ", 1)[1] if " > " in ln else ln.split(" < ", 1)[1]
        parts = body.split("*")[0].split(" ")
        if " > " in ln and parts[1] == "MOVE":
            unanswered.add(parts[0])
        elif " < " in ln and parts[0] in ("OK", "ERR"):
            unanswered.discard(parts[1])
        peak = max(peak, len(unanswered))
    assert peak == 3
    assert r.emulator.moves_accepted == 6 and r.counts() == (240, 0)


def test_stop_does_not_wait_behind_a_slow_reply(make_rig, tmp_path):
    r = make_rig({"slow_ms": 200}, timeout_s=0.5)
    d = r.driver
    ready(d)
    d.queue(Segment((DEG(90.0), DEG(90.0)), 3.0))

    def state_in_flight():
        lines = _trace(tmp_path)
        sent = [ln.split(" > ", 1)[1].split(" ")[0] for ln in lines if " > " in ln and " STATE*" in ln]
        got = {ln.split(" < ", 1)[1].split(" ")[1] for ln in lines if " < OK " in ln}
        return bool(sent) and sent[-1] not in got and sent[-1]

    assert wait_for(state_in_flight, 3.0)
    seq = state_in_flight()
    d.stop()
    lines = _trace(tmp_path)
    stop_at = next(i for i, ln in enumerate(lines) if " > " in ln and " STOP*" in ln)
    reply_at = [i for i, ln in enumerate(lines) if f" < OK {seq} " in ln or ln.endswith(f" < OK {seq}")]
    assert not reply_at or stop_at < reply_at[0]     # STOP went out before that reply came
    assert wait_for(lambda: r.emulator.mode == "IDLE" and not r.emulator.segs)
    assert r.counts()[0] < 3600


def test_wait_idle_is_false_at_once_when_the_link_is_lost(make_rig):
    r = make_rig()
    d = r.driver
    ready(d)
    d.queue(Segment((DEG(90.0), DEG(90.0)), 2.0))
    r.emulator.stop()
    assert wait_for(lambda: (d.state().latched or "").startswith("link lost"), 3.0)
    assert d.state().queued == 1                      # nobody knows whether it ran
    assert d.wait_idle(30.0) is False                 # (and it does not sit out the 30 s)


# -- the position after a stop or a halt (PROTOCOL.md) --------------------------------------

def test_stop_returns_with_the_position_where_the_arm_came_to_rest(make_rig):
    r = make_rig()
    d = r.driver
    ready(d)
    d.queue(Segment((DEG(90.0), DEG(90.0)), 2.0))
    time.sleep(0.3)
    d.stop()                      # returns once STOP is written; its OK comes after
    assert d.wait_stopped(3.0)
    st = d.state()
    # the stop asked for a STATE after the STOP's OK: fresh, and where the emulator stands
    assert st.fresh
    from benchjog.drivers.calibration import counts_from_joints
    assert counts_from_joints(ARM, st.joints) == r.counts()
    assert 0 < r.counts()[0] < 3600


def test_after_a_fault_the_position_is_stale_until_reported_again(make_rig):
    r = make_rig(heartbeat_s=0)                         # no STATE unless asked
    d = r.driver
    ready(d)
    assert d.state().fresh
    r.fault("FOLLOWING", 1)
    assert events_of(d, "fault")
    assert not d.state().fresh                          # the halt made the old one stale
    d.reset()                                           # RESET, then a STATE: fresh again
    assert d.state().fresh


def test_counters_decide_pipelining(make_rig):
    assert make_rig().driver.counters is True
    old = make_rig({"counters": False})
    assert old.driver.counters is False
    ready(old.driver)
    _stream(old.driver, 5)                              # served, one MOVE at a time
    assert old.emulator.moves_accepted == 5 and old.counts() == (200, 0)


def test_queue_ran_dry_counts_starts_from_an_empty_queue(make_rig):
    r = make_rig()
    d = r.driver
    ready(d)
    before = d.state().queue_ran_dry
    for k in range(1, 4):                               # long segments: one stream
        d.queue(Segment((DEG(2.0 * k), DEG(90.0)), 0.1))
    assert d.wait_idle(3.0)
    assert d.state().queue_ran_dry - before == 1        # the start only
    for k in range(4, 7):                               # each waits for the last to finish
        d.queue(Segment((DEG(2.0 * k), DEG(90.0)), 0.02))
        assert d.wait_idle(2.0)
    assert d.state().queue_ran_dry - before == 4        # three more starts from empty
