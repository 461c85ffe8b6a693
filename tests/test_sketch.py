"""The ASCII pose sketch: cells computed by hand from the textbook FK and the view fit
documented in console/tui/widgets/sketch.py."""

from __future__ import annotations

import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from benchjog.console.cell.armfile import builtin_arm
from benchjog.console.tui.widgets.sketch import CELL_ASPECT, render_sketch, render_top

PLANAR = builtin_arm("planar-bench")   # a1 = 220, a2 = 160, zone parts-tray x -300..-200, y -70..70
SCARA = builtin_arm("scara-bench")


def cells(lines: list[str], char: str) -> set[tuple[int, int]]:
    """(row, col) of every occurrence of char."""
    return {(r, c) for r, line in enumerate(lines) for c, ch in enumerate(line) if ch == char}


def test_tool_elbow_and_base_cells_at_shoulder_0_elbow_90():
    # 2R FK (Lynch & Park, Modern Robotics, 2017, section 4.1, from memory):
    # elbow = (a1 cos t1, a1 sin t1) = (220, 0); tool = elbow + a2 (cos(t1+t2), sin(t1+t2)) = (220, 160).
    # View by hand for 41 x 21 cells: the max reach is 380 mm, so the box is 760 mm square;
    # mm per column s = max(760/40, 760/(2*20)) = 19, a row is 38 mm; centre cell (20, 10).
    # tool: col = 20 + 220/19 = 31.58 -> 32, row = 10 - 160/38 = 5.79 -> 6.
    # elbow: col 32, row 10.  base: col 20, row 10.
    lines = render_sketch(PLANAR, (0.0, math.pi / 2), width=41, height=21)
    assert len(lines) == 21 and all(len(line) == 41 for line in lines)
    assert cells(lines, "T") == {(6, 32)}
    assert cells(lines, "o") == {(10, 32)}
    assert cells(lines, "@") == {(10, 20)}
    # link 1 runs along row 10 (drawn '-'), link 2 straight up column 32 (drawn '|')
    assert all(lines[10][c] == "-" for c in range(21, 32))
    assert all(lines[r][32] == "|" for r in range(7, 10))


def test_keep_out_zone_hatched_exactly_where_it_is():
    # parts-tray: x -300..-200, y -70..70. Cell centres (same 41 x 21 view, s = 19 mm,
    # row 38 mm): col c is at x = (c - 20) * 19, so cols 5..9 (x -285..-209) are inside,
    # col 4 (-304) and col 10 (-190) are not; row r is at y = (10 - r) * 38, so rows
    # 9..11 (38, 0, -38) are inside, rows 8 and 12 (+-76) are not.
    lines = render_sketch(PLANAR, (0.0, math.pi / 2), width=41, height=21)
    expected = {(r, c) for r in range(9, 12) for c in range(5, 10)}
    assert cells(lines, "#") == expected


def test_aspect_correction_makes_the_reach_circle_twice_as_wide_in_cells():
    # A terminal cell is about twice as tall as wide, so a circle spans twice as many
    # columns as rows. 101 x 21: height-limited, s = 760 / (2 * 20) = 19 mm per column,
    # so the 760 mm circle spans 40 columns (cols 30..70) and 20 rows (rows 0..20).
    lines = render_sketch(PLANAR, (0.0, math.pi / 2), width=101, height=21)
    dots = cells(lines, ".")
    cols = [c for _, c in dots]
    rows = [r for r, _ in dots]
    assert min(cols) == 30 and max(cols) == 70
    assert min(rows) == 0 and max(rows) == 20
    assert (max(cols) - min(cols)) == CELL_ASPECT * (max(rows) - min(rows))


def test_min_reach_circle_drawn_when_links_differ():
    # min reach |a1 - a2| = 60 mm: at 19 mm per column about 3 columns either side of the
    # base on its row, and 60/38 = 1.6 -> 2 rows above and below on its column.
    lines = render_sketch(PLANAR, (0.0, math.pi / 2), width=41, height=21)
    assert lines[10][17] == "."          # 20 - 60/19 = 16.8 -> 17
    assert lines[8][20] == "." and lines[12][20] == "."


