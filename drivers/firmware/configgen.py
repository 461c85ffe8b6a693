"""The board's ``config.py`` for an arm file, and the firmware files for a folder.

The config is Python (MicroPython imports it), with a comment on every setting, since
the user edits it: pins are placeholders for an RP2040-class board and must be checked
against the wiring. Counts and ranges come from the arm file: the hard range is the soft
limits widened by 5 deg (5 mm), drivers/calibration.py, the same the emulator refuses
outside of.
"""

from __future__ import annotations

import math
from pathlib import Path

from benchjog.drivers.calibration import hard_range_counts
from benchjog.kinematics.model import Arm, Joint

HERE = Path(__file__).resolve().parent
BOARD_FILES = ("core.py", "hw_io.py", "hw_servo.py", "hw_stepdir.py", "main.py")
CONFIG_FILE = "config.py"
DRIVES = ("auto", "servo", "stepdir")

TICK_US = 1000
SERVO_US_PER_DEG = 2000.0 / 180.0   # common hobby servo: 500..2500 us over 180 deg (common practice)
SERVO_CENTRE_US = 1500
SERVO_MIN_US = 500
SERVO_MAX_US = 2500
HOME_SPEED_FRACTION = 0.1           # homing seeks its switch at a tenth of the joint's max speed
FIRST_PINS = {"servo": 2, "estop": 15, "outputs": (16, 17)}


def drive_for(joint: Joint, drive: str) -> str:
    """``servo`` or ``stepdir`` for one joint: ``auto`` gives a revolute joint a hobby
    servo and a prismatic one a step/direction driver."""
    if drive == "auto":
        return "servo" if joint.is_revolute else "stepdir"
    return drive


def _servo_axis(joint: Joint, lo: int, hi: int, pin: int) -> dict:
    """A hobby servo's settings; the hard range is narrowed to what the servo's pulse
    range reaches, so a MOVE beyond it is refused (``RANGE``) rather than clamped."""
    us_per_count = SERVO_US_PER_DEG / joint.counts_per_unit
    reach_lo = math.ceil((SERVO_MIN_US - SERVO_CENTRE_US) / us_per_count)
    reach_hi = math.floor((SERVO_MAX_US - SERVO_CENTRE_US) / us_per_count)
    lo, hi = max(lo, reach_lo), min(hi, reach_hi)
    return {"min_counts": lo, "max_counts": hi, "kind": "servo", "pin": pin,
            "pulse_at_zero_us": SERVO_CENTRE_US, "us_per_count": round(us_per_count, 6),
            "pulse_min_us": SERVO_MIN_US, "pulse_max_us": SERVO_MAX_US}


def _stepdir_axis(joint: Joint, lo: int, hi: int, pins: tuple[int, int, int]) -> dict:
    speed = abs(joint.to_display(joint.max_speed)) * joint.counts_per_unit   # counts/s
    return {"kind": "stepdir", "step_pin": pins[0], "dir_pin": pins[1], "enable_pin": pins[2],
            "max_steps_per_tick": math.ceil(speed * TICK_US / 1e6 * 1.5) + 1,
            "home_pin": None, "home_dir": -1,
            "home_speed": max(1, round(speed * HOME_SPEED_FRACTION)),
            "home_at": lo, "home_travel": hi - lo}


def config_for_arm(arm: Arm, drive: str = "auto") -> dict:
    """The config settings for ``arm`` as plain data (what :func:`config_text` writes)."""
    if drive not in DRIVES:
        raise ValueError(f"drive must be one of {', '.join(DRIVES)}, got {drive!r}")
    pin = FIRST_PINS["servo"]
    axes = []
    for joint in arm.joints:
        lo, hi = hard_range_counts(joint)
        kind = drive_for(joint, drive)
        if kind == "servo":
            ax = _servo_axis(joint, lo, hi, pin)
            pin += 1
        else:
            ax = _stepdir_axis(joint, lo, hi, (pin, pin + 1, pin + 2))
            pin += 3
        axes.append({"name": joint.name, "min_counts": lo, "max_counts": hi, **ax,
                     "limit_pin": None})
    name = "".join(c if c.isalnum() or c in "-_." else "-" for c in arm.name)[:32] or "benchjog"
    return {"NAME": name, "LINK": {"kind": "usb"}, "QUEUE": 8, "TICK_US": TICK_US,
            "HOME_MS": 3000, "ESTOP_PIN": FIRST_PINS["estop"], "DRIVE_SUPPLY_PIN": None,
            "OUTPUT_PINS": list(FIRST_PINS["outputs"]), "AXES": axes}


