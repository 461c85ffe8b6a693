"""``benchjog firmware``: the reference controller firmware and a config for an arm
file, written to a folder ready to copy onto a MicroPython board."""

from __future__ import annotations

import argparse
import sys

from benchjog.console import exit_codes
from benchjog.console.cli.commands import summary
from benchjog.console.cli.common import add_output_options, print_json
from benchjog.console.errors import Refused, UsageError


def register(sub: argparse._SubParsersAction) -> None:
    fw = sub.add_parser(
        "firmware", help=summary("firmware"),
        description=("Write the reference controller firmware (MicroPython) and a config.py "
                     "filled in from the arm file to a folder, ready to copy onto the board. "
                     "Pins in config.py are placeholders: check every one against the wiring. "
                     "The firmware's e-stop input is not a safety function: wire the e-stop "
                     "in series with the drives' supply too."))
    fw.add_argument("arm", metavar="ARM", help="arm file (TOML) or built-in arm name")
    fw.add_argument("--out", metavar="DIR", required=True,
                    help="folder to write to (made if missing; its parent must exist)")
    fw.add_argument("--drive", choices=("auto", "servo", "stepdir"), default="auto",
                    help="axis hardware: hobby PWM servos, step/direction drivers, or auto "
                    "(revolute joints servos, prismatic ones step/direction; default)")
    fw.add_argument("--force", action="store_true",
                    help="replace firmware files already in the folder (each old one kept as .bak)")
    add_output_options(fw)
    fw.set_defaults(func=cmd_firmware)


def cmd_firmware(args: argparse.Namespace) -> int:
    from pathlib import Path

    from benchjog.console.cell.armfile import load_arm
    from benchjog.console.cell.safe_files import write_atomic
    from benchjog.drivers.firmware.configgen import board_files, config_for_arm

    arm = load_arm(args.arm)
    out = Path(args.out)
    if out.exists() and not out.is_dir():
        raise UsageError(f"{out}: not a folder")
    if not out.exists() and not out.parent.is_dir():
        raise UsageError(f"{out}: its parent folder does not exist")
    files = board_files(arm, args.drive)
    present = [name for name in files if (out / name).exists()]
    if present and not args.force:
        raise Refused(f"{out / present[0]} exists: nothing written (--force replaces the "
                      "firmware files, keeping each old one as .bak)")
    try:
        out.mkdir(exist_ok=True)
    except OSError as exc:
        raise UsageError(f"{out}: cannot make the folder: {exc.strerror or exc}") from None
    written = []
    for name, text in files.items():
        write_atomic(out / name, text, backup=True)
        written.append(str(out / name))
    if args.json:
        cfg = config_for_arm(arm, args.drive)
        print_json({"out": str(out), "arm": arm.name, "files": written,
                    "axes": [{"name": a["name"], "kind": a["kind"], "min_counts": a["min_counts"],
                              "max_counts": a["max_counts"]} for a in cfg["AXES"]]})
    else:
        for path in written:
            print(path)
        print(f"benchjog: firmware for {arm.name} written; check every pin in config.py against "
              "the wiring, then copy the files to the board (README: 'Controller firmware')",
              file=sys.stderr)
    return exit_codes.OK
