"""``benchjog move`` and ``benchjog home``: one motion from the command line, through
the interlock and the confirmation prompt (console/cli/confirm.py). The drives are
switched on only after the yes (``open_gate(..., enable_on_yes=True)``): a cancelled
command never powered the arm."""

from __future__ import annotations

import argparse
import sys

TYPE_CHECKING = False  # typing.TYPE_CHECKING without importing typing at start-up

from benchjog.console.cli.commands import summary
from benchjog.console.cli.common import (add_arm_option, add_journal_option, add_output_options,
                                         add_target_arguments,
                                         add_port_options, drives_off, exit_code_of, note, open_gate,
                                         print_json, result_json, run_stoppable, speed_percent,
                                         MIN_SPEED_PCT)
from benchjog.console.cli.cmd_kinematics import target_from_args
from benchjog.console.errors import UsageError
from benchjog.kinematics.options import (BRANCHES, JOINT, LINE, LINE_TOLERANCE_MAX_MM,
                                         LINE_TOLERANCE_MIN_MM, LINE_TOLERANCE_MM)

if TYPE_CHECKING:  # the planner and the interlock (numpy) load only when a command runs
    from benchjog.drivers.interlock import RunResult


def register(sub: argparse._SubParsersAction) -> None:
    move = sub.add_parser("move", help=summary("move"),
                          description="Plan one move from the current position, print the plan, "
                          "ask for confirmation, execute it (the simulated arm when no port). "
                          "It never homes: on an unhomed controller it refuses.")
    add_target_arguments(move)
    move.add_argument("--branch", choices=BRANCHES,
                      help="IK branch (default: the usable one nearest the current joints)")
    move.add_argument("--path", choices=[JOINT, LINE], default=JOINT,
                      help="joint-interpolated (default) or a straight tool line")
    move.add_argument("--speed", type=speed_percent, default=100.0, metavar="PCT",
                      help=f"speed override in percent, {MIN_SPEED_PCT:g} to 100 (default 100)")
    move.add_argument("--tolerance", type=float, default=None, metavar="MM",
                      help=f"--path line: how far the tool may leave the straight line, mm "
                      f"(default {LINE_TOLERANCE_MM:g}, {LINE_TOLERANCE_MIN_MM:g}..{LINE_TOLERANCE_MAX_MM:g})")
    add_arm_option(move)
    add_port_options(move)
    add_journal_option(move)
    add_output_options(move, json_help="one JSON object with the outcome on stdout "
                       "(docs/cli-json.md)")
    move.set_defaults(func=cmd_move)

    home = sub.add_parser("home", help=summary("home"),
                          description="Run the controller's homing cycle after confirmation "
                          "(the simulated arm when no port; it starts homed).")
    add_arm_option(home)
    add_port_options(home)
    add_journal_option(home)
    add_output_options(home, json_help="one JSON object with the outcome on stdout "
                       "(docs/cli-json.md)")
    home.set_defaults(func=cmd_home)


def _report(args: argparse.Namespace, result: RunResult, gate) -> int:
    code = exit_code_of(result, gate)   # waits for the journal; warns when it failed
    if getattr(args, "json", False):
        print_json(result_json(args.command, result))
    if result.completed and code == 0:
        note(args, f"benchjog: {result.detail}")
    else:
        print(f"benchjog: {result.detail}", file=sys.stderr)
    return code


def cmd_move(args: argparse.Namespace) -> int:
    from benchjog.console.cell.armfile import load_arm
    from benchjog.console.cli.confirm import PromptConfirmer

    arm = load_arm(args.arm)
    target = target_from_args(arm, args.coords)
    from benchjog.kinematics.model import Branch

    branch = Branch(args.branch) if args.branch else None
    options = {}
    if args.tolerance is not None:
        from benchjog.kinematics.planner import check_tolerance
        from benchjog.kinematics.solve import TargetError

        if args.path != LINE:
            raise UsageError("--tolerance: for --path line only")
        try:
            options["tolerance_mm"] = check_tolerance(args.tolerance)
        except TargetError as exc:
            raise UsageError(f"--tolerance: {exc}") from None
    with open_gate(arm, args, enable_on_yes=True) as gate:   # drives on only after the yes
        try:
            proposal = gate.propose_move(target, branch=branch, path=args.path,
                                         speed_pct=args.speed, **options)
            result = run_stoppable(gate, lambda: gate.execute(
                proposal, PromptConfirmer(arm, question="Move?")))
        finally:
            drives_off(gate)
        return _report(args, result, gate)


def cmd_home(args: argparse.Namespace) -> int:
    from benchjog.console.cell.armfile import load_arm
    from benchjog.console.cli.confirm import PromptConfirmer

    arm = load_arm(args.arm)
    with open_gate(arm, args, enable_on_yes=True) as gate:   # drives on only after the yes
        try:
            result = run_stoppable(gate, lambda: gate.home(PromptConfirmer(arm, question="Home?")))
        finally:
            drives_off(gate)
        return _report(args, result, gate)
