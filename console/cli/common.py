"""Pieces shared by the subcommand modules: common options, number parsing, output.

``open_gate`` (console/cell/link.py) and ``round_out`` (console/numbers.py) are shared
with the console and re-exported here for the subcommands."""

from __future__ import annotations

import argparse
import json
import math
import sys
from typing import Any

from benchjog.console.cell.link import open_gate
from benchjog.console.errors import UsageError
from benchjog.console.numbers import round_out


def add_arm_option(parser: argparse.ArgumentParser) -> None:
    """``--arm`` after the subcommand too, without clobbering the global one."""
    parser.add_argument("--arm", metavar="FILE", default=argparse.SUPPRESS,
                        help="arm file (TOML) or built-in arm name (default: planar-bench)")


def baud_rate(text: str) -> int:
    """argparse type for ``--baud``: a positive whole number."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a whole number ({text!r})") from None
    if value <= 0:
        raise argparse.ArgumentTypeError(f"must be > 0 ({value})")
    return value


def add_port_options(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--port", metavar="URL", default=argparse.SUPPRESS,
                        help="serial port or pyserial URL (default: the simulated arm)")
    parser.add_argument("--baud", type=baud_rate, metavar="N", default=argparse.SUPPRESS,
                        help="baud rate (default 115200)")


def parse_number(text: str, name: str) -> float:
    """A finite float from the command line, or a one-line UsageError."""
    try:
        value = float(text)
    except ValueError:
        raise UsageError(f"{name}: not a number ({text!r})") from None
    if not math.isfinite(value):
        raise UsageError(f"{name}: not a finite number ({text!r})")
    return value


def print_json(data: Any) -> None:
    json.dump(data, sys.stdout, allow_nan=False)
    sys.stdout.write("\n")




def add_journal_option(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--journal", metavar="FILE", default=argparse.SUPPRESS,
                        help="append the motion journal here (default: a new file in "
                        "~/.local/state/benchjog/journal, rotated: 50 MB / 30 days)")
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


__all__ = ["add_arm_option", "add_journal_option", "add_port_options", "baud_rate", "drives_off",
           "exit_code_of", "open_gate", "parse_number", "print_json", "round_out", "run_stoppable"]
