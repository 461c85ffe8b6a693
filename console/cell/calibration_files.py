"""The calibration's files: the fixture plate's holes, the recorded touches, and the
corrected arm file (the user's comments kept, via tomlkit).

Plate file (TOML), a list of holes or a grid, coordinates in the plate's frame (mm)::

    [plate]
    name = "bench plate"
    base = [-260.0, 40.0, 0.0]     # optional: where the drawing puts the arm's base
                                   # (planar x, y, yaw deg; SCARA x, y, z, yaw deg)
    [[holes]]
    name = "A1"
    x = 20.0
    y = 20.0
    z = 0.0                        # SCARA: the hole's top in the plate's frame

    [grid]                         # or instead of [[holes]]: rows x cols at a pitch
    pitch = 40.0
    rows = 7
    cols = 9
    x0 = 0.0                       # the first hole (name "r1c1")
    y0 = 0.0
    z = 0.0

Touches file: what ``benchjog calibrate touch`` recorded, one ``[[touches]]`` per touch
with the hole's name, its plate coordinates, the branch and the controller's counts.
Counts, not joint values, are kept: the fit reads them through the arm file it is
given, and a later arm file can refit the same touches.
"""

from __future__ import annotations

import difflib
import math
import tomllib
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any


from benchjog.console.cell.safe_files import FileError, read_text, toml_text, write_atomic
from benchjog.drivers.calibration import joints_from_counts
from benchjog.kinematics import identify
from benchjog.kinematics.armspec import arm_from_mapping
from benchjog.kinematics.model import Arm, Branch


@dataclass(frozen=True)
class Plate:
    name: str
    holes: tuple[tuple[str, tuple[float, ...]], ...]   # (name, plate coordinates mm)
    base: tuple[float, ...]                             # nominal base pose (mm, rad)


@dataclass(frozen=True)
class TouchRecord:
    hole: str
    hole_mm: tuple[float, ...]
    branch: str
    counts: tuple[int, ...]


def _number(source: str, key: str, value: Any) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise FileError(source, key, f"not a number ({value!r})")
    if not math.isfinite(value):
        raise FileError(source, key, "not a finite number")
    return float(value)


def _load_toml(path: str | Path) -> dict:
    text = read_text(path)
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise FileError(str(path), "toml", str(exc).splitlines()[0]) from None


def load_plate(path: str | Path, arm: Arm) -> Plate:
    """Read a plate file; holes get the arm's coordinate count (x, y; SCARA x, y, z)."""
    src = str(path)
    data = _load_toml(path)
    head = data.get("plate", {})
    if not isinstance(head, dict):
        raise FileError(src, "plate", "must be a table")
    dims = identify.dims_of(arm)
    holes: list[tuple[str, tuple[float, ...]]] = []
    raw = data.get("holes", [])
    if not isinstance(raw, list):
        raise FileError(src, "holes", "must be an array of tables ([[holes]])")
    for i, h in enumerate(raw):
        key = f"holes[{i}]"
        if not isinstance(h, dict):
            raise FileError(src, key, "must be a table")
        name = str(h.get("name", f"h{i + 1}"))
        for need in ("x", "y"):
            if need not in h:
                raise FileError(src, f"{key}.{need}", "missing")
        coords = [_number(src, f"{key}.x", h["x"]), _number(src, f"{key}.y", h["y"])]
        if dims == 3:
            coords.append(_number(src, f"{key}.z", h.get("z", 0.0)))
        holes.append((name, tuple(coords)))
    grid = data.get("grid")
    if grid is not None:
        if not isinstance(grid, dict):
            raise FileError(src, "grid", "must be a table")
        pitch = _number(src, "grid.pitch", grid.get("pitch"))
        if pitch <= 0:
            raise FileError(src, "grid.pitch", f"must be > 0 ({pitch:g})")
        counts = []
        for k in ("rows", "cols"):
            v = grid.get(k)
            if not isinstance(v, int) or isinstance(v, bool) or not 1 <= v <= 100:
                raise FileError(src, f"grid.{k}", f"must be a whole number 1..100 ({v!r})")
            counts.append(v)
        x0 = _number(src, "grid.x0", grid.get("x0", 0.0))
        y0 = _number(src, "grid.y0", grid.get("y0", 0.0))
        z = _number(src, "grid.z", grid.get("z", 0.0))
        for r in range(counts[0]):
            for c in range(counts[1]):
                coords = (x0 + c * pitch, y0 + r * pitch) + ((z,) if dims == 3 else ())
                holes.append((f"r{r + 1}c{c + 1}", coords))
    if not holes:
        raise FileError(src, "holes", "no holes: give [[holes]] or a [grid]")
    names = [n for n, _ in holes]
    dup = next((n for n in names if names.count(n) > 1), None)
    if dup is not None:
        raise FileError(src, "holes", f"the name {dup!r} is used twice")
    base_raw = head.get("base", [])
    want = dims + 1
    if not isinstance(base_raw, list) or (base_raw and len(base_raw) != want):
        raise FileError(src, "plate.base", f"must be {want} numbers "
                        f"({'x, y, z, yaw' if dims == 3 else 'x, y, yaw'}; mm and deg)")
    base = [_number(src, "plate.base", v) for v in base_raw] or [0.0] * want
    base[-1] = math.radians(base[-1])
    return Plate(str(head.get("name", Path(src).stem)), tuple(holes), tuple(base))


