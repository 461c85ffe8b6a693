"""Validate an arm description (the parsed TOML mapping) into an :class:`Arm`.

Pure: takes a mapping, returns a frozen model or raises :class:`ArmSpecError` whose
message names the source, the key and the problem on one line, e.g.
``arm.toml: joints[1].max: not a number``. Reading the file is the caller's job.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

from benchjog.kinematics.model import GEOMETRIES, PLANAR, PRISMATIC, REVOLUTE, SCARA, Arm, Joint, Zone

JOINT_KEYS = ("name", "type", "a", "alpha", "d", "offset", "min", "max", "max_speed",
              "counts_per_unit", "zero", "direction")
# Every key benchjog reads, per table. CONTRACT.md allows more keys (a site's own notes, a
# part number), so an unknown key is refused only when it is a likely misspelling of one
# of these: a `link_clearence` silently dropped would check zones with no clearance.
KNOWN_KEYS = {
    "": ("arm", "joints", "zones", "bus", "calibration"),
    "arm": ("name", "geometry", "singularity_warn_deg", "limit_margin_deg", "limit_margin_mm",
            "tool_speed_max", "jog_step_max", "link_clearance", "jog_session_box",
            "jog_session_z", "jog_session_roll", "jog_session_idle"),
    "joints": JOINT_KEYS + ("max_accel", "servo_id", "servo_model", "servo_offset"),
    "zones": ("name", "kind", "z_min", "z_max", "x_min", "x_max", "y_min", "y_max", "cx", "cy", "r"),
}
MISSPELLING_CUTOFF = 0.8   # difflib ratio above which an unknown key is taken for a known one
REVOLUTE_LIMIT_DEG = 720.0   # two turns either way: beyond that a limit is a typo
PRISMATIC_LIMIT_MM = 10000.0
MIN_SPEED = 0.01  # deg/s or mm/s (and per s^2): slower is a typo, and would plan for ever
ACCEL_PER_SPEED = 4.0  # default max_accel = 4 x max_speed: full speed in 0.25 s (common practice)


MAX_COUNTS = 2**31 - 1  # a signed 32-bit position counter (common practice for controllers)


def number_problem(value: Any) -> str | None:
    """Why a parsed TOML value is not a usable finite number, or None when it is.

    >>> [number_problem(v) for v in (1, 2.5, True, "3", float("nan"), 10 ** 400)]
    [None, None, 'not a number (True)', "not a number ('3')", 'not a finite number (nan)', 'not a finite number (too large)']
    """
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return f"not a number ({value!r})"
    try:
        as_float = float(value)
    except OverflowError:  # a TOML integer of hundreds of digits
        return "not a finite number (too large)"
    if not math.isfinite(as_float):
        return f"not a finite number ({value})"
    return None


class ArmSpecError(ValueError):
    """An arm description is invalid. ``str()`` is the one-line message."""

    def __init__(self, source: str, key: str, problem: str):
        self.source, self.key, self.problem = source, key, problem
        super().__init__(f"{source}: {key}: {problem}")


def misspelt_key(key: str, known: tuple[str, ...]) -> str | None:
    """The known key an unknown one most likely misspells, or None (a key of a site's
    own, or a known one).

    >>> misspelt_key("link_clearence", KNOWN_KEYS["arm"]), misspelt_key("part_no", KNOWN_KEYS["arm"])
    ('link_clearance', None)
    """
    if key in known:
        return None
    import difflib   # only for a file with a key benchjog does not read

    close = difflib.get_close_matches(key, known, n=1, cutoff=MISSPELLING_CUTOFF)
    return close[0] if close else None


class _Reader:
    def __init__(self, source: str):
        self.source = source

    def fail(self, key: str, problem: str) -> ArmSpecError:
        return ArmSpecError(self.source, key, problem)

    def spelling(self, data: Mapping[str, Any], table: str, where: str) -> None:
        """Refuse a key that misspells one benchjog reads in this table (before a
        missing-key error could hide the cause)."""
        known = KNOWN_KEYS[table]
        for key in data:
            if isinstance(key, str) and key not in known:
                meant = misspelt_key(key, known)
                if meant:
                    raise self.fail(f"{where}.{key}" if where else key,
                                    f"unknown key (did you mean {meant}?)")

    def table(self, data: Mapping[str, Any], key: str) -> Mapping[str, Any]:
        if key not in data:
            raise self.fail(key, "missing")
        value = data[key]
        if not isinstance(value, Mapping):
            raise self.fail(key, "must be a table")
        return value

    def number(self, data: Mapping[str, Any], key: str, where: str, default: float | None = None,
               ) -> float:
        full = f"{where}.{key}" if where else key
        if key not in data:
            if default is None:
                raise self.fail(full, "missing")
            return default
        value = data[key]
        problem = number_problem(value)
        if problem:
            raise self.fail(full, problem)
        return float(value)

    def text(self, data: Mapping[str, Any], key: str, where: str, default: str | None = None) -> str:
        full = f"{where}.{key}" if where else key
        if key not in data:
            if default is None:
                raise self.fail(full, "missing")
            return default
        value = data[key]
        if not isinstance(value, str) or not value.strip():
            raise self.fail(full, f"must be a non-empty string ({value!r})")
        return value


def _joint(r: _Reader, data: Any, index: int) -> Joint:
    where = f"joints[{index}]"
    if not isinstance(data, Mapping):
        raise r.fail(where, "must be a table")
    # CONTRACT.md: more keys are allowed (a site's own notes, a part number, ...).
    r.spelling(data, "joints", where)
    name = r.text(data, "name", where)
    jtype = r.text(data, "type", where)
    if jtype not in (REVOLUTE, PRISMATIC):
        raise r.fail(f"{where}.type", f"must be 'revolute' or 'prismatic' ({jtype!r})")
    num = {k: r.number(data, k, where) for k in JOINT_KEYS if k not in ("name", "type")}
    if num["min"] >= num["max"]:
        raise r.fail(f"{where}.min", f"must be below max ({num['min']:g} >= {num['max']:g})")
    bound = REVOLUTE_LIMIT_DEG if jtype == REVOLUTE else PRISMATIC_LIMIT_MM
    for key in ("min", "max"):
        if abs(num[key]) > bound:
            raise r.fail(f"{where}.{key}", f"must lie within +/-{bound:g} "
                         f"{'deg' if jtype == REVOLUTE else 'mm'} ({num[key]:g})")
    if not num["min"] <= num["zero"] <= num["max"]:
        raise r.fail(f"{where}.zero", f"the home pose (count 0) must lie within min..max "
                     f"({num['zero']:g} not in {num['min']:g}..{num['max']:g})")
    if num["max_speed"] < MIN_SPEED:
        raise r.fail(f"{where}.max_speed", f"must be at least {MIN_SPEED:g} ({num['max_speed']:g})")
    accel = r.number(data, "max_accel", where, default=ACCEL_PER_SPEED * num["max_speed"])
    if accel < MIN_SPEED:
        raise r.fail(f"{where}.max_accel", f"must be at least {MIN_SPEED:g} ({accel:g})")
    if num["counts_per_unit"] <= 0:
        raise r.fail(f"{where}.counts_per_unit", f"must be > 0 ({num['counts_per_unit']:g})")
    span = max(abs(num["max"] - num["zero"]), abs(num["min"] - num["zero"]))
    if span * num["counts_per_unit"] > MAX_COUNTS:
        raise r.fail(f"{where}.counts_per_unit", f"too large: the soft limits would be "
                     f"{span * num['counts_per_unit']:.3g} counts from home, beyond the "
                     f"{MAX_COUNTS} a 32-bit signed count holds ({num['counts_per_unit']:g})")
    if num["direction"] not in (1.0, -1.0):
        raise r.fail(f"{where}.direction", f"must be 1 or -1 ({num['direction']:g})")
    scale = math.radians if jtype == REVOLUTE else (lambda v: v)
    return Joint(
        name=name, type=jtype, a_mm=num["a"], alpha_rad=math.radians(num["alpha"]),
        d_mm=num["d"], offset_rad=math.radians(num["offset"]),
        min=scale(num["min"]), max=scale(num["max"]),
        max_speed=scale(num["max_speed"]), max_accel=scale(accel),
        counts_per_unit=num["counts_per_unit"], zero=num["zero"],
        direction=int(num["direction"]),
    )


def _zone(r: _Reader, data: Any, index: int) -> Zone:
    where = f"zones[{index}]"
    if not isinstance(data, Mapping):
        raise r.fail(where, "must be a table")
    r.spelling(data, "zones", where)
    name = r.text(data, "name", where, default=f"zone {index + 1}")
    kind = r.text(data, "kind", where)
    z_min = r.number(data, "z_min", where, default=-math.inf) if "z_min" in data else -math.inf
    z_max = r.number(data, "z_max", where, default=math.inf) if "z_max" in data else math.inf
    if z_min >= z_max:
        raise r.fail(f"{where}.z_min", f"must be below z_max ({z_min:g} >= {z_max:g})")
    if kind == "box":
        v = {k: r.number(data, k, where) for k in ("x_min", "x_max", "y_min", "y_max")}
        for axis in "xy":
            if v[f"{axis}_min"] >= v[f"{axis}_max"]:
                raise r.fail(f"{where}.{axis}_min", f"must be below {axis}_max "
                             f"({v[f'{axis}_min']:g} >= {v[f'{axis}_max']:g})")
        return Zone(name=name, kind=kind, z_min=z_min, z_max=z_max, **v)
    if kind == "circle":
        cx, cy, radius = (r.number(data, k, where) for k in ("cx", "cy", "r"))
        if radius <= 0:
            raise r.fail(f"{where}.r", f"must be > 0 ({radius:g})")
        return Zone(name=name, kind=kind, cx=cx, cy=cy, r=radius, z_min=z_min, z_max=z_max)
    raise r.fail(f"{where}.kind", f"must be 'box' or 'circle' ({kind!r})")


def _check_shape(r: _Reader, geometry: str, joints: tuple[Joint, ...]) -> None:
    """Refuse any chain that is not the contract's planar or SCARA shape."""
    expected = {PLANAR: (REVOLUTE, REVOLUTE), SCARA: (REVOLUTE, REVOLUTE, PRISMATIC, REVOLUTE)}
    types = expected[geometry]
    if len(joints) != len(types):
        raise r.fail("joints", f"a {geometry} arm has {len(types)} joints, not {len(joints)}")
    for i, (joint, want) in enumerate(zip(joints, types)):
        if joint.type != want:
            raise r.fail(f"joints[{i}].type", f"a {geometry} arm needs a {want} joint here, "
                         f"not {joint.type}")
    for i in (0, 1):
        if joints[i].a_mm <= 0:
            raise r.fail(f"joints[{i}].a", f"link length must be > 0 ({joints[i].a_mm:g})")
    near = lambda value, target: abs(value - target) < 1e-9  # noqa: E731
    alphas = [0.0, 0.0] if geometry == PLANAR else [0.0, math.pi, 0.0, 0.0]
    for i, want in enumerate(alphas):
        alpha = joints[i].alpha_rad
        if not (near(alpha, want) or (want == math.pi and near(alpha, -math.pi))):
            raise r.fail(f"joints[{i}].alpha", f"must be {math.degrees(want):g} for a "
                         f"{geometry} arm ({math.degrees(alpha):.9g})")
    if geometry == SCARA:
        for i in (2, 3):
            if joints[i].a_mm != 0:
                raise r.fail(f"joints[{i}].a", f"must be 0 for a scara arm ({joints[i].a_mm:g})")


