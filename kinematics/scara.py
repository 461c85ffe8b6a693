"""Closed-form kinematics of the SCARA (RRPR) arm. Units: mm and radians.

The DH table (CONTRACT.md; the classic SCARA table of Spong, Hutchinson & Vidyasagar,
*Robot Modeling and Control*, 2006, example 3.3.5, from memory):

| joint | theta        | d            | a  | alpha |
|-------|--------------|--------------|----|-------|
| 1     | q1 + o1      | d1 (base)    | a1 | 0     |
| 2     | q2 + o2      | d2           | a2 | 180   |
| 3     | o3           | d3 + q3      | 0  | 0     |
| 4     | q4 + o4      | d4 (tool)    | 0  | 0     |

The alpha of 180 degrees turns the frame upside down, so +q3 lowers the tool and the
roll turns clockwise seen from above: tool z = d1 + d2 - (d3 + q3) - d4 and heading
= theta1 + theta2 - theta3 - theta4.
"""

from __future__ import annotations

import math

from benchjog.kinematics.model import Arm
from benchjog.kinematics.planar import tool_xy_from_thetas


def tool_from_values(arm: Arm, values: tuple[float, ...]) -> tuple[float, float, float, float]:
    """The SCARA tool pose (x, y, z, roll) for joint values (rad, rad, mm, rad).

    >>> from benchjog.console.cell.armfile import builtin_arm
    >>> arm = builtin_arm("scara-bench")
    >>> [round(v, 6) for v in tool_from_values(arm, (0.0, math.pi / 2, 20.0, 0.0))]
    [200.0, 150.0, 120.0, 1.570796]
    """
    j1, j2, j3, j4 = arm.joints
    t1, t2 = values[0] + j1.offset_rad, values[1] + j2.offset_rad
    x, y = tool_xy_from_thetas(j1.a_mm, j2.a_mm, t1, t2)
    z = j1.d_mm + j2.d_mm - (j3.d_mm + values[2]) - j4.d_mm
    roll = t1 + t2 - j3.offset_rad - (values[3] + j4.offset_rad)
    return x, y, z, roll


def quill_from_z(arm: Arm, z_mm: float) -> float:
    """The quill value that puts the tool at height z (inverse of the z row)."""
    j1, j2, j3, j4 = arm.joints
    return j1.d_mm + j2.d_mm - j3.d_mm - j4.d_mm - z_mm


def roll_joint_from_heading(arm: Arm, t1_rad: float, t2_rad: float, roll_rad: float) -> float:
    """The roll joint value that gives the tool heading ``roll_rad`` (DH thetas t1, t2)."""
    j3, j4 = arm.joints[2], arm.joints[3]
    return t1_rad + t2_rad - j3.offset_rad - j4.offset_rad - roll_rad


def flange_z_mm(arm: Arm) -> float:
    """Height of the second link (and the top of the quill travel) in the base frame."""
    return arm.joints[0].d_mm + arm.joints[1].d_mm
