"""The firmware as a board would run it, and the command that writes it:

- ``benchjog firmware`` writes the board's files and a config filled in from an arm file;
  the written config.py loads, and the board's layer (hw_io.py with hw_servo.py and
  hw_stepdir.py, as main.py builds it) drives pins that record what they got, in place
  of MicroPython's ``machine`` module: servo pulse widths, step pulses, the e-stop pin.
- The emulator on a pty (the same core) with a limit switch hit, seen by the serial
  driver; the HELLO probe against the emulator, an echoing port and a silent one.
"""

from __future__ import annotations

import contextlib
import io
import json
import math
import os
import sys
import types
from pathlib import Path

import pytest

from benchjog.console.cell.armfile import builtin_arm
from benchjog.console.cli.main import main
from benchjog.drivers import protocol as P
from benchjog.drivers.calibration import hard_ranges_counts
from benchjog.drivers.emulator import Emulator
from benchjog.drivers.firmware import core
from benchjog.drivers.firmware.configgen import BOARD_FILES
from benchjog.drivers.firmware.probe import probe_firmware
from benchjog.drivers.serial_link import SerialDriver
from benchjog.kinematics.model import Segment
from driver_contract import events_of, ready, wait_for

ROOT = Path(__file__).resolve().parent.parent
BOARD_NAMES = (*BOARD_FILES, "config.py")


def _benchjog(*args, cwd=ROOT):
    """``benchjog ARGS`` in this process (as fast as a function call): its exit status,
    stdout and stderr."""
    out, err = io.StringIO(), io.StringIO()
    here = os.getcwd()
    os.chdir(cwd)
    try:
        with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
            try:
                code = main(list(args))
            except SystemExit as exc:     # argparse's usage errors
                code = exc.code
    finally:
        os.chdir(here)
    return types.SimpleNamespace(returncode=code, stdout=out.getvalue(), stderr=err.getvalue())


# -- a stand-in for MicroPython's machine module ------------------------------------------

class FakePin:
    IN, OUT, PULL_UP = 0, 1, 2

    def __init__(self, board, number, mode=None, pull=None, value=None):
        self.board, self.number, self.mode = board, number, mode
        self.level = 0 if value is None else value
        self.rises = 0
        board.pins[number] = self

    def value(self, v=None):
        if v is None:
            return self.board.inputs.get(self.number, 0) if self.mode == FakePin.IN else self.level
        if v and not self.level:
            self.rises += 1
        self.level = v


class FakePWM:
    def __init__(self, pin):
        self.pin, self.hz, self.ns = pin, None, None
        pin.board.pwms[pin.number] = self

    def freq(self, hz):
        self.hz = hz

    def duty_ns(self, ns):
        self.ns = ns


def fake_machine():
    board = types.SimpleNamespace(pins={}, pwms={}, inputs={})

    def pin(number, mode=None, pull=None, value=None):
        return FakePin(board, number, mode, pull, value)

    pin.IN, pin.OUT, pin.PULL_UP = FakePin.IN, FakePin.OUT, FakePin.PULL_UP
    return types.SimpleNamespace(Pin=pin, PWM=FakePWM, board=board)


FLAT = ("config", "core", "main", "hw_io", "hw_servo", "hw_stepdir")


def _forget_board(folder: Path) -> None:
    for name in FLAT:
        sys.modules.pop(name, None)
    if str(folder) in sys.path:
        sys.path.remove(str(folder))


def _load_board(folder: Path):
    """The written files as the board's flat modules (``config``, ``core``, ``hw_io``,
    ``main``), as MicroPython finds them in the board's root folder."""
    _forget_board(folder)
    sys.path.insert(0, str(folder))
    import config  # noqa: PLC0415
    import core as board_core  # noqa: PLC0415
    import hw_io  # noqa: PLC0415
    import main  # noqa: PLC0415
    return config, board_core, hw_io, main


@pytest.fixture
def scara_board(tmp_path):
    out = tmp_path / "board"
    proc = _benchjog("firmware", "scara-bench", "--out", str(out))
    assert proc.returncode == 0, proc.stderr
    yield _load_board(out)
    _forget_board(out)


