"""The console against the real interlock on the simulated arm: every motion asks first,
a no moves nothing, refusals never reach the arm, the e-stop latches until reset."""

from __future__ import annotations

import math
import sys
import types

import pytest
from textual.screen import Screen

from benchjog.console.tui.app import BenchjogApp, make_app
from benchjog.console.tui.screens.confirm import ConfirmMoveScreen
from benchjog.console.tui.screens.jog import JogScreen
from benchjog.console.tui.widgets.branch_table import BranchTable
from benchjog.console.tui.widgets.status import Banner
from benchjog.drivers.interlock import Interlock
from benchjog.kinematics.model import Branch
from console_helpers import confirm_shown, until
from console_helpers import drives_on as enabled

A1, A2 = 220.0, 160.0   # planar-bench link lengths (console/cell/arms/planar-bench.toml)
SIZE = (120, 40)


def moves(gate) -> list[tuple]:
    return [c for c in gate.sim.commands if c[0] == "MOVE"]


def fk_xy(t1: float, t2: float) -> tuple[float, float]:
    # 2R FK (Lynch & Park, Modern Robotics, 2017, section 4.1, from memory)
    return (A1 * math.cos(t1) + A2 * math.cos(t1 + t2), A1 * math.sin(t1) + A2 * math.sin(t1 + t2))


@pytest.fixture
def planar():
    from benchjog.console.cell.armfile import builtin_arm
    arm = builtin_arm("planar-bench")
    gate = Interlock.open(arm, "sim", journal=False, time_scale=20.0)
    yield arm, gate
    gate.close()


@pytest.fixture
def scara():
    from benchjog.console.cell.armfile import builtin_arm
    arm = builtin_arm("scara-bench")
    gate = Interlock.open(arm, "sim", journal=False, time_scale=20.0)
    yield arm, gate
    gate.close()


async def idle(pilot, app) -> None:
    assert await until(pilot, lambda: app.busy is None and not isinstance(app.screen,
                                                                          ConfirmMoveScreen))
    assert await until(pilot, lambda: app.state is not None and app.state.queued == 0)


async def enter_target(pilot, app, text: str) -> None:
    await pilot.press("g")
    keys = ["space" if ch == " " else ch for ch in text]
    await pilot.press(*keys, "enter")
    await pilot.pause()


async def test_jog_confirm_moves_the_arm(planar):
    arm, gate = planar
    app = make_app(arm, gate)
    async with app.run_test(size=SIZE) as pilot:
        await enabled(pilot, app)
        await pilot.press("right")                       # x +1 mm (default step 1)
        screen = await confirm_shown(pilot, app)
        assert screen.lines[0] == "jog x +1 mm"
        assert not moves(gate)                           # nothing moves before the yes
        await pilot.press("y")
        await idle(pilot, app)
        assert moves(gate)
        x, y = fk_xy(*gate.state().joints)
        # home pose (0, 90 deg): tool at (a1, a2) = (220, 160); one 1 mm step in +x
        assert x == pytest.approx(221.0, abs=0.05) and y == pytest.approx(160.0, abs=0.05)
        assert "done" in app.message


@pytest.mark.parametrize("key", ["n", "escape"])
async def test_cancel_moves_nothing(planar, key):
    arm, gate = planar
    app = make_app(arm, gate)
    async with app.run_test(size=SIZE) as pilot:
        await enabled(pilot, app)
        await pilot.press("up")
        await confirm_shown(pilot, app)
        # while the box is open the status line says a question waits, not a motion
        assert app.jog_screen.motion_words().startswith("motion: awaiting your answer")
        await pilot.press(key)
        await idle(pilot, app)
        assert not moves(gate)
        assert "cancelled" in app.message
        assert app.jog_screen.motion_words() == "motion: idle"
        assert gate.state().joints == pytest.approx(arm.home_joints)


async def test_unreachable_target_warns_and_never_moves(planar):
    arm, gate = planar
    app = make_app(arm, gate)
    async with app.run_test(size=SIZE) as pilot:
        await enabled(pilot, app)
        # max reach a1 + a2 = 380 mm (a 2R arm's workspace is the annulus |a1-a2|..a1+a2)
        await enter_target(pilot, app, "500 0")
        assert app.target == (500.0, 0.0)
        banner = app.jog_screen.query_one(Banner)
        assert "TARGET OUT OF REACH" in banner.text
        assert "out of reach" in app.message
        assert app.jog_screen.check_action("move", ()) is None   # dimmed
        await pilot.press("m")
        await pilot.pause(0.2)
        assert not isinstance(app.screen, ConfirmMoveScreen)
        assert not moves(gate)


