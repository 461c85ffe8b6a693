"""Forward kinematics through a standard (distal) Denavit-Hartenberg chain.

Convention: each joint's homogeneous transform is ``Rz(theta) Tz(d) Tx(a) Rx(alpha)``
(Spong, Hutchinson & Vidyasagar, *Robot Modeling and Control*, 2006, section 3.2, from
memory). A revolute joint has ``theta = value + offset``, a prismatic one
``d = d + value``. Units: mm and radians.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from benchjog.kinematics.model import Arm, Joint


def dh_transform(theta_rad: float, d_mm: float, a_mm: float, alpha_rad: float) -> np.ndarray:
    """The 4x4 homogeneous transform ``Rz(theta) Tz(d) Tx(a) Rx(alpha)``.

    Source: Spong, Hutchinson & Vidyasagar (2006), eq. 3.10 (from memory).

    >>> np.round(dh_transform(math.pi / 2, 10.0, 100.0, 0.0) @ [0, 0, 0, 1], 9).tolist()
    [0.0, 100.0, 10.0, 1.0]
    """
    ct, st = math.cos(theta_rad), math.sin(theta_rad)
    ca, sa = math.cos(alpha_rad), math.sin(alpha_rad)
    return np.array([
        [ct, -st * ca, st * sa, a_mm * ct],
        [st, ct * ca, -ct * sa, a_mm * st],
        [0.0, sa, ca, d_mm],
        [0.0, 0.0, 0.0, 1.0],
    ])


def joint_transform(joint: Joint, value: float) -> np.ndarray:
    """One joint's DH transform at joint value ``value`` (rad or mm)."""
    if joint.is_revolute:
        return dh_transform(value + joint.offset_rad, joint.d_mm, joint.a_mm, joint.alpha_rad)
    return dh_transform(joint.offset_rad, joint.d_mm + value, joint.a_mm, joint.alpha_rad)


def frames_from_joints(joints: Sequence[Joint], values: Sequence[float]) -> list[np.ndarray]:
    """The base-to-frame-i transforms ``T_0^i`` for i = 1..n (any number of joints)."""
    if len(joints) != len(values):
        raise ValueError(f"{len(joints)} joints but {len(values)} values")
    frames, current = [], np.eye(4)
    for joint, value in zip(joints, values):
        current = current @ joint_transform(joint, value)
        frames.append(current)
    return frames


def tool_transform(arm: Arm, values: Sequence[float]) -> np.ndarray:
    """The base-to-tool transform of an arm at joint values (rad, mm)."""
    return frames_from_joints(arm.joints, values)[-1]


def pose_from_transform(arm: Arm, transform: np.ndarray) -> tuple[float, ...]:
    """The contract's tool pose from a base-to-tool transform.

    Planar: (x, y, heading); SCARA: (x, y, z, roll); heading and roll are the direction
    of the tool's x axis in the base plane, radians counter-clockwise from base x.
    """
    x, y, z = (float(v) for v in transform[:3, 3])
    heading = math.atan2(float(transform[1, 0]), float(transform[0, 0]))
    return (x, y, z, heading) if arm.is_scara else (x, y, heading)
