"""``benchjog emulate`` and ``benchjog ports``."""

from __future__ import annotations

import argparse
import sys

from benchjog.console import exit_codes
from benchjog.console.cli.commands import summary
from benchjog.console.cli.common import add_output_options, note, print_json


def register(subparsers) -> None:
    emulate = subparsers.add_parser(
        "emulate", help=summary("emulate"),
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
    add_output_options(emulate, json_help="the first line of stdout is a JSON object "
                       "(device, arm, axes, baud) instead of the bare device path")
    emulate.set_defaults(func=cmd_emulate)

    ports = subparsers.add_parser(
        "ports", help=summary("ports"),
        description=("List the serial ports with USB VID:PID, serial number, description and "
                     "a guess of what is behind each. With --probe PORT: send one HELLO and "
                     "report a benchjog controller that answers; with --probe PORT --ids LIST: "
                     "ping those servo ids on a Protocol 2.0 bus and report who answers (model, "
                     "present position, hardware error). Probing only greets, pings and reads: "
                     "nothing moves, torque is never switched."))
    ports.add_argument("--probe", metavar="PORT", help="a port (or pyserial URL) to probe")
    ports.add_argument("--ids", metavar="LIST", help="servo ids to ping, e.g. 1-6 or 1,2,5")
    ports.add_argument("--baud", dest="probe_baud", type=_positive, default=None, metavar="N",
                       help="baud rate for --probe (default 1000000 with --ids, else 115200)")
    add_output_options(ports, json_help="one JSON document on stdout")
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
    from benchjog.console.cell.armfile import load_arm
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
    note(args, f"benchjog: emulating {arm.name} ({arm.n_joints} axes) at {baud} baud; type "
         "estop, release or fault and Enter to play the controller's panel; ctrl+c to stop")
    out = sys.stdout
    if args.json:
        out = _FirstLineAsJson(out, {"arm": arm.name, "axes": arm.n_joints, "baud": baud})
    return serve(arm, options, out, stdin=sys.stdin, stderr=sys.stderr)


class _FirstLineAsJson:
    """stdout for ``emulate --json``: the emulator's first line (the device path) goes
    out as ``{"device": path, ...extra}``; what follows passes through unchanged."""

    def __init__(self, stream, extra: dict):
        self._stream, self._extra, self._pending = stream, extra, ""

    def write(self, text: str) -> int:
        if self._extra is None:
            return self._stream.write(text)
        self._pending += text
        if "\n" in self._pending:
            first, rest = self._pending.split("\n", 1)
            import json

            self._stream.write(json.dumps({"device": first, **self._extra}) + "\n" + rest)
            self._extra, self._pending = None, ""
        return len(text)

    def __getattr__(self, name: str):
        return getattr(self._stream, name)


# USB ids seen on the usual controllers (from memory; a guess, never a promise: many
# boards share a USB-serial chip). Keys are (VID, PID); PID None matches any.
USB_GUESSES: dict[tuple[int, int | None], str] = {
    (0x0403, 0x6014): "FT232H adapter: a servo-bus USB interface (Protocol 2.0)?",
    (0x0403, 0x6001): "FT232R USB-serial: a controller board or a servo-bus adapter",
    (0x0403, 0x6015): "FT231X USB-serial: a controller board or a servo-bus adapter",
    (0x2E8A, 0x0005): "RP2040 board running MicroPython: benchjog firmware?",
    (0x2E8A, None): "RP2040 board",
    (0x1A86, 0x7523): "CH340 USB-serial: a controller board or a servo-bus adapter",
    (0x10C4, 0xEA60): "CP210x USB-serial: a controller board or a servo-bus adapter",
    (0x2341, None): "Arduino board",
    (0x16C0, 0x0483): "Teensy board",
}


def usb_guess(vid: int | None, pid: int | None) -> str:
    """What a port with this USB VID:PID probably is.

    >>> usb_guess(0x2E8A, 0x0005)
    'RP2040 board running MicroPython: benchjog firmware?'
    >>> usb_guess(None, None)
    'not USB (built-in or virtual port)'
    """
    if vid is None:
        return "not USB (built-in or virtual port)"
    return USB_GUESSES.get((vid, pid)) or USB_GUESSES.get((vid, None)) or "unknown USB device"


def port_rows(ports) -> list[dict]:
    rows = []
    for p in sorted(ports, key=lambda p: p.device):
        vid, pid = getattr(p, "vid", None), getattr(p, "pid", None)
        desc = p.description if p.description and p.description != "n/a" else None
        hwid = p.hwid if getattr(p, "hwid", None) and p.hwid != "n/a" else None
        rows.append({"device": p.device,
                     "vid_pid": f"{vid:04X}:{pid:04X}" if vid is not None and pid is not None else None,
                     "serial_number": getattr(p, "serial_number", None) or None,
                     "description": desc, "hwid": hwid, "guess": usb_guess(vid, pid)})
    return rows


def cmd_ports(args: argparse.Namespace) -> int:
    if getattr(args, "probe", None) is not None:
        return _cmd_probe(args)
    if getattr(args, "ids", None) is not None or getattr(args, "probe_baud", None) is not None:
        from benchjog.console.errors import UsageError
        raise UsageError("ports: --ids and --baud go with --probe PORT")
    from serial.tools import list_ports

    rows = port_rows(list_ports.comports())
    if getattr(args, "json", False):
        from benchjog.console.cli.common import print_json
        print_json(rows)
        return exit_codes.OK
    if not rows:
        note(args, "no serial ports found")
        return exit_codes.OK
    for r in rows:
        print("\t".join([r["device"], r["vid_pid"] or "-", r["serial_number"] or "-",
                         r["description"] or "-", r["guess"]]))
    return exit_codes.OK


def firmware_probe():
    """The benchjog firmware's HELLO probe (drivers/firmware/probe.py): a callable
    ``probe(port, baud) -> dict | None`` (None: no benchjog firmware answered). It sends
    one HELLO and nothing else. ``--probe`` without ``--ids`` uses it."""
    from benchjog.drivers.firmware.probe import probe_firmware

    return probe_firmware


def _cmd_probe(args: argparse.Namespace) -> int:
    from benchjog.console.errors import UsageError

    port = args.probe.strip()
    if not port:
        raise UsageError("ports --probe: empty port")
    if args.ids is None:
        baud = args.probe_baud or 115200
        found = firmware_probe()(port, baud)
        if getattr(args, "json", False):
            from benchjog.console.cli.common import print_json
            print_json({"port": port, "baud": baud, "firmware": found})
        elif found is not None:
            print(f"{port}: benchjog controller " + " ".join(
                f"{k}={found[k]}" for k in ("name", "proto", "axes", "queue") if k in found))
        if found is None:
            print(f"benchjog: no benchjog controller answered HELLO on {port} at {baud} baud "
                  "(for servos on a bus, give --ids)", file=sys.stderr)
            return exit_codes.REFUSED
        return exit_codes.OK
    from benchjog.drivers.servobus.probe import parse_ids, probe_bus

    try:
        ids = parse_ids(args.ids)
    except ValueError as exc:
        raise UsageError(f"ports --ids: {exc}") from None
    baud = args.probe_baud or 1_000_000
    found = probe_bus(port, baud, ids)
    if getattr(args, "json", False):
        from benchjog.console.cli.common import print_json
        print_json({"port": port, "baud": baud, "servos": [
            {"id": f.servo_id, "model": f.model, "model_name": f.model_name, "firmware": f.firmware,
             "present_position": f.present, "hardware_error": f.hardware_error} for f in found]})
    else:
        for f in found:
            print(f.words())
    if not found:
        print(f"benchjog: no servo answered on {port} at {baud} baud (ids {args.ids}); check the "
              "baud rate, the ids and the servo supply", file=sys.stderr)
        return exit_codes.REFUSED
    return exit_codes.OK
