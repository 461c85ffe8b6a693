"""The teach screen opens a big points file without freezing the console: the file is
read by a thread worker while the screen shows how far it is, the stop key, escape and
help keep working, the keys that need the book are dimmed and say why, a point taught
from the jog screen meanwhile is kept, the locks are released when the console closes
mid-load, and a broken file still makes the screen read only with a one-line reason.

The load is held at a point of the test's choosing (a threading.Event in the progress
callback PointBook's loader calls), so that what the screen does while it loads is
seen deterministically, never by timing. Textual's App.run_test and Pilot drive the
real console on the simulated controller; files are real files in tmp_path."""

from __future__ import annotations

import math
import re
import threading
import tomllib
from pathlib import Path

import pytest

from benchjog.console.cell.armfile import builtin_arm
from benchjog.console.cell.points import PointBook
from benchjog.console.cell.safe_files import FileError, FileLock
from benchjog.console.tui.app import make_app
from benchjog.console.tui.screens.help import HelpScreen
from benchjog.console.tui.screens.jog import JogScreen
from benchjog.console.tui.screens.teach import INLINE_LOAD_BYTES, AskScreen, LoadGivenUp, \
    TeachScreen
from benchjog.console.tui.widgets.keys import key_rows
from benchjog.drivers.interlock import Confirmer, Interlock

ARM = builtin_arm("planar-bench")
BIG = 10_000        # the book of the main test
SOME = 1_500        # the others: still well above what is read at once, and quick to save
MIDDLE = 500        # the load is held once this many points have been checked
WAIT_S = 60.0       # a bound on waiting for the loader thread (never a measured time)


class Yes(Confirmer):
    def confirm(self, proposal):
        return True


def grid_text(n: int) -> str:
    """A points file of n points p1..pn, written by the project's own save: joint poses
    on a grid inside planar-bench's joint limits (invented demo data)."""
    book = PointBook(ARM)
    side = math.ceil(math.sqrt(n))
    for k in range(n):
        i, j = divmod(k, side)
        joints = (math.radians(-120.0 + 240.0 * i / side), math.radians(20.0 + 100.0 * j / side))
        book.teach(f"p{k + 1}", joints, taught="2026-01-01T00:00:00Z")
    return book.to_text()


@pytest.fixture(scope="module")
def big_text() -> str:
    return grid_text(BIG)


@pytest.fixture(scope="module")
def some_text() -> str:
    return grid_text(SOME)


class HeldLoad:
    """PointBook.open (the real one) with its progress callback held once MIDDLE
    points have been checked, until ``go`` is set; counts the opens and keeps what
    each one ended with."""

    def __init__(self, monkeypatch):
        self.held = threading.Event()     # the loader is waiting, mid-file, lock taken
        self.go = threading.Event()
        self.ended = threading.Event()
        self.opens = 0
        self.outcomes: list[str] = []
        self.counts: list[tuple[int, int]] = []
        real_open = PointBook.open
        held = self

        def open_(cls, path, arm, *, progress=None, parsing=None):
            held.opens += 1

            def watched(done: int, total: int) -> None:
                held.counts.append((done, total))
                if done >= MIDDLE and not held.held.is_set():
                    held.held.set()
                    held.go.wait(WAIT_S)
                if progress is not None:
                    progress(done, total)

            try:
                book = real_open(path, arm, progress=watched, parsing=parsing)
            except BaseException as exc:
                held.outcomes.append(type(exc).__name__)
                raise
            finally:
                held.ended.set()
            held.outcomes.append("opened")
            return book

        monkeypatch.setattr(PointBook, "open", classmethod(open_))

    def release(self) -> None:
        self.go.set()


@pytest.fixture
def gate():
    g = Interlock.open(ARM, "sim", journal=False, time_scale=50.0)
    yield g
    g.close()


@pytest.fixture
def cell(tmp_path, some_text):
    points = tmp_path / "points.toml"
    points.write_text(some_text)
    return points, tmp_path / "program.toml"


async def until(pilot, condition, tries: int = 3000) -> bool:
    """Let the app run until condition() holds (a bounded number of short pauses)."""
    for _ in range(tries):
        if condition():
            return True
        await pilot.pause(0.02)
    return condition()


def title(screen: TeachScreen) -> str:
    return str(screen.query_one("#points-title").render())


