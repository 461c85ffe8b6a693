"""CommissioningScreen: the per-axis walk-through from the console (the command line's
``benchjog commission AXIS``; the measurements' math is console/cell/commissioning.py).

Five stages for the chosen axis (left/right choose it; each axis keeps what was found
for it): confirm the direction (a short jog, then y or n: did it move the positive
way?), measure counts per unit (a test move, then the distance measured is typed), set
the zero at a reference mark (typed steps onto it, ``ok``, then the mark's value),
find the safe travel (typed steps to each end, ``ok`` at each; ``keep`` leaves the
soft limits) and check the homing cycle. Enter does the next step; every motion goes
through the interlock at reduced speed after the console's confirmation. ``w`` shows
the new arm file as a diff and writes it after ``y``, the old one kept as ``.bak``.
Escape goes back to the jog screen (``c`` returns, the findings kept). Space stops
the arm here too, also while the number field has the keys.

The interlock is not a safety function: keep clear of the arm with a hand on the
hardware e-stop while it moves.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from rich.text import Text
from textual import work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.message import Message
from textual.screen import Screen
from textual.widgets import Input, Static

from benchjog.console.cell import calibration_files as cf
from benchjog.console.cell import commissioning as cm
from benchjog.console.tui.screens.commission import arm_file_out, offer_arm_file, one_line
from benchjog.console.tui.widgets.keys import DimmedKeyHints, KeyFooter, TooSmall
from benchjog.console.tui.widgets.target_input import FieldInput
from benchjog.drivers.calibration import counts_from_joint
from benchjog.kinematics.model import Arm
from benchjog.kinematics.options import TOUCH_SPEED_PCT

CAUTION = ("Commissioning moves the arm at reduced speed: keep clear, a hand on the hardware "
           "e-stop. Software interlock only, not a safety-rated function (ISO 10218/13849).")

# (stage, step) -> what the step waits for: "go" (enter moves), "ask" (y/n), "type"
DIRECTION, COUNTS, ZERO, TRAVEL, HOMING, DONE = range(6)
WAITS = {"jog": "go", "ask": "ask", "back": "go", "move": "go", "measure": "type", "return": "go",
         "mark": "type", "value": "type", "end_a": "type", "end_b": "type", "home": "go",
         "done": "done"}


@dataclass
class AxisWalk:
    """One axis's walk-through: where it stands and what it found."""

    index: int
    found: cm.AxisFindings
    stage: int = DIRECTION
    step: str = "jog"
    c0: int = 0              # counts before the test move
    moved: int = 0           # counts the test move went
    end_a: float | None = None
    notes: dict[int, str] = field(default_factory=dict)   # stage -> what it found, in words


class NumberInput(FieldInput):
    """The typed answers. Space stops the arm (a number has no spaces); escape hands the
    keys back to the screen."""


