"""The ASCII pose sketch: the arm seen from above (and, on a SCARA, from the side).

:func:`render_sketch` is pure (arm and joint values in, lines of text out) so the tests
can check it cell by cell; :class:`PoseSketch` is the widget that calls it with its own
size on every change and every resize.

Geometry of the picture (top view): world x to the right, world y up. A terminal cell
is about twice as tall as it is wide (CELL_ASPECT), so one row spans twice the
millimetres of one column: y is scaled by 0.5 against x, and a circle comes out round.
The view is fitted so the circle of max reach (and every keep-out zone and the target)
fills the panel: with ``s`` the millimetres per column,

    s   = max((x_max - x_min) / (width - 1), (y_max - y_min) / (CELL_ASPECT * (height - 1)))
    col = floor((width - 1) / 2 + (x - x_mid) / s + 0.5)
    row = floor((height - 1) / 2 - (y - y_mid) / (CELL_ASPECT * s) + 0.5)

Units in: mm and radians (kinematics/ conventions).
"""

from __future__ import annotations

import functools
import math
from collections.abc import Sequence
from dataclasses import dataclass

from rich.segment import Segment
from rich.style import Style
from textual.strip import Strip
from textual.widget import Widget

from benchjog.kinematics.model import Arm, Zone
from benchjog.kinematics.scara import flange_z_mm
from benchjog.kinematics.solve import tool_from_joints

CELL_ASPECT = 2.0   # a terminal cell is about twice as tall as wide (common fonts, from memory)

BASE = "@"
ELBOW = "o"
TOOL = "T"
TARGET = "X"
OTHER = ":"        # the inactive IK branch (dotted)
PLANNED = "+"      # the active branch at the target (where a move would take the arm)
HATCH = "#"        # keep-out zones
REACH = "."        # reach boundaries (max, and min when > 0)
GROUND = "="       # the table (side view)
ENVELOPE = "~"     # the jog session's envelope (top view)
WORKSPACE = "·"   # where the arm's present branch reaches within limits, outside zones

LEGEND_ITEMS = (f"{BASE} base", f"{ELBOW} joint", f"{TOOL} tool", f"{TARGET} target",
                f"{PLANNED} chosen branch", f"{OTHER} other branch", f"{HATCH} keep-out",
                f"{REACH} reach", f"{ENVELOPE} jog envelope", f"{WORKSPACE} this branch reaches")
LEGEND = "  ".join(LEGEND_ITEMS)


def legend_lines(width: int) -> list[str]:
    """The legend packed into lines of at most ``width`` characters.

    >>> legend_lines(40)[:3]
    ['@ base  o joint  T tool  X target', '+ chosen branch  : other branch', '# keep-out  . reach  ~ jog envelope']
    """
    lines: list[str] = []
    for item in LEGEND_ITEMS:
        if lines and len(lines[-1]) + 2 + len(item) <= width:
            lines[-1] += "  " + item
        else:
            lines.append(item[:width])
    return lines

SIDE_MIN_WIDTH = 40   # below this a SCARA gets the top view only


@dataclass(frozen=True)
class View:
    """A fitted window onto a plane: world (u, v) in mm to (col, row) cells."""

    cols: int
    rows: int
    u_mid: float
    v_mid: float
    mm_per_col: float

    @staticmethod
    def fit(u_min: float, u_max: float, v_min: float, v_max: float, cols: int, rows: int,
            ) -> "View":
        """The view that shows the box [u_min, u_max] x [v_min, v_max] whole, centred,
        with a row spanning CELL_ASPECT times the millimetres of a column.

        >>> View.fit(-380.0, 380.0, -380.0, 380.0, 41, 21).mm_per_col
        19.0
        """
        span_u = max(u_max - u_min, 1e-6)
        span_v = max(v_max - v_min, 1e-6)
        s = max(span_u / max(cols - 1, 1), span_v / (CELL_ASPECT * max(rows - 1, 1)))
        return View(cols, rows, (u_min + u_max) / 2, (v_min + v_max) / 2, s)

    def cell_float(self, u: float, v: float) -> tuple[float, float]:
        col = (self.cols - 1) / 2 + (u - self.u_mid) / self.mm_per_col
        row = (self.rows - 1) / 2 - (v - self.v_mid) / (CELL_ASPECT * self.mm_per_col)
        return col, row

    def cell(self, u: float, v: float) -> tuple[int, int]:
        """The cell (col, row) whose centre is nearest the point (u, v).

        >>> View.fit(-380.0, 380.0, -380.0, 380.0, 41, 21).cell(220.0, 160.0)
        (32, 6)
        """
        col, row = self.cell_float(u, v)
        return math.floor(col + 0.5), math.floor(row + 0.5)

    def world(self, col: int, row: int) -> tuple[float, float]:
        """The world point at the centre of a cell."""
        u = self.u_mid + (col - (self.cols - 1) / 2) * self.mm_per_col
        v = self.v_mid - (row - (self.rows - 1) / 2) * CELL_ASPECT * self.mm_per_col
        return u, v


