"""The console's jog session and held-key jog, driven by Textual's pilot against the real
interlock on the simulated arm (its command record is what reached the "controller").

Positions are checked with the closed-form 2R forward kinematics (Lynch & Park, Modern
Robotics, 2017, section 4.1, from memory) on joint values rebuilt from the counts with
the arm file's own calibration numbers, not with the project's kinematics."""

from __future__ import annotations

import math
import time
import tomllib
from pathlib import Path

import pytest

from benchjog.console.cell.armfile import builtin_arm
from benchjog.console.tui.app import make_app
from benchjog.console.tui.screens.confirm import ConfirmMoveScreen
from benchjog.console.tui.widgets.sketch import PoseSketch
from benchjog.console.tui.widgets.status import LinkStatus
from benchjog.drivers.interlock import Interlock
from benchjog.drivers.jog_session import DEADMAN_S
from benchjog.drivers.journal import Journal, read_journal

import console_helpers

ROOT = Path(__file__).resolve().parents[1]
TABLE = tomllib.loads((ROOT / "console/cell/arms/planar-bench.toml").read_text())
SIZE = (120, 40)


def xy_from_counts(counts) -> tuple[float, float]:
    # value = zero + direction * counts / counts_per_unit (the arm file), then 2R FK
    # (Lynch & Park, Modern Robotics, 2017, section 4.1, from memory)
    j = [math.radians(t["zero"] + t["direction"] * c / t["counts_per_unit"])
         for t, c in zip(TABLE["joints"], counts)]
    a1, a2 = TABLE["joints"][0]["a"], TABLE["joints"][1]["a"]
    return (a1 * math.cos(j[0]) + a2 * math.cos(j[0] + j[1]),
            a1 * math.sin(j[0]) + a2 * math.sin(j[0] + j[1]))


def moves(gate) -> list[tuple]:
    return [c for c in gate.sim.commands if c[0] == "MOVE"]


@pytest.fixture
def planar(tmp_path):
    arm = builtin_arm("planar-bench")
    gate = Interlock.open(arm, "sim", journal=Journal(tmp_path / "j.jsonl"), time_scale=1.0)
    yield arm, gate
    gate.close()


async def until(pilot, condition, tries: int = 300) -> bool:
    return await console_helpers.until(pilot, condition, tries, pause_s=0.02)   # this file's pace


async def ready(pilot, app) -> None:
    await console_helpers.drives_on(pilot, app, tries=300, pause_s=0.02)


async def idle(pilot, app, gate) -> None:
    assert await until(pilot, lambda: app.busy is None and app.pending is None
                       and not isinstance(app.screen, ConfirmMoveScreen)
                       and gate.state().queued == 0)


def count_questions(app) -> list:
    asked: list = []
    original = app.ask_confirm

    def counting(lines, title, callback):
        asked.append(list(lines))
        return original(lines, title, callback)

    app.ask_confirm = counting
    return asked


async def start_session(pilot, app, gate, key: str = "right") -> None:
    await pilot.press(key)
    assert await until(pilot, lambda: isinstance(app.screen, ConfirmMoveScreen))
    await pilot.press("y")
    await idle(pilot, app, gate)
    assert app.session_view() is not None


async def test_ten_one_mm_jogs_are_one_confirmation_and_ten_keys(planar, monkeypatch):
    # Each key here waits for the step before; the dead-man window (tested in
    # tests/test_jog_session.py) is widened so a loaded CI machine's slow hand-over of a
    # key does not turn one of the ten steps into a "lapsed" one.
    monkeypatch.setattr("benchjog.console.tui.app.DEADMAN_S", 5.0)
    arm, gate = planar
    app = make_app(arm, gate)
    async with app.run_test(size=SIZE) as pilot:
        await ready(pilot, app)
        asked = count_questions(app)
        x0, y0 = xy_from_counts((0, 0))
        await start_session(pilot, app, gate)          # key 1 and the one "y"
        assert any("jog session" in line for line in asked[0])
        for _ in range(9):                               # keys 2..10
            await pilot.press("right")
            await idle(pilot, app, gate)
        assert len(asked) == 1
        x, y = xy_from_counts(moves(gate)[-1][2])
        assert x - x0 == pytest.approx(10.0, abs=0.2) and y == pytest.approx(y0, abs=0.2)
    assert gate.wait_journal(5.0)
    entries = read_journal(gate.journal_path)
    assert [e["kind"] for e in entries].count("session-start") == 1
    assert [e["kind"] for e in entries].count("session-step") == 9


