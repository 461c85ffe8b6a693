"""The console at the sizes people have: what must be on screen at 80 x 24, the help
panel, dimmed keys that say why, "terminal too small", and the target field.

Checks are on the real widgets' screen regions (Textual's run_test with a fixed
terminal size), so a panel pushed off screen or hidden fails here."""

from __future__ import annotations

import pytest
from textual.widgets import Footer

from benchjog.console.cell.armfile import builtin_arm
from benchjog.console.tui.app import BenchjogApp, make_app
from benchjog.console.tui.screens.confirm import ConfirmMoveScreen
from benchjog.console.tui.screens.help import HelpScreen
from benchjog.console.tui.screens.jog import JogScreen
from benchjog.console.tui.widgets.keys import MIN_HEIGHT, MIN_WIDTH, TooSmall, key_rows
from benchjog.console.tui.widgets.target_input import TargetInput
from benchjog.drivers.interlock import Interlock
from console_helpers import until


@pytest.fixture(params=["planar-bench", "scara-bench"])
def rig(request):
    arm = builtin_arm(request.param)
    gate = Interlock.open(arm, "sim", journal=False, time_scale=50.0)
    yield arm, gate
    gate.close()


def fully_visible(widget, size: tuple[int, int]) -> bool:
    """Displayed, not empty, and inside the terminal (no row cut off)."""
    region = widget.region
    if not widget.display or region.width == 0 or region.height == 0:
        return False
    return region.x >= 0 and region.y >= 0 and region.right <= size[0] and \
        region.bottom <= size[1]


def moves(gate) -> list:
    return [c for c in gate.sim.commands if c[0] == "MOVE"]


@pytest.mark.parametrize("size", [(80, 24), (100, 30), (120, 40)])
async def test_everything_a_jog_needs_is_on_screen(rig, size):
    arm, gate = rig
    app = make_app(arm, gate)
    async with app.run_test(size=size) as pilot:
        await until(pilot, lambda: app.state is not None)
        await pilot.press("g", *"250 -50" if arm.is_scara else "200 100", "enter")
        await pilot.pause(0.2)
        screen = app.jog_screen
        for selector in ("#link", "#readout", "#branches", "#warnings", "#message",
                         "#jogstatus", "#target"):
            assert fully_visible(screen.query_one(selector), size), (selector, size)
        assert fully_visible(screen.query_one(Footer), size)
        caution = "#caution" if size == (120, 40) else "#caution-short"
        assert fully_visible(screen.query_one(caution), size)
        # every row of the branch table (both branches, every joint, the status) shows
        branches = screen.query_one("#branches")
        assert branches.region.height >= len(arm.joints) + 2 + 2   # header, status, border
        # the footer's keys fit on its one line: the help key is the last and visible
        help_key = [k for k in screen.query("FooterKey") if k.action == "help"]
        assert help_key and help_key[0].region.right <= size[0]


async def test_sketch_gives_way_below_120_and_toggles(rig):
    arm, gate = rig
    app = make_app(arm, gate)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause(0.2)
        sketch = app.jog_screen.query_one("#sketch")
        assert not fully_visible(sketch, (80, 24))
        await pilot.press("o")
        await pilot.pause(0.1)
        assert fully_visible(sketch, (80, 24))
        await pilot.press("o")
        await pilot.pause(0.1)
        assert fully_visible(app.jog_screen.query_one("#readout"), (80, 24))


async def test_confirmation_keys_stay_in_view_at_80x24(rig):
    arm, gate = rig
    app = make_app(arm, gate)
    async with app.run_test(size=(80, 24)) as pilot:
        await until(pilot, lambda: app.state is not None)
        await pilot.press("e")
        assert await until(pilot, app.ready)
        await pilot.press("g", *"300 100" if arm.is_scara else "200 100", "enter", "m")
        assert await until(pilot, lambda: isinstance(app.screen, ConfirmMoveScreen))
        await pilot.pause(0.2)
        assert fully_visible(app.screen.query_one("#confirm-keys"), (80, 24))
        assert fully_visible(app.screen.query_one("#confirm-title"), (80, 24))
        caution_inside_the_box(app.screen)
        await pilot.press("n")
        assert await until(pilot, lambda: app.busy is None)
        await pilot.press("right")   # a jog session's question: its bounds make it longer
        assert await until(pilot, lambda: isinstance(app.screen, ConfirmMoveScreen))
        await pilot.pause(0.2)
        caution_inside_the_box(app.screen)
        await pilot.press("n")
        assert await until(pilot, lambda: app.busy is None)
        assert not moves(gate)


