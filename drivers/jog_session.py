"""Jog sessions: one confirmation for a run of small jog steps near one pose.

A person confirms a session once, seeing its bounds (:class:`SessionBounds`): a
Cartesian box around the tool's pose when the session starts (and the joint ranges it
implies on the kept branch), the branch it keeps, the frame it jogs in (the tool or
single joints), the largest step, a speed cap (reduced teaching speed: at most
250 mm/s, common practice per ISO 10218-1 for manual reduced-speed operation) and an
idle timeout. Inside the session each jog step is planned and checked by the
interlock exactly like any other jog, then checked against these bounds
(:func:`step_problems`) and run without a question.

This module is data and pure checks only. It holds no driver and no approval: the
session itself is issued and held inside :class:`benchjog.drivers.interlock.Interlock`
(the block ``# -- jog sessions --``), which is the only thing that can run a step
under it. A :class:`SessionView` handed to the console is a read-only picture of it.

This is a software interlock, not a safety-rated function (README, Safety).
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

from benchjog.kinematics.model import Arm, Branch
from benchjog.kinematics.planner import Plan, branch_of
from benchjog.kinematics.solve import joints_from_tool, tool_from_joints

DEADMAN_S = 0.3                 # a held key must repeat within this, or the arm stops
TEACH_SPEED_MAX_MM_S = 250.0    # reduced (teaching) speed cap, common practice per ISO 10218-1
BOX_TOL_MM = 0.3                # controller count rounding at full reach stays below this
BOX_TOL_RAD = math.radians(0.2)
ENVELOPE_SAMPLES = 4            # sub-samples per segment when checking the envelope
TOOL_AXES = ("x", "y", "z", "roll")
FRAMES = ("tool", "joint")


class SessionError(ValueError):
    """Bounds that cannot make a session (non-finite, negative, beyond the caps)."""


def frame_of(axis: str) -> str:
    """The frame a jog axis belongs to: ``tool`` (x, y, z, roll) or ``joint`` (j1..jn).

    >>> frame_of("x"), frame_of("j2")
    ('tool', 'joint')
    """
    return "tool" if axis in TOOL_AXES else "joint"


def step_display(arm: Arm, axis: str, delta: float) -> float:
    """The size of a jog step in the units people see: mm for x, y, z and a prismatic
    joint, degrees for the roll and a revolute joint.

    >>> from benchjog.console.cell.armfile import builtin_arm
    >>> round(step_display(builtin_arm("planar-bench"), "j1", math.radians(-2.5)), 9)
    2.5
    """
    if axis == "roll":
        return abs(math.degrees(delta))
    if axis.startswith("j"):
        return abs(arm.joints[int(axis[1:]) - 1].to_display(delta))
    return abs(delta)


@dataclass(frozen=True)
class SessionBounds:
    """What a person approves once. Units inside: mm and radians.

    ``center`` and ``half`` are the tool pose when the session starts and the box's
    half-widths, per tool axis (planar: x, y; SCARA: x, y, z, roll)."""

    center: tuple[float, ...]
    half: tuple[float, ...]
    branch: Branch | None
    frame: str
    step: float                 # largest step, display units (mm / deg)
    speed_cap_mm_s: float
    idle_s: float
    joint_ranges: tuple[tuple[float, float], ...]   # implied by the box on the branch

    def lines(self, arm: Arm) -> list[str]:
        """The session's bounds in words, for the confirmation."""
        names = TOOL_AXES[:len(self.center)]
        box = []
        for name, c, h in zip(names, self.center, self.half):
            if name == "roll":
                box.append(f"roll {math.degrees(c - h):.1f}..{math.degrees(c + h):.1f} deg")
            else:
                box.append(f"{name} {c - h:.1f}..{c + h:.1f}")
        unit = "mm / deg" if self.frame == "tool" and arm.is_scara else (
            "mm" if self.frame == "tool" else "deg (mm on a prismatic joint)")
        out = [
            "jog session: one yes for every jog step inside these bounds",
            "  envelope (mm): " + ", ".join(box),
            "  joint ranges it implies: " + ", ".join(
                f"{j.name} {j.to_display(lo):.1f}..{j.to_display(hi):.1f} {j.unit}"
                for j, (lo, hi) in zip(arm.joints, self.joint_ranges)),
            f"  branch kept: {self.branch or 'singular (none)'}; jogging the "
            f"{'tool (Cartesian)' if self.frame == 'tool' else 'single joints'}",
            f"  step at most {self.step:g} {unit}; tool speed at most "
            f"{self.speed_cap_mm_s:g} mm/s (reduced teaching speed)",
            f"  ends after {self.idle_s:g} s without a jog, on a stop, reset, e-stop, fault, a "
            "change of branch, frame or a larger step, or a step leaving the envelope",
            f"  a held key jogs on; with no repeat within {DEADMAN_S:g} s the arm stops",
        ]
        return out


