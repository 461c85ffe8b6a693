"""Properties of the IK over the reachable annulus (hypothesis).

The outside facts these properties rest on:
- forward kinematics of the 2R arm, x = a1 cos t1 + a2 cos(t1 + t2),
  y = a1 sin t1 + a2 sin(t1 + t2) (Lynch & Park, "Modern Robotics", 2017, section 4.1,
  from memory), written out again in this file rather than taken from planar.py;
- the two IK branches of a 2R arm are mirror images of each other about the line from
  the base to the tool: the triangle base-elbow-tool is flipped over its base-tool side
  (Spong, Hutchinson & Vidyasagar, "Robot Modeling and Control", 2006, section 5.3,
  figure of the elbow-up / elbow-down pair, from memory);
- angles that differ by a whole turn (2 pi k) are the same joint position (fact of the
  trade for revolute joints without a cable stop).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from benchjog.console.cell.armfile import builtin_arm
from benchjog.kinematics import planar, solve
from benchjog.kinematics.armspec import arm_from_mapping
from benchjog.kinematics.limits import LIMIT_TOL, wrap_into_limits, wrap_into_limits_array, wrap_pi
from benchjog.kinematics.model import Branch

TWO_PI = 2.0 * math.pi
FK_TOL_MM = 1e-9
SETTINGS = settings(max_examples=150, deadline=None,
                    suppress_health_check=[HealthCheck.too_slow])

PLANAR = builtin_arm("planar-bench")
SCARA = builtin_arm("scara-bench")


def fk_xy(a1: float, a2: float, t1: float, t2: float) -> tuple[float, float]:
    """2R forward kinematics (Lynch & Park 2017, section 4.1, from memory)."""
    return (a1 * math.cos(t1) + a2 * math.cos(t1 + t2),
            a1 * math.sin(t1) + a2 * math.sin(t1 + t2))


def planar_arm(a1: float, a2: float, lo_deg: float = -360.0, hi_deg: float = 360.0,
               ) -> "solve.Arm":
    home = min(max(0.0, lo_deg), hi_deg)  # the arm file wants the home pose within limits
    joint = dict(type="revolute", alpha=0.0, d=0.0, offset=0.0, min=lo_deg, max=hi_deg,
                 max_speed=90.0, counts_per_unit=10.0, zero=home, direction=1)
    return arm_from_mapping({"arm": {"name": "random", "geometry": "planar"},
                             "joints": [dict(joint, name="shoulder", a=a1),
                                        dict(joint, name="elbow", a=a2)]}, "random.toml")


# Link lengths of bench arms: 1 mm to 1 m, with equal links, a1 < a2 and a1 > a2.
lengths = st.floats(1.0, 1000.0, allow_nan=False)


@st.composite
def link_pairs(draw):
    kind = draw(st.sampled_from(["equal", "a1<a2", "a1>a2", "any"]))
    a1 = draw(lengths)
    if kind == "equal":
        return a1, a1
    a2 = draw(lengths)
    if kind == "a1<a2" and a2 <= a1:
        a1, a2 = a2, a1 + (a2 == a1) * 1.0
    if kind == "a1>a2" and a1 <= a2:
        a1, a2 = a2 + (a2 == a1) * 1.0, a1
    return a1, a2


# Directions: every quadrant, x < 0, behind the base (180 deg) and the four axes exactly.
AXES = {"+x": (1.0, 0.0), "+y": (0.0, 1.0), "-x": (-1.0, 0.0), "-y": (0.0, -1.0)}
directions = st.one_of(
    st.sampled_from(sorted(AXES)),
    st.floats(-math.pi, math.pi, allow_nan=False),
    st.sampled_from([math.radians(a) for a in (45.0, 135.0, -135.0, -45.0, 179.999, -179.999)]),
)
# Where in the annulus: anywhere, or next to the inner / outer boundary, or on it.
fractions = st.one_of(st.floats(0.0, 1.0), st.sampled_from([0.0, 1.0, 1e-12, 1.0 - 1e-12]))


def target_in_annulus(a1: float, a2: float, direction, fraction: float) -> tuple[float, float]:
    lo, hi = abs(a1 - a2), a1 + a2
    r = lo + fraction * (hi - lo)
    if isinstance(direction, str):
        ux, uy = AXES[direction]
        return r * ux, r * uy
    return r * math.cos(direction), r * math.sin(direction)


def elbow(a1: float, t1: float) -> np.ndarray:
    return np.array([a1 * math.cos(t1), a1 * math.sin(t1)])


def reflect_across(point: np.ndarray, direction: np.ndarray) -> np.ndarray:
    """Reflection of a point across the line through the origin along ``direction``."""
    u = direction / np.linalg.norm(direction)
    return 2.0 * float(point @ u) * u - point


@SETTINGS
@given(link_pairs(), directions, fractions)
def test_fk_of_each_raw_branch_is_the_target(links, direction, fraction):
    a1, a2 = links
    x, y = target_in_annulus(a1, a2, direction, fraction)
    solutions = planar.thetas_from_tool_xy(a1, a2, x, y)
    assert solutions, (a1, a2, x, y)
    assert len(solutions) in (1, 2)
    for t1, t2 in solutions:
        fx, fy = fk_xy(a1, a2, t1, t2)
        assert math.hypot(fx - x, fy - y) <= FK_TOL_MM


@SETTINGS
@given(link_pairs(), directions, fractions)
def test_fk_of_each_solved_branch_is_the_target(links, direction, fraction):
    a1, a2 = links
    arm = planar_arm(a1, a2)
    x, y = target_in_annulus(a1, a2, direction, fraction)
    result = solve.joints_from_tool(arm, (x, y))
    assert result.reachable and result.solutions
    for sol in result.solutions:
        fx, fy, _heading = solve.tool_from_joints(arm, sol.joints)
        assert math.hypot(fx - x, fy - y) <= FK_TOL_MM
        # and the same through the 4x4 DH chain
        dx, dy, _ = solve.tool_from_joints_dh(arm, sol.joints)
        assert math.hypot(dx - x, dy - y) <= FK_TOL_MM


@pytest.mark.parametrize("arm", [PLANAR, SCARA], ids=["planar-bench", "scara-bench"])
@SETTINGS
@given(direction=directions, fraction=fractions, z=st.floats(20.0, 140.0),
       roll=st.floats(-math.pi, math.pi))
def test_fk_of_each_branch_on_the_demo_arms(arm, direction, fraction, z, roll):
    x, y = target_in_annulus(arm.link1_mm, arm.link2_mm, direction, fraction)
    target = (x, y, z, roll) if arm.is_scara else (x, y)
    result = solve.joints_from_tool(arm, target)
    assert result.reachable and result.solutions
    for sol in result.solutions:
        pose = solve.tool_from_joints(arm, sol.joints)
        assert math.hypot(pose[0] - x, pose[1] - y) <= FK_TOL_MM
        if arm.is_scara:
            assert pose[2] == pytest.approx(z, abs=1e-9)
            assert abs(math.remainder(pose[3] - roll, TWO_PI)) <= 1e-9


@SETTINGS
@given(link_pairs(), directions, st.floats(1e-6, 1.0 - 1e-6))
def test_branches_mirror_each_other_about_the_base_to_tool_line(links, direction, fraction):
    a1, a2 = links
    x, y = target_in_annulus(a1, a2, direction, fraction)
    if math.hypot(x, y) < 1e-6:  # the origin (equal links): no base-to-tool line
        return
    solutions = planar.thetas_from_tool_xy(a1, a2, x, y)
    assert len(solutions) == 2
    (down_t1, _), (up_t1, _) = solutions
    line = np.array([x, y])
    mirrored = reflect_across(elbow(a1, down_t1), line)
    assert np.linalg.norm(mirrored - elbow(a1, up_t1)) <= 1e-9 * max(1.0, a1)


@SETTINGS
@given(link_pairs(), directions, st.floats(1e-6, 1.0 - 1e-6))
def test_elbow_down_has_j2_positive_and_elbow_up_negative(links, direction, fraction):
    # CONTRACT.md: elbow-down is the branch with j2 > 0, elbow-up the one with j2 < 0.
    a1, a2 = links
    arm = planar_arm(a1, a2, -180.0, 180.0)
    x, y = target_in_annulus(a1, a2, direction, fraction)
    result = solve.joints_from_tool(arm, (x, y))
    assert [s.branch for s in result.solutions] == [Branch.ELBOW_DOWN, Branch.ELBOW_UP]
    down, up = result.solutions
    assert down.joints[1] > 0 > up.joints[1]
    # the raw solver lists elbow-down first as well
    raw = planar.thetas_from_tool_xy(a1, a2, x, y)
    assert raw[0][1] > 0 > raw[1][1]


# -- wrapping into limits -----------------------------------------------------------

angles = st.one_of(st.floats(-4 * math.pi, 4 * math.pi),
                   st.integers(-6, 6).map(lambda k: k * math.pi),
                   st.integers(-6, 6).map(lambda k: k * math.pi / 2))
limit_ranges = st.tuples(st.floats(-2 * math.pi, 2 * math.pi),
                         st.one_of(st.floats(0.0, 3 * math.pi), st.just(TWO_PI),
                                   st.floats(0.0, 1e-3)))


def brute_force_candidates(angle: float, lo: float, hi: float) -> list[float]:
    """Every equivalent angle (angle + 2 pi k, k in -3..3) within [lo, hi]."""
    return [angle + k * TWO_PI for k in range(-3, 4) if lo <= angle + k * TWO_PI <= hi]


@settings(max_examples=400, deadline=None)
@given(angles, limit_ranges)
def test_wrap_into_limits_never_misses_an_equivalent_angle(angle, limits):
    lo, width = limits
    hi = lo + width
    wrapped = wrap_into_limits(angle, lo, hi)
    turns = (wrapped - angle) / TWO_PI
    assert abs(turns - round(turns)) <= 1e-9  # shifted by whole turns only
    candidates = brute_force_candidates(angle, lo, hi)
    if candidates:
        assert lo - LIMIT_TOL <= wrapped <= hi + LIMIT_TOL
        # among several, the one nearest the (-pi, pi] representative
        base = wrap_pi(angle)
        best = min(abs(c - base) for c in candidates)
        assert abs(wrapped - base) <= best + 1e-9
    elif not (lo - LIMIT_TOL <= wrapped <= hi + LIMIT_TOL):
        assert -math.pi < wrapped <= math.pi  # CONTRACT.md: otherwise in (-180, 180]
    array = wrap_into_limits_array(np.array([angle, 0.5, -3.0]), lo, hi)
    assert array[0] == pytest.approx(wrapped, abs=1e-12)
    assert array[1] == pytest.approx(wrap_into_limits(0.5, lo, hi), abs=1e-12)
    assert array[2] == pytest.approx(wrap_into_limits(-3.0, lo, hi), abs=1e-12)


@settings(max_examples=100, deadline=None)
@given(st.lists(angles, min_size=1, max_size=50), limit_ranges)
def test_wrap_array_matches_scalar_element_by_element(values, limits):
    lo, width = limits
    array = wrap_into_limits_array(np.array(values), lo, lo + width)
    expected = [wrap_into_limits(v, lo, lo + width) for v in values]
    assert array.tolist() == pytest.approx(expected, abs=1e-12)


def test_wrap_into_limits_examples_from_the_contract():
    # CONTRACT.md: the equivalent angle within the limits whenever one does.
    deg = math.radians
    assert math.degrees(wrap_into_limits(deg(-170.0), 0.0, deg(200.0))) == pytest.approx(190.0)
    assert math.degrees(wrap_into_limits(deg(350.0), deg(-150.0), deg(150.0))) == \
        pytest.approx(-10.0)
    # no equivalent within [-150, 150]: the (-180, 180] representative
    assert math.degrees(wrap_into_limits(deg(-200.0), deg(-150.0), deg(150.0))) == \
        pytest.approx(160.0)


# -- batch against scalar -----------------------------------------------------------

@st.composite
def target_lists(draw, a1: float, a2: float, extra_dims: int = 0):
    """Targets in the annulus, on both boundaries, just outside, at the origin."""
    lo, hi = abs(a1 - a2), a1 + a2
    out = []
    for _ in range(draw(st.integers(1, 12))):
        kind = draw(st.sampled_from(["inside", "max", "min", "beyond", "short", "origin"]))
        phi = draw(st.floats(-math.pi, math.pi))
        r = {"inside": lo + draw(st.floats(0.0, 1.0)) * (hi - lo), "max": hi, "min": lo,
             "beyond": hi * (1.0 + draw(st.floats(1e-9, 1.0))),
             "short": lo * draw(st.floats(0.0, 1.0 - 1e-9)), "origin": 0.0}[kind]
        row = [r * math.cos(phi), r * math.sin(phi)]
        if extra_dims:
            row += [draw(st.floats(-50.0, 200.0)), draw(st.floats(-7.0, 7.0))]
        out.append(row)
    return np.array(out)


def assert_batch_matches_scalar(arm, targets: np.ndarray) -> None:
    batch = solve.joints_from_tool_batch(arm, targets)
    assert batch.joints.shape == (2, len(targets), arm.n_joints)
    for i, target in enumerate(targets):
        result = solve.joints_from_tool(arm, tuple(target))
        assert bool(batch.reachable[i]) == result.reachable
        if not result.reachable:
            assert np.isnan(batch.joints[:, i]).all()
            assert not batch.within_limits[:, i].any()
            continue
        assert bool(batch.singular[i]) == (len(result.solutions) == 1)
        for sol in result.solutions:
            rows = (0, 1) if len(result.solutions) == 1 else \
                ((0,) if sol.branch is Branch.ELBOW_DOWN else (1,))
            for row in rows:
                assert batch.joints[row, i].tolist() == pytest.approx(sol.joints, abs=1e-12)
                in_limits = not any("passes its" in p for p in sol.problems)
                assert bool(batch.within_limits[row, i]) == in_limits


@SETTINGS
@given(st.data())
def test_batch_matches_scalar_on_random_arms(data):
    a1, a2 = data.draw(link_pairs())
    lo = data.draw(st.floats(-360.0, 300.0))
    arm = planar_arm(a1, a2, lo, lo + data.draw(st.floats(1e-3, 420.0)))
    assert_batch_matches_scalar(arm, data.draw(target_lists(a1, a2)))


@pytest.mark.parametrize("arm", [PLANAR, SCARA], ids=["planar-bench", "scara-bench"])
@SETTINGS
@given(data=st.data())
def test_batch_matches_scalar_on_the_demo_arms(arm, data):
    targets = data.draw(target_lists(arm.link1_mm, arm.link2_mm, 2 if arm.is_scara else 0))
    assert_batch_matches_scalar(arm, targets)


def test_batch_handles_many_targets_across_blocks():
    # more targets than one block of the batch solver, including NaN rows
    rng = np.random.default_rng(7)
    n = planar.BATCH_CHUNK * 2 + 17
    targets = rng.uniform(-400.0, 400.0, size=(n, 2))
    targets[5] = np.nan
    batch = solve.joints_from_tool_batch(PLANAR, targets)
    picks = [0, 5, planar.BATCH_CHUNK - 1, planar.BATCH_CHUNK, n - 1]
    assert_batch_matches_scalar(PLANAR, targets[[p for p in picks if p != 5]])
    assert not batch.reachable[5]
    reach = batch.reachable
    for row in (0, 1):
        fx = PLANAR.link1_mm * np.cos(batch.joints[row, reach, 0]) + PLANAR.link2_mm * np.cos(
            batch.joints[row, reach, 0] + batch.joints[row, reach, 1])
        fy = PLANAR.link1_mm * np.sin(batch.joints[row, reach, 0]) + PLANAR.link2_mm * np.sin(
            batch.joints[row, reach, 0] + batch.joints[row, reach, 1])
        err = np.hypot(fx - targets[reach, 0], fy - targets[reach, 1])
        assert float(err.max()) <= FK_TOL_MM
    r = np.hypot(targets[:, 0], targets[:, 1])
    expected_reach = (r <= PLANAR.max_reach_mm) & (r >= PLANAR.min_reach_mm)
    assert (reach == expected_reach).all()