# -- benchjog firmware --------------------------------------------------------------------

def test_firmware_writes_the_board_files_and_a_config_from_the_arm(tmp_path):
    out = tmp_path / "board"
    proc = _benchjog("firmware", "planar-bench", "--out", str(out), "--json")
    assert proc.returncode == 0, proc.stderr
    report = json.loads(proc.stdout)
    assert sorted(os.listdir(out)) == sorted(BOARD_NAMES)
    assert [Path(f).name for f in report["files"]] == list(BOARD_NAMES)
    # the board's core is the emulator's core, byte for byte
    assert (out / "core.py").read_bytes() == Path(core.__file__).read_bytes()
    config, _, _, _ = _load_board(out)
    try:
        assert config.NAME == "planar-bench"
        # planar-bench (by hand): shoulder +-155 deg at 40 counts/deg = +-6200 counts,
        # narrowed to what a 500..2500 us servo reaches over 180 deg: +-90 deg = +-3600
        assert [(a["min_counts"], a["max_counts"]) for a in config.AXES] == [(-3600, 3600), (-2400, 3600)]
        assert all(a["kind"] == "servo" for a in config.AXES)
        for ax, (lo, hi) in zip(config.AXES, hard_ranges_counts(builtin_arm("planar-bench"))):
            assert lo <= ax["min_counts"] and ax["max_counts"] <= hi   # never wider than the arm's
    finally:
        _forget_board(out)


def test_firmware_never_overwrites_without_force(tmp_path):
    out = tmp_path / "board"
    out.mkdir()
    (out / "config.py").write_text("# my wiring\n")
    proc = _benchjog("firmware", "planar-bench", "--out", str(out))
    assert proc.returncode == 1
    assert len(proc.stderr.strip().splitlines()) == 1 and "config.py exists" in proc.stderr
    assert os.listdir(out) == ["config.py"] and (out / "config.py").read_text() == "# my wiring\n"
    proc = _benchjog("firmware", "planar-bench", "--out", str(out), "--force")
    assert proc.returncode == 0
    assert (out / "config.py.bak").read_text() == "# my wiring\n"   # the old one kept


@pytest.mark.parametrize("args", [("no-such-arm", "--out", "X"), ("planar-bench", "--out", "nodir/sub"),
                                  ("planar-bench", "--out", "X", "--drive", "hydraulic"),
                                  ("planar-bench",)])
def test_firmware_bad_input_is_one_line_exit_2(tmp_path, args):
    proc = _benchjog("firmware", *args, cwd=tmp_path)
    assert proc.returncode == 2
    assert len(proc.stderr.strip().splitlines()) == 1 and "Traceback" not in proc.stderr
    assert not (tmp_path / "X").exists() and not (tmp_path / "nodir").exists()


# -- the board layer on recorded pins -----------------------------------------------------

