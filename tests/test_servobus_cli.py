"""The servo-bus road from the command line: `benchjog ports` (USB ids, a guess, and a
ping probe that moves nothing), the arm file's [bus] keys, and `benchjog move` through
the interlock to the bus emulation on a pty."""

from __future__ import annotations

import io
import json
import time
from importlib import resources
from types import SimpleNamespace

import pytest

from benchjog.console.cell.armfile import builtin_arm, load_arm
from benchjog.console.cli.cmd_drivers import port_rows, usb_guess
from benchjog.console.cli.main import main
from benchjog.drivers.calibration import counts_from_joints
from benchjog.drivers.servobus import packet as P
from benchjog.drivers.servobus import table as T
from benchjog.drivers.servobus.config import bus_config_for_arm, bus_config_from_mapping
from benchjog.drivers.servobus.emulator import BusEmulator, ServoSpec
from benchjog.kinematics.armspec import ArmSpecError
from benchjog.kinematics.model import Branch
from benchjog.kinematics.solve import joints_from_tool

ARM = builtin_arm("planar-bench")
DEMO_TEXT = resources.files("benchjog.console.cell.arms").joinpath("planar-bench.toml").read_text()


@pytest.fixture
def bus():
    emu = BusEmulator([ServoSpec(1, model=1060), ServoSpec(2, model=1020, start_raw=2100)])
    path = emu.start()
    yield emu, path
    emu.stop()


def run(monkeypatch, capsys, answer: str, *argv: str):
    monkeypatch.setattr("sys.stdin", io.StringIO(answer))
    code = main(list(argv))
    out = capsys.readouterr()
    return code, out.out, out.err


def nothing_written(emu) -> bool:
    return all(instr in (P.PING, P.READ) for _, instr in emu.instructions)


def test_probe_pings_and_reads_only(monkeypatch, capsys, bus):
    emu, path = bus
    code, out, err = run(monkeypatch, capsys, "", "ports", "--probe", path, "--ids", "1-4")
    assert code == 0
    lines = out.splitlines()
    assert lines[0].startswith("id 1: XL430-W250 (model 1060") and "present position 2048" in lines[0]
    assert lines[1].startswith("id 2: XM430-W210 (model 1020") or lines[1].startswith("id 2: ")
    assert "present position 2100" in lines[1] and len(lines) == 2
    assert nothing_written(emu)


def test_probe_json_and_hardware_error(monkeypatch, capsys, bus):
    emu, path = bus
    emu.inject_hardware_error(2, 1 << 2)
    code, out, _ = run(monkeypatch, capsys, "", "ports", "--probe", path, "--ids", "2,9", "--json")
    assert code == 0
    doc = json.loads(out)
    assert doc["baud"] == 1_000_000 and [s["id"] for s in doc["servos"]] == [2]
    assert doc["servos"][0]["hardware_error"] == 4 and doc["servos"][0]["present_position"] == 2100
    assert nothing_written(emu)


def test_probe_with_nobody_there_exits_1(monkeypatch, capsys, bus):
    emu, path = bus
    code, out, err = run(monkeypatch, capsys, "", "ports", "--probe", path, "--ids", "5-6")
    assert code == 1 and out == "" and "no servo answered" in err and len(err.splitlines()) == 1


@pytest.mark.parametrize("argv", [("ports", "--ids", "1"), ("ports", "--probe", "/dev/null", "--ids", "1-x"),
                                  ("ports", "--probe", "/dev/null", "--ids", "253")])
def test_probe_bad_input_is_one_line_exit_2(monkeypatch, capsys, argv):
    code, out, err = run(monkeypatch, capsys, "", *argv)
    assert code == 2 and out == "" and len(err.splitlines()) == 1 and "Traceback" not in err


def test_probe_on_a_missing_port_is_exit_3(monkeypatch, capsys, tmp_path):
    code, _, err = run(monkeypatch, capsys, "", "ports", "--probe", str(tmp_path / "nope"), "--ids", "1")
    assert code == 3 and len(err.splitlines()) == 1


