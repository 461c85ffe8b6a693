"""Counts conversion (PROTOCOL.md "Counts"):
``counts = round(direction * (value - zero) * counts_per_unit)``, value in degrees
(revolute) or mm (prismatic). Every expected number below is worked by hand."""

from __future__ import annotations

import dataclasses
import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from benchjog.console.cell.armfile import builtin_arm
from benchjog.drivers.calibration import (
    counts_from_joint, counts_from_joints, hard_range_counts, joint_from_counts,
    joints_from_counts, range_violation,
)

PLANAR = builtin_arm("planar-bench")
SCARA = builtin_arm("scara-bench")
SHOULDER, ELBOW = PLANAR.joints          # shoulder: zero 0, 40/deg, +1; elbow: zero 90, 40/deg, -1
J1, J2, QUILL, ROLL = SCARA.joints       # j2: zero 90, 50/deg, +1; quill: 200/mm; roll: 20/deg


@pytest.mark.parametrize("joint, value_display, counts", [
    (SHOULDER, 45.0, 1800),      # 1 * (45 - 0) * 40
    (SHOULDER, -150.0, -6000),   # 1 * (-150 - 0) * 40
    (ELBOW, 90.0, 0),            # at its zero: count 0
    (ELBOW, 45.0, 1800),         # -1 * (45 - 90) * 40 = -1 * -45 * 40
    (ELBOW, 120.0, -1200),       # -1 * (120 - 90) * 40
    (J2, 0.0, -4500),            # 1 * (0 - 90) * 50
    (QUILL, 12.5, 2500),         # 1 * (12.5 - 0) * 200, prismatic: mm, no radians
    (ROLL, -33.3, -666),         # 1 * -33.3 * 20 = -666
    (SHOULDER, 0.0124, 0),       # 0.496 counts rounds to 0
    (SHOULDER, 0.0126, 1),       # 0.504 counts rounds to 1
])
def test_counts_from_joint_worked(joint, value_display, counts):
    assert counts_from_joint(joint, joint.from_display(value_display)) == counts
    assert joint_from_counts(joint, counts) == pytest.approx(
        joint.from_display(value_display), abs=joint.from_display(0.5 / joint.counts_per_unit))


def test_joint_from_counts_worked():
    # elbow: 90 + 1800 / (40 * -1) = 90 - 45 = 45 deg
    assert math.degrees(joint_from_counts(ELBOW, 1800)) == pytest.approx(45.0, abs=1e-12)
    # quill: 0 + 3000 / 200 = 15 mm
    assert joint_from_counts(QUILL, 3000) == pytest.approx(15.0, abs=1e-12)
    # j2: 90 + (-4500) / 50 = 0 deg
    assert joint_from_counts(J2, -4500) == pytest.approx(0.0, abs=1e-12)


def test_zero_offset_with_direction_minus_one_and_fractional_resolution():
    # an invented joint: zero -30 deg, 12.5 counts/deg, direction -1
    j = dataclasses.replace(SHOULDER, zero=-30.0, counts_per_unit=12.5, direction=-1)
    # 10 deg: -1 * (10 - (-30)) * 12.5 = -1 * 40 * 12.5 = -500
    assert counts_from_joint(j, math.radians(10.0)) == -500
    # -500 counts: -30 + (-500) / (12.5 * -1) = -30 + 40 = 10 deg
    assert math.degrees(joint_from_counts(j, -500)) == pytest.approx(10.0, abs=1e-12)
    # -30 deg (its zero): count 0
    assert counts_from_joint(j, math.radians(-30.0)) == 0


def test_home_pose_is_count_zero():
    assert counts_from_joints(PLANAR, PLANAR.home_joints) == (0, 0)
    assert counts_from_joints(SCARA, SCARA.home_joints) == (0, 0, 0, 0)
    # home: shoulder 0 deg, elbow 90 deg (the arm file's comment)
    assert joints_from_counts(PLANAR, (0, 0)) == pytest.approx((0.0, math.radians(90.0)))


def test_vector_length_must_match():
    with pytest.raises(ValueError):
        counts_from_joints(PLANAR, (0.0,))
    with pytest.raises(ValueError):
        joints_from_counts(SCARA, (0, 0))


def test_non_finite_is_refused():
    with pytest.raises(ValueError):
        counts_from_joint(SHOULDER, math.nan)


@pytest.mark.parametrize("joint, expected", [
    (SHOULDER, (-6200, 6200)),   # soft -150..150 deg, hard -155..155: +-155 * 40
    (ELBOW, (-2400, 9600)),      # hard -150..150; -1*(150-90)*40 = -2400, -1*(-150-90)*40 = 9600
    (QUILL, (-1400, 25000)),     # soft -2..120 mm, hard -7..125: -7*200, 125*200
    (J2, (-11750, 2750)),        # hard -145..145; (-145-90)*50 = -11750, (145-90)*50 = 2750
])
def test_hard_range_counts_worked(joint, expected):
    assert hard_range_counts(joint) == expected


def test_range_violation_names_the_axis_from_one():
    assert range_violation(PLANAR, (6200, 9600)) is None
    assert range_violation(PLANAR, (6201, 0)) == 1
    assert range_violation(PLANAR, (0, -2401)) == 2


@settings(max_examples=200, deadline=None)
@given(st.sampled_from(PLANAR.joints + SCARA.joints), st.integers(-100_000, 100_000))
def test_counts_round_trip_exactly(joint, counts):
    assert counts_from_joint(joint, joint_from_counts(joint, counts)) == counts


@settings(max_examples=200, deadline=None)
@given(st.sampled_from(PLANAR.joints + SCARA.joints), st.floats(-400.0, 400.0))
def test_value_round_trip_within_half_a_count(joint, value_display):
    value = joint.from_display(value_display)
    back = joint.to_display(joint_from_counts(joint, counts_from_joint(joint, value)))
    assert abs(back - value_display) <= 0.5 / joint.counts_per_unit + 1e-9
