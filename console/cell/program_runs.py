"""Dry runs and runs of a program of taught points, for the command line and the console.

:func:`plan_program` plans every step through the motion planner, each from where the
step before leaves the arm, and runs the interlock's static checks; it reports per step
and in total: duration, warnings, closest approaches (soft limits, singular pose,
keep-out zones), branch changes and every problem with its step number.
:func:`run_program` plans the same way from the arm's current position, proposes the
whole program once and runs it after one yes. ``benchjog check``/``run`` and the
teach screen both call these.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from benchjog.console.numbers import round_out
from benchjog.console.cell.points import PointBook, PointError
from benchjog.console.cell.programs import DwellStep, MoveStep, OutputStep, Program
from benchjog.drivers.interlock import Confirmer, Dwell, Interlock, Proposal, RunResult, SetOutput
from benchjog.kinematics.model import Arm
from benchjog.kinematics.planner import (JOINT, PlanSummary, Prefetched, joint_move_end,
                                         joint_move_knots, plan_move, prefetch_joint_moves)
from benchjog.kinematics.solve import TargetError


@dataclass
class StepReport:
    """One step of a dry run. ``number`` counts from 1; ``action`` is what the
    interlock would run (None when the step could not be planned at all)."""

    number: int
    step: Any
    action: Any = None
    duration_s: float = 0.0
    summary: PlanSummary | None = None
    target: tuple[float, ...] | None = None
    warnings: list[str] = field(default_factory=list)
    problems: list[str] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return not self.problems


@dataclass
class ProgramReport:
    """The dry run of a whole program."""

    arm: Arm
    program: Program
    start_joints: tuple[float, ...]
    end_joints: tuple[float, ...]
    steps: list[StepReport]
    warnings: list[str] = field(default_factory=list)   # not tied to one step (the points file)
    start_words: str = "the home pose"   # where the plan starts, in words

    def start_line(self) -> str:
        """Which pose the plan starts from, with its joint values."""
        joints = ", ".join(f"{j.name} {j.to_display(v):.2f} {j.unit}"
                           for j, v in zip(self.arm.joints, self.start_joints))
        return f"planned from {self.start_words} ({joints})"

    @property
    def problems(self) -> list[str]:
        return [f"step {s.number}: {p}" for s in self.steps for p in s.problems]

    @property
    def ok(self) -> bool:
        return not self.problems and bool(self.steps)

    @property
    def actions(self) -> list[Any]:
        return [s.action for s in self.steps]

    @property
    def duration_s(self) -> float:
        return sum(s.duration_s for s in self.steps)

    @property
    def branch_changes(self) -> list[int]:
        return [s.number for s in self.steps if s.summary is not None and s.summary.branch_change]

    def closest(self) -> dict[str, Any]:
        """The closest approaches over the whole program, each with its step number:
        ``limits`` {joint name: (clearance, step)}, ``singular`` (rad, step),
        ``zones`` {zone name: (mm, step)}."""
        limits: dict[str, tuple[float, int]] = {}
        singular: tuple[float, int] | None = None
        zones: dict[str, tuple[float, int]] = {}
        for s in self.steps:
            if s.summary is None or not s.summary.segment_count:
                continue
            for joint, gap in zip(self.arm.joints, s.summary.limit_clearance):
                if joint.name not in limits or gap < limits[joint.name][0]:
                    limits[joint.name] = (gap, s.number)
            if singular is None or s.summary.singular_distance_rad < singular[0]:
                singular = (s.summary.singular_distance_rad, s.number)
            for name, gap in s.summary.zone_clearance_mm.items():
                if name not in zones or gap < zones[name][0]:
                    zones[name] = (gap, s.number)
        return {"limits": limits, "singular": singular, "zones": zones}


def _step_target(book: PointBook, step: MoveStep) -> tuple[Any, tuple[float, ...]]:
    point = book.point(step.point)
    return point, book.base_target(point)


def _tolerance(step: MoveStep) -> dict[str, float]:
    return {} if step.tolerance_mm is None else {"tolerance_mm": step.tolerance_mm}


LOOK_AHEAD_MOVES = 64   # joint moves planned ahead together (their keep-out sweeps in one pass)


def _look_ahead(arm: Arm, steps: list[Any], index: int, here: tuple[float, ...],
                book: PointBook, plans: dict[tuple, Any],
                ) -> tuple[Prefetched, int, dict[int, tuple[float, ...]]]:
    """Guess where the arm is before each coming step, assuming every joint move that
    has a usable solution is planned and leaves the arm at its goal, and compute the
    keep-out sweeps and tool-speed bounds of up to LOOK_AHEAD_MOVES such moves at once.
    Stops before a line move (its end is known only once it is planned).

    Returns the results, the index of the first step not looked at, and the guessed
    start pose of each step looked at. A guess is only a guess: a step planned from
    elsewhere (a refused move, a bad point) finds nothing ahead and is planned as
    usual, and the caller looks ahead again from where the arm really is."""
    moves: list[Any] = []
    found = Prefetched()
    expected: dict[int, tuple[float, ...]] = {}
    pos = here
    i = index
    while i < len(steps) and len(moves) < LOOK_AHEAD_MOVES:
        step = steps[i]
        expected[i] = pos
        if isinstance(step, MoveStep):
            if step.path != JOINT:
                break
            try:
                point, target = _step_target(book, step)
                key = (pos, target, point.branch, step.path, step.speed_pct, step.tolerance_mm)
                done = plans.get(key)
                if done is not None:
                    if done.ok and done.segments:
                        pos = done.segments[-1].joints
                else:
                    knots = joint_move_knots(arm, pos, target, branch=point.branch, ahead=found)
                    if knots is not None:
                        moves.append(knots)
                        pos = joint_move_end(knots) or pos
            except (PointError, TargetError):
                pass  # planned (and reported) in the step itself
        i += 1
    return prefetch_joint_moves(arm, moves, found), i, expected


def plan_program(arm: Arm, program: Program, book: PointBook,
                 start_joints: tuple[float, ...] | None = None,
                 gate: Interlock | None = None, start_words: str | None = None, *,
                 ahead: bool = True) -> ProgramReport:
    """Plan every step (no motion). ``start_joints`` default: the arm's home pose.
    ``gate``: the interlock whose static checks to apply; a simulated one is opened
    (and closed) when none is given. ``start_words`` names the start pose in the
    report (default: "the home pose", or "the given joints").

    ``ahead`` (default): joint moves are planned with their keep-out sweeps and
    tool-speed bounds computed ahead, many at once (:func:`_look_ahead`), and the gate's
    checks of all steps run together (``Interlock.check_each``); the report is the same
    as with ``ahead=False``, which plans and checks one step after the other
    (tests/test_check_batch.py compares the two)."""
    start = tuple(start_joints) if start_joints is not None else arm.home_joints
    if start_words is None:
        start_words = "the home pose" if start_joints is None else "the given joints"
    own_gate = gate is None
    if own_gate:
        gate = Interlock.open(arm, "sim", journal=False)
    # A program that repeats a cycle asks for the same move from the same pose again:
    # the plan and the gate's verdict on it are the same, so each is made once.
    plans: dict[tuple, Any] = {}
    verdicts: dict[tuple, list[str]] = {}
    steps = list(program.steps)
    prefetched: Prefetched | None = None
    ahead_until = 0
    expected: dict[int, tuple[float, ...]] = {}
    checks: list[tuple[StepReport, tuple]] = []   # (report, verdict key), checked at the end
    try:
        here = start
        reports: list[StepReport] = []
        for number, step in enumerate(steps, 1):
            index = number - 1
            if ahead and (index >= ahead_until or expected.get(index) != here):
                prefetched, ahead_until, expected = _look_ahead(arm, steps, index, here, book,
                                                                plans)
            report = StepReport(number, step)
            reports.append(report)
            if isinstance(step, MoveStep):
                try:
                    point, target = _step_target(book, step)
                except PointError as exc:
                    report.problems.append(str(exc))
                    continue
                report.target = target
                key = (here, target, point.branch, step.path, step.speed_pct, step.tolerance_mm)
                try:
                    plan = plans.get(key)
                    if plan is None:
                        plan = plans[key] = plan_move(arm, here, target, branch=point.branch,
                                                      path=step.path, speed_pct=step.speed_pct,
                                                      ahead=prefetched, **_tolerance(step))
                except TargetError as exc:
                    report.problems.append(str(exc))
                    continue
                report.action, report.summary = plan, plan.summary
                report.duration_s = plan.summary.duration_s
                report.warnings += list(plan.summary.warnings)
                if plan.ok and plan.segments:
                    here = plan.segments[-1].joints
            elif isinstance(step, DwellStep):
                report.action = Dwell(step.seconds)
                report.duration_s = step.seconds
            elif isinstance(step, OutputStep):
                report.action = SetOutput(step.channel, step.on)
            if report.action is not None:
                # the interlock's static checks for this one action (no driver state);
                # a plan's own problems come back among them
                begin = report.summary.start_joints if report.summary is not None else None
                key = (id(report.action), begin)
                if not ahead:
                    if isinstance(report.action, (Dwell, SetOutput)) or key not in verdicts:
                        verdicts[key] = list(gate.check_actions([report.action], begin).reasons)
                    report.problems += [r for r in verdicts[key] if r not in report.problems]
                else:
                    checks.append((report, key))
        if checks:
            # every action's own verdict, the keep-out work of all plans in one pass
            todo = {key: (r.action, key[1]) for r, key in checks}
            for key, verdict in zip(todo, gate.check_each(list(todo.values()))):
                verdicts[key] = list(verdict.reasons)
            for report, key in checks:
                report.problems += [r for r in verdicts[key] if r not in report.problems]
        return ProgramReport(arm, program, start, here, reports, list(book.warnings),
                             start_words=start_words)
    finally:
        if own_gate:
            gate.close()


# --- reports ---------------------------------------------------------------------------

def _clearance_words(arm: Arm, summary: PlanSummary) -> str:
    parts = [f"{j.name} {j.to_display(v):.2f} {j.unit}"
             for j, v in zip(arm.joints, summary.limit_clearance)]
    words = "limits " + ", ".join(parts)
    words += f"; singular {math.degrees(summary.singular_distance_rad):.2f} deg"
    for name, gap in summary.zone_clearance_mm.items():
        words += f"; {name} " + (f"{gap:.1f} mm" if math.isfinite(gap) else "clear (other height)")
    return words


def report_lines(report: ProgramReport) -> list[str]:
    """The dry run for people: one block per step, then the totals."""
    arm, program = report.arm, report.program
    where = f" ({program.path})" if program.path else ""
    out = [f"program {program.name!r}{where}: {len(program.steps)} steps on arm {arm.name}",
           report.start_line()]
    out += [f"warning: {w}" for w in report.warnings]
    for s in report.steps:
        head = f"step {s.number:>2}: {s.step.describe()}"
        if s.summary is not None and s.summary.segment_count:
            branch = str(s.summary.branch) if s.summary.branch else "no branch"
            if s.summary.branch_change:
                branch += ", BRANCH CHANGE"
            head += f": {s.duration_s:.3f} s, {branch}, {s.summary.segment_count} segments"
            out.append(head)
            out.append(f"         closest: {_clearance_words(arm, s.summary)}")
        else:
            out.append(head + (f": {s.duration_s:.3f} s" if s.duration_s else ""))
        out += [f"         warning: {w}" for w in s.warnings]
        out += [f"         PROBLEM: {p}" for p in s.problems]
    moves = [s for s in report.steps if isinstance(s.step, MoveStep)]
    segments = sum(s.summary.segment_count for s in moves if s.summary is not None)
    out.append(f"total: {report.duration_s:.3f} s, {len(report.steps)} steps "
               f"({len(moves)} moves, {segments} segments)")
    closest = report.closest()
    if closest["limits"]:
        out.append("least room to the soft limits: " + ", ".join(
            f"{j.name} {j.to_display(closest['limits'][j.name][0]):.2f} {j.unit} "
            f"(step {closest['limits'][j.name][1]})" for j in arm.joints
            if j.name in closest["limits"]))
    if closest["singular"] is not None:
        gap, number = closest["singular"]
        out.append(f"least elbow angle from a singular pose: {math.degrees(gap):.2f} deg (step {number})")
    for name, (gap, number) in closest["zones"].items():
        out.append(f"least gap to keep-out zone {name!r}: "
                   + (f"{gap:.1f} mm (step {number})" if math.isfinite(gap) else "never at its height"))
    changes = report.branch_changes
    out.append("branch changes: " + (", ".join(f"step {n}" for n in changes) if changes else "none"))
    problems = report.problems
    if not report.steps:
        out.append("problems: the program has no steps")
    elif problems:
        out.append(f"problems: {len(problems)}")
        out += [f"  {p}" for p in problems]
    else:
        out.append("problems: none")
    return out


def _disp_tool(arm: Arm, pose: tuple[float, ...] | None) -> list[float] | None:
    if pose is None:
        return None
    shown = list(pose)
    if arm.is_scara:
        shown[3] = math.degrees(shown[3])
    return [round_out(v, 6) for v in shown]


def _clean(value: Any) -> Any:
    """Round floats for JSON and turn non-finite ones into None."""
    if isinstance(value, float):
        return round_out(value, 6) if math.isfinite(value) else None
    if isinstance(value, dict):
        return {k: _clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_clean(v) for v in value]
    return value


def report_json(report: ProgramReport) -> dict[str, Any]:
    """The dry run for scripts (the shape is documented in the README)."""
    arm, program = report.arm, report.program
    steps = []
    for s in report.steps:
        item: dict[str, Any] = {"step": s.number, "description": s.step.describe()}
        if isinstance(s.step, MoveStep):
            item.update(action="move", point=s.step.point, path=s.step.path,
                        speed_pct=s.step.speed_pct, target=_disp_tool(arm, s.target),
                        plan=s.summary.to_dict(arm) if s.summary is not None else None)
        elif isinstance(s.step, DwellStep):
            item.update(action="dwell", seconds=s.step.seconds)
        else:
            item.update(action="output", channel=s.step.channel, on=s.step.on)
        item.update(duration_s=s.duration_s, ok=s.ok, warnings=list(s.warnings),
                    problems=list(s.problems))
        steps.append(item)
    closest = report.closest()
    return _clean({
        "program": str(program.path) if program.path else None,
        "name": program.name,
        "points": str(program.points_path),
        "arm": arm.name,
        "ok": report.ok,
        "start_joints": [j.to_display(v) for j, v in zip(arm.joints, report.start_joints)],
        "start": report.start_words,
        "steps": steps,
        "total": {
            "duration_s": report.duration_s,
            "steps": len(report.steps),
            "moves": sum(isinstance(s.step, MoveStep) for s in report.steps),
            "segments": sum(s.summary.segment_count for s in report.steps if s.summary is not None),
            "closest": {
                "limits": [{"joint": j.name, "clearance": j.to_display(closest["limits"][j.name][0]),
                            "unit": j.unit, "step": closest["limits"][j.name][1]}
                           for j in arm.joints if j.name in closest["limits"]],
                "singular": None if closest["singular"] is None else {
                    "elbow_deg": math.degrees(closest["singular"][0]),
                    "step": closest["singular"][1]},
                "zones": [{"zone": name, "clearance_mm": gap, "step": number}
                          for name, (gap, number) in closest["zones"].items()],
            },
            "branch_changes": report.branch_changes,
            "warnings": list(report.warnings),
            "problems": report.problems if report.steps else ["the program has no steps"],
        },
    })


# --- loading and running -----------------------------------------------------------------

def load_program(path: str | Path, arm: Arm) -> tuple[Program, PointBook]:
    """The program and its points book. Raises FileError (one line) for bad files."""
    program = Program.load(path)
    book = PointBook.load(program.points_path, arm)
    return program, book


def load_program_for(path: str | Path, arm_option: str | None) -> tuple[Arm, Program, PointBook]:
    """The arm (``--arm``, else the one the files name), the program and its points.
    Raises FileError (one line) for bad files and for a file written for another arm."""
    from benchjog.console.cell.armfile import load_arm
    from benchjog.console.cell.programs import arm_for_program
    program = Program.load(path)
    arm = arm_for_program(program, arm_option, load_arm)
    book = PointBook.load(program.points_path, arm)
    return arm, program, book


def program_request(program: Program) -> str:
    name = program.path.name if program.path else program.name
    return f"program {name} ({program.name}, {len(program.steps)} steps)"


def propose_program(gate: Interlock, report: ProgramReport) -> Proposal:
    """The one proposal for the whole program (nothing moves)."""
    return gate.propose_actions(report.actions, program_request(report.program),
                                start_joints=report.start_joints)


def run_program(gate: Interlock, arm: Arm, program: Program, book: PointBook,
                confirmer: Confirmer) -> tuple[ProgramReport, RunResult]:
    """Plan from the arm's current joints, propose once, execute after one yes.
    Blocks until done: call it from a worker thread in the UI."""
    report = plan_program(arm, program, book, gate.state().joints, gate=gate,
                          start_words="the arm's current pose")
    if not report.ok:
        detail = "refused: " + ("; ".join(report.problems) or "the program has no steps")
        first = next((s.number - 1 for s in report.steps if s.problems), None)
        return report, RunResult(False, "refused", detail, 0, first)
    proposal = propose_program(gate, report)
    return report, gate.execute(proposal, confirmer)


def result_words(report: ProgramReport, result: RunResult) -> str:
    """One line: the outcome, and which step failed or halted."""
    if result.completed:
        return (f"done: program {report.program.name!r}, {len(report.steps)} steps, "
                f"{report.duration_s:.2f} s planned")
    if result.step is not None and 0 <= result.step < len(report.steps):
        s = report.steps[result.step]
        # the gate's own words may already say "halted at step 2: ..."; say it once
        said = f"{result.outcome} at step {result.step + 1}: "
        detail = result.detail.removeprefix(said)
        return f"{result.outcome} at step {s.number} ({s.step.describe()}): {detail}"
    return result.detail
