"""Saving a points file a person edited keeps what they wrote, by editing its text.

Each case starts from the demo cell's points file (examples/bench-cell/points.toml)
with a person's touches added (comments before, inside and after tables, inline
comments after values, blank lines, keys in their own order, CRLF line ends, no final
newline), makes one edit through the book and saves. Two checks, both from outside the
project's writer:

- tomllib (the standard library's TOML 1.0 reader) reads the saved file back to exactly
  the data the plain writer's text of the book reads as (safe_files.toml_text, itself
  checked against tomllib in tests/test_points_save_fast.py);
- every line of the file as it was, outside the tables the edit changes, is in the
  saved file byte for byte and in the same order (a line-by-line subsequence check).

Where the text cannot be edited provably (a changed value written over several lines),
the save takes tomlkit's keeping road, and the data is still right.
"""

from __future__ import annotations

import math
import re
import tomllib
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from benchjog.console.cell.armfile import builtin_arm
from benchjog.console.cell.points import PointBook, _spliced
from benchjog.console.cell.safe_files import toml_pieces, toml_text
from benchjog.kinematics.frames import UserFrame

ROOT = Path(__file__).resolve().parents[1]
PLANAR = builtin_arm("planar-bench")
DEMO = (ROOT / "examples" / "bench-cell" / "points.toml").read_text()


def touched(text: str) -> str:
    """The demo file with a person's touches: a comment block above a table, a comment
    inside a table, a comment after the last table, inline comments after values (one
    with a # inside a string before it) and a blank line inside a table."""
    text = text.replace('[[points]]\nname = "pick-above"\n',
                        '# re-taught in March after the nest moved\n'
                        '[[points]]\nname = "pick-above"\n', 1)
    text = text.replace('name = "clear"\nframe = "base"\n',
                        'name = "clear"\n# keep this one above the tray\n\nframe = "base"\n', 1)
    text = text.replace('name = "pick"\nframe = "fixture"\ncartesian = [30.0, 0.0]\n',
                        'name = "pick"\nframe = "fixture"\n'
                        'cartesian = [30.0, 0.0]    # nest centre, by the #2 gauge\n', 1)
    text = text.replace('arm = "planar-bench"\n', 'arm = "planar-bench"   # bench 3\n', 1)
    return text + "\n# end of the taught points\n"


def table_lines(text: str, name: str) -> set[int]:
    """Line numbers (0-based) of the [[points]] table named ``name``: the comment and
    blank lines just above its header, the header, and its lines up to the next
    table's (the comments after the last table count as the last table's)."""
    lines = text.splitlines(keepends=True)
    heads = [i for i, line in enumerate(lines) if line.lstrip().startswith("[")]
    starts = []
    for h in heads:
        s = h
        while s > 0 and (lines[s - 1].lstrip().startswith("#") or not lines[s - 1].strip()):
            s -= 1
        starts.append(s)
    for n, h in enumerate(heads):
        end = starts[n + 1] if n + 1 < len(heads) else len(lines)
        if any(re.match(rf'name = "{re.escape(name)}"', lines[k]) for k in range(h, end)):
            return set(range(starts[n], end))
    raise AssertionError(f"no table {name}")


def kept_in_order(before: str, after: str, changed: set[int]) -> bool:
    """Whether every line of ``before`` not numbered in ``changed`` is in ``after``,
    byte for byte (line ends included), in the same order."""
    want = [line for i, line in enumerate(before.splitlines(keepends=True)) if i not in changed]
    got = iter(after.splitlines(keepends=True))
    return all(any(line == g for g in got) for line in want)


def reference(book: PointBook) -> dict:
    # what the plain writer's text reads as (tomllib, the standard library's reader)
    return tomllib.loads(toml_text(book.to_mapping()))


def save_after(tmp_path: Path, text: str, edit) -> tuple[PointBook, str]:
    path = tmp_path / "points.toml"
    path.write_bytes(text.encode("utf-8"))
    book = PointBook.load(path, PLANAR)
    edit(book)
    # the text is edited (not tomlkit's road): read in pieces, and the splice proven
    assert book._pieces is not None and _spliced(book, book._as_read, book._pieces) is not None
    book.save()
    return book, path.read_bytes().decode("utf-8")


def test_an_untouched_book_saves_the_file_as_it_was(tmp_path):
    before = touched(DEMO)
    book, after = save_after(tmp_path, before, lambda b: None)
    assert after == before


def test_a_changed_note_rewrites_only_its_line(tmp_path):
    before = touched(DEMO)
    book, after = save_after(tmp_path, before, lambda b: b.set_note("place", "moved 2 mm"))
    assert tomllib.loads(after) == reference(book)
    assert kept_in_order(before, after, table_lines(before, "place"))
    assert 'note = "moved 2 mm"\n' in after
    # the changed table keeps its other lines too: one line differs in all
    assert len(set(after.splitlines()) - set(before.splitlines())) == 1
    for words in ("# re-taught in March", "# keep this one above the tray",
                  "# nest centre, by the #2 gauge", "# bench 3", "# end of the taught points"):
        assert words in after


