"""ServoBusDriver against the bus emulation on a real pty: the shared driver contract,
then what a servo bus adds (a servo that lags, a dropped status packet, a hardware error
in words, reboot only on reset, the bus watchdog stopping the arm when the host dies,
the zero offset written to the servo)."""

from __future__ import annotations

import math
import os
import signal
import subprocess
import sys
import textwrap
import time

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from benchjog.console.cell.armfile import builtin_arm
from benchjog.drivers.base import ControllerError, LinkError, Mode
from benchjog.drivers.servobus import table as T
from benchjog.drivers.servobus.config import BusConfig
from benchjog.drivers.servobus.driver import ServoBusDriver
from benchjog.drivers.servobus.emulator import BusEmulator, ServoSpec
from benchjog.kinematics.model import Segment
from driver_contract import DEG, DriverContract, events_of, ready, wait_for

ARM = builtin_arm("planar-bench")
# Overload is bit 5 of Hardware Error Status (the servo family's control table, from memory).
OVERLOAD = 1 << 5


def rig_config(**kw) -> BusConfig:
    # The demo arm has 40 counts/deg, more than one turn of a 4096-pulse servo: extended mode.
    kw.setdefault("mode", T.EXTENDED_POSITION_MODE)
    # 300 ms: a loaded 2-core test machine can stall a process past the 100 ms default;
    # the watchdog's own tests ask for 100 ms
    kw.setdefault("watchdog_ms", 300)
    kw.setdefault("outputs", {0: (1, T.LED.address), 2: (2, T.LED.address)})
    return BusConfig.for_arm(ARM, **kw)


class _BusRig:
    def __init__(self, emulator: BusEmulator, driver: ServoBusDriver):
        self.emulator, self.driver = emulator, driver

    def press_estop(self):
        self.emulator.power_cut()       # the e-stop contact cuts the servo supply

    def release_estop(self):
        self.emulator.power_restore()

    def fault(self, code, axis):
        assert code == "DRIVE"
        self.emulator.inject_hardware_error(axis, OVERLOAD)

    def moves_accepted(self):
        # The bus has no MOVE: a segment counts as taken once goals for it went out, and
        # the servos must agree (a goal changed on the wire exactly when one did).
        n = self.driver.segments_streamed
        assert (n == 0) == (self.emulator.goal_changes == 0)
        return n

    def counts(self):
        return tuple(self.emulator.present(i) - T.CENTER for i in (1, 2))


@pytest.fixture
def make_rig(tmp_path):
    made = []

    def make(config=None, servos=None, emu_options=None, **driver_options):
        emu = BusEmulator(servos or [ServoSpec(1), ServoSpec(2)], **(emu_options or {}))
        path = emu.start()
        driver_options.setdefault("settle_counts", 0)
        driver_options.setdefault("trace", str(tmp_path / "bus-trace.txt"))
        d = ServoBusDriver(ARM, port=path, bus=config or rig_config(), **driver_options)
        made.append((emu, d))
        d.open()
        return _BusRig(emu, d)

    yield make
    for emu, d in made:
        d.close()
        emu.stop()


class TestServoBusContract(DriverContract):
    @pytest.fixture
    def rig(self, make_rig):
        return make_rig()


def test_registered_as_a_builtin_name():
    from benchjog.drivers.registry import available_drivers, load_driver_class
    assert "servobus" in available_drivers()
    assert load_driver_class("servobus") is ServoBusDriver


def test_streamed_goals_follow_the_segment_line(make_rig):
    # Independent check of the host interpolation: every goal sent for a single
    # segment lies on the straight line from its start to its target, in order.
    rig = make_rig()
    d = rig.driver
    ready(d)
    d.queue(Segment((DEG(20.0), DEG(80.0)), 0.3))   # shoulder 0 -> 800, elbow 0 -> 400
    assert d.wait_idle(3.0)
    shoulder = [g - T.CENTER for sid, g in rig.emulator.goal_log if sid == 1]
    elbow = [g - T.CENTER for sid, g in rig.emulator.goal_log if sid == 2]
    assert len(shoulder) >= 5                       # streamed, not one jump
    assert shoulder == sorted(shoulder) and elbow == sorted(elbow)
    assert shoulder[-1] == 800 and elbow[-1] == 400
    assert rig.counts() == (800, 400)
    for s_goal, e_goal in zip(shoulder, elbow):
        assert abs(e_goal - s_goal / 2) <= 1        # same fraction of the way (rounding)


