"""Saving a points book fast gives the very file the general writers give.

- The points' own writer (PointBook._plain_text) is byte for byte safe_files.toml_text of
  the book's mapping, for strings TOML must escape too (TOML 1.0, "String": the quote,
  the backslash and control characters are escaped; from memory) and read back by
  tomllib (the standard library's TOML 1.0 reader) to the same data.
- A file as benchjog wrote it (nothing of a person's in it) is saved by the plain writer;
  the text is the same as tomlkit's keeping road gives (safe_files.toml_text_keeping),
  but where a table is new (a point taught or renamed), which that road spaces its own way
  (a missing or a second blank line; the same data).
- A file with anything of a person's (a comment, spacing, a number spelled 1.50) takes
  the keeping road: that stays.
"""

from __future__ import annotations

import math
import re
import tomllib

import pytest

from benchjog.console.cell.armfile import builtin_arm
from benchjog.console.cell.points import _HEADER, PointBook, TaughtPoint
from benchjog.console.cell.safe_files import toml_text, toml_text_keeping
from benchjog.kinematics.frames import UserFrame
from benchjog.kinematics.model import Branch
from benchjog.kinematics.solve import joints_from_tool

PLANAR = builtin_arm("planar-bench")
SCARA = builtin_arm("scara-bench")
NOTES = ["", "tray slot 1", 'say "hi"', "C:\\parts", "two\nlines", "tab\there", "bell\x07",
         "del\x7f", "Grüße, 部品", "# not a comment", "=[]{}"]


def _book(arm, tmp_path, n=30) -> PointBook:
    book = PointBook(arm, path=tmp_path / "points.toml")
    book.set_frame(UserFrame("jig", 120.0, 200.0, math.radians(15.0), 0.0), taught="2026-11-30T10:00:00Z")
    for k in range(n):
        x, y = 150.0 + 4.1 * k, -60.0 + 7.3 * k
        target = (x, y, 100.0 - k, math.radians(k)) if arm.is_scara else (x, y)
        branch = Branch.ELBOW_UP if k % 3 else Branch.ELBOW_DOWN
        joints = joints_from_tool(arm, target).solution(branch).joints
        book.teach(f"p{k}", joints, frame="jig" if k % 4 == 0 else "base",
                   note=NOTES[k % len(NOTES)], taught="" if k == 5 else "2026-12-01T09:31:12Z")
    return book


@pytest.mark.parametrize("arm", [PLANAR, SCARA], ids=["planar", "scara"])
def test_the_points_writer_is_the_plain_writer(arm, tmp_path):
    book = _book(arm, tmp_path)
    text = book._plain_text()
    assert text == toml_text(book.to_mapping(), _HEADER)
    assert tomllib.loads(text) == tomllib.loads(toml_text(book.to_mapping()))
    assert '"say \\"hi\\""' in text and '"bell\\u0007"' in text  # escaped as TOML wants
    # numbers as code may hand them over: ints, -0.0, a value that rounds to -0.0
    values = (240, -0.0, -1e-9, 0.1234567) if arm.is_scara else (240, -0.0)
    book.points.append(TaughtPoint("odd", values, values[:arm.n_joints], Branch.ELBOW_UP))
    assert book._plain_text() == toml_text(book.to_mapping(), _HEADER)
    empty = PointBook(arm, path=tmp_path / "empty.toml")
    assert empty._plain_text() == toml_text(empty.to_mapping(), _HEADER)


def _edits(book: PointBook):
    yield "unchanged", lambda: None
    yield "note", lambda: book.set_note("p3", "moved 2 mm")
    yield "delete", lambda: book.delete("p7")
    yield "rename", lambda: book.rename("p8", "p8-new")
    yield "teach", lambda: book.teach("extra", book.point("p1").joints,
                                      taught="2026-12-02T08:00:00Z")


def _hex_lower(text: str) -> str:
    return re.sub(r"\\u[0-9A-Fa-f]{4}", lambda m: m.group(0).lower(), text)


@pytest.mark.parametrize("arm", [PLANAR, SCARA], ids=["planar", "scara"])
def test_a_file_as_benchjog_wrote_it_saves_as_tomlkit_would(arm, tmp_path):
    path = tmp_path / "points.toml"
    _book(arm, tmp_path).save()
    for _name, edit in list(_edits(PointBook.load(path, arm))):
        book = PointBook.load(path, arm)
        book.path = path
        dict(_edits(book))[_name]()
        as_read = path.read_text()
        fast = book.to_text(keep=as_read)
        assert fast == toml_text(book.to_mapping(), _HEADER), _name
        careful = toml_text_keeping(as_read, book.to_mapping(), header=_HEADER)
        if _name in ("rename", "teach"):   # a new table: tomlkit's road spaces it its own way
            assert tomllib.loads(fast) == tomllib.loads(careful)
        else:
            # tomlkit's releases differ in the case of a \uXXXX escape's hex digits (0.11
            # writes \u007F, later ones \u007f): the same TOML string (TOML 1.0, "String")
            assert tomllib.loads(fast) == tomllib.loads(careful), _name
            assert _hex_lower(fast) == _hex_lower(careful), _name


def test_a_persons_touches_take_the_keeping_road(tmp_path):
    path = tmp_path / "points.toml"
    _book(PLANAR, tmp_path).save()
    plain = path.read_text()
    touches = {
        "comment": plain.replace('[[points]]\nname = "p2"\n',
                                 '# re-taught in March\n[[points]]\nname = "p2"\n', 1),
        "inline comment": plain.replace('version = 1\n', 'version = 1  # keep\n', 1),
        "spacing": plain.replace('version = 1\n', 'version    = 1\n', 1),
        "spelling": plain.replace('origin = [120.0, 200.0]', 'origin = [120.00, 200.0]', 1),
        "blank line": plain.replace('[[points]]\nname = "p4"\nframe', '[[points]]\nname = "p4"\n\nframe', 1),
    }
    for what, text in touches.items():
        assert text != plain, what
        path.write_text(text)
        book = PointBook.load(path, PLANAR)
        book.path = path
        book.set_note("p9", "changed")   # a change elsewhere
        book.save()
        after = path.read_text()
        kept = {"comment": "# re-taught in March", "inline comment": "version = 1  # keep",
                "spacing": "version    = 1", "spelling": "origin = [120.00, 200.0]",
                "blank line": 'name = "p4"\n\nframe'}[what]
        assert kept in after, what
        assert 'note = "changed"' in after
        assert tomllib.loads(after) == tomllib.loads(toml_text(book.to_mapping()))
