"""JogScreen: the main screen. Jog keys, the target field, the pose sketch, both IK
branches, the pose readout, warnings, the link state and recent events.

The screen only shows what the app holds and turns keys into app calls; the app owns
the interlock, the workers and the state.
"""

from __future__ import annotations

from rich.text import Text
from benchjog.console.caution import CAUTION
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.css.query import NoMatches
from textual.screen import Screen
from textual.widgets import Footer, Static

from benchjog.console.tui.widgets.branch_table import BranchTable
from benchjog.console.tui.widgets.joint_readout import JointReadout
from benchjog.console.tui.widgets.keys import DimmedKeyHints, KeyFooter, TooSmall
from benchjog.console.tui.widgets.sketch import PoseSketch
from benchjog.console.tui.widgets.status import (Banner, EventLog, JogStatus, LinkStatus, WarningsPanel,
                                    banner_lines, link_short, link_words, update_in_place)
from benchjog.console.tui.widgets.target_input import TargetInput
from benchjog.kinematics.model import Arm

CARTESIAN_AXES = ("x", "y", "z", "roll")
SHORT_CAUTION = "Not a safety function: keep the hardware e-stop in reach (ISO 10218/13849)."
SCARA_ONLY = ("z", "roll", "j3", "j4")


def _jog_pair(minus_key: str, plus_key: str, axis: str, what: str, group: Binding.Group,
              displays: tuple[str | None, str | None] = (None, None)) -> list[Binding]:
    return [
        Binding(minus_key, f"jog('{axis}', -1)", f"{axis}-", tooltip=f"Jog {what} minus one step",
                id=f"jog.{axis}-minus", group=group, key_display=displays[0]),
        Binding(plus_key, f"jog('{axis}', 1)", f"{axis}+", tooltip=f"Jog {what} plus one step",
                id=f"jog.{axis}-plus", group=group, key_display=displays[1]),
    ]


