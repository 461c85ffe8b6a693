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


def add_port_options(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--port", metavar="URL", default=argparse.SUPPRESS,
                        help="serial port or pyserial URL (default: the simulated arm)")
    parser.add_argument("--baud", type=int, metavar="N", default=argparse.SUPPRESS,
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
