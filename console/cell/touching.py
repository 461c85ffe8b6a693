"""The capture flow of a calibration: bring the tool tip onto fixture-plate holes and
record the controller's counts there. Every motion goes through the interlock, at
reduced speed, each approach after the user's confirmation.

Per hole: an approach move to where the arm file (and the plate's nominal base) put
the hole, on the chosen branch (a SCARA stops ``HOVER_MM`` above it); then the finish:
- on a real controller, the user types small jog steps (``x+0.2``, ``y -0.5``,
  ``z-1``, ``j1+0.05``) until the tip sits in the hole, then ``ok`` records it
  (``skip`` leaves the hole, ``quit`` ends); each step is at most ``HAND_STEP_MAX_MM``
  (deg) and is shown before it runs;
- on the simulated arm with a "true" arm (a rehearsal), a simulated hand reads the
  bench's ruler (``gate.sim.tool_in_plate_mm``), aims at the hole with a random error
  of ``noise_mm`` (the touching's own scatter) and jogs there.
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable, Sequence
from typing import TextIO

import numpy as np

from benchjog.console.cell.calibration_files import Plate, TouchRecord, branch_of
from benchjog.console.errors import Refused
from benchjog.drivers.calibration import counts_from_joints
from benchjog.drivers.interlock import Confirmer, Proposal
from benchjog.kinematics import identify as ident
from benchjog.kinematics.model import Arm, Branch
from benchjog.kinematics.options import TOUCH_SPEED_PCT
from benchjog.kinematics.planner import JOINT

REDUCED_SPEED_PCT = TOUCH_SPEED_PCT   # calibration and commissioning motions (kinematics/options.py)
HOVER_MM = 10.0            # SCARA: approach this far above the hole
HAND_STEP_MAX_MM = 5.0     # largest typed step (mm, or deg on a joint)
SIM_ROUNDS = 8             # simulated hand: jog rounds per hole at most
SIM_TOL_MM = 0.005


class AcceptShown(Confirmer):
    """For steps the user has just typed (or the simulated hand asked for): the typed
    command is the request, as a jog key is in the console; the plan is shown and a
    refused plan never runs."""

    def __init__(self, arm: Arm, out: TextIO | None = None):
        self.arm, self.out = arm, out

    def confirm(self, proposal: Proposal) -> bool:
        if self.out is not None:
            for line in proposal.lines(self.arm):
                print(line, file=self.out)
        return proposal.ok


def _rot(yaw: float) -> np.ndarray:
    c, s = math.cos(yaw), math.sin(yaw)
    return np.array([[c, -s], [s, c]])


def hole_in_base(plate: Plate, hole_mm: Sequence[float]) -> tuple[float, ...]:
    """A hole's coordinates in the arm's base frame, by the plate's nominal base pose."""
    base = plate.base
    xy = _rot(base[-1]).T @ (np.asarray(hole_mm[:2]) - np.asarray(base[:2]))
    out = (float(xy[0]), float(xy[1]))
    if len(hole_mm) == 3:
        out += (float(hole_mm[2] - base[2]),)
    return out


def approach_target(arm: Arm, plate: Plate, hole_mm: Sequence[float]) -> tuple[float, ...]:
    target = hole_in_base(plate, hole_mm)
    if arm.is_scara:
        return (target[0], target[1], target[2] + HOVER_MM, 0.0)
    return target


def _run(gate, proposal: Proposal, confirmer: Confirmer, what: str) -> None:
    result = gate.execute(proposal, confirmer)
    if not result.completed:
        raise Refused(f"{what}: {result.detail}")


def approach(gate, arm: Arm, plate: Plate, hole_mm: Sequence[float], branch: Branch | None,
             confirmer: Confirmer, speed_pct: float = REDUCED_SPEED_PCT) -> None:
    proposal = gate.propose_move(approach_target(arm, plate, hole_mm), branch=branch, path=JOINT,
                                 speed_pct=speed_pct)
    _run(gate, proposal, confirmer, "approach")


def record(gate, arm: Arm, name: str, hole_mm: Sequence[float]) -> TouchRecord:
    joints = gate.state().joints
    return TouchRecord(name, tuple(float(v) for v in hole_mm), branch_of(arm, joints),
                       counts_from_joints(arm, joints))