def caution_inside_the_box(screen) -> None:
    """The safety caution is on screen inside the box, under the plan (which scrolls),
    however long the plan is."""
    box = screen.query_one("#confirm-box").region
    caution = screen.query_one("#confirm-caution").region
    plan = screen.query_one("#confirm-scroll").region
    assert caution.height >= 1 and box.contains_region(caution), (box, caution)
    assert plan.bottom <= caution.y


async def test_help_lists_every_key_with_its_tooltip():
    arm = builtin_arm("planar-bench")
    with Interlock.open(arm, "sim", journal=False) as gate:
        app = make_app(arm, gate)
        async with app.run_test(size=(80, 24)) as pilot:
            await until(pilot, lambda: app.state is not None)
            await pilot.press("f1")
            assert await until(pilot, lambda: isinstance(app.screen, HelpScreen))
            listed = {row.tooltip for row in app.screen.rows}
            # every key of the jog screen (planar: not the z/roll ones) and of the app
            wanted = [b for b in JogScreen.BINDINGS + BenchjogApp.BINDINGS
                      if not b.action.startswith(("jog('z'", "jog('roll'", "jog('j"))]
            missing = [b.id for b in wanted if b.tooltip not in listed]
            assert not missing
            # drives are off at start: the move key is dimmed and says why
            move = next(r for r in app.screen.rows if r.label == "move")
            assert not move.enabled and "drives off" in move.reason
            await pilot.press("escape")
            assert await until(pilot, lambda: isinstance(app.screen, JogScreen))
            await pilot.press("question_mark")
            assert await until(pilot, lambda: isinstance(app.screen, HelpScreen))


async def test_a_dimmed_key_says_why_and_moves_nothing():
    arm = builtin_arm("planar-bench")
    with Interlock.open(arm, "sim", journal=False) as gate:
        app = make_app(arm, gate)
        async with app.run_test(size=(80, 24)) as pilot:
            await until(pilot, lambda: app.state is not None)
            await pilot.press("e")
            assert await until(pilot, app.ready)
            await pilot.press("m")                       # no target typed
            await pilot.pause(0.1)
            assert "no target" in app.message
            await pilot.press("r")                       # nothing latched
            await pilot.pause(0.1)
            assert "nothing to reset" in app.message
            assert not moves(gate)


