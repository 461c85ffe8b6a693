"""TeachScreen: taught points, user frames and the program built from them.

Teach the arm's current pose as a named point (in the base frame or a user frame),
rename, update (teach again at the current pose), delete (asks), go to a point (through
the interlock: a proposal, the app's confirmation, then motion in a thread worker),
define a user frame from two taught poses, build the program (add the selected point as
a step, dwells and outputs, reorder, delete), dry-run it, run it, pause, resume, stop.

Every edit is saved at once (atomically, with a ``.bak`` of the previous version); the
points and program files are locked while the screen is open so a second console
cannot write them. The screen has no text field of its own (names are typed in small
dialogs), so the stop key always reaches it.

Big files are read off the UI thread (a thread worker) and a big points table is
filled a slice at a time, so the stop key, escape and help keep working while a book
of thousands of points opens; the keys that need the files are dimmed ("the points
file is still loading") until it has, and a point taught from the jog screen meanwhile
is taught as soon as the book is there.
"""

from __future__ import annotations

import asyncio
import math
import os
import threading
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from rich.text import Text
from textual import on, work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical, VerticalScroll
from textual.coordinate import Coordinate
from textual.message import Message
from textual.screen import ModalScreen, Screen
from textual.css.query import NoMatches
from textual.widgets import Button, DataTable, Footer, Input, Label, Select, Static

from benchjog.console.cell.program_runs import plan_program, report_lines, result_words, run_program
from benchjog.console.cell.points import BASE, PointBook, PointError
from benchjog.console.cell.programs import DwellStep, MoveStep, OutputStep, Program, ProgramError
from benchjog.console.cell.safe_files import FileError, FileLock
from benchjog.console.tui.widgets.joint_readout import readout_rows
from benchjog.console.tui.widgets.keys import DimmedKeyHints, KeyFooter, TooSmall
from benchjog.console.tui.widgets.sketch import PoseSketch
from benchjog.drivers.interlock import START_TOL_MM, START_TOL_RAD, Confirmer, Interlock
from benchjog.kinematics.model import Arm

SPEEDS = (100.0, 50.0, 25.0, 10.0)
# the commanded end of the last motion is the pose taught while the measured pose is
# this close to it (a following error); further away, the arm is elsewhere and the
# measured pose is taught (deg for revolute joints, mm for the quill)
FOLLOW_MAX_DEG = 2.0
FOLLOW_MAX_MM = 2.0
# files up to this size together are read on the UI thread as the screen opens: some
# 400 points, about 20 ms of PointBook.load (measured by hand, 250 points in 12 ms),
# so a small cell shows at once with no "loading" flash; bigger ones are read by a
# thread worker, with progress shown (tests/perf/bench_teach_load.py)
INLINE_LOAD_BYTES = 64 * 1024
# a big points table is filled FILL_CHUNK rows in the first turn of the UI thread's loop,
# twice as many in each next turn, up to FILL_CHUNK_MAX (every turn costs the table a
# pass over all its rows: longer slices, fewer passes; shorter, shorter waits for a key)
FILL_CHUNK = 200
FILL_CHUNK_MAX = 400
PROGRESS_EVERY_S = 0.1    # the loading progress is shown at most this often


class LoadGivenUp(Exception):
    """Raised inside a load when the screen has closed or the app is shutting down:
    nothing more is read, and the lock taken for it is released."""


@dataclass
class OpenedFiles:
    """What opening the points and program files gave: the book and the program, the
    program's lock (held, or None when it could not be taken), whether the screen is
    read only and why, and the status lines in the order they were said. Made without
    touching a widget (a thread worker may make it); applied on the UI thread."""

    book: PointBook | None = None
    program: Program | None = None
    program_lock: FileLock | None = None
    read_only: bool = False
    reason: str = ""
    said: list[tuple[str, bool]] = field(default_factory=list)

    def make_read_only(self, reason: str) -> None:
        self.read_only = True
        self.reason = self.reason or reason

    def say(self, words: str, error: bool = True) -> None:
        self.said.append((words, error))

    def release(self) -> None:
        """Give up the locks (the screen closed before these were used)."""
        if self.book is not None:
            self.book.close()
        if self.program_lock is not None:
            self.program_lock.release()


def same_items(shown: list | None, now: list) -> bool:
    """Whether a table shows these very items (points and steps are frozen: an edit
    puts a new object in the list, so identity tells a change)."""
    return shown is not None and len(shown) == len(now) and \
        all(a is b for a, b in zip(shown, now))


def one_line(exc: BaseException) -> str:
    text = str(exc).strip().splitlines()
    return text[0] if text else type(exc).__name__


class AskScreen(ModalScreen[dict | None]):
    """A small form: one Input per field (and an optional frame choice); enter or the
    OK button returns the values, escape returns None."""

    DEFAULT_CSS = """
    AskScreen { align: center middle; }
    #ask-box { width: 64; height: auto; border: thick $accent; padding: 1 2; background: $surface; }
    #ask-box Input, #ask-box Select { margin-bottom: 1; }
    """
    BINDINGS = [Binding("escape", "cancel", "cancel", tooltip="Close without changing anything",
                        id="ask.cancel")]

    def __init__(self, title: str, fields: list[tuple[str, str, str]],
                 frames: list[str] | None = None, frame: str = BASE):
        super().__init__()
        self.title_words = title
        self.fields = fields           # (key, label, initial value)
        self.frames = frames
        self.frame = frame

    def compose(self) -> ComposeResult:
        with Vertical(id="ask-box"):
            yield Label(Text(self.title_words, style="bold"))
            for key, label, value in self.fields:
                yield Label(label)
                yield Input(value=value, id=f"ask-{key}", placeholder=label)
            if self.frames is not None:
                yield Label("frame")
                yield Select([(f, f) for f in self.frames], value=self.frame, allow_blank=False,
                             id="ask-frame")
            yield Button("OK", id="ask-ok", variant="primary", tooltip="Use these values")
        yield Footer()

    def _values(self) -> dict:
        out = {key: self.query_one(f"#ask-{key}", Input).value for key, _, _ in self.fields}
        if self.frames is not None:
            out["frame"] = self.query_one("#ask-frame", Select).value
        return out

    @on(Input.Submitted)
    @on(Button.Pressed, "#ask-ok")
    def _submit(self) -> None:
        self.dismiss(self._values())

    def action_cancel(self) -> None:
        self.dismiss(None)


