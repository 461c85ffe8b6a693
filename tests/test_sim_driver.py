"""SimDriver: the driver contract, the fake-clock behaviour, the test hooks, and the
driver registry."""

from __future__ import annotations

from importlib import metadata

import pytest

from benchjog.console.cell.armfile import builtin_arm
from driver_contract import DEG, DriverContract
from benchjog.drivers import registry
from benchjog.drivers.base import ControllerError, Driver, DriverImportError, DriverNotFound, Mode
from benchjog.drivers.sim import SimDriver
from benchjog.kinematics.model import Segment


class _SimRig:
    def __init__(self, driver: SimDriver):
        self.driver = driver

    def press_estop(self):
        self.driver.inject_estop()

    def release_estop(self):
        self.driver.release_estop()

    def fault(self, code, axis):
        self.driver.inject_fault(code, axis)

    def moves_accepted(self):
        return sum(1 for c in self.driver.commands if c[0] == "MOVE")

    def counts(self):
        return self.driver.position_counts


class TestSimContract(DriverContract):
    @pytest.fixture
    def rig(self):
        d = SimDriver(builtin_arm("planar-bench"))
        d.open()
        yield _SimRig(d)
        d.close()


class FakeClock:
    def __init__(self):
        self.t = 100.0

    def __call__(self):
        return self.t


@pytest.fixture
def sim():
    clock = FakeClock()
    d = SimDriver(builtin_arm("planar-bench"), clock=clock)
    d.open()
    d.enable()
    d.clock = clock
    yield d
    d.close()


def test_starts_homed_at_home_pose_but_disabled():
    # CONTRACT.md: the built-in simulated arm starts homed, every axis at count 0
    d = SimDriver(builtin_arm("scara-bench"))
    d.open()
    st = d.state()
    assert st.homed and not st.enabled and st.mode is Mode.DISABLED
    assert d.position_counts == (0, 0, 0, 0)
    assert st.joints == pytest.approx(builtin_arm("scara-bench").home_joints)


def test_segment_interpolates_linearly_in_joint_space(sim):
    # PROTOCOL.md MOVE: every axis moves linearly, all arriving together after ms
    sim.queue(Segment((DEG(40.0), DEG(50.0)), 1.0))   # target counts (1600, 1600)
    sim.clock.t += 0.25
    assert sim.position_counts == (400, 400)          # a quarter of the way
    assert sim.state().mode is Mode.MOVING and sim.state().queued == 1
    sim.clock.t += 0.75
    assert sim.position_counts == (1600, 1600)
    assert sim.state().mode is Mode.IDLE and sim.state().queued == 0
    assert [e.kind for e in sim.poll_events()] == ["done"]


def test_queued_segments_run_back_to_back(sim):
    sim.queue(Segment((DEG(10.0), DEG(90.0)), 0.5))   # 400 counts
    sim.queue(Segment((DEG(30.0), DEG(90.0)), 0.5))   # 1200 counts
    sim.clock.t += 0.75                                # halfway through the second
    assert sim.position_counts == (800, 0)


def test_time_scale_speeds_the_clock():
    clock = FakeClock()
    d = SimDriver(builtin_arm(), clock=clock, time_scale=10.0)
    d.open()
    d.enable()
    d.queue(Segment((DEG(10.0), DEG(90.0)), 1.0))
    clock.t += 0.05                                    # 0.5 s of sim time
    assert d.position_counts == (200, 0)


def test_queue_depth_blocks_then_times_out(sim):
    for k in range(8):
        sim.queue(Segment((DEG(k + 1.0), DEG(90.0)), 1.0))
    with pytest.raises(ControllerError, match="QUEUE_FULL"):
        sim.queue(Segment((DEG(20.0), DEG(90.0)), 1.0), timeout_s=0.05)
    assert sum(1 for c in sim.commands if c[0] == "MOVE") == 8


def test_stall_faults_mid_move_and_halts_there(sim):
    sim.queue(Segment((DEG(40.0), DEG(90.0)), 1.0))
    sim.queue(Segment((DEG(80.0), DEG(90.0)), 1.0))
    sim.inject_stall(1)
    sim.clock.t += 5.0
    assert sim.position_counts == (800, 0)             # halfway through the first segment
    st = sim.state()
    assert st.latched == "fault: FOLLOWING axis=1" and st.mode is Mode.FAULT
    assert st.queued == 0 and not st.enabled
    kinds = [e.kind for e in sim.poll_events()]
    assert kinds == ["fault"]