class Canvas:
    """A grid of characters; writes outside it are dropped."""

    def __init__(self, cols: int, rows: int, lines: Sequence[str] | None = None):
        """A blank grid, or one starting from ``lines`` (``rows`` lines of ``cols``)."""
        self.cols, self.rows = cols, rows
        self.cells = ([list(line) for line in lines] if lines is not None
                      else [[" "] * cols for _ in range(rows)])

    def put(self, col: int, row: int, char: str) -> None:
        if 0 <= col < self.cols and 0 <= row < self.rows:
            self.cells[row][col] = char

    def text(self, col: int, row: int, words: str) -> None:
        for i, char in enumerate(words):
            self.put(col + i, row, char)

    def lines(self) -> list[str]:
        return ["".join(row) for row in self.cells]


def slope_char(dcol: float, drow: float) -> str:
    """The line character for a link running (dcol, drow) cells on screen, judged by
    its visual angle (a row is CELL_ASPECT columns tall).

    >>> slope_char(10, 0), slope_char(0, -3), slope_char(4, -2), slope_char(4, 2)
    ('-', '|', '/', '\\\\')
    """
    angle = math.degrees(math.atan2(-drow * CELL_ASPECT, dcol)) % 180.0
    if angle < 22.5 or angle >= 157.5:
        return "-"
    if angle < 67.5:
        return "/"
    if angle < 112.5:
        return "|"
    return "\\"


def draw_line(canvas: Canvas, view: View, a: tuple[float, float], b: tuple[float, float],
              char: str | None) -> None:
    """A straight line from a to b (world mm); ``char`` None picks by slope."""
    ca, ra = view.cell_float(*a)
    cb, rb = view.cell_float(*b)
    if not all(math.isfinite(v) for v in (ca, ra, cb, rb)):
        return
    glyph = char or slope_char(cb - ca, rb - ra)
    steps = max(1, int(math.ceil(max(abs(cb - ca), abs(rb - ra)) * 2)))
    steps = min(steps, 4 * (canvas.cols + canvas.rows))
    for k in range(steps + 1):
        f = k / steps
        canvas.put(math.floor(ca + (cb - ca) * f + 0.5), math.floor(ra + (rb - ra) * f + 0.5), glyph)


def draw_circle(canvas: Canvas, view: View, radius_mm: float, char: str) -> None:
    """A circle about the origin, sampled finely enough to leave no gaps."""
    if radius_mm <= 0:
        return
    cells_round = 2 * math.pi * radius_mm / view.mm_per_col
    n = max(16, int(cells_round * 2))
    for k in range(n):
        t = 2 * math.pi * k / n
        canvas.put(*view.cell(radius_mm * math.cos(t), radius_mm * math.sin(t)), char)


def in_zone(zone: Zone, x: float, y: float) -> bool:
    if zone.kind == "circle":
        return math.hypot(x - zone.cx, y - zone.cy) <= zone.r
    return zone.x_min <= x <= zone.x_max and zone.y_min <= y <= zone.y_max


def zone_bounds(zone: Zone) -> tuple[float, float, float, float]:
    """(x_min, x_max, y_min, y_max) of a zone's footprint."""
    if zone.kind == "circle":
        return zone.cx - zone.r, zone.cx + zone.r, zone.cy - zone.r, zone.cy + zone.r
    return zone.x_min, zone.x_max, zone.y_min, zone.y_max