class YesNoScreen(ModalScreen[bool]):
    """A yes/no question for edits (not motion): y -> True, n/escape -> False."""

    DEFAULT_CSS = """
    YesNoScreen { align: center middle; }
    #yesno-box { width: 60; height: auto; border: thick $warning; padding: 1 2; background: $surface; }
    """
    BINDINGS = [
        Binding("y", "answer(True)", "yes", tooltip="Yes, do it", id="yesno.yes"),
        Binding("n", "answer(False)", "no", tooltip="No, leave it", id="yesno.no"),
        Binding("escape", "answer(False)", "cancel", tooltip="No, leave it", id="yesno.cancel"),
    ]

    def __init__(self, question: str):
        super().__init__()
        self.question = question

    def compose(self) -> ComposeResult:
        with Vertical(id="yesno-box"):
            yield Static(Text(self.question, style="bold"))
            yield Static("y: yes    n / escape: no")
        yield Footer()

    def action_answer(self, yes: bool) -> None:
        self.dismiss(bool(yes))


class RunClock:
    """Progress of a running program estimated from its plan: the step durations and
    the time since the yes, with paused time left out. The interlock reports no
    progress of its own; this is the console's estimate and says so ("about")."""

    def __init__(self, clock=None):
        import time
        self.clock = clock or time.monotonic
        self.durations_s: list[float] = []
        self.started_at: float | None = None
        self.held_at: float | None = None
        self.held_s = 0.0

    @property
    def started(self) -> bool:
        return self.started_at is not None

    def start(self, durations_s: list[float]) -> None:
        self.durations_s = list(durations_s)
        self.started_at = self.clock()

    def hold(self, on: bool) -> None:
        now = self.clock()
        if on and self.held_at is None:
            self.held_at = now
        elif not on and self.held_at is not None:
            self.held_s += now - self.held_at
            self.held_at = None

    def progress(self) -> tuple[int, int, float]:
        """(step number from 1, steps, seconds left)."""
        total = len(self.durations_s)
        if self.started_at is None or not total:
            return 0, total, 0.0
        now = self.held_at if self.held_at is not None else self.clock()
        elapsed = max(0.0, now - self.started_at - self.held_s)
        done = 0.0
        for n, d in enumerate(self.durations_s, 1):
            done += d
            if elapsed < done:
                return n, total, max(0.0, sum(self.durations_s) - elapsed)
        return total, total, 0.0

    def watching(self, confirmer: Confirmer, screen: "TeachScreen") -> Confirmer:
        """The confirmer, passed through: a yes starts this clock (on the UI thread,
        by a message) with the steps of the plan that was confirmed."""
        clock = self

        class _Watch(Confirmer):
            def confirm(self, proposal) -> bool:
                yes = confirmer.confirm(proposal)
                if yes:
                    durations = [a.summary.duration_s if hasattr(a, "summary") else
                                 getattr(a, "seconds", 0.0) for a in proposal.actions]
                    screen.post_message(TeachScreen.RunStarted(durations,
                                                               proposal.lines(screen.arm)))
                return yes

        return _Watch()


