"""Big cells: a points book of thousands of points is looked up by name through an
index kept beside its list (checked here against a plain linear search, the obvious
reference), a missing name is one short line with a few close matches, and a program
that repeats a cycle is planned once per distinct move with the same report at every
repetition."""

from __future__ import annotations

import random

import pytest

from benchjog.console.cell.armfile import builtin_arm
from benchjog.console.cell.points import PointBook, PointError
from benchjog.console.cell.program_runs import plan_program
from benchjog.console.cell.programs import MoveStep, Program
from benchjog.kinematics.model import Branch
from benchjog.kinematics.solve import joints_from_tool

ARM = builtin_arm("planar-bench")


def grid_book(n: int, tmp_path) -> PointBook:
    book = PointBook(ARM, path=tmp_path / "points.toml")
    for k in range(n):
        x, y = -100.0 + (k % 50) * 4.0, 180.0 + (k // 50) * 2.0
        book.teach(f"p{k:05d}", joints_from_tool(ARM, (x, y)).solution(Branch.ELBOW_DOWN).joints,
                   taught="2026-01-01T00:00:00Z")
    return book


def linear(book: PointBook, name: str):
    return next((p for p in book.points if p.name == name), None)


def test_the_name_index_agrees_with_a_linear_search_through_edits(tmp_path):
    book = grid_book(600, tmp_path)
    book.save()
    book = PointBook.load(book.path, ARM)  # the index built while loading
    rng = random.Random(7)
    for step in range(400):
        names = book.names
        pick = rng.choice(names)
        action = rng.choice(["rename", "delete", "teach", "note"])
        if action == "rename":
            book.rename(pick, f"r{step}")
        elif action == "delete":
            book.delete(pick)
        elif action == "teach":
            book.teach(f"t{step}", book.point(pick).joints)
        else:
            book.set_note(pick, f"note {step}")
        for name in rng.sample(book.names, 5) + [pick, f"r{step}", f"t{step}", "nosuch"]:
            assert book.has(name) == (linear(book, name) is not None), (step, action, name)
            if book.has(name):
                assert book.point(name) is linear(book, name)


def test_a_list_changed_behind_the_books_back_is_still_looked_up_right(tmp_path):
    book = grid_book(20, tmp_path)
    assert book.has("p00003")
    book.points.reverse()                      # reordered without the book's methods
    assert book.point("p00003") is linear(book, "p00003")
    book.points[0] = book.points[1]            # replaced: p00019 is gone
    assert not book.has("p00019") and linear(book, "p00019") is None


def test_a_missing_point_names_a_few_close_matches_on_one_short_line(tmp_path):
    book = grid_book(2000, tmp_path)
    with pytest.raises(PointError) as err:
        book.point("p0123")
    message = str(err.value)
    assert "\n" not in message and len(message) < 200
    assert "did you mean" in message and message.count("'p0") <= 4
    with pytest.raises(PointError, match="2000 points, none like it"):
        book.point("completely-different")


def test_a_repeated_cycle_reports_the_same_at_every_repetition(tmp_path):
    book = grid_book(50, tmp_path)
    cycle = [MoveStep("p00000"), MoveStep("p00049"), MoveStep("p00025", path="line")]
    program = Program("cycle", "points.toml", cycle * 4)
    report = plan_program(ARM, program, book)
    assert report.ok, report.problems
    per_cycle = [report.steps[i:i + 3] for i in range(0, 12, 3)]
    for later in per_cycle[2:]:  # from the second lap on, each lap starts where the last ended
        for a, b in zip(per_cycle[1], later):
            assert a.summary == b.summary and a.duration_s == b.duration_s
            assert [s.joints for s in a.action.segments] == [s.joints for s in b.action.segments]


def test_a_refused_repeated_step_is_refused_at_every_repetition(tmp_path):
    book = grid_book(10, tmp_path)
    tray = joints_from_tool(ARM, (-250.0, 0.0)).solution(Branch.ELBOW_DOWN)  # inside the tray zone
    book.teach("in-tray", tray.joints)
    program = Program("bad", "points.toml", [MoveStep("p00000"), MoveStep("in-tray")] * 3)
    report = plan_program(ARM, program, book)
    refused = [s.number for s in report.steps if s.problems]
    assert refused == [2, 4, 6]