async def test_bad_target_text_is_one_line_and_no_motion(planar):
    arm, gate = planar
    app = make_app(arm, gate)
    async with app.run_test(size=SIZE) as pilot:
        await enabled(pilot, app)
        await enter_target(pilot, app, "12 abc")
        assert app.message.startswith("bad target:") and "'abc' is not a number" in app.message
        assert "\n" not in app.message
        assert app.target is None
        assert app.focused is not None                    # the field keeps the text to fix
        await pilot.press("escape")
        await enter_target(pilot, app, "1 2 3")           # focusing selects the old text
        assert app.focused is not None
        assert "got 3 values" in app.message
        await pilot.press("escape", "m")
        await pilot.pause(0.2)
        assert not moves(gate)


async def test_estop_latches_blocks_jogs_and_needs_reset(planar):
    arm, gate = planar
    app = make_app(arm, gate)
    async with app.run_test(size=SIZE) as pilot:
        await enabled(pilot, app)
        gate.sim.inject_estop()
        banner = app.jog_screen.query_one(Banner)
        assert await until(pilot, lambda: "E-STOP" in banner.text)
        assert banner.has_class("-estop")
        assert app.jog_screen.check_action("jog", ("x", 1)) is None      # dimmed
        assert app.check_action("reset", ()) is True
        await pilot.press("right")
        await pilot.pause(0.2)
        assert not isinstance(app.screen, ConfirmMoveScreen)
        await pilot.press("r")                           # still pressed: reset refused
        assert await until(pilot, lambda: "reset failed" in app.message)
        assert "E-STOP" in banner.text
        gate.sim.release_estop()
        await pilot.press("r")
        assert await until(pilot, lambda: "E-STOP" not in banner.text)
        assert app.state.latched is None
        assert not moves(gate)


async def test_estop_during_a_move_halts_it(planar):
    arm, gate = planar
    slow = Interlock.open(arm, "sim", journal=False, time_scale=0.1)  # ~10 s: a loaded machine still stops it mid-way
    try:
        app = make_app(arm, slow)
        async with app.run_test(size=SIZE) as pilot:
            await enabled(pilot, app)
            await enter_target(pilot, app, "-100 300")
            await pilot.press("m")
            await confirm_shown(pilot, app)
            await pilot.press("y")
            assert await until(pilot, lambda: moves(slow))
            slow.sim.inject_estop()
            await idle(pilot, app)
            assert "halted" in app.message
            x, y = fk_xy(*slow.state().joints)
            assert math.hypot(x + 100.0, y - 300.0) > 1.0        # it did not get there
            banner = app.jog_screen.query_one(Banner)   # shown from the next state read
            assert await until(pilot, lambda: "E-STOP" in banner.text)
    finally:
        slow.close()


async def test_stop_key_stops_a_move(planar):
    arm, gate = planar
    slow = Interlock.open(arm, "sim", journal=False, time_scale=0.1)  # ~10 s: a loaded machine still stops it mid-way
    try:
        app = make_app(arm, slow)
        async with app.run_test(size=SIZE) as pilot:
            await enabled(pilot, app)
            await enter_target(pilot, app, "-100 300")
            await pilot.press("m")
            await confirm_shown(pilot, app)
            await pilot.press("y")
            assert await until(pilot, lambda: moves(slow))
            await pilot.press("space")
            await idle(pilot, app)
            assert "stopped" in app.message
            assert ("STOP",) in slow.sim.commands
            x, y = fk_xy(*slow.state().joints)
            assert math.hypot(x + 100.0, y - 300.0) > 1.0
    finally:
        slow.close()


async def test_stop_while_asking_answers_no(planar):
    arm, gate = planar
    app = make_app(arm, gate)
    async with app.run_test(size=SIZE) as pilot:
        await enabled(pilot, app)
        await pilot.press("left")
        await confirm_shown(pilot, app)
        await pilot.press("s")
        await idle(pilot, app)
        assert not moves(gate)


