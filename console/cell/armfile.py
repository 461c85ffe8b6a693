"""Read arm files (TOML) and the built-in demo arms."""

from __future__ import annotations

import tomllib
from importlib import resources
from pathlib import Path

from benchjog.kinematics.armspec import ArmSpecError, arm_from_mapping
from benchjog.kinematics.model import Arm

BUILTIN_ARMS = ("planar-bench", "scara-bench")
DEFAULT_ARM = "planar-bench"


def _arm_from_text(text: str, source: str) -> Arm:
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ArmSpecError(source, "toml", str(exc).splitlines()[0]) from None
    return arm_from_mapping(data, source)


def builtin_arm(name: str = DEFAULT_ARM) -> Arm:
    """One of the demo arms shipped with the package."""
    if name not in BUILTIN_ARMS:
        raise ArmSpecError(name, "arm", f"no built-in arm of that name ({', '.join(BUILTIN_ARMS)})")
    text = resources.files("benchjog.console.cell.arms").joinpath(f"{name}.toml").read_text(encoding="utf-8")
    return _arm_from_text(text, name)


def load_arm(spec: str | Path | None) -> Arm:
    """An arm from a file path, or a built-in name when no such file exists; the
    default demo arm for ``None``.

    Raises:
        ArmSpecError: unreadable or invalid file, one line naming file, key, problem.
    """
    if spec is None:
        return builtin_arm(DEFAULT_ARM)
    path = Path(spec)
    if not path.exists() and str(spec) in BUILTIN_ARMS:
        return builtin_arm(str(spec))
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise ArmSpecError(str(spec), "file", exc.strerror or str(exc)) from None
    try:
        text = raw.decode("utf-8-sig")  # a leading byte-order mark (some editors) is dropped
    except UnicodeDecodeError:
        raise ArmSpecError(str(spec), "file", "not UTF-8 text") from None
    return _arm_from_text(text, str(spec))
