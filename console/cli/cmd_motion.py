"""``benchjog move`` and ``benchjog home``: one motion from the command line, through
the interlock and the confirmation prompt (console/confirm_cli.py)."""

from __future__ import annotations

import argparse
import sys

TYPE_CHECKING = False  # typing.TYPE_CHECKING without importing typing at start-up

from benchjog.console.cli.common import (add_arm_option, add_journal_option, add_output_options,
                                         add_target_arguments,
                                         add_port_options, drives_off, exit_code_of, note, open_gate,
                                         print_json, result_json, run_stoppable, speed_percent,
                                         MIN_SPEED_PCT)
from benchjog.console.cli.cmd_kinematics import target_from_args
from benchjog.console.errors import UsageError
from benchjog.kinematics.model import Branch

if TYPE_CHECKING:  # the planner and the interlock (numpy) load only when a command runs
    from benchjog.drivers.interlock import RunResult

JOINT, LINE = "joint", "line"  # the planner's path names (kinematics/planner.py JOINT, LINE)


def register(sub: argparse._SubParsersAction) -> None:
    move = sub.add_parser("move", help="plan one move, print it, ask, move",
                          description="Plan one move from the current position, print the plan, "
                          "ask for confirmation, execute it (the simulated arm when no port). "
                          "It never homes: on an unhomed controller it refuses.")
    add_target_arguments(move)
    move.add_argument("--branch", choices=[b.value for b in Branch],
                      help="IK branch (default: the usable one nearest the current joints)")
    move.add_argument("--path", choices=[JOINT, LINE], default=JOINT,
                      help="joint-interpolated (default) or a straight tool line")
    move.add_argument("--speed", type=speed_percent, default=100.0, metavar="PCT",
                      help=f"speed override in percent, {MIN_SPEED_PCT:g} to 100 (default 100)")
    add_arm_option(move)
    add_port_options(move)
    add_journal_option(move)
    add_output_options(move, json_help="one JSON object with the outcome on stdout "
                       "(docs/cli-json.md)")
    move.set_defaults(func=cmd_move)

    home = sub.add_parser("home", help="run the controller's homing cycle after confirmation",
                          description="Run the controller's homing cycle after confirmation "
                          "(the simulated arm when no port; it starts homed).")
    add_arm_option(home)
    add_port_options(home)
    add_journal_option(home)
    add_output_options(home, json_help="one JSON object with the outcome on stdout "
                       "(docs/cli-json.md)")
    home.set_defaults(func=cmd_home)


def _report(args: argparse.Namespace, result: RunResult) -> int:
    if getattr(args, "json", False):
        print_json(result_json(args.command, result))
    if result.completed:
        note(args, f"benchjog: {result.detail}")
    else:
        print(f"benchjog: {result.detail}", file=sys.stderr)
    return exit_code_of(result)


def cmd_move(args: argparse.Namespace) -> int:
    from benchjog.console.cell.armfile import load_arm
    from benchjog.console.cli.confirm import PromptConfirmer

    arm = load_arm(args.arm)
    target = target_from_args(arm, args.coords)
    branch = Branch(args.branch) if args.branch else None
    with open_gate(arm, args) as gate:
        gate.enable()
        try:
            proposal = gate.propose_move(target, branch=branch, path=args.path,
                                         speed_pct=args.speed)
            result = run_stoppable(gate, lambda: gate.execute(
                proposal, PromptConfirmer(arm, question="Move?")))
        finally:
            drives_off(gate)
    return _report(args, result)


def cmd_home(args: argparse.Namespace) -> int:
    from benchjog.console.cell.armfile import load_arm
    from benchjog.console.cli.confirm import PromptConfirmer

    arm = load_arm(args.arm)
    with open_gate(arm, args) as gate:
        gate.enable()
        try:
            result = run_stoppable(gate, lambda: gate.home(PromptConfirmer(arm, question="Home?")))
        finally:
            drives_off(gate)
    return _report(args, result)