def loaded(screen) -> bool:
    return isinstance(screen, TeachScreen) and screen.load_state == "ready" and \
        not screen.files_wait()


async def open_held(pilot, app, held) -> TeachScreen:
    await until(pilot, lambda: app.state is not None)
    await pilot.press("t")
    assert await until(pilot, lambda: isinstance(app.screen, TeachScreen))
    assert await until(pilot, held.held.is_set)
    return app.screen


def test_the_files_are_bigger_than_what_is_read_at_once(some_text):
    # else the tests below would not exercise the thread worker at all
    assert len(some_text.encode()) > 2 * INLINE_LOAD_BYTES


async def test_keys_work_while_a_big_book_loads(tmp_path, big_text, gate, monkeypatch):
    points, program = tmp_path / "points.toml", tmp_path / "program.toml"
    points.write_text(big_text)
    held = HeldLoad(monkeypatch)
    app = make_app(ARM, gate, points_path=points, program_path=program)
    try:
        async with app.run_test(size=(120, 40)) as pilot:
            teach = await open_held(pilot, app, held)
            # the loader is stopped mid-file: all that follows happens during the load
            assert teach.load_state == "loading"
            assert await until(pilot, lambda: re.fullmatch(
                r"points: [\d,]+ of 10,000 checked", title(teach)))
            assert teach.status == f"loading the points file {points} ..."
            # a key that needs no file acts at once: speed of new steps 100 -> 50 %
            await pilot.press("v")
            assert await until(pilot, lambda: teach.new_speed == 50.0)
            assert "50 %" in str(teach.query_one("#teach-files").render())
            # a key that needs the book is refused with the one-line reason, opens nothing
            await pilot.press("a")
            assert await until(pilot, lambda: teach.status ==
                               "teach: the points file is still loading")
            assert isinstance(app.screen, TeachScreen)
            for key in ("g", "i", "c", "ctrl+r"):
                await pilot.press(key)
                await pilot.pause()
                assert isinstance(app.screen, TeachScreen) and teach.busy is None
            # the help panel lists the dimmed keys with the same reason
            await pilot.press("f1")
            assert await until(pilot, lambda: isinstance(app.screen, HelpScreen))
            rows = {row.label: row for row in key_rows(teach) if row.where == "screen"}
            for label in ("teach", "go to", "check", "run", "add step"):
                assert not rows[label].enabled
                assert rows[label].reason == "the points file is still loading"
            assert rows["stop"].enabled and rows["back"].enabled
            await pilot.press("escape")
            assert await until(pilot, lambda: app.screen is teach)
            assert held.outcomes == []       # still held: nothing above waited for it
            held.release()
            assert await until(pilot, lambda: loaded(teach))
            table = teach.query_one("#points-table")
            assert table.row_count == BIG and title(teach) == "points"
            assert teach.status == "" and not teach.read_only
            # counts as the loader reported them: from 0 to all, never backwards
            assert held.counts[0] == (0, BIG) and held.counts[-1] == (BIG, BIG)
            assert [d for d, _ in held.counts] == sorted(d for d, _ in held.counts)
            # and now the keys act: a opens the teach dialog
            await pilot.press("a")
            assert await until(pilot, lambda: isinstance(app.screen, AskScreen))
            await pilot.press("escape")
    finally:
        held.release()
    assert held.opens == 1 and held.outcomes == ["opened"]


async def test_stop_during_the_load_stops_the_arm(cell, monkeypatch):
    points, program = cell
    held = HeldLoad(monkeypatch)
    slow = Interlock.open(ARM, "sim", journal=False, time_scale=0.5)
    try:
        app = make_app(ARM, slow, points_path=points, program_path=program)
        async with app.run_test(size=(80, 24)) as pilot:
            teach = await open_held(pilot, app, held)
            # a motion under way (through the interlock, confirmed) while the book loads
            slow.enable()
            result: list = []
            mover = threading.Thread(target=lambda: result.append(slow.execute(
                slow.propose_joints((math.radians(60.0), math.radians(60.0))), Yes())))
            mover.start()
            assert await until(pilot, lambda: any(c[0] == "MOVE" for c in slow.sim.commands))
            await pilot.press("space")
            assert await until(pilot, lambda: ("STOP",) in slow.sim.commands)
            mover.join(WAIT_S)
            assert result and not result[0].completed
            assert teach.load_state == "loading"     # the stop did not wait for the load
            assert teach.status == "stop sent"
            held.release()
            assert await until(pilot, lambda: loaded(teach))
            assert teach.status == "stop sent"       # kept: the load said nothing over it
    finally:
        held.release()
        slow.close()