def hatch_zone(canvas: Canvas, view: View, zone: Zone) -> None:
    """Fill every cell whose centre lies in the zone, and always the zone's centre cell
    (so a zone smaller than a cell still shows)."""
    x0, x1, y0, y1 = zone_bounds(zone)
    c0, r1 = view.cell(x0, y0)
    c1, r0 = view.cell(x1, y1)
    for row in range(max(r0 - 1, 0), min(r1 + 2, canvas.rows)):
        for col in range(max(c0 - 1, 0), min(c1 + 2, canvas.cols)):
            if in_zone(zone, *view.world(col, row)):
                canvas.put(col, row, HATCH)
    canvas.put(*view.cell((x0 + x1) / 2, (y0 + y1) / 2), HATCH)


def arm_points(arm: Arm, joints: Sequence[float]) -> tuple[tuple[float, float], tuple[float, float]]:
    """The elbow and tool points in the base plane (mm) for joint values (rad, mm)."""
    j1 = arm.joints[0]
    t1 = joints[0] + j1.offset_rad
    elbow = (j1.a_mm * math.cos(t1), j1.a_mm * math.sin(t1))
    tool = tool_from_joints(arm, tuple(joints))
    return elbow, (tool[0], tool[1])


def _finite(values: Sequence[float] | None) -> bool:
    return values is not None and all(math.isfinite(v) for v in values)


def _draw_pose(canvas: Canvas, view: View, arm: Arm, joints: Sequence[float], link: str | None,
               joint_char: str, tool_char: str | None) -> None:
    elbow, tool = arm_points(arm, joints)
    draw_line(canvas, view, (0.0, 0.0), elbow, link)
    draw_line(canvas, view, elbow, tool, link)
    canvas.put(*view.cell(*elbow), joint_char)
    if tool_char:
        canvas.put(*view.cell(*tool), tool_char)


@functools.lru_cache(maxsize=32)
def workspace_cells(arm: Arm, branch: str, z_mm: float, roll_rad: float,
                    view: View) -> frozenset[tuple[int, int]]:
    """The cells of ``view`` whose centre the arm reaches on ``branch`` (the contract
    string) with every joint within its soft limits and the tool outside every
    keep-out zone: the IK front (``joints_from_tool``) asked at each cell, so the map
    says exactly what a move there on this branch would be told. A SCARA is asked at
    the tool's present height and roll. Cached per arm, branch, height, roll and view.
    """
    from benchjog.kinematics.solve import joints_from_tool
    out = set()
    for row in range(view.rows):
        for col in range(view.cols):
            x, y = view.world(col, row)
            target = (x, y, z_mm, roll_rad) if arm.is_scara else (x, y)
            ik = joints_from_tool(arm, target)
            if not ik.reachable:
                continue
            sol = next((s for s in ik.solutions if str(s.branch) == branch), None)
            if sol is None and len(ik.solutions) == 1:
                sol = ik.solutions[0]      # a stretched or folded arm: both branches meet
            if sol is not None and sol.usable:
                out.add((col, row))
    return frozenset(out)


def branch_words(arm: Arm, joints: Sequence[float]) -> str:
    """The contract branch string of a joint vector (elbow j2 > 0: elbow-down)."""
    t2 = joints[1] + arm.joints[1].offset_rad
    return "elbow-down" if math.sin(t2) >= 0 else "elbow-up"


@functools.lru_cache(maxsize=32)
def _top_background(arm: Arm, view: View, reaches: tuple[str, float, float] | None
                    ) -> tuple[str, ...]:
    """What the top view draws under the arm: the cells the branch reaches
    (``reaches``: branch, z, roll; None for none), the reach circles and the keep-out
    zones. It changes only with the arm, the view, the branch and the height and roll,
    so it is drawn once for each and kept (the arm is then drawn over a copy)."""
    canvas = Canvas(view.cols, view.rows)
    if reaches is not None:
        for col, row in workspace_cells(arm, *reaches, view):
            canvas.put(col, row, WORKSPACE)
    draw_circle(canvas, view, arm.max_reach_mm, REACH)
    if arm.min_reach_mm > 0:
        draw_circle(canvas, view, arm.min_reach_mm, REACH)
    for zone in arm.zones:
        hatch_zone(canvas, view, zone)
    return tuple(canvas.lines())