def test_a_deleted_point_goes_with_the_comment_above_it(tmp_path):
    before = touched(DEMO)
    book, after = save_after(tmp_path, before, lambda b: b.delete("pick-above"))
    assert tomllib.loads(after) == reference(book)
    gone = table_lines(before, "pick-above")
    assert kept_in_order(before, after, gone)
    assert "# re-taught in March" not in after and 'name = "pick-above"' not in after
    assert len(after.splitlines()) == len(before.splitlines()) - len(gone)


def test_a_renamed_point_keeps_its_comments_and_place(tmp_path):
    before = touched(DEMO)
    book, after = save_after(tmp_path, before, lambda b: b.rename("pick", "pick-nest"))
    assert tomllib.loads(after) == reference(book)
    assert kept_in_order(before, after, table_lines(before, "pick"))
    assert 'name = "pick-nest"\nframe = "fixture"\ncartesian = [30.0, 0.0]    # nest centre' in after
    assert [p["name"] for p in tomllib.loads(after)["points"]] == book.names


def test_a_new_point_is_written_after_the_last_one(tmp_path):
    before = touched(DEMO)

    def teach(b: PointBook) -> None:
        b.teach("extra", b.point("clear").joints, taught="2026-12-02T08:00:00Z", note="new")
    book, after = save_after(tmp_path, before, teach)
    assert tomllib.loads(after) == reference(book)
    assert kept_in_order(before, after, set())
    assert after.startswith(before[:-len("\n# end of the taught points\n")])
    assert tomllib.loads(after)["points"][-1]["name"] == "extra"


def test_a_frame_taught_again_rewrites_the_frame_and_its_points_only(tmp_path):
    before = touched(DEMO)
    book = PointBook.load(ROOT / "examples" / "bench-cell" / "points.toml", PLANAR)
    in_frame = [p.name for p in book.points if p.frame == "fixture"]
    moved = UserFrame("fixture", 104.0, 221.5, math.radians(21.0), 0.0)
    book, after = save_after(tmp_path, before,
                             lambda b: b.set_frame(moved, taught="2026-12-03T10:00:00Z"))
    assert tomllib.loads(after) == reference(book)
    changed = set().union(*(table_lines(before, n) for n in in_frame))
    lines = before.splitlines(keepends=True)
    frame_at = lines.index("[[frames]]\n")
    changed |= set(range(frame_at, lines.index("\n", frame_at)))
    assert kept_in_order(before, after, changed)
    for words in ("# re-taught in March", "# nest centre, by the #2 gauge"):
        assert words in after
    assert "origin = [104.0, 221.5]\n" in after


def test_crlf_file_stays_crlf(tmp_path):
    before = touched(DEMO).replace("\n", "\r\n")
    book, after = save_after(tmp_path, before, lambda b: (
        b.set_note("place", "moved 2 mm"), b.delete("clear"),
        b.teach("extra", b.point("pick").joints, taught="2026-12-02T08:00:00Z")))
    assert tomllib.loads(after) == reference(book)   # TOML 1.0: CRLF is a newline (from memory)
    assert "\n" not in after.replace("\r\n", "")
    assert kept_in_order(before, after, table_lines(before, "place") | table_lines(before, "clear"))


@pytest.mark.parametrize("edit", ["note of the last", "new point", "nothing"])
def test_a_file_without_a_final_newline(tmp_path, edit):
    before = DEMO.rstrip("\n")
    last = tomllib.loads(DEMO)["points"][-1]["name"]
    actions = {"note of the last": lambda b: b.set_note(last, "checked"),
               "new point": lambda b: b.teach("extra", b.point("clear").joints,
                                              taught="2026-12-02T08:00:00Z"),
               "nothing": lambda b: None}
    book, after = save_after(tmp_path, before, actions[edit])
    assert tomllib.loads(after) == reference(book)
    changed = table_lines(before, last) if edit == "note of the last" else set()
    if edit == "new point":   # the last line gains its line end
        changed = {len(before.splitlines()) - 1}
    assert kept_in_order(before, after, changed)
    if edit == "nothing":
        assert after == before


def test_keys_in_a_persons_order_stay_in_it(tmp_path):
    table = re.search(r'\[\[points\]\]\nname = "place"\n(?:[^\n]+\n)*', DEMO).group(0)
    header, *keys = table.splitlines(keepends=True)
    mine = header + "".join(reversed(keys))   # the keys in the opposite order
    before = DEMO.replace(table, mine, 1)
    book, after = save_after(tmp_path, before, lambda b: b.set_note("clear", "kept"))
    assert mine in after   # untouched: byte for byte
    assert tomllib.loads(after) == reference(book)
    book, after = save_after(tmp_path, before, lambda b: b.set_note("place", "changed"))
    assert tomllib.loads(after) == reference(book)
    place = re.search(r'\[\[points\]\]\n(?:[^\n]+\n)*?name = "place"\n(?:[^\n]+\n)*', after).group(0)
    order = [line.split(" =")[0] for line in place.splitlines()[1:]]
    assert order == [line.split(" =")[0] for line in reversed(keys)]
    assert 'note = "changed"' in place


