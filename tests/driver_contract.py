"""The one driver contract, run against every driver (like python-can's back-to-back
tests): tests/test_sim_driver.py runs it on SimDriver, tests/test_serial_driver.py on
SerialDriver talking to the emulator over a real pty.

A subclass provides the ``rig`` fixture: an object with ``driver`` (open, drives off,
at the home pose) and the controller-side hooks ``press_estop()``, ``release_estop()``,
``fault(code, axis)``, ``moves_accepted()`` (MOVEs the controller took) and
``counts()`` (where the controller's axes are).

The expected counts come from PROTOCOL.md's formula worked by hand for the built-in
planar arm (shoulder: zero 0 deg, 40 counts/deg, direction 1; elbow: zero 90 deg,
40 counts/deg, direction -1), not from the code under test.
"""

from __future__ import annotations

import math
import time

import pytest

from benchjog.drivers.base import ControllerError, DriverError, Mode
from benchjog.kinematics.model import Segment

DEG = math.radians


def wait_for(predicate, timeout_s: float = 3.0) -> bool:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if predicate():
            return True
        time.sleep(0.01)
    return predicate()


def events_of(driver, kind: str, timeout_s: float = 3.0) -> list:
    seen: list = []

    def got() -> bool:
        seen.extend(driver.poll_events())
        return any(e.kind == kind for e in seen)

    wait_for(got, timeout_s)
    return [e for e in seen if e.kind == kind]


def ready(driver) -> None:
    driver.enable()
    driver.home(timeout_s=5.0)


class DriverContract:
    """Mixed into ``Test...`` classes that define the ``rig`` fixture."""

    def test_opens_disabled_at_home(self, rig):
        st = rig.driver.state()
        assert st.is_open and not st.enabled
        assert st.mode is Mode.DISABLED
        assert st.latched is None and st.queued == 0
        assert rig.counts() == (0, 0)
        # home pose: shoulder 0 deg, elbow at its zero, 90 deg (counts 0 -> zero)
        assert st.joints == pytest.approx((0.0, DEG(90.0)), abs=1e-12)

    def test_motion_refused_until_enabled(self, rig):
        with pytest.raises(ControllerError):
            rig.driver.queue(Segment((DEG(10.0), DEG(80.0)), 0.05))
        assert rig.moves_accepted() == 0

    def test_segments_reach_target_counts(self, rig):
        d = rig.driver
        ready(d)
        assert d.state().enabled and d.state().homed
        d.queue(Segment((DEG(15.0), DEG(80.0)), 0.05))
        d.queue(Segment((DEG(30.0), DEG(70.0)), 0.05))
        d.queue(Segment((DEG(45.0), DEG(60.0)), 0.05))
        assert d.wait_idle(3.0)
        # shoulder 45 deg: 1 * (45 - 0) * 40 = 1800; elbow 60 deg: -1 * (60 - 90) * 40 = 1200
        assert rig.counts() == (1800, 1200)
        st = d.state()
        assert st.mode is Mode.IDLE and st.queued == 0
        assert st.joints == pytest.approx((DEG(45.0), DEG(60.0)), abs=1e-12)
        assert rig.moves_accepted() == 3

    def test_stop_flushes_the_queue(self, rig):
        d = rig.driver
        ready(d)
        for j1 in (40.0, 80.0, 120.0):
            d.queue(Segment((DEG(j1), DEG(90.0)), 0.4))
        time.sleep(0.1)
        d.stop()
        assert d.wait_stopped(3.0)              # the controller has answered the stop
        assert d.wait_idle(1.0)
        stopped = rig.counts()
        # stopped early in the first segment: short of 40 deg = 1600 counts
        assert 0 <= stopped[0] < 1600
        time.sleep(0.3)
        assert rig.counts() == stopped          # the flushed segments never ran
        assert d.state().queued == 0

    def test_outputs(self, rig):
        d = rig.driver
        d.set_output(2, True)
        d.set_output(0, True)
        assert d.state().outputs == 0b101       # outputs 0 and 2: bits 1<<0 | 1<<2 = 5
        d.set_output(2, False)
        assert d.state().outputs == 0b001
        with pytest.raises(ControllerError):
            d.set_output(8, True)

    def test_estop_latches_and_blocks_motion_until_reset(self, rig):
        d = rig.driver
        ready(d)
        d.queue(Segment((DEG(90.0), DEG(90.0)), 1.0))
        time.sleep(0.1)
        rig.press_estop()
        assert events_of(d, "estop")
        st = d.state()
        assert st.latched == "estop" and st.mode is Mode.ESTOP and not st.enabled
        halted = rig.counts()
        assert halted[0] < 3600                  # 90 deg would be 3600 counts
        before = rig.moves_accepted()
        with pytest.raises(ControllerError):
            d.queue(Segment((DEG(10.0), DEG(90.0)), 0.05))
        with pytest.raises(ControllerError):
            d.enable()
        with pytest.raises(ControllerError):
            d.reset()                            # the input is still active
        assert rig.moves_accepted() == before
        rig.release_estop()
        assert events_of(d, "estop-clear")
        assert d.state().latched == "estop"      # released, still latched until reset
        d.reset()
        assert d.state().latched is None
        d.enable()
        d.queue(Segment((DEG(10.0), DEG(90.0)), 0.05))
        assert d.wait_idle(2.0)
        assert rig.counts() == (400, 0)          # 10 deg * 40 counts/deg
        assert rig.counts() != halted

    def test_fault_latches_until_reset(self, rig):
        d = rig.driver
        ready(d)
        rig.fault("DRIVE", 2)
        assert events_of(d, "fault")
        assert d.state().latched == "fault: DRIVE axis=2"
        with pytest.raises(ControllerError):
            d.queue(Segment((DEG(10.0), DEG(90.0)), 0.05))
        d.reset()
        d.enable()
        assert d.state().latched is None and d.state().enabled

    def test_out_of_hard_range_is_refused_and_nothing_moves(self, rig):
        d = rig.driver
        ready(d)
        # elbow at -151 deg: -1 * (-151 - 90) * 40 = 9640 > 9600, the hard range's end
        with pytest.raises(ControllerError, match="RANGE axis=2"):
            d.queue(Segment((0.0, DEG(-151.0)), 0.05))
        assert rig.moves_accepted() == 0
        assert rig.counts() == (0, 0)

    def test_bad_segment_never_reaches_the_controller(self, rig):
        d = rig.driver
        ready(d)
        for bad in (Segment((0.0,), 0.1), Segment((0.0, math.nan), 0.1), Segment((0.0, 1.0), 0.0),
                    Segment((0.0, 1.0), 61.0)):
            with pytest.raises(DriverError):
                d.queue(bad)
        assert rig.moves_accepted() == 0

    def test_close_is_idempotent(self, rig):
        d = rig.driver
        d.close()
        d.close()
        assert not d.state().is_open
