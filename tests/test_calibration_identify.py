"""Kinematic identification (kinematics/identify.py) against synthetic arms with known
errors, an outside reference chain (modern_robotics), and Monte Carlo checks.

No worked numerical example from the calibration literature is checked here: none is
known to us with its numbers reliably (from memory); the independent reference is the
product-of-exponentials forward kinematics of modern_robotics on the corrected chain.
"""

from __future__ import annotations

import math

import modern_robotics as mr
import numpy as np
import pytest

from benchjog.console.cell.armfile import builtin_arm
from benchjog.drivers.calibration import joint_from_counts
from benchjog.kinematics import identify as I
from benchjog.kinematics.solve import tool_from_joints

ARMS = ("planar-bench", "scara-bench")


def true_vector(arm, rng=None):
    """A deliberately wrong arm file: the 'true' arm differs by these amounts."""
    keys = [p.key for p in I.params_of(arm)]
    v = I.nominal_vector(arm)
    j = arm.joints
    v[keys.index(f"{j[0].name}.a")] += 1.6
    v[keys.index(f"{j[1].name}.a")] -= 0.9
    v[keys.index(f"{j[0].name}.zero")] += math.radians(0.8)
    v[keys.index(f"{j[1].name}.zero")] -= math.radians(0.5)
    v[keys.index("base.x")] = -260.0
    v[keys.index("base.y")] = 40.0
    if arm.is_scara:
        v[keys.index(f"{j[2].name}.zero")] += 0.7
        v[keys.index("base.z")] = 0.0
    return v


def random_poses(arm, n, rng):
    rows = []
    for i in range(n):
        t1 = rng.uniform(-2.0, 2.0)
        t2 = rng.uniform(0.4, 2.4) * (1 if i % 2 else -1)   # both branches, off the singular poses
        row = [t1, t2]
        if arm.is_scara:
            row += [rng.uniform(10.0, 100.0), rng.uniform(-1.0, 1.0)]
        rows.append(row)
    return np.array(rows)


def synthetic_touches(arm, truth, joints, noise_mm, rng):
    holes = I.plate_points_mm(arm, I.params_of(arm), truth, joints)
    holes = holes + rng.normal(0.0, noise_mm, holes.shape) if noise_mm else holes
    return [I.Touch(tuple(h), tuple(q), f"h{i}") for i, (h, q) in enumerate(zip(holes, joints))]


def fitted_truth(arm, truth):
    """The truth in the fitted parameters' terms: the base's yaw (and z) lumped into
    the first joint's (and the quill's) zero, as the method documents."""
    keys = [p.key for p in I.params_of(arm)]
    return {k: truth[keys.index(k)] for k in keys if k not in I.lumped_of(arm)}


@pytest.mark.parametrize("name", ARMS)
@pytest.mark.parametrize("seed", [1, 2, 3])
def test_noiseless_touches_recover_the_true_arm_to_1e_6(name, seed):
    arm = builtin_arm(name)
    rng = np.random.default_rng(seed)
    truth = true_vector(arm)
    result = I.identify(arm, synthetic_touches(arm, truth, random_poses(arm, 10, rng), 0.0, rng))
    keys = [p.key for p in I.params_of(arm)]
    for key, value in fitted_truth(arm, truth).items():
        assert abs(result.vector[keys.index(key)] - value) < 1e-6, key
    assert result.residuals_after_mm.max() < 1e-6
    assert result.residuals_before_mm.max() > 0.5   # the arm file really was wrong


