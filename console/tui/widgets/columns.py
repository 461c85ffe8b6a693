"""Plain-text tables for the panels that change on a key (the pose readout, the branch
table).

A rich ``Table`` measures and renders every cell through its general layout, 2-3 ms a
table, on every key that changes one number. :func:`columns_text` writes out the very
layout such a table has with the options these panels use (no box, no edge, no edge
padding, collapsed padding, ``expand``, every column ``no_wrap``; some columns with a
``min_width`` or a ``ratio``) as one ``Text``: the same characters and styles, in a
fraction of the time. It gives None whenever a cell would not fit its column (rich would
then shrink, crop or wrap), and the caller uses rich's ``Table`` for that case.
tests/test_columns.py checks it against rich's own ``Table`` cell by cell. The layout is
that of rich today; an older rich (13.3.3, the dependency floor) widens a ``min_width``
column by one undrawn padding cell, so there the panels differ from its Table by that
cell (and the test skips).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from math import ceil

from rich.cells import cell_len
from rich.style import Style
from rich.table import Table
from rich.text import Text

HEADER_STYLE = Style(bold=True)   # rich's default "table.header" style


@dataclass(frozen=True)
class Column:
    justify: str = "left"            # "left" or "right"
    min_width: int | None = None     # cells
    ratio: int | None = None         # a share of the width, as rich's Column(ratio=...)


def distribute(total: int, ratios: Sequence[int],
               minimums: Sequence[int] | None = None) -> list[int]:
    """An integer total split by ratios, the first parts rounded up (the rule rich's
    tables use to spread spare width), never below ``minimums``.

    >>> distribute(10, [1, 1, 1])
    [4, 3, 3]
    """
    if minimums:
        ratios = [ratio if minimum else 0 for ratio, minimum in zip(ratios, minimums)]
    total_ratio = sum(ratios)
    remaining = total
    out = []
    for ratio, minimum in zip(ratios, minimums or [0] * len(ratios)):
        part = max(minimum, ceil(ratio * remaining / total_ratio)) if total_ratio > 0 else remaining
        out.append(part)
        total_ratio -= ratio
        remaining -= part
    return out


def column_widths(columns: Sequence[Column], cells: Sequence[Sequence[Text]],
                  width: int) -> list[int] | None:
    """Each column's width including its padding (one cell on the right of every
    column but the last), or None when the columns do not fit ``width``."""
    n = len(columns)
    pads = [0 if i == n - 1 else 1 for i in range(n)]
    widths = []
    for i, column in enumerate(columns):
        content = max(cell_len(row[i].plain) for row in cells)
        if content == 0 or any(row[i].plain.endswith(" ") for row in cells):
            return None   # rich has rules of its own for empty columns and trailing spaces
        widths.append(max(content, column.min_width or 0) + pads[i])
    natural = list(widths)
    ratios = [c.ratio for c in columns if c.ratio is not None]
    if ratios:
        fixed = [0 if c.ratio is not None else w for c, w in zip(columns, widths)]
        flex_min = [1 + pads[i] for i, c in enumerate(columns) if c.ratio is not None]
        shares = iter(distribute(width - sum(fixed), ratios, flex_min))
        widths = [fixed[i] + next(shares) if c.ratio is not None else widths[i]
                  for i, c in enumerate(columns)]
    if sum(widths) > width or any(w < need for w, need in zip(widths, natural)):
        return None
    if sum(widths) < width:
        widths = [w + extra for w, extra in zip(widths, distribute(width - sum(widths), widths))]
    return widths


def columns_text(columns: Sequence[Column], header: Sequence[Text],
                 rows: Sequence[Sequence[Text]], width: int) -> Text | None:
    """The table as one Text ``width`` cells wide: a bold header row, then the rows; a
    cell's own style covers its text and the spaces that justify it, the header style
    also the padding. None when it does not fit (see the module docstring)."""
    widths = column_widths(columns, [header, *rows], width) if rows else None
    if widths is None:
        return None
    out = Text(no_wrap=True, overflow="crop", end="")
    last = len(columns) - 1
    for r, row in enumerate([header, *rows]):
        if r:
            out.append("\n")
        for i, (column, cell) in enumerate(zip(columns, row)):
            room = widths[i] - (0 if i == last else 1)
            gap = " " * (room - cell_len(cell.plain))
            text = cell.copy()
            if column.justify == "right":
                text = Text(gap, style=text.style) + text
            else:
                text.append(gap)
            if r == 0:
                text.stylize_before(HEADER_STYLE)
            out.append_text(text)
            if i != last:
                out.append(" ", style=HEADER_STYLE if r == 0 else None)
    return out


def rich_table(columns: Sequence[Column], header: Sequence[Text],
               rows: Sequence[Sequence[Text]]) -> Table:
    """The same table as rich's ``Table`` (what :func:`columns_text` reproduces; used
    when that gives None)."""
    table = Table(box=None, expand=True, show_edge=False, pad_edge=False, collapse_padding=True)
    for column, head in zip(columns, header):
        table.add_column(head, justify=column.justify, no_wrap=True, min_width=column.min_width,
                         ratio=column.ratio)
    for row in rows:
        table.add_row(*row)
    return table


def table_content(columns: Sequence[Column], header: Sequence[Text],
                  rows: Sequence[Sequence[Text]], width: int) -> Text | Table:
    """What a panel ``width`` cells wide shows: the quick Text when the columns fit,
    else rich's Table (which shrinks and crops them)."""
    text = columns_text(columns, header, rows, width) if width > 0 else None
    return text if text is not None else rich_table(columns, header, rows)
