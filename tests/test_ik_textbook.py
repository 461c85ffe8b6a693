"""The two-link closed form and the SCARA table as the textbooks give them.

Sources (all from memory):
- Spong, Hutchinson & Vidyasagar, "Robot Modeling and Control" (2006), section 5.3
  (inverse kinematics of the planar elbow arm): D = cos t2 = (x^2 + y^2 - a1^2 - a2^2) /
  (2 a1 a2), t2 = atan2(+-sqrt(1 - D^2), D), t1 = atan2(y, x) - atan2(a2 sin t2,
  a1 + a2 cos t2); and example 3.3.5 (the SCARA DH table and its T_0^4).
- Lynch & Park, "Modern Robotics" (2017), section 6.1 (the same 2R closed form) and
  section 5.1 (the 2R Jacobian, whose determinant is a1 a2 sin t2).
The formulas are written out again here, independently of kinematics/planar.py.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from benchjog.console.cell.armfile import builtin_arm
from benchjog.kinematics import planar, solve
from benchjog.kinematics.dh import tool_transform
from benchjog.kinematics.model import Branch

deg = math.radians


def textbook_ik(a1, a2, x, y):
    """Spong et al. (2006) section 5.3, from memory: (t1, t2) per branch, elbow-down
    (sin t2 > 0) first. Uses the *signed* sin t2 in the shoulder correction."""
    d = (x * x + y * y - a1 * a1 - a2 * a2) / (2 * a1 * a2)
    out = []
    for sign in (1.0, -1.0):
        t2 = math.atan2(sign * math.sqrt(1 - d * d), d)
        t1 = math.atan2(y, x) - math.atan2(a2 * math.sin(t2), a1 + a2 * math.cos(t2))
        out.append((t1, t2))
    return out


def same_angle(a, b, tol=1e-9):
    return abs(math.remainder(a - b, 2 * math.pi)) <= tol


# Hand-computed cases. Each comment is the arithmetic done by hand.
HAND_CASES = [
    # a 3-4-5 triangle: a1 = 300, a2 = 400, target (500, 0): 500^2 = 300^2 + 400^2, so
    # D = 0 and t2 = +-90 deg; correction atan2(+-400, 300) = +-53.130102 deg
    # (tan = 4/3); t1 = 0 -+ 53.130102. Check: elbow (180, -240), tool = elbow +
    # 400 (cos 36.87, sin 36.87) = (180 + 320, -240 + 240) = (500, 0).
    (300.0, 400.0, 500.0, 0.0, (-53.130102354, 90.0), (53.130102354, -90.0)),
    # the 3-4-5 triangle again, behind the base: target (-500, 0): gamma = 180 deg,
    # t1 = 180 -+ 53.130102 = 126.869898 / 233.130102 (= -126.869898).
    (300.0, 400.0, -500.0, 0.0, (126.869897646, 90.0), (-126.869897646, -90.0)),
    # STYLE.md's example: a1 = 250, a2 = 150, target (250, 150): r^2 = 85000,
    # D = (85000 - 62500 - 22500) / 75000 = 0 -> t2 = +-90; correction
    # atan2(+-150, 250) = +-30.963757 (tan = 0.6); gamma = atan2(150, 250) = 30.963757:
    # elbow-down t1 = 0, elbow-up t1 = 61.927513.
    (250.0, 150.0, 250.0, 150.0, (0.0, 90.0), (61.927513064, -90.0)),
    # equal links 100/100, target (100, 100): D = (20000 - 20000) / 20000 = 0,
    # gamma = 45, correction atan2(+-100, 100) = +-45: (0, 90) and (90, -90).
    (100.0, 100.0, 100.0, 100.0, (0.0, 90.0), (90.0, -90.0)),
    # equal links, third quadrant (-100, -100): gamma = -135: (-180, 90), (-90, -90).
    (100.0, 100.0, -100.0, -100.0, (-180.0, 90.0), (-90.0, -90.0)),
    # a1 = 100, a2 = 100, target on the y axis at r = 100 sqrt(3) = 173.205081:
    # D = (30000 - 20000) / 20000 = 0.5 -> t2 = +-60; correction
    # atan2(+-100 sin 60, 100 + 100 cos 60) = atan2(+-86.6, 150) = +-30; gamma = 90:
    # (60, 60) and (120, -60).
    (100.0, 100.0, 0.0, 100.0 * math.sqrt(3.0), (60.0, 60.0), (120.0, -60.0)),
    # a1 = 100 < a2 = 200, target (0, -300) fully stretched along -y is a boundary;
    # inside instead: target (0, -200): D = (40000 - 10000 - 40000) / 40000 = -0.25,
    # t2 = +-104.477512 (acos(-0.25)); correction atan2(+-200 sin t2, 100 - 50)
    # = atan2(+-193.649167, 50) = +-75.522488; gamma = -90: (-165.522488, 104.477512)
    # and (-14.477512, -104.477512).
    (100.0, 200.0, 0.0, -200.0, (-165.522487814, 104.477512186),
     (-14.477512186, -104.477512186)),
]


@pytest.mark.parametrize("a1,a2,x,y,down,up", HAND_CASES)
def test_hand_computed_two_link_solutions(a1, a2, x, y, down, up):
    solutions = planar.thetas_from_tool_xy(a1, a2, x, y)
    assert len(solutions) == 2
    for (t1, t2), (e1, e2) in zip(solutions, (down, up)):
        assert same_angle(t1, deg(e1), 1e-10) and same_angle(t2, deg(e2), 1e-10)
    # and the textbook formula written out in this file gives the same numbers
    for (t1, t2), (e1, e2) in zip(textbook_ik(a1, a2, x, y), (down, up)):
        assert same_angle(t1, deg(e1), 1e-10) and same_angle(t2, deg(e2), 1e-10)


def test_elbow_up_shoulder_uses_the_signed_sine():
    """The classic sign trap: forming the shoulder correction from |sin t2| on both
    branches gives elbow-up the elbow-down shoulder. 3-4-5 arm at (500, 0): the correct
    elbow-up shoulder is +53.13 deg; the |sin| formula would give -53.13 deg."""
    a1, a2, x, y = 300.0, 400.0, 500.0, 0.0
    down, up = planar.thetas_from_tool_xy(a1, a2, x, y)
    wrong_up_t1 = math.atan2(y, x) - math.atan2(a2 * abs(math.sin(up[1])), a1 + a2 * math.cos(up[1]))
    assert math.degrees(wrong_up_t1) == pytest.approx(-53.130102354, abs=1e-6)
    assert math.degrees(up[0]) == pytest.approx(53.130102354, abs=1e-9)
    assert abs(math.remainder(up[0] - wrong_up_t1, 2 * math.pi)) > deg(100.0)
    # and through the solver front with the demo arm (a1 = 220, a2 = 160) at (200, 200):
    arm = builtin_arm("planar-bench")
    result = solve.joints_from_tool(arm, (200.0, 200.0))
    e_down, e_up = textbook_ik(220.0, 160.0, 200.0, 200.0)
    up_sol = result.solution(Branch.ELBOW_UP)
    assert same_angle(up_sol.joints[0], e_up[0]) and same_angle(up_sol.joints[1], e_up[1])
    bad = math.atan2(200.0, 200.0) - math.atan2(160.0 * abs(math.sin(e_up[1])),
                                                 220.0 + 160.0 * math.cos(e_up[1]))
    assert not same_angle(up_sol.joints[0], bad, 1e-3)


def test_closed_form_matches_the_textbook_formula_on_random_targets():
    rng = np.random.default_rng(21)
    for _ in range(2000):
        a1, a2 = rng.uniform(5.0, 800.0, 2)
        d = rng.uniform(-0.99, 0.99)  # away from the boundaries, where 1 - D^2 loses digits
        r = math.sqrt(a1 * a1 + a2 * a2 + 2 * a1 * a2 * d)
        phi = rng.uniform(-math.pi, math.pi)
        x, y = r * math.cos(phi), r * math.sin(phi)
        for (t1, t2), (e1, e2) in zip(planar.thetas_from_tool_xy(a1, a2, x, y),
                                      textbook_ik(a1, a2, x, y)):
            assert same_angle(t1, e1, 1e-8) and same_angle(t2, e2, 1e-8)


def spong_scara_t04(a1, a2, d1, d3, d4, t1, t2, t4):
    """T_0^4 of the SCARA, Spong et al. (2006) example 3.3.5 (from memory), with the
    base height d1 added to z:
        [[c12 c4 + s12 s4, -c12 s4 + s12 c4,  0, a1 c1 + a2 c12],
         [s12 c4 - c12 s4, -s12 s4 - c12 c4,  0, a1 s1 + a2 s12],
         [0,               0,                -1, d1 - d3 - d4  ],
         [0,               0,                 0, 1             ]]"""
    c1, s1 = math.cos(t1), math.sin(t1)
    c12, s12 = math.cos(t1 + t2), math.sin(t1 + t2)
    c4, s4 = math.cos(t4), math.sin(t4)
    return np.array([[c12 * c4 + s12 * s4, -c12 * s4 + s12 * c4, 0.0, a1 * c1 + a2 * c12],
                     [s12 * c4 - c12 * s4, -s12 * s4 - c12 * c4, 0.0, a1 * s1 + a2 * s12],
                     [0.0, 0.0, -1.0, d1 - d3 - d4],
                     [0.0, 0.0, 0.0, 1.0]])


def test_scara_fk_at_a_hand_computed_pose():
    """scara-bench: a1 = 200, a2 = 150, d1 = 180, d4 = 40. Pose j1 = 30, j2 = 60 deg,
    quill 50 mm, roll 45 deg, by hand: x = 200 cos 30 + 150 cos 90 = 173.205081,
    y = 200 sin 30 + 150 sin 90 = 250, z = 180 - 50 - 40 = 90, heading = 30 + 60 - 45
    = 45 deg (the roll turns clockwise seen from above)."""
    arm = builtin_arm("scara-bench")
    values = (deg(30.0), deg(60.0), 50.0, deg(45.0))
    expected = (173.205080757, 250.0, 90.0, deg(45.0))
    for pose in (solve.tool_from_joints(arm, values), solve.tool_from_joints_dh(arm, values)):
        assert pose[:3] == pytest.approx(expected[:3], abs=1e-9)
        assert same_angle(pose[3], expected[3])
    np.testing.assert_allclose(
        tool_transform(arm, values),
        spong_scara_t04(200.0, 150.0, 180.0, 50.0, 40.0, deg(30.0), deg(60.0), deg(45.0)),
        atol=1e-9)


def test_scara_dh_chain_matches_the_textbook_t04_on_random_poses():
    arm = builtin_arm("scara-bench")
    rng = np.random.default_rng(4)
    for _ in range(200):
        t1, t2, t4 = rng.uniform(-math.pi, math.pi, 3)
        q3 = rng.uniform(0.0, 120.0)
        np.testing.assert_allclose(tool_transform(arm, (t1, t2, q3, t4)),
                                   spong_scara_t04(200.0, 150.0, 180.0, q3, 40.0, t1, t2, t4),
                                   atol=1e-9)


def test_jacobian_determinant_is_a1_a2_sin_t2():
    # Lynch & Park (2017) section 5.1 (from memory): det J = a1 a2 sin t2.
    rng = np.random.default_rng(8)
    for _ in range(500):
        a1, a2 = rng.uniform(1.0, 1000.0, 2)
        t1, t2 = rng.uniform(-math.pi, math.pi, 2)
        det = float(np.linalg.det(planar.jacobian(a1, a2, t1, t2)))
        assert det == pytest.approx(a1 * a2 * math.sin(t2), abs=1e-9 * a1 * a2)
        assert planar.manipulability(a1, a2, t2) == pytest.approx(abs(det), abs=1e-9 * a1 * a2)
    # hand value: a1 = 300, a2 = 200, t2 = 30 deg: 300 * 200 * 0.5 = 30000 mm^2
    assert np.linalg.det(planar.jacobian(300.0, 200.0, 0.3, deg(30.0))) == pytest.approx(30000.0)


@pytest.mark.parametrize("name", ["planar-bench", "scara-bench"])
def test_jacobian_against_central_finite_difference_of_fk(name):
    # Central difference (f(q + h) - f(q - h)) / 2h, error O(h^2) (standard numerical
    # analysis, from memory); h = 1e-6 gives ~1e-7 absolute on mm-scale values.
    arm = builtin_arm(name)
    rng = np.random.default_rng(2)
    h = 1e-6
    for _ in range(100):
        q = np.array([rng.uniform(-math.pi, math.pi) if j.is_revolute else rng.uniform(0, 100)
                      for j in arm.joints])
        numeric = np.empty((len(q), len(q)) if arm.is_scara else (3, 2))
        for k in range(len(q)):
            step = np.zeros(len(q))
            step[k] = h
            plus = np.array(solve.tool_from_joints(arm, q + step))
            minus = np.array(solve.tool_from_joints(arm, q - step))
            numeric[:, k] = (plus - minus) / (2 * h)
        np.testing.assert_allclose(solve.jacobian(arm, q), numeric, atol=1e-5, rtol=0)
