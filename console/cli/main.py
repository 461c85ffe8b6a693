"""The ``benchjog`` command line: argparse subcommands, one ``cmd_<name>`` each.

Subcommands live in ``console/cli/cmd_*.py`` modules; each has ``register(subparsers)``
that adds its parsers with ``set_defaults(func=cmd_<name>)``. ``main`` turns the known
errors into one stderr line and an exit code (console/exit_codes.py), never a traceback.
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys
from collections.abc import Sequence

from benchjog.console import exit_codes
from benchjog.console.cli.common import baud_rate
from benchjog.console.errors import known_error_code

COMMAND_MODULES = (
    "benchjog.console.cli.cmd_kinematics",
    "benchjog.console.cli.cmd_drivers",
    "benchjog.console.cli.cmd_motion",
    "benchjog.console.cli.cmd_program",
    "benchjog.console.cli.cmd_firmware",
    "benchjog.console.cli.cmd_calibrate",
)


class _Parser(argparse.ArgumentParser):
    """Usage errors as one line on stderr, exit 2."""

    def error(self, message: str):  # type: ignore[override]
        self.exit(exit_codes.BAD_INPUT, f"benchjog: {message} (see benchjog --help)\n")


def version() -> str:
    from benchjog import __version__
    return __version__


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="benchjog", description=(
        "Jog, teach and run a small bench robot arm (planar 2R or SCARA). With no "
        "command: the console on the built-in simulated arm."))
    parser.add_argument("--version", action="version", version=f"benchjog {version()}")
    parser.add_argument("--arm", metavar="FILE", help="arm file (TOML) or built-in arm name")
    parser.add_argument("--port", metavar="URL", help="serial port or pyserial URL of the controller")
    parser.add_argument("--baud", type=baud_rate, default=115200, help="baud rate (default 115200)")
    parser.add_argument("--journal", metavar="FILE", default=None,
                        help="append the motion journal here (default: a new file in "
                        "~/.local/state/benchjog/journal, rotated: 50 MB / 30 days)")
    parser.add_argument("--trace", metavar="FILE", default=None,
                        help="serial: write every protocol line sent and received, timestamped")
    parser.add_argument("--points", metavar="FILE", default="points.toml",
                        help="console: the points file to teach into (default ./points.toml)")
    parser.add_argument("--program", metavar="FILE", default="program.toml",
                        help="console: the program file to build (default ./program.toml)")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for name in COMMAND_MODULES:
        importlib.import_module(name).register(sub)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    func = getattr(args, "func", None)
    try:
        if func is None:
            return _console_or_overview(parser, args)
        return int(func(args))
    except KeyboardInterrupt:
        print("benchjog: interrupted", file=sys.stderr)
        return exit_codes.REFUSED
    except Exception as exc:  # noqa: BLE001 - known errors become one line
        code = known_error_code(exc)
        if code is None:
            if os.environ.get("BENCHJOG_DEBUG"):
                raise
            # A bug, not the user's mistake: still one line, and nothing half done (the
            # gate and the files clean up on their way out); the traceback on request.
            text = str(exc).strip().splitlines()
            print(f"benchjog: internal error: {type(exc).__name__}"
                  f"{': ' + text[0] if text else ''} (a bug: please report it; "
                  "BENCHJOG_DEBUG=1 shows the traceback)", file=sys.stderr)
            return exit_codes.INTERNAL
        print(f"benchjog: {exc}", file=sys.stderr)
        return code


def _console_or_overview(parser: argparse.ArgumentParser, args: argparse.Namespace) -> int:
    """The console when there is a terminal to draw it on; otherwise (a script, CI, a
    pipe) the command overview."""
    if not (sys.stdin.isatty() and sys.stdout.isatty()):
        parser.print_help()
        print("benchjog: no terminal here, so the console did not open; the commands are "
              "listed above", file=sys.stderr)
        return exit_codes.OK
    from benchjog.console.tui.app import run_console  # Textual loads only when the console opens

    return run_console(args)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