async def test_choose_the_other_branch_and_move_there(planar):
    arm, gate = planar
    app = make_app(arm, gate)
    async with app.run_test(size=SIZE) as pilot:
        await enabled(pilot, app)
        await enter_target(pilot, app, "150 200")
        table = app.jog_screen.query_one(BranchTable)
        # from home (0, 90 deg) the elbow-down solution (j2 > 0) is the nearer one
        assert app.branch == Branch.ELBOW_DOWN and table.active == Branch.ELBOW_DOWN
        assert table.rows[0] == ("", "  elbow-up", "> elbow-down")
        await pilot.press("b")
        await pilot.pause()
        assert app.branch == Branch.ELBOW_UP
        assert table.rows[0] == ("", "> elbow-up", "  elbow-down")
        await pilot.press("m")
        screen = await confirm_shown(pilot, app)
        assert "elbow-up" in screen.lines[0]
        await pilot.press("y")
        await idle(pilot, app)
        t1, t2 = gate.state().joints
        # elbow-up by the law of cosines (Spong, Hutchinson & Vidyasagar 2006, section 5.3,
        # from memory): t2 = -acos((x^2 + y^2 - a1^2 - a2^2) / (2 a1 a2)),
        # t1 = atan2(y, x) - atan2(a2 sin t2, a1 + a2 cos t2)
        want_t2 = -math.acos((150.0 ** 2 + 200.0 ** 2 - A1 ** 2 - A2 ** 2) / (2 * A1 * A2))
        want_t1 = math.atan2(200.0, 150.0) - math.atan2(A2 * math.sin(want_t2),
                                                        A1 + A2 * math.cos(want_t2))
        assert t2 == pytest.approx(want_t2, abs=math.radians(0.1))
        assert t1 == pytest.approx(want_t1, abs=math.radians(0.1))
        assert fk_xy(t1, t2) == pytest.approx((150.0, 200.0), abs=0.5)


async def test_refused_jog_shows_reasons_and_asks_nothing(planar):
    arm, gate = planar
    app = make_app(arm, gate)
    async with app.run_test(size=SIZE) as pilot:
        await enabled(pilot, app)
        # target (144.5, 0): elbow-down elbow = acos((r^2 - a1^2 - a2^2) / (2 a1 a2)) = 139.0 deg
        # (law of cosines); one 10 deg joint jog more passes the elbow's 145 deg max
        await enter_target(pilot, app, "144.5 0")
        await pilot.press("m")
        await confirm_shown(pilot, app)
        await pilot.press("y")
        await idle(pilot, app)
        elbow = math.degrees(math.acos((144.5 ** 2 - A1 ** 2 - A2 ** 2) / (2 * A1 * A2)))
        assert math.degrees(gate.state().joints[1]) == pytest.approx(elbow, abs=0.05)
        n_moves = len(moves(gate))
        await pilot.press("j", "3", "up")            # elbow +10 deg
        assert await until(pilot, lambda: "refused" in app.message)
        await idle(pilot, app)
        assert not isinstance(app.screen, ConfirmMoveScreen)
        assert "elbow" in app.message and "145.00 deg" in app.message
        assert any(w.startswith("refused:") for w in app.warnings())
        assert len(moves(gate)) == n_moves


async def test_keys_behind_a_slow_jog_keep_one_pending_slot_and_go_stale(planar):
    """Keys pressed while a jog runs keep one pending slot (the last key); a pending key
    older than the dead-man window when the step ends is dropped: never a motion or a
    question later (jog sessions, README)."""
    arm, gate = planar
    slow = Interlock.open(arm, "sim", journal=False, time_scale=0.04)  # a 1 mm jog takes ~2 s
    try:
        app = make_app(arm, slow)
        async with app.run_test(size=SIZE) as pilot:
            await enabled(pilot, app)
            await pilot.press("right")
            await confirm_shown(pilot, app)
            await pilot.press("y")
            assert await until(pilot, lambda: moves(slow))
            await pilot.press("right", "right", "right", "left")   # while the first runs
            assert app.busy is not None
            assert app.pending is not None and app.pending.delta == -1.0   # the last one only
            await idle(pilot, app)
            assert app.pending is None
            await pilot.pause(0.3)
            assert not isinstance(app.screen, ConfirmMoveScreen)
            first = len(moves(slow))
            await pilot.pause(0.2)
            assert len(moves(slow)) == first
    finally:
        slow.close()