_HEADER = '''\
# benchjog controller configuration for the arm "{arm}", written by `benchjog firmware`.
# Edit it for your board and wiring, then copy it to the board with the other files.
#
# EVERY PIN NUMBER BELOW IS A PLACEHOLDER for an RP2040-class board: check each one
# against your wiring before the first power-up, with the drives' supply off.
# The e-stop input here is NOT a safety function: the e-stop contact must also break the
# servo/driver supply in hardware, and safeguarding per ISO 10218 / ISO 13849 and local
# regulations comes first.
#
# Counts follow the arm file: counts = round(direction * (value - zero) * counts_per_unit).
# min_counts/max_counts are the controller's hard range (soft limits + 5 deg or 5 mm); a
# MOVE outside it is refused. A servo axis's range is narrowed to what its pulse range
# reaches.
'''

_NOTES = {
    "NAME": "one word the controller gives in its HELLO reply",
    "LINK": 'the host link: {"kind": "usb"}, or {"kind": "uart", "id": 0, "tx": 0, "rx": 1, "baud": 115200}',
    "QUEUE": "segments the controller holds",
    "TICK_US": "interpolation tick in microseconds (servo pulses update, steps are generated)",
    "HOME_MS": "the move to count 0 at HOME takes at least this long (ms)",
    "ESTOP_PIN": "normally-closed e-stop contact between this pin and GND (pull-up on): open = e-stop",
    "DRIVE_SUPPLY_PIN": "optional: a pin that switches the drives' supply relay on (1) while enabled; None: not used",
    "OUTPUT_PINS": "digital outputs 0, 1, ... (gripper, vacuum), up to 8 pins",
}

_AXIS_NOTES = '''\
# One table per axis, base first.
#  kind "servo": a hobby PWM servo on `pin`; pulse = pulse_at_zero_us + counts * us_per_count,
#    clamped to pulse_min_us..pulse_max_us. Measure your servo: the defaults assume
#    500..2500 us over 180 degrees with count 0 at 1500 us. A hobby servo jumps to its
#    first pulse at its own speed when the drives go on: keep clear.
#  kind "stepdir": step/dir/enable pins (enable active low); one count is one step, so set
#    the arm file's counts_per_unit to steps per degree (mm). More than max_steps_per_tick
#    steps in one tick is a FOLLOWING fault.
#  limit_pin: a normally-closed limit switch to GND; opening it latches a LIMIT_SWITCH fault.
#  home_pin: a home switch (normally closed to GND). With one, HOME moves the axis toward
#    home_dir at home_speed counts/s until the switch opens, takes that spot as home_at
#    counts, then goes to count 0; not found within home_travel counts is a LIMIT_SWITCH
#    fault. Without one, HOME goes to count 0 from where the axis is believed to be
#    (power-up counts as 0: start with the arm at its home pose).
'''


def _py(value) -> str:
    """A Python literal MicroPython reads back."""
    if isinstance(value, dict):
        return "{" + ", ".join(f"{_py(k)}: {_py(v)}" for k, v in value.items()) + "}"
    if isinstance(value, list):
        return "[" + ", ".join(_py(v) for v in value) + "]"
    return repr(value)


def config_text(arm: Arm, drive: str = "auto") -> str:
    """The text of the board's ``config.py`` for ``arm``."""
    cfg = config_for_arm(arm, drive)
    out = [_HEADER.format(arm=arm.name.replace("\n", " "))]
    for key, note in _NOTES.items():
        out.append(f"\n# {note}\n{key} = {_py(cfg[key])}\n")
    out.append("\n" + _AXIS_NOTES + "AXES = [\n")
    out += ["    " + _py(ax) + ",\n" for ax in cfg["AXES"]]
    out.append("]\n")
    return "".join(out)


def board_files(arm: Arm, drive: str = "auto") -> dict[str, str]:
    """Every file for the board, name -> text: the firmware modules as they are, and
    the config filled in for ``arm``."""
    files = {name: (HERE / name).read_text(encoding="utf-8") for name in BOARD_FILES}
    files[CONFIG_FILE] = config_text(arm, drive)
    return files
