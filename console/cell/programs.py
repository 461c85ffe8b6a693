"""Programs: ordered steps over the taught points of one points file, in TOML.

A step is a move to a taught point (joint or straight-line path, a speed in percent of
the arm's caps), a dwell (seconds) or a digital output (channel 0..7, on or off). The
program names its points file, relative to the program file's own directory.

The program file::

    [program]
    kind = "benchjog-program"
    version = 1
    name = "pick-and-place"
    points = "points.toml"        # the points file, relative to this file
    arm = "planar-bench"          # optional: the arm it was written for (its [arm] name)
    note = "..."                  # optional

    [[steps]]
    action = "move"
    point = "clear"               # a point of the points file
    path = "joint"                # "joint" (default) or "line"
    speed_pct = 80.0              # 1..100, default 100
    tolerance_mm = 0.02           # line only: chordal tolerance, default 0.05 mm

    [[steps]]
    action = "dwell"
    seconds = 0.5                 # > 0, at most 600

    [[steps]]
    action = "output"
    channel = 0                   # 0..7
    on = true

Every step may carry an optional ``note``. Steps are numbered from 1 for people
(``step 4``), in error messages, reports and the console.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any, Union

from benchjog.kinematics.armspec import number_problem
from benchjog.console.cell.safe_files import (FileError, FileLock, parse_toml, read_text, real_path,
                                             toml_text_keeping, write_atomic)
from benchjog.kinematics.planner import check_tolerance
from benchjog.kinematics.solve import TargetError
from benchjog.kinematics.model import Arm

FILE_KIND = "benchjog-program"
FILE_VERSION = 1
PATHS = ("joint", "line")
N_OUTPUTS = 8
DWELL_MAX_S = 600.0
SPEED_MIN_PCT = 1.0


class ProgramError(ValueError):
    """An edit that cannot be made (step number out of range, bad value)."""


@dataclass(frozen=True)
class MoveStep:
    point: str
    path: str = "joint"
    speed_pct: float = 100.0
    note: str = ""
    tolerance_mm: float | None = None  # line steps: None for the planner's default

    def describe(self) -> str:
        within = f", within {self.tolerance_mm:g} mm" if self.tolerance_mm is not None else ""
        return f"move to {self.point} ({self.path} path{within}, {self.speed_pct:g} %)"


@dataclass(frozen=True)
class DwellStep:
    seconds: float
    note: str = ""

    def describe(self) -> str:
        return f"dwell {self.seconds:g} s"


@dataclass(frozen=True)
class OutputStep:
    channel: int
    on: bool
    note: str = ""

    def describe(self) -> str:
        return f"output {self.channel} {'on' if self.on else 'off'}"


Step = Union[MoveStep, DwellStep, OutputStep]


def check_step(step: Step) -> Step:
    """The step if its values are valid, else a ProgramError in words."""
    if isinstance(step, MoveStep):
        if not step.point or not step.point.strip():
            raise ProgramError("a move needs a point name")
        if step.path not in PATHS:
            raise ProgramError(f"path must be 'joint' or 'line' ({step.path!r})")
        if not (math.isfinite(step.speed_pct) and SPEED_MIN_PCT <= step.speed_pct <= 100.0):
            raise ProgramError(f"speed must be {SPEED_MIN_PCT:g}..100 % ({step.speed_pct:g})")
        if step.tolerance_mm is not None:
            if step.path != "line":
                raise ProgramError("a tolerance is for line moves only")
            try:
                check_tolerance(step.tolerance_mm)
            except TargetError as exc:
                raise ProgramError(str(exc)) from None
    elif isinstance(step, DwellStep):
        if not (math.isfinite(step.seconds) and 0 < step.seconds <= DWELL_MAX_S):
            raise ProgramError(f"a dwell lasts more than 0 and at most {DWELL_MAX_S:g} s "
                               f"({step.seconds:g})")
    elif isinstance(step, OutputStep):
        if isinstance(step.channel, bool) or not isinstance(step.channel, int) \
                or not 0 <= step.channel < N_OUTPUTS:
            raise ProgramError(f"output channel must be 0..{N_OUTPUTS - 1} ({step.channel!r})")
        if not isinstance(step.on, bool):
            raise ProgramError(f"output state must be true or false ({step.on!r})")
    else:
        raise ProgramError(f"not a program step: {step!r}")
    return step


@dataclass
class Program:
    """A program in memory. ``points`` is the points file as written in the program
    (relative to the program file); ``points_path`` resolves it."""

    name: str
    points: str
    steps: list[Step] = field(default_factory=list)
    note: str = ""
    path: Path | None = None
    arm: str = ""          # the name of the arm the program is for ("" when not named)
    _as_read: str | None = field(default=None, repr=False, compare=False)  # a save keeps its style

    @property
    def points_path(self) -> Path:
        base = self.path.parent if self.path is not None else Path(".")
        return base / self.points

    # --- edits (memory only; ``save`` writes) ---------------------------------------

    def _index(self, number: int) -> int:
        if not 1 <= number <= len(self.steps):
            raise ProgramError(f"no step {number} (the program has {len(self.steps)} steps)")
        return number - 1

    def add_step(self, step: Step, number: int | None = None) -> int:
        """Insert ``step`` as step ``number`` (1-based; at the end by default).
        Returns its number."""
        check_step(step)
        if number is None:
            self.steps.append(step)
            return len(self.steps)
        if not 1 <= number <= len(self.steps) + 1:
            raise ProgramError(f"cannot insert as step {number} "
                               f"(1..{len(self.steps) + 1})")
        self.steps.insert(number - 1, step)
        return number

    def replace_step(self, number: int, step: Step) -> None:
        check_step(step)
        self.steps[self._index(number)] = step

    def move_step(self, number: int, delta: int) -> int:
        """Move step ``number`` up (delta -1) or down (+1); returns its new number.
        At either end it stays put."""
        i = self._index(number)
        j = max(0, min(len(self.steps) - 1, i + delta))
        self.steps.insert(j, self.steps.pop(i))
        return j + 1

    def delete_step(self, number: int) -> Step:
        return self.steps.pop(self._index(number))

    def uses_point(self, name: str) -> list[int]:
        return [i + 1 for i, s in enumerate(self.steps)
                if isinstance(s, MoveStep) and s.point == name]

    def rename_point(self, old: str, new: str) -> int:
        """Follow a point's rename in every move step; returns how many changed."""
        count = 0
        for i, step in enumerate(self.steps):
            if isinstance(step, MoveStep) and step.point == old:
                self.steps[i] = replace(step, point=new)
                count += 1
        return count

    # --- files ---------------------------------------------------------------------

    def to_mapping(self) -> dict[str, Any]:
        steps = []
        for step in self.steps:
            if isinstance(step, MoveStep):
                item = {"action": "move", "point": step.point, "path": step.path,
                        "speed_pct": float(step.speed_pct)}
                if step.tolerance_mm is not None:
                    item["tolerance_mm"] = float(step.tolerance_mm)
            elif isinstance(step, DwellStep):
                item = {"action": "dwell", "seconds": float(step.seconds)}
            else:
                item = {"action": "output", "channel": step.channel, "on": step.on}
            item["note"] = step.note or None
            steps.append(item)
        doc: dict[str, Any] = {"program": {"kind": FILE_KIND, "version": FILE_VERSION,
                                           "name": self.name, "points": self.points,
                                           "arm": self.arm or None,
                                           "note": self.note or None}}
        if steps:
            doc["steps"] = steps
        return doc

    def to_text(self, keep: str | None = None) -> str:
        """The file's text; ``keep``: the text as read, whose comments and formatting
        stay (safe_files.toml_text_keeping)."""
        return toml_text_keeping(keep, self.to_mapping(), header=(
            "benchjog program: steps run in order; moves go to points of the points file."))

    def save(self, path: str | Path | None = None, lock: FileLock | None = None) -> Path:
        """Write atomically with one ``.bak``; takes the file's lock for the write
        unless the caller holds it (``lock``)."""
        target = Path(path) if path is not None else self.path
        if target is None:
            raise ProgramError("the program has no file yet: give a path")
        same_file = self.path is not None and real_path(target) == real_path(self.path)
        text = self.to_text(keep=self._as_read if same_file else None)
        if lock is not None and lock.held and lock.path == real_path(target):
            write_atomic(target, text)
        else:
            with FileLock(target):
                write_atomic(target, text)
        self.path = target
        self._as_read = text
        return target

    @classmethod
    def load(cls, path: str | Path) -> "Program":
        """Read and validate a program file.

        Raises:
            FileError: one line naming the file, the step or key, and the problem.
        """
        path = Path(path)
        text = read_text(path)
        program = program_from_mapping(parse_toml(text, str(path)), str(path))
        program.path = path
        program._as_read = text
        return program


