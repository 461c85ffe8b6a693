"""TargetInput: the field where a person types an exact tool target.

Planar: ``x y`` (mm). SCARA: ``x y z roll`` (mm, mm, mm, degrees). Commas may separate
the numbers too. Bad text gives a one-line message and never a motion.
"""

from __future__ import annotations

from dataclasses import dataclass

from textual import events
from textual.message import Message
from textual.widgets import Input

from benchjog.kinematics.model import Arm
from benchjog.kinematics.solve import TargetError, target_from_display


def target_hint(arm: Arm) -> str:
    return "x y [z [roll]] (mm, deg)" if arm.is_scara else "x y (mm)"


def target_from_text(arm: Arm, text: str) -> tuple[float, ...]:
    """A typed target to the internal tool target (mm, rad).

    Raises:
        TargetError: one line saying what is wrong (empty, not a number, wrong count,
            not finite).

    >>> from benchjog.console.cell.armfile import builtin_arm
    >>> target_from_text(builtin_arm("planar-bench"), "120, 80")
    (120.0, 80.0)
    >>> [round(v, 6) for v in target_from_text(builtin_arm("scara-bench"), "200 100 90 180")]
    [200.0, 100.0, 90.0, 3.141593]
    >>> [round(v, 6) for v in target_from_text(builtin_arm("scara-bench"), "200 100")]
    [200.0, 100.0, 140.0, 0.0]
    """
    parts = text.replace(",", " ").split()
    if not parts:
        raise TargetError(f"type a target: {target_hint(arm)}")
    values = []
    for part in parts:
        try:
            values.append(float(part))
        except ValueError:
            raise TargetError(f"{part!r} is not a number (type {target_hint(arm)})") from None
    if not 2 <= len(values) <= (4 if arm.is_scara else 2):
        raise TargetError(f"a {arm.geometry} arm takes {target_hint(arm)}, got {len(values)} "
                          f"value{'s' if len(values) != 1 else ''}")
    return target_from_display(arm, values)


class FieldInput(Input):
    """A typed field of the console: escape hands the keys back to the screen, and
    space stops the arm whenever ``space_stops()`` says so (then it types no space)."""

    def space_stops(self) -> bool:
        return True

    async def _on_key(self, event: events.Key) -> None:
        if event.key == "space" and self.space_stops():
            event.stop()
            event.prevent_default()
            self.app.action_stop()
            return
        if event.key == "escape":
            event.stop()
            event.prevent_default()
            self.screen.set_focus(None)
            return
        await super()._on_key(event)


class TargetInput(FieldInput):
    """Enter parses the text: :class:`TargetChosen` or :class:`Rejected` (one line).
    Escape hands the keys back to the screen. While a motion runs, space stops it
    (the console's stop key works even here)."""

    @dataclass
    class TargetChosen(Message):
        target: tuple[float, ...]   # mm, rad
        text: str

    @dataclass
    class Rejected(Message):
        reason: str

    class Cleared(Message):
        """Enter on an empty field: forget the target."""

    def __init__(self, arm: Arm, *, id: str | None = None, compact: bool = False):
        super().__init__(placeholder=f"target: {target_hint(arm)}   (enter: preview, escape: back)",
                         id=id, compact=compact)
        self.arm = arm

    async def action_submit(self) -> None:
        if not self.value.strip():
            self.post_message(self.Cleared())
            self.screen.set_focus(None)
            return
        try:
            target = target_from_text(self.arm, self.value)
        except TargetError as exc:
            self.post_message(self.Rejected(str(exc)))
            return
        self.post_message(self.TargetChosen(target, self.value.strip()))
        self.screen.set_focus(None)

    def space_stops(self) -> bool:
        return bool(getattr(self.app, "motion_active", False))
