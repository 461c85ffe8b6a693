"""Pieces shared by the subcommand modules: common options, number parsing, output.

``open_gate`` (console/cell/link.py) and ``round_out`` (console/numbers.py) are shared
with the console and re-exported here for the subcommands."""

from __future__ import annotations

import argparse
import sys
TYPE_CHECKING = False  # typing's own constant, without importing typing at start-up
if TYPE_CHECKING:
    from typing import Any

from benchjog.console.cell.link import open_gate
from benchjog.console.errors import UsageError
from benchjog.console.numbers import finite_number, round_out


def add_arm_option(parser: argparse.ArgumentParser) -> None:
    """``--arm`` after the subcommand too, without clobbering the global one."""
    parser.add_argument("--arm", metavar="FILE", default=argparse.SUPPRESS,
                        help="arm file (TOML) or built-in arm name (default: planar-bench)")


class _Collect(argparse.Action):
    """Positionals that gather into one list, so the usage line reads ``X Y [Z] [ROLL]``
    (one target) instead of nargs='+''s ``X [X ...]`` (as if several were taken)."""

    def __call__(self, parser, namespace, values, option_string=None):  # noqa: ARG002
        if values is None:
            return
        current = getattr(namespace, self.dest, None)
        setattr(namespace, self.dest, (current if isinstance(current, list) else []) + [values])


def add_value_arguments(parser: argparse.ArgumentParser, dest: str,
                        names: tuple[tuple[str, str], ...], required: int = 2) -> None:
    """Positionals ``names`` ((metavar, help), ...), the first ``required`` of them
    mandatory, gathered into ``args.<dest>`` as a list of strings."""
    for index, (metavar, text) in enumerate(names):
        parser.add_argument(dest, metavar=metavar, action=_Collect, default=None, help=text,
                            nargs=None if index < required else "?")


def add_target_arguments(parser: argparse.ArgumentParser) -> None:
    add_value_arguments(parser, "coords", (
        ("X", "tool target x (mm)"), ("Y", "tool target y (mm)"),
        ("Z", "SCARA: tool height (mm; default: the home height)"),
        ("ROLL", "SCARA: tool roll (degrees; default 0)")))


def baud_rate(text: str) -> int:
    """argparse type for ``--baud``: a positive whole number."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a whole number ({text!r})") from None
    if value <= 0:
        raise argparse.ArgumentTypeError(f"must be > 0 ({value})")
    return value


MIN_SPEED_PCT = 1.0  # below this a move plans absurdly many segments (1e-5 %: 57,178)


def speed_percent(text: str) -> float:
    """argparse type for ``--speed``: a percentage of the arm's speeds, 1 to 100."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a number ({text!r})") from None
    if not MIN_SPEED_PCT <= value <= 100:  # also refuses nan and inf
        raise argparse.ArgumentTypeError(f"must be {MIN_SPEED_PCT:g} to 100 ({text})")
    return value


def result_json(command: str, result: Any) -> dict[str, Any]:
    """The closing JSON object of ``move``, ``home`` and ``run`` (docs/cli-json.md)."""
    return {"event": "result", "command": command, "completed": result.completed,
            "outcome": result.outcome, "detail": result.detail,
            "segments_sent": result.segments_sent,
            "step": None if result.step is None else result.step + 1}


def add_port_options(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--port", metavar="URL", default=argparse.SUPPRESS,
                        help="serial port or pyserial URL (default: the simulated arm)")
    parser.add_argument("--baud", type=baud_rate, metavar="N", default=argparse.SUPPRESS,
                        help="baud rate (default 115200)")


def parse_number(text: str, name: str) -> float:
    """A finite float from the command line, or a one-line UsageError."""
    return finite_number(text, UsageError, name)


def print_json(data: Any) -> None:
    """One JSON document (or one line of a stream) on stdout, flushed at once so a
    reader of a stream sees each line as it happens."""
    import json

    json.dump(data, sys.stdout, allow_nan=False)
    sys.stdout.write("\n")
    sys.stdout.flush()


def add_output_options(parser: argparse.ArgumentParser, *, json_help: str = "machine-readable "
                       "output (JSON; the shapes are in docs/cli-json.md)") -> None:
    """``--json``, and ``--quiet``/``-v`` after the subcommand as well as before it."""
    parser.add_argument("--json", action="store_true", help=json_help)
    add_verbosity_options(parser, default=argparse.SUPPRESS)


