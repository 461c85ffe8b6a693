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
from benchjog.console.cell.armfile import load_arm
from benchjog.console.cell.program_runs import (load_program, load_program_for, plan_program, report_json, report_lines,
                                                result_words, run_program)
from benchjog.console.cli.common import (add_arm_option, add_journal_option, add_port_options, drives_off,
                                         exit_code_of, open_gate, print_json, run_stoppable)
from benchjog.console.cli.confirm import PromptConfirmer
from benchjog.console.errors import UsageError


# --- the commands----------------------------------------------------------------

def register(sub: argparse._SubParsersAction) -> None:
    check = sub.add_parser("check", help="dry-run a program of taught points and report",
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
    check.add_argument("--json", action="store_true", help="machine-readable output")
    check.set_defaults(func=cmd_check)

    run = sub.add_parser("run", help="run a program for real after one confirmation",
                         description="Plan the whole program from the current position, print "
                         "the plan, ask once, run it (the simulated arm when no port). A step "
                         "that fails halts the program and is named.")
    run.add_argument("program", metavar="PROGRAM", help="program file (TOML)")
    add_arm_option(run)
    add_port_options(run)
    add_journal_option(run)
    run.set_defaults(func=cmd_run)


def cmd_check(args: argparse.Namespace) -> int:
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
    arm, program, book = load_program_for(args.program, args.arm)
    confirmer = PromptConfirmer(arm, question="Run this program?")
    with open_gate(arm, args) as gate:
        gate.enable()
        try:
            report, result = run_stoppable(
                gate, lambda: run_program(gate, arm, program, book, confirmer))
        finally:
            drives_off(gate)
    if not report.ok:
        for line in report_lines(report):
            print(line, file=sys.stderr)
    print(result_words(report, result))
    return exit_code_of(result)

