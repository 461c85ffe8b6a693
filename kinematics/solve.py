"""Geometry-independent front: every IK branch with its findings, FK, the Jacobian.

Units: mm and radians. Targets: planar (x, y); SCARA (x, y, z, roll). Tool poses:
planar (x, y, heading); SCARA (x, y, z, roll).

The scalar path (:func:`joints_from_tool`, :func:`tool_from_joints`, the findings) needs
no numpy, so ``benchjog fk``/``solve`` start without it; the DH chain, the Jacobian
and the batch IK import it when called.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

from benchjog.kinematics import planar, scara
from benchjog.kinematics.limits import (LIMIT_TOL, limit_problems, wrap_into_limits, wrap_into_limits_array,
                               wrap_joints)
from benchjog.kinematics.model import Arm, Branch
from benchjog.kinematics.zones import zone_problems

TYPE_CHECKING = False  # typing.TYPE_CHECKING without importing typing
if TYPE_CHECKING:
    import numpy as np


@dataclass(frozen=True)
class Solution:
    """One IK branch: joint values (rad, mm) wrapped into limits where possible."""

    branch: Branch
    joints: tuple[float, ...]
    usable: bool
    problems: tuple[str, ...]
    singular_distance_rad: float
    manipulability_mm2: float


@dataclass(frozen=True)
class IKResult:
    target: tuple[float, ...]
    reachable: bool
    solutions: tuple[Solution, ...]
    warnings: tuple[str, ...]

    def solution(self, branch: Branch) -> Solution | None:
        """The solution on ``branch``; at a singular target the single solution
        serves both branches."""
        for sol in self.solutions:
            if sol.branch == branch:
                return sol
        return self.solutions[0] if len(self.solutions) == 1 else None

    @property
    def usable(self) -> tuple[Solution, ...]:
        return tuple(s for s in self.solutions if s.usable)


class TargetError(ValueError):
    """A target the arm cannot take (wrong number of coordinates, not finite)."""


def _number(name: str, value: object) -> float:
    """A finite float from a number or numeric text, else a TargetError naming it."""
    if isinstance(value, bool):
        raise TargetError(f"{name} is not a number ({value!r})")
    try:
        number = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError, OverflowError):
        raise TargetError(f"{name} is not a number ({value!r})") from None
    if not math.isfinite(number):
        raise TargetError(f"{name} is not a finite number ({value!r})")
    return number


def _values(what: str, values: object, count: int) -> list:
    if isinstance(values, (str, bytes)) or not hasattr(values, "__len__"):
        raise TargetError(f"{what} must be a sequence of {count} numbers, not {values!r}")
    if len(values) != count:  # type: ignore[arg-type]
        return []
    return list(values)  # type: ignore[call-overload]


def check_target(arm: Arm, target: Sequence[float]) -> tuple[float, ...]:
    """The target as finite floats, or :class:`TargetError` with a one-line message.

    >>> from benchjog.console.cell.armfile import builtin_arm
    >>> check_target(builtin_arm("planar-bench"), ("12.5", 3))
    (12.5, 3.0)
    """
    want = "x, y, z, roll" if arm.is_scara else "x, y"
    names = want.split(", ")
    values = _values("the target", target, len(names))
    if not values:
        raise TargetError(f"a {arm.geometry} arm takes a target of {want}, got {len(target)} values")
    return tuple(_number(name, value) for name, value in zip(names, values))


def target_from_display(arm: Arm, values: Sequence[float]) -> tuple[float, ...]:
    """A target as people type it (mm, and degrees for the roll) to an internal one
    (mm, rad). A SCARA target may leave out z (then the home height) and the roll (then
    0 degrees).

    >>> from benchjog.console.cell.armfile import builtin_arm
    >>> [round(v, 6) for v in target_from_display(builtin_arm("scara-bench"), (200.0, 150.0))]
    [200.0, 150.0, 140.0, 0.0]

    Raises:
        TargetError: the wrong number of values, or one not finite.
    """
    values = [float(v) for v in values]
    if arm.is_scara and 2 <= len(values) <= 4:
        if len(values) == 2:
            values.append(tool_from_joints(arm, arm.home_joints)[2])
        values.append(math.radians(values.pop(3)) if len(values) == 4 else 0.0)
    return check_target(arm, values)


def check_joints(arm: Arm, values: Sequence[float]) -> tuple[float, ...]:
    """Joint values as finite floats, or :class:`TargetError` with a one-line message."""
    out = _values("the joint values", values, arm.n_joints)
    if not out:
        raise TargetError(f"a {arm.geometry} arm has {arm.n_joints} joints, got {len(values)} values")
    return tuple(_number(joint.name, value) for joint, value in zip(arm.joints, out))


def singularity_words(arm: Arm, t2_rad: float) -> str | None:
    """A warning when the elbow is within the arm's threshold of a singular pose."""
    dist = planar.singular_distance_rad(t2_rad)
    if dist > arm.singularity_warn_rad:
        return None
    kind = "stretched" if abs(math.remainder(t2_rad, 2 * math.pi)) < math.pi / 2 else "folded"
    if dist <= 1e-9:
        return f"singular: the arm is fully {kind}; the branches coincide"
    return (f"near singularity: elbow {math.degrees(dist):.2f} deg from {kind} "
            f"(warning below {math.degrees(arm.singularity_warn_rad):g} deg)")


