"""The dry run's batched path (plan_program(ahead=True): joint moves planned with their
keep-out sweeps and tool-speed bounds computed ahead, the gate's checks of all steps in
one pass) gives the same report as planning and checking one step after the other
(ahead=False), step by step, on varied random programs; and the batched sweep and gate
checks agree with their one-at-a-time versions. Independent checks beside them: the reach
of a two-link arm (Lynch & Park, *Modern Robotics* (2017), §6.1: a target is reachable
exactly when |a1 - a2| <= r <= a1 + a2), forward kinematics by plain trigonometry, and
the swept links against the zones with Shapely (GEOS) distances."""

from __future__ import annotations

import dataclasses
import math
import random

import numpy as np
import pytest
import shapely
from shapely.geometry import Point as ShapelyPoint, Polygon

from benchjog.console.cell.armfile import builtin_arm
from benchjog.console.cell.points import PointBook, TaughtPoint, branch_of
from benchjog.console.cell.program_runs import plan_program, report_json, report_lines
from benchjog.console.cell.programs import DwellStep, MoveStep, OutputStep, Program
from benchjog.drivers.interlock import Dwell, Interlock, SetOutput
from benchjog.kinematics.model import Branch, Segment
from benchjog.kinematics.planner import Plan, plan_move
from benchjog.kinematics.sweep import sweep_zones, sweep_zones_many

PLANAR = builtin_arm("planar-bench")
SCARA = builtin_arm("scara-bench")
TAUGHT = "2026-01-01T00:00:00Z"


def _joints_near(arm, rng: random.Random, kind: str) -> tuple[float, ...]:
    """Joint values (rad, mm) of one kind of invented point."""
    lo = [j.min for j in arm.joints]
    hi = [j.max for j in arm.joints]
    q = [rng.uniform(a, b) for a, b in zip(lo, hi)]
    if kind == "limits":            # a joint beyond its soft limit
        i = rng.randrange(2)
        beyond = math.radians(rng.uniform(0.2, 15.0))
        q[i] = hi[i] + beyond if rng.random() < 0.5 else lo[i] - beyond
    elif kind == "singular":        # elbow within a few degrees of stretched
        q[1] = math.radians(rng.choice([1, -1]) * rng.uniform(0.05, 6.0))
    elif kind == "edge":            # close to a soft limit, inside
        i = rng.randrange(2)
        q[i] = hi[i] - math.radians(rng.uniform(0.1, 4.0))
    return tuple(q)


def _zone_joints(arm, rng: random.Random) -> tuple[float, ...]:
    """A pose with the tool point in or right beside the arm's first zone (x, y), by IK."""
    from benchjog.kinematics.solve import joints_from_tool
    zone = arm.zones[0]
    out = rng.choice([0.0, 15.0, 40.0, 60.0])   # in it, or this far beside it
    if zone.kind == "box":
        x = rng.uniform(zone.x_min - out, zone.x_max + out)
        y = rng.uniform(zone.y_min - out, zone.y_max + out)
        if out and rng.random() < 0.5:
            y = rng.choice([zone.y_min - out, zone.y_max + out])
        elif out:
            x = zone.x_max + out
    else:
        a = rng.uniform(0, 2 * math.pi)
        x, y = zone.cx + (zone.r + out) * math.cos(a), zone.cy + (zone.r + out) * math.sin(a)
    target = (x, y, rng.uniform(20.0, 130.0), 0.0) if arm.is_scara else (x, y)
    ik = joints_from_tool(arm, target)
    sols = [s for s in ik.solutions] if ik.reachable else []
    return tuple(rng.choice(sols).joints) if sols else _joints_near(arm, rng, "ok")