async def test_state_refresh_keeps_running_under_the_modal(planar):
    arm, gate = planar
    app = make_app(arm, gate)
    async with app.run_test(size=SIZE) as pilot:
        await enabled(pilot, app)
        await pilot.press("right")
        await confirm_shown(pilot, app)
        before = app.polled_at
        assert await until(pilot, lambda: app.polled_at > before + 0.3)
        gate.sim.inject_estop()
        assert await until(pilot, lambda: app.state.latched is not None)
        await pilot.press("n")
        await idle(pilot, app)
        assert not moves(gate)


async def test_joint_jog_mode(planar):
    arm, gate = planar
    app = make_app(arm, gate)
    async with app.run_test(size=SIZE) as pilot:
        await enabled(pilot, app)
        assert app.jog_screen.check_action("jog", ("j1", 1)) is False     # hidden in Cartesian
        await pilot.press("j")
        assert app.jog_screen.check_action("jog", ("x", 1)) is False
        await pilot.press("right")
        screen = await confirm_shown(pilot, app)
        assert screen.lines[0] == "jog shoulder +1 deg"
        await pilot.press("y")
        await idle(pilot, app)
        assert gate.state().joints[0] == pytest.approx(math.radians(1.0), abs=1e-3)
        assert gate.state().joints[1] == pytest.approx(math.radians(90.0), abs=1e-3)


async def test_scara_z_jog(scara):
    arm, gate = scara
    app = make_app(arm, gate)
    async with app.run_test(size=SIZE) as pilot:
        await enabled(pilot, app)
        quill_before = gate.state().joints[2]
        await pilot.press("pagedown")                # z -1 mm: the quill goes 1 mm further out
        screen = await confirm_shown(pilot, app)
        assert screen.lines[0] == "jog z -1 mm"
        await pilot.press("y")
        await idle(pilot, app)
        # SCARA z = d1 - q3 - d4 (classic SCARA DH table, from memory): dz = -1 -> dq3 = +1
        assert gate.state().joints[2] - quill_before == pytest.approx(1.0, abs=0.01)


async def test_planar_hides_z_and_roll(planar):
    arm, gate = planar
    app = make_app(arm, gate)
    async with app.run_test(size=SIZE) as pilot:
        await until(pilot, lambda: app.state is not None)
        for axis in ("z", "roll", "j3", "j4"):
            assert app.jog_screen.check_action("jog", (axis, 1)) is False


async def test_drives_off_dims_motion_keys(planar):
    arm, gate = planar
    app = make_app(arm, gate)
    async with app.run_test(size=SIZE) as pilot:
        await until(pilot, lambda: app.state is not None)
        assert "DRIVES OFF" in app.jog_screen.query_one(Banner).text
        assert app.jog_screen.check_action("jog", ("x", 1)) is None
        assert app.check_action("home", ()) is None
        await pilot.press("right")
        await pilot.pause(0.2)
        assert not isinstance(app.screen, ConfirmMoveScreen)


async def test_home_asks_first(planar):
    arm, gate = planar
    app = make_app(arm, gate)
    async with app.run_test(size=SIZE) as pilot:
        await enabled(pilot, app)
        await pilot.press("h")
        screen = await confirm_shown(pilot, app)
        assert screen.lines[0].startswith("home")
        await pilot.press("n")
        await idle(pilot, app)
        assert not [c for c in gate.sim.commands if c[0] == "HOME"]
        await pilot.press("h")
        await confirm_shown(pilot, app)
        await pilot.press("y")
        await idle(pilot, app)
        assert [c for c in gate.sim.commands if c[0] == "HOME"]