class TeachScreen(DimmedKeyHints, Screen):
    """Points, frames and the program. Built by the app's ``t`` key."""

    AUTO_FOCUS = "#points-table"
    HELP_NAME = "teach screen"
    # the footer's keys (binding ids): the most used; f1 lists every key
    FOOTER_KEYS = ("teach.stop", "teach.teach", "teach.goto", "teach.add-step", "teach.check",
                   "teach.run", "teach.pause", "teach.back", "app.help")

    BINDINGS = [
        Binding("space", "stop", "stop", priority=True, tooltip="Stop the arm at once (never asks)",
                id="teach.stop", key_display="spc"),
        Binding("a", "teach", "teach", tooltip="Teach the current pose as a new named point",
                id="teach.teach"),
        Binding("u", "update", "update", tooltip="Teach the selected point again at the current "
                "pose", id="teach.update"),
        Binding("n", "rename", "rename", tooltip="Rename the selected point (or edit its note)",
                id="teach.rename"),
        Binding("d", "delete_point", "delete", tooltip="Delete the selected point (asks)",
                id="teach.delete"),
        Binding("g", "goto", "go to", tooltip="Move to the selected point (plans, asks first)",
                id="teach.goto"),
        Binding("f", "frame", "frame", tooltip="Define a user frame: teach its origin, then a "
                "point on its +x axis", id="teach.frame"),
        Binding("i", "add_step", "add step", tooltip="Add the selected point as a move step "
                "after the selected step", id="teach.add-step"),
        Binding("l", "toggle_path", "path", tooltip="Path of new move steps: joint or line",
                id="teach.path"),
        Binding("v", "cycle_speed", "speed", tooltip="Speed of new move steps: 100, 50, 25, 10 %",
                id="teach.speed"),
        Binding("w", "add_dwell", "dwell", tooltip="Add a dwell step (seconds)", id="teach.dwell"),
        Binding("o", "add_output", "output", tooltip="Add an output step (channel 0..7, on/off)",
                id="teach.output"),
        Binding("left_square_bracket", "move_step(-1)", "step up", tooltip="Move the selected "
                "step up", id="teach.step-up"),
        Binding("right_square_bracket", "move_step(1)", "step down", tooltip="Move the selected "
                "step down", id="teach.step-down"),
        Binding("x", "delete_step", "del step", tooltip="Delete the selected program step",
                id="teach.delete-step"),
        Binding("c", "check", "check", tooltip="Dry-run the program and show the report",
                id="teach.check"),
        Binding("ctrl+r", "run", "run", tooltip="Run the whole program (shows the plan, asks once)",
                id="teach.run"),
        Binding("p", "pause", "pause", tooltip="Pause the running program before its next "
                "step, or resume it", id="teach.pause"),
        Binding("escape", "back", "back", tooltip="Back to the jog screen", id="teach.back"),
    ]

    @dataclass
    class RunStarted(Message):
        """The program was confirmed and starts (posted from the worker thread)."""

        durations_s: list[float]
        lines: list[str]

    @dataclass
    class MotionFinished(Message):
        """A go-to or a program run ended (posted from the worker thread)."""

        words: str
        outcome: str
        detail: str
        end_joints: tuple | None = None   # the commanded end when it completed

    def __init__(self, interlock: Interlock, arm: Arm, points_path: Path | str | None = None,
                 program_path: Path | str | None = None):
        super().__init__()
        self.interlock = interlock
        self.arm = arm
        self.points_path = Path(points_path) if points_path else Path("points.toml")
        self.program_path = Path(program_path) if program_path else Path("program.toml")
        self.book: PointBook | None = None
        self.program: Program | None = None
        self.program_lock = FileLock(self.program_path)
        self.read_only = False
        self.read_only_reason = ""
        self.busy: str | None = None       # what is moving, for the footer and the status
        self.paused = False
        self.new_path = "joint"
        self.new_speed = SPEEDS[0]
        self.frame_origin: tuple[str, tuple[float, ...]] | None = None  # a frame half taught
        self.status = ""
        self.status_error = False
        self.report_text: list[str] = []
        self.run_clock: RunClock | None = None
        # opening the files: "idle" (not yet), "loading" (a thread worker reads them),
        # "ready"; the worker hands its OpenedFiles over under _files_mutex, and
        # _close_files (unmount, app exit) releases whatever is held at that moment
        self.load_state = "idle"
        self.load_progress: tuple[str, int, int] = ("reading", 0, 0)
        self._files_mutex = threading.Lock()
        self._files_closed = False
        self._opened: OpenedFiles | None = None
        self._status_before_load: tuple[str, bool] = ("", False)
        self._queued_teaches: list[tuple[tuple[float, ...], str]] = []
        self._shown_points: list | None = None   # the points the table shows (as objects)
        self._shown_steps: list | None = None
        self._filling: tuple[int, int] | None = None  # (rows added, rows) while filling

    # --- life cycle ------------------------------------------------------------------

    def compose(self) -> ComposeResult:
        yield TooSmall()
        yield Static(id="teach-alarm")
        yield Static(id="teach-files")
        with Horizontal(id="teach-live"):
            yield Static(id="teach-pose")
            yield PoseSketch(self.arm, id="teach-sketch")
        with Horizontal(id="teach-tables"):
            with Vertical(id="points-box"):
                yield Label(Text("points", style="bold"), id="points-title")
                yield DataTable(id="points-table", cursor_type="row", zebra_stripes=True)
            with Vertical(id="steps-box"):
                yield Label(Text("program", style="bold"), id="steps-title")
                yield DataTable(id="steps-table", cursor_type="row", zebra_stripes=True)
        yield Static(id="teach-status")
        with VerticalScroll(id="teach-report-box"):
            yield Static(id="teach-report")
        yield KeyFooter(compact=True)

    def on_mount(self) -> None:
        points = self.query_one("#points-table", DataTable)
        points.add_columns("name", "frame", "cartesian", "branch", "taught", "note")
        steps = self.query_one("#steps-table", DataTable)
        steps.add_columns("#", "step", "note")
        self._open_files()
        self.set_status(self.status, error=self.status_error)   # set before it was composed
        self._show_loading()
        self.refresh_all()

    def on_unmount(self) -> None:
        self._close_files()

    def _open_files(self) -> None:
        """Open the points and program files, once (here or from ``teach_here``, the
        screen perhaps not mounted yet). Small files are read at once; bigger ones by
        a thread worker, the screen meanwhile showing how far it is."""
        if self.book is not None or self.load_state != "idle" or self._files_closed:
            return   # opened already, or being opened (a point taught from the jog screen)
        if self._files_bytes() <= INLINE_LOAD_BYTES:
            self.load_state = "ready"
            self._apply_opened(self._read_files())
            return
        self.load_state = "loading"
        self.load_progress = ("reading", 0, 0)
        self._status_before_load = (self.status, self.status_error)
        self.set_status(self._loading_words())
        self._load_worker(self.app)

    def _files_bytes(self) -> int:
        total = 0
        for path in (self.points_path, self.program_path):
            try:
                total += path.stat().st_size
            except OSError:
                pass   # none yet, or unreadable: the load says so
        return total

    def _read_files(self, progress=None, parsing=None) -> OpenedFiles:
        """Take the locks, read and check both files; widgets are not touched (a
        thread worker runs this). A file another console holds, or a broken one,
        makes the screen read only with a one-line reason. ``progress(done, total)``
        follows the points being checked, ``parsing(done, total)`` the text being
        parsed (characters); both may raise LoadGivenUp."""
        out = OpenedFiles()
        try:
            try:
                out.book = PointBook.open(self.points_path, self.arm, progress=progress,
                                          parsing=parsing)
            except FileError as exc:
                out.make_read_only(one_line(exc))
                out.say(f"read only: {one_line(exc)}")
                try:
                    out.book = PointBook.load(self.points_path, self.arm, progress=progress,
                                              parsing=parsing) \
                        if self.points_path.exists() else PointBook(self.arm, path=self.points_path)
                except FileError as exc2:
                    out.book = PointBook(self.arm, path=self.points_path)
                    out.say(f"cannot use the points file: {one_line(exc2)}")
            if progress is not None:
                progress(-1, -1)   # the program file next (and a last chance to give up)
            lock = FileLock(self.program_path)
            try:
                out.program_lock = lock.acquire()
            except FileError as exc:
                out.make_read_only(one_line(exc))
                out.say(f"read only: {one_line(exc)}")
            try:
                if self.program_path.exists():
                    out.program = Program.load(self.program_path)
                    if (out.program.points_path.resolve() != self.points_path.resolve()
                            and not out.read_only):  # a read-only reason says more; keep it
                        out.say(f"note: the program uses {out.program.points_path}, "
                                f"this screen edits {self.points_path}")
                else:
                    rel = os.path.relpath(self.points_path.resolve(),
                                          self.program_path.resolve().parent)
                    out.program = Program(self.program_path.stem, rel, path=self.program_path,
                                          arm=self.arm.name)
            except FileError as exc:
                out.make_read_only(one_line(exc))
                out.program = Program(self.program_path.stem, str(self.points_path),
                                      path=self.program_path)
                out.say(f"read only: {one_line(exc)}")
        except BaseException:
            out.release()
            raise
        if out.book.warnings:
            out.say(out.book.warnings[0])
        return out

    def _apply_opened(self, out: OpenedFiles) -> None:
        """Take over what the files gave (UI thread): the book, the program, its lock,
        read only and why, and the status lines, as they were said."""
        self.book = out.book
        self.program = out.program
        if out.program_lock is not None:
            self.program_lock = out.program_lock
        if out.read_only:
            self.read_only = True
            self.read_only_reason = self.read_only_reason or out.reason
        for words, error in out.said:
            self.set_status(words, error=error)

    @work(thread=True, group="teach-files", exit_on_error=False)
    def _load_worker(self, app) -> None:
        try:
            out = self._read_files(self._progress_reporter(app),
                                   self._progress_reporter(app, "parsing"))
        except LoadGivenUp:
            return   # the screen closed; what the load had taken is released
        except Exception as exc:  # noqa: BLE001 - never a crash: read only, in one line
            out = OpenedFiles(PointBook(self.arm, path=self.points_path),
                              Program(self.program_path.stem, str(self.points_path),
                                      path=self.program_path))
            out.make_read_only(f"cannot open the files: {one_line(exc)}")
            out.say(f"read only: cannot open the files: {one_line(exc)}")
        with self._files_mutex:
            if self._gone(app):
                out.release()
                return
            self._opened = out
        if not self._to_ui(app, self._load_finished):
            with self._files_mutex:   # the app is closing: nobody will take them over
                out, self._opened = self._opened, None
            if out is not None:
                out.release()

    def _gone(self, app) -> bool:
        """Whether the files are no longer wanted: the screen closed, or the app is
        shutting down (which does not unmount a teach screen that was never shown,
        one opened by teaching from the jog screen)."""
        return self._files_closed or not app.is_running

    def _progress_reporter(self, app, phase: str = "checking"):
        """The load's progress callback (worker thread) for one phase ("parsing" the
        text, "checking" the points): gives up once the screen has closed; shows the
        count on the screen at most every PROGRESS_EVERY_S."""
        last = [0.0]

        def report(done: int, total: int) -> None:
            if self._gone(app):
                raise LoadGivenUp()
            now = time.monotonic()
            if done <= 0 or done == total or now - last[0] >= PROGRESS_EVERY_S:
                last[0] = now
                self._to_ui(app, self._show_load_progress, "program" if done < 0 else phase,
                            done, total)

        return report

    @staticmethod
    def _to_ui(app, callback, *args) -> bool:
        """Run ``callback`` on the UI thread, later (from a worker thread; the screen
        may not be mounted, so through the app). False when the app has gone."""
        try:
            return bool(app.call_later(callback, *args))
        except RuntimeError:
            return False   # the app's loop is closed: the app has exited

    def _show_load_progress(self, phase: str, done: int, total: int) -> None:
        if self.load_state == "loading":
            self.load_progress = (phase, done, total)
            self._show_loading()

    def _load_finished(self) -> None:
        """The worker's files, taken over on the UI thread; then the points taught from
        the jog screen while they loaded."""
        with self._files_mutex:
            out, self._opened = self._opened, None
        if out is None or self._files_closed:
            return
        self.load_state = "ready"
        self._show_loading()
        self._end_wait_words()
        self._apply_opened(out)
        queued, self._queued_teaches = self._queued_teaches, []
        for joints, how in queued:
            self._teach_queued(joints, how)
        self.refresh_all()

    def _waiting_words_shown(self) -> bool:
        """Whether the status line says the files are loading (or a key refused for
        it), which must not outlast the load."""
        return self.status == self._loading_words() or "is still loading" in self.status

    def _end_wait_words(self) -> None:
        """The load (or the table's filling) is over: the status line shows again what
        it showed before the loading words or a refusal for the load, unless something
        else (a stop) has been said since."""
        if self._waiting_words_shown():
            words, error = self._status_before_load
            self.set_status(words, error=error)

    def _loading_words(self) -> str:
        """The status line while the files load (set once: a refusal or a stop shown
        there is not overwritten; the count is in the points table's title)."""
        return f"loading the points file {self.points_path} ..."

    def _title_words(self) -> str:
        """The points table's title: "points", or how far the load is."""
        if self.load_state == "loading":
            phase, done, total = self.load_progress
            if phase == "reading":
                return f"points: reading {self.points_path.name} ..."
            if phase == "parsing":
                return (f"points: reading {self.points_path.name}: "
                        f"{100 * done // max(total, 1)} %")
            if phase == "program":
                return "points: read; reading the program ..."
            return f"points: {done:,} of {total:,} checked"
        if self._filling is not None:
            return f"points: showing {self._filling[0]:,} of {self._filling[1]:,}"
        return "points"

    def _show_loading(self) -> None:
        try:
            self.query_one("#points-title", Label).update(Text(self._title_words(), style="bold"))
        except NoMatches:
            pass   # not composed yet: shown on mount

    def files_wait(self) -> str:
        """Why the keys that need the files cannot act yet ("" once they can)."""
        if self.load_state == "loading":
            return ("the program file is still loading" if self.load_progress[0] == "program"
                    else "the points file is still loading")
        if self._filling is not None:
            return (f"the points file is still loading (showing {self._filling[0]:,} of "
                    f"{self._filling[1]:,})")
        return ""

    def _close_files(self) -> None:
        """Release the locks (unmount, app exit): those the screen holds, those of a
        load that has finished but not been taken over; a load still running gives up
        and releases its own (the worker checks _files_closed under the mutex)."""
        with self._files_mutex:
            self._files_closed = True
            pending, self._opened = self._opened, None
        if pending is not None:
            pending.release()
        if self.book is not None:
            self.book.close()
        self.program_lock.release()

    # --- showing -----------------------------------------------------------------------

    def set_status(self, words: str, *, error: bool = False) -> None:
        self.status = words
        self.status_error = error
        try:
            self.query_one("#teach-status", Static).update(
                Text(words, style="bold red" if error else ""))
        except Exception:  # noqa: BLE001 - not composed yet
            pass

    def _cart_words(self, values: tuple[float, ...]) -> str:
        if self.arm.is_scara:
            return (f"{values[0]:.2f}, {values[1]:.2f}, {values[2]:.2f} mm, "
                    f"{math.degrees(values[3]):.2f} deg")
        return f"{values[0]:.2f}, {values[1]:.2f} mm"

    def show_state(self, state) -> None:
        """The app's state refresh: a latched e-stop, fault or lost link is shown here
        too, in red across the top (it is cleared on the jog screen, with r)."""
        try:
            alarm = self.query_one("#teach-alarm", Static)
        except NoMatches:
            return  # not composed yet, or being taken down
        self._show_pose(state)
        if self.run_clock is not None and self.run_clock.started:
            self.query_one("#teach-files", Static).update(self.files_words())
        latched = getattr(state, "latched", None) if state is not None else None
        if state is not None and not state.is_open:
            latched = "not connected"
        if latched:
            alarm.update(Text(f" {latched.upper()}: nothing moves; escape, then r on the jog "
                              "screen to reset ", style="bold white on red"))
            alarm.display = True
        else:
            alarm.display = False

    def _show_pose(self, state) -> None:
        """The live pose (measured) on one line and in the small sketch."""
        joints = tuple(state.joints) if state is not None else None
        try:
            pose = self.query_one("#teach-pose", Static)
            sketch = self.query_one("#teach-sketch", PoseSketch)
        except NoMatches:
            return
        if joints is None:
            pose.update("pose: unknown (not connected)")
            return
        rows = readout_rows(self.arm, joints, None)
        n_tool = 4 if self.arm.is_scara else 3
        tool = " ".join(f"{name.split()[-2]} {actual}" for name, _t, actual, _e in rows[:n_tool])
        each = " ".join(f"{name.rsplit(' ', 1)[0]} {actual}"
                        for name, _t, actual, _e in rows[n_tool:])
        words = f"now {tool} | {each}"
        if words != getattr(self, "_pose_words", None):
            self._pose_words = words
            pose.update(words)
            sketch.show(joints)

    def files_words(self) -> str:
        files = (f"points: {self.points_path}   program: {self.program_path}   new steps: "
                 f"{self.new_path} path, {self.new_speed:g} %")
        if self.read_only:
            files += "   (read only)"
        if self.busy:
            files += f"   in progress: {self.busy}" + (" (paused)" if self.paused else "")
            progress = self.progress_words()
            if progress:
                files += f": {progress}"
        return files

    def refresh_all(self) -> None:
        try:
            self.query_one("#teach-files", Static).update(self.files_words())
        except NoMatches:
            return   # not composed (taught from the jog screen): shown when it is
        points = self.book.points if self.book else []
        if not same_items(self._shown_points, points):   # a stop or a setting: no refill
            if not self._patch_points(list(points)):
                self._fill_points(list(points))
        steps = self.query_one("#steps-table", DataTable)
        program_steps = self.program.steps if self.program else []
        if not same_items(self._shown_steps, program_steps):
            self._shown_steps = list(program_steps)
            srow = steps.cursor_row
            steps.clear()
            for n, step in enumerate(program_steps, 1):
                steps.add_row(str(n), step.describe(), step.note)
            if steps.row_count:
                steps.move_cursor(row=min(srow, steps.row_count - 1))
        self.query_one("#teach-report", Static).update("\n".join(self.report_text))
        self.refresh_bindings()

    def _point_row(self, p) -> tuple:
        return (p.name, p.frame, self._cart_words(p.cartesian), str(p.branch), p.taught, p.note)

    def _patch_points(self, points: list) -> bool:
        """Bring the table to ``points`` by changing a few rows, as an edit needs:
        rows added at the end (teach), rows changed in place (update, rename, a note, a
        frame taught again), one row removed (delete) when it was not the widest in a
        column. False when it takes more (a new file): then the table is filled again,
        which gives the same rows and column widths."""
        shown = self._shown_points
        if shown is None or self._filling is not None:
            return False
        n = len(shown)
        if len(points) == n - 1:
            return self._patch_delete(points)
        if len(points) < n:
            return False
        changed = [i for i in range(n) if shown[i] is not points[i]]
        if len(changed) + len(points) - n > FILL_CHUNK:
            return False
        table = self.query_one("#points-table", DataTable)
        for i in changed:
            for column, value in enumerate(self._point_row(points[i])):
                table.update_cell_at(Coordinate(i, column), value, update_width=True)
        for p in points[n:]:
            table.add_row(*self._point_row(p))
        self._shown_points = points
        return True

    def _patch_delete(self, points: list) -> bool:
        """One point deleted: its row removed, unless one of its cells was the widest of
        its column (a fill would narrow the column; a removed row leaves it wide)."""
        shown = self._shown_points
        gone = next((i for i, p in enumerate(points) if shown[i] is not p), len(points))
        if not same_items(shown[gone + 1:], points[gone:]):
            return False
        table = self.query_one("#points-table", DataTable)

        def width(value: str) -> int:   # the table measures a str cell as its markup renders
            return Text.from_markup(value).cell_len

        for c, (value, column) in enumerate(zip(self._point_row(shown[gone]),
                                                table.ordered_columns)):
            wide = width(value)
            if wide >= column.content_width and column.label.cell_len < wide and \
                    not any(width(self._point_row(p)[c]) >= wide for p in points):
                return False   # the widest cell of its column: a fill narrows the column
        row_key = table.coordinate_to_cell_key(Coordinate(gone, 0)).row_key
        row = table.cursor_row
        table.remove_row(row_key)
        if table.row_count:
            table.move_cursor(row=min(row, table.row_count - 1))
        self._shown_points = points
        return True

    def _fill_points(self, points: list) -> None:
        """Show ``points`` in the table: at once when they are few, else FILL_CHUNK rows
        per turn of the UI thread's loop (keys are handled in between; the keys that
        need the table wait, dimmed). The cursor keeps its row."""
        table = self.query_one("#points-table", DataTable)
        row = table.cursor_row
        self._shown_points = points
        table.clear()
        if len(points) <= FILL_CHUNK:
            self._filling = None
            for p in points:
                table.add_row(*self._point_row(p))
            if table.row_count:
                table.move_cursor(row=min(row, table.row_count - 1))
            self._show_loading()
            return
        self._filling = (0, len(points))
        self._show_loading()
        self._fill_worker(points, row)

    @work(exclusive=True, group="teach-fill", exit_on_error=False)
    async def _fill_worker(self, points: list, row: int) -> None:
        table = self.query_one("#points-table", DataTable)
        start, chunk = 0, FILL_CHUNK
        while start < len(points):
            if self._shown_points is not points:
                return   # a newer fill took over
            for p in points[start:start + chunk]:
                table.add_row(*self._point_row(p))
            start += chunk
            # each slice costs the table a pass over all its rows when it is next drawn:
            # slices grow (to FILL_CHUNK_MAX) so that a big table takes few passes
            chunk = min(2 * chunk, FILL_CHUNK_MAX)
            self._filling = (table.row_count, len(points))
            self._show_loading()
            await asyncio.sleep(0.001)   # keys, the stop key first, and the table's measuring
        if self._shown_points is not points:
            return
        self._filling = None
        table.move_cursor(row=min(row, table.row_count - 1))
        self._show_loading()
        self._end_wait_words()
        self.refresh_bindings()

    def selected_point(self) -> str | None:
        table = self.query_one("#points-table", DataTable)
        if not self.book or not self.book.points or table.row_count == 0:
            return None
        return self.book.points[min(table.cursor_row, len(self.book.points) - 1)].name

    def selected_step(self) -> int | None:
        table = self.query_one("#steps-table", DataTable)
        if not self.program or not self.program.steps:
            return None
        return min(table.cursor_row, len(self.program.steps) - 1) + 1

    # --- which keys can act now ----------------------------------------------------------

    EDITS = {"teach", "update", "rename", "delete_point", "frame", "add_step", "add_dwell",
             "add_output", "move_step", "delete_step"}

    # keys that need the points and program files (dimmed while they load)
    NEEDS_FILES = EDITS | {"goto", "check", "run"}

    def check_action(self, action: str, parameters: tuple) -> bool | None:
        if action in self.NEEDS_FILES and self.files_wait():
            return None
        if action in self.EDITS and (self.read_only or self.busy):
            return None
        if action in ("update", "rename", "delete_point", "goto", "add_step") \
                and self.selected_point() is None:
            return None
        if action in ("move_step", "delete_step") and self.selected_step() is None:
            return None
        if action in ("goto", "run", "check", "back") and self.busy:
            return None
        if action == "pause" and not self.busy:
            return None
        return True

    # --- saving ------------------------------------------------------------------------

    def _save(self, *, points: bool = False, program: bool = False) -> bool:
        try:
            if points and self.book is not None:
                self.book.save()
            if program and self.program is not None:
                self.program.save(self.program_path, lock=self.program_lock)
        except (FileError, OSError) as exc:
            self.set_status(f"not saved: {one_line(exc)}", error=True)
            return False
        return True

    def _edit(self, words: str, func, *, points: bool = False, program: bool = False) -> None:
        try:
            extra = func()
        except (PointError, ProgramError, FileError) as exc:
            self.set_status(one_line(exc), error=True)
            return
        if self._save(points=points, program=program):
            self.set_status(words + (f"; {extra}" if isinstance(extra, str) and extra else "")
                            + " (saved)")
        self.refresh_all()

    def _current_joints(self) -> tuple[float, ...] | None:
        try:
            return tuple(self.interlock.state().joints)
        except Exception as exc:  # noqa: BLE001 - a dead link is one line
            self.set_status(f"cannot read the arm's position: {one_line(exc)}", error=True)
            return None

    def _teach_joints(self) -> tuple[tuple[float, ...] | None, str]:
        """The pose to teach and a note for the status: the commanded pose the user
        jogged or moved to (not the measured one, which carries the following error),
        and the measured difference when it exceeds the interlock's position tolerance
        (START_TOL_RAD / START_TOL_MM). Without a commanded pose near the arm (after a
        stop, a homing, a fault), the measured pose, said so."""
        measured = self._current_joints()
        if measured is None:
            return None, ""
        commanded = getattr(self.app, "last_end_joints", None)
        if commanded is None or len(commanded) != len(measured):
            return measured, "measured pose (no commanded pose to use)"
        over: list[str] = []
        for joint, c, m in zip(self.arm.joints, commanded, measured):
            gap = m - c
            far = FOLLOW_MAX_DEG if joint.is_revolute else FOLLOW_MAX_MM
            if abs(joint.to_display(c) - joint.to_display(m)) > far:
                return measured, "measured pose (the arm is not at the last commanded pose)"
            tol = START_TOL_RAD if joint.is_revolute else START_TOL_MM
            if abs(gap) > tol:
                shown = joint.to_display(m) - joint.to_display(c)
                over.append(f"{joint.name} {shown:+.2f} {joint.unit}")
        if over:
            return tuple(commanded), ("commanded pose; measured differs by " + ", ".join(over))
        return tuple(commanded), "commanded pose"

    # --- points ------------------------------------------------------------------------

    def action_teach(self) -> None:
        frames = [BASE, *self.book.frames]
        n = len(self.book.points) + 1
        name = f"p{n}"
        while self.book.has(name):
            n += 1
            name = f"p{n}"
        self.app.push_screen(AskScreen("teach the current pose",
                                       [("name", "point name", name), ("note", "note", "")],
                                       frames=frames), self._teach_answered)

    def teach_here(self) -> tuple[str, bool]:
        """Teach the pose here as the next free ``p<n>`` in the base frame, from the
        jog screen (this screen need not be shown). Returns (words, saved)."""
        self._open_files()
        if self.read_only:
            return f"not taught: read only ({self.read_only_reason})", False
        if self.busy:
            return f"not taught: busy with {self.busy}", False
        joints, how = self._teach_joints()
        if joints is None:
            return self.status, False
        if self.book is None:   # still loading: the pose is taken now, taught once loaded
            self._queued_teaches.append((joints, how))
            return (f"the points file is still loading: the pose here is taught as the next "
                    f"point once it has loaded", True)
        return self._teach_next(joints, how)

    def _teach_next(self, joints: tuple[float, ...], how: str) -> tuple[str, bool]:
        """Teach ``joints`` as the next free ``p<n>`` in the base frame and save."""
        n = len(self.book.points) + 1
        while self.book.has(f"p{n}"):
            n += 1
        name = f"p{n}"
        self._edit(f"taught {name} at the {how}", lambda: self.book.teach(name, joints) and None,
                   points=True)
        return self.status, self.status.endswith("(saved)")

    def _teach_queued(self, joints: tuple[float, ...], how: str) -> None:
        """A pose taught from the jog screen while the files loaded: taught now (or
        refused, read only), the result on the jog screen's message line and events."""
        if self.read_only:
            words, ok = f"not taught: read only ({self.read_only_reason})", False
        else:
            words, ok = self._teach_next(joints, how)
        log = getattr(getattr(self.app, "jog_screen", None), "log_event", None)
        if log is not None:
            log("teach", words)
        message = getattr(self.app, "set_message", None)
        if message is not None:
            message(words, error=not ok)

    def _teach_answered(self, values: dict | None) -> None:
        if not values:
            return
        joints, how = self._teach_joints()
        if joints is None:
            return
        self._edit(f"taught {values['name'].strip()} at the {how}",
                   lambda: self.book.teach(values["name"], joints, frame=values["frame"],
                                           note=values["note"]) and None, points=True)

    def action_update(self) -> None:
        name = self.selected_point()
        if name is None:
            return
        joints, how = self._teach_joints()
        if joints is None:
            return
        self._edit(f"{name} taught again at the {how}",
                   lambda: self.book.update(name, joints) and None, points=True)

    def action_rename(self) -> None:
        name = self.selected_point()
        if name is None:
            return
        point = self.book.point(name)
        self.app.push_screen(AskScreen(f"rename {name}", [("name", "new name", name),
                                                         ("note", "note", point.note)]),
                             lambda values: self._rename_answered(name, values))

    def _rename_answered(self, old: str, values: dict | None) -> None:
        if not values:
            return

        def apply() -> str:
            new = values["name"].strip()
            self.book.rename(old, new)
            self.book.set_note(new, values["note"].strip())
            count = self.program.rename_point(old, new) if new != old else 0
            return f"{count} program step(s) follow" if count else ""

        self._edit(f"{old} renamed {values['name'].strip()}", apply, points=True, program=True)

    def action_delete_point(self) -> None:
        name = self.selected_point()
        if name is None:
            return
        used = self.program.uses_point(name)
        question = f"Delete point {name}?"
        if used:
            question += f" Program steps {', '.join(map(str, used))} use it."
        self.app.push_screen(YesNoScreen(question),
                             lambda yes: yes and self._edit(
                                 f"deleted {name}", lambda: self.book.delete(name) and None,
                                 points=True))

    # --- frames ------------------------------------------------------------------------

    def action_frame(self) -> None:
        if self.frame_origin is None:
            self.app.push_screen(AskScreen("define a user frame: the current pose is its origin",
                                           [("name", "frame name", "fixture")]),
                                 self._frame_named)
            return
        name, origin = self.frame_origin
        joints = self._current_joints()
        if joints is None:
            return
        self.frame_origin = None

        def apply() -> str:
            change = self.book.define_frame(name, origin, joints)
            return "; ".join(change.lines())

        self._edit(f"frame {name} taught", apply, points=True)

    def _frame_named(self, values: dict | None) -> None:
        if not values:
            return
        joints = self._current_joints()
        if joints is None:
            return
        name = values["name"].strip()
        if not name or name == BASE:
            self.set_status("a frame needs a name other than 'base'", error=True)
            return
        self.frame_origin = (name, joints)
        self.set_status(f"frame {name}: origin taught. Jog to a point on its +x axis "
                        "(at least 1 mm away), come back and press f again.")

    # --- program -----------------------------------------------------------------------

    def _insert_at(self) -> int:
        number = self.selected_step()
        return (number + 1) if number is not None else len(self.program.steps) + 1

    def action_add_step(self) -> None:
        name = self.selected_point()
        if name is None:
            return
        at = self._insert_at()
        step = MoveStep(name, self.new_path, self.new_speed)
        self._edit(f"step {at}: {step.describe()}", lambda: self.program.add_step(step, at) and None,
                   program=True)
        self.query_one("#steps-table", DataTable).move_cursor(row=at - 1)

    def action_toggle_path(self) -> None:
        self.new_path = "line" if self.new_path == "joint" else "joint"
        self.refresh_all()

    def action_cycle_speed(self) -> None:
        self.new_speed = SPEEDS[(SPEEDS.index(self.new_speed) + 1) % len(SPEEDS)] \
            if self.new_speed in SPEEDS else SPEEDS[0]
        self.refresh_all()

    def action_add_dwell(self) -> None:
        self.app.push_screen(AskScreen("add a dwell", [("seconds", "seconds", "0.5")]),
                             self._dwell_answered)

    def _dwell_answered(self, values: dict | None) -> None:
        if not values:
            return
        try:
            seconds = float(values["seconds"])
        except ValueError:
            self.set_status(f"seconds: not a number ({values['seconds']!r})", error=True)
            return
        at = self._insert_at()
        self._edit(f"step {at}: dwell {seconds:g} s",
                   lambda: self.program.add_step(DwellStep(seconds), at) and None, program=True)

    def action_add_output(self) -> None:
        self.app.push_screen(AskScreen("add an output step",
                                       [("channel", "channel (0..7)", "0"),
                                        ("state", "on or off", "on")]), self._output_answered)

    def _output_answered(self, values: dict | None) -> None:
        if not values:
            return
        try:
            channel = int(values["channel"])
        except ValueError:
            self.set_status(f"channel: not a whole number ({values['channel']!r})", error=True)
            return
        state = values["state"].strip().lower()
        if state not in ("on", "off"):
            self.set_status(f"state: on or off ({values['state']!r})", error=True)
            return
        at = self._insert_at()
        step = OutputStep(channel, state == "on")
        self._edit(f"step {at}: {step.describe()}",
                   lambda: self.program.add_step(step, at) and None, program=True)

    def action_move_step(self, delta: int) -> None:
        number = self.selected_step()
        if number is None:
            return
        box = {}

        def apply() -> None:
            box["to"] = self.program.move_step(number, delta)

        self._edit(f"step {number} moved", apply, program=True)
        if "to" in box:
            self.query_one("#steps-table", DataTable).move_cursor(row=box["to"] - 1)

    def action_delete_step(self) -> None:
        number = self.selected_step()
        if number is None:
            return
        self._edit(f"step {number} deleted", lambda: self.program.delete_step(number) and None,
                   program=True)

    # --- dry run -----------------------------------------------------------------------

    def dry_run(self) -> list[str]:
        """The dry-run report of the program as it is now, planned from the arm's
        current pose: where a run started now would start (a dead link: from home,
        and the report says so)."""
        joints = self._current_joints()
        words = "the arm's current pose" if joints is not None else \
            "the home pose (the arm's pose could not be read)"
        report = plan_program(self.arm, self.program, self.book, joints, gate=self.interlock,
                              start_words=words)
        self.report_text = report_lines(report)
        return self.report_text

    def action_check(self) -> None:
        try:
            lines = self.dry_run()
        except Exception as exc:  # noqa: BLE001 - shown, never a crash
            self.set_status(f"dry run failed: {one_line(exc)}", error=True)
            return
        summary = next((line for line in lines if line.startswith("problems:")), "")
        first = lines[lines.index(summary) + 1].strip() if summary.startswith("problems: ") \
            and summary != "problems: none" and lines.index(summary) + 1 < len(lines) else ""
        self.set_status(f"dry run from the current pose: {summary}"
                        + (f" (first: {first})" if first and summary[10:].isdigit() else ""),
                        error=summary != "problems: none")
        self.refresh_all()

    # --- motion (through the gate, in a thread worker) ------------------------------------

    def _confirmer(self) -> Confirmer:
        """The console's own confirmer (console/tui/app.py ScreenConfirmer)."""
        return self.app.confirmer

    def action_goto(self) -> None:
        name = self.selected_point()
        if name is None or self.busy:
            return
        point = self.book.point(name)
        target = self.book.base_target(point)
        self.busy = f"go to {name}"
        self.refresh_all()
        self._goto_worker(name, target, point.branch)

    @work(thread=True, exclusive=True, group="teach-motion", exit_on_error=False)
    def _goto_worker(self, name: str, target: tuple[float, ...], branch: Any) -> None:
        words = f"go to {name}"
        try:
            proposal = self.interlock.propose_move(target, branch=branch, path=self.new_path,
                                                   speed_pct=self.new_speed)
            result = self.interlock.execute(proposal, self._confirmer())
            ends = [p.segments[-1].joints for p in proposal.plans if p.segments]
            end = tuple(ends[-1]) if ends and result.completed else None
            self.post_message(self.MotionFinished(words, result.outcome, result.detail, end))
        except Exception as exc:  # noqa: BLE001 - one line on the screen
            self.post_message(self.MotionFinished(words, "error", one_line(exc)))

    def action_run(self) -> None:
        if self.busy:
            return
        if not self.program.steps:
            self.set_status("the program has no steps", error=True)
            return
        self.busy = f"program {self.program.name}"
        self.paused = False
        self.report_text = []            # an old report never stands for this run
        self.run_clock = RunClock()
        self.set_status(f"program {self.program.name}: planning from the current pose")
        self.refresh_all()
        self._run_worker()

    @work(thread=True, exclusive=True, group="teach-motion", exit_on_error=False)
    def _run_worker(self) -> None:
        words = f"program {self.program.name}"
        try:
            report, result = run_program(self.interlock, self.arm, self.program, self.book,
                                         self.run_clock.watching(self._confirmer(), self))
            self.report_text = report_lines(report)
            end = tuple(report.end_joints) if result.completed else None
            self.post_message(self.MotionFinished(words, result.outcome,
                                                  result_words(report, result), end))
        except Exception as exc:  # noqa: BLE001
            self.post_message(self.MotionFinished(words, "error", one_line(exc)))

    def on_teach_screen_motion_finished(self, message: "TeachScreen.MotionFinished") -> None:
        self.busy = None
        self.run_clock = None
        if message.outcome != "cancelled" and hasattr(self.app, "last_end_joints"):
            # where the arm was sent: teaching and jogging start from it (none when it
            # did not arrive)
            self.app.last_end_joints = message.end_joints
        if self.paused:
            self.interlock.resume()
            self.paused = False
        self.set_status(f"{message.words}: {message.detail}",
                        error=message.outcome not in ("done", "cancelled"))
        log = getattr(getattr(self.app, "jog_screen", None), "log_event", None)
        if log is not None:   # the jog screen's events panel keeps each result
            log(message.outcome, f"{message.words}: {message.detail}")
        self.refresh_all()

    def on_teach_screen_run_started(self, message: "TeachScreen.RunStarted") -> None:
        if self.run_clock is not None:
            self.run_clock.start(message.durations_s)
            self.report_text = message.lines
            self.refresh_all()

    def progress_words(self) -> str:
        """While a program runs: step n of N and the time left, estimated from the
        plan's step durations and the time since the yes (pauses not counted)."""
        clock = self.run_clock
        if clock is None or not clock.started:
            return ""
        n, total, left = clock.progress()
        return (f"step {n} of {total}, about {left:.1f} s left"
                + (" (paused)" if self.paused else ""))

    def action_stop(self) -> None:
        self.interlock.stop()
        self.paused = False
        self.set_status("stop sent", error=True)
        self.refresh_all()

    def action_pause(self) -> None:
        if not self.busy:
            return
        if self.run_clock is not None:
            self.run_clock.hold(not self.paused)
        if self.paused:
            self.interlock.resume()
            self.paused = False
            self.set_status("resumed")
        else:
            self.interlock.pause()
            self.paused = True
            self.set_status("paused: the program holds before its next step (p resumes)")
        self.refresh_all()

    def action_back(self) -> None:
        if self.busy:
            return
        self.dismiss()

    # --- help ----------------------------------------------------------------------------

    def show_refusal(self, words: str) -> None:
        if self.files_wait() and not self._waiting_words_shown():
            self._status_before_load = (self.status, self.status_error)   # shown again after
        self.set_status(words, error=True)

    def why_dimmed(self, action: str, parameters: tuple = ()) -> str:
        """Why a teach-screen key is dimmed now, in words."""
        if action in self.NEEDS_FILES and self.files_wait():
            return self.files_wait()
        if action in self.EDITS and self.read_only:
            return f"read only: {self.read_only_reason or 'another console holds the files'}"
        if self.busy and action != "pause":
            return f"busy: {self.busy} (space stops, p pauses)"
        if action in ("update", "rename", "delete_point", "goto", "add_step"):
            return "no point selected: a teaches one"
        if action in ("move_step", "delete_step"):
            return "no step selected: i adds one"
        if action == "pause":
            return "nothing is running"
        return "not available now"


__all__ = ["TeachScreen", "AskScreen", "YesNoScreen"]
