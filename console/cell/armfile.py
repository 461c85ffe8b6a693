"""Read arm files (TOML) and the built-in demo arms."""

from __future__ import annotations

import math
import sys
import tomllib
from dataclasses import dataclass
from pathlib import Path

from benchjog.kinematics.armspec import ArmSpecError, arm_from_mapping
from benchjog.kinematics.model import Arm

BUILTIN_ARMS = ("planar-bench", "scara-bench")
DEFAULT_ARM = "planar-bench"
MAX_ARM_FILE_BYTES = 1024 * 1024  # an arm file is a few kB



def _info(message: str, *args: object) -> None:
    """Log at INFO when logging is in use (``-v``); a command without it does not pay
    for importing the logging package just to drop the record."""
    logging = sys.modules.get("logging")
    if logging is not None:
        logging.getLogger(__name__).info(message, *args)


def _arm_from_text(text: str, source: str) -> Arm:
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ArmSpecError(source, "toml", str(exc).splitlines()[0]) from None
    except RecursionError:
        raise ArmSpecError(source, "toml", "arrays or tables nested too deeply") from None
    arm = arm_from_mapping(data, source)
    _info("arm %s (%s, %d joints) from %s", arm.name, arm.geometry, arm.n_joints, source)
    return arm


def builtin_arm(name: str = DEFAULT_ARM) -> Arm:
    """One of the demo arms shipped with the package."""
    if name not in BUILTIN_ARMS:
        raise ArmSpecError(name, "arm", f"no built-in arm of that name ({', '.join(BUILTIN_ARMS)})")
    return _arm_from_text(builtin_arm_text(name), name)


def builtin_arm_text(name: str) -> str:
    """The TOML text of a built-in arm: read beside this module when the package is
    installed as files (the usual case, and no importlib.resources to load: it pulls in
    zipfile, tempfile and shutil), through importlib.resources otherwise (a zip)."""
    here = Path(__file__).with_name("arms") / f"{name}.toml"
    try:
        return here.read_text(encoding="utf-8")
    except OSError:
        from importlib import resources

        return (resources.files("benchjog.console.cell.arms").joinpath(f"{name}.toml")
                .read_text(encoding="utf-8"))


def load_arm(spec: str | Path | None) -> Arm:
    """An arm from a file path, or a built-in name when no such file exists; the
    default demo arm for ``None``.

    Raises:
        ArmSpecError: unreadable or invalid file, one line naming file, key, problem.
    """
    if spec is None:
        return builtin_arm(DEFAULT_ARM)
    from benchjog.console.cell.safe_files import FileError, read_bytes

    name = str(spec)
    try:
        exists = Path(spec).exists()
    except (OSError, ValueError):  # a NUL byte, a name too long: read_bytes says which
        exists = True
    if not exists:
        if name in BUILTIN_ARMS:
            return builtin_arm(name)
        if "/" not in name and not name.endswith(".toml"):
            raise ArmSpecError(name, "arm", "no such arm file or built-in arm (built-in: "
                               f"{', '.join(BUILTIN_ARMS)})")
    try:
        raw = read_bytes(spec, MAX_ARM_FILE_BYTES)
    except FileError as exc:
        raise ArmSpecError(exc.source, "file", exc.problem.removeprefix("cannot read: ")) from None
    try:
        text = raw.decode("utf-8-sig")  # a leading byte-order mark (some editors) is dropped
    except UnicodeDecodeError:
        raise ArmSpecError(str(spec), "file", "not UTF-8 text") from None
    return _arm_from_text(text, str(spec))


@dataclass(frozen=True)
class CalibrationInfo:
    """What ``solve`` uses of an arm file's calibration: the parameter keys and their
    covariance (mm and deg), and the fit's RMS residual."""

    keys: list[str]
    covariance: list[list[float]]
    rms_after_mm: float


def calibration_of(path: str | Path | None) -> CalibrationInfo | None:
    """The ``[calibration]`` table of an arm file, if it has a usable one (None for a
    built-in arm name or a file without one)."""
    if path is None or not Path(path).is_file():
        return None
    from benchjog.console.cell.safe_files import FileError, read_text

    try:
        data = tomllib.loads(read_text(path))
    except (tomllib.TOMLDecodeError, FileError):
        return None
    table = data.get("calibration")
    if not isinstance(table, dict):
        return None
    keys, cov = table.get("parameters"), table.get("covariance")
    if not (isinstance(keys, list) and isinstance(cov, list) and len(cov) == len(keys)
            and all(isinstance(r, list) and len(r) == len(keys) for r in cov)):
        return None
    try:
        rows = [[float(v) for v in r] for r in cov]
    except (TypeError, ValueError):
        return None
    if not all(math.isfinite(v) for r in rows for v in r):
        return None
    return CalibrationInfo([str(k) for k in keys], rows, float(table.get("rms_after_mm", math.nan)))