def pose_problems(arm: Arm, values: Sequence[float]) -> list[str]:
    """Limit and keep-out problems of a joint pose, in words with the numbers."""
    return limit_problems(arm, values) + zone_problems(arm, values)


def _mm(distance: float) -> str:
    """A distance for people; tiny and huge ones in powers of ten ('1.0e-09 mm', not
    '0.000 mm'; '1.0e+200 mm', not two hundred digits).

    >>> [_mm(d) for d in (12.3456, 1e-9, 1e200)]
    ['12.346 mm', '1.0e-09 mm', '1.0e+200 mm']
    """
    return f"{distance:.3f} mm" if 0.001 <= distance < 1e7 else f"{distance:.1e} mm"


def joints_from_tool(arm: Arm, target: Sequence[float]) -> IKResult:
    """Every IK branch for a tool target, each with its problems.

    Raises:
        TargetError: the target has the wrong shape or is not finite.
    """
    target = check_target(arm, target)
    j1, j2 = arm.joints[0], arm.joints[1]
    raw = planar.thetas_from_tool_xy(j1.a_mm, j2.a_mm, target[0], target[1])
    if not raw:
        r = math.hypot(target[0], target[1])  # words only: hypot does not overflow
        where = (f"{_mm(r - arm.max_reach_mm)} beyond the max reach {arm.max_reach_mm:g} mm"
                 if r > arm.max_reach_mm else
                 f"{_mm(arm.min_reach_mm - r)} inside the min reach {arm.min_reach_mm:g} mm")
        return IKResult(target, False, (), (f"out of reach: the target is {where}",))
    warnings: list[str] = []
    if len(raw) == 1 and planar.radius_mm(target[0], target[1]) <= planar.reach_tolerance_mm(
            j1.a_mm, j2.a_mm):
        warnings.append("target on the shoulder axis: the shoulder angle is arbitrary, 0 is used")
    solutions = []
    for t1, t2 in raw:
        values = [t1 - j1.offset_rad, t2 - j2.offset_rad]
        if arm.is_scara:
            values += [scara.quill_from_z(arm, target[2]),
                       scara.roll_joint_from_heading(arm, t1, t2, target[3])]
        values = wrap_joints(arm, values)
        problems = tuple(pose_problems(arm, values))
        branch = Branch.ELBOW_DOWN if (t2 >= 0 if len(raw) == 1 else math.sin(t2) > 0) \
            else Branch.ELBOW_UP
        solutions.append(Solution(branch, values, not problems, problems,
                                  planar.singular_distance_rad(t2),
                                  planar.manipulability(j1.a_mm, j2.a_mm, t2)))
    words = singularity_words(arm, raw[0][1])
    if words:
        warnings.append(words)
    return IKResult(target, True, tuple(solutions), tuple(warnings))


def tool_from_joints(arm: Arm, values: Sequence[float]) -> tuple[float, ...]:
    """The tool pose by the closed form (the fast path; agrees with the DH chain)."""
    values = tuple(values)
    if arm.is_scara:
        return scara.tool_from_values(arm, values)
    j1, j2 = arm.joints
    t1, t2 = values[0] + j1.offset_rad, values[1] + j2.offset_rad
    x, y = planar.tool_xy_from_thetas(j1.a_mm, j2.a_mm, t1, t2)
    return x, y, t1 + t2


def tool_from_joints_dh(arm: Arm, values: Sequence[float]) -> tuple[float, ...]:
    """The tool pose through the full DH chain of 4x4 transforms."""
    from benchjog.kinematics.dh import pose_from_transform, tool_transform

    return pose_from_transform(arm, tool_transform(arm, values))