@pytest.mark.parametrize("name", ARMS)
def test_noisy_touches_recover_within_three_standard_errors(name):
    """Over several seeds the estimates lie within 3 reported standard errors of the
    truth: a 3-sigma band misses 0.27 % of the time for a normal estimate (a fact of the
    normal distribution; a little more for Student's t with ~30 degrees of freedom), so
    over ~40 estimates at most one miss is allowed and none beyond 5 sigma. The
    residual sigma matches the simulated noise."""
    arm = builtin_arm(name)
    truth = true_vector(arm)
    noise = 0.05
    sigmas, z_scores = [], []
    for seed in range(6):
        rng = np.random.default_rng(100 + seed)
        result = I.identify(arm, synthetic_touches(arm, truth, random_poses(arm, 16, rng), noise, rng))
        want = fitted_truth(arm, truth)
        for est, p in zip(result.estimates, result.params):
            z_scores.append(abs(est.value - p.to_display(want[p.key])) / est.std_error)
            assert est.std_error < 0.5      # informative, not a band wide enough to catch anything
        sigmas.append(result.sigma_mm)
        assert result.residuals_after_mm.max() < 5 * noise * math.sqrt(I.dims_of(arm))
    assert 0.6 * noise < np.mean(sigmas) < 1.4 * noise
    assert sum(z > 3 for z in z_scores) <= 1 and max(z_scores) < 5, z_scores


def test_standard_errors_match_the_scatter_of_repeated_fits():
    """Monte Carlo: the spread of estimates over many noisy repeats of the same poses
    agrees with the reported standard error (within 30 %: 60 repeats)."""
    arm = builtin_arm("planar-bench")
    truth = true_vector(arm)
    poses = random_poses(arm, 12, np.random.default_rng(7))
    values, errors = [], []
    for seed in range(60):
        rng = np.random.default_rng(seed)
        result = I.identify(arm, synthetic_touches(arm, truth, poses, 0.1, rng))
        values.append([e.value for e in result.estimates])
        errors.append([e.std_error for e in result.estimates])
    spread = np.std(values, axis=0, ddof=1)
    reported = np.sqrt(np.mean(np.square(errors), axis=0))
    assert np.all(np.abs(spread / reported - 1.0) < 0.3), (spread, reported)


@pytest.mark.parametrize("name", ARMS)
def test_corrected_chain_agrees_with_modern_robotics(name):
    """The corrected arm, read from controller counts through its corrected zeros, puts
    the tool on the holes: checked with an independent product-of-exponentials chain."""
    arm = builtin_arm(name)
    rng = np.random.default_rng(5)
    truth = true_vector(arm)
    joints = random_poses(arm, 8, rng)
    touches = synthetic_touches(arm, truth, joints, 0.0, rng)
    result = I.identify(arm, touches)
    fixed = result.corrected
    keys = [p.key for p in I.params_of(arm)]
    a1, a2 = fixed.joints[0].a_mm, fixed.joints[1].a_mm
    # reference: modern_robotics FKinSpace (Lynch & Park, Modern Robotics, 2017, sec. 4.1)
    if arm.is_scara:
        d = [j.d_mm for j in fixed.joints]
        z_tool = d[0] + d[1] - d[2] - d[3]
        m = np.array([[1, 0, 0, a1 + a2], [0, -1, 0, 0], [0, 0, -1, z_tool], [0, 0, 0, 1.0]])
        screws = np.array([[0, 0, 1, 0, 0, 0], [0, 0, 1, 0, -a1, 0], [0, 0, 0, 0, 0, -1],
                           [0, 0, -1, 0, a1 + a2, 0]], dtype=float).T
    else:
        m = np.array([[1, 0, 0, a1 + a2], [0, 1, 0, 0], [0, 0, 1, 0], [0, 0, 0, 1.0]])
        screws = np.array([[0, 0, 1, 0, 0, 0], [0, 0, 1, 0, -a1, 0]], dtype=float).T
    yaw = result.vector[keys.index("base.yaw")]
    base = np.array([result.vector[keys.index(f"base.{k}")] if f"base.{k}" in keys else 0.0
                     for k in "xyz"])
    for touch in touches:
        # the counts the controller reported, as the arm file turned them into joint values
        counts = [j.direction * (j.to_display(q) - j.zero) * j.counts_per_unit
                  for j, q in zip(arm.joints, touch.joints)]
        theta = [joint_from_counts(j, c) + j.offset_rad for j, c in zip(fixed.joints, counts)]
        tip = mr.FKinSpace(m, screws, np.array(theta))[:3, 3]
        rz = np.array([[math.cos(yaw), -math.sin(yaw), 0], [math.sin(yaw), math.cos(yaw), 0], [0, 0, 1]])
        on_plate = rz @ tip + base
        assert np.allclose(on_plate[: I.dims_of(arm)], touch.hole_mm, atol=1e-6)