def test_port_rows_show_usb_ids_serial_and_a_guess():
    info = SimpleNamespace(device="/dev/ttyUSB0", vid=0x0403, pid=0x6014, serial_number="FT6Z1",
                           description="USB <-> Serial Converter")
    rows = port_rows([info, SimpleNamespace(device="/dev/ttyS0", vid=None, pid=None,
                                            serial_number=None, description="n/a")])
    assert rows[1] == {"device": "/dev/ttyUSB0", "vid_pid": "0403:6014", "serial_number": "FT6Z1",
                       "description": "USB <-> Serial Converter", "hwid": None,
                       "guess": usb_guess(0x0403, 0x6014)}
    assert "servo-bus" in rows[1]["guess"]
    assert rows[0]["vid_pid"] is None and rows[0]["description"] is None


def test_ports_json_is_one_document(monkeypatch, capsys):
    code, out, _ = run(monkeypatch, capsys, "", "ports", "--json")
    assert code == 0 and isinstance(json.loads(out), list)


def bus_arm_file(tmp_path, bus_text: str, joint_extra: str = "") -> str:
    text = DEMO_TEXT
    if joint_extra:
        text = text.replace('name = "elbow"', 'name = "elbow"\n' + joint_extra)
    path = tmp_path / "bus-arm.toml"
    path.write_text(text + "\n" + bus_text)
    return str(path)


def test_arm_file_bus_keys_load_and_validate(tmp_path):
    path = bus_arm_file(tmp_path, '[bus]\nbaud = 57600\nmode = "extended"\nrate_hz = 40\n'
                        '[bus.outputs]\n0 = { id = 2, address = 65 }\n', "servo_id = 7\nservo_offset = -120\n")
    arm = load_arm(path)                      # the arm file's required keys are untouched
    cfg = bus_config_for_arm(arm)
    assert cfg.ids == (1, 7) and cfg.baud == 57600 and cfg.mode == T.EXTENDED_POSITION_MODE
    assert cfg.offsets == (0, -120) and cfg.outputs == {0: (2, 65)} and cfg.rate_hz == 40.0


@pytest.mark.parametrize("bus_table, problem", [
    ({"baud": "fast"}, "bus.baud: not a whole number"),
    ({"mode": "velocity"}, "bus.mode: must be one of"),
    ({"rate_hz": 0}, "bus.rate_hz"),
    ({"watchdog_ms": 40, "rate_hz": 50}, "less than three write periods"),
    ({"speed": 1}, "bus.speed: unknown key"),
    ({"outputs": {"9": {"id": 1, "address": 65}}}, "bus.outputs.9: an output channel is 0..7"),
    # 2 servos: 70 bytes a tick (28 + 21 n); 57,600 baud carries 5760 bytes/s, 80 % = 4608;
    # 70 bytes at 100 Hz is 7000 bytes/s
    ({"baud": 57600, "rate_hz": 100}, "bus.rate_hz: 100 Hz x 70 bytes a tick is 7000 bytes/s"),
])
def test_bad_bus_keys_are_one_line(bus_table, problem):
    with pytest.raises(ArmSpecError, match=problem) as info:
        bus_config_from_mapping({"bus": bus_table, "joints": [{}, {}]}, 2, "arm.toml")
    assert str(info.value).startswith("arm.toml: ") and "\n" not in str(info.value)


def test_move_through_the_interlock_on_the_bus(monkeypatch, capsys, tmp_path):
    emu = BusEmulator([ServoSpec(1), ServoSpec(2)])
    path = emu.start()
    try:
        arm_path = bus_arm_file(tmp_path, '[bus]\nmode = "extended"\nwatchdog_ms = 300\n')
        code, out, err = run(monkeypatch, capsys, "y\n", "move", "150", "200", "--branch", "elbow-up", "--arm", arm_path,
                             "--port", path, "--journal", str(tmp_path / "j.jsonl"))
        assert code == 0, err
        # where the servos must end: the elbow-up branch by PROTOCOL's counts, within the
        # driver's settle band of 2 counts
        want = counts_from_joints(ARM, joints_from_tool(ARM, (150.0, 200.0)).solution(Branch.ELBOW_UP).joints)
        got = tuple(emu.present(i) - T.CENTER for i in (1, 2))
        assert all(abs(g - w) <= 2 for g, w in zip(got, want)), (got, want)
        assert emu.register(1, T.TORQUE_ENABLE) == 0      # the command switches the drives off at the end
    finally:
        emu.stop()


