"""Our FK, IK and Jacobian against modern_robotics (Lynch & Park, "Modern Robotics",
2017, the PyPI package ``modern_robotics``), a product-of-exponentials implementation
that shares no code and no convention with our DH chain.

The screw axes and home configurations are built here from the arm geometry in the
space frame (Lynch & Park, section 4.1: S = (w, -w x q) for a revolute joint through q,
S = (0, v) for a prismatic one), not from kinematics/dh.py.
"""

from __future__ import annotations

import math

import modern_robotics as mr
import numpy as np
import pytest

from benchjog.console.cell.armfile import builtin_arm
from benchjog.kinematics import solve
from benchjog.kinematics.armspec import arm_from_mapping
from benchjog.kinematics.model import Branch

PLANAR = builtin_arm("planar-bench")
SCARA = builtin_arm("scara-bench")


def revolute_screw(axis, point) -> np.ndarray:
    w = np.asarray(axis, dtype=float)
    return np.concatenate([w, -np.cross(w, np.asarray(point, dtype=float))])


def rz(angle: float) -> np.ndarray:
    c, s = math.cos(angle), math.sin(angle)
    return np.array([[c, -s, 0.0], [s, c, 0.0], [0.0, 0.0, 1.0]])


def transform(rotation: np.ndarray, position) -> np.ndarray:
    t = np.eye(4)
    t[:3, :3] = rotation
    t[:3, 3] = position
    return t


def planar_screws(arm) -> tuple[np.ndarray, np.ndarray]:
    """Home (both thetas 0): the links along base x, the tool at (a1 + a2, 0, 0) with
    the base's orientation; both joint axes vertical (+z), the elbow's through (a1, 0)."""
    a1, a2 = arm.link1_mm, arm.link2_mm
    slist = np.column_stack([revolute_screw([0, 0, 1], [0, 0, 0]),
                             revolute_screw([0, 0, 1], [a1, 0, 0])])
    return transform(np.eye(3), [a1 + a2, 0.0, 0.0]), slist


def scara_screws(arm) -> tuple[np.ndarray, np.ndarray]:
    """Home (thetas 0, quill 0): links along base x at the base height; the tool points
    down (x along base x, z down), its tip at the flange height minus the quill's fixed
    d and the tool length. The quill slides along -z (+value lowers the tool) and the roll
    axis points down through the tool, so a positive roll turns clockwise seen from
    above (kinematics/scara.py)."""
    j1, j2, j3, j4 = arm.joints
    a1, a2 = j1.a_mm, j2.a_mm
    assert j3.offset_rad == 0.0
    z_tip = j1.d_mm + j2.d_mm - j3.d_mm - j4.d_mm
    tool_down = np.diag([1.0, -1.0, -1.0])
    slist = np.column_stack([revolute_screw([0, 0, 1], [0, 0, 0]),
                             revolute_screw([0, 0, 1], [a1, 0, 0]),
                             np.array([0, 0, 0, 0, 0, -1.0]),
                             revolute_screw([0, 0, -1], [a1 + a2, 0, 0])])
    return transform(tool_down, [a1 + a2, 0.0, z_tip]), slist


def custom_scara(offsets_deg=(10.0, -20.0, 0.0, 30.0), d=(150.0, 25.0, 5.0, 60.0)):
    joints = []
    for i, (name, jtype, a, alpha) in enumerate([("j1", "revolute", 320.0, 0.0),
                                                ("j2", "revolute", 180.0, 180.0),
                                                ("quill", "prismatic", 0.0, 0.0),
                                                ("roll", "revolute", 0.0, 0.0)]):
        joints.append(dict(name=name, type=jtype, a=a, alpha=alpha, d=d[i],
                           offset=offsets_deg[i], min=-170.0 if jtype == "revolute" else 0.0,
                           max=170.0 if jtype == "revolute" else 200.0, max_speed=50.0,
                           counts_per_unit=10.0, zero=0.0, direction=1))
    return arm_from_mapping({"arm": {"name": "custom", "geometry": "scara"}, "joints": joints},
                            "custom.toml")