def test_too_few_touches_are_refused_in_words():
    arm = builtin_arm("planar-bench")
    rng = np.random.default_rng(1)
    touches = synthetic_touches(arm, true_vector(arm), random_poses(arm, 3, rng), 0.0, rng)
    with pytest.raises(I.IdentifyError, match=r"3 touches give 6 equations for 6 parameters: "
                                              r"touch at least 4 holes"):
        I.identify(arm, touches)


def test_one_pose_touched_over_and_over_is_refused():
    arm = builtin_arm("planar-bench")
    rng = np.random.default_rng(1)
    joints = np.repeat(random_poses(arm, 1, rng), 6, axis=0)
    touches = synthetic_touches(arm, true_vector(arm), joints, 0.0, rng)
    with pytest.raises(I.IdentifyError, match="cannot separate"):
        I.identify(arm, touches)


def test_an_elbow_that_never_moves_cannot_separate_its_zero():
    """With the elbow fixed the tool is e^(i(t1 + d1)) (a1 + a2 e^(i(t2 + d2))): the
    bracket is one complex number, so two link lengths and two zeros are four unknowns
    for two (geometry, a fact)."""
    arm = builtin_arm("planar-bench")
    rng = np.random.default_rng(3)
    joints = random_poses(arm, 8, rng)
    joints[:, 1] = 1.0
    touches = synthetic_touches(arm, true_vector(arm), joints, 0.0, rng)
    with pytest.raises(I.IdentifyError, match=r"cannot separate shoulder\.zero .*; elbow\.zero"):
        I.identify(arm, touches)


@pytest.mark.parametrize("name", ARMS)
def test_the_lumped_pairs_really_are_inseparable(name):
    """The documented lumping is a fact of the geometry: with every parameter in, the
    base's yaw (and z) columns are copies of the first joint's (and the quill's, negated)."""
    arm = builtin_arm(name)
    rng = np.random.default_rng(2)
    params = I.params_of(arm)
    keys = [p.key for p in params]
    jac = I.identification_jacobian(arm, params, true_vector(arm), random_poses(arm, 8, rng))
    scaled = jac / I.scales_of(arm, params)
    lost = dict(I.inseparable(scaled, keys))
    assert set(lost) == set(I.lumped_of(arm))
    for key, taker in I.lumped_of(arm).items():
        assert lost[key] == [taker]


def test_bad_touch_values_are_refused():
    arm = builtin_arm("planar-bench")
    with pytest.raises(I.IdentifyError, match="not a finite number"):
        I.identify(arm, [I.Touch((1.0, math.nan), (0.0, 1.0))] * 5)
    with pytest.raises(I.IdentifyError, match="needs 2 hole coordinates"):
        I.identify(arm, [I.Touch((1.0, 2.0, 3.0), (0.0, 1.0))] * 5)


def test_clustered_poses_are_warned_about_and_spread_ones_are_not():
    arm = builtin_arm("planar-bench")
    truth = true_vector(arm)
    rng = np.random.default_rng(4)
    spread = I.identify(arm, synthetic_touches(arm, truth, random_poses(arm, 12, rng), 0.02, rng))
    assert not [w for w in spread.warnings if "poorly chosen" in w]
    tight = np.array([[0.30 + 0.01 * i, 1.2 + 0.01 * (i % 3) * (-1) ** i] for i in range(12)])
    clustered = I.identify(arm, synthetic_touches(arm, truth, tight, 0.02, rng))
    assert [w for w in clustered.warnings if "poorly chosen" in w]
    assert clustered.condition > I.COND_WARN > spread.condition
    assert clustered.o1 < spread.o1 and clustered.o4 < spread.o4