def random_cell(arm, seed: int, steps: int) -> tuple[Program, PointBook]:
    """A varied invented program: reachable points on both branches, points out of reach
    (beyond a1 + a2 and inside |a1 - a2|), beyond a joint limit, near the singular pose,
    near a soft limit, in and beside a keep-out zone; joint and line moves at several
    speeds and tolerances, dwells, outputs (one on a channel that does not exist), an
    unknown point name."""
    rng = random.Random(seed)
    book = PointBook(arm, path=None)
    companions: dict[str, str] = {}
    reach = arm.link1_mm + arm.link2_mm
    hole = abs(arm.link1_mm - arm.link2_mm)
    kinds = ["ok"] * 6 + ["limits", "singular", "edge", "zone", "zone", "zone", "far", "hole"]
    for k in range(40):
        kind = kinds[k % len(kinds)] if k < len(kinds) else rng.choice(kinds)
        name = f"{kind}{k:02d}"
        if kind in ("far", "hole"):
            r = rng.uniform(reach + 1.0, reach + 80.0) if kind == "far" else rng.uniform(0.0, hole - 1.0)
            a = rng.uniform(-math.pi, math.pi)
            cart = (r * math.cos(a), r * math.sin(a))
            if arm.is_scara:
                cart += (100.0, 0.0)
            book.points.append(TaughtPoint(name, cart, arm.home_joints,
                                           rng.choice(list(Branch)), taught=TAUGHT))
            continue
        q = _zone_joints(arm, rng) if kind == "zone" else _joints_near(arm, rng, kind)
        book.teach(name, q, taught=TAUGHT)
        if kind in ("ok", "singular", "zone"):
            # a neighbour on the same branch, for straight lines that can be drawn
            from benchjog.kinematics.solve import joints_from_tool
            target = list(book.base_target(name))
            target[0] += rng.uniform(-40.0, 40.0)
            target[1] += rng.uniform(-40.0, 40.0)
            ik = joints_from_tool(arm, tuple(target))
            sol = ik.solution(branch_of(arm, q)) if ik.reachable else None
            if sol is not None:
                book.teach(name + "-n", sol.joints, taught=TAUGHT)
                companions[name] = name + "-n"
    names = book.names
    program_steps = []
    for _ in range(steps):
        roll = rng.random()
        if roll < 0.06:
            program_steps.append(DwellStep(rng.choice([0.0, 0.5, 2.0])))
        elif roll < 0.1:
            program_steps.append(OutputStep(rng.choice([0, 3, 7, 9]), rng.random() < 0.5))
        elif roll < 0.12:
            program_steps.append(MoveStep("nowhere"))
        else:
            line = rng.random() < 0.25
            last = next((m.point for m in reversed(program_steps) if isinstance(m, MoveStep)), "")
            point = (companions[last] if line and last in companions and rng.random() < 0.8
                     else rng.choice(names))
            program_steps.append(MoveStep(
                point, "line" if line else "joint", rng.choice([100.0, 100.0, 60.0, 15.0]),
                tolerance_mm=rng.choice([None, 0.5, 2.0]) if line else None))
    program_steps[5:5] = [OutputStep(9, True), MoveStep("nowhere")]  # each at least once
    return Program("random", "points.toml", program_steps[:steps]), book


def _step_record(s):
    return (s.number, s.step, s.action, s.duration_s, s.summary, s.target, s.warnings, s.problems)


@pytest.mark.parametrize("arm, seed", [(PLANAR, 11), (PLANAR, 12), (SCARA, 21)],
                         ids=["planar-11", "planar-12", "scara-21"])
def test_batched_dry_run_is_the_step_by_step_dry_run(arm, seed):
    program, book = random_cell(arm, seed, 160)
    fast = plan_program(arm, program, book, ahead=True)
    slow = plan_program(arm, program, book, ahead=False)
    assert len(fast.steps) == len(slow.steps) == 160
    for a, b in zip(fast.steps, slow.steps):
        assert _step_record(a) == _step_record(b), f"step {a.number}"
    assert fast.end_joints == slow.end_joints
    assert report_lines(fast) == report_lines(slow)
    assert report_json(fast) == report_json(slow)
    # the program is varied enough to mean something: every kind of verdict occurs
    text = "\n".join(fast.problems + [w for s in fast.steps for w in s.warnings])
    for words in ("keep-out zone", "limit", "singular", "no point named", "reach", "channel 9"):
        assert words in text, words
    moves = [s for s in fast.steps if isinstance(s.step, MoveStep)]
    assert any(s.ok for s in moves) and any(not s.ok for s in moves)
    assert {s.step.path for s in moves if s.ok} == {"joint", "line"}
    ends = {s.summary.branch for s in moves if s.ok and s.summary is not None}
    assert {Branch.ELBOW_UP, Branch.ELBOW_DOWN} <= ends


@pytest.mark.parametrize("seed", [11, 12])
def test_reach_and_end_pose_independently(seed):
    """reference: the two-link workspace is the annulus |a1 - a2| <= r <= a1 + a2
    (Lynch & Park, Modern Robotics (2017), §6.1); FK by plain trigonometry."""
    arm = PLANAR
    program, book = random_cell(arm, seed, 160)
    report = plan_program(arm, program, book)
    a1, a2 = arm.link1_mm, arm.link2_mm
    checked = 0
    for s in report.steps:
        if not isinstance(s.step, MoveStep) or s.target is None:
            continue
        r = math.hypot(*s.target[:2])
        if r > a1 + a2 + 1e-6 or r < abs(a1 - a2) - 1e-6:
            assert not s.ok and s.summary.segment_count == 0, s.number
            checked += 1
        elif s.ok and s.summary.segment_count:
            q = s.action.segments[-1].joints
            x = a1 * math.cos(q[0]) + a2 * math.cos(q[0] + q[1])
            y = a1 * math.sin(q[0]) + a2 * math.sin(q[0] + q[1])
            assert math.hypot(x - s.target[0], y - s.target[1]) < 1e-6, s.number
    assert checked >= 3