def custom_planar():
    joint = dict(type="revolute", alpha=0.0, d=0.0, min=-170.0, max=170.0, max_speed=50.0,
                 counts_per_unit=10.0, zero=0.0, direction=1)
    return arm_from_mapping({"arm": {"name": "custom", "geometry": "planar"},
                             "joints": [dict(joint, name="s", a=125.0, offset=15.0),
                                        dict(joint, name="e", a=310.0, offset=-40.0)]},
                            "custom.toml")


ARMS = {"planar-bench": PLANAR, "scara-bench": SCARA, "custom-planar": custom_planar(),
        "custom-scara": custom_scara()}


def screws(arm):
    return scara_screws(arm) if arm.is_scara else planar_screws(arm)


def mr_thetas(arm, values) -> np.ndarray:
    """Our joint values to the screw coordinates: revolute theta = value + offset, the
    quill's travel is the value itself."""
    return np.array([v + j.offset_rad if j.is_revolute else v
                     for j, v in zip(arm.joints, values)])


def pose_of(arm, t: np.ndarray) -> tuple[float, ...]:
    x, y, z = t[:3, 3]
    heading = math.atan2(t[1, 0], t[0, 0])
    return (x, y, z, heading) if arm.is_scara else (x, y, heading)


def random_values(arm, rng) -> list[float]:
    return [rng.uniform(-math.pi, math.pi) if j.is_revolute else rng.uniform(j.min, j.max)
            for j in arm.joints]


def assert_same_pose(arm, ours, theirs, tol=1e-9):
    n = len(ours)
    for i in range(n):
        if i == n - 1:  # heading / roll, compared modulo a turn
            assert abs(math.remainder(ours[i] - theirs[i], 2 * math.pi)) <= tol
        else:
            assert ours[i] == pytest.approx(theirs[i], abs=tol)


@pytest.mark.parametrize("name", sorted(ARMS))
def test_fk_agrees_with_modern_robotics_fkinspace(name):
    arm = ARMS[name]
    m, slist = screws(arm)
    rng = np.random.default_rng(11)
    for _ in range(200):
        values = random_values(arm, rng)
        reference = mr.FKinSpace(m, slist, mr_thetas(arm, values))  # reference: modern_robotics FKinSpace
        if not arm.is_scara:
            assert reference[2, 3] == pytest.approx(0.0, abs=1e-9)
        expected = pose_of(arm, reference)
        assert_same_pose(arm, solve.tool_from_joints_dh(arm, values), expected)
        assert_same_pose(arm, solve.tool_from_joints(arm, values), expected)


def test_dh_chain_full_transform_matches_fkinspace_on_scara():
    # the whole 4x4, rotation included (the tool points down), not only the pose
    from benchjog.kinematics.dh import tool_transform
    arm = ARMS["custom-scara"]
    m, slist = screws(arm)
    rng = np.random.default_rng(5)
    for _ in range(50):
        values = random_values(arm, rng)
        np.testing.assert_allclose(tool_transform(arm, values),
                                   mr.FKinSpace(m, slist, mr_thetas(arm, values)),  # reference: modern_robotics FKinSpace
                                   atol=1e-9)


def target_transform(arm, target, heading) -> np.ndarray:
    """The 6-DOF target for IKinSpace. Planar: position (x, y, 0), rotation about z by
    the branch's heading t1 + t2 (a 2R arm has one heading per branch). SCARA: position
    (x, y, z), the tool pointing down with its x axis at the roll angle."""
    if arm.is_scara:
        x, y, z, roll = target
        return transform(rz(roll) @ np.diag([1.0, -1.0, -1.0]), [x, y, z])
    return transform(rz(heading), [target[0], target[1], 0.0])


def reachable_targets(arm, rng, count):
    lo, hi = arm.min_reach_mm, arm.max_reach_mm
    out = []
    while len(out) < count:
        r = rng.uniform(lo + 0.05 * (hi - lo), hi - 0.05 * (hi - lo))
        phi = rng.uniform(-math.pi, math.pi)
        target = [r * math.cos(phi), r * math.sin(phi)]
        if arm.is_scara:
            j3 = arm.joints[2]
            from benchjog.kinematics.scara import quill_from_z
            z_top = quill_from_z(arm, 0.0)  # the z at quill 0
            target += [z_top - rng.uniform(j3.min, j3.max), rng.uniform(-math.pi, math.pi)]
        out.append(tuple(target))
    return out