async def test_a_held_key_jogs_on_and_stops_after_the_repeats_end(planar):
    arm, gate = planar
    app = make_app(arm, gate)
    async with app.run_test(size=SIZE) as pilot:
        await ready(pilot, app)
        await start_session(pilot, app, gate)
        before = len(moves(gate))
        x_start = xy_from_counts(moves(gate)[-1][2])[0]
        for _ in range(15):              # ~0.5 s of key repeat at ~30 Hz (inside the 25 mm box)
            await pilot.press("right")
            await pilot.pause(1 / 30)
        released = time.monotonic()
        assert len(moves(gate)) - before >= 2 * 13       # several steps ran during the hold
        assert not isinstance(app.screen, ConfirmMoveScreen)
        assert await until(pilot, lambda: gate.state().queued == 0 and app.busy is None)
        stopped = time.monotonic()
        x_end = xy_from_counts(moves(gate)[-1][2])[0]
        sent = len(moves(gate))
        await pilot.pause(3 * DEADMAN_S)
        assert len(moves(gate)) == sent and gate.state().queued == 0   # and it stays stopped
        assert app.session_view() is not None                           # the session goes on
        assert x_end > x_start + 3.0
        # Every step lasts at most the window and a waiting repeat runs only when fresh;
        # the slack covers the pilot's own scheduling on a busy machine.
        assert stopped - released <= DEADMAN_S + 0.5, stopped - released


def count_planning(gate, monkeypatch) -> tuple[list[int], list[int]]:
    """(all calls of the gate's jog planner so far, the planner calls made inside each
    propose_jog: the planning a key's step waited for)."""
    calls = console_helpers.count_calls(monkeypatch, "benchjog.drivers.interlock.plan_jog")
    planned_at_key: list[int] = []
    real_propose = gate.propose_jog

    def propose(*args, **kwargs):
        before = calls[0]
        try:
            return real_propose(*args, **kwargs)
        finally:
            planned_at_key.append(calls[0] - before)

    gate.propose_jog = propose
    return calls, planned_at_key


async def ready_and_planned(pilot, app, calls: list[int]) -> None:
    """Drives on, and the four jog steps of the frame (x+, x-, y+, y-) planned while the
    arm rests."""
    await ready(pilot, app)
    assert await until(pilot, lambda: calls[0] >= 4)


async def test_the_first_jog_key_is_planned_before_it_and_still_asks(planar, monkeypatch):
    arm, gate = planar
    calls, planned_at_key = count_planning(gate, monkeypatch)
    app = make_app(arm, gate)
    async with app.run_test(size=SIZE) as pilot:
        await ready_and_planned(pilot, app, calls)
        asked = count_questions(app)
        await pilot.press("right")
        assert await until(pilot, lambda: isinstance(app.screen, ConfirmMoveScreen))
        assert planned_at_key == [0] and len(asked) == 1
        assert any("jog session" in line for line in asked[0])
        await pilot.press("n")
        await idle(pilot, app, gate)
        await pilot.pause(2 * DEADMAN_S)
        assert moves(gate) == [] and app.session_view() is None


async def test_nothing_is_planned_ahead_under_the_teach_screen(planar, monkeypatch, tmp_path):
    """The teach screen runs motions of its own: no planning ahead competes with them
    while it is up; back on the jog screen, the steps are planned from the new pose."""
    from benchjog.drivers.interlock import Confirmer

    class Yes(Confirmer):
        def confirm(self, proposal) -> bool:
            return True

    arm, gate = planar
    calls, _ = count_planning(gate, monkeypatch)
    app = make_app(arm, gate, points_path=tmp_path / "points.toml",
                   program_path=tmp_path / "program.toml")
    async with app.run_test(size=SIZE) as pilot:
        await ready_and_planned(pilot, app, calls)
        await pilot.press("t")
        assert await until(pilot, lambda: type(app.screen).__name__ == "TeachScreen")
        before = calls[0]
        elbow = gate.state().joints[1]
        assert gate.execute(gate.propose_joints((math.radians(10.0), elbow)), Yes()).completed
        assert await until(pilot, lambda: app.state.joints[0] == pytest.approx(
            math.radians(10.0), abs=1e-3) and app.state.queued == 0)
        await pilot.pause(4 * 0.15)   # several polls of the new pose
        assert calls[0] == before
        await pilot.press("escape")
        assert await until(pilot, lambda: app.screen is app.jog_screen)
        assert await until(pilot, lambda: calls[0] >= before + 4)


