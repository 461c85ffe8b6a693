"""The control-table subset the driver uses, for the common Protocol 2.0 servo family
(the "X" series), and the words for the Hardware Error Status bits.

Addresses, sizes and units are from the family's published control table (from memory,
checked against the emulation only: keep them in this one file). EEPROM entries can be
written only while torque is off; they survive a power cycle. RAM entries reset to their
defaults at power-up and at a reboot.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Entry:
    """One control-table entry: address, size in bytes, signed, in EEPROM."""

    name: str
    address: int
    size: int
    signed: bool = False
    eeprom: bool = False
    default: int = 0


MODEL_NUMBER = Entry("model number", 0, 2, eeprom=True)
FIRMWARE_VERSION = Entry("firmware version", 6, 1, eeprom=True)
ID = Entry("id", 7, 1, eeprom=True, default=1)
BAUD_RATE = Entry("baud rate", 8, 1, eeprom=True, default=1)
RETURN_DELAY = Entry("return delay time", 9, 1, eeprom=True, default=250)   # 2 us units
DRIVE_MODE = Entry("drive mode", 10, 1, eeprom=True)                       # bit 0: reverse
OPERATING_MODE = Entry("operating mode", 11, 1, eeprom=True, default=3)
HOMING_OFFSET = Entry("homing offset", 20, 4, signed=True, eeprom=True)     # pulses
MAX_POSITION = Entry("max position limit", 48, 4, eeprom=True, default=4095)
MIN_POSITION = Entry("min position limit", 52, 4, eeprom=True, default=0)
TORQUE_ENABLE = Entry("torque enable", 64, 1)
LED = Entry("led", 65, 1)
HARDWARE_ERROR = Entry("hardware error status", 70, 1)
BUS_WATCHDOG = Entry("bus watchdog", 98, 1, signed=True)                   # 20 ms units
PROFILE_ACCELERATION = Entry("profile acceleration", 108, 4)               # 214.577 rev/min^2
PROFILE_VELOCITY = Entry("profile velocity", 112, 4)                       # 0.229 rev/min
GOAL_POSITION = Entry("goal position", 116, 4, signed=True)
MOVING = Entry("moving", 122, 1)
PRESENT_POSITION = Entry("present position", 132, 4, signed=True)

ENTRIES = (MODEL_NUMBER, FIRMWARE_VERSION, ID, BAUD_RATE, RETURN_DELAY, DRIVE_MODE,
           OPERATING_MODE, HOMING_OFFSET, MAX_POSITION, MIN_POSITION, TORQUE_ENABLE, LED,
           HARDWARE_ERROR, BUS_WATCHDOG, PROFILE_ACCELERATION, PROFILE_VELOCITY,
           GOAL_POSITION, MOVING, PRESENT_POSITION)

DRIVE_MODE_REVERSE = 0x01
POSITION_MODE = 3           # one turn, 0..4095, the servo clamps to its position limits
EXTENDED_POSITION_MODE = 4  # multi-turn
OPERATING_MODES = {"position": POSITION_MODE, "extended": EXTENDED_POSITION_MODE}
POSITION_RANGE = {POSITION_MODE: (0, 4095), EXTENDED_POSITION_MODE: (-1_048_575, 1_048_575)}
PULSES_PER_REV = 4096
CENTER = 2048               # one-turn mode: the middle of the range is the joint's zero

WATCHDOG_UNIT_S = 0.020
WATCHDOG_TRIPPED = -1       # the register reads -1 after the watchdog stopped the servo
PROFILE_VELOCITY_UNIT_RPM = 0.229
PROFILE_ACCELERATION_UNIT_RPM2 = 214.577

# Hardware Error Status bits (bit number -> words)
HARDWARE_ERROR_BITS = {
    0: "input voltage out of range",
    2: "overheating",
    3: "motor encoder error",
    4: "electrical shock (motor circuit)",
    5: "overload",
}

# Model numbers the probe can name (the family's published list, from memory).
MODELS = {
    1060: "XL430-W250",
    1200: "XL330-M288",
    1190: "XL330-M077",
    1020: "XM430-W350",
    1030: "XM430-W210",
    1000: "XH430-W350",
    1010: "XH430-W210",
    1080: "XC430-W150",
    1070: "XC430-W240",
}


def hardware_error_words(bits: int) -> str:
    """The Hardware Error Status byte in words.

    >>> hardware_error_words(0b100001)
    'input voltage out of range, overload'
    >>> hardware_error_words(0b10)
    'unknown bit 1'
    """
    words = [HARDWARE_ERROR_BITS.get(bit, f"unknown bit {bit}")
             for bit in range(8) if bits & (1 << bit)]
    return ", ".join(words) if words else "none"


def profile_velocity_units(deg_per_s: float) -> int:
    """Profile Velocity register units (0.229 rev/min) for a speed in deg/s, at least 1
    (0 would mean "no limit").

    >>> profile_velocity_units(120.0)   # 120 deg/s = 20 rev/min; 20 / 0.229 = 87.3
    88
    """
    rpm = deg_per_s / 6.0
    return max(1, -int(-rpm // PROFILE_VELOCITY_UNIT_RPM))


def profile_acceleration_units(deg_per_s2: float) -> int:
    """Profile Acceleration register units (214.577 rev/min^2) for deg/s^2, at least 1.

    >>> profile_acceleration_units(480.0)   # 480 deg/s^2 = 80 rev/min/s = 4800 rev/min^2
    23
    """
    rpm2 = deg_per_s2 / 6.0 * 60.0
    return max(1, -int(-rpm2 // PROFILE_ACCELERATION_UNIT_RPM2))


def model_name(number: int) -> str:
    """The model's name for its model number, or ``model <n>``.

    >>> model_name(1060), model_name(7)
    ('XL430-W250', 'model 7')
    """
    return MODELS.get(number, f"model {number}")