@pytest.mark.parametrize("name", sorted(ARMS))
def test_newton_raphson_ikinspace_converges_to_our_analytic_branches(name):
    """Lynch & Park section 6.2: IKinSpace (Newton-Raphson) started a few degrees from
    our answer must land on our answer, for each branch.

    Limitation: for the planar arm the 6-D twist error has only three live rows (x, y and
    the rotation about z), so mr's pseudo-inverse step works in a rank-2 Jacobian; it
    converges from a nearby, well-conditioned initial guess, which is what we give it (targets
    keep 5 % of the annulus away from the singular boundaries)."""
    arm = ARMS[name]
    m, slist = screws(arm)
    rng = np.random.default_rng(3)
    checked = 0
    for target in reachable_targets(arm, rng, 25):
        result = solve.joints_from_tool(arm, target)
        assert len(result.solutions) == 2
        for sol in result.solutions:
            ours = mr_thetas(arm, sol.joints)
            heading = solve.tool_from_joints(arm, sol.joints)[-1]
            t_goal = target_transform(arm, target, heading)
            guess = ours + np.array([rng.uniform(-3, 3) * math.pi / 180 if j.is_revolute
                                    else rng.uniform(-2, 2) for j in arm.joints])
            theta, ok = mr.IKinSpace(slist, m, t_goal, guess, 1e-10, 1e-8)  # reference: modern_robotics IKinSpace
            assert ok, (name, target, sol.branch)
            for i, joint in enumerate(arm.joints):
                if joint.is_revolute:
                    assert abs(math.remainder(theta[i] - ours[i], 2 * math.pi)) <= 1e-7
                else:
                    assert theta[i] == pytest.approx(ours[i], abs=1e-6)
            reached = mr.FKinSpace(m, slist, theta)[:3, 3]
            assert np.linalg.norm(reached[:2] - np.array(target[:2])) <= 1e-6
            checked += 1
    assert checked == 50


def test_ikinspace_started_near_the_other_branch_finds_the_other_branch():
    # The two branches are distinct solutions: starting near elbow-up does not come back
    # to elbow-down (a wrong elbow-up shoulder would fail here).
    arm = PLANAR
    m, slist = screws(arm)
    target = (150.0, 200.0)
    result = solve.joints_from_tool(arm, target)
    down, up = result.solution(Branch.ELBOW_DOWN), result.solution(Branch.ELBOW_UP)
    for sol in (down, up):
        heading = solve.tool_from_joints(arm, sol.joints)[-1]
        theta, ok = mr.IKinSpace(slist, m, target_transform(arm, target, heading),  # reference: modern_robotics IKinSpace
                                 np.array(sol.joints) + math.radians(2.0), 1e-10, 1e-8)
        assert ok
        assert np.allclose([math.remainder(t - s, 2 * math.pi) for t, s in zip(theta, sol.joints)],
                           0.0, atol=1e-7)
    assert abs(down.joints[0] - up.joints[0]) > math.radians(10.0)


def tip_jacobian(arm, values) -> np.ndarray:
    """Rows (x, y[, z], heading) from mr's space Jacobian: the tool-tip velocity is
    v_s + w_s x p (Lynch & Park, section 5.1), the heading rate is w_z."""
    m, slist = screws(arm)
    thetas = mr_thetas(arm, values)
    js = mr.JacobianSpace(slist, thetas)  # reference: modern_robotics JacobianSpace
    p = mr.FKinSpace(m, slist, thetas)[:3, 3]
    v_tip = js[3:] + np.cross(js[:3].T, p).T
    rows = [v_tip[0], v_tip[1]] + ([v_tip[2]] if arm.is_scara else []) + [js[2]]
    return np.array(rows)


@pytest.mark.parametrize("name", sorted(ARMS))
def test_analytic_jacobian_agrees_with_modern_robotics_jacobianspace(name):
    arm = ARMS[name]
    rng = np.random.default_rng(9)
    for _ in range(100):
        values = random_values(arm, rng)
        np.testing.assert_allclose(solve.jacobian(arm, values), tip_jacobian(arm, values),
                                   atol=1e-9, rtol=0)


