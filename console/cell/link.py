"""Opening the interlock on the cell's arm: the simulated arm, or a controller over serial."""

from __future__ import annotations

import argparse

from benchjog.console.errors import UsageError


def open_gate(arm, args: argparse.Namespace, *, require_link: bool = True,
              enable_on_yes: bool = False):
    """The interlock on the simulated arm without ``--port``, on the serial driver with
    one (``--baud``, ``--trace``), or on the servo-bus driver when the arm file has a
    ``[bus]`` table (its baud rate from there); the journal from ``--journal`` or the
    default file. ``require_link=False`` (the console) opens even when the port cannot be
    reached. ``enable_on_yes=True`` (``move``, ``home``, ``run``): the drives stay off until the
    person says yes; the gate switches them on after it, never before."""
    from benchjog.drivers.interlock import Interlock  # the gate, and only the gate, owns a driver

    journal = getattr(args, "journal", None) or None
    if journal is not None:
        from pathlib import Path

        folder = Path(journal).expanduser().parent
        if not folder.is_dir():   # a typo must not make folders wherever it points
            raise UsageError(f"--journal: no folder {folder} (make it first, or leave "
                             "--journal out for the default journal folder)")
    port = getattr(args, "port", None)
    if port is not None and not port.strip():
        raise UsageError("--port: empty (leave it out for the simulated arm)")
    if not port:
        return Interlock.open(arm, "sim", journal=journal, enable_on_yes=enable_on_yes)
    from benchjog.drivers.servobus.config import has_bus_table

    if has_bus_table(arm.source):   # an arm of bus servos: its [bus] table sets the baud rate
        options = {"port": port}
        driver = "servobus"
    else:
        options = {"port": port, "baud": getattr(args, "baud", 115200)}
        driver = "serial"
    if getattr(args, "trace", None):
        options["trace"] = args.trace
    return Interlock.open(arm, driver, journal=journal, require_link=require_link,
                          enable_on_yes=enable_on_yes, **options)