def finish_simulated(gate, arm: Arm, plate: Plate, aim_mm: Sequence[float],
                     speed_pct: float = REDUCED_SPEED_PCT) -> None:
    """The simulated hand: jog until the true tip is at ``aim_mm`` (plate frame), as near
    as whole counts allow."""
    hand = AcceptShown(arm)
    aim = np.asarray(aim_mm, dtype=float)
    rot = _rot(plate.base[-1])
    best = math.inf
    for _ in range(SIM_ROUNDS):
        err = aim - np.asarray(gate.sim.tool_in_plate_mm())
        dist = float(np.linalg.norm(err))
        if dist <= SIM_TOL_MM or dist >= best:
            return
        best = dist
        step = list(rot.T @ err[:2]) + ([float(err[2])] if arm.is_scara else [])
        for axis, delta in zip("xyz", step):
            if abs(delta) > SIM_TOL_MM / 2:
                _run(gate, gate.propose_jog(axis, float(delta), speed_pct=speed_pct), hand,
                     f"jog {axis}")


_STEP = re.compile(r"^\s*(x|y|z|j[1-4])\s*([+-]\s*\d+(?:\.\d*)?|[+-]\s*\.\d+)\s*$", re.I)


def parse_step(arm: Arm, text: str) -> tuple[str, float]:
    """A typed step, ``x+0.2`` or ``j1 -0.05``: (axis, delta in mm or rad).

    Raises:
        ValueError: in words (unknown axis, too large, not a number).
    """
    m = _STEP.match(text)
    if not m:
        raise ValueError(f"not a step: {text.strip()!r} (e.g. x+0.2, y -0.5, j1+0.05; ok, skip, quit)")
    axis, value = m.group(1).lower(), float(m.group(2).replace(" ", ""))
    if axis == "z" and not arm.is_scara:
        raise ValueError("a planar arm has no z")
    if axis.startswith("j") and int(axis[1:]) > arm.n_joints:
        raise ValueError(f"a {arm.geometry} arm has {arm.n_joints} joints")
    if abs(value) > HAND_STEP_MAX_MM:
        raise ValueError(f"{abs(value):g} is larger than a touching step may be "
                         f"({HAND_STEP_MAX_MM:g} mm or deg)")
    if axis.startswith("j"):
        value = arm.joints[int(axis[1:]) - 1].from_display(value)
    return axis, value


def finish_by_hand(gate, arm: Arm, name: str, stdin: TextIO, out: TextIO,
                   speed_pct: float = REDUCED_SPEED_PCT) -> str:
    """Typed steps until ``ok`` (returns "ok"), ``skip`` or ``quit`` (or end of input)."""
    shown = AcceptShown(arm, out)
    while True:
        print(f"{name}: step (x+0.2, y-0.5, j1+0.05), ok, skip or quit> ", end="", file=out, flush=True)
        line = stdin.readline()
        if not line:
            print("", file=out)
            return "quit"
        word = line.strip().lower()
        if word in ("ok", "skip", "quit"):
            return word
        try:
            axis, delta = parse_step(arm, line)
        except ValueError as exc:
            print(f"benchjog: {exc}", file=out)
            continue
        result = gate.execute(gate.propose_jog(axis, delta, speed_pct=speed_pct), shown)
        if not result.completed:
            print(f"benchjog: {result.detail}", file=out)


def capture(gate, arm: Arm, plate: Plate, visits: Sequence[tuple[str, tuple[float, ...], Branch | None]],
            confirmer: Confirmer, *, finish: Callable[[str, tuple[float, ...]], str],
            on_record: Callable[[list[TouchRecord]], None] | None = None,
            speed_pct: float = REDUCED_SPEED_PCT, out: TextIO | None = None) -> list[TouchRecord]:
    """Visit each (hole name, plate coordinates, branch): approach after confirmation,
    ``finish`` (returns "ok", "skip" or "quit"), record. ``on_record`` gets the list so
    far after each touch, so nothing touched is lost when a later step fails. An
    approach the gate refuses or the user declines skips that hole (said on ``out``); a
    latched e-stop, fault or lost link ends the capture."""
    records: list[TouchRecord] = []
    for name, hole, branch in visits:
        try:
            approach(gate, arm, plate, hole, branch, confirmer, speed_pct)
        except Refused as exc:
            if gate.state().latched:
                raise
            if out is not None:
                print(f"benchjog: {name} skipped: {exc}", file=out)
            continue
        word = finish(name, hole)
        if word == "quit":
            break
        if word == "skip":
            continue
        records.append(record(gate, arm, name, hole))
        if on_record is not None:
            on_record(records)
    return records


def planned_visits(arm: Arm, plate: cf.Plate, count: int) -> list[ident.Candidate]:
    """The touches to make: chosen for observability (O1), then ordered by branch and
    around the base so the arm does not sweep back and forth."""
    vector = ident.nominal_vector(arm, plate.base)
    cands = ident.candidates_for(arm, plate.holes, vector)
    if not cands:
        raise Refused("the arm can reach none of the plate's holes within its limits "
                      "(check the plate's base = [...] in the plate file)")
    chosen = ident.plan_touches(arm, cands, count, vector)
    return sorted(chosen, key=lambda c: (c.branch.value, c.joints[0]))
