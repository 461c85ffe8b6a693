"""Accuracy at a pose: the tool step per encoder count of each joint and the
conditioning of the joint-to-tool Jacobian. Pure math without numpy, so that
``benchjog solve`` starts without it; the 1-sigma position error from a calibration's
covariance needs the identification model and is computed by
:func:`benchjog.kinematics.identify.position_sigma_mm` (numpy), called only when a
covariance is given. Units: mm and radians.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

from benchjog.kinematics import planar
from benchjog.kinematics.model import Arm

TASK_COND_WARN = 10.0  # joint-to-tool Jacobian: "ill-conditioned" above this (a choice made here)


@dataclass(frozen=True)
class Accuracy:
    """What a pose promises: the tool step per encoder count of each joint (mm), the
    1-sigma position error from a calibration's covariance (mm; None without one), the
    task Jacobian's condition number and words when it is ill-conditioned."""

    step_per_count_mm: tuple[float, ...]
    position_sigma_mm: float | None
    condition_number: float
    conditioning: str | None


def position_jacobian_rows(arm: Arm, joints: Sequence[float]) -> list[list[float]]:
    """d(tool position)/d(joint values) as rows x, y (SCARA also z), one column per
    joint, mm per rad or per mm: the position rows of
    :func:`benchjog.kinematics.solve.jacobian`, as plain lists.

    >>> from benchjog.console.cell.armfile import builtin_arm
    >>> [[round(v, 9) for v in row] for row in
    ...  position_jacobian_rows(builtin_arm("planar-bench"), (0.0, math.pi / 2))]
    [[-160.0, -160.0], [220.0, 0.0]]
    """
    j1, j2 = arm.joints[0], arm.joints[1]
    rows = planar.jacobian_rows(j1.a_mm, j2.a_mm, joints[0] + j1.offset_rad,
                                joints[1] + j2.offset_rad)
    if not arm.is_scara:
        return rows
    # the quill lowers the tool 1 mm per mm; the roll does not move the tool point
    return [rows[0] + [0.0, 0.0], rows[1] + [0.0, 0.0], [0.0, 0.0, -1.0, 0.0]]


def singular_values_2x2(a: float, b: float, c: float, d: float) -> tuple[float, float]:
    """The singular values (largest first) of the matrix [[a, b], [c, d]].

    The largest is the sum of the two hypotenuses of the matrix's conformal and
    anticonformal parts; the smallest is |det| divided by it (the product of a 2x2
    matrix's singular values is |det|), which keeps its relative accuracy near a
    singular pose (J. Blinn, "Consider the lowly 2x2 matrix", IEEE CG&A 16(2), 1996,
    from memory). Checked against numpy.linalg.svd in tests/test_accuracy_scalar.py.

    >>> [round(s, 12) for s in singular_values_2x2(3.0, 0.0, 0.0, -4.0)]
    [4.0, 3.0]
    """
    big = math.hypot((a + d) / 2, (c - b) / 2) + math.hypot((a - d) / 2, (c + b) / 2)
    if big == 0.0:
        return 0.0, 0.0
    return big, abs(a * d - b * c) / big


def condition_number(singular_values: Sequence[float]) -> float:
    """s_max / s_min (infinite when s_min is 0).

    >>> condition_number([4.0, 1.0])
    4.0
    """
    lo, hi = min(singular_values), max(singular_values)
    return float(hi / lo) if lo > 0 else math.inf


def steps_per_count_mm(arm: Arm, joints: Sequence[float]) -> list[float]:
    """How far the tool point moves for one encoder count of each joint at this pose
    (mm): the Jacobian's column length times the joint step per count.

    >>> from benchjog.console.cell.armfile import builtin_arm
    >>> arm = builtin_arm("planar-bench")   # 40 counts/deg on both joints
    >>> [round(v, 5) for v in steps_per_count_mm(arm, (0.0, math.pi / 2))]  # |(-160, 220)|, 160 mm/rad
    [0.1187, 0.06981]
    """
    rows = position_jacobian_rows(arm, joints)
    out = []
    for i, joint in enumerate(arm.joints[:len(rows[0])]):
        per_count = joint.from_display(1.0 / joint.counts_per_unit)
        out.append(math.hypot(*(row[i] for row in rows)) * per_count)
    return out


def task_conditioning(arm: Arm, joints: Sequence[float]) -> tuple[float, str | None]:
    """The condition number of the x-y part of the joint-to-tool Jacobian, and words
    when it exceeds :data:`TASK_COND_WARN` (near the stretched or folded pose, where one
    direction of tool motion takes large joint motion and counts are coarse).

    >>> from benchjog.console.cell.armfile import builtin_arm
    >>> arm = builtin_arm("planar-bench")
    >>> round(task_conditioning(arm, (0.0, math.pi / 2))[0], 3)   # J = [[-160, -160], [220, 0]]
    2.416
    >>> task_conditioning(arm, (0.0, math.radians(3.0)))[1]
    'ill-conditioned: the elbow is 3.0 deg from stretched (Jacobian condition number 92)'
    """
    (a, b, *_), (c, d, *_) = position_jacobian_rows(arm, joints)[:2]
    cond = condition_number(singular_values_2x2(a, b, c, d))
    if cond <= TASK_COND_WARN:
        return cond, None
    t2 = joints[1] + arm.joints[1].offset_rad
    near = abs(math.remainder(t2, 2 * math.pi))
    kind, dist = ("stretched", near) if near < math.pi / 2 else ("folded", math.pi - near)
    shown = "infinite" if math.isinf(cond) else f"{cond:.0f}"
    return cond, (f"ill-conditioned: the elbow is {math.degrees(dist):.1f} deg from {kind} "
                  f"(Jacobian condition number {shown})")


def accuracy_at(arm: Arm, joints: Sequence[float], keys: Sequence[str] | None = None,
                covariance_display: Sequence[Sequence[float]] | None = None) -> Accuracy:
    """:class:`Accuracy` at a pose (joint values rad, mm); the position sigma only with
    a calibration's parameter ``keys`` and ``covariance_display`` (mm and deg).

    >>> from benchjog.console.cell.armfile import builtin_arm
    >>> acc = accuracy_at(builtin_arm("planar-bench"), (0.0, math.pi / 2))
    >>> [round(v, 4) for v in acc.step_per_count_mm], acc.position_sigma_mm, acc.conditioning
    ([0.1187, 0.0698], None, None)
    """
    cond, words = task_conditioning(arm, joints)
    sigma = None
    if keys is not None and covariance_display is not None:
        from benchjog.kinematics.identify import position_sigma_mm

        sigma = position_sigma_mm(arm, joints, keys, covariance_display)
    return Accuracy(tuple(steps_per_count_mm(arm, joints)), sigma, cond, words)
