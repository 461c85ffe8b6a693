"""User frames: the 2D homogeneous transform against hand-worked numbers, against
matrices built independently with numpy and modern_robotics, and round trips."""

from __future__ import annotations

import math

import modern_robotics as mr
import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from benchjog.kinematics.frames import (FrameError, UserFrame, base_from_frame, frame_from_base,
                               frame_from_two_points, transform_2d)

finite = st.floats(-500, 500, allow_nan=False, allow_infinity=False)
angles = st.floats(-math.pi, math.pi, allow_nan=False)


def test_base_from_frame_worked_by_hand():
    # Frame at (100, 50), x axis at 30 deg. The frame point (20, 10) is at
    # base x = 100 + 20 cos30 - 10 sin30 = 100 + 17.320508 - 5 = 112.320508
    # base y =  50 + 20 sin30 + 10 cos30 =  50 + 10 + 8.660254 = 68.660254
    frame = UserFrame("f", 100.0, 50.0, math.radians(30.0))
    x, y = base_from_frame(frame, (20.0, 10.0))
    assert x == pytest.approx(112.320508, abs=1e-6)
    assert y == pytest.approx(68.660254, abs=1e-6)


def test_frame_from_base_worked_by_hand():
    # Frame at (200, 100), x axis along base +y (90 deg). Base (220, 160) is
    # (20, 60) from the origin; R(-90) (20, 60) = (60, -20).
    frame = UserFrame("f", 200.0, 100.0, math.pi / 2)
    assert frame_from_base(frame, (220.0, 160.0)) == pytest.approx((60.0, -20.0), abs=1e-9)


def test_scara_pose_shifts_z_and_roll_worked_by_hand():
    # Frame at (0, 0), angle 90 deg, height 40 mm: frame pose (10, 0, 5, 30 deg)
    # is base (0, 10), z 45, roll 120 deg; roll 170 + 90 = 260 wraps to -100 deg.
    frame = UserFrame("f", 0.0, 0.0, math.pi / 2, z_mm=40.0)
    x, y, z, roll = base_from_frame(frame, (10.0, 0.0, 5.0, math.radians(30.0)))
    assert (x, y, z) == pytest.approx((0.0, 10.0, 45.0), abs=1e-9)
    assert math.degrees(roll) == pytest.approx(120.0)
    roll = base_from_frame(frame, (0.0, 0.0, 0.0, math.radians(170.0)))[3]
    assert math.degrees(roll) == pytest.approx(-100.0)


@settings(max_examples=60, deadline=None)
@given(ox=finite, oy=finite, angle=angles, x=finite, y=finite)
def test_against_numpy_homogeneous_matrix(ox, oy, angle, x, y):
    # reference: a 3x3 homogeneous matrix [[R, p], [0, 1]] built here with numpy
    # (Lynch & Park, Modern Robotics, 2017, ch. 3, from memory)
    c, s = np.cos(angle), np.sin(angle)
    T = np.array([[c, -s, ox], [s, c, oy], [0.0, 0.0, 1.0]])
    frame = UserFrame("f", ox, oy, angle)
    expected = T @ np.array([x, y, 1.0])
    assert base_from_frame(frame, (x, y)) == pytest.approx(tuple(expected[:2]), abs=1e-9)
    back = np.linalg.inv(T) @ np.array([x, y, 1.0])
    assert frame_from_base(frame, (x, y)) == pytest.approx(tuple(back[:2]), abs=1e-9)
    assert np.allclose(np.array(transform_2d(frame)), T)


@settings(max_examples=40, deadline=None)
@given(ox=finite, oy=finite, angle=angles, z0=finite, x=finite, y=finite, z=finite)
def test_against_modern_robotics_transform(ox, oy, angle, z0, x, y, z):
    # reference: modern_robotics MatrixExp3 (rotation about z), RpToTrans, TransInv.
    # MatrixExp3 returns the identity below its NearZero (1e-6 rad): keep clear of it.
    assume(abs(angle) > 1e-5)
    R = mr.MatrixExp3(mr.VecToso3(np.array([0.0, 0.0, angle])))
    T = mr.RpToTrans(R, np.array([ox, oy, z0]))
    frame = UserFrame("f", ox, oy, angle, z_mm=z0)
    got = base_from_frame(frame, (x, y, z, 0.0))
    expected = T @ np.array([x, y, z, 1.0])
    assert got[:3] == pytest.approx(tuple(expected[:3]), abs=1e-8)
    inv = mr.TransInv(T) @ np.array([x, y, z, 1.0])
    assert frame_from_base(frame, (x, y, z, 0.0))[:3] == pytest.approx(tuple(inv[:3]), abs=1e-8)


@settings(max_examples=60, deadline=None)
@given(ox=finite, oy=finite, angle=angles, x=finite, y=finite, roll=angles)
def test_round_trip(ox, oy, angle, x, y, roll):
    frame = UserFrame("f", ox, oy, angle, z_mm=12.0)
    pose = (x, y, 3.0, roll)
    back = frame_from_base(frame, base_from_frame(frame, pose))
    assert back[:3] == pytest.approx(pose[:3], abs=1e-8)
    assert math.remainder(back[3] - roll, 2 * math.pi) == pytest.approx(0.0, abs=1e-9)


def test_two_point_teach_worked_by_hand():
    # origin (100, 220), x point (175.175, 247.362): dx 75.175, dy 27.362,
    # atan2(27.362, 75.175) = 20.0 deg (tan 20 deg = 0.36397)
    frame = frame_from_two_points("fixture", (100.0, 220.0), (175.175, 247.362), z=7.0)
    assert math.degrees(frame.angle_rad) == pytest.approx(20.0, abs=1e-3)
    assert (frame.origin_x, frame.origin_y, frame.z_mm) == (100.0, 220.0, 7.0)
    # the x point lies on the frame's +x axis at its distance from the origin
    fx, fy = frame_from_base(frame, (175.175, 247.362))
    assert fx == pytest.approx(math.hypot(75.175, 27.362)) and fy == pytest.approx(0.0, abs=1e-9)


@settings(max_examples=40, deadline=None)
@given(ox=finite, oy=finite, angle=angles, dist=st.floats(1.5, 400.0))
def test_two_point_teach_recovers_the_angle(ox, oy, angle, dist):
    px, py = ox + dist * math.cos(angle), oy + dist * math.sin(angle)
    frame = frame_from_two_points("f", (ox, oy), (px, py))
    assert math.remainder(frame.angle_rad - angle, 2 * math.pi) == pytest.approx(0.0, abs=1e-6)


@pytest.mark.parametrize("gap", [0.0, 0.3, 0.999])
def test_two_points_too_close_are_refused(gap):
    with pytest.raises(FrameError, match="apart"):
        frame_from_two_points("f", (10.0, 10.0), (10.0 + gap, 10.0))


def test_bad_inputs_are_refused():
    with pytest.raises(FrameError, match="name"):
        frame_from_two_points(" ", (0.0, 0.0), (10.0, 0.0))
    with pytest.raises(FrameError, match="finite"):
        frame_from_two_points("f", (0.0, math.nan), (10.0, 0.0))
    with pytest.raises(FrameError, match="3 values"):
        base_from_frame(UserFrame("f", 0, 0, 0), (1.0, 2.0, 3.0))