async def test_escape_during_the_load_and_back_loads_once(cell, gate, monkeypatch):
    points, program = cell
    held = HeldLoad(monkeypatch)
    app = make_app(ARM, gate, points_path=points, program_path=program)
    try:
        async with app.run_test(size=(80, 24)) as pilot:
            teach = await open_held(pilot, app, held)
            await pilot.press("escape")
            assert await until(pilot, lambda: isinstance(app.screen, JogScreen))
            await pilot.press("t")
            assert await until(pilot, lambda: app.screen is teach)
            assert teach.load_state == "loading"
            held.release()
            assert await until(pilot, lambda: loaded(teach))
            assert teach.query_one("#points-table").row_count == SOME
    finally:
        held.release()
    assert held.opens == 1


@pytest.mark.parametrize("when", ["before", "during"])
async def test_a_point_taught_from_the_jog_screen_while_loading_is_kept(cell, gate, monkeypatch,
                                                                      when):
    points, program = cell
    held = HeldLoad(monkeypatch)
    app = make_app(ARM, gate, points_path=points, program_path=program)
    try:
        async with app.run_test(size=(80, 24)) as pilot:
            await until(pilot, lambda: app.state is not None)
            if when == "during":        # the teach screen opened, then left mid-load
                await pilot.press("t")
                assert await until(pilot, lambda: isinstance(app.screen, TeachScreen))
                await pilot.press("escape")
                assert await until(pilot, lambda: isinstance(app.screen, JogScreen))
            await pilot.press("a")      # before: this key starts the load itself
            assert await until(pilot, held.held.is_set)
            assert "still loading" in app.message and "taught as the next point" in app.message
            await pilot.press("a")      # a second one, queued behind the first
            await pilot.pause()
            assert isinstance(app.screen, JogScreen)
            held.release()
            assert await until(pilot, lambda: f"taught p{SOME + 2}" in app.message)
            assert app.message.endswith("(saved)")
            # on disk for any reader, after the 10,000 that were there, in order
            book = PointBook.load(points, ARM)
            assert book.names[-3:] == [f"p{SOME}", f"p{SOME + 1}", f"p{SOME + 2}"]
            assert book.point(f"p{SOME + 1}").joints == pytest.approx(gate.state().joints)
            await pilot.press("t")
            assert await until(pilot, lambda: loaded(app.screen))
            assert app.screen.query_one("#points-table").row_count == SOME + 2
    finally:
        held.release()
    assert held.opens == 1


@pytest.mark.parametrize("opened_by", ["teach screen", "jog screen's a"])
async def test_closing_mid_load_releases_the_locks(cell, gate, monkeypatch, opened_by):
    # the teach screen shown, or never shown (the load started by a point taught from
    # the jog screen): either way quitting mid-load leaves no lock behind
    points, program = cell
    held = HeldLoad(monkeypatch)
    app = make_app(ARM, gate, points_path=points, program_path=program)
    try:
        async with app.run_test(size=(80, 24)) as pilot:
            if opened_by == "teach screen":
                await open_held(pilot, app, held)
            else:
                await until(pilot, lambda: app.state is not None)
                await pilot.press("a")
                assert await until(pilot, held.held.is_set)
                assert isinstance(app.screen, JogScreen)
            with pytest.raises(FileError, match="locked by another console"):
                FileLock(points).acquire()    # the loader holds the points file's lock
            await pilot.press("ctrl+q")
    finally:
        held.release()
    assert held.ended.wait(WAIT_S)
    assert held.outcomes == [LoadGivenUp.__name__]   # gave up, read no further
    assert max(d for d, _ in held.counts) < SOME
    for path in (points, program):
        FileLock(path).acquire().release()         # free for the next console


