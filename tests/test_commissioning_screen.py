"""The console's commissioning screen (Textual Pilot, the simulated arm): one axis walked
through all five stages on a bench whose elbow differs from its arm file, the new file
written after its diff (with a backup); a "no" moves nothing; escape and return keeps
what was found; a bad number is one line and moves nothing; space stops a move.

The bench's truth is set here, outside the code under test: the simulated controller's
true elbow zero is off by ``elbow.zero`` (the sim's ``true_errors`` option, applied as
kinematics/identify.apply_params documents: the true zero is the file's plus the error),
and the elbow is (by this test's say-so) wired the other way round and geared
TRUE_CPU counts per degree. The simulated person reads the true angle at count ``c`` by
PROTOCOL.md's conversion ``counts = direction * (value - zero) * counts_per_unit``
solved for the value; the written file must hold exactly that truth.
"""

from __future__ import annotations

import asyncio
import shutil
import tomllib
from pathlib import Path

import pytest

from benchjog.console.cell.armfile import load_arm
from benchjog.console.tui.app import make_app
from benchjog.console.tui.screens.commission import WriteFileScreen
from benchjog.console.tui.screens.commissioning import CommissioningScreen
from benchjog.console.tui.screens.confirm import ConfirmMoveScreen
from benchjog.console.tui.screens.jog import JogScreen
from benchjog.drivers.calibration import counts_from_joint, counts_from_joints
from benchjog.drivers.interlock import Interlock
from benchjog.kinematics import identify

ROOT = Path(__file__).resolve().parents[1]
PLANAR = ROOT / "console/cell/arms/planar-bench.toml"
ZERO_ERROR = 1.5                  # deg: the true elbow zero is the file's 90 + 1.5
TRUE_DIRECTION = 1                # the file says -1
TRUE_CPU = 36.0                   # counts per degree; the file says 40
MARGIN = 2.0                      # the screen's default margin (deg)
SIZE = (80, 24)                   # the console's smallest size


def true_angle(counts: int) -> float:
    """The elbow's real angle (deg) at ``counts``: PROTOCOL.md's conversion solved for
    the value, with the bench's true zero, direction and gearing."""
    return (90.0 + ZERO_ERROR) + counts / (TRUE_DIRECTION * TRUE_CPU)


async def until(pilot, condition, timeout_s: float = 30.0) -> None:
    loop = asyncio.get_running_loop()
    end = loop.time() + timeout_s
    while not condition():
        assert loop.time() < end, "timed out"
        await pilot.pause(0.02)


def moves(gate) -> list:
    return [c for c in gate.sim.commands if c[0] == "MOVE"]


