"""A dry run is the run: `check --start` and the console's `c` plan from the pose the
run starts from, say which pose that was, and the run then plans the same; a new run
clears the old report, shows its progress and logs its result; teaching stores the
commanded pose and shows a measured difference beyond the interlock's tolerance."""

from __future__ import annotations

import io
import json
import math
import re
from pathlib import Path

import pytest

from benchjog.console.cell.armfile import builtin_arm
from benchjog.console.cell.program_runs import load_program, plan_program
from benchjog.console.cli.main import main
from benchjog.console.tui.screens.teach import RunClock
from benchjog.drivers.interlock import START_TOL_RAD, Confirmer, Interlock

import console_helpers

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "examples" / "bench-cell" / "program.toml"
ARM = builtin_arm("planar-bench")
# A start pose, elbow up and turned towards the parts tray, from which the demo's first
# move (a joint move to "clear") sweeps the elbow through the tray's 12 mm clearance
# (parts-tray: x -300..-200, y -70..70 in console/cell/arms/planar-bench.toml); from
# home the same move is clear. Found by planning the demo from a grid of start poses.
NEAR_TRAY_DEG = (-135.0, -140.0)


class Yes(Confirmer):
    def confirm(self, proposal):
        return True


def cli(monkeypatch, capsys, *argv: str):
    monkeypatch.setattr("sys.stdin", io.StringIO(""))
    code = main(list(argv))
    out = capsys.readouterr()
    return code, out.out, out.err


def test_check_says_which_start_pose_it_used(monkeypatch, capsys):
    code, out, err = cli(monkeypatch, capsys, "check", str(DEMO))
    assert code == 0, err
    assert "planned from the home pose (shoulder 0.00 deg, elbow 90.00 deg)" in out
    start = ",".join(f"{v:g}" for v in NEAR_TRAY_DEG)
    # a value that starts with "-" goes with "=" (argparse would take it for an option)
    code, out, err = cli(monkeypatch, capsys, "check", str(DEMO), f"--start={start}", "--json")
    assert code == 1, err                    # the problem the run would meet
    doc = json.loads(out)
    assert doc["start"] == "the given joints"
    assert doc["start_joints"] == pytest.approx(list(NEAR_TRAY_DEG))
    assert any("step 1:" in p and "parts-tray" in p for p in doc["total"]["problems"])
    code, out, err = cli(monkeypatch, capsys, "check", str(DEMO), "--start", "clear")
    assert code == 0, err
    assert "planned from taught point 'clear'" in out


@pytest.mark.parametrize("bad, words", [("x", "is not 'home'"), ("1,2,3", "has 2 joints"),
                                        ("nan,1", "not a finite number"), ("1,,2", "is not")])
def test_check_start_bad_input_is_one_line_exit_2(monkeypatch, capsys, bad, words):
    code, out, err = cli(monkeypatch, capsys, "check", str(DEMO), "--start", bad)
    assert code == 2 and out == ""
    assert err.count("\n") == 1 and words in err and "Traceback" not in err


def test_the_run_meets_what_check_from_its_start_pose_reports():
    # the run plans from where the arm is; check --start of that pose must agree
    program, book = load_program(DEMO, ARM)
    with Interlock.open(ARM, "sim", journal=False, time_scale=50.0) as gate:
        gate.enable()
        for deg in ((0.0, -140.0), NEAR_TRAY_DEG):   # round the tray, not through it
            proposal = gate.propose_joints(tuple(math.radians(v) for v in deg))
            assert gate.execute(proposal, Yes()).completed
        here = gate.state().joints
        from benchjog.console.cell.program_runs import run_program
        report, result = run_program(gate, ARM, program, book, Yes())
        assert result.outcome == "refused" and "step 1" in result.detail
        assert report.start_words == "the arm's current pose"
        dry = plan_program(ARM, program, book, here)
        assert [s.problems for s in dry.steps] == [s.problems for s in report.steps]
        assert plan_program(ARM, program, book).ok   # from home, the same program is clean


