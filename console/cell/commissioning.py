"""Commissioning one axis: its direction, counts per unit, zero at a reference mark, safe
travel and soft limits, and a homing check; the result is the arm file with that joint's
``direction``, ``counts_per_unit``, ``zero``, ``min`` and ``max`` changed (the user's
comments kept, via tomlkit).

Everything here is in controller counts where it matters, so the values found do not
depend on the arm file being right already: the arm file of the session only plans the
motions (through the interlock, at reduced speed), and its soft limits bound them. To
find travel beyond those limits, widen them in the file by hand first, deliberately.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import tomlkit

from benchjog.console.numbers import finite_number
from benchjog.kinematics.model import Joint

# the walk-through's defaults (the command line's options have the same)
DIRECTION_STEP = 2.0   # deg or mm: the direction test jog
TEST_MOVE = 10.0       # deg or mm by the arm file: the counts-per-unit test move
MARGIN = 2.0           # deg or mm: soft limits this far inside the travel found
AXIS_STEP_MAX = 15.0   # deg or mm: the largest typed step while commissioning (the gate's joint-jog cap)

STAGES = ("direction", "counts per unit", "zero", "soft limits", "homing")


class CommissionError(ValueError):
    """A measurement that cannot be used (zero, negative, not finite, too narrow)."""


def sense_words(joint: Joint) -> str:
    """The joint's positive sense, as a person at the bench sees it."""
    if joint.is_revolute:
        return "counter-clockwise seen from above (the positive sense)"
    return "down, towards the work (the positive sense: +value lowers the tool)"


def number_from_text(text: str) -> float:
    """A typed finite number.

    >>> number_from_text(" 10.5 ")
    10.5
    >>> number_from_text("ten")
    Traceback (most recent call last):
    ...
    benchjog.console.cell.commissioning.CommissionError: not a number ('ten')
    """
    return finite_number(text, CommissionError)


def step_from_text(text: str, unit: str) -> float:
    """A typed jog step (deg or mm), at most AXIS_STEP_MAX either way.

    >>> step_from_text("-2.5", "deg")
    -2.5
    >>> step_from_text("40", "deg")
    Traceback (most recent call last):
    ...
    benchjog.console.cell.commissioning.CommissionError: a step is at most 15 deg
    """
    try:
        delta = float(text)
    except ValueError:
        raise CommissionError(f"not a step: {text.strip()!r}") from None
    if not math.isfinite(delta) or abs(delta) > AXIS_STEP_MAX:
        raise CommissionError(f"a step is at most {AXIS_STEP_MAX:g} {unit}")
    return delta


def homing_words(name: str, completed: bool, counts: int, detail: str) -> str:
    """What the homing check found, in words (the count should be 0 after homing)."""
    if not completed:
        return f"not done: {detail}"
    return f"done, {name} at count {counts}" + ("" if counts == 0 else " (not 0: check the home switch)")


def counts_per_unit_from_measure(counts_moved: int, measured: float) -> float:
    """Counts per degree (mm) from a move of known counts and the distance a person
    measured: ``|counts| / |measured|``.

    >>> counts_per_unit_from_measure(400, 10.5)     # 400 counts turned it 10.5 deg
    38.095238095238095
    """
    if not math.isfinite(measured) or measured == 0:
        raise CommissionError(f"the measured distance must be a finite number other than 0 ({measured!r})")
    if counts_moved == 0:
        raise CommissionError("the test move was 0 counts")
    return abs(counts_moved) / abs(measured)


def zero_from_mark(counts: int, mark_value: float, counts_per_unit: float, direction: int) -> float:
    """The joint value at count 0, when the axis sits at ``counts`` on a reference mark
    whose joint value is ``mark_value`` (PROTOCOL.md: counts = direction * (value - zero)
    * counts_per_unit, solved for zero).

    >>> zero_from_mark(1800, 45.0, 40.0, -1)        # the demo elbow: 45 deg at 1800 counts
    90.0
    """
    return mark_value - counts / (counts_per_unit * direction)


def value_from_counts(counts: int, zero: float, counts_per_unit: float, direction: int) -> float:
    """The display value (deg, mm) at ``counts`` for the given conversion.

    >>> value_from_counts(1800, 90.0, 40.0, -1)
    45.0
    """
    return zero + counts / (counts_per_unit * direction)


def soft_limits_from_travel(end_a: float, end_b: float, margin: float) -> tuple[float, float]:
    """Soft limits ``margin`` inside the safe travel found at the two ends.

    >>> soft_limits_from_travel(152.0, -148.5, 2.0)
    (-146.5, 150.0)
    """
    lo, hi = sorted((end_a, end_b))
    if not margin >= 0:
        raise CommissionError(f"the margin must be >= 0 ({margin!r})")
    if hi - lo <= 2 * margin:
        raise CommissionError(f"the travel found ({lo:g} .. {hi:g}) is not wider than twice the "
                              f"margin ({margin:g})")
    return lo + margin, hi - margin


@dataclass
class AxisFindings:
    """What the walk-through found for one axis, in the arm file's units."""

    direction: int
    counts_per_unit: float
    zero: float
    min: float | None = None
    max: float | None = None
    homing: str = "not checked"

    def changes(self, joint: Joint) -> dict[str, float | int]:
        out: dict[str, float | int] = {}
        if self.direction != joint.direction:
            out["direction"] = self.direction
        if not math.isclose(self.counts_per_unit, joint.counts_per_unit, rel_tol=1e-12):
            out["counts_per_unit"] = round(self.counts_per_unit, 6)
        if not math.isclose(self.zero, joint.zero, abs_tol=1e-9):
            out["zero"] = round(self.zero, 5)
        for key, now in (("min", joint.to_display(joint.min)), ("max", joint.to_display(joint.max))):
            value = getattr(self, key)
            if value is not None and not math.isclose(value, now, abs_tol=1e-9):
                out[key] = round(value, 4)
        return out


def findings_line(joint: Joint, found: AxisFindings, margin: float) -> str:
    """One line: what was found for ``joint``."""
    unit = joint.unit
    limits = ("soft limits as they were" if found.min is None else
              f"soft limits {found.min:.4f} .. {found.max:.4f} {unit} ({margin:g} {unit} inside "
              "the travel found)")
    return (f"{joint.name}: direction {found.direction}, counts per {unit} {found.counts_per_unit:.6g}, "
            f"zero {found.zero:.5f} {unit}, {limits}; homing {found.homing}")


def commissioned_text(original: str, index: int, changes: dict[str, float | int]) -> str:
    """The arm file's text with ``changes`` set on ``joints[index]``; comments and every
    other key kept."""
    doc = tomlkit.parse(original)
    table = doc["joints"][index]
    for key, value in changes.items():
        table[key] = value
    return tomlkit.dumps(doc)
