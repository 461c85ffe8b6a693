"""The emulator speaking PROTOCOL.md on a pty (raw lines, no driver), and
``benchjog emulate`` / ``benchjog ports`` as subprocesses."""

from __future__ import annotations

import math
import os
import signal
import subprocess
import sys

import pytest
import serial

from benchjog.console.cell.armfile import builtin_arm
from benchjog.drivers import protocol as P
from benchjog.drivers.emulator import Emulator
from benchjog.drivers.serial_link import SerialDriver
from benchjog.kinematics.model import Segment

ARM = builtin_arm("planar-bench")
ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


class Raw:
    """A bare host on the pty: send a body, read framed lines back."""

    def __init__(self, path: str):
        self.port = serial.serial_for_url(path, timeout=0.5)

    def send(self, body: str) -> None:
        self.port.write(P.frame(body))

    def send_raw(self, data: bytes) -> None:
        self.port.write(data)

    def read(self) -> str | None:
        line = self.port.readline()
        return P.parse_line(line) if line else None

    def ask(self, body: str) -> str | None:
        self.send(body)
        return self.read()


@pytest.fixture
def raw():
    emu = Emulator(ARM, {"home_s": 0.05, "queue_depth": 2})
    host = Raw(emu.start())
    host.emulator = emu
    yield host
    host.port.close()
    emu.stop()


def test_power_up_hello_and_state(raw):
    assert raw.ask("7 HELLO") == "OK 7 proto=1 axes=2 queue=2 name=benchjog-emulator"
    # after power-up: drives off, not homed, at count 0
    assert raw.ask("8 STATE") == "OK 8 mode=DISABLED pos=0,0 queued=0 out=0 moves=0 last=0"


def test_example_session_of_protocol_md(raw):
    assert raw.ask("1 HELLO").startswith("OK 1 ")
    assert raw.ask("2 MOVE 100 10 10") == "ERR 2 NOT_ENABLED"
    assert raw.ask("3 ENABLE") == "OK 3"
    assert raw.ask("4 STATE") == "OK 4 mode=UNHOMED pos=0,0 queued=0 out=0 moves=0 last=0"
    assert raw.ask("5 MOVE 100 10 10") == "ERR 5 NOT_HOMED"
    assert raw.ask("6 HOME") == "OK 6"
    assert raw.read() == "DONE 6"
    assert raw.ask("7 MOVE 200 4000 -2000") == "OK 7 free=1"
    assert raw.ask("8 MOVE 200 4000 -2000") == "OK 8 free=0"
    assert raw.ask("9 MOVE 200 0 0") == "ERR 9 QUEUE_FULL"
    reply = raw.ask("10 STATE")
    assert reply.startswith("OK 10 mode=MOVING pos=") and reply.endswith(" queued=2 out=0 moves=2 last=8")  # 9 was refused: not counted
    assert raw.read() == "DONE 7"
    assert raw.read() == "DONE 8"


def test_retransmission_gets_the_same_reply_and_runs_once(raw):
    raw.ask("1 HELLO")
    raw.ask("2 ENABLE")
    raw.ask("3 HOME")
    assert raw.read() == "DONE 3"
    first = raw.ask("4 MOVE 50 40 0")
    again = raw.ask("4 MOVE 50 40 0")              # the same seq: a retransmission
    assert first == again == "OK 4 free=1"
    assert raw.emulator.moves_accepted == 1
    assert raw.read() == "DONE 4"
    assert raw.ask("9 STATE") == "ERR 9 BAD_SEQ expected=5"
    assert raw.ask("5 STATE").startswith("OK 5 mode=IDLE pos=40,0")


def test_bad_lines_and_errors(raw):
    raw.ask("1 HELLO")
    raw.send_raw(b"2 ENABLE*0000\n")
    assert raw.read() == "ERR 0 BAD_CRC"
    assert raw.ask("2 FLY") == "ERR 2 UNKNOWN"
    assert raw.ask("3 ENABLE now") == "ERR 3 SYNTAX"
    assert raw.ask("4 ENABLE") == "OK 4"
    raw.ask("5 HOME")
    assert raw.read() == "DONE 5"
    # hard range: soft limits + 5 deg; elbow -150 deg is -1*(-150-90)*40 = 9600 counts
    assert raw.ask("6 MOVE 100 0 9600") == "OK 6 free=1"
    assert raw.ask("7 MOVE 100 0 9601") == "ERR 7 RANGE axis=2"
    assert raw.ask("8 MOVE 100 6201 0") == "ERR 8 RANGE axis=1"
    assert raw.ask("9 MOVE 0 0 0") == "ERR 9 SYNTAX"         # ms is 1..60000
    assert raw.ask("10 MOVE 60001 0 0") == "ERR 10 SYNTAX"
    assert raw.ask("11 MOVE 10 0") == "ERR 11 SYNTAX"        # one count short
    assert raw.ask("12 OUT 8 1") == "ERR 12 SYNTAX"
    assert raw.ask("13 OUT 7 1") == "OK 13"
    assert raw.ask("14 STATE").endswith("out=128 moves=1 last=6")  # output 7 is bit 1 << 7; one MOVE taken
    # A line with a good seq but no verb it can parse is answered and counted, like any
    # refused line (PROTOCOL.md: each new host line uses the previous seq + 1).
    assert raw.ask("15 fly") == "ERR 15 SYNTAX"
    assert raw.ask("15 fly") == "ERR 15 SYNTAX"              # a retransmission: same reply
    assert raw.ask("16 STATE").startswith("OK 16 ")
    assert raw.ask("99 fly") == "ERR 99 BAD_SEQ expected=17"