@pytest.mark.parametrize("broken, words", [
    ('branch = "elbow-down"', 'branch = "sideways"'),
    ("[[points]]", "[[points]"),
])
async def test_a_broken_big_file_is_read_only_with_a_one_line_reason(cell, gate, broken, words):
    points, program = cell
    text = points.read_text()
    at = text.rindex(broken)             # the last point: found only after the others
    points.write_text(text[:at] + words + text[at + len(broken):])
    expected = None
    try:
        PointBook.load(points, ARM)
    except FileError as exc:
        expected = str(exc)
    assert expected and "\n" not in expected
    app = make_app(ARM, gate, points_path=points, program_path=program)
    async with app.run_test(size=(80, 24)) as pilot:
        await until(pilot, lambda: app.state is not None)
        await pilot.press("t")
        assert await until(pilot, lambda: isinstance(app.screen, TeachScreen))
        teach = app.screen
        assert await until(pilot, lambda: teach.load_state == "ready")
        assert teach.read_only and teach.read_only_reason == expected
        assert teach.status == f"cannot use the points file: {expected}"
        assert teach.book.points == [] and title(teach) == "points"
        await pilot.press("a")
        assert await until(pilot, lambda: teach.status == f"teach: read only: {expected}")
        FileLock(points).acquire().release()      # a failed open keeps no lock
    assert points.read_text().count("[[points]") == SOME   # nothing written


def test_progress_counts_the_points_and_can_stop_the_load(tmp_path):
    # the count is checked against the number of [[points]] tables tomllib (the
    # standard library's TOML parser) finds in the same file
    path = tmp_path / "points.toml"
    path.write_text(grid_text(1000))
    total = len(tomllib.loads(path.read_text())["points"])
    seen: list[tuple[int, int]] = []
    book = PointBook.load(path, ARM, progress=lambda d, t: seen.append((d, t)))
    assert seen[0] == (0, total) and seen[-1] == (total, total)
    assert all(t == total for _, t in seen) and [d for d, _ in seen] == sorted(d for d, _ in seen)
    assert len(seen) >= 3 and book.names == PointBook.load(path, ARM).names

    def stop(done, _total):
        if done:
            raise LoadGivenUp()

    with pytest.raises(LoadGivenUp):
        PointBook.open(path, ARM, progress=stop)
    PointBook.open(path, ARM).close()            # the lock was released on the way out


async def test_edits_change_only_their_rows_and_show_what_a_full_fill_shows(tmp_path, gate):
    # teach (a row added), update, rename, a note (rows changed in place), delete (a
    # row removed; filled again when it held a column's widest cell): after each, the
    # table holds the book's rows in order, with the column widths a fresh fill gives
    points, program = tmp_path / "points.toml", tmp_path / "program.toml"
    points.write_text(grid_text(300))
    app = make_app(ARM, gate, points_path=points, program_path=program)
    async with app.run_test(size=(120, 40)) as pilot:
        await until(pilot, lambda: app.state is not None)
        await pilot.press("t")
        assert await until(pilot, lambda: loaded(app.screen))
        teach = app.screen
        table = teach.query_one("#points-table")

        def shown() -> tuple[list, list]:
            return ([[str(c) for c in table.get_row_at(i)] for i in range(table.row_count)],
                    [c.content_width for c in table.ordered_columns])

        async def settled() -> None:
            # the table measures new and changed cells when idle (Textual's DataTable)
            assert await until(pilot, lambda: loaded(teach) and not table._new_rows
                               and not table._updated_cells
                               and not table._require_update_dimensions)
            await pilot.pause()

        def expected() -> list:
            return [[str(c) for c in teach._point_row(p)] for p in teach.book.points]

        here = tuple(gate.state().joints)
        edits = [
            lambda: teach.book.teach("a-much-longer-name-than-the-others", here),
            lambda: teach.book.update("p7", here),
            lambda: teach.book.rename("p8", "renamed"),
            lambda: teach.book.set_note("p9", "a note [in brackets]"),
            lambda: teach.book.rename("a-much-longer-name-than-the-others", "short"),
            lambda: teach.book.delete("p3"),
            lambda: teach.book.set_note("p4", "the longest note of them all, by far"),
            lambda: teach.book.delete("p4"),      # the widest note goes: the table is filled
        ]
        fills: list[int] = []
        fill = teach._fill_points
        teach._fill_points = lambda points: (fills.append(len(points)), fill(points))
        for n, edit in enumerate(edits):
            edit()
            teach.refresh_all()
            await settled()
            rows, widths = shown()
            assert rows == expected()
            # only deleting the widest cell of a column fills the table again; the
            # other edits change, add or remove their rows
            assert fills == ([len(teach.book.points)] if n == len(edits) - 1 else [])
            teach._shown_points = None            # a full fill of the same book
            teach.refresh_all()
            await settled()
            assert shown() == (rows, widths)
            fills.clear()