def test_move_answered_no_moves_nothing_on_the_bus(monkeypatch, capsys, tmp_path):
    emu = BusEmulator([ServoSpec(1), ServoSpec(2)])
    path = emu.start()
    try:
        arm_path = bus_arm_file(tmp_path, '[bus]\nmode = "extended"\nwatchdog_ms = 300\n')
        code, _, _ = run(monkeypatch, capsys, "n\n", "move", "150", "200", "--arm", arm_path,
                         "--port", path, "--journal", str(tmp_path / "j.jsonl"))
        assert code == 1 and emu.goal_changes == 0
        assert emu.present(1) == T.CENTER and emu.present(2) == T.CENTER
    finally:
        emu.stop()


def test_probe_without_ids_greets_a_benchjog_controller(monkeypatch, capsys):
    from benchjog.drivers.emulator import Emulator

    emu = Emulator(ARM)
    path = emu.start()
    try:
        code, out, err = run(monkeypatch, capsys, "", "ports", "--probe", path, "--json")
        assert code == 0, err
        doc = json.loads(out)
        assert doc["firmware"]["axes"] == 2 and doc["firmware"]["proto"] == 1
        assert emu.moves_accepted == 0
    finally:
        emu.stop()


def test_probe_without_ids_on_a_servo_bus_finds_no_controller(monkeypatch, capsys, bus):
    emu, path = bus
    code, out, err = run(monkeypatch, capsys, "", "ports", "--probe", path)
    assert code == 1 and out == "" and "give --ids" in err
    assert emu.goal_changes == 0


def test_home_on_the_bus_moves_nothing_and_checks_the_offsets(monkeypatch, capsys, tmp_path):
    # absolute encoders: homing is the zero-offset check, not a motion
    emu = BusEmulator([ServoSpec(1), ServoSpec(2)])
    path = emu.start()
    try:
        arm_path = bus_arm_file(tmp_path, '[bus]\nmode = "extended"\nwatchdog_ms = 300\n',
                                "servo_offset = 40\n")
        code, out, err = run(monkeypatch, capsys, "y\n", "home", "--arm", arm_path, "--port", path,
                             "--journal", str(tmp_path / "j.jsonl"))
        assert code == 0, err
        assert emu.goal_changes == 0
        # the confirmation says what homing does here, not a cycle's unchecked path
        said = out + err
        assert "moves nothing" in said and "NOT checked" not in said, said
        assert emu.register(2, T.HOMING_OFFSET) == 40          # the elbow's zero offset, written on open
        assert emu.present(1) == T.CENTER and emu.present(2) == T.CENTER + 40
    finally:
        emu.stop()


def test_a_bad_bus_table_is_one_line_exit_2_before_anything_is_sent(monkeypatch, capsys, tmp_path, bus):
    emu, path = bus
    arm_path = bus_arm_file(tmp_path, '[bus]\nmode = "turbo"\n')
    code, out, err = run(monkeypatch, capsys, "y\n", "move", "150", "200", "--arm", arm_path,
                         "--port", path, "--journal", str(tmp_path / "j.jsonl"))
    assert code == 2 and len(err.strip().splitlines()) == 1 and "bus.mode" in err
    assert emu.instructions == []


def test_the_hand_run_emulation_serves_and_takes_typed_commands():
    import subprocess
    import sys

    from benchjog.drivers.servobus.probe import probe_bus

    proc = subprocess.Popen([sys.executable, "-m", "benchjog.drivers.servobus.emulator", "--ids", "3,4"],
                            stdin=subprocess.PIPE, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        path = proc.stdout.readline().strip()
        assert [f.servo_id for f in probe_bus(path, 1_000_000, [2, 3, 4])] == [3, 4]
        proc.stdin.write("error 4\n")
        proc.stdin.flush()
        deadline = time.monotonic() + 3.0
        while time.monotonic() < deadline:
            found = {f.servo_id: f.hardware_error for f in probe_bus(path, 1_000_000, [4])}
            if found.get(4):
                break
        assert found == {4: 1 << 5}
    finally:
        proc.terminate()
        proc.wait(5)
