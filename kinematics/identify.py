"""Kinematic calibration from touched fixture holes: identification, observability,
pose selection and accuracy at a target. Pure math: no I/O, no UI. mm and radians.

The measurement: the tool tip touches holes of a fixture plate whose coordinates are
known in the plate's frame; for each touch the controller's counts give the joint
values through the arm file (``zero``, ``counts_per_unit``, ``direction``). The model
(the DH chain of ``dh.py``) maps joint values to the tool point in the arm's base frame,
and the base's pose in the plate's frame maps it onto the plate:

    p_plate = Rz(base.yaw) @ p_base(a, q + delta) + (base.x, base.y, base.z)

The parameters: the two link lengths ``a`` (mm), a correction ``delta`` of each
joint's zero (the revolute joints in rad; on a SCARA also the quill's zero, mm), and
the base's position and rotation about z in the plate's frame. A tool point touching
holes cannot tell a turned base from a turned shoulder zero, nor (SCARA) a raised base
from a shifted quill zero: those pairs are *lumped* (:data:`LUMPED`): the base's yaw
(and height) stay at the given nominal and the joint zero takes the difference, and
the report says so. Any further parameter the touches cannot separate is refused
(:class:`IdentifyError`), never silently fitted.

Sources: the method is the classic open-loop kinematic calibration by nonlinear least
squares (Hollerbach & Wampler, "The calibration index and taxonomy for robot kinematic
calibration methods", IJRR 15(6), 1996; Mooring, Roth & Driels, *Fundamentals of
Manipulator Calibration*, Wiley 1991; from memory). The observability indices are
those of Borm & Menq (IJRR 10(1), 1991) and Nahvi & Hollerbach (ICRA 1996), formulas
in :func:`observability_o1` and :func:`noise_amplification_o4` (from memory).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np

from benchjog.kinematics.accuracy import (TASK_COND_WARN, Accuracy, accuracy_at,  # noqa: F401 (re-exported)
                                          condition_number, steps_per_count_mm, task_conditioning)
from benchjog.kinematics.dh import tool_transform
from benchjog.kinematics.model import Arm, Branch
from benchjog.kinematics.solve import joints_from_tool

RANK_TOL = 1e-7        # a scaled Jacobian column whose share of rank is below this is not separable
COND_WARN = 100.0      # warn above this condition number of the scaled Jacobian (a choice made here)
STEP_MM = 1e-5         # central-difference step for mm parameters
STEP_RAD = 1e-7        # and for angles


class IdentifyError(ValueError):
    """Touches that cannot give a calibration: too few, degenerate, or bad values."""


@dataclass(frozen=True)
class Param:
    """One calibration parameter. ``key`` is what reports and files use
    (``shoulder.a``, ``elbow.zero``, ``base.x``); ``is_angle`` says rad (shown in deg)."""

    key: str
    is_angle: bool
    kind: str            # "a", "zero" or "base"
    joint: int | None = None
    axis: str = ""       # base: "x", "y", "z", "yaw"

    @property
    def unit(self) -> str:
        return "deg" if self.is_angle else "mm"

    def to_display(self, value: float) -> float:
        return math.degrees(value) if self.is_angle else value


def params_of(arm: Arm) -> tuple[Param, ...]:
    """Every parameter of the model, in order, lumped ones included.

    >>> from benchjog.console.cell.armfile import builtin_arm
    >>> [p.key for p in params_of(builtin_arm("planar-bench"))]
    ['shoulder.a', 'elbow.a', 'shoulder.zero', 'elbow.zero', 'base.x', 'base.y', 'base.yaw']
    """
    j = arm.joints
    out = [Param(f"{j[0].name}.a", False, "a", 0), Param(f"{j[1].name}.a", False, "a", 1),
           Param(f"{j[0].name}.zero", True, "zero", 0), Param(f"{j[1].name}.zero", True, "zero", 1)]
    if arm.is_scara:
        out.append(Param(f"{j[2].name}.zero", False, "zero", 2))
    out += [Param("base.x", False, "base", axis="x"), Param("base.y", False, "base", axis="y")]
    if arm.is_scara:
        out.append(Param("base.z", False, "base", axis="z"))
    out.append(Param("base.yaw", True, "base", axis="yaw"))
    return tuple(out)


def lumped_of(arm: Arm) -> dict[str, str]:
    """The parameters a tool point cannot tell apart, structurally: lumped key -> the key
    that takes it. A turn of the base about its z axis is a turn of the first joint
    (both rotate the whole arm about the same axis); a raised base is a shorter quill.

    >>> from benchjog.console.cell.armfile import builtin_arm
    >>> lumped_of(builtin_arm("scara-bench"))
    {'base.yaw': 'j1.zero', 'base.z': 'quill.zero'}
    """
    out = {"base.yaw": f"{arm.joints[0].name}.zero"}
    if arm.is_scara:
        out["base.z"] = f"{arm.joints[2].name}.zero"
    return out


def dims_of(arm: Arm) -> int:
    """Coordinates per touch: x, y on a planar arm; x, y, z on a SCARA."""
    return 3 if arm.is_scara else 2


def nominal_vector(arm: Arm, base: Sequence[float] = ()) -> np.ndarray:
    """The parameter vector of the arm file as it is, with the base at ``base``
    (planar: x, y, yaw; SCARA: x, y, z, yaw; mm and rad; default all zero)."""
    params = params_of(arm)
    vec = np.zeros(len(params))
    base = list(base) + [0.0] * 4
    k = 0
    for i, p in enumerate(params):
        if p.kind == "a":
            vec[i] = arm.joints[p.joint].a_mm
        elif p.kind == "base":
            vec[i] = base[k]
            k += 1
    return vec


def apply_params(arm: Arm, params: Sequence[Param], vector: Sequence[float]) -> Arm:
    """The arm file corrected by a parameter vector: link lengths replaced, each joint's
    ``zero`` (file units: deg or mm) moved by its correction. The base pose is not part
    of an arm file and is left out."""
    joints = list(arm.joints)
    for p, v in zip(params, vector):
        if p.kind == "a":
            joints[p.joint] = replace(joints[p.joint], a_mm=float(v))
        elif p.kind == "zero" and p.joint is not None:
            j = joints[p.joint]
            joints[p.joint] = replace(j, zero=j.zero + j.to_display(float(v)))
    return replace(arm, joints=tuple(joints))


def _rot_z(yaw: float) -> np.ndarray:
    c, s = math.cos(yaw), math.sin(yaw)
    return np.array([[c, -s, 0.0], [s, c, 0.0], [0.0, 0.0, 1.0]])


def plate_points_mm(arm: Arm, params: Sequence[Param], vector: Sequence[float],
                    joints: np.ndarray) -> np.ndarray:
    """The model: tool points in the plate's frame, one row per pose (N x 2 planar, N x 3
    SCARA), for joint values as read through the arm file (rad, mm).

    >>> from benchjog.console.cell.armfile import builtin_arm
    >>> arm = builtin_arm("planar-bench")          # a1 220, a2 160
    >>> ps = params_of(arm)
    >>> v = nominal_vector(arm, (10.0, 0.0, 0.0))  # base 10 mm along the plate's x
    >>> plate_points_mm(arm, ps, v, np.array([[0.0, math.pi / 2]])).round(9).tolist()
    [[230.0, 160.0]]
    """
    joints = np.atleast_2d(np.asarray(joints, dtype=float))
    shift = np.zeros(arm.n_joints)
    links = [j.a_mm for j in arm.joints]
    base = {"x": 0.0, "y": 0.0, "z": 0.0, "yaw": 0.0}
    for p, v in zip(params, vector):
        if p.kind == "a":
            links[p.joint] = float(v)
        elif p.kind == "zero":
            shift[p.joint] = float(v)
        else:
            base[p.axis] = float(v)
    model = replace(arm, joints=tuple(replace(j, a_mm=a) for j, a in zip(arm.joints, links)))
    pts = np.array([tool_transform(model, q + shift)[:3, 3] for q in joints])
    pts = pts @ _rot_z(base["yaw"]).T + np.array([base["x"], base["y"], base["z"]])
    return pts[:, :dims_of(arm)]


def scales_of(arm: Arm, params: Sequence[Param]) -> np.ndarray:
    """Column scales that make the identification Jacobian unit-free: an angle counts as
    the tool displacement it causes at full reach (rad x reach mm), a length as itself.
    Scaling columns before judging rank and conditioning is common practice
    (Hollerbach & Wampler 1996, from memory)."""
    reach = arm.max_reach_mm
    return np.array([reach if p.is_angle else 1.0 for p in params])


def identification_jacobian(arm: Arm, params: Sequence[Param], vector: Sequence[float],
                            joints: np.ndarray) -> np.ndarray:
    """d(plate points)/d(parameters), the rows stacked pose by pose (x, y[, z] each):
    (N*dims) x P, in mm per mm and mm per rad, by central differences."""
    vector = np.asarray(vector, dtype=float)
    cols = []
    for i, p in enumerate(params):
        h = STEP_RAD if p.is_angle else STEP_MM
        up, down = vector.copy(), vector.copy()
        up[i] += h
        down[i] -= h
        diff = plate_points_mm(arm, params, up, joints) - plate_points_mm(arm, params, down, joints)
        cols.append(diff.ravel() / (2 * h))
    return np.column_stack(cols)


# -- observability ---------------------------------------------------------------------

def observability_o1(singular_values: Sequence[float], n_poses: int) -> float:
    """Borm & Menq's observability index O1 = (s_1 s_2 ... s_L)^(1/L) / sqrt(m), the
    geometric mean of the L singular values of the (scaled) identification Jacobian over
    the square root of the number of poses m.

    Source: J.-H. Borm and C.-H. Menq, "Determination of optimal measurement
    configurations for robot calibration based on observability measure", IJRR 10(1),
    1991 (from memory). Larger is better; it is zero when a parameter is unobservable.

    >>> round(observability_o1([4.0, 1.0], 4), 9)    # sqrt(4 * 1) / sqrt(4)
    1.0
    """
    s = np.asarray(singular_values, dtype=float)
    if s.size == 0 or n_poses <= 0 or np.any(s <= 0):
        return 0.0
    return float(np.exp(np.mean(np.log(s))) / math.sqrt(n_poses))


def noise_amplification_o4(singular_values: Sequence[float]) -> float:
    """Nahvi & Hollerbach's noise amplification index O4 = s_min^2 / s_max: it grows with
    the smallest singular value (the least observable direction) and falls with the
    condition number, so it rewards poses that shrink the parameter error that a given
    measurement noise causes.

    Source: A. Nahvi and J. M. Hollerbach, "The noise amplification index for optimal
    pose selection in robot calibration", ICRA 1996 (from memory).

    >>> noise_amplification_o4([4.0, 1.0])           # 1^2 / 4
    0.25
    """
    s = np.asarray(singular_values, dtype=float)
    if s.size == 0 or s.max() <= 0:
        return 0.0
    return float(s.min() ** 2 / s.max())


def inseparable(jac_scaled: np.ndarray, keys: Sequence[str]) -> list[tuple[str, list[str]]]:
    """Columns the data cannot separate, each with the kept columns it is entangled with.

    Columns are taken in order (the more useful first); one is kept when it adds rank
    (its distance from the span of the kept ones, relative to its own length, exceeds
    :data:`RANK_TOL`). A dropped column is explained by a least-squares fit on the kept
    columns; those with a weight above 1 % of the largest are named.

    >>> J = np.array([[1.0, 0.0, 1.0], [0.0, 1.0, 0.0], [1.0, 1.0, 1.0]])
    >>> inseparable(J, ["a", "b", "c"])
    [('c', ['a'])]
    """
    kept: list[int] = []
    out = []
    for i in range(jac_scaled.shape[1]):
        col = jac_scaled[:, i]
        norm = float(np.linalg.norm(col))
        if norm == 0.0:
            out.append((keys[i], []))
            continue
        if kept:
            basis = jac_scaled[:, kept]
            coef, *_ = np.linalg.lstsq(basis, col, rcond=None)
            resid = float(np.linalg.norm(col - basis @ coef)) / norm
        else:
            coef, resid = np.zeros(0), 1.0
        if resid > RANK_TOL:
            kept.append(i)
        else:
            big = float(np.max(np.abs(coef))) if coef.size else 0.0
            out.append((keys[i], [keys[k] for k, c in zip(kept, coef) if abs(c) > 0.01 * big]))
    return out


# -- the fit ----------------------------------------------------------------------------

@dataclass(frozen=True)
class Touch:
    """One touched hole: its coordinates in the plate's frame (mm; planar x, y; SCARA x,
    y, z) and the joint values read through the arm file (rad, mm)."""

    hole_mm: tuple[float, ...]
    joints: tuple[float, ...]
    label: str = ""


@dataclass(frozen=True)
class Estimate:
    key: str
    unit: str
    nominal: float        # display units (mm, deg); for a zero: the correction, 0
    value: float
    std_error: float

    @property
    def change(self) -> float:
        return self.value - self.nominal


@dataclass(frozen=True)
class Identification:
    """The result of :func:`identify`. Display units (mm, deg) in every field but
    ``vector``/``covariance`` (mm, rad) and ``corrected`` (an :class:`Arm`)."""

    arm: Arm
    params: tuple[Param, ...]          # the fitted ones, in order
    vector: np.ndarray                 # fitted values incl. lumped ones (params_of order)
    covariance: np.ndarray             # of the fitted ones, mm and rad
    estimates: tuple[Estimate, ...]
    lumped: dict[str, str]
    residuals_before_mm: np.ndarray    # per touch: distance, nominal arm with a rigid base fit
    residuals_after_mm: np.ndarray
    sigma_mm: float                    # residual standard deviation per coordinate
    singular_values: np.ndarray        # of the scaled Jacobian
    n_touches: int
    warnings: tuple[str, ...]
    corrected: Arm

    @property
    def condition(self) -> float:
        return condition_number(self.singular_values)

    @property
    def o1(self) -> float:
        return observability_o1(self.singular_values, self.n_touches)

    @property
    def o4(self) -> float:
        return noise_amplification_o4(self.singular_values)

    def covariance_display(self, keys: Sequence[str] | None = None) -> tuple[list[str], np.ndarray]:
        """The covariance of the named fitted parameters (default all) in mm and deg."""
        all_keys = [p.key for p in self.params]
        keys = list(keys) if keys is not None else all_keys
        idx = [all_keys.index(k) for k in keys]
        d = np.array([math.degrees(1.0) if self.params[i].is_angle else 1.0 for i in idx])
        return keys, self.covariance[np.ix_(idx, idx)] * np.outer(d, d)


def _rms(values: np.ndarray) -> float:
    return float(math.sqrt(np.mean(np.square(values)))) if values.size else 0.0


def rms_mm(distances: np.ndarray) -> float:
    """Root mean square of per-touch distances (mm)."""
    return _rms(np.asarray(distances, dtype=float))


def rigid_fit(model_pts: np.ndarray, holes: np.ndarray) -> tuple[np.ndarray, float]:
    """The rotation about z and the shift that best lay model points onto holes:
    (t, yaw) minimising sum |Rz(yaw) a_i + t - b_i|^2 (x, y by the SVD method; z, if any,
    by the mean difference).

    Source: Arun, Huang & Blostein, "Least-squares fitting of two 3-D point sets", IEEE
    PAMI 9(5), 1987 (from memory), in the plane.

    >>> a = np.array([[0.0, 0.0], [1.0, 0.0], [0.0, 1.0]])
    >>> b = np.array([[5.0, 5.0], [5.0, 6.0], [4.0, 5.0]])   # a turned 90 deg, moved (5, 5)
    >>> t, yaw = rigid_fit(a, b)
    >>> [round(float(v), 9) for v in t], round(math.degrees(yaw), 9)
    ([5.0, 5.0], 90.0)
    """
    a, b = model_pts[:, :2], holes[:, :2]
    ca, cb = a.mean(axis=0), b.mean(axis=0)
    h = (a - ca).T @ (b - cb)
    yaw = math.atan2(h[0, 1] - h[1, 0], h[0, 0] + h[1, 1])
    r = _rot_z(yaw)[:2, :2]
    t = cb - r @ ca
    if model_pts.shape[1] == 3:
        t = np.append(t, float(np.mean(holes[:, 2] - model_pts[:, 2])))
    return t, yaw


def _check_touches(arm: Arm, touches: Sequence[Touch]) -> tuple[np.ndarray, np.ndarray]:
    dims = dims_of(arm)
    holes, joints = [], []
    for i, t in enumerate(touches, start=1):
        name = t.label or f"touch {i}"
        if len(t.hole_mm) != dims:
            raise IdentifyError(f"{name}: a {arm.geometry} arm needs {dims} hole coordinates, "
                                f"got {len(t.hole_mm)}")
        if len(t.joints) != arm.n_joints:
            raise IdentifyError(f"{name}: {len(t.joints)} joint values for {arm.n_joints} joints")
        row = [float(v) for v in t.hole_mm]
        q = [float(v) for v in t.joints]
        if not all(math.isfinite(v) for v in row + q):
            raise IdentifyError(f"{name}: not a finite number")
        holes.append(row)
        joints.append(q)
    return np.array(holes).reshape(-1, dims), np.array(joints).reshape(-1, arm.n_joints)


def min_touches(arm: Arm) -> int:
    """The fewest touches that leave a residual to judge the fit by: more equations than
    fitted parameters.

    >>> from benchjog.console.cell.armfile import builtin_arm
    >>> min_touches(builtin_arm("planar-bench")), min_touches(builtin_arm("scara-bench"))
    (4, 3)
    """
    n_fit = len(params_of(arm)) - len(lumped_of(arm))
    return n_fit // dims_of(arm) + 1


def identify(arm: Arm, touches: Sequence[Touch], base: Sequence[float] = ()) -> Identification:
    """Fit link lengths, joint zeros and the base pose to touched holes.

    Nonlinear least squares (``scipy.optimize.least_squares``, Levenberg-Marquardt),
    started from the arm file with the base laid on the holes by :func:`rigid_fit`.
    Standard errors: the covariance ``s^2 (J^T J)^-1`` at the solution, with ``s^2`` the
    residual sum of squares over (equations - parameters) (Gauss-Markov; e.g. Press et
    al., *Numerical Recipes*, 3rd ed., section 15.4, from memory).

    Args:
        arm: the arm file as it is.
        touches: the touched holes (plate frame) with joint values read through ``arm``.
        base: the nominal base pose in the plate's frame (planar x, y, yaw; SCARA x, y,
            z, yaw; mm, rad): the yaw (and z) the lumped parameters stay at. Default 0.

    Raises:
        IdentifyError: too few touches, or touches that cannot separate a parameter.
    """
    from scipy.optimize import least_squares  # loaded when a fit is made, not with the simulated arm

    holes, joints = _check_touches(arm, touches)
    dims = dims_of(arm)
    all_params = params_of(arm)
    lumped = lumped_of(arm)
    fit_idx = [i for i, p in enumerate(all_params) if p.key not in lumped]
    fitted = tuple(all_params[i] for i in fit_idx)
    n_eq = holes.shape[0] * dims
    if len(touches) < min_touches(arm):
        raise IdentifyError(
            f"{len(touches)} touches give {n_eq} equations for {len(fitted)} parameters: "
            f"touch at least {min_touches(arm)} holes (better {2 * min_touches(arm)} or more, "
            "spread over the reach, from both branches)")
    vec0 = nominal_vector(arm, base)
    keys = [p.key for p in all_params]
    # Lay the nominal arm on the plate: where the base is, and the first joint's turn.
    nominal_pts = plate_points_mm(arm, all_params, nominal_vector(arm), joints)
    shift, yaw = rigid_fit(nominal_pts, holes)
    before_vec = vec0.copy()
    for axis, value in zip(("x", "y", "z"), shift):
        before_vec[keys.index(f"base.{axis}")] = value
    before_vec[keys.index("base.yaw")] = yaw
    before = np.linalg.norm(plate_points_mm(arm, all_params, before_vec, joints) - holes, axis=1)
    start = before_vec.copy()
    start[keys.index("base.yaw")] = vec0[keys.index("base.yaw")]
    start[keys.index(lumped["base.yaw"])] = _wrap(yaw - vec0[keys.index("base.yaw")])
    if arm.is_scara:  # the quill takes the height difference: +quill lowers the tool
        dz = shift[2] - vec0[keys.index("base.z")]
        start[keys.index("base.z")] = vec0[keys.index("base.z")]
        start[keys.index(lumped["base.z"])] = -dz
    scales = scales_of(arm, fitted)

    def full(x: np.ndarray) -> np.ndarray:
        v = start.copy()
        v[fit_idx] = x
        return v

    def residual(x: np.ndarray) -> np.ndarray:
        return (plate_points_mm(arm, all_params, full(x), joints) - holes).ravel()

    def jac(x: np.ndarray) -> np.ndarray:
        return identification_jacobian(arm, all_params, full(x), joints)[:, fit_idx]

    j0 = jac(start[fit_idx]) / scales
    lost = inseparable(j0, [p.key for p in fitted])
    if lost:
        words = "; ".join(f"{k} (entangled with {', '.join(w) or 'nothing: it has no effect'})"
                          for k, w in lost)
        raise IdentifyError(f"these touches cannot separate {words}: touch holes spread over "
                            "the reach, with the elbow at several angles, from both branches")
    sol = least_squares(residual, start[fit_idx], jac=jac, method="lm", x_scale=scales,
                        xtol=1e-15, ftol=1e-15, gtol=1e-15, max_nfev=2000)
    x = sol.x
    vec = full(x)
    after = np.linalg.norm(plate_points_mm(arm, all_params, vec, joints) - holes, axis=1)
    J = jac(x)
    ssr = float(np.sum(residual(x) ** 2))
    dof = n_eq - len(fitted)
    s2 = ssr / dof
    cov = s2 * np.linalg.pinv(J.T @ J)
    sv = np.linalg.svd(J / scales, compute_uv=False)
    estimates = []
    for p, i, var in zip(fitted, fit_idx, np.diag(cov)):
        nominal = p.to_display(vec0[i]) if p.kind != "zero" else 0.0
        if p.kind == "base":
            nominal = p.to_display(before_vec[i])
        estimates.append(Estimate(p.key, p.unit, float(nominal), float(p.to_display(vec[i])),
                                  float(p.to_display(math.sqrt(max(var, 0.0))))))
    warnings = _pose_warnings(arm, joints, sv, n_eq, len(fitted))
    return Identification(arm, fitted, vec, cov, tuple(estimates), lumped, before, after,
                          math.sqrt(s2), sv, len(touches), tuple(warnings),
                          apply_params(arm, all_params, vec))


def _wrap(angle: float) -> float:
    return math.remainder(angle, 2 * math.pi)


def _pose_warnings(arm: Arm, joints: np.ndarray, sv: np.ndarray, n_eq: int, n_fit: int) -> list[str]:
    out = []
    cond = condition_number(sv)
    if cond > COND_WARN:
        out.append(f"poorly chosen poses: the identification Jacobian's condition number is "
                   f"{cond:.0f} (warning above {COND_WARN:g}); touch holes further apart")
    if n_eq < 2 * n_fit:
        out.append(f"few touches: {n_eq} equations for {n_fit} parameters (twice as many "
                   "or more is usual); the standard errors rest on few degrees of freedom")
    elbow = joints[:, 1] + arm.joints[1].offset_rad
    if np.all(np.sin(elbow) > 0) or np.all(np.sin(elbow) < 0):
        out.append("every touch is on one branch: touches from both branches usually "
                   "separate the elbow's zero from the link lengths better")
    return out


# -- a "true" arm, for simulations ---------------------------------------------------------

def true_vector_from_errors(arm: Arm, errors: dict[str, float]) -> np.ndarray:
    """The parameter vector of a physical arm that differs from its arm file: ``errors``
    maps parameter keys (:func:`params_of`) to how far the real arm is off, in mm and
    degrees (``{"shoulder.a": 1.5, "elbow.zero": -0.4}``); the ``base.*`` keys give the
    base's pose in the plate's frame itself (x, y, z in mm, yaw in deg).

    >>> from benchjog.console.cell.armfile import builtin_arm
    >>> v = true_vector_from_errors(builtin_arm("planar-bench"), {"shoulder.a": 1.5, "base.yaw": 90})
    >>> [round(float(x), 6) for x in v]
    [221.5, 160.0, 0.0, 0.0, 0.0, 0.0, 1.570796]

    Raises:
        IdentifyError: an unknown key or a value that is not a finite number.
    """
    params = params_of(arm)
    keys = [p.key for p in params]
    vec = nominal_vector(arm)
    for key, value in errors.items():
        if key not in keys:
            raise IdentifyError(f"unknown arm error {key!r} (one of {', '.join(keys)})")
        try:
            value = float(value)
        except (TypeError, ValueError):
            raise IdentifyError(f"arm error {key}: not a number ({value!r})") from None
        if not math.isfinite(value):
            raise IdentifyError(f"arm error {key}: not a finite number")
        p = params[keys.index(key)]
        vec[keys.index(key)] += math.radians(value) if p.is_angle else value
    return vec


def parse_errors(text: str) -> dict[str, float]:
    """``"shoulder.a=1.5, elbow.zero=-0.4"`` to a mapping (values checked later).

    >>> parse_errors("shoulder.a=1.5, base.x=-260")
    {'shoulder.a': 1.5, 'base.x': -260.0}
    """
    out: dict[str, float] = {}
    for part in filter(None, (p.strip() for p in text.split(","))):
        key, sep, value = part.partition("=")
        if not sep:
            raise IdentifyError(f"arm error {part!r}: write KEY=VALUE")
        try:
            out[key.strip()] = float(value)
        except ValueError:
            raise IdentifyError(f"arm error {key.strip()}: not a number ({value.strip()!r})") from None
    return out


# -- pose selection ---------------------------------------------------------------------

@dataclass(frozen=True)
class Candidate:
    """A pose that could be touched next: a hole and a branch, with its joint values as
    the arm file would read them (rad, mm)."""

    label: str
    hole_mm: tuple[float, ...]
    branch: Branch
    joints: tuple[float, ...]


def candidates_for(arm: Arm, holes: Sequence[tuple[str, Sequence[float]]],
                   vector: Sequence[float] | None = None) -> list[Candidate]:
    """Every (hole, branch) the arm can touch within its limits, given the parameters
    ``vector`` (default: the arm file with the base at the plate's origin). The joint
    values are those the arm file will read there."""
    params = params_of(arm)
    vec = np.asarray(vector if vector is not None else nominal_vector(arm), dtype=float)
    true_arm = apply_params(arm, params, vec)
    keys = [p.key for p in params]
    t = np.array([vec[keys.index("base.x")], vec[keys.index("base.y")],
                  vec[keys.index("base.z")] if arm.is_scara else 0.0])
    rot = _rot_z(vec[keys.index("base.yaw")])
    shifts = np.zeros(arm.n_joints)
    for p, v in zip(params, vec):
        if p.kind == "zero":
            shifts[p.joint] = v
    out = []
    for label, hole in holes:
        h = np.array(list(hole) + [0.0] * (3 - len(hole)))
        in_base = rot.T @ (h - t)
        target = (in_base[0], in_base[1]) if not arm.is_scara else (
            in_base[0], in_base[1], in_base[2], 0.0)
        for sol in joints_from_tool(true_arm, target).usable:
            if not _clear_of_limits(true_arm, sol.joints):
                continue
            # true_arm's zero already includes the correction; the file reads value - shift
            q = tuple(float(v) for v in np.asarray(sol.joints) - shifts)
            out.append(Candidate(label, tuple(float(v) for v in hole), sol.branch, q))
    return out


LIMIT_SLACK_DEG = 1.5   # candidates keep this much more than the arm's margin from a limit
LIMIT_SLACK_MM = 1.5    # (the arm file is not yet calibrated)


def _clear_of_limits(arm: Arm, joints: Sequence[float]) -> bool:
    for j, v in zip(arm.joints, joints):
        room = arm.margin(j) + (math.radians(LIMIT_SLACK_DEG) if j.is_revolute else LIMIT_SLACK_MM)
        if not j.min + room <= v <= j.max - room:
            return False
    return True


def _scaled_rows(arm: Arm, vec: np.ndarray, joints: np.ndarray) -> np.ndarray:
    all_params = params_of(arm)
    lumped = lumped_of(arm)
    idx = [i for i, p in enumerate(all_params) if p.key not in lumped]
    fitted = [all_params[i] for i in idx]
    return identification_jacobian(arm, all_params, vec, joints)[:, idx] / scales_of(arm, fitted)


def next_touch(arm: Arm, touched_joints: Sequence[Sequence[float]], candidates: Sequence[Candidate],
               vector: Sequence[float] | None = None) -> tuple[Candidate, float, float] | None:
    """The candidate whose touch most raises the noise amplification index O4 (Nahvi &
    Hollerbach 1996): ``(candidate, O4 now, O4 with it)``; None without candidates.
    A greedy step of their pose selection (from memory)."""
    if not candidates:
        return None
    vec = np.asarray(vector if vector is not None else nominal_vector(arm), dtype=float)
    now_rows = (_scaled_rows(arm, vec, np.asarray(touched_joints, dtype=float))
                if len(touched_joints) else np.zeros((0, len(params_of(arm)) - len(lumped_of(arm)))))
    now = noise_amplification_o4(np.linalg.svd(now_rows, compute_uv=False)) if len(now_rows) else 0.0
    best, best_o4 = None, -1.0
    for cand in candidates:
        rows = np.vstack([now_rows, _scaled_rows(arm, vec, np.array([cand.joints]))])
        o4 = noise_amplification_o4(np.linalg.svd(rows, compute_uv=False))
        if o4 > best_o4:
            best, best_o4 = cand, o4
    return best, now, best_o4


def plan_touches(arm: Arm, candidates: Sequence[Candidate], count: int,
                 vector: Sequence[float] | None = None) -> list[Candidate]:
    """Choose ``count`` touches from the candidates, greedily maximising Borm & Menq's
    O1 (equivalently the determinant of J^T J, "D-optimal"; a small ridge keeps the first
    picks comparable while the Jacobian is still short of full rank). Common practice
    after Borm & Menq 1991 (from memory)."""
    vec = np.asarray(vector if vector is not None else nominal_vector(arm), dtype=float)
    rows = {id(c): _scaled_rows(arm, vec, np.array([c.joints])) for c in candidates}
    n = next(iter(rows.values())).shape[1] if rows else 0
    chosen: list[Candidate] = []
    info = np.zeros((n, n))
    left = list(candidates)
    while left and len(chosen) < count:
        def score(c: Candidate) -> float:
            r = rows[id(c)]
            sign, logdet = np.linalg.slogdet(info + r.T @ r + 1e-6 * np.eye(n))
            return logdet
        best = max(left, key=score)
        chosen.append(best)
        info = info + rows[id(best)].T @ rows[id(best)]
        left.remove(best)
    return chosen


# -- accuracy at a target ------------------------------------------------------------------
# (the step per count and the conditioning live in accuracy.py, numpy-free; here the part
# that needs the identification model)

def arm_param_keys(arm: Arm) -> list[str]:
    """The parameters of the arm itself (links and zeros), not the base."""
    return [p.key for p in params_of(arm) if p.kind != "base"]


def position_sigma_mm(arm: Arm, joints: Sequence[float], keys: Sequence[str],
                      covariance_display: np.ndarray) -> float:
    """The 1-sigma tool position error at a pose that the calibration's parameter
    covariance implies, along the worst direction: sqrt of the largest eigenvalue of
    J_p C J_p^T (first-order propagation of uncertainty, JCGM 100:2008 "GUM" section 5,
    from memory). ``keys``/``covariance_display`` in mm and deg; base parameters are
    ignored (a target in the base frame does not depend on them).

    >>> from benchjog.console.cell.armfile import builtin_arm
    >>> arm = builtin_arm("planar-bench")
    >>> round(position_sigma_mm(arm, (0.0, math.pi / 2), ["shoulder.a"], np.array([[0.04]])), 9)
    0.2
    """
    params = params_of(arm)
    by_key = {p.key: (i, p) for i, p in enumerate(params)}
    use = [(k, n) for n, k in enumerate(keys) if k in by_key and by_key[k][1].kind != "base"]
    if not use:
        return 0.0
    idx = [by_key[k][0] for k, _ in use]
    rows = [n for _, n in use]
    cov = np.asarray(covariance_display, dtype=float)[np.ix_(rows, rows)]
    d = np.array([math.radians(1.0) if params[i].is_angle else 1.0 for i in idx])
    cov = cov * np.outer(d, d)
    # at the arm file itself: every zero correction 0, links as filed, base at the origin
    jp = identification_jacobian(arm, params, nominal_vector(arm), np.array([joints]))[:, idx]
    m = jp @ cov @ jp.T
    return float(math.sqrt(max(np.linalg.eigvalsh(m).max(), 0.0)))