def test_a_lagging_servo_arrives_late_without_a_fault(make_rig):
    rig = make_rig()
    rig.emulator.set_lag(2, lag_s=0.15)
    d = rig.driver
    ready(d)
    d.queue(Segment((DEG(10.0), DEG(60.0)), 0.1))   # elbow 0 -> 1200
    assert wait_for(lambda: d.state().queued == 0, 2.0)
    assert rig.counts()[1] < 1200 and d.state().mode is Mode.MOVING   # still catching up
    assert d.wait_idle(5.0)
    assert d.state().latched is None and rig.counts() == (400, 1200)


def test_stop_never_waits_for_the_bus_and_the_hold_follows(make_rig):
    # A stop while the bus is busy (here: the test holds the bus lock, as a tick waiting
    # out a silent servo's reply timeout would) returns at once, with nothing more
    # queued; the streaming thread then reads where the servos are and writes that as
    # their goal. wait_stopped() waits for that hold; the state is fresh only after it.
    import threading

    rig = make_rig()
    d = rig.driver
    ready(d)
    d.queue(Segment((DEG(60.0), DEG(30.0)), 2.0))      # shoulder 0 -> 2400 counts
    assert wait_for(lambda: rig.counts()[0] > 40, 2.0)
    returned = threading.Event()
    with d.bus.lock:
        worker = threading.Thread(target=lambda: (d.stop(), returned.set()))
        worker.start()
        assert returned.wait(5.0)                       # the bus is still held here
        st = d.state()
        assert st.queued == 0 and not st.fresh and st.mode is Mode.MOVING
        assert not d.wait_stopped(0.05)                 # the hold waits for the bus
    assert d.wait_stopped(5.0)
    hold = [g for sid, g in rig.emulator.goal_log if sid == 1][-1] - T.CENTER
    assert 40 < hold < 2400                             # held short of the target
    assert d.wait_idle(3.0) and d.state().fresh
    assert abs(rig.counts()[0] - hold) <= 1
    assert any("hold where they are" in e.detail for e in d.poll_events() if e.kind == "info")


def test_a_stuck_servo_is_a_following_fault(make_rig):
    rig = make_rig(following_deg=2.0, following_s=0.2)
    rig.emulator.set_lag(1, lag_s=0.0, max_speed_pps=10.0)   # barely turns
    d = rig.driver
    ready(d)
    d.queue(Segment((DEG(30.0), DEG(90.0)), 0.2))
    assert events_of(d, "fault")
    st = d.state()
    assert st.latched == "fault: FOLLOWING axis=1" and not st.enabled
    assert wait_for(lambda: rig.emulator.register(2, T.TORQUE_ENABLE) == 0)   # all switched off
    with pytest.raises(ControllerError):
        d.queue(Segment((DEG(1.0), DEG(90.0)), 0.1))


def test_a_dropped_status_packet_is_survived(make_rig):
    rig = make_rig()
    d = rig.driver
    ready(d)
    d.queue(Segment((DEG(20.0), DEG(90.0)), 0.4))
    time.sleep(0.1)
    rig.emulator.drop_next(1)
    assert d.wait_idle(3.0)
    assert d.state().latched is None and rig.counts() == (800, 0)


def test_corrupted_status_packets_are_survived(make_rig):
    rig = make_rig(emu_options={"corrupt_every": 7})
    d = rig.driver
    ready(d)
    d.queue(Segment((DEG(20.0), DEG(90.0)), 0.3))
    assert d.wait_idle(3.0)
    assert d.state().latched is None and rig.counts() == (800, 0)