def render_top(arm: Arm, joints: Sequence[float], *, width: int, height: int,
               target: Sequence[float] | None = None,
               other_joints: Sequence[float] | None = None,
               planned_joints: Sequence[float] | None = None,
               label: str | None = None,
               envelope: Sequence[float] | None = None,
               note: str | None = None, workspace: bool = True) -> list[str]:
    """The top view alone (see :func:`render_sketch`); ``workspace`` dots the cells
    the present branch reaches (:func:`workspace_cells`)."""
    reach = arm.max_reach_mm
    x0, x1, y0, y1 = -reach, reach, -reach, reach
    for zone in arm.zones:
        zx0, zx1, zy0, zy1 = zone_bounds(zone)
        x0, x1, y0, y1 = min(x0, zx0), max(x1, zx1), min(y0, zy0), max(y1, zy1)
    if _finite(target):
        x0, x1 = min(x0, target[0]), max(x1, target[0])
        y0, y1 = min(y0, target[1]), max(y1, target[1])
    view = View.fit(x0, x1, y0, y1, width, height)
    reaches = None
    if workspace and _finite(joints):
        tool = tool_from_joints(arm, tuple(joints))
        z, roll = (round(tool[2], 1), round(tool[3], 3)) if arm.is_scara else (0.0, 0.0)
        reaches = (branch_words(arm, joints), z, roll)
    canvas = Canvas(width, height, _top_background(arm, view, reaches))
    if _finite(envelope):
        draw_box(canvas, view, envelope, ENVELOPE)
    if _finite(other_joints):
        _draw_pose(canvas, view, arm, other_joints, OTHER, OTHER, None)
    if _finite(planned_joints):
        _draw_pose(canvas, view, arm, planned_joints, PLANNED, PLANNED, None)
    if _finite(joints):
        _draw_pose(canvas, view, arm, joints, None, ELBOW, None)
    canvas.put(*view.cell(0.0, 0.0), BASE)
    if _finite(target):
        canvas.put(*view.cell(target[0], target[1]), TARGET)
    if _finite(joints):
        canvas.put(*view.cell(*arm_points(arm, joints)[1]), TOOL)
    if label:
        canvas.text(0, 0, label)
    if note:
        canvas.text(0, height - 1, note)
    return canvas.lines()


def draw_box(canvas: Canvas, view: View, box: Sequence[float], char: str) -> None:
    """The outline of an axis-aligned box (x_min, x_max, y_min, y_max in mm); a box
    smaller than a cell still shows as its centre cell."""
    x0, x1, y0, y1 = box
    for a, b in (((x0, y0), (x1, y0)), ((x1, y0), (x1, y1)), ((x1, y1), (x0, y1)),
                 ((x0, y1), (x0, y0))):
        draw_line(canvas, view, a, b, char)


def _radial_span(zone: Zone) -> tuple[float, float]:
    """Nearest and farthest distance of a zone's footprint from the base axis (mm)."""
    if zone.kind == "circle":
        d = math.hypot(zone.cx, zone.cy)
        return max(0.0, d - zone.r), d + zone.r
    nx = min(max(0.0, zone.x_min), zone.x_max)
    ny = min(max(0.0, zone.y_min), zone.y_max)
    far = max(math.hypot(x, y) for x in (zone.x_min, zone.x_max) for y in (zone.y_min, zone.y_max))
    return math.hypot(nx, ny), far


def ray_span(zone: Zone, phi: float) -> tuple[float, float] | None:
    """Where the half-plane of the arm (from the base axis at angle ``phi``, rad, seen
    from above) cuts a zone's footprint: (nearest, farthest) distance from the base
    axis in mm, or None when it misses the zone. A circle: the ray-circle quadratic; a
    box: the slab method (Kay and Kajiya, SIGGRAPH 1986; from memory).

    >>> post = Zone("post", "circle", cx=100.0, cy=0.0, r=20.0)
    >>> [round(v, 6) for v in ray_span(post, 0.0)]
    [80.0, 120.0]
    >>> ray_span(post, math.pi) is None
    True
    >>> tray = Zone("tray", "box", x_min=-300.0, x_max=-200.0, y_min=-70.0, y_max=70.0)
    >>> [round(v, 6) for v in ray_span(tray, math.pi)], ray_span(tray, math.pi / 2)
    ([200.0, 300.0], None)
    """
    ux, uy = math.cos(phi), math.sin(phi)
    if zone.kind == "circle":
        along = ux * zone.cx + uy * zone.cy
        disc = along * along - (zone.cx ** 2 + zone.cy ** 2 - zone.r ** 2)
        if disc < 0.0:
            return None
        r0, r1 = along - math.sqrt(disc), along + math.sqrt(disc)
    else:
        r0, r1 = -math.inf, math.inf
        for u, lo, hi in ((ux, zone.x_min, zone.x_max), (uy, zone.y_min, zone.y_max)):
            if abs(u) < 1e-12:
                if not lo <= 0.0 <= hi:
                    return None
                continue
            a, b = sorted((lo / u, hi / u))
            r0, r1 = max(r0, a), min(r1, b)
    if r1 < max(r0, 0.0):
        return None
    return max(r0, 0.0), r1