def test_commands_are_recorded_and_refusals_are_not_motion(sim):
    sim.set_output(1, True)
    with pytest.raises(ControllerError, match="RANGE axis=1"):
        sim.queue(Segment((DEG(156.0), DEG(90.0)), 0.1))  # 156 deg * 40 = 6240 > 6200
    assert [c[0] for c in sim.commands] == ["OPEN", "ENABLE", "OUT"]
    assert sim.refused and sim.refused[0][0][0] == "MOVE"
    sim.queue(Segment((DEG(1.0), DEG(89.0)), 0.1))
    assert sim.commands[-1] == ("MOVE", 100, (40, 40))


def test_home_needs_enable_and_returns_to_count_zero():
    clock = FakeClock()
    d = SimDriver(builtin_arm(), clock=clock)
    d.open()
    with pytest.raises(ControllerError, match="NOT_ENABLED"):
        d.home()
    d.enable()
    d.queue(Segment((DEG(10.0), DEG(90.0)), 0.1))
    clock.t += 1.0
    d.home()
    assert d.position_counts == (0, 0) and d.state().homed


def test_not_open_is_a_link_error():
    from benchjog.drivers.base import LinkError
    d = SimDriver(builtin_arm())
    with pytest.raises(LinkError):
        d.enable()


def test_context_manager_stops_on_exit():
    clock = FakeClock()
    with SimDriver(builtin_arm(), clock=clock) as d:
        d.enable()
        d.queue(Segment((DEG(10.0), DEG(90.0)), 1.0))
    assert d.commands[-1] == ("STOP",)
    assert not d.state().is_open and d.state().queued == 0


# -- registry ---------------------------------------------------------------------------

def test_builtin_names():
    names = registry.available_drivers()
    assert "sim" in names and "serial" in names
    assert isinstance(registry.create_driver("sim", builtin_arm()), SimDriver)
    from benchjog.drivers.serial_link import SerialDriver
    assert registry.load_driver_class("serial") is SerialDriver


class _FakeEntryPoint:
    def __init__(self, name, value):
        self.name, self.value = name, value


def _fake_entry_points(monkeypatch, mapping):
    def entry_points(group=None, **kw):
        assert group == registry.ENTRY_POINT_GROUP
        return [_FakeEntryPoint(n, v) for n, v in mapping.items()]
    monkeypatch.setattr(metadata, "entry_points", entry_points)


def test_entry_point_driver_is_found_and_loaded_lazily(monkeypatch, tmp_path):
    pkg = tmp_path / "bench_plugin_drv.py"
    pkg.write_text(
        "from benchjog.drivers.sim import SimDriver\n"
        "class PluginDriver(SimDriver):\n"
        "    name = 'plugin'\n")
    monkeypatch.syspath_prepend(str(tmp_path))
    _fake_entry_points(monkeypatch, {"plugin": "bench_plugin_drv:PluginDriver"})
    import sys
    assert "plugin" in registry.available_drivers()
    assert "bench_plugin_drv" not in sys.modules          # listing imports nothing
    d = registry.create_driver("plugin", builtin_arm(), queue_depth=3)
    assert type(d).__name__ == "PluginDriver" and isinstance(d, Driver) and d.queue_depth == 3


def test_unknown_name_and_failed_import_differ(monkeypatch):
    _fake_entry_points(monkeypatch, {"broken": "no_such_module_xyz:Thing",
                                     "notadriver": "math:pi"})
    with pytest.raises(DriverNotFound, match="no driver named 'nope'"):
        registry.create_driver("nope", builtin_arm())
    with pytest.raises(DriverImportError, match="could not be loaded") as exc:
        registry.create_driver("broken", builtin_arm())
    assert not isinstance(exc.value, DriverNotFound)
    with pytest.raises(DriverImportError, match="not a Driver subclass"):
        registry.create_driver("notadriver", builtin_arm())


def test_plugin_cannot_shadow_a_builtin(monkeypatch):
    _fake_entry_points(monkeypatch, {"sim": "no_such_module_xyz:Thing"})
    assert isinstance(registry.create_driver("sim", builtin_arm()), SimDriver)