_STEP_KEYS = {"move": ("action", "point", "path", "speed_pct", "tolerance_mm", "note"),
              "dwell": ("action", "seconds", "note"),
              "output": ("action", "channel", "on", "note")}


def _number(source: str, where: str, data: Mapping[str, Any], key: str,
            default: float | None = None) -> float:
    if key not in data:
        if default is None:
            raise FileError(source, f"{where}: {key}", "missing")
        return default
    value = data[key]
    problem = number_problem(value)
    if problem:
        raise FileError(source, f"{where}: {key}", problem)
    return float(value)


def _text(source: str, where: str, data: Mapping[str, Any], key: str,
          default: str | None = None) -> str:
    if key not in data:
        if default is None:
            raise FileError(source, f"{where}: {key}", "missing")
        return default
    value = data[key]
    if not isinstance(value, str):
        raise FileError(source, f"{where}: {key}", f"must be a string ({value!r})")
    return value


def step_from_mapping(raw: Any, source: str, number: int) -> Step:
    where = f"step {number}"
    if not isinstance(raw, Mapping):
        raise FileError(source, where, "must be a table ([[steps]])")
    action = raw.get("action")
    if action not in _STEP_KEYS:
        raise FileError(source, f"{where}: action",
                        f"must be 'move', 'dwell' or 'output' ({action!r})" if action is not None
                        else "missing ('move', 'dwell' or 'output')")
    extra = [k for k in raw if k not in _STEP_KEYS[action]]
    if extra:
        raise FileError(source, f"{where}: {extra[0]}", f"unknown key for {'an' if action == 'output' else 'a'} {action} step")
    note = _text(source, where, raw, "note", "")
    if action == "move":
        point = _text(source, where, raw, "point")
        if not point.strip():
            raise FileError(source, f"{where}: point", "must name a point")
        path = _text(source, where, raw, "path", "joint")
        if path not in PATHS:
            raise FileError(source, f"{where}: path", f"must be 'joint' or 'line' ({path!r})")
        speed = _number(source, where, raw, "speed_pct", 100.0)
        if not SPEED_MIN_PCT <= speed <= 100.0:
            raise FileError(source, f"{where}: speed_pct",
                            f"must be {SPEED_MIN_PCT:g}..100 ({speed:g})")
        tolerance = None
        if "tolerance_mm" in raw:
            if path != "line":
                raise FileError(source, f"{where}: tolerance_mm", "for line moves only (path = \"line\")")
            tolerance = _number(source, where, raw, "tolerance_mm")
            try:
                check_tolerance(tolerance)
            except TargetError as exc:
                raise FileError(source, f"{where}: tolerance_mm", str(exc)) from None
        return MoveStep(point, path, speed, note, tolerance)
    if action == "dwell":
        seconds = _number(source, where, raw, "seconds")
        if not 0 < seconds <= DWELL_MAX_S:
            raise FileError(source, f"{where}: seconds",
                            f"must be more than 0 and at most {DWELL_MAX_S:g} ({seconds:g})")
        return DwellStep(seconds, note)
    if "channel" not in raw:
        raise FileError(source, f"{where}: channel", "missing")
    channel = raw["channel"]
    if isinstance(channel, bool) or not isinstance(channel, int) or not 0 <= channel < N_OUTPUTS:
        raise FileError(source, f"{where}: channel",
                        f"must be a whole number 0..{N_OUTPUTS - 1} ({channel!r})")
    if "on" not in raw:
        raise FileError(source, f"{where}: on", "missing (true or false)")
    if not isinstance(raw["on"], bool):
        raise FileError(source, f"{where}: on", f"must be true or false ({raw['on']!r})")
    return OutputStep(channel, raw["on"], note)


