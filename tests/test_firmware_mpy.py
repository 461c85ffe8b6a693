"""The firmware core runs on MicroPython itself: the same scripted protocol exchanges
run through drivers/firmware/core.py under MicroPython's WebAssembly port (the npm
package ``@micropython/micropython-webassembly-pyscript``, run by node) and under
CPython, and the two logs must be the same line for line, and right. So do the
board's own files (main.py's loop with a wrapping microsecond clock, the servo and
step/direction layers on recorded pins, a config written by ``benchjog firmware``).

Set-up: ``npm ci --prefix tests/mpy`` (.ci/run does it). Locally the test skips, with
the reason, when node or the package is missing; in CI (``CI=true``) it fails instead.
"""

from __future__ import annotations

import importlib
import importlib.util
import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from benchjog.drivers import protocol as P
from benchjog.drivers.firmware import core
from mpy import exchange  # tests/mpy/ (a folder of the tests, on their path like driver_contract)

HERE = Path(__file__).resolve().parent
MPY = HERE / "mpy"
CORE = Path(core.__file__)
PACKAGE = MPY / "node_modules" / "@micropython" / "micropython-webassembly-pyscript"


AXES2 = [{"min_counts": -5000, "max_counts": 5000}, {"min_counts": -5000, "max_counts": 5000}]

SCRIPTS = {
    # PROTOCOL.md's example session, with the interpolation checked at two ticks
    "session": {"settings": {"axes": AXES2, "name": "bench-a"}, "steps": [
        ["line", 0, "1 HELLO"], ["line", 0, "2 ENABLE"], ["line", 0, "3 HOME"], ["tick", 1000],
        ["line", 2000, "4 MOVE 1500 4500 -4500"], ["tick", 502000],
        ["line", 502000, "5 STATE"], ["tick", 1502000], ["line", 1502000, "6 STATE"]]},
    # a bad CRC, an unknown verb, a retransmission, a wrong seq, an over-long line
    "errors": {"settings": {"axes": AXES2}, "steps": [
        ["line", 0, "1 HELLO"], ["raw", 0, "2 ENABLE*0000\n"], ["line", 0, "2 FLY"],
        ["line", 0, "2 FLY"], ["line", 0, "9 STATE"], ["raw", 0, "3 " + "X" * 130 + "\n"],
        ["line", 0, "3 MOVE 10 1 1"], ["line", 0, "4 OUT 7 1"], ["line", 0, "5 STATE"]]},
    # the watchdog: quiet for 1000 ms is fine, 1001 ms is a fault
    "watchdog": {"settings": {"axes": AXES2}, "steps": [
        ["line", 0, "1 HELLO"], ["line", 0, "2 ENABLE"], ["tick", 1000000], ["tick", 1001000],
        ["line", 1002000, "3 STATE"]]},
    # the e-stop input mid-segment, then a limit switch
    "estop": {"settings": {"axes": AXES2}, "steps": [
        ["line", 0, "1 HELLO"], ["line", 0, "2 ENABLE"], ["line", 0, "3 HOME"], ["tick", 0],
        ["line", 0, "4 MOVE 1000 1000 0"], ["tick", 250000], ["estop", 250000, 1],
        ["tick", 900000], ["line", 900000, "5 RESET"], ["estop", 950000, 0],
        ["line", 960000, "6 RESET"], ["line", 960000, "7 ENABLE"], ["line", 960000, "8 MOVE 100 0 0"],
        ["limit", 1000000, 2], ["line", 1000000, "9 STATE"]]},
    # homing on a switch: seek at 1000 counts/s, the switch at -300, then back to 0
    "homing": {"settings": {"axes": [
        {"min_counts": -5000, "max_counts": 5000, "home_switch": True, "home_dir": -1,
         "home_speed": 1000, "home_at": -1000, "home_travel": 2000}, AXES2[1]]}, "steps": [
        ["home", 0, [0, -300]], ["line", 0, "1 HELLO"], ["line", 0, "2 ENABLE"],
        ["line", 0, "3 HOME"], ["tick", 200000], ["tick", 301000], ["tick", 302000],
        ["line", 400000, "4 STATE"], ["tick", 1302000], ["line", 1303000, "5 STATE"]]},
}

