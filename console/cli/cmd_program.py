"""``benchjog check`` and ``benchjog run``: programs of taught points.

``check`` (the dry run) plans every step through the motion planner, each from where
the step before leaves the arm (the first from ``--start``: the arm's home pose, where
the simulated arm starts, unless a taught point or joint values are given), and runs the interlock's static checks; it reports per step and in total:
duration, warnings, closest approaches (soft limits, singular pose, keep-out zones),
branch changes and every problem with its step number. ``run`` plans the same way
from the arm's current position, shows the whole plan once, asks once, and runs it.

The planning and running live in ``console/cell/program_runs.py``, shared with the
console's teach screen.
"""

from __future__ import annotations

import argparse
import math
import sys

from benchjog.console import exit_codes
from benchjog.console.cli.commands import summary
from benchjog.console.cli.common import (add_arm_option, add_journal_option, add_output_options,
                                         add_port_options, drives_off, exit_code_of, open_gate,
                                         print_json, quiet, result_json, run_stoppable)


# --- the commands----------------------------------------------------------------

def register(sub: argparse._SubParsersAction) -> None:
    check = sub.add_parser("check", help=summary("check"),
                           description="Plan every step of a program (from --start, the arm's "
                           "home pose unless given) and report durations, warnings, closest "
                           "approaches, branch changes and problems. Nothing moves. A run "
                           "plans from where the arm is: give that pose as --start to check "
                           "what the run will do. Exit 0: no problems; 1: problems; "
                           "2: bad input.")
    check.add_argument("program", metavar="PROGRAM", help="program file (TOML)")
    check.add_argument("--start", metavar="POSE", default="home",
                       help="where the plan starts: 'home' (default), the name of a taught "
                       "point of the program's points file, or joint values in degrees (mm "
                       "for the quill) separated by commas, e.g. 0,90")
    add_arm_option(check)
    add_output_options(check)
    check.set_defaults(func=cmd_check)

    run = sub.add_parser("run", help=summary("run"),
                         description="Plan the whole program from the current position, print "
                         "the plan, ask once, run it (the simulated arm when no port). A step "
                         "that fails halts the program and is named.")
    run.add_argument("program", metavar="PROGRAM", help="program file (TOML)")
    add_arm_option(run)
    add_port_options(run)
    add_journal_option(run)
    add_output_options(run, json_help="one JSON object a line on stdout: one per step as it "
                       "starts, then the result (docs/cli-json.md)")
    run.set_defaults(func=cmd_run)


def cmd_check(args: argparse.Namespace) -> int:
    from benchjog.console.cell.program_runs import (load_program_for, plan_program, report_json,
                                                    report_lines)

    # the arm: --arm, else the one the files name; bad files: one line, exit 2 (errors.py)
    arm, program, book = load_program_for(args.program, args.arm)
    start, words = start_pose(arm, book, args.start)
    report = plan_program(arm, program, book, start, start_words=words)
    if args.json:
        print_json(report_json(report))
    else:
        print("\n".join(report_lines(report)))
    return exit_codes.OK if report.ok else exit_codes.REFUSED


def start_pose(arm, book, text: str) -> tuple[tuple[float, ...] | None, str]:
    """``--start``: (joints in rad/mm or None for home, the words the report uses).

    Raises:
        UsageError: one line naming what is wrong.
    """
    from benchjog.console.errors import UsageError

    text = text.strip()
    if text == "home":
        return None, "the home pose"
    if book.has(text):
        return tuple(book.point(text).joints), f"taught point {text!r}"
    parts = [p.strip() for p in text.split(",")]
    try:
        values = [float(p) for p in parts]
    except ValueError:
        raise UsageError(f"--start: {text!r} is not 'home', a taught point of "
                         f"{book.path or 'the points file'} or joint values") from None
    if len(values) != len(arm.joints):
        raise UsageError(f"--start: arm {arm.name} has {len(arm.joints)} joints, got "
                         f"{len(values)} value{'s' if len(values) != 1 else ''}")
    if not all(math.isfinite(v) for v in values):
        raise UsageError(f"--start: {text!r}: not a finite number")
    joints = tuple(j.from_display(v) for j, v in zip(arm.joints, values))
    return joints, "the given joints"


