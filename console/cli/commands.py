"""The subcommands in the order ``benchjog --help`` lists them: each name, the module
that registers its parser (``register(subparsers)``) and its one-line summary.

The modules take their summaries from here (:func:`summary`), so this is the one place
they are written; the top-level overview (``benchjog --help``, a usage error) is built
from this table alone, without importing a command module (start-up time)."""

from __future__ import annotations

_CLI = "benchjog.console.cli."

COMMANDS: tuple[tuple[str, str, str], ...] = (
    ("solve", _CLI + "cmd_kinematics", "every IK branch for a tool target"),
    ("fk", _CLI + "cmd_kinematics", "the tool pose for joint values"),
    ("emulate", _CLI + "cmd_drivers", "run the controller emulator on a pseudo-terminal"),
    ("ports", _CLI + "cmd_drivers", "list serial ports; probe one for servos on a bus"),
    ("move", _CLI + "cmd_motion", "plan one move, print it, ask, move"),
    ("home", _CLI + "cmd_motion", "run the controller's homing cycle after confirmation"),
    ("check", _CLI + "cmd_program", "dry-run a program of taught points and report"),
    ("run", _CLI + "cmd_program", "run a program for real after one confirmation"),
    ("firmware", _CLI + "cmd_firmware",
     "write the controller firmware and a config for an arm to a folder"),
    ("calibrate", _CLI + "cmd_calibrate", "calibrate the arm file from touched fixture-plate holes"),
    ("commission", _CLI + "cmd_calibrate",
     "commission one axis: direction, counts, zero, limits, homing"),
    ("reset", _CLI + "cmd_reset",
     "clear a latched fault or a released e-stop, after confirmation"),
)

MODULES: tuple[str, ...] = tuple(dict.fromkeys(module for _, module, _ in COMMANDS))


def summary(name: str) -> str:
    """The one-line help of subcommand ``name``."""
    for command, _, words in COMMANDS:
        if command == name:
            return words
    raise KeyError(name)