async def test_teach_screen_footer_and_help(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    arm = builtin_arm("planar-bench")
    with Interlock.open(arm, "sim", journal=False) as gate:
        app = make_app(arm, gate)
        async with app.run_test(size=(120, 40)) as pilot:
            await pilot.press("t")
            assert await until(pilot, lambda: type(app.screen).__name__ == "TeachScreen")
            await pilot.pause(0.2)
            shown = {k.action for k in app.screen.query("FooterKey")
                     if k.region.right <= 120 and k.region.width}
            for action in ("check", "run", "pause", "back", "help", "stop"):
                assert action in shown
            rows = key_rows(app.screen)
            assert {r.label for r in rows} >= {"teach", "update", "rename", "delete", "frame",
                                               "dwell", "output", "step up", "del step"}
            pause = next(r for r in rows if r.label == "pause")
            assert not pause.enabled and pause.reason == "nothing is running"


async def test_too_small_below_the_minimum_and_no_yes(rig):
    arm, gate = rig
    app = make_app(arm, gate)
    small = (MIN_WIDTH - 1, MIN_HEIGHT)
    async with app.run_test(size=(80, 24)) as pilot:
        await until(pilot, lambda: app.state is not None)
        await pilot.press("e")
        assert await until(pilot, app.ready)
        await pilot.press("g", *"300 100" if arm.is_scara else "200 100", "enter", "m")
        assert await until(pilot, lambda: isinstance(app.screen, ConfirmMoveScreen))
        await pilot.resize_terminal(*small)
        await pilot.pause(0.2)
        assert fully_visible(app.screen.query_one(TooSmall), small)
        assert not app.screen.query_one("#confirm-box").display or \
            not fully_visible(app.screen.query_one("#confirm-keys"), small)
        await pilot.press("y")                           # the plan cannot be read: no yes
        await pilot.pause(0.2)
        assert isinstance(app.screen, ConfirmMoveScreen)
        assert not moves(gate)
        await pilot.resize_terminal(80, MIN_HEIGHT - 1)
        await pilot.pause(0.1)
        assert fully_visible(app.screen.query_one(TooSmall), (80, MIN_HEIGHT - 1))
        await pilot.resize_terminal(80, 24)
        await pilot.pause(0.2)
        assert not app.screen.query_one(TooSmall).display
        await pilot.press("n")
        assert await until(pilot, lambda: app.busy is None)
        assert not moves(gate)


async def test_target_field_enter_previews_escape_clears_and_digits_stay_in_it():
    arm = builtin_arm("planar-bench")
    with Interlock.open(arm, "sim", journal=False) as gate:
        app = make_app(arm, gate)
        async with app.run_test(size=(80, 24)) as pilot:
            await until(pilot, lambda: app.state is not None)
            field = app.jog_screen.query_one(TargetInput)
            await pilot.press("g")
            assert "TYPING A TARGET" in app.jog_screen.jog_words()
            await pilot.press(*"-180", "space", "1", "0", "0")
            assert app.step == 1.0                       # "1" typed, not the 0.1 step key
            assert not [c for c in gate.sim.commands if c[0] == "STOP"]
            await pilot.press("enter")                   # preview; keys back to jogging
            await pilot.pause(0.1)
            assert app.target == (-180.0, 100.0)
            assert field.value == "-180 100"            # the text stays
            assert not field.has_focus
            assert app.jog_screen.jog_words().startswith("keys jog")
            await pilot.press("escape")                  # clear: target and field
            await pilot.pause(0.1)
            assert app.target is None and field.value == ""
            await pilot.press("g", *"100 100", "enter")
            await pilot.pause(0.1)
            assert app.target == (100.0, 100.0)
            await pilot.press("g", "ctrl+u", "enter")    # an emptied field clears the target
            await pilot.pause(0.1)
            assert app.target is None
            assert not moves(gate)


async def test_a_fault_names_its_cause_and_how_to_clear_it():
    # the controller's fault codes of PROTOCOL.md (EVT FAULT code=...), injected into the
    # simulated arm; the banner names the cause and the way out, not just "FAULT"
    from benchjog.console.tui.widgets.status import Banner
    arm = builtin_arm("planar-bench")
    with Interlock.open(arm, "sim", journal=False) as gate:
        app = make_app(arm, gate)
        async with app.run_test(size=(80, 24)) as pilot:
            await until(pilot, lambda: app.state is not None)
            gate.sim.inject_fault("LIMIT_SWITCH", 2)
            banner = app.jog_screen.query_one(Banner)
            assert await until(pilot, lambda: "FAULT" in banner.text)
            assert "limit switch on axis 2" in banner.text and "press r" in banner.text
            assert fully_visible(banner, (80, 24))


async def test_a_number_typed_outside_the_field_goes_into_it():
    # measured before: "-180 0" typed without g set the step to 0.1 and sent a stop
    arm = builtin_arm("planar-bench")
    with Interlock.open(arm, "sim", journal=False) as gate:
        app = make_app(arm, gate)
        async with app.run_test(size=(80, 24)) as pilot:
            await until(pilot, lambda: app.state is not None)
            before = len(gate.sim.commands)
            await pilot.press("-", "1", "8", "0", "space", "0")
            field = app.jog_screen.query_one(TargetInput)
            assert field.has_focus and field.value == "-180 0"
            assert app.step == 1.0
            assert not [c for c in gate.sim.commands[before:] if c[0] in ("STOP", "MOVE")]
            await pilot.press("enter")
            await pilot.pause(0.1)
            assert app.target == (-180.0, 0.0)


# --- the SCARA side view draws only zones in the arm's plane --------------------------

@pytest.mark.parametrize("phi_deg", [0, 17, 45, 90, 133, 180, 201, 270, 300, 359])
@pytest.mark.parametrize("zone_kw", [
    dict(name="post", kind="circle", cx=120.0, cy=-180.0, r=35.0),
    dict(name="tray", kind="box", x_min=-300.0, x_max=-200.0, y_min=-70.0, y_max=70.0),
    dict(name="wall", kind="box", x_min=50.0, x_max=400.0, y_min=-10.0, y_max=10.0),
])
def test_ray_span_matches_sampling_along_the_ray(phi_deg, zone_kw):
    # independent check: walk the ray in 0.05 mm steps with the point-in-zone test
    import math as m
    from benchjog.console.tui.widgets.sketch import in_zone, ray_span
    from benchjog.kinematics.model import Zone
    zone = Zone(**zone_kw)
    phi = m.radians(phi_deg)
    inside = [k * 0.05 for k in range(0, 12001)
              if in_zone(zone, k * 0.05 * m.cos(phi), k * 0.05 * m.sin(phi))]
    span = ray_span(zone, phi)
    if not inside:
        assert span is None or span[1] - span[0] < 0.05
    else:
        assert span is not None
        assert span[0] == pytest.approx(inside[0], abs=0.06)
        assert span[1] == pytest.approx(inside[-1], abs=0.06)


def test_scara_side_view_hatches_the_post_only_when_the_arm_faces_it():
    import math as m
    from benchjog.console.tui.widgets.sketch import HATCH, render_side
    from benchjog.kinematics.solve import joints_from_tool
    arm = builtin_arm("scara-bench")        # fixture-post: circle at (120, -180), r 35
    toward = joints_from_tool(arm, (150.0, -225.0, 140.0, 0.0)).usable[0].joints
    away = joints_from_tool(arm, (-150.0, 225.0, 140.0, 0.0)).usable[0].joints
    drawn = lambda joints: sum(line.count(HATCH) for line in
                               render_side(arm, joints, width=40, height=16))
    assert drawn(toward) > 0
    assert drawn(away) == 0


# --- the workspace map in the sketch ------------------------------------------------------

def test_workspace_map_against_the_textbook_2r_solution():
    # Independent check of every cell of the map with the closed-form 2R IK (Lynch & Park,
    # Modern Robotics 2017, section 6.1, from memory): elbow angle from the law of
    # cosines, shoulder from atan2; a cell is in the map exactly when that branch's
    # joints are within the soft limits of planar-bench.toml and both links stay
    # farther than the arm's link clearance from the keep-out box. Cells within 1 deg
    # of a limit or 1 mm of the clearance are skipped (rounding).
    import math as m
    from benchjog.console.tui.widgets.sketch import View, workspace_cells
    arm = builtin_arm("planar-bench")
    a1, a2 = arm.joints[0].a_mm, arm.joints[1].a_mm
    view = View.fit(-400.0, 400.0, -400.0, 400.0, 61, 25)
    checked = 0
    for branch, sign in (("elbow-down", 1.0), ("elbow-up", -1.0)):
        cells = workspace_cells(arm, branch, 0.0, 0.0, view)
        for row in range(view.rows):
            for col in range(view.cols):
                x, y = view.world(col, row)
                c2 = (x * x + y * y - a1 * a1 - a2 * a2) / (2 * a1 * a2)
                if abs(c2) > 1 - 1e-3:                  # out of reach or at the edge
                    if abs(c2) > 1 + 1e-3:
                        assert (col, row) not in cells
                    continue
                t2 = sign * m.acos(c2)
                t1 = m.atan2(y, x) - m.atan2(a2 * m.sin(t2), a1 + a2 * m.cos(t2))
                t1 = m.remainder(t1, 2 * m.pi)
                joints_ok, near_edge = True, False
                for joint, t in zip(arm.joints, (t1, t2)):
                    deg = m.degrees(t)
                    lo, hi = m.degrees(joint.min), m.degrees(joint.max)
                    joints_ok &= lo <= deg <= hi
                    near_edge |= min(abs(deg - lo), abs(deg - hi)) < 1.0
                grow = arm.link_clearance_mm
                # both links (base-elbow, elbow-tool), sampled every 0.5 mm, against
                # each box: the nearest distance of any point of the arm to a zone
                ex, ey = a1 * m.cos(t1), a1 * m.sin(t1)
                points = [(ex * k / 500, ey * k / 500) for k in range(501)]
                points += [(ex + (x - ex) * k / 500, ey + (y - ey) * k / 500)
                           for k in range(501)]
                zone_gap = min(m.hypot(max(z.x_min - px, 0.0, px - z.x_max),
                                       max(z.y_min - py, 0.0, py - z.y_max))
                               for z in arm.zones for px, py in points)
                near_edge |= abs(zone_gap - grow) < 1.0
                if near_edge:
                    continue
                expected = joints_ok and zone_gap > grow
                assert ((col, row) in cells) == expected, (branch, x, y)
                checked += 1
    assert checked > 500


async def test_a_reason_cut_on_the_message_bar_reads_in_full_in_the_events(rig):
    # at 80 x 24 the one-line message bar ends a long reason with "..."; the events
    # panel wraps the same entry onto indented lines, every word of it on screen
    from benchjog.console.tui.widgets.status import EventLog

    arm, gate = rig
    app = make_app(arm, gate)
    reason = ("controller refused RESET: ESTOP (the e-stop input is still active: release "
              "the button, then reset)")
    async with app.run_test(size=(80, 24)) as pilot:
        await until(pilot, lambda: isinstance(app.screen, JogScreen))
        app.jog_screen.log_event("reset", f"failed: {reason}")
        app.set_message(f"reset failed: {reason}", error=True)
        await pilot.pause()
        log = app.jog_screen.query_one(EventLog)
        shown = str(log.render())
        assert len(shown.splitlines()) > 1
        assert all(len(line) <= log.content_size.width for line in shown.splitlines())
        assert " ".join(shown.split()).endswith(" ".join(f"failed: {reason}".split()))