async def test_the_title_counts_while_the_text_is_parsed(tmp_path, big_text, gate, monkeypatch):
    # the parse is held half way through the text (the parsing callback PointBook's
    # loader calls); the book it gives is the one a single tomllib.loads of the text
    # gives (tomllib: the standard library's TOML 1.0 reader)
    points, program = tmp_path / "points.toml", tmp_path / "program.toml"
    points.write_text(big_text)
    held, go = threading.Event(), threading.Event()
    seen: list[tuple[int, int]] = []
    real_open = PointBook.open

    def open_(cls, path, arm, *, progress=None, parsing=None):
        def watched(done: int, total: int) -> None:
            seen.append((done, total))
            if done >= total // 2 and not held.is_set():
                held.set()
                go.wait(WAIT_S)
            if parsing is not None:
                parsing(done, total)
        return real_open(path, arm, progress=progress, parsing=watched)

    monkeypatch.setattr(PointBook, "open", classmethod(open_))
    app = make_app(ARM, gate, points_path=points, program_path=program)
    try:
        async with app.run_test(size=(120, 40)) as pilot:
            await until(pilot, lambda: app.state is not None)
            await pilot.press("t")
            assert await until(pilot, lambda: isinstance(app.screen, TeachScreen))
            assert await until(pilot, held.is_set)
            teach = app.screen
            assert await until(pilot, lambda: re.fullmatch(
                r"points: reading points\.toml: \d+ %", title(teach)))
            percent = int(re.search(r"(\d+) %", title(teach)).group(1))
            assert 0 < percent < 100
            assert teach.load_state == "loading"
            go.set()
            assert await until(pilot, lambda: loaded(teach))
            assert teach.book.names == [p["name"] for p in tomllib.loads(big_text)["points"]]
            assert seen[0] == (0, len(big_text)) and seen[-1] == (len(big_text), len(big_text))
            assert [d for d, _ in seen] == sorted(d for d, _ in seen)
    finally:
        go.set()


async def test_an_unexpected_failure_of_the_load_is_one_line_not_a_crash(cell, gate,
                                                                         monkeypatch):
    points, program = cell

    def broken_open(cls, path, arm, *, progress=None, parsing=None):
        raise MemoryError("no memory left for the book")

    monkeypatch.setattr(PointBook, "open", classmethod(broken_open))
    app = make_app(ARM, gate, points_path=points, program_path=program)
    async with app.run_test(size=(80, 24)) as pilot:
        await until(pilot, lambda: app.state is not None)
        await pilot.press("t")
        assert await until(pilot, lambda: loaded(app.screen))
        teach = app.screen
        assert teach.read_only and app.is_running
        assert teach.status == "read only: cannot open the files: no memory left for the book"
        await pilot.press("a")
        assert await until(pilot, lambda: teach.status.startswith("teach: read only: cannot open"))
    for path in (points, program):
        FileLock(path).acquire().release()


async def test_quitting_after_teaching_from_the_jog_screen_leaves_no_lock(tmp_path, gate):
    # a small cell: the jog screen's `a` opens the files at once (the teach screen is
    # made but never shown, so never unmounted); quitting must still free both locks
    points, program = tmp_path / "points.toml", tmp_path / "program.toml"
    points.write_text(grid_text(3))
    app = make_app(ARM, gate, points_path=points, program_path=program)
    async with app.run_test(size=(80, 24)) as pilot:
        await until(pilot, lambda: app.state is not None)
        await pilot.press("a")
        assert await until(pilot, lambda: "taught" in app.message)
        assert isinstance(app.screen, JogScreen)
        with pytest.raises(FileError, match="locked by another console"):
            FileLock(points).acquire()
        await pilot.press("ctrl+q")
    for path in (points, program):
        FileLock(path).acquire().release()         # free for the next console
    assert tomllib.loads(points.read_text())["points"][-1]["name"] == "p4"