def test_target_marker_and_both_branches():
    # target (150, 200): elbow-down t2 = +acos((150^2 + 200^2 - 220^2 - 160^2) / (2*220*160))
    # and elbow-up t2 = -that, t1 = atan2(y, x) - atan2(a2 sin t2, a1 + a2 cos t2)
    # (law of cosines; Spong, Hutchinson & Vidyasagar 2006, section 5.3, from memory).
    x, y, a1, a2 = 150.0, 200.0, 220.0, 160.0
    c2 = (x * x + y * y - a1 * a1 - a2 * a2) / (2 * a1 * a2)
    poses = []
    for sign in (1, -1):
        t2 = sign * math.acos(c2)
        poses.append((math.atan2(y, x) - math.atan2(a2 * math.sin(t2), a1 + a2 * math.cos(t2)), t2))
    down, up = poses
    lines = render_sketch(PLANAR, (0.0, math.pi / 2), width=41, height=21, target=(x, y),
                          other_joints=up, planned_joints=down)
    # X: col = 20 + 150/19 = 27.9 -> 28, row = 10 - 200/38 = 4.7 -> 5
    assert cells(lines, "X") == {(5, 28)}
    # the elbow-up elbow (a1 cos t1, a1 sin t1) is dotted; the elbow-down one is '+'
    ex, ey = a1 * math.cos(up[0]), a1 * math.sin(up[0])
    assert lines[math.floor(10 - ey / 38 + 0.5)][math.floor(20 + ex / 19 + 0.5)] == ":"
    ex, ey = a1 * math.cos(down[0]), a1 * math.sin(down[0])
    assert lines[math.floor(10 - ey / 38 + 0.5)][math.floor(20 + ex / 19 + 0.5)] == "+"
    plain = render_sketch(PLANAR, (0.0, math.pi / 2), width=41, height=21)
    assert not cells(plain, ":") and not cells(plain, "+") and not cells(plain, "X")


def test_sketch_follows_the_pose():
    # shoulder 180 deg, elbow 0: stretched along -x, tool at (-380, 0) -> col 0, row 10
    lines = render_top(PLANAR, (math.pi, 0.0), width=41, height=21)
    assert cells(lines, "T") == {(10, 0)}


@settings(max_examples=40, deadline=None)
@given(st.integers(0, 200), st.integers(0, 80), st.booleans())
def test_any_panel_size_gives_exactly_that_many_cells(width, height, scara):
    arm = SCARA if scara else PLANAR
    joints = (0.3, 1.0, 40.0, 0.2) if scara else (0.3, 1.0)
    lines = render_sketch(arm, joints, width=width, height=height, target=None)
    assert len(lines) == height
    assert all(len(line) == width for line in lines)


def test_scara_side_view_shows_the_quill_height():
    # SCARA z = d1 - q3 - d4 (classic SCARA DH table, Spong et al. 2006, example 3.3.5,
    # from memory): quill 0 -> z 140 mm, quill 100 -> z 40 mm. The side view (right of
    # the '|' column) shows the tool lower for the longer quill; the top view is the same.
    high = render_sketch(SCARA, (0.0, math.pi / 2, 0.0, 0.0), width=90, height=24)
    low = render_sketch(SCARA, (0.0, math.pi / 2, 100.0, 0.0), width=90, height=24)
    assert all(line[59] == "|" for line in high)          # top 59 wide, then the separator
    side_high = [line[60:] for line in high]
    side_low = [line[60:] for line in low]
    (rh, _), = cells(side_high, "T")
    (rl, _), = cells(side_low, "T")
    assert rl > rh                                         # lower on screen = lower z
    # the top view is the same but for the workspace map, which is taken at the tool's
    # height (lower, the tool meets the fixture post's z range)
    from benchjog.console.tui.widgets.sketch import WORKSPACE
    assert [line[:59].replace(WORKSPACE, " ") for line in high] == \
        [line[:59].replace(WORKSPACE, " ") for line in low]


def test_scara_side_view_hatches_the_post_height_range():
    # fixture-post: z 0..100 mm; the tool at quill 0 is at z 140, above the post's top.
    # The arm turned towards the post (tool over (150, -225)): the side view is drawn in
    # the arm's plane, so a zone at another angle is not drawn at all.
    from benchjog.kinematics.solve import joints_from_tool
    facing = joints_from_tool(SCARA, (150.0, -225.0, 140.0, 0.0)).usable[0].joints
    lines = render_sketch(SCARA, facing, width=90, height=24)
    side = [line[60:] for line in lines]
    hatch_rows = {r for r, _ in cells(side, "#")}
    (tool_row, _), = cells(side, "T")
    assert hatch_rows and tool_row < min(hatch_rows)


def test_tiny_panel_is_blank():
    assert render_sketch(PLANAR, (0.0, 0.0), width=4, height=2) == ["    ", "    "]


@pytest.mark.parametrize("width,height", [(41, 21), (80, 24), (120, 40)])
def test_centre_of_the_view_is_the_base(width, height):
    lines = render_sketch(PLANAR, (0.0, math.pi / 2), width=width, height=height)
    # the view is centred on the reach circle, whose centre is the base (0, 0)
    (row, col), = cells(lines, "@")
    assert (row, col) == (math.floor((height - 1) / 2 + 0.5), math.floor((width - 1) / 2 + 0.5))