async def test_the_next_step_is_planned_before_its_key(planar, monkeypatch):
    """While the arm rests in a session, the motion thread plans the steps the next key
    may ask for; the key then plans nothing, and its step goes where a step planned at
    the key would (checked on the counts)."""
    monkeypatch.setattr("benchjog.console.tui.app.DEADMAN_S", 5.0)   # a loaded machine
    arm, gate = planar
    calls, planned_at_key = count_planning(gate, monkeypatch)
    app = make_app(arm, gate)
    async with app.run_test(size=SIZE) as pilot:
        await ready_and_planned(pilot, app, calls)
        for key in ("right", "left", "up"):   # the first one opens the session
            before = calls[0]
            if key == "right":
                await start_session(pilot, app, gate)
                x0, y0 = xy_from_counts(moves(gate)[-1][2])
            else:
                await pilot.press(key)
                await idle(pilot, app, gate)
            # the four steps of the frame, planned again from the pose the step ended at
            assert await until(pilot, lambda: calls[0] >= before + 4)
        assert planned_at_key == [0, 0, 0]
        x, y = xy_from_counts(moves(gate)[-1][2])
        assert x - x0 == pytest.approx(-1.0, abs=0.2) and y - y0 == pytest.approx(1.0, abs=0.2)


async def test_a_session_step_is_shown_once_its_first_setpoint_is_sent(tmp_path):
    arm = builtin_arm("planar-bench")
    # a 1 mm step lasts ~4 s here: the pilot's press waits up to 2 s for an idle process
    # while the arm moves, and the step must still be running when it returns
    gate = Interlock.open(arm, "sim", journal=False, time_scale=0.02)
    try:
        app = make_app(arm, gate)
        async with app.run_test(size=SIZE) as pilot:
            await ready(pilot, app)
            await start_session(pilot, app, gate)
            status = app.jog_screen.query_one(LinkStatus)
            await pilot.press("right")
            assert await until(pilot, lambda: "motion: jog x +1 mm" in status.words)
            assert moves(gate) and gate.state().queued > 0   # shown while it runs
            await idle(pilot, app, gate)
    finally:
        gate.close()


async def test_keys_during_the_question_never_move_later(planar):
    arm, gate = planar
    app = make_app(arm, gate)
    async with app.run_test(size=SIZE) as pilot:
        await ready(pilot, app)
        asked = count_questions(app)
        await pilot.press("right")
        assert await until(pilot, lambda: isinstance(app.screen, ConfirmMoveScreen))
        await pilot.press("right", "left", "up", "right")
        await pilot.press("n")
        await idle(pilot, app, gate)
        await pilot.pause(2 * DEADMAN_S)
        assert moves(gate) == [] and len(asked) == 1
        assert app.session_view() is None


@pytest.mark.parametrize("keys, words", [
    (("space",), "stop"),
    (("j",), "frame"),
    (("3",), "larger step"),
])
async def test_a_stop_or_a_change_ends_the_session_and_the_next_jog_asks(planar, keys, words):
    arm, gate = planar
    app = make_app(arm, gate)
    async with app.run_test(size=SIZE) as pilot:
        await ready(pilot, app)
        asked = count_questions(app)
        await start_session(pilot, app, gate)
        await pilot.press(*keys)
        assert await until(pilot, lambda: app.session_view() is None)
        assert words in gate.jog_session_ended()
        sent = len(moves(gate))
        await pilot.press("up" if "j" in keys else "right")
        assert await until(pilot, lambda: isinstance(app.screen, ConfirmMoveScreen))
        assert len(asked) == 2 and len(moves(gate)) == sent
        await pilot.press("n")
        await idle(pilot, app, gate)


async def test_status_and_sketch_show_the_envelope_and_time_left(planar):
    arm, gate = planar
    app = make_app(arm, gate)
    async with app.run_test(size=SIZE) as pilot:
        await ready(pilot, app)
        status = app.jog_screen.query_one(LinkStatus)
        assert await until(pilot, lambda: "jog session: none" in status.words)
        await start_session(pilot, app, gate)
        assert await until(pilot, lambda: "s left" in status.words and "box +/-25" in status.words)
        sketch = app.jog_screen.query_one(PoseSketch)
        assert await until(pilot, lambda: any("~" in line for line in sketch.lines[:-3]))
        assert any("jog session" in line and " s" in line for line in sketch.lines)


async def test_a_typed_target_still_asks_inside_a_session(planar):
    arm, gate = planar
    app = make_app(arm, gate)
    async with app.run_test(size=SIZE) as pilot:
        await ready(pilot, app)
        asked = count_questions(app)
        await start_session(pilot, app, gate)
        sent = len(moves(gate))
        app.set_target((200.0, 150.0))
        await pilot.press("m")
        assert await until(pilot, lambda: isinstance(app.screen, ConfirmMoveScreen))
        assert len(asked) == 2 and "jog session" not in " ".join(asked[1])
        await pilot.press("n")
        await idle(pilot, app, gate)
        assert len(moves(gate)) == sent