def render_side(arm: Arm, joints: Sequence[float], *, width: int, height: int,
                target: Sequence[float] | None = None, label: str | None = None) -> list[str]:
    """The SCARA seen from the side, unrolled about the base axis: distance from the
    base axis to the right, height z up (both mm, same aspect correction as the top
    view). Shows the table (z = 0), the base column, the links at the flange height,
    the quill down to the tool tip, the target's height and each zone's radial span
    and z range where the arm's plane (through the base axis and the tool) cuts it: a
    zone at another angle is not drawn."""
    canvas = Canvas(width, height)
    flange = flange_z_mm(arm)
    base_top = arm.joints[0].d_mm
    quill = arm.joints[2]
    tip = tool_from_joints(arm, tuple(joints)) if _finite(joints) else None
    z_lowest = flange - arm.joints[2].d_mm - quill.max - arm.joints[3].d_mm
    z0 = min(0.0, z_lowest)
    z1 = max(flange, base_top) + 0.1 * max(flange, 1.0)
    r1 = arm.max_reach_mm
    for zone in arm.zones:
        r1 = max(r1, _radial_span(zone)[1])
        if math.isfinite(zone.z_min):
            z0 = min(z0, zone.z_min)
    if _finite(target):
        r1 = max(r1, math.hypot(target[0], target[1]))
        z0, z1 = min(z0, target[2]), max(z1, target[2])
    view = View.fit(0.0, r1, z0, z1, width, height)
    for col in range(width):
        canvas.put(col, view.cell(0.0, 0.0)[1], GROUND)
    phi = math.atan2(tip[1], tip[0]) if tip is not None else None
    for zone in arm.zones:
        span = ray_span(zone, phi) if phi is not None else None
        if span is None:
            continue   # not in the arm's plane (or no pose to say where that is)
        zr0, zr1 = span
        zz0 = max(zone.z_min, z0) if math.isfinite(zone.z_min) else z0
        zz1 = min(zone.z_max, z1) if math.isfinite(zone.z_max) else z1
        c0, rb = view.cell(zr0, zz0)
        c1, rt = view.cell(zr1, zz1)
        for row in range(rt, rb + 1):
            for col in range(c0, c1 + 1):
                canvas.put(col, row, HATCH)
    draw_line(canvas, view, (0.0, 0.0), (0.0, base_top), "|")
    if tip is not None:
        r_tool = math.hypot(tip[0], tip[1])
        a1 = arm.joints[0].a_mm
        draw_line(canvas, view, (0.0, flange), (max(a1, r_tool), flange), "-")
        canvas.put(*view.cell(a1, flange), ELBOW)
        draw_line(canvas, view, (r_tool, flange), (r_tool, tip[2]), "|")
    canvas.put(*view.cell(0.0, base_top), BASE)
    if _finite(target):
        canvas.put(*view.cell(math.hypot(target[0], target[1]), target[2]), TARGET)
    if tip is not None:
        canvas.put(*view.cell(math.hypot(tip[0], tip[1]), tip[2]), TOOL)
    if label:
        canvas.text(0, 0, label)
    return canvas.lines()