def test_run_clock_counts_steps_and_leaves_out_pauses():
    now = [100.0]
    clock = RunClock(clock=lambda: now[0])
    clock.start([2.0, 0.5, 3.0])
    assert clock.progress() == (1, 3, 5.5)
    now[0] = 102.2
    n, total, left = clock.progress()
    assert (n, total) == (2, 3) and left == pytest.approx(3.3)
    clock.hold(True)
    now[0] = 110.0                       # paused 7.8 s: nothing advances
    assert clock.progress()[0] == 2 and clock.progress()[2] == pytest.approx(3.3)
    clock.hold(False)
    now[0] = 111.0
    assert clock.progress()[0] == 3 and clock.progress()[2] == pytest.approx(2.3)
    now[0] = 200.0
    assert clock.progress() == (3, 3, 0.0)


async def until(pilot, condition, tries: int = 300) -> bool:
    return await console_helpers.until(pilot, condition, tries)   # this file's patience


async def test_console_dry_run_plans_from_the_current_pose_and_runs_log(tmp_path):
    from benchjog.console.tui.app import make_app
    from benchjog.console.tui.screens.confirm import ConfirmMoveScreen
    from benchjog.console.tui.widgets.status import EventLog

    program, book = load_program(DEMO, ARM)
    # the demo cell's files, copied, so the teach screen can lock and edit them
    for name in ("points.toml", "program.toml"):
        (tmp_path / name).write_text((DEMO.parent / name).read_text())
    with Interlock.open(ARM, "sim", journal=False, time_scale=50.0) as gate:
        gate.enable()
        for deg in ((0.0, -140.0), NEAR_TRAY_DEG):
            assert gate.execute(gate.propose_joints(tuple(math.radians(v) for v in deg)),
                                Yes()).completed
        app = make_app(ARM, gate, points_path=tmp_path / "points.toml",
                       program_path=tmp_path / "program.toml")
        async with app.run_test(size=(80, 24)) as pilot:
            await until(pilot, lambda: app.state is not None)
            await pilot.press("t")
            assert await until(pilot, lambda: type(app.screen).__name__ == "TeachScreen")
            teach = app.screen
            await pilot.press("c")
            assert await until(pilot, lambda: teach.report_text)
            assert teach.report_text[1].startswith("planned from the arm's current pose")
            assert any("PROBLEM" in line and "parts-tray" in line for line in teach.report_text)
            assert "problems: " in teach.status and "(first: step 1:" in teach.status
            # the run refuses at step 1, as the dry run said; the events panel logs it
            await pilot.press("ctrl+r")
            assert await until(pilot, lambda: teach.busy is None and "refused" in teach.status)
            assert "step 1" in teach.status
            log = app.jog_screen.query_one(EventLog)
            assert any("refused" in line and "program" in line for line in log.entries)
            # back home, the dry run is clean and a run goes through: the old report
            # is cleared when it starts, progress shows while it runs
            for deg in ((0.0, -140.0), (0.0, 90.0)):    # back the way it came
                assert gate.execute(gate.propose_joints(tuple(math.radians(v) for v in deg)),
                                    Yes()).completed
            await pilot.press("c")
            assert await until(pilot, lambda: teach.report_text[-1] == "problems: none")
            await pilot.press("ctrl+r")
            assert await until(pilot, lambda: isinstance(app.screen, ConfirmMoveScreen))
            assert teach.report_text == []
            await pilot.press("y")
            seen: list[str] = []

            def ended() -> bool:
                words = teach.files_words()
                if "step " in words:
                    seen.append(words)
                return teach.busy is None

            assert await until(pilot, ended, tries=600)
            n_steps = len(program.steps)
            assert seen and re.search(rf"step \d+ of {n_steps}, about [\d.]+ s left", seen[-1])
            assert teach.status.startswith(f"program {program.name}: done"), teach.status
            assert any("done" in line and "program" in line for line in log.entries)
            assert "in progress" not in teach.files_words()


