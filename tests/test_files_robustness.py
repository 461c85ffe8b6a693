"""Files a person edits by hand, or keeps behind a link: odd content gets one line and
loses nothing; saves go to the real file."""

from __future__ import annotations

import os
from pathlib import Path

import pytest

from benchjog.console.cell.armfile import builtin_arm, load_arm
from benchjog.console.cell.points import PointBook
from benchjog.console.cell.programs import Program
from benchjog.console.cell.safe_files import FileError, FileLock, write_atomic

ROOT = Path(__file__).resolve().parents[1]
ARM = builtin_arm("planar-bench")
CELL = ROOT / "examples" / "bench-cell"


def test_huge_integers_are_one_line_errors(tmp_path):
    # TOML integers have no size limit in tomllib; float() of 10**400 overflows.
    points = (CELL / "points.toml").read_text().replace("cartesian = [240.0, 60.0]",
                                                         f"cartesian = [{10 ** 400}, 60.0]")
    (tmp_path / "points.toml").write_text(points)
    with pytest.raises(FileError, match="not a finite number"):
        PointBook.load(tmp_path / "points.toml", ARM)
    program = (CELL / "program.toml").read_text().replace("seconds = 0.4", f"seconds = {10 ** 400}")
    (tmp_path / "program.toml").write_text(program)
    with pytest.raises(FileError, match="not a finite number"):
        Program.load(tmp_path / "program.toml")


def test_a_byte_order_mark_is_accepted(tmp_path):
    text = (ROOT / "console" / "cell" / "arms" / "planar-bench.toml").read_text()
    (tmp_path / "arm.toml").write_bytes(b"\xef\xbb\xbf" + text.encode())
    assert load_arm(tmp_path / "arm.toml").name == "planar-bench"
    (tmp_path / "points.toml").write_bytes(b"\xef\xbb\xbf" + (CELL / "points.toml").read_bytes())
    assert PointBook.load(tmp_path / "points.toml", ARM).points


def test_saving_through_a_link_writes_the_real_file(tmp_path):
    real_dir = tmp_path / "real"
    real_dir.mkdir()
    real = real_dir / "points.toml"
    real.write_bytes((CELL / "points.toml").read_bytes())
    link = tmp_path / "link.toml"
    link.symlink_to(real)
    book = PointBook.load(link, ARM)
    book.save(link)
    assert link.is_symlink()  # still a link, not a copy that forks the file
    assert (real_dir / "points.toml.bak").exists()
    with FileLock(real):  # one file, one lock, whichever name it is opened by
        with pytest.raises(FileError, match="locked"):
            FileLock(link).acquire()


def test_text_that_is_not_unicode_is_refused_and_the_old_file_kept(tmp_path):
    path = tmp_path / "notes.toml"
    path.write_text("old = 1\n")
    with pytest.raises(FileError, match="not valid Unicode"):
        write_atomic(path, 'note = "x\udcff"\n')
    assert path.read_text() == "old = 1\n"
    assert [p.name for p in tmp_path.iterdir()] == ["notes.toml"]  # no temp file left


def test_a_book_saves_to_its_own_file_under_another_spelling(tmp_path, monkeypatch):
    (tmp_path / "points.toml").write_bytes((CELL / "points.toml").read_bytes())
    monkeypatch.chdir(tmp_path)
    book = PointBook.open("points.toml", ARM)  # holds the lock
    try:
        book.save(tmp_path / "points.toml")      # the same file, by its absolute name
    finally:
        book.close()
    assert (tmp_path / "points.toml.bak").exists()