def implied_joint_ranges(arm: Arm, center: Sequence[float], half: Sequence[float],
                         branch: Branch | None, joints_now: Sequence[float],
                         samples: int = 5) -> tuple[tuple[float, float], ...]:
    """The joint ranges the box spans on the branch, from a grid of box points (their
    IK), widened to include the present joints. Points the branch cannot reach are left
    out; the range then shows what can be reached."""
    lo = list(joints_now)
    hi = list(joints_now)
    grids = [[c + h * (2.0 * k / (samples - 1) - 1.0) for k in range(samples)]
             if n < 2 else [c - h, c, c + h] for n, (c, h) in enumerate(zip(center, half))]
    for point in itertools.product(*grids):
        ik = joints_from_tool(arm, tuple(point))
        if not ik.reachable:
            continue
        sol = ik.solution(branch) if branch is not None else (ik.solutions[0] if ik.solutions
                                                             else None)
        if sol is None:
            continue
        for n, value in enumerate(sol.joints):
            near = value + 2 * math.pi * round((joints_now[n] - value) / (2 * math.pi)) \
                if arm.joints[n].is_revolute else value
            lo[n] = min(lo[n], near)
            hi[n] = max(hi[n], near)
    return tuple(zip(lo, hi))


def tool_point(arm: Arm, joints: Sequence[float]) -> tuple[float, ...]:
    """The tool pose compared with the box: (x, y) planar, (x, y, z, roll) SCARA."""
    pose = tool_from_joints(arm, joints)
    return tuple(pose[:4]) if arm.is_scara else tuple(pose[:2])


def make_bounds(arm: Arm, joints: Sequence[float], frame: str, step: float, *,
                box_mm: float | None = None, z_mm: float | None = None,
                roll_deg: float | None = None,
                speed_cap_mm_s: float = TEACH_SPEED_MAX_MM_S,
                idle_s: float | None = None) -> SessionBounds:
    """Bounds around the tool pose at ``joints``. The envelope and the idle timeout
    not given are the arm file's (``jog_session_box``, ``jog_session_z``,
    ``jog_session_roll``, ``jog_session_idle``; 25 mm, 10 mm, 30 deg and 30 s unless
    it says otherwise).

    Raises:
        SessionError: a frame other than tool/joint; a non-finite or non-positive box,
            step, idle timeout or speed cap; a speed cap above the reduced teaching
            speed (250 mm/s) or the arm's own tool speed cap.
    """
    if frame not in FRAMES:
        raise SessionError(f"unknown jog frame {frame!r} (tool or joint)")
    box_mm = arm.jog_box_mm if box_mm is None else box_mm
    z_mm = arm.jog_z_mm if z_mm is None else z_mm
    roll_deg = arm.jog_roll_deg if roll_deg is None else roll_deg
    idle_s = arm.jog_idle_s if idle_s is None else idle_s
    for name, value in (("envelope half-width", box_mm), ("z half-height", z_mm),
                        ("roll half-range", roll_deg), ("step", step),
                        ("idle timeout", idle_s), ("speed cap", speed_cap_mm_s)):
        if not (math.isfinite(value) and value > 0):
            raise SessionError(f"jog session {name} must be a positive number ({value})")
    cap = min(TEACH_SPEED_MAX_MM_S, arm.tool_speed_max_mm_s)
    if speed_cap_mm_s > cap + 1e-9:
        raise SessionError(f"jog session speed cap {speed_cap_mm_s:g} mm/s exceeds "
                           f"{cap:g} mm/s (reduced teaching speed)")
    center = tool_point(arm, joints)
    half = (box_mm, box_mm, z_mm, math.radians(roll_deg))[:len(center)]
    branch = branch_of(arm, joints)
    ranges = implied_joint_ranges(arm, center, half, branch, joints)
    return SessionBounds(center, tuple(half), branch, frame, float(step), float(speed_cap_mm_s),
                         float(idle_s), ranges)


