"""Geometry-independent front: every IK branch with its findings, FK, the Jacobian.

Units: mm and radians. Targets: planar (x, y); SCARA (x, y, z, roll). Tool poses:
planar (x, y, heading); SCARA (x, y, z, roll).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from kinematics import planar, scara
from kinematics.dh import pose_from_transform, tool_transform
from kinematics.limits import limit_problems, wrap_into_limits, wrap_into_limits_array, wrap_joints
from kinematics.model import Arm, Branch
from kinematics.zones import zone_problems


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


def check_target(arm: Arm, target: Sequence[float]) -> tuple[float, ...]:
    want = "x, y, z, roll" if arm.is_scara else "x, y"
    if len(target) != (4 if arm.is_scara else 2):
        raise TargetError(f"a {arm.geometry} arm takes a target of {want}, got {len(target)} values")
    values = tuple(float(v) for v in target)
    for name, value in zip(want.split(", "), values):
        if not math.isfinite(value):
            raise TargetError(f"{name} is not a finite number ({value})")
    return values


def check_joints(arm: Arm, values: Sequence[float]) -> tuple[float, ...]:
    if len(values) != arm.n_joints:
        raise TargetError(f"a {arm.geometry} arm has {arm.n_joints} joints, got {len(values)} values")
    out = tuple(float(v) for v in values)
    for joint, value in zip(arm.joints, out):
        if not math.isfinite(value):
            raise TargetError(f"{joint.name} is not a finite number ({value})")
    return out


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


def joints_from_tool(arm: Arm, target: Sequence[float]) -> IKResult:
    """Every IK branch for a tool target, each with its problems.

    Raises:
        TargetError: the target has the wrong shape or is not finite.
    """
    target = check_target(arm, target)
    j1, j2 = arm.joints[0], arm.joints[1]
    raw = planar.thetas_from_tool_xy(j1.a_mm, j2.a_mm, target[0], target[1])
    if not raw:
        r = math.hypot(target[0], target[1])
        where = (f"{r - arm.max_reach_mm:.3f} mm beyond the max reach {arm.max_reach_mm:g} mm"
                 if r > arm.max_reach_mm else
                 f"{arm.min_reach_mm - r:.3f} mm inside the min reach {arm.min_reach_mm:g} mm")
        return IKResult(target, False, (), (f"out of reach: the target is {where}",))
    warnings: list[str] = []
    if len(raw) == 1 and math.hypot(target[0], target[1]) <= planar.reach_tolerance_mm(
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
    return pose_from_transform(arm, tool_transform(arm, values))


def jacobian(arm: Arm, values: Sequence[float]) -> np.ndarray:
    """The analytic Jacobian of the tool pose with respect to the joint values.

    Planar: rows (x, y, heading) by columns (j1, j2). SCARA: rows (x, y, z, roll) by
    columns (j1, j2, j3, j4); z falls 1 mm per mm of quill and the roll turns against
    the roll joint (the 180-degree alpha).
    """
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
    branch rows hold the one solution.
    """
    targets = np.asarray(targets, dtype=float)
    j1, j2 = arm.joints[0], arm.joints[1]
    t1, t2, reachable, singular = planar.thetas_from_tool_xy_batch(
        j1.a_mm, j2.a_mm, targets[:, 0], targets[:, 1])
    cols = [t1 - j1.offset_rad, t2 - j2.offset_rad]
    if arm.is_scara:
        q3 = scara.quill_from_z(arm, targets[:, 2])
        cols += [np.broadcast_to(q3, t1.shape),
                 scara.roll_joint_from_heading(arm, t1, t2, targets[:, 3])]
    out = np.empty((2, targets.shape[0], arm.n_joints))
    ok = np.ones((2, targets.shape[0]), dtype=bool)
    for i, (joint, col) in enumerate(zip(arm.joints, cols)):
        value = wrap_into_limits_array(col, joint.min, joint.max) if joint.is_revolute else col
        out[:, :, i] = value
        ok &= (value >= joint.min - 1e-9) & (value <= joint.max + 1e-9)
    return BatchIK(out, reachable, singular, ok & reachable)


__all__ = ["Solution", "IKResult", "TargetError", "joints_from_tool", "tool_from_joints",
           "tool_from_joints_dh", "jacobian", "pose_warnings", "pose_problems",
           "joints_from_tool_batch", "BatchIK", "wrap_into_limits", "singularity_words"]
