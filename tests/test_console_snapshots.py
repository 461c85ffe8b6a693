"""Snapshot tests of every console screen at 80 x 24 (the smallest supported terminal)
and 120 x 40, with pytest-textual-snapshot (the Textual project's snapshot plugin). A
layout change fails here until the new SVGs are viewed in the report and accepted with
``--snapshot-update``.

The clock the link panel reads is frozen so that the screens are the same every run.

The SVGs are Textual's rendering, exact to the cell: they hold for the Textual version
they were accepted with (``SNAPSHOT_TEXTUAL``) and are skipped under any other (the
floor run of .ci/run, a newer release), where tests/test_console_layout.py still checks
the screens' content. Accepting new SVGs means setting ``SNAPSHOT_TEXTUAL`` too."""

from __future__ import annotations

from importlib.metadata import version

import pytest

from benchjog.console.cell.armfile import builtin_arm
from benchjog.console.tui.app import make_app
from benchjog.console.tui.widgets.status import EventLog
from benchjog.drivers.interlock import Interlock

SIZES = [(80, 24), (120, 40)]
SNAPSHOT_TEXTUAL = "8.2.8"   # the Textual the SVGs in __snapshots__/ were accepted with

pytestmark = pytest.mark.skipif(
    version("textual") != SNAPSHOT_TEXTUAL,
    reason=f"snapshots are Textual {SNAPSHOT_TEXTUAL}'s rendering; this is {version('textual')}")


@pytest.fixture
def cell(tmp_path, monkeypatch):
    """A built-in arm on the simulated controller, run from an empty folder (the teach
    screen's files are relative names, so the screens never show a temporary path)."""
    monkeypatch.chdir(tmp_path)
    monkeypatch.setattr(EventLog, "stamp", staticmethod(lambda: "12:00:00"))
    opened = []

    def open_arm(name: str):
        arm = builtin_arm(name)
        gate = Interlock.open(arm, "sim", journal=False, time_scale=50.0)
        opened.append(gate)
        app = make_app(arm, gate, points_path="points.toml", program_path="program.toml")
        return app

    yield open_arm
    for gate in opened:
        gate.close()


async def settled(pilot) -> None:
    """Wait for the first state, then freeze the clock the link panel reads."""
    app = pilot.app
    for _ in range(200):
        if app.state is not None:
            break
        await pilot.pause(0.02)
    app._clock = lambda: app.polled_at   # "read 0.0 s ago" every run
    await pilot.pause(0.2)


@pytest.mark.parametrize("size", SIZES, ids=lambda s: f"{s[0]}x{s[1]}")
@pytest.mark.parametrize("arm", ["planar-bench", "scara-bench"])
def test_jog_screen(cell, snap_compare, arm, size):
    assert snap_compare(cell(arm), terminal_size=size, run_before=settled)


@pytest.mark.parametrize("size", SIZES, ids=lambda s: f"{s[0]}x{s[1]}")
def test_jog_screen_with_target(cell, snap_compare, size):
    # a SCARA target with both branches usable: both shown with joint values
    async def run_before(pilot):
        await settled(pilot)
        await pilot.press("g", *"250 -50", "enter")
        await pilot.pause(0.2)

    assert snap_compare(cell("scara-bench"), terminal_size=size, run_before=run_before)


@pytest.mark.parametrize("size", SIZES, ids=lambda s: f"{s[0]}x{s[1]}")
def test_confirm_screen(cell, snap_compare, size):
    async def run_before(pilot):
        await settled(pilot)
        await pilot.press("e")
        for _ in range(100):
            if pilot.app.ready():
                break
            await pilot.pause(0.02)
        await pilot.press("g", *"300 100", "enter", "m")
        for _ in range(100):
            if type(pilot.app.screen).__name__ == "ConfirmMoveScreen":
                break
            await pilot.pause(0.02)
        await pilot.pause(0.2)

    assert snap_compare(cell("scara-bench"), terminal_size=size, run_before=run_before)


@pytest.mark.parametrize("size", SIZES, ids=lambda s: f"{s[0]}x{s[1]}")
def test_help_panel(cell, snap_compare, size):
    assert snap_compare(cell("planar-bench"), terminal_size=size, press=["f1"],
                        run_before=settled)


@pytest.mark.parametrize("size", SIZES, ids=lambda s: f"{s[0]}x{s[1]}")
def test_teach_screen(cell, snap_compare, size):
    async def run_before(pilot):
        await settled(pilot)
        await pilot.press("t")
        await pilot.pause(0.3)

    assert snap_compare(cell("planar-bench"), terminal_size=size, run_before=run_before)


def test_too_small(cell, snap_compare):
    assert snap_compare(cell("planar-bench"), terminal_size=(79, 24), run_before=settled)
