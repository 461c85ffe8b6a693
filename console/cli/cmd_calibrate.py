"""``benchjog calibrate plan|touch|fit|apply`` and ``benchjog commission``: their
options only. The steps themselves (numpy, scipy, the interlock) live in
console/cli/calibrate_steps.py and load when one runs, so ``benchjog --help`` stays fast.

- ``plan``: which holes to touch, on which branch (pose selection, O1).
- ``touch``: visit them through the interlock at reduced speed, record the counts.
- ``fit``: identify link lengths, joint zeros and the base pose; the report (or JSON).
- ``apply``: the corrected arm file, shown as a diff, written after confirmation with a
  backup of the previous version.
"""

from __future__ import annotations

import argparse
import importlib

from benchjog.console.cli.commands import summary
from benchjog.console.cli.common import (add_arm_option, add_journal_option, add_port_options,
                                         add_verbosity_options)
from benchjog.kinematics.options import TOUCH_SPEED_PCT

DEFAULT_COUNT = 12


def _step(name: str):
    def run(args: argparse.Namespace) -> int:
        return getattr(importlib.import_module("benchjog.console.cli.calibrate_steps"), name)(args)
    run.__name__ = name
    return run


def _json_options(parser: argparse.ArgumentParser) -> None:
    """``--json``, ``-q``, ``-v`` before or after the step (``calibrate --json fit`` and
    ``calibrate fit --json`` alike): absent unless given, so a step does not undo it."""
    parser.add_argument("--json", action="store_true", default=argparse.SUPPRESS,
                        help="machine-readable output (the report, or what was written)")
    add_verbosity_options(parser, default=argparse.SUPPRESS)


def _wants_json(args: argparse.Namespace) -> bool:
    return bool(getattr(args, "json", False))


def register(sub: argparse._SubParsersAction) -> None:
    cal = sub.add_parser("calibrate", help=summary("calibrate"),
                         description="Kinematic calibration: touch holes of a fixture plate with "
                         "the tool tip, fit link lengths, joint zeros and the base pose, write "
                         "the corrected arm file. See docs/calibration.md.")
    _json_options(cal)
    steps = cal.add_subparsers(dest="step", metavar="STEP", parser_class=type(cal), required=True)

    plan = steps.add_parser("plan", help="which holes to touch, on which branch")
    _plate_options(plan, required=True)
    plan.add_argument("--count", type=int, default=DEFAULT_COUNT, help=f"touches (default {DEFAULT_COUNT})")
    _json_options(plan)
    add_arm_option(plan)
    plan.set_defaults(func=_step("cmd_plan"))

    touch = steps.add_parser("touch", help="touch the planned holes and record the counts",
                             description="Visit the planned holes through the interlock at reduced "
                             "speed (each approach after confirmation), finish each touch with "
                             "typed jog steps (or, on the simulated arm with --sim-errors, a "
                             "simulated hand), record the counts.")
    _plate_options(touch, required=True)
    touch.add_argument("--out", required=True, metavar="FILE", help="touches file to write")
    touch.add_argument("--count", type=int, default=DEFAULT_COUNT, help=f"touches (default {DEFAULT_COUNT})")
    touch.add_argument("--speed", type=float, default=TOUCH_SPEED_PCT, metavar="PCT",
                       help=f"speed override, percent (default {TOUCH_SPEED_PCT:g})")
    touch.add_argument("--sim-errors", metavar="KEY=V,...", default=None,
                       help="rehearsal: the simulated arm really differs from the arm file by "
                       "these (e.g. shoulder.a=1.5,elbow.zero=-0.4,base.x=200; mm and deg)")
    touch.add_argument("--sim-noise", type=float, default=0.05, metavar="MM",
                       help="rehearsal: the simulated hand's touching scatter, mm (default 0.05)")
    touch.add_argument("--seed", type=int, default=None, help="rehearsal: random seed")
    add_arm_option(touch)
    add_port_options(touch)
    add_journal_option(touch)
    _json_options(touch)
    touch.set_defaults(func=_step("cmd_touch"))

    fit = steps.add_parser("fit", help="identify the arm from a touches file; the report")
    fit.add_argument("touches", metavar="TOUCHES", help="touches file")
    _plate_options(fit, required=False)
    _json_options(fit)
    add_arm_option(fit)
    fit.set_defaults(func=_step("cmd_fit"))

    apply = steps.add_parser("apply", help="write the corrected arm file (diff, confirm, backup)")
    apply.add_argument("touches", metavar="TOUCHES", help="touches file")
    apply.add_argument("--out", required=True, metavar="FILE",
                       help="the arm file to write (the arm file itself, or a new one)")
    _plate_options(apply, required=False)
    add_arm_option(apply)
    _json_options(apply)
    apply.set_defaults(func=_step("cmd_apply"))

    com = sub.add_parser("commission", help=summary("commission"),
                         description="A guided walk-through for one axis, every motion through the "
                         "interlock at reduced speed after confirmation: confirm the direction, "
                         "measure counts per unit, set the zero at a reference mark, find the safe "
                         "travel and set soft limits with a margin, check homing. The new arm file "
                         "is shown as a diff and written after confirmation, with a backup.")
    com.add_argument("axis", metavar="AXIS", help="joint name or number (1 = base)")
    com.add_argument("--out", required=True, metavar="FILE", help="the arm file to write")
    com.add_argument("--step", type=float, default=2.0, help="direction test jog, deg or mm (default 2)")
    com.add_argument("--test", type=float, default=10.0,
                     help="counts-per-unit test move, deg or mm by the file (default 10)")
    com.add_argument("--margin", type=float, default=2.0,
                     help="soft limits this far inside the travel found, deg or mm (default 2)")
    com.add_argument("--speed", type=float, default=TOUCH_SPEED_PCT, metavar="PCT",
                     help=f"speed override, percent (default {TOUCH_SPEED_PCT:g})")
    add_arm_option(com)
    add_port_options(com)
    add_journal_option(com)
    _json_options(com)
    com.set_defaults(func=_step("cmd_commission"))


def _plate_options(parser: argparse.ArgumentParser, required: bool) -> None:
    parser.add_argument("--plate", required=required, metavar="FILE",
                        help="plate file: the holes in the plate's frame" +
                        ("" if required else " (for the next-touch suggestion)"))