@pytest.mark.parametrize("name", ["planar-bench", "scara-bench"])
def test_plan_summaries_state_the_heading_as_the_rotation_gives_it(name):
    # A move whose joint sum passes 180 deg: the plan's words and JSON give the end
    # heading (SCARA: roll) in (-180, 180], the angle modern_robotics' FKinSpace rotation
    # gives through atan2, the same figure the console's pose panel shows.
    from benchjog.kinematics.planner import plan_joint_move

    arm = ARMS[name]
    end = [math.radians(87.7), math.radians(99.4)] + [0.0] * (arm.n_joints - 2)
    m, slist = screws(arm)
    expected = math.degrees(pose_of(arm, mr.FKinSpace(m, slist, mr_thetas(arm, end)))[-1])
    plan = plan_joint_move(arm, [0.0] * arm.n_joints, end, speed_pct=50.0)  # reference: modern_robotics FKinSpace
    assert -180.0 < expected <= 180.0
    shown = plan.summary.to_dict(arm)["end_tool"][-1]
    assert shown == pytest.approx(expected, abs=1e-9)
    word = "roll" if arm.is_scara else "heading"
    assert f"{word} {expected:.2f} deg" in "\n".join(plan.summary.lines(arm))


@pytest.mark.parametrize("name", sorted(ARMS))
def test_numpy_free_accuracy_agrees_with_jacobianspace_and_lapack_svd(name):
    # kinematics/accuracy.py works without numpy (solve starts without it): its position
    # rows against modern_robotics' JacobianSpace, its 2x2 singular values and condition
    # number against numpy.linalg.svd (LAPACK), its steps per count against column norms.
    from benchjog.kinematics import accuracy

    arm = ARMS[name]
    rng = np.random.default_rng(11)
    rows_ref = 3 if arm.is_scara else 2
    for i in range(200):
        values = random_values(arm, rng)
        if i < 4:  # stretched and folded elbows, exactly and near (not nearer than 1e-6
            # rad: modern_robotics' NearZero takes smaller angles for zero)
            values[1] = [0.0, math.pi, 1e-5, math.pi - 1e-5][i] - arm.joints[1].offset_rad
        ref = tip_jacobian(arm, values)[:rows_ref]
        rows = np.array(accuracy.position_jacobian_rows(arm, values))
        np.testing.assert_allclose(rows, ref, atol=1e-9, rtol=0)
        s_ref = np.linalg.svd(ref[:2, :2], compute_uv=False)
        s = accuracy.singular_values_2x2(*rows[0, :2], *rows[1, :2])
        assert s[0] == pytest.approx(s_ref[0], rel=1e-12)
        assert s[1] == pytest.approx(s_ref[1], rel=1e-6, abs=1e-9 * s_ref[0])
        cond, _ = accuracy.task_conditioning(arm, values)
        if s_ref[1] > 1e-6 * s_ref[0]:
            assert cond == pytest.approx(s_ref[0] / s_ref[1], rel=1e-6)
        else:
            assert cond > 1e5
        per_count = [j.from_display(1.0 / j.counts_per_unit) for j in arm.joints]
        expected = np.linalg.norm(ref, axis=0) * per_count[:ref.shape[1]]
        np.testing.assert_allclose(accuracy.steps_per_count_mm(arm, values), expected,
                                   rtol=1e-12, atol=1e-15)


def test_singular_values_2x2_against_lapack_on_random_matrices():
    # reference: numpy.linalg.svd (LAPACK); matrices of any shape of conditioning
    from benchjog.kinematics.accuracy import singular_values_2x2

    rng = np.random.default_rng(12)
    for _ in range(2000):
        m = rng.normal(size=(2, 2)) * 10.0 ** rng.uniform(-3, 3)
        s_ref = np.linalg.svd(m, compute_uv=False)
        s = singular_values_2x2(*m.ravel())
        assert s[0] == pytest.approx(s_ref[0], rel=1e-13)
        assert s[1] == pytest.approx(s_ref[1], rel=1e-9, abs=1e-14 * s_ref[0])
    assert singular_values_2x2(0.0, 0.0, 0.0, 0.0) == (0.0, 0.0)
    assert singular_values_2x2(1.0, 2.0, 2.0, 4.0)[1] == 0.0   # rank one, exactly