def test_board_drives_servo_pulses_steps_and_reads_the_estop(scara_board):
    config, board_core, hw_io, main = scara_board
    machine = fake_machine()
    board = hw_io.Board(config, machine, lambda us: None)
    ctrl = board_core.Controller(main.settings_from_config(config, board_core), board, 0)
    sent = []
    seqs = iter(range(1, 1000))

    def line(t, body):
        seq = next(seqs)
        ctrl.feed(board_core.frame(f"{seq} {body}"), t)
        sent.extend(P.parse_line(b) for _, b in ctrl.take())
        return sent[-1]

    def run_until(t, t_end):
        while t < t_end:
            t += config.TICK_US
            ctrl.tick(t)
            if t % 250000 == 0:
                assert line(t, "STATE").startswith("OK ")   # the host's heartbeat
        return t

    servo = machine.board.pwms[config.AXES[0]["pin"]]
    quill = config.AXES[2]
    assert servo.hz == 50 and servo.ns == 0                 # no pulses while the drives are off
    assert line(0, "HELLO") == "OK 1 proto=1 axes=4 queue=8 name=scara-bench"
    assert line(0, "ENABLE") == "OK 2"
    assert machine.board.pins[quill["enable_pin"]].level == 0     # enable is active low: on
    line(0, "HOME")
    t = run_until(0, config.HOME_MS * 1000)
    assert ctrl.homed and "DONE 3" in sent
    assert servo.ns == 1_500_000                             # count 0: the 1500 us centre
    # j1 to 45 deg (scara-bench: 50 counts/deg -> 2250 counts), quill down 20 mm
    # (50 counts/mm -> 1000 steps), in 1 s
    assert line(t, "MOVE 1000 2250 0 1000 0").startswith("OK ")
    steps = machine.board.pins[quill["step_pin"]]
    before = steps.rises
    t = run_until(t, t + 1_000_000)
    # 1500 us + 2250 counts * (2000 us / 180 deg / 50 counts/deg) = 2000 us
    assert servo.ns == 2_000_000
    assert steps.rises - before == 1000                      # one pulse per count
    assert machine.board.pins[quill["dir_pin"]].level == 1
    # the e-stop's normally-closed contact opens: the pin reads 1
    machine.board.inputs[config.ESTOP_PIN] = 1
    ctrl.tick(t + 1000)
    sent.extend(P.parse_line(b) for _, b in ctrl.take())
    assert sent[-1] == "EVT ESTOP"
    assert servo.ns == 0 and machine.board.pins[quill["enable_pin"]].level == 1   # drives off


def test_main_settings_follow_the_config(scara_board):
    config, board_core, _, main = scara_board
    s = main.settings_from_config(config, board_core)
    assert [(a["min_counts"], a["max_counts"]) for a in s.axes] == [
        (a["min_counts"], a["max_counts"]) for a in config.AXES]
    assert s.name == "scara-bench" and s.queue == config.QUEUE and s.home_us == config.HOME_MS * 1000
    assert not any(a["home_switch"] for a in s.axes)         # no home pin set yet


# -- the emulator (the same core) on a pty ------------------------------------------------

def test_a_limit_switch_on_the_emulator_latches_a_fault_the_driver_reports(tmp_path):
    arm = builtin_arm("planar-bench")
    emu = Emulator(arm, {"home_s": 0.05})
    d = SerialDriver(arm, port=emu.start())
    try:
        d.open()
        ready(d)
        d.queue(Segment((math.radians(60.0), math.radians(90.0)), 2.0))
        assert wait_for(lambda: emu.mode == "MOVING" and emu.position_counts()[0] > 100)
        emu.set_limit(1)
        faults = events_of(d, "fault")
        assert faults and "LIMIT_SWITCH on axis 1" in faults[0].detail
        assert emu.mode == "FAULT" and not emu.segs and not emu.hw.enabled
        held = emu.position_counts()
        assert 0 < held[0] < 2400
        assert wait_for(lambda: (d.state().latched or "").startswith("fault"))
    finally:
        d.close()
        emu.stop()


def test_the_emulator_is_the_firmware_core():
    emu = Emulator(builtin_arm("planar-bench"))
    assert isinstance(emu.core, core.Controller)


# -- the HELLO probe ----------------------------------------------------------------------

def test_probe_identifies_the_firmware_without_moving_anything():
    emu = Emulator(builtin_arm("scara-bench"), {"name": "cell-3"})
    path = emu.start()
    try:
        found = probe_firmware(path, 115200, 1.0)
        assert found == {"port": path, "proto": 1, "axes": 4, "queue": 8, "name": "cell-3"}
        assert [b.split(" ")[1] for b in emu.received] == ["HELLO"]   # the only line sent
        assert emu.mode == "DISABLED" and emu.moves_accepted == 0
    finally:
        emu.stop()


def test_probe_finds_nothing_on_an_echo_a_silent_port_or_no_port():
    assert probe_firmware("loop://", 115200, 0.1) is None           # our own line echoed
    master, slave = os.openpty()
    try:
        assert probe_firmware(os.ttyname(slave), 115200, 0.2) is None   # nobody answers
    finally:
        os.close(master)
        os.close(slave)
    assert probe_firmware("/dev/no-such-port-benchjog", 115200, 0.1) is None
