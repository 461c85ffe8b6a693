"""``benchjog reset``: clear a latched fault or a released e-stop, after confirmation.

The reset goes through the interlock (``Interlock.reset``), like every command to the
controller. It never switches the drives on and never moves: after it, the controller is
as after a stop, and a move or a homing cycle needs its own confirmation. A pressed
e-stop button cannot be cleared from software: the controller refuses, and the command
says to release the button first (exit 3, the controller refused).
"""

from __future__ import annotations

import argparse
import sys

from benchjog.console import exit_codes
from benchjog.console.cli.commands import summary
from benchjog.console.cli.common import (add_arm_option, add_journal_option, add_output_options,
                                         add_port_options, note, print_json)
from benchjog.console.errors import UsageError


def register(sub: argparse._SubParsersAction) -> None:
    reset = sub.add_parser(
        "reset", help=summary("reset"),
        description="Clear a controller's latched fault, or its e-stop latch once the button "
        "is released, after confirmation (y or yes). It never switches the drives on and "
        "never moves. A hardware e-stop comes first: find out why the arm stopped before "
        "you clear it. Exit 0 cleared (or nothing to clear), 1 cancelled, 3 the controller "
        "refused (for example the e-stop button is still pressed).")
    add_arm_option(reset)
    add_port_options(reset)
    add_journal_option(reset)
    add_output_options(reset, json_help="one JSON object: what was latched and the outcome")
    reset.set_defaults(func=cmd_reset)


def cmd_reset(args: argparse.Namespace) -> int:
    from benchjog.console.cell.armfile import load_arm
    from benchjog.console.cli.common import open_gate
    from benchjog.console.cli.confirm import is_yes

    if not getattr(args, "port", None):
        raise UsageError("reset needs --port URL: the simulated arm starts fresh with every "
                         "command, so it has nothing latched to clear")
    arm = load_arm(getattr(args, "arm", None))
    with open_gate(arm, args) as gate:
        latched = gate.state().latched
        if latched is None:
            return _done(args, None, "nothing to clear", True, exit_codes.OK)
        print(f"reset: clear the controller's latched '{latched}'; the drives stay off and "
              "nothing moves", file=sys.stderr)
        print("Clear it? [y/N] ", end="", file=sys.stderr, flush=True)
        try:
            answer = sys.stdin.readline()
        except (OSError, ValueError):
            answer = ""
        if not answer:
            print("", file=sys.stderr)
        if not is_yes(answer):
            return _done(args, latched, "cancelled: nothing cleared", False, exit_codes.REFUSED)
        gate.reset()  # a refusal (e-stop still pressed) raises ControllerError: exit 3
        after = gate.state().latched
        if after is not None:
            return _done(args, latched, f"still latched: {after}", False, exit_codes.LINK_FAILED)
        return _done(args, latched, "cleared", True, exit_codes.OK)


def _done(args: argparse.Namespace, latched: str | None, detail: str, ok: bool, code: int) -> int:
    if getattr(args, "json", False):
        print_json({"event": "result", "command": "reset", "latched": latched,
                    "completed": ok, "detail": detail})
    if ok:
        note(args, f"benchjog: {detail}")
    else:
        print(f"benchjog: {detail}", file=sys.stderr)
    return code