def test_a_changed_value_over_several_lines_takes_the_careful_road(tmp_path):
    before = touched(DEMO).replace("cartesian = [240.0, 60.0]\n", "cartesian = [\n  240.0,\n  60.0,\n]\n", 1)
    pieces = toml_pieces(before, ("file",), ("frames", "points"))
    assert pieces is not None and pieces[0] == tomllib.loads(before)
    path = tmp_path / "points.toml"
    path.write_text(before)
    book = PointBook.load(path, PLANAR)
    point = book.point("clear")
    book.points[book.names.index("clear")] = type(point)(
        point.name, (241.0, 60.0), point.joints, point.branch, point.frame, point.taught, point.note)
    assert _spliced(book, before, pieces[1]) is None   # cannot be proven: not spliced
    book.save()
    after = path.read_text()
    assert tomllib.loads(after) == reference(book)
    assert "# re-taught in March" in after   # tomlkit keeps it
    # unchanged, the same value over several lines is kept as written
    book, again = save_after(tmp_path, before, lambda b: b.set_note("place", "x"))
    assert "cartesian = [\n  240.0,\n  60.0,\n]\n" in again
    assert tomllib.loads(again) == reference(book)


def test_numbers_a_person_spelled_are_kept_until_changed(tmp_path):
    # 240 and 240.0 are the same number to the reader (TOML 1.0: an integer and a float;
    # tomllib compares them equal), so an unchanged table keeps the spelling
    before = DEMO.replace("cartesian = [240.0, 60.0]", "cartesian = [240, 60.00]", 1)
    book, after = save_after(tmp_path, before, lambda b: b.set_note("place", "x"))
    assert "cartesian = [240, 60.00]" in after
    assert tomllib.loads(after) == reference(book)


def test_a_hash_in_a_string_is_not_taken_for_a_comment(tmp_path):
    before = DEMO.replace('note = "safe approach, clear of tray and fixture"',
                          'note = "bin #4, row #2"  # said the floor lead', 1)
    book, after = save_after(tmp_path, before, lambda b: b.set_note("clear", "bin #5"))
    assert 'note = "bin #5"  # said the floor lead\n' in after
    assert tomllib.loads(after) == reference(book)


def test_saving_twice_keeps_using_the_edited_text(tmp_path):
    before = touched(DEMO)
    path = tmp_path / "points.toml"
    path.write_text(before)
    book = PointBook.load(path, PLANAR)
    book.set_note("place", "one")
    book.save()
    book.delete("pick")
    book.teach("extra", book.point("clear").joints, taught="2026-12-02T08:00:00Z")
    book.save()
    after = path.read_text()
    assert tomllib.loads(after) == reference(book)
    assert kept_in_order(before, after, table_lines(before, "place") | table_lines(before, "pick"))


NOTE_TEXT = st.text(alphabet=st.sampled_from(list('ab #[]="\'\\\n\t') + ["é", "\x07"]), max_size=12)
EDITS = st.lists(st.one_of(
    st.tuples(st.just("note"), st.integers(0, 20), NOTE_TEXT),
    st.tuples(st.just("delete"), st.integers(0, 20), st.just("")),
    st.tuples(st.just("rename"), st.integers(0, 20), st.text(alphabet="xyz-", min_size=1, max_size=6)),
    st.tuples(st.just("teach"), st.integers(0, 20), st.text(alphabet="uvw", min_size=1, max_size=6)),
    st.tuples(st.just("frame"), st.integers(0, 20), st.just(""))), max_size=6)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(EDITS, st.sampled_from(["\n", "\r\n"]), st.booleans())
def test_any_edits_save_to_the_books_data(tmp_path, edits, nl, final_newline):
    # whatever the edits, the saved text reads (tomllib) as the plain writer's text of
    # the book does, and reads back into the same book
    before = touched(DEMO).replace("\n", nl)
    if not final_newline:
        before = before.rstrip("\r\n")
    path = tmp_path / "points.toml"
    path.write_bytes(before.encode("utf-8"))
    book = PointBook.load(path, PLANAR)
    for what, k, words in edits:
        names = book.names
        if not names and what != "frame":
            continue
        name = names[k % len(names)] if names else ""
        if what == "note":
            book.set_note(name, words)
        elif what == "delete":
            book.delete(name)
        elif what == "rename" and not book.has(words):
            book.rename(name, words)
        elif what == "teach" and not book.has(words):
            book.teach(words, PLANAR.home_joints, taught="2026-12-02T08:00:00Z")
        elif what == "frame":
            book.set_frame(UserFrame("fixture", 100.0 + k, 220.0, math.radians(20.0 + k), 0.0),
                           taught="2026-12-03T10:00:00Z")
        book.save()
        after = path.read_bytes().decode("utf-8")
        assert tomllib.loads(after) == reference(book)
        again = PointBook.load(path, PLANAR)
        assert again.names == book.names and again.to_mapping() == book.to_mapping()
    assert "# bench 3" in path.read_text()   # the [file] table is never deleted