def test_hardware_error_in_words_and_reboot_only_on_reset(make_rig):
    rig = make_rig()
    d = rig.driver
    ready(d)
    rig.emulator.inject_hardware_error(1, OVERLOAD | 1)    # overload + input voltage
    faults = events_of(d, "fault")
    assert faults and "overload" in faults[0].detail and "input voltage" in faults[0].detail
    assert d.state().latched == "fault: DRIVE axis=1"
    time.sleep(0.2)
    assert (1, 0x08) not in rig.emulator.instructions         # nothing rebooted on its own
    assert rig.emulator.register(1, T.HARDWARE_ERROR) == OVERLOAD | 1
    d.reset()
    assert (1, 0x08) in rig.emulator.instructions and (2, 0x08) not in rig.emulator.instructions
    assert rig.emulator.register(1, T.HARDWARE_ERROR) == 0
    assert not d.state().enabled                               # torque comes back off
    d.enable()
    d.queue(Segment((DEG(5.0), DEG(90.0)), 0.05))
    assert d.wait_idle(2.0) and rig.counts() == (200, 0)


def test_watchdog_is_armed_while_enabled_and_cleared_when_disabled(make_rig):
    rig = make_rig(config=rig_config(watchdog_ms=100))
    d = rig.driver
    ready(d)
    assert rig.emulator.register(1, T.BUS_WATCHDOG) == 5       # 100 ms in 20 ms units
    d.disable()
    assert rig.emulator.register(1, T.BUS_WATCHDOG) == 0
    assert rig.emulator.register(1, T.TORQUE_ENABLE) == 0


HOST = textwrap.dedent("""
    import math, sys, time
    from benchjog.console.cell.armfile import builtin_arm
    from benchjog.drivers.servobus import table as T
    from benchjog.drivers.servobus.config import BusConfig
    from benchjog.drivers.servobus.driver import ServoBusDriver
    from benchjog.kinematics.model import Segment
    arm = builtin_arm("planar-bench")
    cfg = BusConfig.for_arm(arm, mode=T.EXTENDED_POSITION_MODE)
    d = ServoBusDriver(arm, port=sys.argv[1], bus=cfg)
    d.open(); d.enable()
    d.queue(Segment((math.radians(120.0), math.radians(90.0)), 3.0))
    print("moving", flush=True)
    time.sleep(60)
""")


def test_a_dead_host_stops_the_arm_by_the_bus_watchdog():
    # The host process is killed mid-move (SIGKILL: no close, no stop, no torque off);
    # the servos' own watchdog must stop them.
    emu = BusEmulator([ServoSpec(1), ServoSpec(2)])
    path = emu.start()
    host = subprocess.Popen([sys.executable, "-c", HOST, path], stdout=subprocess.PIPE, text=True)
    try:
        assert host.stdout.readline().strip() == "moving"
        assert wait_for(lambda: emu.present(1) - T.CENTER > 50, 3.0)
        os.kill(host.pid, signal.SIGKILL)
        host.wait(5)
        assert wait_for(lambda: emu.register(1, T.BUS_WATCHDOG) == T.WATCHDOG_TRIPPED, 2.0)
        stopped = emu.present(1)
        time.sleep(0.3)
        assert emu.present(1) == stopped
        assert stopped - T.CENTER < 4800 - 100       # well short of 120 deg (4800 counts)
    finally:
        if host.poll() is None:
            host.kill()
            host.wait(5)
        emu.stop()


def test_zero_offset_and_direction_go_to_the_servo_registers(make_rig):
    # joints' servo_offset -> Homing Offset; a reverse bit left set in Drive Mode is
    # cleared (direction stays in the host's counts formula only)
    servos = [ServoSpec(1, start_raw=2048 - 300), ServoSpec(2)]
    rig = make_rig(config=rig_config(offsets=(300, 0)), servos=servos)
    assert rig.emulator.register(1, T.HOMING_OFFSET) == 300
    assert rig.counts() == (0, 0) and rig.driver.state().joints == pytest.approx((0.0, DEG(90.0)))


def test_a_reverse_bit_left_in_drive_mode_is_cleared():
    emu = BusEmulator([ServoSpec(1), ServoSpec(2)])
    emu.servos[2].regs[T.DRIVE_MODE.address] = T.DRIVE_MODE_REVERSE
    path = emu.start()
    d = ServoBusDriver(ARM, port=path, bus=rig_config())
    try:
        d.open()
        assert emu.register(2, T.DRIVE_MODE) == 0
    finally:
        d.close()
        emu.stop()


