"""Files people edit by hand: a save keeps what they wrote, and leaves nothing behind.

- Style: saving after a change keeps the person's comments, key order, blank lines and
  number spelling, changing only what changed (tomlkit's round trip is the reference:
  a file parsed and dumped unchanged is byte-identical, per its documentation).
- Stale hidden temp files of a killed save are removed by the next save; lock files go
  when their holder releases them; a lock that cannot be written (a full disk, played
  by /dev/full, whose writes fail with ENOSPC: Linux null(4)) is one FileError line.
"""

from __future__ import annotations

import os
import shutil
import time
import tomllib
from pathlib import Path

import pytest

from benchjog.console.cell.armfile import builtin_arm
from benchjog.console.cell.points import PointBook
from benchjog.console.cell.programs import DwellStep, Program
from benchjog.console.cell.safe_files import FileError, FileLock, lock_path, toml_text

ROOT = Path(__file__).resolve().parents[1]
CELL = ROOT / "examples" / "bench-cell"
ARM = builtin_arm("planar-bench")


@pytest.fixture
def cell(tmp_path):
    for name in ("points.toml", "program.toml"):
        shutil.copy(CELL / name, tmp_path / name)
    return tmp_path


def _hand_edit(path: Path) -> str:
    """A person's touches: a comment of their own, odd spacing, a number spelled 1.50."""
    text = path.read_text()
    text = text.replace('[[points]]\nname = "pick"\n',
                        '# the nest moved 2 mm in March: re-taught\n[[points]]\nname = "pick"\n', 1)
    text = text.replace('version = 1\n', 'version    = 1     # keep at 1\n', 1)
    path.write_text(text)
    return text


def test_points_save_keeps_comments_order_and_spelling(cell):
    path = cell / "points.toml"
    before = _hand_edit(path)
    with PointBook.open(path, ARM) as book:
        book.set_note("clear", "moved clear of the new feeder")
        book.save()
    after = path.read_text()
    assert "# the nest moved 2 mm in March: re-taught" in after
    assert "version    = 1     # keep at 1" in after
    assert after.startswith("# benchjog points file")
    # exactly one line differs: the note
    changed = [(a, b) for a, b in zip(before.splitlines(), after.splitlines()) if a != b]
    assert len(before.splitlines()) == len(after.splitlines())
    assert changed == [('note = "safe approach, clear of tray and fixture"',
                        'note = "moved clear of the new feeder"')]
    # and the data are what the plain writer would have written
    assert tomllib.loads(after) == tomllib.loads(toml_text(book.to_mapping()))


def test_points_delete_and_rename_leave_the_other_points_comments(cell):
    path = cell / "points.toml"
    _hand_edit(path)
    with PointBook.open(path, ARM) as book:
        book.delete("clear")
        book.save()
    after = path.read_text()
    assert "# the nest moved 2 mm in March: re-taught\n[[points]]\nname = \"pick\"" in after
    assert 'name = "clear"' not in after
    assert PointBook.load(path, ARM).names == [n for n in PointBook.load(CELL / "points.toml", ARM).names
                                                 if n != "clear"]


def test_an_unchanged_save_is_byte_identical(cell):
    path = cell / "program.toml"
    path.write_text(path.read_text().replace("speed_pct = 80.0", "speed_pct = 80.0  # slow: cables"))
    before = path.read_text()
    program = Program.load(path)
    program.save()
    assert path.read_text() == before


def test_program_step_added_keeps_the_header_comments(cell):
    path = cell / "program.toml"
    before = path.read_text()
    program = Program.load(path)
    program.add_step(DwellStep(0.5))
    program.save()
    after = path.read_text()
    assert after.startswith(before.split("[program]")[0])  # the header comment block
    assert Program.load(path).steps[-1] == DwellStep(0.5)
    assert after.count("[[steps]]") == before.count("[[steps]]") + 1


def test_stale_temp_files_of_a_killed_save_go_on_the_next_save(cell):
    path = cell / "program.toml"
    stale = [cell / ".program.toml.k1ll3d.tmp", cell / ".program.toml.bak.4242.tmp"]
    fresh = cell / ".program.toml.other.tmp"
    for f in (*stale, fresh):
        f.write_text("half a save")
    old = time.time() - 3600
    for f in stale:
        os.utime(f, (old, old))
    unrelated = cell / ".points.toml.abc.tmp"
    unrelated.write_text("x")
    os.utime(unrelated, (old, old))
    Program.load(path).save()
    assert not any(f.exists() for f in stale)
    assert fresh.exists()      # young: might be another writer's, left alone
    assert unrelated.exists()  # another file's temp


def test_lock_file_is_removed_on_release_and_reused_safely(cell):
    path = cell / "points.toml"
    with PointBook.open(path, ARM):
        assert lock_path(path).exists()
    assert not lock_path(path).exists()
    with FileLock(path):
        with pytest.raises(FileError, match="locked by another console"):
            FileLock(path).acquire()
    assert not lock_path(path).exists()


def test_a_lock_that_cannot_be_written_is_one_line(cell):
    path = cell / "points.toml"
    os.symlink("/dev/full", lock_path(path))  # every write fails: No space left on device
    with pytest.raises(FileError) as caught:
        PointBook.open(path, ARM)
    line = str(caught.value)
    assert "\n" not in line and "cannot lock" in line and str(path) in line


async def test_teach_screen_with_an_unwritable_lock_is_read_only_not_a_crash(cell):
    # the full-disk lock case in the console: the teach key opens the screen read-only
    # with the one-line reason; the app keeps running (Textual App.run_test and Pilot)
    from benchjog.console.tui.app import make_app
    from benchjog.console.tui.screens.teach import TeachScreen
    from benchjog.drivers.interlock import Interlock

    os.symlink("/dev/full", lock_path(cell / "points.toml"))
    gate = Interlock.open(ARM, "sim", journal=False)
    try:
        app = make_app(ARM, gate, points_path=cell / "points.toml",
                       program_path=cell / "program.toml")
        async with app.run_test(size=(120, 40)) as pilot:
            await pilot.pause()
            await pilot.press("t")
            for _ in range(100):
                if isinstance(app.screen, TeachScreen):
                    break
                await pilot.pause(0.03)
            screen = app.screen
            assert isinstance(screen, TeachScreen)
            assert screen.read_only is True
            await pilot.press("a")  # teach: refused politely on a read-only screen
            await pilot.pause(0.1)
            assert app.is_running
    finally:
        gate.close()