async def test_teaching_stores_the_commanded_pose(tmp_path):
    from benchjog.console.tui.app import make_app

    with Interlock.open(ARM, "sim", journal=False, time_scale=50.0) as gate:
        app = make_app(ARM, gate, points_path=tmp_path / "p.toml",
                       program_path=tmp_path / "q.toml")
        async with app.run_test(size=(80, 24)) as pilot:
            await until(pilot, lambda: app.state is not None)
            await pilot.press("e")
            assert await until(pilot, app.ready)
            await pilot.press("3", "right")          # a 10 mm jog in +x, confirmed
            assert await until(pilot, lambda: type(app.screen).__name__ == "ConfirmMoveScreen")
            await pilot.press("y")
            assert await until(pilot, lambda: app.busy is None and app.last_end_joints)
            commanded = app.last_end_joints
            await pilot.press("t")
            assert await until(pilot, lambda: type(app.screen).__name__ == "TeachScreen")
            teach = app.screen
            measured = gate.state().joints
            await pilot.press("a")
            await pilot.pause(0.1)
            await pilot.press("enter")
            assert await until(pilot, lambda: teach.book.points)
            point = teach.book.points[0]
            # stored: the commanded joints (the sim's counts round the measured ones,
            # 40 counts per degree in planar-bench.toml)
            assert point.joints == pytest.approx(commanded, abs=1e-9)
            differs = any(abs(m - c) > START_TOL_RAD for m, c in zip(measured, commanded))
            assert ("measured differs by" in teach.status) == differs
            assert "commanded pose" in teach.status


# --- programs and points files name their arm ------------------------------------------

SCARA_DEMO = ROOT / "examples" / "scara-cell" / "program.toml"


def test_check_uses_the_arm_the_program_names(monkeypatch, capsys):
    code, out, err = cli(monkeypatch, capsys, "check", str(SCARA_DEMO))
    assert code == 0, err
    assert "on arm scara-bench" in out


@pytest.mark.parametrize("where", ["before", "after"])
def test_a_mismatched_arm_is_one_line_naming_the_wanted_arm(monkeypatch, capsys, where):
    argv = (["--arm", "planar-bench", "check", str(SCARA_DEMO)] if where == "before" else
            ["check", str(SCARA_DEMO), "--arm", "planar-bench"])
    code, out, err = cli(monkeypatch, capsys, *argv)
    assert code == 2 and out == ""
    assert err.count("\n") == 1 and "'scara-bench'" in err and "Traceback" not in err


def test_points_file_names_the_arm_when_the_program_does_not(tmp_path, monkeypatch, capsys):
    # an older program without arm = ...: the points file's [file] arm decides
    text = SCARA_DEMO.read_text().replace('arm = "scara-bench"\n', "")
    (tmp_path / "program.toml").write_text(text)
    (tmp_path / "points.toml").write_text((SCARA_DEMO.parent / "points.toml").read_text())
    code, out, err = cli(monkeypatch, capsys, "check", str(tmp_path / "program.toml"))
    assert code == 0, err
    code, out, err = cli(monkeypatch, capsys, "check", str(tmp_path / "program.toml"),
                         "--arm", "planar-bench")
    assert code == 2 and "points.toml" in err and "'scara-bench'" in err


def test_program_and_points_naming_different_arms_is_an_error(tmp_path, monkeypatch, capsys):
    text = SCARA_DEMO.read_text().replace('arm = "scara-bench"', 'arm = "planar-bench"')
    (tmp_path / "program.toml").write_text(text)
    (tmp_path / "points.toml").write_text((SCARA_DEMO.parent / "points.toml").read_text())
    code, out, err = cli(monkeypatch, capsys, "check", str(tmp_path / "program.toml"))
    assert code == 2 and "'scara-bench'" in err and "'planar-bench'" in err


def test_an_arm_neither_built_in_nor_a_file_says_to_give_it(tmp_path, monkeypatch, capsys):
    text = SCARA_DEMO.read_text().replace('arm = "scara-bench"', 'arm = "cell-7-arm"')
    (tmp_path / "program.toml").write_text(text)
    points = (SCARA_DEMO.parent / "points.toml").read_text().replace('"scara-bench"',
                                                                     '"cell-7-arm"')
    (tmp_path / "points.toml").write_text(points)
    code, out, err = cli(monkeypatch, capsys, "check", str(tmp_path / "program.toml"))
    assert code == 2 and "'cell-7-arm'" in err and "--arm" in err