def test_the_suggested_next_touch_raises_o4_most():
    arm = builtin_arm("planar-bench")
    truth = true_vector(arm)
    rng = np.random.default_rng(8)
    touched = random_poses(arm, 5, rng)
    holes = [(f"g{i}", (x, y)) for i, (x, y) in enumerate(
        [(-100.0, 0.0), (-60.0, 150.0), (40.0, -120.0), (-200.0, 200.0), (0.0, 0.0)])]
    cands = I.candidates_for(arm, holes, truth)
    assert cands
    best, now, after = I.next_touch(arm, touched, cands, truth)
    assert after > now
    for c in cands:   # brute force: nobody does better
        rows = np.vstack([I._scaled_rows(arm, truth, touched), I._scaled_rows(arm, truth, np.array([c.joints]))])
        assert I.noise_amplification_o4(np.linalg.svd(rows, compute_uv=False)) <= after + 1e-12
    # the candidate's joints, read through the arm file, do put the true arm on the hole
    on_plate = I.plate_points_mm(arm, I.params_of(arm), truth, np.array([best.joints]))[0]
    assert np.allclose(on_plate, best.hole_mm, atol=1e-6)


def test_planned_touches_identify_better_than_the_first_few_holes():
    arm = builtin_arm("planar-bench")
    truth = true_vector(arm)
    grid = [(f"r{r}c{c}", (-420.0 + 40.0 * c, -120.0 + 40.0 * r)) for r in range(7) for c in range(9)]
    cands = I.candidates_for(arm, grid, truth)
    chosen = I.plan_touches(arm, cands, 8, truth)
    assert len(chosen) == 8
    first = cands[:8]
    sv = lambda cs: np.linalg.svd(I._scaled_rows(arm, truth, np.array([c.joints for c in cs])),
                                  compute_uv=False)
    assert I.observability_o1(sv(chosen), 8) > I.observability_o1(sv(first), 8)


# -- accuracy at a target -------------------------------------------------------------------

@pytest.mark.parametrize("name", ARMS)
def test_step_per_count_matches_a_one_count_move(name):
    """Independent: move each joint by one count through the counts conversion and
    measure the tool's displacement by FK."""
    arm = builtin_arm(name)
    joints = (0.4, 1.1) + ((30.0, 0.2) if arm.is_scara else ())
    steps = I.steps_per_count_mm(arm, joints)
    base = np.array(tool_from_joints(arm, joints)[: I.dims_of(arm)])
    for i, joint in enumerate(arm.joints[: len(steps)]):
        moved = list(joints)
        moved[i] += joint.from_display(1.0 / joint.counts_per_unit)
        tip = np.array(tool_from_joints(arm, moved)[: I.dims_of(arm)])
        assert steps[i] == pytest.approx(float(np.linalg.norm(tip - base)), rel=1e-3)


def test_position_sigma_matches_monte_carlo():
    """Sample parameter errors from the covariance, push them through the model, and
    compare the spread along the worst direction with the first-order figure."""
    arm = builtin_arm("planar-bench")
    truth = true_vector(arm)
    rng = np.random.default_rng(11)
    result = I.identify(arm, synthetic_touches(arm, truth, random_poses(arm, 10, rng), 0.1, rng))
    keys, cov = result.covariance_display(I.arm_param_keys(arm))
    pose = (0.3, 1.4)
    sigma = I.position_sigma_mm(arm, pose, keys, cov)
    assert sigma > 0
    params = I.params_of(arm)
    all_keys = [p.key for p in params]
    draws = rng.multivariate_normal(np.zeros(len(keys)), cov, size=4000)
    pts = []
    for draw in draws:
        v = I.nominal_vector(arm)
        for k, dv in zip(keys, draw):
            p = params[all_keys.index(k)]
            v[all_keys.index(k)] += math.radians(dv) if p.is_angle else dv
        pts.append(I.plate_points_mm(arm, params, v, np.array([pose]))[0])
    spread = np.sqrt(np.linalg.eigvalsh(np.cov(np.array(pts).T)).max())
    assert spread == pytest.approx(sigma, rel=0.1)


def test_near_stretch_and_fold_are_named_with_the_number():
    arm = builtin_arm("planar-bench")
    assert I.task_conditioning(arm, (0.0, 1.5))[1] is None
    cond, words = I.task_conditioning(arm, (0.0, math.radians(2.0)))
    assert words.startswith("ill-conditioned: the elbow is 2.0 deg from stretched") and cond > 10
    cond, words = I.task_conditioning(arm, (0.0, math.radians(176.0)))
    assert "4.0 deg from folded" in words