@pytest.fixture
def bench(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    path = tmp_path / "arm.toml"
    shutil.copy(PLANAR, path)
    arm = load_arm(str(path))
    gate = Interlock.open(arm, "sim", journal=False, time_scale=50.0,
                          true_errors={"elbow.zero": ZERO_ERROR})
    yield arm, gate, path
    gate.close()


async def confirm(pilot, app, screen, answer: str = "y") -> None:
    """The console's confirmation box comes up; answer it as a person would."""
    await until(pilot, lambda: isinstance(app.screen, ConfirmMoveScreen))
    await pilot.press(answer)
    await until(pilot, lambda: screen.moving is None)


async def type_line(pilot, text: str) -> None:
    await pilot.press(*text, "enter")


async def test_one_axis_through_all_five_stages_writes_the_truth(bench, tmp_path):
    arm, gate, path = bench
    true_elbow = identify.apply_params(arm, identify.params_of(arm),
                                       identify.true_vector_from_errors(arm, {"elbow.zero": ZERO_ERROR})).joints[1]
    assert true_elbow.zero == pytest.approx(90.0 + ZERO_ERROR)   # the option means what we think
    original = path.read_bytes()
    app = make_app(arm, gate)
    async with app.run_test(size=SIZE) as pilot:
        gate.enable()
        await pilot.press("c")
        screen = app.screen
        assert isinstance(screen, CommissioningScreen)
        await pilot.press("right")                       # choose the elbow before starting
        assert screen.joint.name == "elbow"
        count = lambda: counts_from_joint(arm.joints[1], gate.state().joints[1])  # noqa: E731
        await pilot.press("h")                           # homing is stage 5: not yet, not here
        assert "homing is stage 5" in screen.status and app.screen is screen
        assert not [c for c in gate.sim.commands if c[0] == "HOME"]

        # 1 direction: the person watches which way it turns
        before = count()
        await pilot.press("enter")
        await confirm(pilot, app, screen)
        moved_positive = true_angle(count()) > true_angle(before)
        await pilot.press("y" if moved_positive else "n")
        assert moved_positive is False                  # the file's direction is wrong here
        await pilot.press("enter")
        await confirm(pilot, app, screen)
        assert count() == before and screen.walk.stage == 1

        # escape to the jog screen and back: what was found is kept
        await pilot.press("escape")
        assert isinstance(app.screen, JogScreen)
        await pilot.press("c")
        assert app.screen is screen and screen.walk.found.direction == TRUE_DIRECTION
        assert "the file says -1" in screen.walk.notes[0]

        # 2 counts per unit: the person measures the test move
        c0 = count()
        await pilot.press("enter")
        await confirm(pilot, app, screen)
        measured = abs(true_angle(count()) - true_angle(c0))
        n_moves = len(moves(gate))
        await type_line(pilot, "ten")                    # a bad number: one line, nothing moves
        assert screen.status.startswith("not a number ('ten')") and "\n" not in screen.status
        await type_line(pilot, "0")
        assert "other than 0" in screen.status and screen.walk.step == "measure"
        assert len(moves(gate)) == n_moves
        await type_line(pilot, f"{measured:.9f}")
        assert screen.walk.step == "return"
        await pilot.press("enter")
        await confirm(pilot, app, screen)

        # 3 zero: jog onto the mark at a true 90 deg (1.35 deg by the file is 54 counts)
        assert screen.walk.step == "mark"
        await pilot.press("escape")                      # in the field: the keys back, still here
        assert app.screen is screen and screen.focused is None
        await pilot.press("enter")                       # enter: the field again
        assert screen.focused is screen.query_one("#cm-input")
        n_moves = len(moves(gate))
        await type_line(pilot, "40")                     # too big a step: nothing moves
        assert screen.status.startswith("a step is at most 15 deg") and len(moves(gate)) == n_moves
        await type_line(pilot, "1,35")                   # not a number either
        assert screen.status.startswith("not a step: '1,35'") and "\n" not in screen.status
        assert len(moves(gate)) == n_moves and screen.moving is None
        await type_line(pilot, "1.35")
        await confirm(pilot, app, screen)
        assert true_angle(count()) == pytest.approx(90.0)
        await type_line(pilot, "ok")
        await type_line(pilot, "90")                     # the mark's value

        # 4 travel: the two ends of the safe travel, then the limits 2 deg inside
        for step in ("15", "15"):
            await type_line(pilot, step)
            await confirm(pilot, app, screen)
        end_a = true_angle(count())
        await type_line(pilot, "ok")
        for step in ("-15",) * 4:
            await type_line(pilot, step)
            await confirm(pilot, app, screen)
        end_b = true_angle(count())
        await type_line(pilot, "ok")
        assert screen.walk.stage == 4

        # 5 homing: h (or enter) runs it and the stage records it
        await pilot.press("h")
        await confirm(pilot, app, screen)
        assert screen.walk.found.homing == "done, elbow at count 0"
        assert [c for c in gate.sim.commands if c[0] == "HOME"]

        # the diff first; "n" writes nothing, then "y" writes with a backup
        await pilot.press("w")
        assert isinstance(app.screen, WriteFileScreen)
        assert "-direction = -1" in app.screen.diff and "+direction = 1" in app.screen.diff
        await pilot.press("n")
        assert path.read_bytes() == original and not (tmp_path / "arm.toml.bak").exists()
        await pilot.press("w", "y")
        await until(pilot, lambda: screen.written is not None)

    text = path.read_text(encoding="utf-8")
    elbow = tomllib.loads(text)["joints"][1]
    assert elbow["direction"] == TRUE_DIRECTION
    assert elbow["counts_per_unit"] == pytest.approx(TRUE_CPU, abs=1e-6)
    assert elbow["zero"] == pytest.approx(90.0 + ZERO_ERROR, abs=1e-5)
    assert elbow["min"] == pytest.approx(min(end_a, end_b) + MARGIN, abs=1e-4)
    assert elbow["max"] == pytest.approx(max(end_a, end_b) - MARGIN, abs=1e-4)
    assert tomllib.loads(text)["joints"][0] == tomllib.loads(original.decode())["joints"][0]
    assert "# A two-link planar bench arm (invented demo)" in text           # comments kept
    assert (tmp_path / "arm.toml.bak").read_bytes() == original


async def test_a_no_to_the_confirmation_moves_nothing(bench):
    arm, gate, _ = bench
    app = make_app(arm, gate)
    async with app.run_test(size=SIZE) as pilot:
        gate.enable()
        await pilot.press("c")
        screen = app.screen
        await pilot.press("enter")
        await confirm(pilot, app, screen, "n")
        assert moves(gate) == [] and counts_from_joints(arm, gate.state().joints) == (0, 0)
        assert screen.walk.step == "jog" and "enter tries again" in screen.status
        await pilot.press("y")                            # no question asked: a dimmed key
        assert screen.walk.found.direction == arm.joints[0].direction
        assert "no question asked now" in screen.status


async def test_the_screen_fits_80_by_24(bench):
    arm, gate, _ = bench
    app = make_app(arm, gate)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.press("c")
        await pilot.pause(0.2)
        screen = app.screen
        for selector in ("#cm-title", "#cm-caution", "#cm-stages", "#cm-now", "#cm-prompt",
                         "#cm-input", "#cm-status", "KeyFooter"):
            region = screen.query_one(selector).region
            assert region.height > 0 and region.bottom <= SIZE[1] and region.right <= SIZE[0], selector
        help_key = [k for k in screen.query("FooterKey") if k.action == "help"]
        assert help_key and help_key[0].region.right <= SIZE[0]
        assert "hand on the hardware e-stop" in str(screen.query_one("#cm-caution").render())


@pytest.mark.parametrize("typing", [False, True], ids=["keys", "number-field"])
async def test_space_stops_a_commissioning_move(tmp_path, typing):
    arm = load_arm(str(PLANAR))
    gate = Interlock.open(arm, "sim", journal=False, time_scale=0.05)   # slow: time to stop
    try:
        app = make_app(arm, gate)
        counts_now = lambda: counts_from_joint(arm.joints[0], gate.state().joints[0])  # noqa: E731
        async with app.run_test(size=SIZE) as pilot:
            gate.enable()
            await pilot.press("c")
            screen = app.screen
            await pilot.press("enter")
            await until(pilot, lambda: isinstance(app.screen, ConfirmMoveScreen))
            await pilot.press("y")
            await until(pilot, lambda: counts_now() != 0)   # it is moving
            if typing:
                screen.query_one("#cm-input").focus()
            await pilot.press("space")
            await until(pilot, lambda: screen.moving is None)
            assert "stopped" in screen.status and screen.walk.step == "jog"
            target = moves(gate)[-1][2][0]
            assert counts_now() != target
            assert screen.query_one("#cm-input").value == ""
    finally:
        gate.close()


async def test_a_failed_write_is_one_line_and_leaves_the_file_whole(bench, tmp_path):
    """The backup cannot be made (a directory sits where it goes): nothing is written."""
    arm, gate, path = bench
    original = path.read_bytes()
    (tmp_path / "arm.toml.bak").mkdir()
    (tmp_path / "arm.toml.bak" / "keep").write_text("x", encoding="utf-8")
    app = make_app(arm, gate)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.press("c")
        screen = app.screen
        await pilot.press("w")                            # not done yet: dimmed, says why
        assert "finish the five stages first" in screen.status and app.screen is screen
        walk = screen.walk                                # a walk finished (its findings set)
        walk.found.direction, walk.found.counts_per_unit, walk.found.zero = -1, 45.0, 2.0
        walk.found.homing, walk.stage, walk.step = "done, shoulder at count 0", 5, "done"
        screen.refresh_view()
        await pilot.press("w")
        assert isinstance(app.screen, WriteFileScreen)
        await pilot.press("y")
        await until(pilot, lambda: screen.status.startswith("not written:"))
        assert "\n" not in screen.status and screen.written is None
    assert path.read_bytes() == original
    assert sorted(p.name for p in tmp_path.iterdir()) == ["arm.toml", "arm.toml.bak"]
