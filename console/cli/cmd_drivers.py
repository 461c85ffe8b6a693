"""``benchjog emulate`` and ``benchjog ports``."""

from __future__ import annotations

import argparse
import sys

from benchjog.console import exit_codes
from benchjog.console.cell.armfile import load_arm


def register(subparsers) -> None:
    emulate = subparsers.add_parser(
        "emulate", help="run the controller emulator on a pseudo-terminal",
        description=("Start the controller emulator on a pseudo-terminal, print its device "
                     "path on the first line of stdout and serve until interrupted. It starts "
                     "as a controller does after power-up: drives off, not homed. While it "
                     "runs, type estop, release or fault and Enter to press or release its "
                     "e-stop button or cause a drive fault, limit or clear to open or close "
                     "a limit switch."))
    emulate.add_argument("--arm", metavar="FILE", default=argparse.SUPPRESS,
                         help="arm file (TOML) or built-in arm name")
    emulate.add_argument("--baud", type=int, default=argparse.SUPPRESS,
                         help="baud rate the paced output runs at (default 115200)")
    emulate.add_argument("--queue", type=_positive, default=8, metavar="N", help="queue depth (default 8)")
    emulate.add_argument("--home-s", type=_non_negative, default=0.3, metavar="S",
                         help="homing time in seconds (default 0.3)")
    emulate.add_argument("--estop-at", type=_non_negative, metavar="S",
                         help="press the e-stop S seconds after start")
    emulate.add_argument("--estop-after", type=_positive, metavar="N", help="press the e-stop after N MOVEs")
    emulate.add_argument("--fault-after", type=_positive, metavar="N", help="a FOLLOWING fault after N MOVEs")
    emulate.add_argument("--drop-every", type=_positive, metavar="N", help="lose every Nth host line")
    emulate.add_argument("--garble-every", type=_positive, metavar="N",
                         help="every Nth host line arrives with a bad CRC")
    emulate.add_argument("--corrupt-every", type=_positive, metavar="N",
                         help="send every Nth reply with a bad CRC")
    emulate.add_argument("--slow-ms", type=_non_negative, default=0.0, metavar="MS",
                         help="delay every reply by MS milliseconds")
    emulate.add_argument("--pace", action="store_true", help="move bytes at the baud rate (10 bits a byte)")
    emulate.set_defaults(func=cmd_emulate)

    ports = subparsers.add_parser("ports", help="list serial ports",
                                  description="List the serial ports, one a line.")
    ports.set_defaults(func=cmd_ports)


def _positive(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a whole number: {text!r}") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be 1 or more: {text!r}")
    return value


def _non_negative(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a number: {text!r}") from None
    if not value >= 0 or value == float("inf"):
        raise argparse.ArgumentTypeError(f"must be a finite number >= 0: {text!r}")
    return value


def cmd_emulate(args: argparse.Namespace) -> int:
    from benchjog.drivers.emulator import EmulatorOptions, serve

    arm = load_arm(getattr(args, "arm", None))
    baud = getattr(args, "baud", 115200)
    if baud < 1:
        from benchjog.console.errors import UsageError
        raise UsageError(f"--baud must be positive, got {baud}")
    options = EmulatorOptions(
        queue_depth=args.queue, home_s=args.home_s, baud=baud, pace=args.pace,
        estop_at_s=args.estop_at, estop_after=args.estop_after, fault_after=args.fault_after,
        drop_every=args.drop_every, garble_every=args.garble_every,
        corrupt_every=args.corrupt_every, slow_ms=args.slow_ms)
    print(f"benchjog: emulating {arm.name} ({arm.n_joints} axes) at {baud} baud; type "
          "estop, release or fault and Enter to play the controller's panel; ctrl+c to stop",
          file=sys.stderr)
    return serve(arm, options, sys.stdout, stdin=sys.stdin, stderr=sys.stderr)


def cmd_ports(args: argparse.Namespace) -> int:  # noqa: ARG001
    from serial.tools import list_ports

    found = sorted(list_ports.comports(), key=lambda p: p.device)
    if not found:
        print("no serial ports found", file=sys.stderr)
        return exit_codes.OK
    for port in found:
        desc = port.description if port.description and port.description != "n/a" else ""
        print(f"{port.device}\t{desc}".rstrip())
    return exit_codes.OK