def jacobian(arm: Arm, values: Sequence[float]) -> np.ndarray:
    """The analytic Jacobian of the tool pose with respect to the joint values.

    Planar: rows (x, y, heading) by columns (j1, j2). SCARA: rows (x, y, z, roll) by
    columns (j1, j2, j3, j4); z falls 1 mm per mm of quill and the roll turns against
    the roll joint (the 180-degree alpha).
    """
    import numpy as np

    j1, j2 = arm.joints[0], arm.joints[1]
    t1, t2 = values[0] + j1.offset_rad, values[1] + j2.offset_rad
    jxy = planar.jacobian(j1.a_mm, j2.a_mm, t1, t2)
    if not arm.is_scara:
        return np.vstack([jxy, [1.0, 1.0]])
    full = np.zeros((4, 4))
    full[:2, :2] = jxy
    full[2, 2] = -1.0
    full[3] = [1.0, 1.0, 0.0, -1.0]
    return full


def pose_warnings(arm: Arm, values: Sequence[float]) -> list[str]:
    """Everything worth saying about a joint pose: limits, zones, singularity."""
    found = pose_problems(arm, values)
    words = singularity_words(arm, values[1] + arm.joints[1].offset_rad)
    return found + ([words] if words else [])


@dataclass(frozen=True)
class BatchIK:
    """Batch IK results. ``joints[b]`` is (N, n_joints) for branch b (0 elbow-down,
    1 elbow-up), wrapped into limits like the scalar path; ``within_limits[b]`` (N,)."""

    joints: np.ndarray
    reachable: np.ndarray
    singular: np.ndarray
    within_limits: np.ndarray


def joints_from_tool_batch(arm: Arm, targets: np.ndarray) -> BatchIK:
    """Vectorised IK over an (N, 2) (planar) or (N, 4) (SCARA) array of targets.

    Gives the same joint values as :func:`joints_from_tool` (limits and wrapping
    included; keep-out zones are the planner's business). On a singular target both
    branch rows hold the one solution; an unreachable (or non-finite) one holds NaN.
    Works through the targets in blocks that stay in cache.

    Raises:
        TargetError: ``targets`` is not an (N, 2) or (N, 4) array of numbers.
    """
    import numpy as np

    width = 4 if arm.is_scara else 2
    try:
        targets = np.asarray(targets, dtype=np.float64)
    except (TypeError, ValueError):
        raise TargetError(f"targets must be an (N, {width}) array of numbers") from None
    if targets.ndim != 2 or targets.shape[1] != width:
        raise TargetError(f"a {arm.geometry} arm takes targets of shape (N, {width}), "
                          f"got {targets.shape}")
    n = targets.shape[0]
    j1, j2 = arm.joints[0], arm.joints[1]
    columns = [np.ascontiguousarray(targets[:, i]) for i in range(width)]
    out = np.empty((2, n, arm.n_joints))
    ok = np.empty((2, n), dtype=bool)
    reachable = np.empty(n, dtype=bool)
    singular = np.empty(n, dtype=bool)

    def block(start: int, stop: int) -> None:
        t1 = np.empty((2, stop - start))
        t2 = np.empty((2, stop - start))
        planar.thetas_from_tool_xy_block(j1.a_mm, j2.a_mm, columns[0][start:stop],
                                         columns[1][start:stop], t1, t2,
                                         reachable[start:stop], singular[start:stop])
        cols = [t1 - j1.offset_rad if j1.offset_rad else t1,
                t2 - j2.offset_rad if j2.offset_rad else t2]
        if arm.is_scara:
            q3 = np.where(reachable[start:stop], scara.quill_from_z(arm, columns[2][start:stop]),
                          np.nan)
            cols += [np.broadcast_to(q3, t1.shape),
                     scara.roll_joint_from_heading(arm, t1, t2, columns[3][start:stop])]
        good = ok[:, start:stop]
        good[:] = reachable[start:stop]
        for i, (joint, col) in enumerate(zip(arm.joints, cols)):
            value = wrap_into_limits_array(col, joint.min, joint.max) if joint.is_revolute else col
            out[:, start:stop, i] = value
            good &= value >= joint.min - LIMIT_TOL
            good &= value <= joint.max + LIMIT_TOL

    planar.run_blocks(n, block)
    return BatchIK(out, reachable, singular, ok)


__all__ = ["Solution", "IKResult", "TargetError", "joints_from_tool", "tool_from_joints",
           "tool_from_joints_dh", "jacobian", "pose_warnings", "pose_problems",
           "joints_from_tool_batch", "BatchIK", "wrap_into_limits", "singularity_words"]
