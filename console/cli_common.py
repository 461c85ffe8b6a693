"""Pieces shared by the subcommand modules: common options, number parsing, output."""

from __future__ import annotations

import argparse
import json
import math
import sys
from typing import Any

from console.errors import UsageError


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


def round_out(value: float, digits: int = 9) -> float:
    """Round for output, and never print -0.0."""
    value = round(value, digits)
    return 0.0 if value == 0 else value


def add_journal_option(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--journal", metavar="FILE", default=argparse.SUPPRESS,
                        help="append the motion journal here (default: a new file in "
                        "~/.local/share/benchjog/journal)")
    parser.add_argument("--trace", metavar="FILE", default=argparse.SUPPRESS,
                        help="serial: write every protocol line sent and received, timestamped")


def open_gate(arm, args: argparse.Namespace, *, require_link: bool = True):
    """The interlock on the simulated arm without ``--port``, on the serial driver with
    one (``--baud``, ``--trace``); the journal from ``--journal`` or the default file.
    ``require_link=False`` (the console) opens even when the port cannot be reached."""
    from drivers.interlock import Interlock  # the gate, and only the gate, owns a driver

    journal = getattr(args, "journal", None) or None
    port = getattr(args, "port", None)
    if port is not None and not port.strip():
        raise UsageError("--port: empty (leave it out for the simulated arm)")
    if not port:
        return Interlock.open(arm, "sim", journal=journal)
    options = {"port": port, "baud": getattr(args, "baud", 115200)}
    if getattr(args, "trace", None):
        options["trace"] = args.trace
    return Interlock.open(arm, "serial", journal=journal, require_link=require_link, **options)


def exit_code_of(result) -> int:
    """0 done; 3 when the link or the controller failed (a halt that is not a person's
    stop); 1 for the rest (cancelled, refused, expired, stopped)."""
    from console import exit_codes

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
