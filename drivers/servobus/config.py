"""The arm file's servo-bus keys: a ``[bus]`` table and ``servo_*`` keys per joint.

```
[bus]
baud = 1000000          # the servos' baud rate (default 1000000)
mode = "position"       # "position" (one turn, the servo's own limits fence it) or "extended"
rate_hz = 50            # goal positions streamed this many times a second (default 50)
watchdog_ms = 100       # the servos' bus watchdog (20 ms steps, 20..2540; default 100)
[bus.outputs]           # optional: output channel -> a one-byte register of one servo
0 = { id = 3, address = 65 }

[[joints]]
...
servo_id = 1            # the joint's servo id on the bus (default: the joint's number)
servo_model = 1060      # optional: model number the servo must report when opened
servo_offset = 0        # Homing Offset register, pulses: the joint's mechanical zero
```
Everything here is optional: an arm file without ``[bus]`` drives the servos at ids 1..n
with the defaults. Errors are :class:`ArmSpecError` lines naming file and key.
"""

from __future__ import annotations

import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from benchjog.kinematics.armspec import ArmSpecError
from benchjog.kinematics.model import Arm
from benchjog.drivers.servobus import packet as P
from benchjog.drivers.servobus import table as T

DEFAULT_BAUD = 1_000_000
DEFAULT_RATE_HZ = 50.0
DEFAULT_WATCHDOG_MS = 100
BUS_SHARE_MAX = 0.8   # a tick's bytes may take at most this share of the wire (common practice: headroom for replies' delays)


def tick_bytes(n_servos: int) -> int:
    """Bytes on the wire for one streaming tick: a sync write of 4-byte goals (14 + 5n),
    a sync read (14 + n) and n status packets of 15 bytes.

    >>> tick_bytes(2)
    70
    """
    return 28 + 21 * n_servos


@dataclass(frozen=True)
class BusConfig:
    """Where each joint's servo is and how the bus is run."""

    ids: tuple[int, ...]
    baud: int = DEFAULT_BAUD
    mode: int = T.POSITION_MODE
    rate_hz: float = DEFAULT_RATE_HZ
    watchdog_ms: int = DEFAULT_WATCHDOG_MS
    models: tuple[int | None, ...] = ()
    offsets: tuple[int, ...] = ()
    outputs: dict[int, tuple[int, int]] = field(default_factory=dict)

    @classmethod
    def for_arm(cls, arm: Arm, **kw) -> "BusConfig":
        """Defaults for ``arm``: ids 1..n, no model check, offsets 0."""
        n = arm.n_joints
        kw.setdefault("ids", tuple(range(1, n + 1)))
        kw.setdefault("models", (None,) * n)
        kw.setdefault("offsets", (0,) * n)
        return cls(**kw)


def _int(value: Any, source: str, key: str, lo: int, hi: int) -> int:
    if isinstance(value, bool) or not isinstance(value, int):
        raise ArmSpecError(source, key, f"not a whole number ({value!r})")
    if not lo <= value <= hi:
        raise ArmSpecError(source, key, f"must be {lo}..{hi}, got {value}")
    return value