def program_from_mapping(data: Mapping[str, Any], source: str = "<program>") -> Program:
    head = data.get("program")
    if not isinstance(head, Mapping):
        raise FileError(source, "program", "missing table [program] (is this a program file?)")
    extra = [k for k in data if k not in ("program", "steps")]
    if extra:
        raise FileError(source, extra[0], "unknown key")
    extra = [k for k in head if k not in ("kind", "version", "name", "points", "arm", "note")]
    if extra:
        raise FileError(source, f"program: {extra[0]}", "unknown key")
    if head.get("kind") != FILE_KIND:
        raise FileError(source, "program: kind", f"must be {FILE_KIND!r} ({head.get('kind')!r})")
    if head.get("version") != FILE_VERSION:
        raise FileError(source, "program: version",
                        f"version {head.get('version')!r} is not supported (only {FILE_VERSION})")
    name = _text(source, "program", head, "name")
    points = _text(source, "program", head, "points")
    if not points.strip():
        raise FileError(source, "program: points", "must name the points file")
    raw_steps = data.get("steps", [])
    if not isinstance(raw_steps, list):
        raise FileError(source, "steps", "must be an array of tables ([[steps]])")
    steps = [step_from_mapping(raw, source, i + 1) for i, raw in enumerate(raw_steps)]
    return Program(name, points, steps, _text(source, "program", head, "note", ""),
                   arm=_text(source, "program", head, "arm", "").strip())


