"""The quick panel tables (console/tui/widgets/columns.py) against rich's own ``Table``
with the same options (rich, the reference: every character and its style, cell by
cell), over random rows, styles and widths, including widths too narrow (then the quick
path must give way, and the panel falls back to rich's Table itself)."""

from __future__ import annotations

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from rich.console import Console
from rich.table import Table
from rich.text import Text

from benchjog.console.tui.widgets.columns import Column, columns_text, rich_table, table_content

CONSOLE = Console(width=300, color_system="truecolor")


def _rich_lays_out_the_older_way() -> bool:
    """Older rich (13.3.3, this project's dependency floor, among them) widens a column
    with a ``min_width`` by padding that such a table does not draw (``pad_edge=False``,
    collapsed padding); the quick layout follows the rich of today, so under an older
    one there is nothing to compare it with."""
    table = Table(box=None, show_edge=False, pad_edge=False, collapse_padding=True)
    table.add_column("a", min_width=3)
    table.add_column("b")
    table.add_row("a", "b")
    return CONSOLE.measure(table).maximum > len("a   b")


pytestmark = pytest.mark.skipif(_rich_lays_out_the_older_way(),
                                reason="this rich lays the table out the older way")
STYLES = ["", "bold", "yellow", "green", "bold reverse"]
WORDS = st.text(alphabet="abcdefgh -.0123456789>", min_size=0, max_size=14)


def cells(lines) -> list[list[tuple[str, tuple]]]:
    out = []
    for line in lines:
        row = []
        for seg in line:
            s = seg.style
            key = (s.bold, s.reverse, s.color, s.bgcolor) if s else (None, None, None, None)
            row += [(ch, key) for ch in seg.text]
        out.append(row)
    return out


def rendered(renderable, width: int):
    return cells(CONSOLE.render_lines(renderable, CONSOLE.options.update_width(width), pad=False))


@st.composite
def tables(draw):
    n = draw(st.integers(2, 4))
    columns = [Column(justify=draw(st.sampled_from(["left", "right"])),
                      min_width=draw(st.one_of(st.none(), st.integers(0, 14))),
                      ratio=draw(st.one_of(st.none(), st.just(1)))) for _ in range(n)]
    header = [Text(draw(WORDS), style=draw(st.sampled_from(STYLES))) for _ in range(n)]
    rows = [[Text(draw(WORDS), style=draw(st.sampled_from(STYLES))) for _ in range(n)]
            for _ in range(draw(st.integers(0, 6)))]
    return columns, header, rows, draw(st.integers(4, 120))


@settings(max_examples=300, deadline=None)
@given(tables())
def test_the_quick_table_is_rich_s_table_character_for_character(case):
    columns, header, rows, width = case
    quick = columns_text(columns, header, rows, width)
    if quick is None:   # does not fit: the panel shows rich's Table itself
        assert isinstance(table_content(columns, header, rows, width), type(rich_table(
            columns, header, rows)))
        return
    assert rendered(quick, width) == rendered(rich_table(columns, header, rows), width)


def test_the_pose_readout_and_branch_table_shapes():
    # the two panels' own shapes at the console's widths (80 x 24 and 120 x 40 layouts)
    readout = [Column(min_width=12)] + [Column("right")] * 3
    head = [Text("")] + [Text(h) for h in ("target", "actual", "error")]
    rows = [[Text("x mm", style="bold"), Text("-"), Text("220.00"), Text("-")],
            [Text("elbow deg"), Text("12.50"), Text("90.00"), Text("+0.01", style="yellow")]]
    branches = [Column(min_width=8), Column(min_width=10, ratio=1), Column(min_width=12, ratio=1)]
    bhead = [Text(""), Text("  elbow-up", style="bold"), Text("> elbow-down", style="bold reverse")]
    brows = [[Text("shoulder"), Text("72.05 deg"), Text("0.00 deg")],
             [Text("status"), Text("usable", style="green"), Text("out of reach", style="yellow")]]
    for cols, h, r in ((readout, head, rows), (branches, bhead, brows)):
        for width in (36, 37, 46, 58, 76):
            quick = columns_text(cols, h, r, width)
            assert quick is not None
            assert rendered(quick, width) == rendered(rich_table(cols, h, r), width)