EXPECTED = {
    "session": [
        "0 OK 1 proto=1 axes=2 queue=8 name=bench-a", "0 OK 2", "0 OK 3", "1000 DONE 3",
        "1000 @ 0,0", "2000 OK 4 free=7",
        "502000 @ 1500,-1500",                               # a third of the way: exact
        "502000 OK 5 mode=MOVING pos=1500,-1500 queued=1 out=0 moves=1 last=4",
        "1502000 DONE 4", "1502000 @ 4500,-4500",
        "1502000 OK 6 mode=IDLE pos=4500,-4500 queued=0 out=0 moves=1 last=4"],
    "errors": [
        "0 OK 1 proto=1 axes=2 queue=8 name=bench", "0 ERR 0 BAD_CRC", "0 ERR 2 UNKNOWN",
        "0 ERR 2 UNKNOWN", "0 ERR 9 BAD_SEQ expected=3", "0 ERR 0 BAD_CRC",
        "0 ERR 3 NOT_ENABLED", "0 OK 4",
        "0 OK 5 mode=DISABLED pos=0,0 queued=0 out=128 moves=0 last=0"],
    "watchdog": [
        "0 OK 1 proto=1 axes=2 queue=8 name=bench", "0 OK 2", "1000000 @ 0,0",
        "1001000 EVT FAULT code=WATCHDOG axis=0", "1001000 @ 0,0",
        "1002000 OK 3 mode=FAULT pos=0,0 queued=0 out=0 moves=0 last=0"],
    "estop": [
        "0 OK 1 proto=1 axes=2 queue=8 name=bench", "0 OK 2", "0 OK 3", "0 DONE 3", "0 @ 0,0",
        "0 OK 4 free=7", "250000 @ 250,0", "250000 EVT ESTOP", "900000 @ 250,0",
        "900000 ERR 5 ESTOP", "950000 EVT ESTOP_CLEAR", "960000 OK 6", "960000 OK 7",
        "960000 OK 8 free=7", "1000000 EVT FAULT code=LIMIT_SWITCH axis=2",
        # halted 40 ms into 250 -> 0 over 100 ms; MOVEs 4 and 8 counted since HELLO
        "1000000 OK 9 mode=FAULT pos=150,0 queued=0 out=0 moves=2 last=8"],
    "homing": [
        "0 OK 1 proto=1 axes=2 queue=8 name=bench", "0 OK 2", "0 OK 3", "200000 @ -200,0",
        "301000 @ -301,0", "302000 @ -1000,0",
        "400000 OK 4 mode=MOVING pos=-902,0 queued=0 out=0 moves=0 last=0",
        "1302000 DONE 3", "1302000 @ 0,0",
        "1303000 OK 5 mode=IDLE pos=0,0 queued=0 out=0 moves=0 last=0"],
}


def _strip(log: list[str]) -> list[str]:
    """Each sent line's CRC checked with the host's parser, then dropped for reading."""
    out = []
    for entry in log:
        t, rest = entry.split(" ", 1)
        if rest.startswith("@ "):
            out.append(entry)
            continue
        body = P.parse_line(rest.encode() + b"\n")
        assert body is not None, entry
        out.append(f"{t} {body}")
    return out


def _node_and_package() -> str:
    node = shutil.which("node")
    missing = None
    if node is None:
        missing = "node is not installed"
    elif not (PACKAGE / "micropython.mjs").exists():
        missing = "MicroPython's WebAssembly port is not installed (npm ci --prefix tests/mpy)"
    if missing:
        if os.environ.get("CI", "").lower() == "true":
            pytest.fail(f"{missing}: CI must run the firmware on MicroPython")
        pytest.skip(missing)
    return node


@pytest.fixture(scope="module")
def micropython_logs(tmp_path_factory):
    node = _node_and_package()
    scripts = tmp_path_factory.mktemp("mpy") / "scripts.json"
    scripts.write_text(json.dumps(SCRIPTS))
    code = ("import core, exchange, json\n"
            "print(sys.implementation.name)\n"
            "scripts = json.load(open('/scripts.json'))\n"
            "for name in sorted(scripts):\n"
            "    print('== ' + name)\n"
            "    for line in exchange.run(core, scripts[name]):\n"
            "        print(line)\n")
    proc = subprocess.run([node, str(MPY / "run.mjs"), str(CORE), str(MPY / "exchange.py"),
                           str(scripts), "--", code], capture_output=True, text=True, timeout=120,
                          cwd=MPY)
    assert proc.returncode == 0, proc.stderr
    lines = proc.stdout.splitlines()
    assert lines[0] == "micropython"           # it really ran on MicroPython
    out: dict[str, list[str]] = {}
    for line in lines[1:]:
        if line.startswith("== "):
            current = out.setdefault(line[3:], [])
        else:
            current.append(line)
    return out