def render_sketch(arm: Arm, joints: Sequence[float], *, width: int, height: int,
                  target: Sequence[float] | None = None,
                  other_joints: Sequence[float] | None = None,
                  planned_joints: Sequence[float] | None = None,
                  labels: bool = True,
                  envelope: Sequence[float] | None = None,
                  note: str | None = None) -> list[str]:
    """The pose sketch as exactly ``height`` lines of exactly ``width`` characters.

    Args:
        arm: the arm (its links, reach and keep-out zones are drawn).
        joints: the arm's joint values (rad, mm), drawn solid: links by slope
            (``- | / \\``), the elbow ``o``, the tool ``T``, the base ``@``.
        width, height: the panel size in terminal cells.
        target: a tool target (mm, rad: planar x, y; SCARA x, y, z, roll), marked ``X``.
        other_joints: the inactive IK branch, drawn dotted (``:``).
        planned_joints: the active branch at the target, drawn ``+``.
        labels: write "top" / "side" in the corners of the views.
        envelope: the jog session's box (x_min, x_max, y_min, y_max, mm), outlined ``~``.
        note: a line of words in the top view's bottom-left corner (the session's
            time left).

    On a SCARA at least SIDE_MIN_WIDTH wide the right third is a side view for z
    (:func:`render_side`), after a ``|`` column. Tiny panels give blank lines.
    """
    width, height = max(0, int(width)), max(0, int(height))
    if width < 5 or height < 3:
        return [" " * width for _ in range(height)]
    if arm.is_scara and width >= SIDE_MIN_WIDTH:
        side_w = max(14, width // 3)
        top_w = width - side_w - 1
        top = render_top(arm, joints, width=top_w, height=height, target=target,
                         other_joints=other_joints, planned_joints=planned_joints,
                         label="top" if labels else None, envelope=envelope, note=note)
        side = render_side(arm, joints, width=side_w, height=height, target=target,
                           label="side" if labels else None)
        return [t + "|" + s for t, s in zip(top, side)]
    return render_top(arm, joints, width=width, height=height, target=target,
                      other_joints=other_joints, planned_joints=planned_joints,
                      label="top" if (labels and arm.is_scara) else None, envelope=envelope,
                      note=note)


class PoseSketch(Widget):
    """The sketch panel: redraws from :func:`render_sketch` at its own size."""

    DEFAULT_CSS = "PoseSketch { height: 1fr; }"

    def __init__(self, arm: Arm, *, id: str | None = None):
        super().__init__(id=id)
        self.arm = arm
        self.joints: tuple[float, ...] | None = None
        self.target: tuple[float, ...] | None = None
        self.other_joints: tuple[float, ...] | None = None
        self.planned_joints: tuple[float, ...] | None = None
        self.envelope: tuple[float, ...] | None = None
        self.note: str | None = None
        self.lines: list[str] = []
        self._drawn_at: tuple[int, int] | None = None   # the size self.lines were drawn at
        self._line_style = None

    def show(self, joints, *, target=None, other_joints=None, planned_joints=None,
             envelope=None, note=None) -> None:
        """Set what to draw; redraws only when something changed."""
        if (envelope, note) != (self.envelope, self.note):
            self.envelope = tuple(envelope) if envelope is not None else None
            self.note = note
            self._drawn_at = None
            self.refresh()
        new = (tuple(joints) if joints is not None else None,
               tuple(target) if target is not None else None,
               tuple(other_joints) if other_joints is not None else None,
               tuple(planned_joints) if planned_joints is not None else None)
        old = (self.joints, self.target, self.other_joints, self.planned_joints)
        if new != old:
            self.joints, self.target, self.other_joints, self.planned_joints = new
            self._drawn_at = None
            self.refresh()

    def drawn(self) -> list[str]:
        """The lines of the sketch at the panel's present size, drawn once per change."""
        width, height = self.content_size
        if self._drawn_at != (width, height):
            if self.joints is None:
                lines = ["waiting for the arm's position..."]
            else:
                legend = legend_lines(width) if height >= 12 else []
                lines = render_sketch(self.arm, self.joints, width=width,
                                      height=height - len(legend), target=self.target,
                                      other_joints=self.other_joints,
                                      planned_joints=self.planned_joints,
                                      envelope=self.envelope, note=self.note) + legend
            self.lines, self._drawn_at = lines, (width, height)
        return self.lines

    def render_lines(self, crop):
        self._line_style = self.rich_style   # one look-up of the styles per frame, not per line
        try:
            return super().render_lines(crop)
        finally:
            self._line_style = None

    def render_line(self, y: int) -> Strip:
        """One line of plain characters (Textual's line API: no text layout per frame)."""
        lines = self.drawn()
        width = self.content_size.width
        text = lines[y][:width] if y < len(lines) else ""
        style = self._line_style or self.rich_style
        strip = Strip([Segment(text, style)], len(text))
        return strip.extend_cell_length(width, Style(bgcolor=style.bgcolor))