def test_accepted_moves_stay_out_of_the_zone_by_shapely():
    """Every pose sampled along every accepted move keeps each link at least the
    clearance from the keep-out box; every move refused for the zone comes within the
    clearance somewhere. reference: shapely 2 distance (GEOS), not benchjog's zone code."""
    arm = PLANAR
    program, book = random_cell(arm, 11, 160)
    report = plan_program(arm, program, book)
    zone = arm.zones[0]
    box = Polygon([(zone.x_min, zone.y_min), (zone.x_max, zone.y_min),
                   (zone.x_max, zone.y_max), (zone.x_min, zone.y_max)])
    a1, a2 = arm.link1_mm, arm.link2_mm

    def least_gap(knots):
        tau = np.linspace(0.0, 1.0, 400)[None, :, None]
        q = (knots[:-1, None, :] + tau * np.diff(knots, axis=0)[:, None, :]).reshape(-1, 2)
        ex, ey = a1 * np.cos(q[:, 0]), a1 * np.sin(q[:, 0])
        tx, ty = ex + a2 * np.cos(q[:, 0] + q[:, 1]), ey + a2 * np.sin(q[:, 0] + q[:, 1])
        upper = shapely.linestrings(np.stack([np.zeros_like(ex), np.zeros_like(ey), ex, ey], 1)
                                    .reshape(-1, 2, 2))
        lower = shapely.linestrings(np.stack([ex, ey, tx, ty], 1).reshape(-1, 2, 2))
        return float(min(shapely.distance(upper, box).min(), shapely.distance(lower, box).min()))

    accepted = refused = 0
    for s in report.steps:
        if not isinstance(s.step, MoveStep) or s.summary is None:
            continue
        if s.ok and s.summary.segment_count:
            knots = np.array([s.summary.start_joints] + [g.joints for g in s.action.segments])
            assert least_gap(knots) >= arm.link_clearance_mm - 1e-6, s.number
            accepted += 1
        elif any("keep-out zone" in p and "would" in p for p in s.problems):
            knots = np.array([s.summary.start_joints, s.summary.end_joints])
            assert least_gap(knots) < arm.link_clearance_mm + 0.05, s.number
            refused += 1
    assert accepted >= 20 and refused >= 1


@pytest.mark.parametrize("arm", [PLANAR, SCARA], ids=["planar", "scara"])
def test_sweep_of_many_paths_is_each_path_swept_alone(arm):
    rng = np.random.default_rng(5)
    lo = np.array([j.min for j in arm.joints])
    hi = np.array([j.max for j in arm.joints])
    paths = [lo + (hi - lo) * rng.random((int(rng.integers(2, 6)), arm.n_joints))
             for _ in range(120)]
    alone = [sweep_zones(arm, p) for p in paths]
    together = sweep_zones_many(arm, paths)
    assert together == alone
    assert any(r.contact is not None for r in alone) and any(r.contact is None for r in alone)
    assert sweep_zones_many(arm, []) == []


def test_gate_check_each_is_check_actions_one_by_one():
    """Plans that start inside a zone (the escape rule), that enter one, that are clear,
    malformed ones, dwells and outputs: the batched dry-run check gives each the verdict
    of the gate's own check."""
    arm = PLANAR
    rng = random.Random(3)
    items = []
    program, book = random_cell(arm, 12, 80)
    report = plan_program(arm, program, book, ahead=False)
    for s in report.steps:
        if isinstance(s.action, Plan):
            items.append((s.action, s.summary.start_joints))
    from benchjog.kinematics.solve import joints_from_tool
    inside = joints_from_tool(arm, (-250.0, 0.0)).solution(Branch.ELBOW_DOWN).joints
    free = dataclasses.replace(arm, zones=())   # plans the planner itself would refuse
    for start, target in ((inside, (-250.0, 120.0)), (inside, (-150.0, 0.0)),
                          (inside, (200.0, 100.0)), (arm.home_joints, (-250.0, 10.0)),
                          (arm.home_joints, (-180.0, -150.0)), (arm.home_joints, (-300.0, 0.0))):
        items.append((plan_move(arm, start, target), start))
        items.append((plan_move(free, start, target), start))
    good = next(a for a, _ in items if a.ok and a.segments)
    bad = Plan((Segment((math.nan, 0.0), 0.1),) + good.segments[1:], good.summary, ())
    slow = Plan(tuple(Segment(g.joints, 0.0001) for g in good.segments), good.summary, ())
    fast = Plan(tuple(Segment(g.joints, 0.001) for g in good.segments), good.summary, ())
    items += [(bad, good.summary.start_joints), (slow, None), (fast, None),
              (Dwell(1.0), None), (Dwell(-1.0), None), (SetOutput(9, True), None)]
    rng.shuffle(items)
    gate = Interlock.open(arm, "sim", journal=False)
    try:
        batched = gate.check_each(items)
        single = [gate.check_actions([a], s) for a, s in items]
    finally:
        gate.close()
    assert batched == single
    words = " ".join(r for v in single for r in v.reasons)
    assert "would enter keep-out zone" in words and "speed" in words and "malformed" in words
    assert any(v.ok for v in single)