def named_arms(program: Program) -> list[tuple[str, str]]:
    """The arms the program's files name, each with the file naming it: the program's
    own ``arm`` and its points file's ``[file] arm`` (a points file that cannot be
    read names none here: loading it later says why)."""
    from benchjog.console.cell.points import points_arm
    out = [(program.arm, str(program.path or "the program"))] if program.arm else []
    try:
        named = points_arm(program.points_path)
    except FileError:
        named = None
    if named:
        out.append((named, str(program.points_path)))
    return out


def wanted_arm(program: Program) -> tuple[str, str] | None:
    """The arm the program's files want (the program's own word first), with the file
    naming it; None when neither names one.

    Raises:
        FileError: the program and its points file name different arms.
    """
    named = named_arms(program)
    if len(named) == 2 and named[0][0] != named[1][0]:
        raise FileError(named[1][1], "arm", f"taught on arm {named[1][0]!r}, but the program "
                        f"{named[0][1]} is for arm {named[0][0]!r}")
    return named[0] if named else None


def arm_for_program(program: Program, arm_option: str | None, load_arm) -> Arm:
    """The arm to check or run ``program`` on: ``--arm`` when given (it must be the
    arm the files name), else the arm the files name, else the default demo arm.

    Raises:
        FileError: a file names another arm than ``--arm`` (the message names the arm
            the file wants), or names an arm that is neither built in nor a file.
    """
    wanted = wanted_arm(program)
    if arm_option is None:
        if wanted is None:
            return load_arm(None)
        name, source = wanted
        try:
            return load_arm(name)
        except Exception as exc:  # noqa: BLE001 - said in one line below
            raise FileError(source, "arm", f"wants arm {name!r}, which is not built in: give "
                            f"its arm file with --arm ({str(exc).splitlines()[0]})") from None
    arm = load_arm(arm_option)
    if wanted is not None and wanted[0] != arm.name:
        raise FileError(wanted[1], "arm", f"written for arm {wanted[0]!r}, but --arm gives "
                        f"{arm.name!r}: use --arm {wanted[0]} (or that arm's file)")
    return arm


def new_program(name: str, points: str) -> Program:
    return Program(name, points)


def arm_for_files(arm_option: str | None, program_path: str | Path | None,
                  points_path: str | Path | None, load_arm) -> Arm:
    """The console's arm: ``--arm`` when given, else the arm the program file (or,
    without one, the points file) names, else the default demo arm. Files that do not
    exist yet name nothing (the teach screen starts them).

    Raises:
        FileError: a file written for another arm than ``--arm``, or an unreadable one.
    """
    if program_path is not None and Path(program_path).exists():
        return arm_for_program(Program.load(program_path), arm_option, load_arm)
    if points_path is not None and Path(points_path).exists():
        from benchjog.console.cell.points import points_arm
        named = points_arm(points_path)
        if named is not None:
            if arm_option is None:
                return arm_for_program(Program("", str(points_path), arm=named,
                                               path=Path(points_path)), None, load_arm)
            arm = load_arm(arm_option)
            if arm.name != named:
                raise FileError(str(points_path), "arm", f"taught on arm {named!r}, but --arm "
                                f"gives {arm.name!r}: use --arm {named} (or that arm's file)")
            return arm
    return load_arm(arm_option)


__all__ = ["Program", "wanted_arm", "arm_for_files", "arm_for_program", "MoveStep", "DwellStep", "OutputStep", "Step", "ProgramError",
           "check_step", "program_from_mapping", "step_from_mapping", "new_program",
           "describe_step"]


def describe_step(step: Step) -> str:
    return step.describe()