def jog_bindings() -> list[Binding]:
    """The jog keys: the same keys jog the tool (Cartesian mode) or single joints
    (joint mode); check_action hides the set that is not in use. The footer shows
    them in two groups: the arrows (x y, or j1 j2) and, on a SCARA, page down/up and
    the square brackets (z roll, or j3 j4)."""
    keys = (("left", "right"), ("down", "up"), ("pagedown", "pageup"),
            ("left_square_bracket", "right_square_bracket"))
    displays = ((None, None), (None, None), ("pgdn", "/up"), (None, None))
    out: list[Binding] = []
    for axes, kind in ((CARTESIAN_AXES, "tool"), (("j1", "j2", "j3", "j4"), "joint")):
        groups = (Binding.Group(f"{axes[0]} {axes[1]}", compact=True),
                  Binding.Group(f"{axes[2]} {axes[3]}", compact=True))
        for n, ((minus, plus), axis) in enumerate(zip(keys, axes)):
            what = (f"joint {axis[1:]}" if kind == "joint" else
                    "the tool roll" if axis == "roll" else f"the tool along {axis}")
            out += _jog_pair(minus, plus, axis, what, groups[n // 2], displays[n])
    return out


STEP_GROUP = Binding.Group("step", compact=True)
SPEED_STEPS_PCT = (100.0, 50.0, 25.0, 10.0)


class JogScreen(DimmedKeyHints, Screen):
    AUTO_FOCUS = ""   # nothing focused: keys go to the screen; g focuses the target field
    HELP_NAME = "jog screen"
    # the footer's keys (binding ids): the most used; f1 lists them all
    FOOTER_KEYS = ("jog.x-minus", "jog.x-plus", "jog.y-minus", "jog.y-plus", "jog.z-minus",
                   "jog.z-plus", "jog.roll-minus", "jog.roll-plus", "jog.j1-minus", "jog.j1-plus",
                   "jog.j2-minus", "jog.j2-plus", "jog.j3-minus", "jog.j3-plus", "jog.j4-minus",
                   "jog.j4-plus", "jog.target", "jog.move", "app.stop", "jog.teach-point",
                   "app.teach", "app.help")

    BINDINGS = jog_bindings() + [
        Binding("1", "step(0.1)", "0.1", tooltip="Jog step 0.1 mm / 0.1 deg", id="jog.step-fine",
                group=STEP_GROUP),
        Binding("2", "step(1.0)", "1", tooltip="Jog step 1 mm / 1 deg", id="jog.step-1",
                group=STEP_GROUP),
        Binding("3", "step(10.0)", "10", tooltip="Jog step 10 mm / 10 deg", id="jog.step-10",
                group=STEP_GROUP),
        Binding("j", "joint_mode", "joint", tooltip="Switch between jogging the tool "
                "(Cartesian) and single joints", id="jog.joint-mode"),
        Binding("g", "focus_target", "target", tooltip="Type an exact target (enter previews it)",
                id="jog.target"),
        Binding("m", "move", "move", tooltip="Move to the target on the chosen branch (asks first)",
                id="jog.move"),
        Binding("b", "branch", "branch", tooltip="Choose the other IK branch (elbow-up / "
                "elbow-down)", id="jog.branch"),
        Binding("p", "path", "path", show=False, tooltip="Move path: joint interpolation or a straight line",
                id="jog.path"),
        Binding("v", "speed", "speed", show=False, tooltip="Speed override of every motion: "
                "100, 50, 25 or 10 %", id="jog.speed"),
        Binding("escape", "clear_target", "clear", show=False, tooltip="Forget the typed target",
                id="jog.clear"),
        Binding("a", "teach_point", "teach pt", tooltip="Teach the pose here as a new point "
                "(p1, p2, ...) without leaving this screen; t shows the points",
                id="jog.teach-point"),
        Binding("o", "sketch", "sketch", show=False, tooltip="Show or hide the sketch (hidden "
                "by default below 120 x 36, so the panels fit)", id="jog.sketch"),
    ]

    def __init__(self, arm: Arm):
        super().__init__()
        self.arm = arm

    def compose(self) -> ComposeResult:
        # one tree for every size: benchjog.tcss lays it out wide (sketch | panels) from
        # 120 x 36 and compact below (no sketch unless o, pose and branches side by side)
        yield TooSmall()
        yield Banner(id="banner")
        with Horizontal(id="main"):
            with Vertical(id="left"):
                yield PoseSketch(self.arm, id="sketch")
            with Vertical(id="right"):
                yield LinkStatus(id="link")
                with Horizontal(id="pose-row"):
                    yield JointReadout(self.arm, id="readout")
                    yield BranchTable(self.arm, id="branches")
                with Horizontal(id="notes"):
                    yield WarningsPanel(id="warnings")
                    yield EventLog(id="events")
        with Vertical(id="entry"):
            yield TargetInput(self.arm, id="target", compact=True)
            yield JogStatus(id="jogstatus")
            yield Static("", id="message")
            yield Static(CAUTION, id="caution")
            yield Static(SHORT_CAUTION, id="caution-short")
        yield KeyFooter(compact=True)

    def on_mount(self) -> None:
        self.query_one("#sketch").border_title = f"{self.arm.name}: seen from above" + (
            " and from the side" if self.arm.is_scara else "")
        self.set_focus(None)
        self.refresh_view()

    # -- showing the app's state ---------------------------------------------------------
    def refresh_view(self) -> None:
        if not self.is_mounted:
            return
        try:
            self._refresh_view()
        except NoMatches:
            pass   # the screen is being taken down

    def _refresh_view(self) -> None:
        app = self.app
        not_open = app.state is not None and not app.state.is_open
        error = app.state_error or (app.interlock.link_error if not_open else None)
        self.query_one(Banner).show(banner_lines(app.state, error, app.reach_warning()))
        polled = None if app.polled_at is None else max(0.0, app._clock() - app.polled_at)
        session = app.session_view()
        self.query_one(LinkStatus).show(link_words(app.state, app.driver_name, app.state_error,
                                                   polled) + "\n" + self.motion_words()
                                        + "\n" + self.session_words(session),
                                        short=link_short(app.state, app.driver_name,
                                                         app.state_error) + "   "
                                        + self.motion_words()
                                        + (f"   {self.session_words(session)}"
                                           if session is not None else ""))
        actual = app.actual
        self.query_one(JointReadout).show(actual, app.commanded_joints())
        ik, active, title = app.current_ik()
        self.query_one(BranchTable).show(ik, active, title)
        self.query_one(WarningsPanel).show(app.warnings())
        self.query_one(PoseSketch).show(actual, target=app.target,
                                        other_joints=app.other_joints(),
                                        planned_joints=app.planned_joints(),
                                        **self.session_sketch(session))
        self.query_one(JogStatus).show(self.jog_words())

    def jog_words(self) -> str:
        app = self.app
        mode = "joints" if app.joint_mode else "tool"
        unit = "mm/deg" if (app.joint_mode or self.arm.is_scara) else "mm"
        if isinstance(self.focused, TargetInput):
            return "TYPING A TARGET: enter previews it, escape hands the keys back to jogging"
        return (f"keys jog: {mode} (j)  step {app.step:g} {unit} (1 2 3)  path {app.path} (p)  "
                f"speed {app.speed_pct:g} % (v)")

    # -- the jog session (the interlock holds it; this only shows it) ---------------------
    def session_words(self, session) -> str:
        if session is None:
            return "jog session: none (a jog asks)"
        b = session.bounds
        unit = "mm / deg" if (b.frame == "joint" or self.arm.is_scara) else "mm"
        return (f"jog session: {session.left_s:.0f} s left, box +/-{b.half[0]:g} mm, "
                f"step <= {b.step:g} {unit}, {b.branch or 'singular'}, "
                f"{b.speed_cap_mm_s:g} mm/s")

    def session_sketch(self, session) -> dict:
        if session is None:
            return {"envelope": None, "note": None}
        b = session.bounds
        box = (b.center[0] - b.half[0], b.center[0] + b.half[0],
               b.center[1] - b.half[1], b.center[1] + b.half[1])
        left = session.left_s
        return {"envelope": box, "note": f"~ jog session {left:.0f} s"}

    def motion_words(self) -> str:
        app = self.app
        if app.busy is None:
            words = "motion: idle"
        elif getattr(app, "asking", False):   # the box is open: nothing moves before the yes
            words = "motion: awaiting your answer (" + app.busy.words(self.arm) + ")"
        else:
            words = "motion: " + app.busy.words(self.arm)
        if app.pending is not None:
            words += f"; next {app.pending.words(self.arm)}"
        return words

    def show_message(self, words: str, *, error: bool = False) -> None:
        try:
            update_in_place(self.query_one("#message", Static),   # one line, fixed height
                            Text(words, style="bold red" if error else "green", no_wrap=True,
                                 overflow="ellipsis"))
        except NoMatches:
            pass

    def log_event(self, kind: str, detail: str) -> None:
        try:
            self.query_one(EventLog).add(kind, detail)
        except NoMatches:
            pass

    # -- messages from the widgets -------------------------------------------------------
    def on_target_input_target_chosen(self, message: TargetInput.TargetChosen) -> None:
        self.app.set_target(message.target)

    def on_target_input_rejected(self, message: TargetInput.Rejected) -> None:
        self.app.set_message(f"bad target: {message.reason} (nothing moves)", error=True)

    def on_branch_table_branch_chosen(self, message: BranchTable.BranchChosen) -> None:
        self.app.choose_branch(message.branch)

    # -- keys --------------------------------------------------------------------------
    def action_jog(self, axis: str, sign: int) -> None:
        self.app.jog(axis, int(sign))

    def action_step(self, step: float) -> None:
        session = self.app.session_view()
        if session is not None and float(step) > session.bounds.step:
            self.app.end_session(f"a larger step ({float(step):g}) was chosen")
        self.app.step = float(step)
        self.refresh_view()

    def action_joint_mode(self) -> None:
        self.app.end_session("the jog frame was changed")
        self.app.joint_mode = not self.app.joint_mode
        self.app.refresh_view()

    def action_focus_target(self) -> None:
        self.query_one(TargetInput).focus()

    def action_move(self) -> None:
        self.app.move_to_target()

    def action_branch(self) -> None:
        table = self.query_one(BranchTable)
        other = table.other_branch()
        if other is not None:
            self.app.end_session("the branch was changed")
            table.choose_other()

    def action_path(self) -> None:
        self.app.path = "line" if self.app.path == "joint" else "joint"
        self.refresh_view()

    def action_speed(self) -> None:
        """Cycle the speed override 100 -> 50 -> 25 -> 10 -> 100 %."""
        steps = SPEED_STEPS_PCT
        now = self.app.speed_pct
        self.app.speed_pct = steps[(steps.index(now) + 1) % len(steps)] if now in steps else 100.0
        self.refresh_view()

    def action_clear_target(self) -> None:
        self.query_one(TargetInput).value = ""   # the field says what the target is
        if self.app.target is not None:
            self.app.clear_target()

    def on_target_input_cleared(self, message) -> None:
        self.action_clear_target()

    def check_action(self, action: str, parameters: tuple) -> bool | None:
        app = self.app
        if action == "jog":
            axis = str(parameters[0])
            if axis in SCARA_ONLY and not self.arm.is_scara:
                return False
            if (axis in CARTESIAN_AXES) == app.joint_mode:
                return False
            if not app.ready():
                return None
            if app.busy is not None and app.busy.kind != "jog":
                return None
            return True
        if action == "move":
            sol = app.target_ik.solution(app.branch) if (app.target_ik and app.branch) else None
            ok = sol is not None and sol.usable and app.ready() and app.busy is None
            return True if ok else None
        if action == "branch":
            ik, _active, _ = app.current_ik()
            return True if (ik is not None and ik.reachable and len(ik.solutions) > 1) else None
        return True

    # -- layout and help ---------------------------------------------------------------
    def on_descendant_focus(self, event) -> None:
        self.refresh_view()   # the status line says where keys go

    def on_descendant_blur(self, event) -> None:
        self.refresh_view()

    # the start of a typed number outside the field opens the field with it (the step
    # keys 1 2 3 stay step keys): "-180 0" typed by mistake never jogs or stops
    NUMBER_STARTS = "-.+0456789"

    def on_key(self, event) -> None:
        if (event.character and event.character in self.NUMBER_STARTS
                and not isinstance(self.focused, TargetInput)
                and not self.active_bindings.get(event.key)):
            field = self.query_one(TargetInput)
            select = field.select_on_focus
            field.select_on_focus = False      # the typed character is kept, not selected
            field.value = event.character
            field.cursor_position = len(field.value)
            field.focus()
            self.call_after_refresh(setattr, field, "select_on_focus", select)
            event.stop()
            event.prevent_default()   # also skips DimmedKeyHints.on_key (Textual walks the MRO)

    def action_teach_point(self) -> None:
        self.app.teach_point_here()

    def action_sketch(self) -> None:
        self.toggle_class("-sketch-toggled")

    def show_refusal(self, words: str) -> None:
        self.app.set_message(words, error=True)

    def why_dimmed(self, action: str, parameters: tuple = ()) -> str:
        """Why a jog-screen key is dimmed now, in words."""
        app = self.app
        if action in ("jog", "move", "home"):
            s = app.state
            if s is None or not s.is_open:
                return "not connected: r connects"
            if app.latched():
                return "latched: r resets (once the cause is cleared)"
            if not s.enabled:
                return "drives off: e switches them on"
            if not s.homed:
                return "not homed: h runs the homing cycle"
            if app.busy is not None:
                return f"busy with {app.busy.words(self.arm)}"
        if action == "move":
            if app.target is None:
                return "no target: g to type one"
            sol = app.target_ik.solution(app.branch) if (app.target_ik and app.branch) else None
            if sol is None:
                return "the target is out of reach"
            if not sol.usable:
                return f"{sol.branch} not usable: {'; '.join(sol.problems)}"
        if action == "branch":
            return "only one branch here (out of reach, or a stretched or folded arm)"
        return "not available now"
