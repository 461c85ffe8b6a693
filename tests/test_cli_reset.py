"""`benchjog reset` against the controller emulator over a pty (the real serial driver):
a latched fault or a released e-stop is cleared only after y/yes; a pressed e-stop
cannot be cleared from software (the controller refuses: exit 3); nothing ever moves or
switches the drives on (PROTOCOL.md: RESET clears the latch only)."""

from __future__ import annotations

import io
import json
import time

import pytest

from benchjog.console.cell.armfile import builtin_arm
from benchjog.console.cli.main import main
from benchjog.drivers.emulator import Emulator

ARM = builtin_arm("planar-bench")


@pytest.fixture
def emu():
    emulator = Emulator(ARM, {"home_s": 0.05})
    path = emulator.start()
    yield emulator, path
    emulator.stop()


def run(monkeypatch, capsys, answer, *argv):
    monkeypatch.setattr("sys.stdin", io.StringIO(answer))
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def motion_lines(emulator):
    return [l for l in emulator.received if any(f" {v} " in f" {l} " for v in ("MOVE", "ENABLE", "HOME"))]


def _wait_latched(emulator, value):
    deadline = time.monotonic() + 2
    while emulator.latched != value and time.monotonic() < deadline:
        time.sleep(0.01)


def test_fault_is_cleared_only_after_yes(monkeypatch, capsys, emu, tmp_path):
    emulator, path = emu
    emulator.inject_fault("DRIVE", 1)
    _wait_latched(emulator, "FAULT")
    journal = str(tmp_path / "j.jsonl")
    code, _, err = run(monkeypatch, capsys, "n\n", "reset", "--port", path, "--journal", journal)
    assert code == 1 and "cancelled" in err and emulator.latched == "FAULT"
    code, out, err = run(monkeypatch, capsys, "yes\n", "reset", "--port", path, "--journal", journal,
                         "--json")
    assert code == 0, err
    doc = json.loads(out)
    assert doc["completed"] is True and "fault" in doc["latched"].lower()
    assert emulator.latched is None
    assert motion_lines(emulator) == []


def test_pressed_estop_is_refused_released_estop_is_cleared(monkeypatch, capsys, emu, tmp_path):
    emulator, path = emu
    emulator.press_estop()
    journal = str(tmp_path / "j.jsonl")
    code, _, err = run(monkeypatch, capsys, "y\n", "reset", "--port", path, "--journal", journal)
    assert code == 3 and err.rstrip().endswith("(the e-stop input is still active)")
    assert emulator.latched == "ESTOP"
    emulator.release_estop()
    code, _, err = run(monkeypatch, capsys, "y\n", "reset", "--port", path, "--journal", journal)
    assert code == 0, err
    assert emulator.latched is None
    assert motion_lines(emulator) == []


def test_nothing_latched_asks_nothing(monkeypatch, capsys, emu, tmp_path):
    _, path = emu
    code, _, err = run(monkeypatch, capsys, "", "reset", "--port", path, "--journal",
                       str(tmp_path / "j.jsonl"))
    assert code == 0 and "nothing to clear" in err and "[y/N]" not in err


def test_reset_without_a_port_is_a_usage_error(monkeypatch, capsys):
    code, _, err = run(monkeypatch, capsys, "y\n", "reset")
    assert code == 2 and "needs --port" in err