def test_a_program_the_console_starts_names_its_arm(tmp_path):
    from benchjog.console.cell.programs import Program, arm_for_files
    from benchjog.console.cell.armfile import load_arm

    program = Program("new", "points.toml", path=tmp_path / "program.toml", arm="scara-bench")
    program.save()
    assert Program.load(tmp_path / "program.toml").arm == "scara-bench"
    assert arm_for_files(None, tmp_path / "program.toml", None, load_arm).name == "scara-bench"
    assert arm_for_files(None, tmp_path / "none.toml", None, load_arm).name == "planar-bench"


async def test_teach_from_the_jog_screen_with_one_key(tmp_path):
    from benchjog.console.cell.points import PointBook
    from benchjog.console.tui.app import make_app
    from benchjog.console.tui.screens.jog import JogScreen

    points = tmp_path / "p.toml"
    with Interlock.open(ARM, "sim", journal=False, time_scale=50.0) as gate:
        app = make_app(ARM, gate, points_path=points, program_path=tmp_path / "q.toml")
        async with app.run_test(size=(80, 24)) as pilot:
            await until(pilot, lambda: app.state is not None)
            await pilot.press("e")
            assert await until(pilot, app.ready)
            for n, key in enumerate(("right", "up")):
                before = app.last_end_joints
                await pilot.press("3", key)
                if n == 0:   # the first jog asks once for the jog session; the next is inside it
                    assert await until(pilot, lambda: type(app.screen).__name__ ==
                                       "ConfirmMoveScreen")
                    await pilot.press("y")
                assert await until(pilot, lambda: app.busy is None and app.last_end_joints
                                   and app.last_end_joints != before)
                await pilot.press("a")
                await pilot.pause(0.1)
                assert isinstance(app.screen, JogScreen)   # no screen change
            assert "taught p2 at the commanded pose (saved)" in app.message
            # saved at once: another reader sees both, at the commanded poses
            # (home tool point (220, 160) + 10 mm x, then + 10 mm y: 2R FK, from memory)
            book = PointBook.load(points, ARM)
            assert book.names == ["p1", "p2"]
            assert book.point("p1").cartesian == pytest.approx((230.0, 160.0), abs=1e-6)
            assert book.point("p2").cartesian == pytest.approx((230.0, 170.0), abs=1e-6)
            # while the arm moves, the key refuses and says why
            await pilot.press("left")                         # inside the session: no question
            await pilot.press("a")
            if app.busy is not None:
                assert "not taught: the arm is moving" in app.message
            assert await until(pilot, lambda: app.busy is None)
            await pilot.press("t")                            # the teach screen shows them
            assert await until(pilot, lambda: type(app.screen).__name__ == "TeachScreen")
            assert app.screen.book.names[:2] == ["p1", "p2"]


async def test_a_second_console_says_why_it_is_read_only(tmp_path):
    from benchjog.console.cell.points import PointBook
    from benchjog.console.tui.app import make_app

    points, program = tmp_path / "p.toml", tmp_path / "q.toml"
    holder = PointBook.open(points, ARM)      # the first console's lock on the points
    try:
        with Interlock.open(ARM, "sim", journal=False) as gate:
            app = make_app(ARM, gate, points_path=points, program_path=program)
            async with app.run_test(size=(80, 24)) as pilot:
                await until(pilot, lambda: app.state is not None)
                await pilot.press("t")
                assert await until(pilot, lambda: type(app.screen).__name__ == "TeachScreen")
                teach = app.screen
                await pilot.press("a")                # teach: dimmed, and says why
                await pilot.pause(0.1)
                assert teach.status.startswith("teach: read only:") and "lock" in teach.status
                assert type(app.screen).__name__ == "TeachScreen"   # no dialog opened
                await pilot.press("escape", "a")      # from the jog screen too
                await pilot.pause(0.1)
                assert "not taught: read only" in app.message
    finally:
        holder.close()
    assert not points.exists()                    # nothing written
