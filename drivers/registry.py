"""Driver names -> driver classes, imported lazily.

Built-in names map to ``"module:Class"`` strings; other packages add drivers through
the entry-point group ``benchjog.drivers`` (``name = "package.module:Class"``). Nothing
is imported until :func:`create_driver` (or :func:`load_driver_class`) asks for it.
An unknown name raises :class:`DriverNotFound`; a registered one whose import fails
raises :class:`DriverImportError`.
"""

from __future__ import annotations

import importlib
from importlib import metadata

from benchjog.drivers.base import Driver, DriverImportError, DriverNotFound
from benchjog.kinematics.model import Arm

ENTRY_POINT_GROUP = "benchjog.drivers"
BUILTIN_DRIVERS: dict[str, str] = {
    "sim": "benchjog.drivers.sim:SimDriver",
    "serial": "benchjog.drivers.serial_link:SerialDriver",
    "servobus": "benchjog.drivers.servobus.driver:ServoBusDriver",
}


def _entry_points() -> dict[str, str]:
    try:
        eps = metadata.entry_points(group=ENTRY_POINT_GROUP)
    except Exception:  # noqa: BLE001 - a broken installation must not hide the built-ins
        return {}
    return {ep.name: ep.value for ep in eps}


def _targets() -> dict[str, str]:
    targets = _entry_points()
    targets.update(BUILTIN_DRIVERS)  # a plug-in cannot shadow a built-in name
    return targets


def available_drivers() -> list[str]:
    """Every registered driver name, sorted (feeds argparse ``choices``).

    >>> {"serial", "sim"} <= set(available_drivers())
    True
    """
    return sorted(_targets())


def load_driver_class(name: str) -> type[Driver]:
    """The class registered under ``name``, imported now."""
    targets = _targets()
    if name not in targets:
        raise DriverNotFound(f"no driver named {name!r} (available: {', '.join(sorted(targets))})")
    target = targets[name]
    module_name, _, attr = target.partition(":")
    try:
        module = importlib.import_module(module_name)
        cls = module
        for part in (attr.split(".") if attr else []):
            cls = getattr(cls, part)
    except Exception as exc:  # noqa: BLE001 - any import-time failure is reported the same way
        raise DriverImportError(
            f"driver {name!r} ({target}) could not be loaded: {type(exc).__name__}: {exc}") from exc
    if not (isinstance(cls, type) and issubclass(cls, Driver)):
        raise DriverImportError(f"driver {name!r} ({target}) is not a Driver subclass")
    return cls


def create_driver(name: str, arm: Arm, **options) -> Driver:
    """A new, not yet opened driver of the registered ``name`` for ``arm``.

    >>> from benchjog.console.cell.armfile import builtin_arm
    >>> type(create_driver("sim", builtin_arm())).__name__
    'SimDriver'
    """
    return load_driver_class(name)(arm, **options)