def cmd_run(args: argparse.Namespace) -> int:
    from benchjog.console.cell.program_runs import (load_program_for, report_lines, result_words,
                                                    run_program)
    from benchjog.console.cli.confirm import PromptConfirmer

    arm, program, book = load_program_for(args.program, args.arm)
    confirmer = PromptConfirmer(arm, question="Run this program?")
    steps = StepReporter(args, program.steps)
    result = None
    with open_gate(arm, args, enable_on_yes=True) as gate:   # drives on only after the yes
        steps.watch(gate)
        try:
            report, result = run_stoppable(
                gate, lambda: run_program(gate, arm, program, book, confirmer))
        finally:
            steps.close(result_completed=result is not None and result.completed)
            drives_off(gate)
        if not report.ok:
            for line in report_lines(report):
                print(line, file=sys.stderr)
        code = exit_code_of(result, gate)   # waits for the journal; warns when it failed
        if args.json:
            doc = result_json("run", result)
            doc["summary"] = result_words(report, result)
            print_json(doc)
        else:
            print(result_words(report, result))
        return code


class StepReporter:
    """Shows a running program's steps as they start: with ``--json`` one JSON line a
    step on stdout; on a terminal (stdout and stderr both, not ``--quiet``) a rich
    progress bar on stderr; into a pipe, nothing extra.

    It learns of each step from the records the interlock journals (``Interlock.watch``:
    a ``segment`` or an ``output`` record names its step), so it watches and never drives
    the arm."""

    def __init__(self, args: argparse.Namespace, program_steps) -> None:
        self.steps = list(program_steps)
        self.json = bool(getattr(args, "json", False))
        self.bar = (not self.json and not quiet(args) and sys.stdout.isatty()
                    and sys.stderr.isatty())
        self.shown = 0  # steps announced so far
        self._progress = None
        self._task = None

    def watch(self, gate) -> None:
        def seen(kind: str, **fields) -> None:
            if kind in ("segment", "output") and fields.get("step") is not None:
                self.reached(int(fields["step"]))

        gate.watch(seen)

    def reached(self, index: int) -> None:
        """Steps up to ``index`` (0-based) have started (a dwell records nothing, so
        it is announced when the step after it starts, or at the end)."""
        while self.shown <= index and self.shown < len(self.steps):
            step = self.steps[self.shown]
            self.shown += 1
            if self.json:
                print_json({"event": "step", "step": self.shown, "of": len(self.steps),
                            "description": step.describe()})
            elif self.bar:
                self._advance(step.describe())

    def _advance(self, text: str) -> None:
        if self._progress is None:
            from rich.console import Console
            from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn

            self._progress = Progress(TextColumn("{task.description}"), BarColumn(),
                                      MofNCompleteColumn(), console=Console(stderr=True),
                                      transient=True)
            self._task = self._progress.add_task("", total=len(self.steps))
            self._progress.start()
        self._progress.update(self._task, completed=self.shown - 1,
                              description=f"step {self.shown}: {text}")

    def close(self, result_completed: bool) -> None:
        if result_completed and self.shown:
            self.reached(len(self.steps) - 1)
        if self._progress is not None:
            self._progress.update(self._task, completed=self.shown)
            self._progress.stop()
            self._progress = None



_FROM_RUNS = ("load_program", "plan_program", "report_json", "report_lines", "result_words",
              "run_program")


def __getattr__(name: str):
    """The program functions, re-exported lazily from console/cell/program_runs.py (where
    they live) for callers that import them from here; the module itself stays light so
    the parser's start-up does not load the planner."""
    if name in _FROM_RUNS:
        from benchjog.console.cell import program_runs

        return getattr(program_runs, name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
