"""The console's calibration screen (Textual Pilot): plan from a plate file, approach
through the interlock after the console's confirmation, record touches (kept across a
visit to the jog screen), fit, and write the corrected arm file after its diff."""

from __future__ import annotations

import asyncio
import math
from pathlib import Path

import tomllib

from benchjog.console.cell import calibration_files as cf
from benchjog.console.cell.armfile import builtin_arm
from benchjog.console.tui.app import make_app
from benchjog.console.tui.screens.commission import CalibrationScreen, PlatePathScreen, WriteFileScreen
from benchjog.drivers.calibration import counts_from_joints
from benchjog.drivers.interlock import Interlock
from benchjog.console.tui.screens.confirm import ConfirmMoveScreen

ROOT = Path(__file__).resolve().parents[1]
PLATE = ROOT / "examples/bench-cell/plate.toml"
SIZE = (120, 40)


async def until(pilot, condition, timeout_s=20.0):
    loop = asyncio.get_running_loop()
    end = loop.time() + timeout_s
    while not condition():
        assert loop.time() < end, "timed out"
        await pilot.pause(0.05)


async def test_touch_fit_and_write_from_the_console(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    arm = builtin_arm("planar-bench")
    gate = Interlock.open(arm, "sim", journal=False, time_scale=50.0,
                          true_errors={"shoulder.a": 1.0, "base.x": 200.0})
    try:
        cell = tmp_path / "cell"
        cell.mkdir()
        app = make_app(arm, gate, points_path=cell / "points.toml")
        async with app.run_test(size=SIZE) as pilot:
            gate.enable()
            await pilot.press("k")
            screen = app.screen
            assert isinstance(screen, CalibrationScreen)
            await pilot.press("c")                      # nothing planned yet: nothing recorded
            assert screen.records == [] and "load a plate file first" in screen.status
            await pilot.press("p")
            assert isinstance(app.screen, PlatePathScreen)
            app.screen.query_one("#plate-path").value = str(PLATE)
            await pilot.press("enter")
            await until(pilot, lambda: len(screen.visits) == 12)
            for n in range(4):
                await pilot.press("a")
                await until(pilot, lambda: isinstance(app.screen, ConfirmMoveScreen))
                await pilot.press("y")
                await until(pilot, lambda: "approach" in screen.status and "done" in screen.status)
                hole = screen.visits[screen.cursor]
                await pilot.press("c")
                assert screen.records[-1].hole == hole.label
                assert screen.records[-1].counts == counts_from_joints(arm, gate.state().joints)
                if n == 1:                               # to the jog screen and back: kept
                    await pilot.press("escape")
                    assert not isinstance(app.screen, CalibrationScreen)
                    await pilot.press("k")
                    assert app.screen is screen and len(screen.records) == 2
            saved = cf.load_touches(cell / "touches.toml", arm)    # in the cell folder,
            assert not (tmp_path / "touches.toml").exists()        # not the shell's folder
            assert [r.hole for r in saved] == [r.hole for r in screen.records]
            await pilot.press("f")
            assert "residuals after" in screen.report and "O4" in screen.report
            await pilot.press("w")
            assert isinstance(app.screen, WriteFileScreen)
            await pilot.press("n")
            out = tmp_path / "planar-bench-calibrated.toml"
            assert not out.exists() and "nothing written" in screen.status
            await pilot.press("w")
            await pilot.press("y")
            text = out.read_text(encoding="utf-8")
            assert "(invented demo)" in text
            fixed = tomllib.loads(text)
            assert fixed["calibration"]["touches"] == 4
            assert math.isfinite(fixed["joints"][0]["a"])
    finally:
        gate.close()


async def test_a_declined_approach_moves_nothing(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    arm = builtin_arm("planar-bench")
    gate = Interlock.open(arm, "sim", journal=False)
    try:
        app = make_app(arm, gate)
        async with app.run_test(size=SIZE) as pilot:
            gate.enable()
            await pilot.press("k")
            screen = app.screen
            screen.load_plate(str(PLATE))
            await pilot.press("a")
            await until(pilot, lambda: isinstance(app.screen, ConfirmMoveScreen))
            await pilot.press("n")
            await until(pilot, lambda: "approach" in screen.status)
            assert not [c for c in gate.sim.commands if c[0] == "MOVE"]
            await pilot.press("f")                       # no touches: a refusal in one line
            assert screen.status.startswith("no fit: 0 touches give 0 equations")
    finally:
        gate.close()