def outside_box(bounds: SessionBounds, point: Sequence[float]) -> str | None:
    """Why a tool point lies outside the envelope, or None."""
    for n, (p, c, h) in enumerate(zip(point, bounds.center, bounds.half)):
        name = TOOL_AXES[n]
        if name == "roll":
            off = math.remainder(p - c, 2 * math.pi)
            if abs(off) > h + BOX_TOL_RAD:
                return f"roll {math.degrees(off):+.1f} deg from the session's start, " \
                       f"beyond {math.degrees(h):g} deg"
        elif abs(p - c) > h + BOX_TOL_MM:
            return f"{name} {p - c:+.1f} mm from the session's start, beyond {h:g} mm"
    return None


def step_problems(arm: Arm, bounds: SessionBounds, axis: str, delta: float, plan: Plan,
                  start: Sequence[float],
                  tool_speed: Callable[[Sequence[float], Sequence[float], float], float],
                  wire_s: Callable[[float], float]) -> list[str]:
    """Why a planned jog step does not fit a session (empty when it does).

    Checks the frame, the step size, the duration (a step must end within the dead-man
    window, so a released key stops the arm within it), the branch at every segment end,
    the envelope at sub-samples of every segment (joints interpolate linearly within a
    segment, as the controller moves them), and the tool speed cap on the durations the
    controller is sent (``tool_speed(start, end, seconds)``, ``wire_s(seconds)``)."""
    if frame_of(axis) != bounds.frame:
        return [f"the frame changed (session jogs the {bounds.frame}, this jog the "
                f"{frame_of(axis)})"]
    size = step_display(arm, axis, delta)
    if size > bounds.step + 1e-9:
        return [f"step {size:g} is larger than the session's {bounds.step:g}"]
    if plan.summary.duration_s > DEADMAN_S:
        return [f"the step lasts {plan.summary.duration_s:.2f} s, longer than the dead-man "
                f"window {DEADMAN_S:g} s"]
    previous = tuple(start)
    for n, seg in enumerate(plan.segments, 1):
        if branch_of(arm, seg.joints) != bounds.branch:
            return [f"segment {n} changes the branch from {bounds.branch}"]
        for k in range(1, ENVELOPE_SAMPLES + 1):
            f = k / ENVELOPE_SAMPLES
            joints = tuple(a + (b - a) * f for a, b in zip(previous, seg.joints))
            why = outside_box(bounds, tool_point(arm, joints))
            if why:
                return [f"segment {n} leaves the envelope: {why}"]
        speed = tool_speed(previous, seg.joints, wire_s(seg.duration_s))
        if speed > bounds.speed_cap_mm_s * 1.01:
            return [f"segment {n}: tool speed {speed:.1f} mm/s exceeds the session's cap "
                    f"{bounds.speed_cap_mm_s:g} mm/s"]
        previous = seg.joints
    return []


@dataclass(frozen=True)
class SessionView:
    """A read-only picture of the active session, for the console. Holds no authority:
    nothing can be moved with it."""

    number: int
    bounds: SessionBounds
    started_s: float
    last_step_s: float
    steps: int
    left_s: float                # time left before the idle timeout, when the view was made


@dataclass(frozen=True)
class SessionStep:
    """What asking for a step inside the session gave: the run's result (None when no
    step ran) and, when the session ended instead, why. ``token`` names the step's
    proposal in the journal."""

    result: object | None        # benchjog.drivers.interlock.RunResult
    ended: str | None = None
    token: int | None = None
    end_joints: tuple[float, ...] | None = None   # where a completed step ended


@dataclass
class ActiveSession:
    """The interlock's own record of the session it approved (never handed out)."""

    number: int
    bounds: SessionBounds
    started_s: float
    last_step_s: float
    state_key: tuple
    last_token: int
    steps: int = 0

    def view(self, now: float) -> SessionView:
        left = max(0.0, self.bounds.idle_s - (now - self.last_step_s))
        return SessionView(self.number, self.bounds, self.started_s, self.last_step_s,
                           self.steps, left)


class SessionSlot:
    """The interlock's session bookkeeping: offers made, the active session, the step
    tokens it has cleared to run. Mutated only by the interlock, under ``lock``."""

    def __init__(self) -> None:
        import threading
        self.lock = threading.Lock()
        self.offers: dict[int, tuple[SessionBounds, tuple[str, ...]]] = {}
        self.active: ActiveSession | None = None
        self.step_tokens: set[int] = set()
        self.numbers = itertools.count(1)
        self.last_end: str | None = None


def state_key(state) -> tuple:
    """What of a driver's state must stay the same for a session to go on."""
    return (state.is_open, state.enabled, state.homed, state.latched, state.link)
