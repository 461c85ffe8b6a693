"""BranchTable: both IK branches of the current target, side by side."""

from __future__ import annotations

from dataclasses import dataclass

from rich.text import Text
from textual.message import Message
from textual.widgets import Static

from benchjog.console.tui.widgets.columns import Column, table_content
from benchjog.console.tui.widgets.status import update_in_place
from benchjog.kinematics.accuracy import accuracy_at
from benchjog.kinematics.model import Arm, Branch
from benchjog.kinematics.solve import IKResult

ACTIVE_MARK = ">"
BRANCH_ORDER = (Branch.ELBOW_UP, Branch.ELBOW_DOWN)


def branch_rows(arm: Arm, ik: IKResult | None, active: Branch | None) -> list[tuple[str, ...]]:
    """The table as plain text rows: a header row, one row per joint (display units),
    and a status row (``usable`` or the problems in words). Used by the widget and
    the tests.

    >>> from benchjog.console.cell.armfile import builtin_arm
    >>> from benchjog.kinematics.solve import joints_from_tool
    >>> arm = builtin_arm("planar-bench")
    >>> rows = branch_rows(arm, joints_from_tool(arm, (220.0, 160.0)), Branch.ELBOW_DOWN)
    >>> rows[0], rows[2]
    (('', '  elbow-up', '> elbow-down'), ('elbow', '-90.00 deg', '90.00 deg'))
    """
    header = ("",) + tuple(f"{ACTIVE_MARK if b == active else ' '} {b.value}" for b in BRANCH_ORDER)
    rows: list[tuple[str, ...]] = [header]
    sols = {b: (ik.solution(b) if ik is not None and ik.reachable else None) for b in BRANCH_ORDER}
    for index, joint in enumerate(arm.joints):
        cells = [joint.name]
        for b in BRANCH_ORDER:
            sol = sols[b]
            cells.append(f"{round(joint.to_display(sol.joints[index]), 2) + 0.0:.2f} {joint.unit}"
                         if sol else "-")   # + 0.0: never "-0.00"
        rows.append(tuple(cells))
    status = ["status"]
    for b in BRANCH_ORDER:
        sol = sols[b]
        if ik is None:
            status.append("-")
        elif not ik.reachable:
            status.append("out of reach")
        elif sol is None:
            status.append("no solution")
        else:
            status.append("usable" if sol.usable else "; ".join(sol.problems))
    rows.append(tuple(status))
    rows.append(accuracy_row(arm, sols))
    return rows


def accuracy_row(arm: Arm, sols: dict) -> tuple[str, ...]:
    """The tool's largest step per encoder count on each branch (mm), and the task
    Jacobian's condition number when it is ill-conditioned (kinematics/accuracy.py)."""
    cells = ["mm/count"]
    for b in BRANCH_ORDER:
        sol = sols[b]
        if sol is None:
            cells.append("-")
            continue
        acc = accuracy_at(arm, sol.joints)
        cell = f"{max(acc.step_per_count_mm):.3f}"
        if acc.conditioning:
            cell += " ill-cond. " + (f"{acc.condition_number:.0f}" if acc.condition_number < 1e6 else "inf")
        cells.append(cell)
    return tuple(cells)


class BranchTable(Static):
    """Shows :func:`branch_rows`; :meth:`choose_other` posts :class:`BranchChosen`."""

    @dataclass
    class BranchChosen(Message):
        branch: Branch

    def __init__(self, arm: Arm, *, id: str | None = None):
        super().__init__(id=id)
        self.arm = arm
        self.ik: IKResult | None = None
        self.active: Branch | None = None
        self.title = "branches"
        self.rows: list[tuple[str, ...]] = []

    def show(self, ik: IKResult | None, active: Branch | None, title: str) -> None:
        rows = branch_rows(self.arm, ik, active)
        if rows == self.rows and title == self.title:
            return
        same = len(rows) == len(self.rows)   # one line a row (no_wrap): the same height
        self.ik, self.active, self.title, self.rows = ik, active, title, rows
        self.border_title = title
        self._draw(same_size=same)

    def _draw(self, *, same_size: bool) -> None:
        rows = self.rows
        header = [Text(head, style="bold reverse" if head.startswith(ACTIVE_MARK) else "bold")
                  for head in rows[0]]
        # "> elbow-down" on one line even at 80 columns
        columns = [Column(min_width=max(len(r[0]) for r in rows))] + [
            Column(min_width=len(head), ratio=1) for head in rows[0][1:]]
        cells = []
        for row in rows[1:]:
            cells.append([Text(cell, style=("green" if cell == "usable" else "yellow")
                               if row[0] == "status" and i > 0 else "")
                          for i, cell in enumerate(row)])
        update_in_place(self, table_content(columns, header, cells, self.content_size.width),
                        same_size=same_size)

    def on_resize(self, event) -> None:
        if self.rows:
            self._draw(same_size=False)   # the columns spread over the new width

    def other_branch(self) -> Branch | None:
        """The branch one would switch to, when the target has two solutions."""
        if self.ik is None or not self.ik.reachable or len(self.ik.solutions) < 2:
            return None
        return (self.active or Branch.ELBOW_DOWN).other()

    def choose_other(self) -> None:
        other = self.other_branch()
        if other is not None:
            self.post_message(self.BranchChosen(other))
