"""Reading a points file table by table (safe_files.toml_pieces / parse_toml_pieces)
gives exactly what one ``tomllib.loads`` of the whole text gives (tomllib: the standard
library's TOML 1.0 reader, the reference here), or is refused and then is that one parse.

Checked on the demo cells' files, on texts whose multi-line strings and arrays hold a
"[" (even a whole header) at a line start, and on random texts made of header lines,
keys, comments and the openings and closings of multi-line strings and arrays
(hypothesis): the same mapping, or the same one-line error.
"""

from __future__ import annotations

import tomllib
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from benchjog.console.cell.armfile import builtin_arm
from benchjog.console.cell.points import PointBook
from benchjog.console.cell.safe_files import FileError, parse_toml, parse_toml_pieces, toml_pieces

ROOT = Path(__file__).resolve().parents[1]
KINDS = (("file",), ("frames", "points"))
PLANAR = builtin_arm("planar-bench")


def whole(text: str):
    """One tomllib parse (the reference): the mapping, or the FileError's line."""
    try:
        return parse_toml(text, "cell.toml")
    except FileError as exc:
        return str(exc)


def in_pieces(text: str, progress=None):
    try:
        return parse_toml_pieces(text, "cell.toml", *KINDS, progress=progress)[0]
    except FileError as exc:
        return str(exc)


@pytest.mark.parametrize("path", sorted(ROOT.glob("examples/*/*.toml")), ids=lambda p: p.parent.name + "/" + p.name)
def test_the_demo_files_read_the_same(path):
    text = path.read_text()
    assert in_pieces(text) == tomllib.loads(text)
    if path.name == "points.toml":   # a points file is read in pieces, not refused
        data, pieces = toml_pieces(text, *KINDS)
        assert data == tomllib.loads(text)
        assert [p.kind for p in pieces[1:]] == ["file"] + ["frames"] * len(data.get("frames", [])) \
            + ["points"] * len(data["points"])
        assert "".join(text[p.start:p.end] for p in pieces) == text


DEMO = (ROOT / "examples" / "bench-cell" / "points.toml").read_text()
TRICKY = {
    "header in a multi-line string": DEMO.replace(
        'note = "safe approach, clear of tray and fixture"',
        'note = """\n[[points]]\nname = "not a point"\n"""', 1),
    "comment and header in a literal string": DEMO.replace(
        'note = "safe approach, clear of tray and fixture"',
        "note = '''\n# not a comment\n[file]\n'''", 1),
    "brackets in a multi-line array": DEMO.replace(
        "cartesian = [240.0, 60.0]", "cartesian = [\n[240.0], [60.0],\n  [1.0]\n]", 1),
    "a sub-table": DEMO.replace('arm = "planar-bench"\n', 'arm = "planar-bench"\n[file.extra]\nx = 1\n', 1),
    "a header twice": DEMO.replace("[[frames]]", "[file]\nkind = 2\n\n[[frames]]", 1),
    "a key before the first table": "points = 3\n" + DEMO,
    "an inline comment on a header and spaces": DEMO.replace("[[points]]", "  [[ points ]]   # one", 2),
    "crlf": DEMO.replace("\n", "\r\n"),
    "an unterminated string": DEMO.replace('note = "safe', 'note = """safe', 1),
}


@pytest.mark.parametrize("what", list(TRICKY))
def test_tricky_texts_read_as_one_parse_reads_them(what):
    text = TRICKY[what]
    assert in_pieces(text) == whole(text)


FRAGMENTS = ["[file]", "[[points]]", "[[frames]]", "[file.x]", "[points.y]", "[[ points ]]  # c",
             "  [file]", "# c", "", "a = 1", "b = 2", 'name = "x"', 'n = """', '"""', "m = '''", "'''",
             "d = [", "]", "[1, 2],", '"[[points]]",', 'e = "[[points]] # no"', "kind = 'k'"]


@settings(max_examples=300, deadline=None)
@given(st.lists(st.sampled_from(FRAGMENTS), max_size=14), st.sampled_from(["\n", "\r\n"]))
def test_any_text_reads_as_one_parse_reads_it(lines, nl):
    text = nl.join(lines) + nl
    assert in_pieces(text) == whole(text)


def test_progress_counts_up_to_the_whole_text(tmp_path):
    book = PointBook(PLANAR, path=tmp_path / "points.toml")
    for k in range(1000):
        book.teach(f"p{k}", PLANAR.home_joints, taught="2026-01-01T00:00:00Z")
    text = book.to_text()
    seen = []
    assert in_pieces(text, progress=lambda done, total: seen.append((done, total))) == tomllib.loads(text)
    assert len(seen) >= 3 and seen[-1] == (len(text), len(text))
    assert [d for d, _t in seen] == sorted(d for d, _t in seen)


def test_a_bad_point_is_still_one_line_naming_file_and_key(tmp_path):
    book = PointBook(PLANAR, path=tmp_path / "points.toml")
    for k in range(600):
        book.teach(f"p{k}", PLANAR.home_joints, taught="2026-01-01T00:00:00Z")
    text = book.to_text().replace('name = "p543"\nframe = "base"\ncartesian = [',
                                  'name = "p543"\nframe = "base"\ncartesian = ["x", ', 1)
    path = tmp_path / "points.toml"
    path.write_text(text)
    with pytest.raises(FileError) as err:
        PointBook.load(path, PLANAR)
    assert str(err.value).startswith(f"{path}: point 'p543': cartesian")
    assert "\n" not in str(err.value)
    path.write_text(text.replace('[[points]]\nname = "p12"', '[[points]]\nname = "p12', 1))
    with pytest.raises(FileError) as err:
        PointBook.load(path, PLANAR)
    assert str(err.value) == whole(path.read_text()).replace("cell.toml", str(path))
