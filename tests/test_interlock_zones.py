"""Keep-out zones at the gate: the gate checks zones itself (a hand-built plan that
claims no problems is still refused), a motion that starts inside a zone may only lead
out of it (never deeper, into no other zone, at reduced speed, said in words), and
homing's path is said plainly not to be checked.

The zone depths are checked against an independent reference: Shapely (GEOS) geometry,
``LineString``/``Polygon`` distances (``tests/zone_reference.py``)."""

from __future__ import annotations

import dataclasses
import math

import pytest

from benchjog.console.cell.armfile import builtin_arm
from benchjog.drivers.interlock import ESCAPE_SPEED_PCT, Confirmer, Interlock, wire_duration_s
from benchjog.kinematics.model import Zone
from benchjog.kinematics.planner import plan_joint_move
from benchjog.kinematics.solve import tool_from_joints
from zone_reference import penetrations_mm

PLANAR = builtin_arm("planar-bench")   # links 220 and 160 mm, clearance 12 mm
# The simulated arm starts at joints (0, 90 deg): the forearm stands on x = 220 from
# y = 0 to 160. The fixture holds its upper part, 10 mm from the fixture's left edge
# (x = 210) and 30 mm from its right one: 10 + 12 mm clearance = 22 mm deep.
FIXTURE = Zone("fixture", "box", x_min=210.0, x_max=250.0, y_min=100.0, y_max=200.0)
BIN = Zone("bin", "box", x_min=150.0, x_max=172.0, y_min=100.0, y_max=200.0)
POST = Zone("post", "circle", cx=171.0, cy=211.0, r=10.0)   # on the tool's arc at j1 = 15 deg
HOME = (0.0, math.pi / 2)


class Yes(Confirmer):
    def __init__(self):
        self.lines = None

    def confirm(self, proposal) -> bool:
        self.lines = proposal.lines(PLANAR)
        return True


def gate_for(*zones):
    from benchjog.drivers.sim import SimDriver   # tests may hand the gate a driver
    arm = dataclasses.replace(PLANAR, zones=tuple(zones))
    driver = SimDriver(arm, time_scale=50.0)
    driver.open()
    gate = Interlock(arm, driver, journal=None)
    gate.enable()
    return gate


def moves(gate):
    return [c for c in gate.sim.commands if c[0] == "MOVE"]


def test_the_reference_agrees_on_the_start_depth():
    # reference: shapely; by hand: the deepest forearm point is 10 mm inside the left
    # edge, plus the 12 mm clearance: 22 mm.
    arm = dataclasses.replace(PLANAR, zones=(FIXTURE,))
    assert penetrations_mm(arm, HOME)["fixture"] == pytest.approx(22.0, abs=0.01)
    from benchjog.drivers.interlock import zone_penetrations_mm
    assert zone_penetrations_mm(arm, [HOME])[0, 0] == pytest.approx(22.0, abs=1e-6)
    assert gate_for().state().joints == pytest.approx(HOME)


def test_a_hand_built_plan_into_a_zone_is_refused_by_the_gate():
    gate = gate_for(POST)
    try:
        start = gate.state().joints
        blind = dataclasses.replace(gate.arm, zones=())   # a planner that knows no zones
        plan = plan_joint_move(blind, start, (math.radians(30.0), math.pi / 2))
        assert plan.ok and plan.problems == ()
        proposal = gate.propose_actions([plan], "hand-built")
        assert not proposal.ok
        assert any("would enter keep-out zone 'post'" in r for r in proposal.verdict.reasons)
        assert gate.execute(proposal, Yes()).outcome == "refused" and moves(gate) == []
        # the dry-run check says the same
        assert not gate.check_actions([plan], start).ok
    finally:
        gate.close()


def test_a_motion_out_of_a_zone_is_allowed_slowly_and_said_in_words():
    gate = gate_for(FIXTURE, BIN)
    try:
        proposal = gate.propose_jog("x", -30.0)   # towards the fixture's near edge
        assert proposal.ok, proposal.verdict.reasons
        assert any("starts inside keep-out zone 'fixture'" in n and "only leads out" in n
                   and "reduced speed" in n for n in proposal.notes)
        assert any(line.startswith("NOTE: the arm starts inside") for line in proposal.lines(gate.arm))
        # planned at ESCAPE_SPEED_PCT of the tool speed cap (250 mm/s): the tool covers
        # 30 mm no faster than 62.5 mm/s
        plan = proposal.plans[0]
        assert plan.summary.duration_s >= 30.0 / (250.0 * ESCAPE_SPEED_PCT / 100) * 0.99
        start = gate.state().joints
        before = penetrations_mm(gate.arm, start)["fixture"]
        asker = Yes()
        assert gate.execute(proposal, asker).completed
        after = penetrations_mm(gate.arm, gate.state().joints)["fixture"]
        assert after < before - 15.0          # reference: shapely (22 mm to 3.6 mm)
        assert "NOTE" in " ".join(asker.lines)
    finally:
        gate.close()


def test_deeper_stays_refused():
    gate = gate_for(FIXTURE)
    try:
        proposal = gate.propose_jog("x", 5.0)     # towards the middle of the fixture
        assert not proposal.ok
        assert any("deeper into keep-out zone 'fixture'" in r for r in proposal.verdict.reasons)
        joint = gate.propose_joints((math.radians(-2.0), math.pi / 2))   # turns it deeper too
        assert not joint.ok
        assert gate.execute(proposal, Yes()).outcome == "refused" and moves(gate) == []
    finally:
        gate.close()


def test_out_of_one_zone_into_another_is_refused():
    gate = gate_for(FIXTURE, BIN)
    try:
        proposal = gate.propose_jog("x", -45.0)   # the tool ends 3 mm from the bin: < 12
        assert not proposal.ok
        assert any("'bin'" in r for r in proposal.verdict.reasons), proposal.verdict.reasons
        assert moves(gate) == []
    finally:
        gate.close()


def test_an_escape_plan_at_full_speed_is_refused_by_the_gate():
    gate = gate_for(FIXTURE)
    try:
        start = gate.state().joints
        blind = dataclasses.replace(gate.arm, zones=())
        x, y, _ = tool_from_joints(gate.arm, start)
        from benchjog.kinematics.planner import plan_move
        fast = plan_move(blind, start, (x - 30.0, y), path="line")   # 100 %
        assert fast.ok
        proposal = gate.propose_actions([fast], "fast escape")
        assert not proposal.ok
        assert any("reduced: out of a keep-out zone" in r for r in proposal.verdict.reasons)
    finally:
        gate.close()


def test_homing_says_plainly_that_its_path_is_not_checked():
    gate = gate_for(FIXTURE)
    try:
        seen = Yes()
        assert gate.home(seen).completed
        assert any("NOT checked against the keep-out zones" in line for line in seen.lines)
    finally:
        gate.close()


def test_speed_caps_of_an_escape_hold_on_the_wire():
    gate = gate_for(FIXTURE)
    try:
        proposal = gate.propose_jog("x", -20.0)
        assert proposal.ok
        previous = gate.state().joints
        share = ESCAPE_SPEED_PCT / 100 * 1.01
        for seg in proposal.plans[0].segments:
            wire = wire_duration_s(seg.duration_s)
            for joint, a, b in zip(gate.arm.joints, previous, seg.joints):
                assert abs(b - a) / wire <= joint.max_speed * share
            previous = seg.joints
    finally:
        gate.close()