@pytest.mark.parametrize("name", sorted(SCRIPTS))
def test_cpython_log_is_right(name):
    assert _strip(exchange.run(core, SCRIPTS[name])) == EXPECTED[name]


@pytest.mark.parametrize("name", sorted(SCRIPTS))
def test_micropython_runs_the_same_exchange(micropython_logs, name):
    on_mpy = micropython_logs[name]
    assert on_mpy == exchange.run(core, SCRIPTS[name])      # byte for byte, CRCs included
    assert _strip(on_mpy) == EXPECTED[name]


def test_micropython_computes_the_crc_check_value():
    node = _node_and_package()
    proc = subprocess.run([node, str(MPY / "run.mjs"), str(CORE), "--",
                           "import core\nprint(hex(core.crc16(b'123456789')))"],
                          capture_output=True, text=True, timeout=60, cwd=MPY)
    # the published CRC-16/CCITT-FALSE check value
    assert proc.returncode == 0 and proc.stdout.strip() == "0x29b1", proc.stderr


# -- the board's own files: main.py's loop, the hardware layers, a written config ---------

BOARD_EXPECTED = [
    "0 OK 1 proto=1 axes=4 queue=8 name=scara-bench", "0 OK 2", "0 OK 3",
    "1000 mode=MOVING servo_ns=1500000 steps=0 enable_pin=0",     # homing, drives on
    "3001 DONE 3",                                                  # HOME_MS 3000
    "3400 OK 20 free=7",
    "3600 DONE 20",                                                 # MOVE 200 ms
    # j1 2250 counts: 1500 us + 2250 * 2000/180/50 us = 2000 us; quill 1000 counts = steps
    "3700 mode=IDLE servo_ns=2000000 steps=1000 enable_pin=0",
    "4700 mode=IDLE servo_ns=2000000 steps=1000 enable_pin=0",
    "4800 EVT FAULT code=WATCHDOG axis=0",                          # 1000 ms after 3800
    "4900 mode=FAULT servo_ns=0 steps=1000 enable_pin=1",          # pulses off, enable off
]


def _board_folder(tmp_path) -> Path:
    from benchjog.console.cell.armfile import builtin_arm
    from benchjog.drivers.firmware.configgen import board_files

    folder = tmp_path / "board"
    folder.mkdir()
    for name, text in board_files(builtin_arm("scara-bench")).items():
        (folder / name).write_text(text)
    (folder / "boardrun.py").write_text((MPY / "boardrun.py").read_text())
    return folder


def _board_log(lines: list[str]) -> list[str]:
    """The board run without the heartbeat replies, CRCs checked and dropped."""
    out = []
    for entry in lines:
        t, rest = entry.split(" ", 1)
        if rest.startswith("mode="):
            out.append(entry)
            continue
        body = P.parse_line(rest.encode() + b"\n")
        assert body is not None, entry
        if " mode=" not in body:
            out.append(f"{t} {body}")
    return out


def test_the_board_files_run_the_same_on_micropython(tmp_path):
    node = _node_and_package()
    folder = _board_folder(tmp_path)
    code = ("import config, core, hw_io, main, boardrun\n"
            "for line in boardrun.run(config, core, hw_io, main):\n"
            "    print(line)\n")
    proc = subprocess.run([node, str(MPY / "run.mjs"), *sorted(str(p) for p in folder.glob("*.py")),
                           "--", code], capture_output=True, text=True, timeout=120, cwd=MPY)
    assert proc.returncode == 0, proc.stderr
    on_mpy = proc.stdout.splitlines()
    # the same files on CPython, as flat modules the way the board imports them
    flat = ("config", "core", "hw_io", "hw_servo", "hw_stepdir", "main", "boardrun")
    sys.path.insert(0, str(folder))
    try:
        for name in flat:
            sys.modules.pop(name, None)
        mods = [importlib.import_module(n) for n in ("config", "core", "hw_io", "main", "boardrun")]
        on_cpython = mods[-1].run(*mods[:-1])
    finally:
        sys.path.remove(str(folder))
        for name in flat:
            sys.modules.pop(name, None)
    assert on_mpy == on_cpython
    assert _board_log(on_mpy) == BOARD_EXPECTED