def bus_config_from_mapping(data: Mapping[str, Any], n_joints: int, source: str) -> BusConfig:
    """Validate the ``[bus]`` table and the joints' ``servo_*`` keys of a parsed arm file.

    >>> bus_config_from_mapping({"bus": {"baud": 57600}, "joints": [{"servo_id": 4}, {}]}, 2, "a.toml").ids
    (4, 2)
    >>> bus_config_from_mapping({"joints": [{"servo_id": 3}, {"servo_id": 3}]}, 2, "a.toml")
    Traceback (most recent call last):
    ...
    benchjog.kinematics.armspec.ArmSpecError: a.toml: joints[2].servo_id: id 3 is already joints[1]'s
    """
    bus = data.get("bus", {})
    if not isinstance(bus, Mapping):
        raise ArmSpecError(source, "bus", "must be a table")
    known = {"baud", "mode", "rate_hz", "watchdog_ms", "outputs"}
    for key in bus:
        if key not in known:
            raise ArmSpecError(source, f"bus.{key}", f"unknown key (known: {', '.join(sorted(known))})")
    baud = _int(bus.get("baud", DEFAULT_BAUD), source, "bus.baud", 9600, 10_500_000)
    mode_name = bus.get("mode", "position")
    if mode_name not in T.OPERATING_MODES:
        raise ArmSpecError(source, "bus.mode", f"must be one of {', '.join(T.OPERATING_MODES)}, got {mode_name!r}")
    rate = bus.get("rate_hz", DEFAULT_RATE_HZ)
    if isinstance(rate, bool) or not isinstance(rate, (int, float)) or not 1.0 <= rate <= 1000.0:
        raise ArmSpecError(source, "bus.rate_hz", f"must be a number 1..1000, got {rate!r}")
    watchdog = _int(bus.get("watchdog_ms", DEFAULT_WATCHDOG_MS), source, "bus.watchdog_ms", 20, 2540)
    if watchdog < 3 * 1000.0 / rate:
        raise ArmSpecError(source, "bus.watchdog_ms",
                           f"{watchdog} ms is less than three write periods at {rate:g} Hz")
    need = tick_bytes(n_joints) * rate
    budget = BUS_SHARE_MAX * baud / 10.0
    if need > budget:
        raise ArmSpecError(source, "bus.rate_hz",
                           f"{rate:g} Hz x {tick_bytes(n_joints)} bytes a tick is {need:.0f} bytes/s, more than "
                           f"{BUS_SHARE_MAX:.0%} of what {baud} baud carries ({baud / 10:.0f} bytes/s): "
                           "lower rate_hz or raise the baud rate")
    joints = data.get("joints", [])
    ids, models, offsets = [], [], []
    seen: dict[int, int] = {}
    for i in range(n_joints):
        j = joints[i] if i < len(joints) and isinstance(joints[i], Mapping) else {}
        key = f"joints[{i + 1}]"
        sid = _int(j.get("servo_id", i + 1), source, f"{key}.servo_id", 0, P.MAX_ID)
        if sid in seen:
            raise ArmSpecError(source, f"{key}.servo_id", f"id {sid} is already joints[{seen[sid]}]'s")
        seen[sid] = i + 1
        ids.append(sid)
        model = j.get("servo_model")
        models.append(None if model is None else _int(model, source, f"{key}.servo_model", 0, 65535))
        offsets.append(_int(j.get("servo_offset", 0), source, f"{key}.servo_offset", -1_044_479, 1_044_479))
    outputs: dict[int, tuple[int, int]] = {}
    table = bus.get("outputs", {})
    if not isinstance(table, Mapping):
        raise ArmSpecError(source, "bus.outputs", "must be a table")
    for name, spec in table.items():
        key = f"bus.outputs.{name}"
        if not (isinstance(name, str) and name.isdigit() and 0 <= int(name) <= 7):
            raise ArmSpecError(source, key, "an output channel is 0..7")
        if not isinstance(spec, Mapping) or set(spec) != {"id", "address"}:
            raise ArmSpecError(source, key, "must be a table { id = N, address = A }")
        outputs[int(name)] = (_int(spec["id"], source, f"{key}.id", 0, P.MAX_ID),
                              _int(spec["address"], source, f"{key}.address", 0, 65535))
    return BusConfig(ids=tuple(ids), baud=baud, mode=T.OPERATING_MODES[mode_name], rate_hz=float(rate),
                     watchdog_ms=watchdog, models=tuple(models), offsets=tuple(offsets), outputs=outputs)


def has_bus_table(path: str | Path) -> bool:
    """True when the file at ``path`` is TOML with a ``[bus]`` table (False when it
    cannot be read: the arm file loader reports that)."""
    try:
        data = tomllib.loads(Path(path).read_text(encoding="utf-8-sig"))
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError):
        return False
    return isinstance(data.get("bus"), Mapping)


def bus_config_for_arm(arm: Arm) -> BusConfig:
    """The bus keys of the file the arm came from, or the defaults for a built-in arm."""
    path = Path(arm.source)
    if arm.source.startswith("<") or not path.is_file():
        return BusConfig.for_arm(arm)
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8-sig"))
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError) as exc:
        raise ArmSpecError(arm.source, "file", str(exc).splitlines()[0]) from None
    return bus_config_from_mapping(data, arm.n_joints, arm.source)
