"""The "true arm" of the simulated arm and of the emulator: the arm the controller
really drives differs from its arm file; the bench's ruler says where the tool tip is
on the plate. Checked against the 2R closed form worked by hand."""

from __future__ import annotations

import math

import pytest

from benchjog.console.cell.armfile import builtin_arm
from benchjog.drivers.emulator import Emulator
from benchjog.drivers.interlock import Interlock
from benchjog.kinematics.identify import IdentifyError

ERRORS = {"shoulder.a": 1.5, "elbow.a": -0.5, "shoulder.zero": 0.5, "elbow.zero": -0.25,
          "base.x": 200.0, "base.y": -10.0, "base.yaw": 30.0}


def expected_home_on_plate() -> tuple[float, float]:
    # home: every count 0, so the file says shoulder 0 deg, elbow 90 deg; the true arm
    # is 0.5 deg and 89.75 deg with links 221.5 and 159.5 mm (2R closed form, Lynch &
    # Park, Modern Robotics, 2017, sec. 4.1), then turned 30 deg and moved (200, -10).
    t1, t2 = math.radians(0.5), math.radians(89.75)
    x = 221.5 * math.cos(t1) + 159.5 * math.cos(t1 + t2)
    y = 221.5 * math.sin(t1) + 159.5 * math.sin(t1 + t2)
    c, s = math.cos(math.radians(30)), math.sin(math.radians(30))
    return (c * x - s * y + 200.0, s * x + c * y - 10.0)


def test_the_simulated_arm_is_the_true_arm_on_the_plate():
    arm = builtin_arm("planar-bench")
    with Interlock.open(arm, "sim", journal=False, true_errors=ERRORS) as gate:
        assert gate.sim.tool_in_plate_mm() == pytest.approx(expected_home_on_plate(), abs=1e-9)


def test_without_errors_the_ruler_reads_the_arm_file():
    arm = builtin_arm("planar-bench")
    with Interlock.open(arm, "sim", journal=False) as gate:
        assert gate.sim.tool_in_plate_mm() == pytest.approx((220.0, 160.0), abs=1e-9)


def test_the_emulator_takes_the_same_option():
    arm = builtin_arm("planar-bench")
    emu = Emulator(arm, {"true_errors": ERRORS})
    assert emu.tool_in_plate_mm() == pytest.approx(expected_home_on_plate(), abs=1e-9)


def test_an_unknown_error_key_is_refused_before_anything_opens():
    arm = builtin_arm("planar-bench")
    with pytest.raises(IdentifyError, match="unknown arm error 'wrist.a'"):
        Interlock.open(arm, "sim", journal=False, true_errors={"wrist.a": 1.0})