def add_verbosity_options(parser: argparse.ArgumentParser, *, default: Any = None) -> None:
    group = parser.add_mutually_exclusive_group()
    group.add_argument("-q", "--quiet", action="store_true",
                       default=False if default is None else default,
                       help="only results and errors: no notes or progress on stderr")
    group.add_argument("-v", "--verbose", action="count",
                       default=0 if default is None else default,
                       help="more detail on stderr (stdlib logging; -vv for debug)")


def quiet(args: argparse.Namespace) -> bool:
    return bool(getattr(args, "quiet", False))


def note(args: argparse.Namespace, text: str) -> None:
    """A note for the person at the terminal (stderr); ``--quiet`` leaves it out."""
    if not quiet(args):
        print(text, file=sys.stderr, flush=True)


def text_console():
    """A rich console for human output on stdout: colour and wrapping on a terminal,
    plain unwrapped lines into a pipe or a file (a script reads one warning a line)."""
    from rich.console import Console

    piped = not sys.stdout.isatty()
    return Console(highlight=False, soft_wrap=piped, no_color=piped or None)




def add_journal_option(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--journal", metavar="FILE", default=argparse.SUPPRESS,
                        help="append the motion journal here (default: a new file in the "
                        "user's state directory, ~/.local/state/benchjog/journal on Linux; "
                        "rotated at 50 MB / 30 days)")
    parser.add_argument("--trace", metavar="FILE", default=argparse.SUPPRESS,
                        help="serial: write every protocol line sent and received, timestamped")


def exit_code_of(result, gate=None) -> int:
    """0 done; 3 when the link or the controller failed (a halt that is not a person's
    stop); 1 for the rest (cancelled, refused, expired, stopped).

    With ``gate``: the journal is given a moment to finish writing, and when it failed a
    warning line goes to stderr; a command that moved the arm while its journal could
    not be written exits 3 (the cell's equipment failed: the record of that motion is
    incomplete), never 0."""
    from benchjog.console import exit_codes

    journal_failed = False
    if gate is not None:
        gate.wait_journal(2.0)
        error = gate.journal_error
        if error:
            journal_failed = True
            lost = gate.journal_lines_lost
            print(f"benchjog: warning: the motion journal failed: {error}"
                  + (f" ({lost} lines lost)" if lost else ""), file=sys.stderr)
    moved = result.completed or result.segments_sent > 0
    if journal_failed and moved:
        return exit_codes.LINK_FAILED
    if result.completed:
        return exit_codes.OK
    if result.outcome == "halted":
        return exit_codes.LINK_FAILED
    return exit_codes.REFUSED


def run_stoppable(gate, work):
    """Run ``work()`` (which drives the gate) in a worker thread so that ctrl+c stops
    the arm at once (``gate.stop()``) and the worker can still report where it halted."""
    import threading

    box: dict[str, Any] = {}

    def target() -> None:
        try:
            box["out"] = work()
        except BaseException as exc:  # noqa: BLE001 - re-raised in the caller's thread
            box["error"] = exc

    worker = threading.Thread(target=target, name="benchjog-motion", daemon=True)
    worker.start()
    try:
        while worker.is_alive():
            worker.join(0.1)
    except KeyboardInterrupt:
        gate.stop()
        worker.join(10.0)
    if "error" in box:
        raise box["error"]
    if "out" not in box:
        raise KeyboardInterrupt
    return box["out"]


def drives_off(gate) -> None:
    """Switch the drives off at the end of a command; a link already gone cannot keep
    them on, and must not hide what the command has to report."""
    try:
        gate.disable()
    except Exception:  # noqa: BLE001 - close() follows and reports nothing new
        pass


__all__ = ["MIN_SPEED_PCT", "result_json", "speed_percent", "add_arm_option", "add_journal_option", "add_target_arguments", "add_value_arguments", "add_output_options", "add_port_options",
           "add_verbosity_options", "baud_rate", "drives_off", "exit_code_of", "note", "open_gate",
           "parse_number", "print_json", "quiet", "round_out", "run_stoppable", "text_console"]
