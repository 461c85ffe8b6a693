"""`benchjog check` and `benchjog run`: the dry run against the planner, problems with
their step numbers, and runs on the simulated arm (yes moves, anything else does not,
an e-stop halts at once and names the step). CONTRACT.md gives the exit codes."""

from __future__ import annotations

import contextlib

import io
import json
import math
import threading
from pathlib import Path

import pytest

from benchjog.console.cell.armfile import builtin_arm
from benchjog.console.cli.main import main
from benchjog.console.cli.cmd_program import (exit_code_of, load_program, plan_program, result_words,
                                 run_program)
from benchjog.console.cli.confirm import PromptConfirmer
from benchjog.console.cell.points import PointBook, TaughtPoint
from benchjog.console.cell.programs import DwellStep, MoveStep, OutputStep, Program
from benchjog.drivers.calibration import counts_from_joints
from benchjog.drivers.interlock import Confirmer, Interlock
from benchjog.kinematics.frames import UserFrame
from benchjog.kinematics.model import Branch
from benchjog.kinematics.planner import plan_move
from benchjog.kinematics.solve import joints_from_tool

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "examples" / "bench-cell" / "program.toml"
ARM = builtin_arm("planar-bench")


def ik(target, branch=Branch.ELBOW_DOWN):
    return joints_from_tool(ARM, target).solution(branch).joints


def small_cell(tmp_path: Path, *, far: bool = False) -> Path:
    """Two short moves and an output: about a second of motion in real time."""
    book = PointBook(ARM, path=tmp_path / "pts.toml")
    book.set_frame(UserFrame("plate", 150.0, 150.0, 0.0), taught="2026-11-30T10:00:00Z")
    book.teach("a", ik((215.0, 165.0)))
    book.teach("b", ik((225.0, 150.0)), frame="plate")  # (75, 0) in the plate
    book.save()
    program = Program("small", "pts.toml", [MoveStep("a", "joint", 100.0), OutputStep(2, True),
                                            MoveStep("b", "line", 100.0)])
    if far:
        # teach the plate again 200 mm further out: b, (75, 0) in the plate, lands at
        # base (425, 150), |r| = 450.7 mm, beyond the 220 + 160 = 380 mm reach
        change = book.set_frame(UserFrame("plate", 350.0, 150.0, 0.0))
        assert [name for name, _ in change.unreachable] == ["b"]
        book.save()
    return program.save(tmp_path / "small.toml")


def cli(monkeypatch, capsys, stdin: str, *argv: str):
    monkeypatch.setattr("sys.stdin", io.StringIO(stdin))
    code = main(list(argv))
    out = capsys.readouterr()
    return code, out.out, out.err


# --- check -----------------------------------------------------------------------------

def test_demo_program_passes_check(monkeypatch, capsys):
    code, out, err = cli(monkeypatch, capsys, "", "check", str(DEMO))
    assert code == 0, out + err
    assert "problems: none" in out


def test_demo_dry_run_numbers_match_the_planner():
    program, book = load_program(DEMO, ARM)
    report = plan_program(ARM, program, book)
    assert report.ok
    # replay the planner independently, each move from the previous move's end,
    # the first from the home pose (CONTRACT.md: the simulated arm starts there)
    here = ARM.home_joints
    total = 0.0
    for s, step in zip(report.steps, program.steps):
        if isinstance(step, MoveStep):
            point = book.point(step.point)
            plan = plan_move(ARM, here, book.base_target(point), branch=point.branch,
                             path=step.path, speed_pct=step.speed_pct)
            assert plan.ok
            assert s.duration_s == pytest.approx(plan.summary.duration_s)
            assert s.summary.segment_count == len(plan.segments)
            assert s.summary.zone_clearance_mm == pytest.approx(plan.summary.zone_clearance_mm)
            assert s.summary.end_joints == pytest.approx(point.joints, abs=1e-6)
            here = plan.segments[-1].joints
            total += plan.summary.duration_s
        elif isinstance(step, DwellStep):
            assert s.duration_s == step.seconds
            total += step.seconds
        else:
            assert s.duration_s == 0.0
    assert report.duration_s == pytest.approx(total)
    # the closest approaches are the minima over the steps' summaries
    closest = report.closest()
    gaps = [s.summary.zone_clearance_mm["parts-tray"] for s in report.steps if s.summary]
    assert closest["zones"]["parts-tray"][0] == min(gaps)
    singular = [s.summary.singular_distance_rad for s in report.steps if s.summary]
    assert closest["singular"][0] == min(singular)