def test_one_turn_mode_writes_the_servo_limits_and_refuses_beyond_them(make_rig):
    rig = make_rig(config=rig_config(mode=T.POSITION_MODE))
    # shoulder hard range -155..155 deg = -6200..6200 counts, beyond one turn: clipped to 0..4095
    assert rig.emulator.register(1, T.MIN_POSITION) == 0
    assert rig.emulator.register(1, T.MAX_POSITION) == 4095
    d = rig.driver
    ready(d)
    with pytest.raises(ControllerError, match="RANGE axis=1"):
        d.queue(Segment((DEG(52.0), DEG(90.0)), 0.1))     # 2080 counts: goal 4128 > 4095
    d.queue(Segment((DEG(51.0), DEG(90.0)), 0.1))         # 2040: goal 4088
    assert d.wait_idle(2.0) and rig.counts() == (2040, 0)


def test_open_names_a_silent_servo_in_one_line():
    emu = BusEmulator([ServoSpec(1)])
    path = emu.start()
    d = ServoBusDriver(ARM, port=path, bus=rig_config(), latency_s=0.01)
    try:
        with pytest.raises(LinkError, match=r"servo id 2 \(elbow\) does not answer") as info:
            d.open()
        assert "\n" not in str(info.value)
        assert not [i for i in emu.instructions if i[1] in (0x03, 0x83) and i[0] in (1, 0xFE)]  # nothing written
    finally:
        d.close()
        emu.stop()


def test_open_refuses_a_servo_of_another_model():
    emu = BusEmulator([ServoSpec(1, model=1060), ServoSpec(2, model=1200)])
    path = emu.start()
    d = ServoBusDriver(ARM, port=path, bus=rig_config(models=(1060, 1060)))
    try:
        with pytest.raises(ControllerError, match="XL330-M288"):
            d.open()
    finally:
        d.close()
        emu.stop()


def test_an_unwired_output_is_refused(make_rig):
    rig = make_rig()
    with pytest.raises(ControllerError, match=r"output 5 is not wired"):
        rig.driver.set_output(5, True)
    rig.driver.set_output(2, True)
    assert rig.emulator.register(2, T.LED) == 1


def test_a_stalled_host_is_a_watchdog_fault_and_the_servos_had_stopped(make_rig):
    rig = make_rig(config=rig_config(watchdog_ms=100))
    d = rig.driver
    ready(d)
    d.queue(Segment((DEG(90.0), DEG(90.0)), 2.0))
    time.sleep(0.2)
    with d.bus.lock:              # the streaming thread cannot write for 0.3 s (> 100 ms)
        time.sleep(0.3)
        tripped = rig.emulator.register(1, T.BUS_WATCHDOG)
    assert tripped == T.WATCHDOG_TRIPPED     # the servo stopped itself meanwhile
    assert events_of(d, "fault")
    assert d.state().latched == "fault: WATCHDOG axis=0"
    assert rig.counts()[0] < 3600
    d.reset()
    assert rig.emulator.register(1, T.BUS_WATCHDOG) == 0
    d.enable()
    assert rig.emulator.register(1, T.BUS_WATCHDOG) == 5


def test_port_gone_mid_move_is_link_lost_and_reset_reconnects(tmp_path):
    from benchjog.drivers.interlock import Interlock

    link = tmp_path / "ttyBUS"                      # a stable name, as a udev rule gives
    emu = BusEmulator([ServoSpec(1), ServoSpec(2)])
    link.symlink_to(emu.start())
    gate = Interlock.open(ARM, "servobus", journal=False, port=str(link), bus=rig_config())
    emu2 = BusEmulator([ServoSpec(1), ServoSpec(2, start_raw=2148)])
    try:
        assert gate.state().link.startswith("servobus ")
        emu.stop()                                   # the adapter is pulled out
        assert wait_for(lambda: gate.state().latched is not None, 3.0)
        st = gate.state()
        assert st.latched.startswith("link lost") and not st.is_open
        with pytest.raises(LinkError):
            gate.reset()                             # nothing there yet: still lost
        link.unlink()
        link.symlink_to(emu2.start())                # plugged back in
        gate.reset()
        st = gate.state()
        assert st.is_open and st.latched is None and not st.enabled
        # the position was read afresh: elbow count 100 is 90 + 100 / (40 * -1) = 87.5 deg
        assert st.joints == pytest.approx((0.0, DEG(87.5)), abs=1e-12)
    finally:
        gate.close()
        emu2.stop()