class CommissioningScreen(DimmedKeyHints, Screen):
    """See the module docstring."""

    AUTO_FOCUS = ""
    HELP_NAME = "commissioning screen"
    FOOTER_KEYS = ("cm.axis-prev", "cm.axis-next", "cm.go", "cm.yes", "cm.no", "cm.write",
                   "app.stop", "cm.back", "app.help")
    HOMES_ITSELF = True   # h is this screen's homing stage, not the app's homing
    BINDINGS = [
        Binding("left", "axis(-1)", "axis-", tooltip="Choose the previous axis (each keeps what "
                "was found)", id="cm.axis-prev"),
        Binding("right", "axis(1)", "axis+", tooltip="Choose the next axis", id="cm.axis-next"),
        Binding("enter", "go", "go", tooltip="Do the next step: a motion at reduced speed (asks "
                "first), or type the answer asked for", id="cm.go"),
        Binding("y", "answer(True)", "yes", tooltip="It moved the positive way", id="cm.yes"),
        Binding("n", "answer(False)", "no", tooltip="It moved the other way", id="cm.no"),
        Binding("h", "home_stage", "home", tooltip="Stage 5: run the controller's homing cycle "
                "(asks first) and record what it found; h homes only there on this screen",
                id="cm.home"),
        Binding("w", "write", "write", tooltip="Show the new arm file as a diff; y writes it "
                "(the old one kept as .bak)", id="cm.write"),
        Binding("x", "restart", "restart", show=False, tooltip="Forget what was found for this "
                "axis and start it again", id="cm.restart"),
        Binding("escape", "back", "jog", tooltip="Back to the jog screen (c returns here, the "
                "findings kept)", id="cm.back"),
    ]

    class MotionEnded(Message):
        """A commissioning motion's end, from the worker thread."""

        def __init__(self, key: tuple, completed: bool, detail: str, counts: int | None):
            super().__init__()
            self.key, self.completed, self.detail, self.counts = key, completed, detail, counts

    def __init__(self, interlock, arm: Arm, *, speed_pct: float = TOUCH_SPEED_PCT,
                 step: float = cm.DIRECTION_STEP, test: float = cm.TEST_MOVE,
                 margin: float = cm.MARGIN):
        super().__init__()
        self.interlock, self.arm = interlock, arm
        self.speed_pct, self.dir_step, self.test_move, self.margin = speed_pct, step, test, margin
        self.axis = 0
        self.walks: dict[int, AxisWalk] = {}
        self.moving: tuple | None = None    # (axis, stage, step, what) of the motion running
        self.status = ""
        self.error = False
        self.written: Path | None = None

    # -- layout ------------------------------------------------------------------------
    def compose(self) -> ComposeResult:
        yield TooSmall()
        yield Static("", id="cm-title")
        yield Static(Text(CAUTION, style="yellow"), id="cm-caution")
        yield Static("", id="cm-stages")
        yield Static("", id="cm-now")
        yield Static("", id="cm-prompt")
        yield NumberInput(placeholder="type here, enter (escape: back to the keys)", id="cm-input",
                          compact=True)
        yield Static("", id="cm-status")
        yield KeyFooter(compact=True)

    def on_mount(self) -> None:
        self.refresh_view()

    def on_screen_resume(self) -> None:
        self.refresh_view()

    # -- the walk ----------------------------------------------------------------------
    @property
    def joint(self):
        return self.arm.joints[self.axis]

    @property
    def walk(self) -> AxisWalk:
        walk = self.walks.get(self.axis)
        if walk is None:
            j = self.joint
            walk = self.walks[self.axis] = AxisWalk(self.axis, cm.AxisFindings(j.direction, j.counts_per_unit,
                                                                               j.zero))
        return walk

    @property
    def motion_speed_pct(self) -> float:
        """The commissioning speed, or the console's speed override when that is lower."""
        return min(self.speed_pct, float(getattr(self.app, "speed_pct", 100.0)))

    def waits(self) -> str:
        return WAITS[self.walk.step]

    def counts_now(self) -> int | None:
        state = self.interlock.state()
        if state is None or not state.joints:
            return None
        return counts_from_joint(self.joint, state.joints[self.axis])

    def found_value(self, counts: int) -> float:
        f = self.walk.found
        return cm.value_from_counts(counts, f.zero, f.counts_per_unit, f.direction)

    # -- view --------------------------------------------------------------------------
    def prompt(self) -> str:
        w, j = self.walk, self.joint
        u = j.unit
        if self.moving is not None:
            return f"{self.moving[3]}: moving (space stops)"
        return {
            "jog": f"enter: jog {j.name} {self.dir_step:+g} {u} by the arm file (asks first); watch "
                   "which way it turns",
            "ask": f"did {j.name} move {cm.sense_words(j)}? y / n",
            "back": f"enter: jog {j.name} back {-self.dir_step:+g} {u} (asks first)",
            "move": f"enter: move {j.name} {self.test_move:g} {u} by the arm file (asks first); "
                    "measure how far it goes",
            "measure": f"type how far it moved, as measured ({u}), enter",
            "return": f"enter: move {j.name} back {-self.test_move:+g} {u} (asks first)",
            "mark": f"onto the reference mark: type a step ({u}, at most {cm.AXIS_STEP_MAX:g}), "
                    "enter; ok when on it",
            "value": f"type the mark's value ({u}; empty: 0), enter",
            "end_a": f"to one end of the safe travel: type a step ({u}), enter; ok there; keep: "
                     "limits as they are",
            "end_b": f"to the other end: type a step ({u}), enter; ok there",
            "home": "enter: run the controller's homing cycle (asks first)",
            "done": "all five stages done: w shows the new arm file as a diff and writes it on y",
        }.get(w.step, "")

    def stage_lines(self) -> str:
        w = self.walk
        lines = []
        for n, name in enumerate(cm.STAGES):
            mark = ">" if n == w.stage else "*" if n in w.notes else " "
            lines.append(f"{mark} {n + 1} {name:16s}{w.notes.get(n, '')}")
        return "\n".join(lines)

    def refresh_view(self) -> None:
        if not self.is_mounted or not self.query("#cm-status"):
            return   # not composed yet: on_mount draws it
        j = self.joint
        names = "  ".join(f"[{jj.name}]" if i == self.axis else jj.name
                          for i, jj in enumerate(self.arm.joints))
        self.query_one("#cm-title", Static).update(Text.assemble(
            ("commissioning ", "bold"), (f"axis {self.axis + 1}/{self.arm.n_joints}: {names}", "bold"),
            f"   ({self.motion_speed_pct:g} % speed)"))
        self.query_one("#cm-stages", Static).update(self.stage_lines())
        self.show_state(self.app.state if hasattr(self.app, "state") else None)
        self.query_one("#cm-prompt", Static).update(Text(self.prompt(), style="bold"))
        self.query_one("#cm-status", Static).update(
            Text(self.status, style="red" if self.error else ""))
        self.refresh_bindings()

    def show_state(self, state) -> None:
        """The app calls this with every state poll while this screen is on top."""
        if not self.is_mounted:
            return
        j = self.joint
        if state is None or not state.joints:
            words = "now: no position (not connected)"
        else:
            counts = counts_from_joint(j, state.joints[self.axis])
            words = (f"now: {j.name} {j.to_display(state.joints[self.axis]):.3f} {j.unit} by the "
                     f"arm file, count {counts}")
            if self.axis in self.walks and self.walk.stage > ZERO:
                words += f"; {self.found_value(counts):.3f} {j.unit} as found"
            if not state.enabled:
                words += "  (drives off: e)"
        for now in self.query("#cm-now").results(Static):   # none while still composing
            now.update(words)

    def say(self, words: str, *, error: bool = False) -> None:
        self.status, self.error = words, error
        self.refresh_view()

    def show_refusal(self, words: str) -> None:
        self.say(words, error=True)

    # -- keys --------------------------------------------------------------------------
    def check_action(self, action: str, parameters: tuple) -> bool | None:
        if action == "axis":
            return True if self.moving is None and self.arm.n_joints > 1 else None
        if action == "go":
            return True if self.moving is None and self.waits() in ("go", "type") else None
        if action == "answer":
            return True if self.moving is None and self.waits() == "ask" else None
        if action == "home_stage":
            return True if self.moving is None and self.walk.step == "home" else None
        if action in ("write", "restart"):
            ok = self.moving is None and (action == "restart" or self.waits() == "done")
            return True if ok else None
        return True

    def why_dimmed(self, action: str, parameters: tuple = ()) -> str:
        if self.moving is not None:
            return f"the arm is moving ({self.moving[3]}); space stops it"
        if action == "axis":
            return "this arm has one axis"
        if action == "go":
            return "answer with y or n first" if self.waits() == "ask" else "all stages done: w writes"
        if action == "answer":
            return "no question asked now"
        if action == "write":
            return f"finish the five stages first (now: {cm.STAGES[self.walk.stage]})"
        if action == "home_stage":
            if self.walk.stage > HOMING:
                return "homing is checked: w writes (x starts the axis again)"
            return (f"homing is stage 5, checked after the others (now: "
                    f"{cm.STAGES[self.walk.stage]}); escape homes from the jog screen")
        return "not available now"

    def action_axis(self, step: int) -> None:
        self.axis = (self.axis + int(step)) % self.arm.n_joints
        self.say(f"axis {self.joint.name}" + (": its findings kept" if self.axis in self.walks else ""))

    def action_back(self) -> None:
        self.app.pop_screen()

    def action_restart(self) -> None:
        self.walks.pop(self.axis, None)
        self.say(f"{self.joint.name}: started again, nothing found yet")

    def action_go(self) -> None:
        w, j = self.walk, self.joint
        kind = self.waits()
        if kind == "type":
            self.query_one("#cm-input", NumberInput).focus()
            return
        if kind != "go":
            return
        if w.step == "jog":
            self.start_motion(f"jog {j.name} {self.dir_step:+g} {j.unit}", self.dir_step)
        elif w.step == "back":
            self.start_motion(f"jog {j.name} {-self.dir_step:+g} {j.unit}", -self.dir_step)
        elif w.step == "move":
            counts = self.counts_now()
            if counts is None:
                self.say("no position: connect first (r)", error=True)
                return
            w.c0 = counts
            self.start_motion(f"move {j.name} {self.test_move:+g} {j.unit}", self.test_move)
        elif w.step == "return":
            self.start_motion(f"move {j.name} {-self.test_move:+g} {j.unit}", -self.test_move)
        elif w.step == "home":
            self.start_motion("home", None)

    def action_home_stage(self) -> None:
        """``h`` here is the homing stage itself (recorded like enter), never a homing
        the walk does not see."""
        if self.walk.step != "home":
            self.say(self.why_dimmed("home_stage"), error=True)
            return
        self.action_go()

    def action_answer(self, yes: bool) -> None:
        w, j = self.walk, self.joint
        if w.step != "ask":
            return
        w.found.direction = j.direction if yes else -j.direction
        w.notes[DIRECTION] = (f"{w.found.direction:+d}" + (" (as the file)" if yes else
                                                          f" (the file says {j.direction:+d})"))
        w.step = "back"
        self.say(f"direction {w.found.direction:+d}; enter jogs back")

    # -- typed answers -----------------------------------------------------------------
    def on_input_submitted(self, event: Input.Submitted) -> None:
        event.stop()
        box = self.query_one("#cm-input", NumberInput)
        text = event.value.strip()
        box.value = ""
        if self.moving is not None:
            self.say("the arm is moving: type when it has stopped", error=True)
            return
        if self.waits() != "type":
            self.set_focus(None)
            self.say("nothing to type now: enter does the next step", error=True)
            return
        try:
            self.answer_typed(text)
        except cm.CommissionError as exc:
            self.say(f"{exc}: nothing moved; type again", error=True)

    def answer_typed(self, text: str) -> None:
        w, j = self.walk, self.joint
        word = text.lower()
        if w.step == "measure":
            measured = cm.number_from_text(text)
            w.found.counts_per_unit = cm.counts_per_unit_from_measure(w.moved, measured)
            w.notes[COUNTS] = (f"{w.found.counts_per_unit:.6g} counts/{j.unit} (the file says "
                               f"{j.counts_per_unit:g})")
            w.step = "return"
            self.set_focus(None)
            self.say(f"{w.moved} counts moved {measured:g} {j.unit}; enter moves back")
        elif w.step == "mark" and word == "ok":
            w.step = "value"
            self.say("on the mark: type its value")
        elif w.step == "value":
            mark = cm.number_from_text(text) if text else 0.0
            counts = self.require_counts()
            w.found.zero = cm.zero_from_mark(counts, mark, w.found.counts_per_unit, w.found.direction)
            w.notes[ZERO] = f"{w.found.zero:.5f} {j.unit} (the file says {j.zero:g})"
            w.stage, w.step = TRAVEL, "end_a"
            self.say(f"the mark ({mark:g} {j.unit}) is at count {counts}")
        elif w.step == "end_a" and word == "keep":
            w.found.min = w.found.max = None
            w.notes[TRAVEL] = "kept as the file has them"
            self.next_to_homing("the soft limits stay as the arm file has them")
        elif w.step == "end_a" and word == "ok":
            w.end_a = self.found_value(self.require_counts())
            w.step = "end_b"
            self.say(f"one end at {w.end_a:.3f} {j.unit}; now the other end")
        elif w.step == "end_b" and word == "ok":
            end_b = self.found_value(self.require_counts())
            w.found.min, w.found.max = cm.soft_limits_from_travel(w.end_a, end_b, self.margin)
            w.notes[TRAVEL] = (f"{w.found.min:.3f} .. {w.found.max:.3f} {j.unit} "
                               f"({self.margin:g} inside)")
            self.next_to_homing(f"travel {min(w.end_a, end_b):.3f} .. {max(w.end_a, end_b):.3f} {j.unit}")
        elif w.step in ("mark", "end_a", "end_b"):
            delta = cm.step_from_text(text, j.unit)
            self.start_motion(f"jog {j.name} {delta:+g} {j.unit}", delta)

    def require_counts(self) -> int:
        counts = self.counts_now()
        if counts is None:
            raise cm.CommissionError("no position (not connected)")
        return counts

    def next_to_homing(self, words: str) -> None:
        w = self.walk
        w.stage, w.step = HOMING, "home"
        self.set_focus(None)
        self.say(words + "; enter runs the homing cycle")

    # -- motions (a thread worker; the interlock asks through the console's box) -------
    def start_motion(self, what: str, delta: float | None) -> None:
        w = self.walk
        self.moving = (self.axis, w.stage, w.step, what)
        self.say(f"{what}: asking first")
        self._motion_worker(self.moving, self.axis, delta, self.motion_speed_pct)

    @work(thread=True, exclusive=True, group="commission-motion", exit_on_error=False)
    def _motion_worker(self, key: tuple, index: int, delta: float | None, speed_pct: float) -> None:
        gate, joint = self.interlock, self.arm.joints[index]
        try:
            if delta is None:
                result = gate.home(self.app.confirmer)
            else:
                proposal = gate.propose_jog(f"j{index + 1}", joint.from_display(delta),
                                            speed_pct=speed_pct)
                result = gate.execute(proposal, self.app.confirmer)
            state = gate.state()
            counts = counts_from_joint(joint, state.joints[index]) if state.joints else None
            message = self.MotionEnded(key, result.completed, result.detail, counts)
        except Exception as exc:  # noqa: BLE001 - one line on the screen
            message = self.MotionEnded(key, False, f"error: {one_line(exc)}", None)
        self.post_message(message)

    def on_commissioning_screen_motion_ended(self, message: MotionEnded) -> None:
        index, stage, step, what = message.key
        self.moving = None
        walk = self.walks[index]
        joint = self.arm.joints[index]
        if not message.completed:
            self.say(f"{what}: {message.detail}" + ("" if WAITS[step] == "type" else
                                                    "; enter tries again"), error=True)
            return
        if stage == DIRECTION and step == "jog":
            walk.step = "ask"
        elif stage == DIRECTION and step == "back":
            walk.stage, walk.step = COUNTS, "move"
        elif stage == COUNTS and step == "move":
            walk.moved = (message.counts or 0) - walk.c0
            walk.step = "measure"
            if index == self.axis:
                self.query_one("#cm-input", NumberInput).focus()
        elif stage == COUNTS and step == "return":
            walk.stage, walk.step = ZERO, "mark"
            if index == self.axis:
                self.query_one("#cm-input", NumberInput).focus()
        elif stage == HOMING:
            walk.found.homing = cm.homing_words(joint.name, True, message.counts or 0, message.detail)
            walk.notes[HOMING] = walk.found.homing
            walk.stage, walk.step = DONE, "done"
        self.say(f"{what}: {message.detail}")

    # -- writing -----------------------------------------------------------------------
    def out_path(self) -> Path:
        return arm_file_out(self.arm, "commissioned")

    def action_write(self) -> None:
        w, j = self.walk, self.joint
        if w.stage != DONE:
            self.say(self.why_dimmed("write"), error=True)
            return
        path = self.out_path()
        try:
            changes = w.found.changes(j)
            original = cf.arm_text(self.arm)
            old = cf.read_text(path) if path.exists() else original
            new = cm.commissioned_text(old, w.index, changes)
            cf.check_arm_text(new, str(path))   # it must load as an arm, or nothing is written
        except Exception as exc:  # noqa: BLE001 - one line on the screen
            self.say(f"not written: {one_line(exc)}", error=True)
            return
        if new == old:
            self.say(f"{cm.findings_line(j, w.found, self.margin)}: the file already says this, "
                     "nothing to write")
            return

        def written(where: Path) -> None:
            self.written = where

        offer_arm_file(self, path, new, f"Write {path}? {cm.findings_line(j, w.found, self.margin)}",
                       cf.diff_text(old, new, path.name, "commissioned"),
                       lambda words, error: self.say(words, error=error), written)