def test_check_json_shape_is_consistent(monkeypatch, capsys):
    code, out, _ = cli(monkeypatch, capsys, "", "check", str(DEMO), "--json")
    assert code == 0
    data = json.loads(out)
    assert data["ok"] is True and data["arm"] == "planar-bench"
    steps = data["steps"]
    assert [s["step"] for s in steps] == list(range(1, len(steps) + 1))
    assert {s["action"] for s in steps} == {"move", "dwell", "output"}
    total = sum(s["duration_s"] for s in steps)
    assert data["total"]["duration_s"] == pytest.approx(total, abs=1e-5)
    moves = [s for s in steps if s["action"] == "move"]
    assert data["total"]["segments"] == sum(s["plan"]["segment_count"] for s in moves)
    assert data["total"]["problems"] == [] and data["total"]["branch_changes"] == []
    zone = data["total"]["closest"]["zones"][0]
    assert zone["zone"] == "parts-tray"
    assert zone["clearance_mm"] == pytest.approx(
        min(s["plan"]["zone_clearance_mm"]["parts-tray"] for s in moves), abs=1e-5)
    # degrees at the edge: the first move starts at the home pose (0, 90 deg)
    assert moves[0]["plan"]["start_joints"] == pytest.approx([0.0, 90.0])


def test_unreachable_step_is_reported_with_its_number(monkeypatch, capsys, tmp_path):
    path = small_cell(tmp_path, far=True)
    code, out, err = cli(monkeypatch, capsys, "", "check", str(path))
    assert code == 1, out + err
    assert "step 3: " in out and "reach" in out
    assert "step 1: " not in out.split("problems:")[1]
    code, out, _ = cli(monkeypatch, capsys, "", "check", str(path), "--json")
    data = json.loads(out)
    assert code == 1 and data["ok"] is False
    assert [s["step"] for s in data["steps"] if s["problems"]] == [3]
    assert data["total"]["problems"][0].startswith("step 3: ")


def test_unknown_point_and_keep_out_zone_are_problems(tmp_path):
    book = PointBook(ARM, path=tmp_path / "pts.toml")
    book.teach("a", ik((215.0, 165.0)))
    book.save()
    # a tool target inside the parts tray (x -300..-200, y -70..70)
    into_tray = PointBook.load(tmp_path / "pts.toml", ARM)
    into_tray.points.append(TaughtPoint("tray", (-250.0, 0.0), (0.0, 0.0), Branch.ELBOW_DOWN))
    program = Program("p", "pts.toml", [MoveStep("a"), MoveStep("ghost"), DwellStep(0.1),
                                        MoveStep("tray")], path=tmp_path / "p.toml")
    report = plan_program(ARM, program, into_tray)
    numbers = sorted({int(p.split(":")[0].split()[1]) for p in report.problems})
    assert numbers == [2, 4]
    assert "no point named 'ghost'" in report.problems[0]
    assert any("parts-tray" in p for p in report.problems if p.startswith("step 4"))


