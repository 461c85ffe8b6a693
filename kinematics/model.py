"""The arm model: frozen dataclasses shared by every layer.

Units inside ``kinematics/`` (and everything that holds a joint vector in memory):
millimetres and radians. Degrees appear only at the edges: arm files, the command
line, reports and the console. The calibration fields ``counts_per_unit`` and
``zero`` keep the arm file's units (counts per degree or per mm, degrees or mm),
because that is how the controller's documentation states them.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from enum import Enum


class Branch(str, Enum):
    """IK branch labels, the contract strings of CONTRACT.md.

    ``elbow-down`` has the elbow joint value j2 > 0, ``elbow-up`` has j2 < 0, angles
    counter-clockwise positive seen from above (z up). At a singular target (stretched
    or folded) both branches coincide and only one solution is reported; it is labelled
    ``elbow-down`` when j2 >= 0 and ``elbow-up`` otherwise.
    """

    ELBOW_DOWN = "elbow-down"
    ELBOW_UP = "elbow-up"

    def other(self) -> "Branch":
        return Branch.ELBOW_UP if self is Branch.ELBOW_DOWN else Branch.ELBOW_DOWN

    def __str__(self) -> str:  # print the contract string, not "Branch.ELBOW_UP"
        return self.value


REVOLUTE = "revolute"
PRISMATIC = "prismatic"
PLANAR = "planar"
SCARA = "scara"
GEOMETRIES = (PLANAR, SCARA)


@dataclass(frozen=True)
class Joint:
    """One joint of a standard (distal) Denavit-Hartenberg chain.

    The joint's transform is ``Rz(theta) Tz(d) Tx(a) Rx(alpha)``; a revolute joint has
    ``theta = value + offset_rad`` and a fixed ``d_mm``; a prismatic joint has
    ``d = d_mm + value`` and ``theta = offset_rad``.

    ``min``/``max``/``max_speed``/``max_accel`` are in the joint's internal unit:
    rad, rad/s, rad/s^2 for a revolute joint; mm, mm/s, mm/s^2 for a prismatic one.
    """

    name: str
    type: str
    a_mm: float
    alpha_rad: float
    d_mm: float
    offset_rad: float
    min: float
    max: float
    max_speed: float
    max_accel: float
    counts_per_unit: float
    zero: float
    direction: int

    @property
    def is_revolute(self) -> bool:
        return self.type == REVOLUTE

    @property
    def unit(self) -> str:
        """The unit shown to people: 'deg' or 'mm'."""
        return "deg" if self.is_revolute else "mm"

    def to_display(self, value: float) -> float:
        """Internal value (rad or mm) to the display unit (deg or mm)."""
        return math.degrees(value) if self.is_revolute else value

    def from_display(self, value: float) -> float:
        """Display value (deg or mm) to the internal unit (rad or mm)."""
        return math.radians(value) if self.is_revolute else value


@dataclass(frozen=True)
class Zone:
    """A keep-out zone in the base plane, optionally bounded in z (SCARA).

    ``kind`` is ``"box"`` (axis-aligned, ``x_min..x_max`` by ``y_min..y_max``) or
    ``"circle"`` (centre ``cx, cy``, radius ``r``). ``z_min..z_max`` is the zone's
    height range in the base frame; a planar arm ignores it. All in mm.
    """

    name: str
    kind: str
    x_min: float = 0.0
    x_max: float = 0.0
    y_min: float = 0.0
    y_max: float = 0.0
    cx: float = 0.0
    cy: float = 0.0
    r: float = 0.0
    z_min: float = -math.inf
    z_max: float = math.inf


@dataclass(frozen=True)
class Arm:
    """A whole arm: its joints (base first), keep-out zones and warning thresholds.

    Attributes:
        singularity_warn_rad: warn when the elbow is closer than this to a singular
            pose (stretched, j2 = 0, or folded, j2 = +/-180 deg).
        limit_margin_rad: the soft-limit margin the interlock keeps on revolute joints.
        limit_margin_mm: the same for prismatic joints.
        tool_speed_max_mm_s: the tool speed cap (250 mm/s: the reduced speed for manual
            mode in ISO 10218-1, from memory).
        jog_step_max_mm: the largest single jog step the interlock accepts.
        link_clearance_mm: keep-out zones are grown by this much when links are
            checked against them (the links' half-width plus a safety gap).
        jog_box_mm, jog_z_mm, jog_roll_deg, jog_idle_s: a jog session's envelope
            (half-width along x and y, half-height along z, half-range of the roll) and
            its idle timeout, as the confirmation offers them (drivers/jog_session.py).
    """

    name: str
    geometry: str
    joints: tuple[Joint, ...]
    zones: tuple[Zone, ...] = ()
    singularity_warn_rad: float = math.radians(5.0)
    limit_margin_rad: float = math.radians(0.5)
    limit_margin_mm: float = 0.5
    tool_speed_max_mm_s: float = 250.0
    jog_step_max_mm: float = 50.0
    link_clearance_mm: float = 0.0
    jog_box_mm: float = 25.0
    jog_z_mm: float = 10.0
    jog_roll_deg: float = 30.0
    jog_idle_s: float = 30.0
    source: str = "<built-in>"

    @property
    def n_joints(self) -> int:
        return len(self.joints)

    @property
    def link1_mm(self) -> float:
        return self.joints[0].a_mm

    @property
    def link2_mm(self) -> float:
        return self.joints[1].a_mm

    @property
    def max_reach_mm(self) -> float:
        return self.link1_mm + self.link2_mm

    @property
    def min_reach_mm(self) -> float:
        return abs(self.link1_mm - self.link2_mm)

    @property
    def is_scara(self) -> bool:
        return self.geometry == SCARA

    def margin(self, joint: Joint) -> float:
        return self.limit_margin_rad if joint.is_revolute else self.limit_margin_mm

    @property
    def home_joints(self) -> tuple[float, ...]:
        """The home pose: every axis at controller count 0, i.e. each joint at its
        calibration ``zero`` (internal units)."""
        return tuple(j.from_display(j.zero) for j in self.joints)


@dataclass(frozen=True)
class Segment:
    """One timed joint segment: every joint moves linearly in joint space from where
    the previous segment ended to ``joints`` (internal units), all arriving together
    after ``duration_s`` seconds. The unit every driver consumes (PROTOCOL.md MOVE)."""

    joints: tuple[float, ...]
    duration_s: float
