"""JointReadout: target and actual pose, Cartesian and per joint, and the error."""

from __future__ import annotations

import math
from collections.abc import Sequence

from rich.text import Text
from textual.widgets import Static

from benchjog.console.tui.widgets.columns import Column, table_content
from benchjog.console.tui.widgets.status import update_in_place
from benchjog.kinematics.model import Arm
from benchjog.kinematics.solve import tool_from_joints

ERROR_WARN_DEG = 0.5   # an error this large is shown in yellow (deg, or mm on the quill)


def tool_fields(arm: Arm) -> tuple[tuple[str, str], ...]:
    """(name, unit) of the tool pose coordinates shown to people."""
    if arm.is_scara:
        return (("x", "mm"), ("y", "mm"), ("z", "mm"), ("tool roll", "deg"))
    return (("x", "mm"), ("y", "mm"), ("heading", "deg"))


def _tool_display(arm: Arm, pose: Sequence[float]) -> list[float]:
    out = list(pose)
    out[-1] = math.degrees(math.remainder(out[-1], 2 * math.pi))
    return out


def readout_rows(arm: Arm, actual: Sequence[float] | None, target: Sequence[float] | None,
                 ) -> list[tuple[str, str, str, str]]:
    """Rows (name, target, actual, error = target - actual) in display units: the tool
    pose first, then each joint. Missing values show as ``-``.

    >>> from benchjog.console.cell.armfile import builtin_arm
    >>> rows = readout_rows(builtin_arm("planar-bench"), (0.0, math.pi / 2), None)
    >>> rows[0], rows[4]
    (('x mm', '-', '220.00', '-'), ('elbow deg', '-', '90.00', '-'))
    """
    rows = []
    tool_a = _tool_display(arm, tool_from_joints(arm, tuple(actual))) if actual else None
    tool_t = _tool_display(arm, tool_from_joints(arm, tuple(target))) if target else None
    for i, (name, unit) in enumerate(tool_fields(arm)):
        a = tool_a[i] if tool_a else None
        t = tool_t[i] if tool_t else None
        err = None
        if a is not None and t is not None:
            err = t - a if unit == "mm" else math.degrees(math.remainder(math.radians(t - a), 2 * math.pi))
        rows.append((f"{name} {unit}", _num(t), _num(a), _num(err, signed=True)))
    for i, joint in enumerate(arm.joints):
        a = joint.to_display(actual[i]) if actual else None
        t = joint.to_display(target[i]) if target else None
        err = t - a if (a is not None and t is not None) else None
        rows.append((f"{joint.name} {joint.unit}", _num(t), _num(a), _num(err, signed=True)))
    return rows


def _num(value: float | None, signed: bool = False) -> str:
    if value is None:
        return "-"
    if round(value, 2) == 0:
        value = 0.0   # never "-0.00"
    return f"{value:+.2f}" if signed else f"{value:.2f}"


class JointReadout(Static):
    """The pose table. ``target`` is the joint vector the arm is heading for (the
    chosen branch of the typed target, or the end of the last move)."""

    def __init__(self, arm: Arm, *, id: str | None = None):
        super().__init__(id=id)
        self.arm = arm
        self.rows: list[tuple[str, str, str, str]] = []
        self.border_title = "pose: target / actual / error"

    def show(self, actual: Sequence[float] | None, target: Sequence[float] | None) -> None:
        rows = readout_rows(self.arm, actual, target)
        if rows == self.rows:
            return
        same = len(rows) == len(self.rows)   # one line a row, none wrapped: the same height
        self.rows = rows
        self._draw(same_size=same)

    def _draw(self, *, same_size: bool) -> None:
        rows = self.rows
        columns = [Column(min_width=max(len(r[0]) for r in rows))] + [Column("right")] * 3
        header = [Text("")] + [Text(head) for head in ("target", "actual", "error")]
        n_tool = len(tool_fields(self.arm))
        cells = []
        for i, row in enumerate(rows):
            err_style = ""
            if row[3] != "-" and abs(float(row[3])) > ERROR_WARN_DEG:
                err_style = "yellow"
            cells.append([Text(row[0], style="bold" if i < n_tool else ""), Text(row[1]),
                          Text(row[2]), Text(row[3], style=err_style)])
        update_in_place(self, table_content(columns, header, cells, self.content_size.width),
                        same_size=same_size)

    def on_resize(self, event) -> None:
        if self.rows:
            self._draw(same_size=False)   # the columns spread over the new width