def test_bad_files_exit_2_with_one_line(monkeypatch, capsys, tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text('[program]\nkind = "benchjog-program"\nversion = 1\nname = "x"\n'
                   'points = "p.toml"\n[[steps]]\naction = "dwell"\nseconds = -2\n')
    code, out, err = cli(monkeypatch, capsys, "", "check", str(bad))
    assert code == 2 and out == ""
    assert err.count("\n") == 1 and "step 1: seconds" in err and "Traceback" not in err
    bad.write_text(bad.read_text().replace("seconds = -2", "seconds = 2"))
    code, _, err = cli(monkeypatch, capsys, "", "check", str(bad))  # p.toml is missing
    assert code == 2 and "p.toml" in err and "cannot read" in err
    code, _, err = cli(monkeypatch, capsys, "y\n", "run", str(tmp_path / "none.toml"))
    assert code == 2 and "none.toml" in err


def test_arm_option_after_the_subcommand(monkeypatch, capsys):
    code, _, err = cli(monkeypatch, capsys, "", "check", str(DEMO), "--arm", "scara-bench")
    assert code == 2 and "planar-bench" in err  # the demo program is for the planar arm


# --- run -------------------------------------------------------------------------------

@pytest.mark.parametrize("answer", ["y\n", "YES\n"])
def test_run_yes_moves_to_the_last_point(monkeypatch, capsys, tmp_path, answer):
    path = small_cell(tmp_path)
    seen = {}
    real_open = Interlock.open

    def spy_open(*args, **kwargs):
        seen["gate"] = real_open(*args, **kwargs)
        return seen["gate"]

    monkeypatch.setattr(Interlock, "open", spy_open)
    code, out, err = cli(monkeypatch, capsys, answer, "run", str(path),
                         "--journal", str(tmp_path / "j.jsonl"))
    assert code == 0, out + err
    assert out.startswith("done:") and "Run this program? [y/N]" in err
    gate = seen["gate"]
    moves = [c for c in gate.sim.commands if c[0] == "MOVE"]
    assert moves and ("OUT", 2, 1) in gate.sim.commands
    # the last MOVE ends on point b: its joints in controller counts
    book = PointBook.load(tmp_path / "pts.toml", ARM)
    assert tuple(moves[-1][2]) == tuple(counts_from_joints(ARM, book.point("b").joints))


@pytest.mark.parametrize("answer", ["n\n", "", "yess\n", "no\n", " \n"])
def test_run_anything_but_yes_moves_nothing(monkeypatch, capsys, tmp_path, answer):
    path = small_cell(tmp_path)
    seen = {}
    real_open = Interlock.open
    monkeypatch.setattr(Interlock, "open",
                        lambda *a, **k: seen.setdefault("gate", real_open(*a, **k)))
    code, out, err = cli(monkeypatch, capsys, answer, "run", str(path),
                         "--journal", str(tmp_path / "j.jsonl"))
    assert code == 1 and "cancelled" in out
    assert [c for c in seen["gate"].sim.commands if c[0] in ("MOVE", "OUT")] == []


def test_run_refuses_a_program_with_problems_without_asking(monkeypatch, capsys, tmp_path):
    path = small_cell(tmp_path, far=True)
    code, out, err = cli(monkeypatch, capsys, "y\n", "run", str(path),
                         "--journal", str(tmp_path / "j.jsonl"))
    assert code == 1 and "refused" in out and "step 3" in out
    assert "[y/N]" not in err


def test_demo_runs_on_a_fast_simulator_and_ends_on_the_last_point():
    program, book = load_program(DEMO, ARM)
    with Interlock.open(ARM, "sim", journal=False, time_scale=25.0) as gate:
        gate.enable()
        confirmer = PromptConfirmer(ARM, "Run this program?", stdin=io.StringIO("y\n"),
                                    out=io.StringIO())
        report, result = run_program(gate, ARM, program, book, confirmer)
        assert result.completed, result.detail
        last = next(s for s in reversed(program.steps) if isinstance(s, MoveStep))
        final = gate.state().joints
        # within one controller count (planar-bench: 40 counts per degree)
        assert final == pytest.approx(book.point(last.point).joints, abs=math.radians(1 / 40) + 1e-9)
        outs = [c for c in gate.sim.commands if c[0] == "OUT"]
        assert outs == [("OUT", 0, 1), ("OUT", 0, 0)]


def test_estop_halts_the_program_at_once_and_names_the_step():
    program, book = load_program(DEMO, ARM)
    with Interlock.open(ARM, "sim", journal=False) as gate:
        gate.enable()
        confirmer = PromptConfirmer(ARM, stdin=io.StringIO("y\n"), out=io.StringIO())
        pressed = {}

        def press():
            pressed["at"] = len(gate.sim.commands)
            gate.sim.inject_estop()

        timer = threading.Timer(0.3, press)  # during step 1 (0.67 s of motion)
        timer.start()
        try:
            report, result = run_program(gate, ARM, program, book, confirmer)
        finally:
            timer.cancel()
        assert result.outcome == "halted" and not result.completed
        assert result.step == 0  # action index: step 1
        assert "estop" in result.detail.lower() or "e-stop" in result.detail  # the event, or a MOVE refused for it
        after = gate.sim.commands[pressed["at"]:]
        assert [c for c in after if c[0] in ("MOVE", "OUT")] == []
        assert gate.state().latched == "estop"
        words = result_words(report, result)
        assert "at step 1 (move to clear" in words and words.count("at step") == 1, words
        assert exit_code_of(result) == 3


def test_stop_from_another_thread_reports_the_step():
    program, book = load_program(DEMO, ARM)
    with Interlock.open(ARM, "sim", journal=False, time_scale=10.0) as gate:
        gate.enable()
        confirmer = PromptConfirmer(ARM, stdin=io.StringIO("y\n"), out=io.StringIO())
        box = {}
        worker = threading.Thread(target=lambda: box.update(
            out=run_program(gate, ARM, program, book, confirmer)))
        gate.pause()  # holds before the first action
        worker.start()
        threading.Event().wait(0.3)
        assert [c for c in gate.sim.commands if c[0] == "MOVE"] == []  # paused: nothing sent
        gate.stop()
        worker.join(10)
        report, result = box["out"]
        assert result.outcome == "stopped" and result.step == 0


# --- the console's teach screen ------------------------------------------------------

class _Yes(PromptConfirmer):
    def __init__(self):
        super().__init__(ARM, stdin=io.StringIO("y\n"), out=io.StringIO())


async def test_teach_screen_teaches_builds_checks_and_moves(tmp_path):
    from benchjog.console.tui.app import make_app
    from benchjog.console.cell.points import PointBook
    from benchjog.console.cell.safe_files import FileLocked

    pts, prog = tmp_path / "pts.toml", tmp_path / "prog.toml"
    with Interlock.open(ARM, "sim", journal=False, time_scale=20.0) as gate:
        gate.enable()
        app = make_app(ARM, gate, points_path=pts, program_path=prog)
        async with app.run_test(size=(120, 40)) as pilot:
            await pilot.pause()
            await pilot.press("t")
            await pilot.pause()
            screen = app.screen
            assert type(screen).__name__ == "TeachScreen"
            # a second console cannot write the files while this screen holds them
            with pytest.raises(FileLocked):
                PointBook.open(pts, ARM)
            # teach the home pose as "start": the dialog takes the name
            await pilot.press("a")
            await pilot.pause()
            app.screen.query_one("#ask-name").value = "start"
            await pilot.press("enter")
            await pilot.pause()
            assert screen.book.names == ["start"]
            # move the arm elsewhere (outside the UI), frame origin there, then x point
            result = gate.execute(gate.propose_move((200.0, 200.0),
                                                    branch=Branch.ELBOW_DOWN), _Yes())
            assert result.completed, result.detail
            await pilot.press("f")
            await pilot.pause()
            app.screen.query_one("#ask-name").value = "plate"
            await pilot.press("enter")
            await pilot.pause()
            assert screen.frame_origin is not None
            result = gate.execute(gate.propose_move((260.0, 200.0), branch=Branch.ELBOW_DOWN),
                                  _Yes())
            assert result.completed, result.detail
            await pilot.press("f")
            await pilot.pause()
            frame = screen.book.frames["plate"]
            # origin (200, 200), x point (260, 200): angle 0 (within a controller count)
            assert (frame.origin_x, frame.origin_y) == pytest.approx((200.0, 200.0), abs=0.2)
            assert math.degrees(frame.angle_rad) == pytest.approx(0.0, abs=0.3)
            # teach the current pose in the plate frame, then build a two-step program
            await pilot.press("a")
            await pilot.pause()
            app.screen.query_one("#ask-name").value = "edge"
            app.screen.query_one("#ask-frame").value = "plate"
            await pilot.press("enter")
            await pilot.pause()
            edge = screen.book.point("edge")
            assert edge.frame == "plate" and edge.cartesian == pytest.approx((60.0, 0.0), abs=0.2)
            screen.query_one("#points-table").move_cursor(row=0)
            await pilot.press("i")          # move to start
            screen.query_one("#points-table").move_cursor(row=1)
            await pilot.press("l", "i")     # a line move to edge
            await pilot.pause()
            assert [s.describe() for s in screen.program.steps] == [
                "move to start (joint path, 100 %)", "move to edge (line path, 100 %)"]
            await pilot.press("c")
            await pilot.pause()
            assert screen.report_text[-1] == "problems: none"
            # saved on every edit: the files load on their own
            assert Program.load(prog).steps == screen.program.steps
            assert PointBook.load(pts, ARM).names == ["start", "edge"]
            # delete asks: "n" keeps the point
            await pilot.press("d")
            await pilot.pause()
            await pilot.press("n")
            await pilot.pause()
            assert screen.book.has("edge")
            # go to start through the gate: the app's confirmation, "n" moves nothing
            screen.query_one("#points-table").move_cursor(row=0)
            before = len([c for c in gate.sim.commands if c[0] == "MOVE"])
            await pilot.press("g")
            await pilot.pause(0.3)
            assert type(app.screen).__name__ == "ConfirmMoveScreen"
            await pilot.press("n")
            await pilot.pause(0.3)
            assert len([c for c in gate.sim.commands if c[0] == "MOVE"]) == before
            assert "cancelled" in screen.status
            # run the program: one confirmation, "y" runs it to the last point
            await pilot.press("ctrl+r")
            await pilot.pause(0.3)
            assert type(app.screen).__name__ == "ConfirmMoveScreen"
            await pilot.press("y")
            for _ in range(100):
                await pilot.pause(0.05)
                if screen.busy is None:
                    break
            assert screen.status.startswith("program prog: done"), screen.status
            assert gate.state().joints == pytest.approx(edge.joints, abs=math.radians(1 / 40) + 1e-9)
            await pilot.press("escape")
            await pilot.pause()
        # the screen let go of its locks when it closed
        with PointBook.open(pts, ARM):
            pass


def test_scara_demo_plans_cleanly_from_home_and_from_its_clear_point():
    scara = builtin_arm("scara-bench")
    program, book = load_program(ROOT / "examples" / "scara-cell" / "program.toml", scara)
    assert book.warnings == []
    from_home = plan_program(scara, program, book)   # as `benchjog check` does
    assert from_home.ok, from_home.problems
    report = plan_program(scara, program, book, start_joints=book.point("clear").joints)
    assert report.ok, report.problems
    # the part turns a quarter turn between slot and outfeed: roll in the tray frame
    assert math.degrees(book.point("out").cartesian[3] - book.point("slot").cartesian[3]) \
        == pytest.approx(90.0)
    last = [s for s in report.steps if s.summary is not None][-1]
    assert last.summary.end_joints == pytest.approx(book.point("clear").joints, abs=1e-6)


@contextlib.asynccontextmanager
async def teach_screen_up(tmp_path):
    """The console on the simulated arm with the teach screen open: (app, pilot, gate)."""
    from benchjog.console.tui.app import make_app

    with Interlock.open(ARM, "sim", journal=False, time_scale=20.0) as gate:
        gate.enable()
        app = make_app(ARM, gate, points_path=tmp_path / "p.toml", program_path=tmp_path / "q.toml")
        async with app.run_test(size=(120, 40)) as pilot:
            await pilot.pause()
            await pilot.press("t")
            await pilot.pause()
            yield app, pilot, gate


async def test_the_teach_screen_keeps_a_half_taught_frame_across_visits(tmp_path):
    # Teaching a frame takes two poses with a jog in between: leaving the teach screen to
    # jog must not forget the origin already taught.
    async with teach_screen_up(tmp_path) as (app, pilot, gate):
        teach = app.screen
        await pilot.press("f")                      # origin: the home pose
        await pilot.pause()
        await pilot.press("enter")                  # the suggested name, "fixture"
        await pilot.pause()
        await pilot.press("escape")                 # back to jog: move 10 mm along +x
        await pilot.pause()
        assert gate.execute(gate.propose_jog("x", 10.0), _Yes()).completed
        await pilot.press("t")
        await pilot.pause()
        assert app.screen is teach
        await pilot.press("f")                      # the point on +x: the frame is done
        for _ in range(100):
            await pilot.pause(0.03)
            if teach.book.frames:
                break
        frame = teach.book.frames["fixture"]
        # origin at the home tool point (220, 160), +x along base +x: angle 0, less what
        # whole controller counts (40 per degree) put into the measured poses: a few
        # hundredths of a mm across 10 mm, some 0.003 rad
        assert (frame.origin_x, frame.origin_y) == pytest.approx((220.0, 160.0), abs=0.05)
        assert frame.angle_rad == pytest.approx(0.0, abs=0.01)


class _Yes(Confirmer):
    def confirm(self, proposal):
        return True


async def test_the_teach_screen_shows_a_latched_estop(tmp_path):
    from textual.widgets import Static

    async with teach_screen_up(tmp_path) as (app, pilot, gate):
        alarm = app.screen.query_one("#teach-alarm", Static)
        gate.sim.inject_estop()
        for _ in range(100):
            await pilot.pause(0.03)
            if alarm.display and "ESTOP" in str(alarm.render()):
                break
        assert alarm.display and "ESTOP" in str(alarm.render())
