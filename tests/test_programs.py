"""Program files: validation with one-line errors, round trip, edits, atomic save."""

from __future__ import annotations

import os
from pathlib import Path

import pytest

from benchjog.console.cell.programs import (DwellStep, MoveStep, OutputStep, Program, ProgramError,
                              program_from_mapping)
from benchjog.console.cell.safe_files import FileError

ROOT = Path(__file__).resolve().parents[1]

GOOD = """
[program]
kind = "benchjog-program"
version = 1
name = "t"
points = "points.toml"

[[steps]]
action = "move"
point = "a"
path = "line"
speed_pct = 40

[[steps]]
action = "dwell"
seconds = 0.5

[[steps]]
action = "output"
channel = 3
on = true
"""


def write(tmp_path: Path, text: str) -> Path:
    path = tmp_path / "prog.toml"
    path.write_text(text)
    return path


def test_load_reads_every_kind_of_step(tmp_path):
    program = Program.load(write(tmp_path, GOOD))
    assert program.steps == [MoveStep("a", "line", 40.0), DwellStep(0.5), OutputStep(3, True)]
    assert program.points_path == tmp_path / "points.toml"


def test_defaults_for_a_move():
    program = program_from_mapping({"program": {"kind": "benchjog-program", "version": 1,
                                                "name": "p", "points": "x.toml"},
                                    "steps": [{"action": "move", "point": "a"}]})
    assert program.steps == [MoveStep("a", "joint", 100.0)]


@pytest.mark.parametrize("edit, words", [
    (lambda t: t.replace("speed_pct = 40", "speed_pct = 150"), "step 1: speed_pct: must be 1..100 (150)"),
    (lambda t: t.replace("speed_pct = 40", "speed_pct = 0"), "step 1: speed_pct: must be 1..100 (0)"),
    (lambda t: t.replace('path = "line"', 'path = "arc"'), "step 1: path: must be 'joint' or 'line'"),
    (lambda t: t.replace('point = "a"', 'point = ""'), "step 1: point: must name a point"),
    (lambda t: t.replace('point = "a"\n', ''), "step 1: point: missing"),
    (lambda t: t.replace("seconds = 0.5", "seconds = -1"), "step 2: seconds: must be more than 0"),
    (lambda t: t.replace("seconds = 0.5", 'seconds = "soon"'), "step 2: seconds: not a number"),
    (lambda t: t.replace("channel = 3", "channel = 8"), "step 3: channel: must be a whole number 0..7 (8)"),
    (lambda t: t.replace("channel = 3", "channel = 1.5"), "step 3: channel: must be a whole number"),
    (lambda t: t.replace("on = true", 'on = "yes"'), "step 3: on: must be true or false"),
    (lambda t: t.replace("on = true", "on = true\nseconds = 2"), "step 3: seconds: unknown key for an output step"),
    (lambda t: t.replace('action = "dwell"', 'action = "wait"'), "step 2: action: must be 'move', 'dwell' or 'output'"),
    (lambda t: t.replace('points = "points.toml"\n', ''), "program: points: missing"),
    (lambda t: t.replace('kind = "benchjog-program"', 'kind = "benchjog-points"'), "program: kind"),
    (lambda t: t.replace("[program]", "[programme]"), "program: missing table [program]"),
    (lambda t: t.replace("version = 1", "version = 2"), "program: version"),
    (lambda t: t + "\n[[steps]\n", "toml: "),
])
def test_invalid_program_one_line_error_and_untouched(tmp_path, edit, words):
    path = write(tmp_path, edit(GOOD))
    before = path.read_bytes()
    with pytest.raises(FileError) as err:
        Program.load(path)
    message = str(err.value)
    assert message.startswith(f"{path}: ") and words in message and "\n" not in message
    assert path.read_bytes() == before


def test_edits_add_move_delete():
    program = Program("p", "points.toml")
    program.add_step(MoveStep("a"))
    program.add_step(MoveStep("b", "line", 30.0))
    program.add_step(DwellStep(1.0), number=1)
    assert [type(s).__name__ for s in program.steps] == ["DwellStep", "MoveStep", "MoveStep"]
    assert program.move_step(1, +1) == 2
    assert program.steps[1] == DwellStep(1.0)
    assert program.move_step(3, +1) == 3  # already last: stays
    assert program.move_step(1, -1) == 1  # already first: stays
    assert program.move_step(3, -1) == 2
    assert program.steps == [MoveStep("a"), MoveStep("b", "line", 30.0), DwellStep(1.0)]
    assert program.delete_step(1) == MoveStep("a")
    assert program.uses_point("b") == [1]
    assert program.rename_point("b", "c") == 1 and program.steps[0].point == "c"
    with pytest.raises(ProgramError, match="no step 5"):
        program.delete_step(5)
    with pytest.raises(ProgramError, match="speed"):
        program.add_step(MoveStep("a", "joint", 101.0))
    with pytest.raises(ProgramError, match="channel"):
        program.add_step(OutputStep(9, True))
    with pytest.raises(ProgramError, match="dwell"):
        program.add_step(DwellStep(0.0))
    assert len(program.steps) == 2  # refused edits changed nothing


def test_round_trip_and_backup(tmp_path):
    program = Program("cell", "pts.toml", note='a "quoted"\nnote')
    program.add_step(MoveStep("p1", "joint", 80.0, note="first"))
    program.add_step(OutputStep(0, False))
    program.add_step(DwellStep(0.25))
    path = program.save(tmp_path / "cell.toml")
    first = path.read_text()
    again = Program.load(path)
    assert (again.name, again.points, again.note, again.steps) == (
        program.name, program.points, program.note, program.steps)
    again.delete_step(3)
    again.save()
    assert (tmp_path / "cell.toml.bak").read_text() == first
    assert Program.load(path).steps == program.steps[:2]


def test_failed_save_leaves_the_old_program(tmp_path, monkeypatch):
    program = Program("cell", "pts.toml", [MoveStep("p1")])
    path = program.save(tmp_path / "cell.toml")
    before = path.read_bytes()
    program.add_step(DwellStep(1.0))

    def boom(*args):
        raise OSError(5, "Input/output error")

    monkeypatch.setattr(os, "replace", boom)
    with pytest.raises(FileError, match="cannot save"):
        program.save()
    monkeypatch.undo()
    assert path.read_bytes() == before


def test_demo_program_loads():
    program = Program.load(ROOT / "examples" / "bench-cell" / "program.toml")
    kinds = {type(s) for s in program.steps}
    assert kinds == {MoveStep, DwellStep, OutputStep}
    assert {s.path for s in program.steps if isinstance(s, MoveStep)} == {"joint", "line"}
    assert program.points_path.exists()