def test_one_silent_servo_is_a_drive_fault_and_the_others_go_off(make_rig):
    rig = make_rig()
    d = rig.driver
    ready(d)
    with rig.emulator._lock:
        unplugged = rig.emulator.servos.pop(2)       # its cable comes out: nobody at id 2
    faults = events_of(d, "fault")
    assert faults and "servo id 2 (elbow) does not answer" in faults[0].detail
    assert d.state().latched == "fault: DRIVE axis=2"
    assert rig.emulator.register(1, T.TORQUE_ENABLE) == 0
    with rig.emulator._lock:
        rig.emulator.servos[2] = unplugged


def test_nothing_is_written_to_the_goals_after_an_estop_until_reset(make_rig):
    rig = make_rig()
    d = rig.driver
    ready(d)
    d.queue(Segment((DEG(60.0), DEG(90.0)), 1.0))
    time.sleep(0.15)
    rig.press_estop()
    assert events_of(d, "estop")
    n_at_latch = len(rig.emulator.instructions)
    time.sleep(0.3)
    after = rig.emulator.instructions[n_at_latch:]
    assert after and all(instr == 0x01 for _, instr in after)   # only pings, looking for power
    rig.release_estop()
    assert events_of(d, "estop-clear")
    with pytest.raises(ControllerError):
        d.queue(Segment((DEG(10.0), DEG(90.0)), 0.1))            # still latched until reset


@settings(max_examples=6, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.lists(st.tuples(st.floats(-40.0, 40.0), st.floats(50.0, 130.0), st.floats(0.02, 0.12)),
                min_size=1, max_size=4))
def test_fuzzed_segment_sequences_end_on_target_and_stay_between_their_ends(make_rig, segments):
    # Independent checker: each goal the servos received lies inside the box spanned by
    # the counts of the segment endpoints (linear interpolation cannot leave it), and the
    # servos end on the last target worked out by PROTOCOL.md's formula.
    rig = make_rig()
    d = rig.driver
    try:
        ready(d)
        start = len(rig.emulator.goal_log)
        ends = [(0, 0)]
        for j1, j2, dur in segments:
            d.queue(Segment((DEG(j1), DEG(j2)), dur))
            ends.append((round(j1 * 40), round(-(j2 - 90.0) * 40)))
        assert d.wait_idle(5.0)
        assert rig.counts() == ends[-1]
        for axis, sid in ((0, 1), (1, 2)):
            lo = min(e[axis] for e in ends)
            hi = max(e[axis] for e in ends)
            goals = [g - T.CENTER for s, g in rig.emulator.goal_log[start:] if s == sid]
            assert all(lo <= g <= hi for g in goals), (axis, lo, hi, goals)
    finally:
        d.close()
        rig.emulator.stop()


def test_queue_ran_dry_counts_and_position_is_stale_while_the_servos_are_silent(make_rig):
    rig = make_rig()
    d = rig.driver
    ready(d)
    d.queue(Segment((DEG(40.0), DEG(90.0)), 0.4))
    d.queue(Segment((DEG(60.0), DEG(90.0)), 0.2))
    assert d.wait_idle(3.0)
    assert d.state().queue_ran_dry == 1            # the second was chained to the first
    assert d.state().fresh
    rig.press_estop()
    assert events_of(d, "estop")
    assert not d.state().fresh                     # nothing can be read: no plan from it
    rig.release_estop()
    assert events_of(d, "estop-clear")
    assert wait_for(lambda: d.state().fresh, 1.0)  # read again once the servos answer