def test_stop_flushes_without_done(raw):
    raw.ask("1 HELLO")
    raw.ask("2 ENABLE")
    raw.ask("3 HOME")
    raw.read()
    raw.ask("4 MOVE 1000 4000 0")
    raw.ask("5 MOVE 1000 0 0")
    assert raw.ask("6 STOP") == "OK 6"
    assert raw.ask("7 STATE").endswith("queued=0 out=0 moves=2 last=5")
    raw.port.timeout = 0.3
    assert raw.read() is None                                # no DONE for flushed segments


def test_estop_and_reset(raw):
    raw.ask("1 HELLO")
    raw.ask("2 ENABLE")
    raw.emulator.press_estop()
    assert raw.read() == "EVT ESTOP"
    assert raw.ask("3 ENABLE") == "ERR 3 ESTOP"
    assert raw.ask("4 RESET") == "ERR 4 ESTOP"               # input still active
    raw.emulator.release_estop()
    assert raw.read() == "EVT ESTOP_CLEAR"
    assert raw.ask("5 STATE").startswith("OK 5 mode=ESTOP")  # latched until RESET
    assert raw.ask("6 RESET") == "OK 6"
    assert raw.ask("7 STATE").startswith("OK 7 mode=DISABLED")


def test_watchdog_only_while_enabled(raw):
    raw.ask("1 HELLO")
    raw.port.timeout = 1.4
    assert raw.read() is None                                # disabled: no watchdog
    raw.port.timeout = 0.5
    raw.ask("2 ENABLE")
    raw.port.timeout = 2.0
    assert raw.read() == "EVT FAULT code=WATCHDOG axis=0"
    raw.port.timeout = 0.5
    assert raw.ask("3 STATE").startswith("OK 3 mode=FAULT")


# -- the CLI --------------------------------------------------------------------------------

def _emulate(*args):
    return subprocess.Popen([sys.executable, "-m", "benchjog.console.cli.main", "emulate", *args],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, cwd=ROOT)


@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM])
def test_benchjog_emulate_serves_a_pty_until_signalled(sig):
    proc = _emulate("--arm", "planar-bench", "--home-s", "0.05")
    try:
        path = proc.stdout.readline().strip()
        assert path.startswith("/dev/")
        with SerialDriver(ARM, port=path) as d:
            d.enable()
            d.home(timeout_s=3.0)
            d.queue(Segment((math.radians(10.0), math.radians(90.0)), 0.05))
            assert d.wait_idle(2.0)
            assert d.state().joints == pytest.approx((math.radians(10.0), math.radians(90.0)))
        proc.send_signal(sig)
        assert proc.wait(timeout=5) == 0
        assert proc.stdout.read() == ""                       # the path is all of stdout
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()


def test_benchjog_emulate_with_a_bad_arm_file_is_one_line(tmp_path):
    bad = tmp_path / "arm.toml"
    bad.write_text("[arm\n")
    proc = _emulate("--arm", str(bad))
    out, err = proc.communicate(timeout=20)
    assert proc.returncode == 2
    assert out == "" and len(err.strip().splitlines()) == 1 and "arm.toml" in err


def test_benchjog_ports_exits_zero():
    proc = subprocess.run([sys.executable, "-m", "benchjog.console.cli.main", "ports"], capture_output=True,
                          text=True, cwd=ROOT, timeout=30)
    assert proc.returncode == 0
    if not proc.stdout:
        assert proc.stderr.strip() == "no serial ports found"
    assert "Traceback" not in proc.stderr


def test_typed_commands_press_and_release_the_estop():
    # `benchjog emulate` reads estop / release / fault from its standard input, so a
    # person rehearsing can press the e-stop button and release it again.
    from benchjog.console.cell.armfile import builtin_arm
    from benchjog.drivers.emulator import Emulator, run_console_command

    emu = Emulator(builtin_arm("planar-bench"))
    emu.start()
    try:
        assert run_console_command(emu, "estop\n") and emu.mode == "ESTOP"
        assert run_console_command(emu, " RELEASE ") and not emu.estop_input
        assert emu.mode == "ESTOP"  # the latch stays until RESET (PROTOCOL.md)
        assert run_console_command(emu, "dance") is None
        assert run_console_command(emu, "limit") and emu.hw.limit == 1
        assert run_console_command(emu, "clear") and emu.hw.limit == 0
    finally:
        emu.stop()