def arm_from_mapping(data: Mapping[str, Any], source: str = "<arm>") -> Arm:
    """Validate a parsed arm file and build the :class:`Arm`.

    Raises:
        ArmSpecError: naming the key and the problem.
    """
    r = _Reader(source)
    r.spelling(data, "", "")
    head = r.table(data, "arm")
    r.spelling(head, "arm", "arm")
    name = r.text(head, "name", "arm")
    geometry = r.text(head, "geometry", "arm")
    if geometry not in GEOMETRIES:
        raise r.fail("arm.geometry", f"unknown geometry {geometry!r} (planar or scara)")
    raw_joints = data.get("joints")
    if raw_joints is None:
        raise r.fail("joints", "missing")
    if not isinstance(raw_joints, list):
        raise r.fail("joints", "must be an array of tables ([[joints]])")
    joints = tuple(_joint(r, j, i) for i, j in enumerate(raw_joints))
    _check_shape(r, geometry, joints)
    raw_zones = data.get("zones", [])
    if not isinstance(raw_zones, list):
        raise r.fail("zones", "must be an array of tables ([[zones]])")
    zones = tuple(_zone(r, z, i) for i, z in enumerate(raw_zones))

    def positive(key: str, default: float, allow_zero: bool = False) -> float:
        value = r.number(head, key, "arm", default=default)
        if value < 0 or (value == 0 and not allow_zero):
            raise r.fail(f"arm.{key}", f"must be {'>= 0' if allow_zero else '> 0'} ({value:g})")
        return value

    sing_deg = positive("singularity_warn_deg", 5.0, allow_zero=True)
    if sing_deg >= 90:
        raise r.fail("arm.singularity_warn_deg", f"must be below 90 ({sing_deg:g})")
    return Arm(
        name=name, geometry=geometry, joints=joints, zones=zones,
        singularity_warn_rad=math.radians(sing_deg),
        limit_margin_rad=math.radians(positive("limit_margin_deg", 0.5, allow_zero=True)),
        limit_margin_mm=positive("limit_margin_mm", 0.5, allow_zero=True),
        tool_speed_max_mm_s=positive("tool_speed_max", 250.0),
        jog_step_max_mm=positive("jog_step_max", 50.0),
        link_clearance_mm=positive("link_clearance", 0.0, allow_zero=True),
        jog_box_mm=positive("jog_session_box", 25.0),
        jog_z_mm=positive("jog_session_z", 10.0),
        jog_roll_deg=positive("jog_session_roll", 30.0),
        jog_idle_s=positive("jog_session_idle", 30.0),
        source=source,
    )