async def test_quit_stops_first(planar):
    arm, gate = planar
    slow = Interlock.open(arm, "sim", journal=False, time_scale=0.1)  # ~10 s: a loaded machine still stops it mid-way
    try:
        app = make_app(arm, slow)
        async with app.run_test(size=SIZE) as pilot:
            await enabled(pilot, app)
            await enter_target(pilot, app, "-100 300")
            await pilot.press("m")
            await confirm_shown(pilot, app)
            await pilot.press("y")
            assert await until(pilot, lambda: moves(slow))
            await pilot.press("ctrl+q")
            await pilot.pause(0.2)
        assert ("STOP",) in slow.sim.commands
        assert app.return_code == 0
    finally:
        slow.close()


async def test_teach_key_pushes_the_teach_screen_when_present(planar, monkeypatch):
    arm, gate = planar
    made = []

    class TeachScreen(Screen):
        def __init__(self, interlock, arm_, points_path, program_path):
            super().__init__()
            made.append((interlock, arm_, points_path, program_path))

    module = types.ModuleType("benchjog.console.tui.screens.teach")
    module.TeachScreen = TeachScreen
    monkeypatch.setitem(sys.modules, "benchjog.console.tui.screens.teach", module)
    app = make_app(arm, gate, points_path="pts.toml", program_path="prog.toml")
    app._has_teach = True
    async with app.run_test(size=SIZE) as pilot:
        await until(pilot, lambda: app.state is not None)
        await pilot.press("t")
        assert await until(pilot, lambda: isinstance(app.screen, TeachScreen))
        assert made[0][0] is gate and made[0][1] is arm
        assert str(made[0][2]) == "pts.toml" and str(made[0][3]) == "prog.toml"


async def test_teach_key_dimmed_without_the_module(planar):
    arm, gate = planar
    app = make_app(arm, gate)
    app._has_teach = False
    async with app.run_test(size=SIZE) as pilot:
        assert app.check_action("teach", ()) is None


def test_every_key_has_a_label_tooltip_and_id():
    seen = set()
    for binding in list(JogScreen.BINDINGS) + list(BenchjogApp.BINDINGS) + list(
            ConfirmMoveScreen.BINDINGS):
        assert binding.description and binding.tooltip and binding.id, binding
        assert binding.id not in seen
        seen.add(binding.id)


async def test_not_connected_at_start_then_connect_with_r(tmp_path):
    from benchjog.console.cell.armfile import builtin_arm
    from benchjog.drivers.emulator import Emulator
    arm = builtin_arm("planar-bench")
    emu = Emulator(arm, {"home_s": 0.02})
    pty = emu.start()
    port = tmp_path / "ttyBENCH"          # nothing plugged in yet
    gate = Interlock.open(arm, "serial", journal=False, port=str(port), require_link=False)
    try:
        app = make_app(arm, gate)
        async with app.run_test(size=SIZE) as pilot:
            banner = app.jog_screen.query_one(Banner)
            assert await until(pilot, lambda: "NOT CONNECTED" in banner.text)
            assert "cannot open" in banner.text and "press r to connect" in banner.text
            assert app.check_action("reset", ()) is True
            port.symlink_to(pty)              # the cable goes in
            await pilot.press("r")
            assert await until(pilot, lambda: app.state is not None and app.state.is_open)
            assert await until(pilot, lambda: "NOT CONNECTED" not in banner.text)
    finally:
        gate.close()
        emu.stop()


async def test_speed_override_key_slows_the_next_motion(planar):
    arm, gate = planar
    app = make_app(arm, gate)
    async with app.run_test(size=SIZE) as pilot:
        await enabled(pilot, app)
        await pilot.press("right")
        full = list((await confirm_shown(pilot, app)).lines)   # the box is reused
        await pilot.press("n")
        await idle(pilot, app)
        await pilot.press("v", "v")          # 100 -> 50 -> 25 %
        assert app.speed_pct == 25.0
        await pilot.press("right")
        slow = await confirm_shown(pilot, app)
        assert "25 %" in " ".join(slow.lines) or "25%" in " ".join(slow.lines)
        duration = lambda lines: float(next(l for l in lines if " s in " in l).split(": ")[1].split(" s")[0])
        # A 1 mm jog never reaches top speed: a triangle profile takes 2 sqrt(d / a)
        # (elementary kinematics). The override scales the acceleration too, so a quarter
        # of it doubles the time (less a little for whole-millisecond segments).
        assert duration(slow.lines) > 1.8 * duration(full)
        await pilot.press("n")
        await idle(pilot, app)
        assert not moves(gate)
