"""Joint values <-> controller counts, per PROTOCOL.md "Counts". Pure.

``counts = round(direction * (value - zero) * counts_per_unit)``, with ``value`` in
degrees for a revolute joint and mm for a prismatic one. The arm model keeps ``zero``
and ``counts_per_unit`` in those file units, while joint values in memory are radians
or mm, so every conversion goes through ``Joint.to_display``/``Joint.from_display``.
Rounding is Python's ``round`` (ties to even).
"""

from __future__ import annotations

import math
from collections.abc import Sequence

from benchjog.kinematics.model import Arm, Joint

HARD_RANGE_MARGIN = 5.0  # deg (mm): the controller's hard range is the soft limits widened by this


def counts_from_display(joint: Joint, value_display: float) -> int:
    """Counts for a value in the joint's display unit (deg or mm).

    >>> from benchjog.console.cell.armfile import builtin_arm
    >>> elbow = builtin_arm("planar-bench").joints[1]   # zero 90 deg, 40 counts/deg, direction -1
    >>> counts_from_display(elbow, 45.0)                # -1 * (45 - 90) * 40
    1800
    """
    if not math.isfinite(value_display):
        raise ValueError(f"{joint.name}: not a finite value ({value_display!r})")
    return round(joint.direction * (value_display - joint.zero) * joint.counts_per_unit)


def counts_from_joint(joint: Joint, value: float) -> int:
    """Controller counts for one joint value in internal units (rad or mm).

    >>> from benchjog.console.cell.armfile import builtin_arm
    >>> elbow = builtin_arm("planar-bench").joints[1]
    >>> counts_from_joint(elbow, math.radians(45.0))
    1800
    """
    return counts_from_display(joint, joint.to_display(value))


def joint_from_counts(joint: Joint, counts: int | float) -> float:
    """The joint value (rad or mm) for controller counts, the inverse of
    :func:`counts_from_joint`.

    >>> from benchjog.console.cell.armfile import builtin_arm
    >>> elbow = builtin_arm("planar-bench").joints[1]
    >>> round(math.degrees(joint_from_counts(elbow, 1800)), 9)   # 90 + 1800 / (40 * -1)
    45.0
    """
    return joint.from_display(joint.zero + counts / (joint.counts_per_unit * joint.direction))


def counts_from_joints(arm: Arm, values: Sequence[float]) -> tuple[int, ...]:
    """Counts for a whole joint vector (internal units)."""
    if len(values) != arm.n_joints:
        raise ValueError(f"{len(values)} joint values for an arm with {arm.n_joints} joints")
    return tuple(counts_from_joint(j, v) for j, v in zip(arm.joints, values))


def joints_from_counts(arm: Arm, counts: Sequence[int | float]) -> tuple[float, ...]:
    """A joint vector (internal units) for one count per axis."""
    if len(counts) != arm.n_joints:
        raise ValueError(f"{len(counts)} counts for an arm with {arm.n_joints} joints")
    return tuple(joint_from_counts(j, c) for j, c in zip(arm.joints, counts))


def hard_range_counts(joint: Joint) -> tuple[int, int]:
    """The controller's own hard range in counts, ``(low, high)``: the soft limits
    widened by 5 deg (5 mm), converted and put in order (a direction of -1 swaps ends).

    >>> from benchjog.console.cell.armfile import builtin_arm
    >>> hard_range_counts(builtin_arm("planar-bench").joints[1])  # -150..150 deg
    (-2400, 9600)
    """
    lo = counts_from_display(joint, joint.to_display(joint.min) - HARD_RANGE_MARGIN)
    hi = counts_from_display(joint, joint.to_display(joint.max) + HARD_RANGE_MARGIN)
    return (min(lo, hi), max(lo, hi))


def hard_ranges_counts(arm: Arm) -> tuple[tuple[int, int], ...]:
    """:func:`hard_range_counts` for every axis."""
    return tuple(hard_range_counts(j) for j in arm.joints)


def range_violation(arm: Arm, counts: Sequence[int]) -> int | None:
    """The first axis (counting from 1, as PROTOCOL.md's ``RANGE axis=i``) whose counts
    lie outside the hard range, or None.

    >>> from benchjog.console.cell.armfile import builtin_arm
    >>> range_violation(builtin_arm("planar-bench"), (0, 9601))
    2
    """
    for i, ((lo, hi), c) in enumerate(zip(hard_ranges_counts(arm), counts), start=1):
        if not lo <= c <= hi:
            return i
    return None