def touches_text(arm: Arm, plate_path: str, records: Sequence[TouchRecord]) -> str:
    doc = {"touches_of": {"arm": arm.name, "plate": plate_path},
           "touches": [{"hole": r.hole, "at": [float(v) for v in r.hole_mm], "branch": r.branch,
                        "counts": [int(c) for c in r.counts]} for r in records]}
    return toml_text(doc, header="Touched fixture-plate holes, recorded by benchjog calibrate touch.\n"
                              "at: the hole in the plate's frame (mm); counts: the controller's.")


def save_touches(path: str | Path, arm: Arm, plate_path: str, records: Sequence[TouchRecord]) -> None:
    write_atomic(path, touches_text(arm, plate_path, records))


def load_touches(path: str | Path, arm: Arm) -> list[TouchRecord]:
    src = str(path)
    data = _load_toml(path)
    raw = data.get("touches")
    if not isinstance(raw, list):
        raise FileError(src, "touches", "missing (an array of tables [[touches]])")
    out = []
    dims = identify.dims_of(arm)
    for i, t in enumerate(raw):
        key = f"touches[{i}]"
        if not isinstance(t, dict):
            raise FileError(src, key, "must be a table")
        at, counts = t.get("at"), t.get("counts")
        if not isinstance(at, list) or len(at) != dims:
            raise FileError(src, f"{key}.at", f"must be {dims} numbers (mm)")
        if not isinstance(counts, list) or len(counts) != arm.n_joints:
            raise FileError(src, f"{key}.counts", f"must be {arm.n_joints} whole numbers")
        if not all(isinstance(c, int) and not isinstance(c, bool) for c in counts):
            raise FileError(src, f"{key}.counts", "must be whole numbers")
        branch = str(t.get("branch", ""))
        out.append(TouchRecord(str(t.get("hole", f"t{i + 1}")),
                               tuple(_number(src, f"{key}.at", v) for v in at), branch,
                               tuple(counts)))
    return out


def touches_for_fit(arm: Arm, records: Sequence[TouchRecord]) -> list[identify.Touch]:
    """Touches as the identification takes them: counts read through the arm file."""
    return [identify.Touch(r.hole_mm, joints_from_counts(arm, r.counts), r.hole) for r in records]


# -- the corrected arm file ---------------------------------------------------------------

def _r(value: float, digits: int) -> float:
    return float(round(value, digits))


def corrected_text(original: str, result: identify.Identification) -> str:
    """The arm file's text with the fitted link lengths and zeros, and a ``[calibration]``
    table (the fit's summary and covariance, which ``solve`` reads back); every comment
    and every other key stays as the user wrote it."""
    import tomlkit  # only when an arm file is written: solve reads this module too

    doc = tomlkit.parse(original)
    joints = doc["joints"]
    fixed = result.corrected
    for p in result.params:
        if p.kind == "a":
            joints[p.joint]["a"] = _r(fixed.joints[p.joint].a_mm, 4)
        elif p.kind == "zero":
            joints[p.joint]["zero"] = _r(fixed.joints[p.joint].zero, 5)
    keys, cov = result.covariance_display()
    table = tomlkit.table()
    table.comment("written by benchjog calibrate apply from the fit: mm and deg")
    table["touches"] = result.n_touches
    table["rms_before_mm"] = _r(identify.rms_mm(result.residuals_before_mm), 4)
    table["rms_after_mm"] = _r(identify.rms_mm(result.residuals_after_mm), 4)
    table["condition_number"] = _r(result.condition, 2)
    all_keys = [p.key for p in identify.params_of(result.arm)]
    base = [result.vector[all_keys.index(f"base.{k}")] for k in ("x", "y", "z") if f"base.{k}" in all_keys]
    yaw = math.degrees(result.vector[all_keys.index("base.yaw")])
    table["base_in_plate"] = [_r(float(v), 4) for v in base] + [_r(yaw, 5)]
    table["base_in_plate"].comment("x, y (SCARA: x, y, z) mm, yaw deg")
    table["parameters"] = keys
    table["std_errors"] = [float(f"{e.std_error:.4g}") for e in result.estimates]
    table["covariance"] = [[float(f"{v:.6g}") for v in row] for row in cov]
    if "calibration" in doc:
        del doc["calibration"]
    doc.add(tomlkit.nl())
    doc["calibration"] = table
    return tomlkit.dumps(doc)


def check_arm_text(text: str, source: str) -> Arm:
    """The arm a text describes, or the arm file's own one-line error."""
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise FileError(source, "toml", str(exc).splitlines()[0]) from None
    return arm_from_mapping(data, source)


def diff_text(old: str, new: str, name: str, label: str = "corrected") -> str:
    return "".join(difflib.unified_diff(old.splitlines(keepends=True), new.splitlines(keepends=True),
                                        f"{name} (now)", f"{name} ({label})"))


def write_arm_file(path: str | Path, text: str) -> None:
    """Atomically, the previous version kept as ``<file>.bak``."""
    write_atomic(path, text, backup=True)


def branch_of(arm: Arm, joints: Sequence[float]) -> str:
    """The contract's branch label of a pose (elbow-down: elbow > 0)."""
    t2 = joints[1] + arm.joints[1].offset_rad
    return (Branch.ELBOW_DOWN if math.sin(t2) >= 0 else Branch.ELBOW_UP).value


def arm_text(arm: Arm) -> str:
    """The arm file's text: the file it came from, or the built-in arm's."""
    if Path(arm.source).is_file():
        return read_text(arm.source)
    from benchjog.console.cell.armfile import builtin_arm_text

    return builtin_arm_text(arm.source)
