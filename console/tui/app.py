"""The Textual console: BenchjogApp, the ``make_app`` factory and ``run_console``.

The app owns the interlock (never a raw driver) and the global keys: stop, reset,
drives on/off, home, teach, quit. Every motion is a Proposal from the interlock,
executed by ``Interlock.execute(proposal, confirmer)`` in a worker thread; the
confirmer shows ConfirmMoveScreen on the UI thread and waits for the answer. Driver
I/O never runs on the UI thread except ``stop()``, which returns at once.

A timer (POLL_S) reads ``state()`` and ``poll_events()`` in a thread worker and posts
StateUpdated; it keeps running while a modal is open.
"""

from __future__ import annotations

import importlib
import importlib.util
import math
import queue
import sys
import threading
import time
from dataclasses import dataclass, replace
from pathlib import Path

from textual import work
from textual.app import App
from textual.binding import Binding

from benchjog.console.tui.messages import ControlDone, MotionDone, MotionStarted, StateUpdated
from benchjog.console.tui.screens.confirm import ConfirmMoveScreen
from benchjog.console.tui.screens.help import HelpScreen
from benchjog.console.tui.screens.jog import JogScreen
from benchjog.console.tui.widgets.keys import HEIGHT_CLASSES, WIDTH_CLASSES
from benchjog.drivers.interlock import Confirmer, Interlock, Proposal
from benchjog.drivers.jog_session import DEADMAN_S, SessionError
from benchjog.kinematics.model import Arm, Branch
from benchjog.kinematics.planner import nearest_equivalent
from benchjog.kinematics.solve import IKResult, joints_from_tool, pose_warnings, tool_from_joints

POLL_S = 0.15               # the heartbeat / state refresh period
STEPS = (0.1, 1.0, 10.0)    # jog steps: mm (Cartesian), deg (roll and revolute joints), mm (quill)
TEACH_MODULE = "benchjog.console.tui.screens.teach"
AHEAD = "ahead"             # a request to the motion thread: plan the likely jog steps now
SWITCH_INTERVAL_S = 0.001   # how often Python hands the interpreter between threads (5 ms default)
BLOCKING_MODES = ("ESTOP", "FAULT")


def one_line(exc: BaseException) -> str:
    text = str(exc).strip().splitlines()
    return text[0] if text else type(exc).__name__


@dataclass(frozen=True)
class MotionRequest:
    """What a person asked for; planned in the worker from the arm's position then."""

    kind: str                                  # "jog", "move", "home" (or AHEAD)
    axis: str = ""                             # jog: x, y, z, roll, j1..j4
    delta: float = 0.0                         # jog: mm or rad
    target: tuple[float, ...] | None = None    # move: tool target (mm, rad)
    branch: Branch | None = None               # move
    path: str = "joint"                        # move
    key_at: float = 0.0                        # jog: when its key arrived (monotonic s)
    queued: bool = False                       # jog: waited in the pending slot

    def words(self, arm: Arm) -> str:
        if self.kind == "home":
            return "home"
        if self.kind == "jog":
            if self.axis.startswith("j"):
                joint = arm.joints[int(self.axis[1:]) - 1]
                return f"jog {joint.name} {joint.to_display(self.delta):+g} {joint.unit}"
            if self.axis == "roll":
                return f"jog roll {math.degrees(self.delta):+g} deg"
            return f"jog {self.axis} {self.delta:+g} mm"
        return f"move ({self.branch or 'nearest branch'}, {self.path} path)"


class ScreenConfirmer(Confirmer):
    """The console's confirmer: shows ConfirmMoveScreen on the UI thread and blocks the
    calling worker thread until the person answers (or the app closes: no)."""

    def __init__(self, app: "BenchjogApp"):
        self.app = app

    def confirm(self, proposal: Proposal) -> bool:
        if threading.get_ident() == getattr(self.app, "_thread_id", None):
            return False   # never block the UI thread waiting for itself
        if self.app.closing:
            return False
        answered = threading.Event()
        box = {"yes": False}

        def on_answer(result: bool | None) -> None:
            box["yes"] = result is True
            answered.set()

        session = self.app.interlock.jog_session_lines(proposal)
        plan = proposal.lines(self.app.arm)
        lines = plan[:1] + session + plan[1:]   # the bounds first: in view at 80x24
        title = ("Confirm a jog session before the arm moves" if session and
                 not session[0].startswith("single step") else "Confirm before the arm moves")
        self.app.asking = True   # the status line says a question is open, not a motion
        try:
            try:
                self.app.call_from_thread(self.app.ask_confirm, lines, title, on_answer)
            except RuntimeError:
                return False   # the app is not running
            while not answered.wait(0.05):
                if self.app.closing:
                    return False
            return box["yes"]
        finally:
            self.app.asking = False


class BenchjogApp(App):
    """The console. Build it with :func:`make_app`."""

    CSS_PATH = "benchjog.tcss"
    TITLE = "benchjog"
    ENABLE_COMMAND_PALETTE = False
    HORIZONTAL_BREAKPOINTS = WIDTH_CLASSES   # compact below 120 x 36, "too small" below 80 x 24
    VERTICAL_BREAKPOINTS = HEIGHT_CLASSES

    BINDINGS = [
        Binding("space", "stop", "stop", tooltip="Stop the arm at once (never asks)",
                id="app.stop", key_display="spc"),
        Binding("s", "stop", "stop", show=False, tooltip="Stop the arm at once (never asks)",
                id="app.stop-s"),
        Binding("e", "drives", "drives", tooltip="Switch the drives on (enable) or off (disable)",
                id="app.drives"),
        Binding("h", "home", "home", tooltip="Run the controller's homing cycle (asks first)",
                id="app.home"),
        Binding("r", "reset", "reset", tooltip="Clear a latched e-stop (once released), fault or "
                "lost link; connect when not connected", id="app.reset"),
        Binding("t", "teach", "teach", tooltip="Teach points and edit programs", id="app.teach"),
        Binding("k", "calibrate", "calibrate", tooltip="Touch fixture-plate holes and calibrate the "
                "arm file", id="app.calibrate"),
        Binding("c", "commission", "commission", tooltip="Commission one axis at reduced speed: "
                "direction, counts per unit, zero, soft limits, homing", id="app.commission"),
        Binding("ctrl+q", "quit", "quit", tooltip="Stop any motion and quit", priority=True,
                id="app.quit"),
        Binding("f1", "help", "help", tooltip="List every key of this screen, what it does and "
                "why a dimmed key cannot act now", id="app.help"),
        Binding("question_mark", "help", "help", show=False, tooltip="List every key of this "
                "screen (same as f1)", id="app.help-qm"),
    ]

    def __init__(self, arm: Arm, interlock: Interlock, *, points_path: Path | str | None = None,
                 program_path: Path | str | None = None, driver_name: str | None = None):
        super().__init__()
        self.arm = arm
        self.interlock = interlock
        self.points_path = Path(points_path) if points_path else None
        self.program_path = Path(program_path) if program_path else None
        self.driver_name = driver_name or ("sim" if interlock.sim is not None else "serial")
        self.confirmer = ScreenConfirmer(self)
        self.closing = False
        # what the UI shows, all written on the UI thread only
        self.state = None
        self.state_error: str | None = None
        self.polled_at: float | None = None
        self.joint_mode = False
        self.step = 1.0
        self.path = "joint"
        self.speed_pct = 100.0
        self.target: tuple[float, ...] | None = None
        self.target_ik: IKResult | None = None
        self.branch: Branch | None = None
        self.last_end_joints: tuple[float, ...] | None = None
        self.plan_warnings: list[str] = []
        self.message = ""
        self.asking = False   # a confirmation box is open (ScreenConfirmer)
        self.busy: MotionRequest | None = None
        self.pending: MotionRequest | None = None
        self.confirm_screen: ConfirmMoveScreen | None = None
        self._confirm_box: ConfirmMoveScreen | None = None
        self._polling = False
        self._readiness: tuple | None = None
        self._has_teach: bool | None = None
        self._teach_screen = None   # the one teach screen, once made (its locks on quit)
        # the motion thread: started once, it takes requests the moment a key makes them
        # (a Textual worker per motion would start only after the next redraw)
        self._motions: queue.SimpleQueue[MotionRequest | None] = queue.SimpleQueue()
        self._motion_thread: threading.Thread | None = None
        self._show_at_first_setpoint = False   # a session step: redraw once it is sent
        self._ahead_for: tuple | None = None    # what the jog steps were planned ahead for
        self._unwatch = None
        self._switch_interval: float | None = None
        self.jog_screen = JogScreen(arm)

    # Textual asks for the current theme on every line it renders, and its answer copies
    # the table of every registered theme each time (about a hundred copies per key's
    # frame). The console never changes theme (no command palette), so the answer is
    # kept, under the theme's name and for the theme object Textual itself gives.
    _theme_kept: tuple[str, object] | None = None

    @property
    def current_theme(self):
        name = self.theme
        kept = self._theme_kept
        if kept is None or kept[0] != name:
            kept = self._theme_kept = (name, App.current_theme.fget(self))
        return kept[1]

    def register_theme(self, theme) -> None:
        self._theme_kept = None
        super().register_theme(theme)

    # -- life cycle --------------------------------------------------------------------
    def on_mount(self) -> None:
        # The motion thread plans in Python while the UI thread draws: hand the
        # interpreter over every millisecond rather than every 5 (Python's default), so
        # that a key is never kept waiting a frame behind planning done ahead of it.
        self._switch_interval = sys.getswitchinterval()
        sys.setswitchinterval(min(self._switch_interval, SWITCH_INTERVAL_S))
        self._unwatch = self.interlock.watch(self._gate_record)
        self.push_screen(self.jog_screen)
        self.set_interval(POLL_S, self._poll_tick)
        self._poll_tick()

    def on_unmount(self) -> None:
        self.closing = True
        if self._switch_interval is not None:
            sys.setswitchinterval(self._switch_interval)
        if self._unwatch is not None:
            self._unwatch()
        self._motions.put(None)   # the motion thread ends after the motion it runs, if any
        # A teach screen used only through the jog screen's `a` was never shown, so it is
        # never unmounted, and Textual has emptied the installed screens by now: close
        # its files (their locks) through the reference kept when it was made.
        screen, self._teach_screen = self._teach_screen, None
        close = getattr(screen, "_close_files", None)
        if close is not None:
            try:
                close()
            except Exception:  # noqa: BLE001 - closing down: the locks go with the process
                pass

    # -- state refresh (thread worker, never blocks the UI) ------------------------------
    def _poll_tick(self) -> None:
        if self._polling or self.closing:
            return
        self._polling = True
        self._poll_worker()

    @work(thread=True, group="poll", exit_on_error=False)
    def _poll_worker(self) -> None:
        try:
            state = self.interlock.state()
            events = self.interlock.poll_events()
        except Exception as exc:  # noqa: BLE001 - a dead link is shown, never a crash
            self.post_message(StateUpdated(None, [], one_line(exc)))
            return
        self.post_message(StateUpdated(state, events))

    def on_state_updated(self, message: StateUpdated) -> None:
        self._polling = False
        if self.closing or not self.screen_stack:
            return   # a report that arrives while the app shuts down: no screen to show it
        self.state_error = message.error
        if message.state is not None:
            self.state = message.state
            self.polled_at = self._clock()
        elif message.error:
            self.state = None
        for event in message.events:
            if event.kind != "done":   # one line per segment would drown the rest
                self.jog_screen.log_event(event.kind, event.detail)
        if not self.ready() and self.state is not None:
            # the interlock would end it at the next step anyway; say so now
            self.end_session("the driver's state changed (drives off, latched or no link)")
        self.refresh_view()

    @staticmethod
    def _clock() -> float:
        import time
        return time.monotonic()

    # -- what the screen shows -----------------------------------------------------------
    @property
    def motion_active(self) -> bool:
        return self.busy is not None

    @property
    def actual(self) -> tuple[float, ...] | None:
        return tuple(self.state.joints) if self.state is not None else None

    def ready(self) -> bool:
        """True when the driver would take a motion now (connected, drives on, homed,
        nothing latched)."""
        s = self.state
        return (s is not None and not self.state_error and s.is_open and s.enabled and s.homed
                and not s.latched and getattr(s.mode, "value", "") not in BLOCKING_MODES)

    def latched(self) -> bool:
        s = self.state
        return s is not None and (bool(s.latched) or getattr(s.mode, "value", "") in BLOCKING_MODES)

    def current_ik(self) -> tuple[IKResult | None, Branch | None, str]:
        """The IK of the typed target (or of the tool's present pose when none), the
        active branch and a title for the branch table."""
        if self.target is not None:
            return self.target_ik, self.branch, "branches for the target"
        joints = self.actual
        if joints is None:
            return None, None, "branches"
        pose = tool_from_joints(self.arm, joints)
        ik = joints_from_tool(self.arm, pose[:2] if not self.arm.is_scara else pose)
        return ik, self.branch_of(joints), "branches here (no target typed)"

    def branch_of(self, joints) -> Branch:
        t2 = joints[1] + self.arm.joints[1].offset_rad
        return Branch.ELBOW_DOWN if math.sin(t2) >= 0 else Branch.ELBOW_UP

    def warnings(self) -> list[str]:
        out: list[str] = []
        if self.target_ik is not None and self.target is not None:
            out += list(self.target_ik.warnings)
            sol = self.target_ik.solution(self.branch) if self.branch else None
            if sol is not None and not sol.usable:
                out += [f"{sol.branch}: {p}" for p in sol.problems]
        if self.actual is not None:
            out += [f"now: {w}" for w in pose_warnings(self.arm, self.actual)]
        out += self.plan_warnings
        return out

    def reach_warning(self) -> str | None:
        if self.target_ik is not None and not self.target_ik.reachable:
            words = self.target_ik.warnings[0] if self.target_ik.warnings else "no IK solution"
            return words.removeprefix("out of reach: ")
        return None

    def refresh_view(self) -> None:
        if self.jog_screen.is_mounted:
            self.jog_screen.refresh_view()
        stack = self.screen_stack  # empty while the app starts or shuts down
        show_state = getattr(stack[-1], "show_state", None) if stack else None
        if show_state is not None:  # the teach screen, when it is up
            show_state(self.state)
        self._ask_plan_ahead()
        readiness = (self.ready(), self.latched(), self.busy is not None, self.joint_mode,
                     self.target is not None, self.branch, self._state_bits())
        if readiness != self._readiness:
            self._readiness = readiness
            self.refresh_bindings()
            if self.jog_screen.is_mounted:
                self.jog_screen.refresh_bindings()

    def _state_bits(self) -> tuple:
        s = self.state
        return (None,) if s is None else (s.is_open, s.enabled, s.homed)

    def set_message(self, words: str, *, error: bool = False) -> None:
        self.message = words
        if self.jog_screen.is_mounted:
            self.jog_screen.show_message(words, error=error)

    # -- target and branch -------------------------------------------------------------
    def set_target(self, target: tuple[float, ...]) -> None:
        """A typed target: its IK, and the usable branch nearest the present joints."""
        self.target = tuple(target)
        self.target_ik = joints_from_tool(self.arm, self.target)
        self.plan_warnings = []
        ik = self.target_ik
        if not ik.reachable:
            self.branch = None
            self.set_message(f"target out of reach: {self.reach_warning()} (nothing moves)",
                             error=True)
        else:
            here = self.actual or self.arm.home_joints
            choices = ik.usable or ik.solutions
            best = min(choices, key=lambda s: sum(  # by whole turns too, as the planner does
                (a - b) ** 2 for a, b in zip(nearest_equivalent(self.arm, here, s.joints), here)))
            self.branch = best.branch
            if ik.usable:
                self.set_message(f"target set: {best.branch} chosen; m moves, b picks the other "
                                 "branch")
            else:
                self.set_message("no usable branch for this target (see branches); nothing "
                                 "moves", error=True)
        self.refresh_view()

    def clear_target(self) -> None:
        self.target = None
        self.target_ik = None
        self.branch = None
        self.set_message("target cleared")
        self.refresh_view()

    def choose_branch(self, branch: Branch) -> None:
        if self.target is None:
            joints = self.actual
            if joints is None:
                return
            pose = tool_from_joints(self.arm, joints)
            self.target = tuple(pose[:2]) if not self.arm.is_scara else tuple(pose)
            self.target_ik = joints_from_tool(self.arm, self.target)
        self.branch = Branch(branch)
        sol = self.target_ik.solution(self.branch) if self.target_ik else None
        if sol is not None and sol.usable:
            self.set_message(f"{self.branch} chosen; m moves there")
        else:
            self.set_message(f"{self.branch} chosen but not usable: "
                             f"{'; '.join(sol.problems) if sol else 'no solution'}", error=True)
        self.refresh_view()

    def planned_joints(self) -> tuple[float, ...] | None:
        if self.target_ik is None or self.branch is None:
            return None
        sol = self.target_ik.solution(self.branch)
        return sol.joints if sol is not None else None

    def other_joints(self) -> tuple[float, ...] | None:
        ik, active, _ = self.current_ik()
        if ik is None or not ik.reachable or len(ik.solutions) < 2 or active is None:
            return None
        sol = ik.solution(active.other())
        return sol.joints if sol is not None else None

    def commanded_joints(self) -> tuple[float, ...] | None:
        return self.planned_joints() if self.target is not None else self.last_end_joints

    # -- motion ------------------------------------------------------------------------
    def jog_delta(self, axis: str, sign: int) -> float:
        """The step of a jog key on ``axis`` (mm or rad) at the present step size."""
        if axis.startswith("j"):
            return self.arm.joints[int(axis[1:]) - 1].from_display(sign * self.step)
        if axis == "roll":
            return math.radians(sign * self.step)
        return sign * self.step

    def jog(self, axis: str, sign: int) -> None:
        self.request_motion(MotionRequest("jog", axis=axis, delta=self.jog_delta(axis, sign),
                                          key_at=time.monotonic()))

    def move_to_target(self) -> None:
        if self.target is None:
            self.set_message("type a target first (g)", error=True)
            return
        self.request_motion(MotionRequest("move", target=self.target, branch=self.branch,
                                          path=self.path))

    def request_motion(self, request: MotionRequest) -> None:
        """Start a motion, or keep it in the one pending slot while a jog runs (a newer
        jog replaces the pending one: holding a key never piles up moves)."""
        if self.busy is not None:
            if request.kind == "jog" and self.busy.kind == "jog":
                self.pending = replace(request, queued=True)
                self.jog_screen.refresh_view()
            else:
                self.set_message(f"busy with {self.busy.words(self.arm)}: wait, or stop (space)",
                                 error=True)
            return
        self.busy = request
        self.plan_warnings = []
        asks = request.kind != "jog" or self.interlock.jog_session() is None
        # No redraw here: it would hold the interpreter while the motion thread plans and
        # sends the key's first setpoint. A step in a session is shown once that setpoint
        # is sent (MotionStarted); a question (or a refusal) follows within milliseconds
        # and redraws; the poll redraws anyway within POLL_S.
        self._show_at_first_setpoint = not asks
        self._start_motion(request)

    def _gate_record(self, kind: str, **fields) -> None:
        """Watches the gate's records (on the motion thread): the first segment sent of
        a session step asks the UI to show it."""
        if kind == "segment" and fields.get("n") == 1 and self._show_at_first_setpoint:
            self._show_at_first_setpoint = False
            self.post_message(MotionStarted())

    def on_motion_started(self, message: MotionStarted) -> None:
        self.refresh_view()

    def _start_motion(self, request: MotionRequest) -> None:
        """Hand the request to the motion thread (started on first use), which runs
        motions one at a time, as the ``busy`` flag allows."""
        if self._motion_thread is None or not self._motion_thread.is_alive():
            self._motion_thread = threading.Thread(target=self._motion_loop, daemon=True,
                                                   name="benchjog-motion")
            self._motion_thread.start()
        self._motions.put(request)

    def _motion_loop(self) -> None:
        while (request := self._motions.get()) is not None:
            if request.kind != AHEAD:
                self._motion_worker(request)
            self._plan_ahead(request)

    def _plan_ahead(self, last: MotionRequest) -> None:
        """Runs in the motion thread while it has nothing to do: plan the jog steps the
        next key may ask for, from where the arm rests (the key of the last jog first,
        then its opposite, then the other keys of the frame), so that the key's first
        setpoint, or its question, does not wait for planning
        (Interlock.prepare_session_jog). Stops as soon as a request comes; planning
        ahead is only a head start, and any trouble with it leaves the step to be
        planned when its key comes."""
        gate = self.interlock
        if self.joint_mode:
            axes = [f"j{i + 1}" for i in range(self.arm.n_joints)]
        else:
            axes = ["x", "y", "z", "roll"] if self.arm.is_scara else ["x", "y"]
        likely = [(axis, s) for axis in axes for s in (1, -1)]
        if last.kind == "jog" and last.axis in axes:
            sign = 1 if last.delta >= 0 else -1
            likely.remove((last.axis, sign))
            likely.remove((last.axis, -sign))
            likely[:0] = [(last.axis, sign), (last.axis, -sign)]
        for axis, s in likely:
            if not self._motions.empty() or self.closing:
                return
            try:
                if not gate.prepare_session_jog(axis, self.jog_delta(axis, s),
                                                speed_pct=self.speed_pct, step=self.step):
                    return   # the arm is not resting where a plan can start
            except Exception:  # noqa: BLE001 - the key plans the step itself then
                return

    def _ask_plan_ahead(self) -> None:
        """On the UI thread (from refresh_view): when the jog screen is up, the arm rests
        ready and what the next jog key would plan has changed (pose, frame, step,
        speed), have the motion thread plan it ahead. Never under another screen: the
        teach and commissioning screens run motions of their own, which planning here
        would only slow."""
        state = self.state
        if (self.closing or state is None or self.busy is not None or state.queued
                or not self.ready() or not self.screen_stack
                or self.screen_stack[-1] is not self.jog_screen):
            self._ahead_for = None
            return
        key = (state.joints, self.joint_mode, self.step, self.speed_pct)
        if key != self._ahead_for:
            self._ahead_for = key
            self._start_motion(MotionRequest(AHEAD))

    def _motion_worker(self, request: MotionRequest) -> None:
        """Runs in the motion thread; the result always comes back as MotionDone."""
        done: MotionDone | None = None
        try:
            done = self._run_motion(request)
        except Exception as exc:  # noqa: BLE001 - one line in the UI, never a crash
            done = MotionDone(request, request.words(self.arm), "error", f"error: {one_line(exc)}")
        finally:
            self.post_message(done or MotionDone(request, request.words(self.arm), "error",
                                                 "error: the motion ended without a result"))

    def _run_motion(self, request: MotionRequest) -> MotionDone:
        """Runs in the worker thread: plan (interlock), refuse or execute (interlock)."""
        gate = self.interlock
        if request.kind == "home":
            result = gate.home(self.confirmer)
            return MotionDone(request, "home", result.outcome, result.detail)
        if request.kind == "jog":
            return self._run_jog(request)
        proposal = gate.propose_move(request.target, branch=request.branch, path=request.path,
                                     speed_pct=self.speed_pct)
        return self._carry_out(request, proposal, gate.execute)

    def _carry_out(self, request: MotionRequest, proposal, execute, *,
                   session_end: str | None = None, jog_session: bool = False) -> MotionDone:
        """Runs in the worker thread: the proposal refused with its reasons, or run by
        ``execute(proposal, confirmer)`` (the console's confirmation box); the planner's
        warnings and the plan's end pose go with the result. ``jog_session``: say whether
        the interlock's jog session is still on afterwards."""
        warnings = tuple(w for plan in proposal.plans
                         for w in getattr(plan.summary, "warnings", ()) or ())
        if not proposal.ok:
            return MotionDone(request, proposal.request, "refused",
                              "refused: " + "; ".join(proposal.verdict.reasons),
                              proposal.verdict.reasons, warnings=warnings, session_end=session_end)
        ends = [p.segments[-1].joints for p in proposal.plans if p.segments]
        result = execute(proposal, self.confirmer)
        return MotionDone(request, proposal.request, result.outcome, result.detail,
                          end_joints=tuple(ends[-1]) if ends and result.completed else None,
                          warnings=warnings, session_end=session_end,
                          session=jog_session and self.interlock.jog_session() is not None)

    def _run_jog(self, request: MotionRequest) -> MotionDone:
        """Runs in the worker thread. Inside the interlock's jog session the step runs
        with no question if it ends within DEADMAN_S of its key; otherwise (no session, or this step ends it) a fresh key press
        asks for a new session around the present pose, while a key that waited behind a
        running step is dropped, never turned into a question or a motion later."""
        gate = self.interlock
        words = request.words(self.arm)
        # every step in a session must end within the dead-man window of its own key
        # (a repeat that waited, or a key the busy machine was slow to hand over)
        within = DEADMAN_S - (time.monotonic() - request.key_at)
        step = gate.session_jog(request.axis, request.delta, speed_pct=self.speed_pct,
                                end_within_s=within)
        if step.result is not None:
            r = step.result
            return MotionDone(request, words, r.outcome, r.detail, end_joints=step.end_joints,
                              session=True, session_end=step.ended)
        if request.queued:
            return MotionDone(request, words, "dropped", "not moved: the jog session ended; "
                              "the next jog key asks again", session_end=step.ended)
        try:
            proposal = gate.propose_jog_session(request.axis, request.delta, step=self.step,
                                                speed_pct=self.speed_pct)
        except SessionError as exc:
            return MotionDone(request, words, "refused", f"refused: {exc}",
                              session_end=step.ended)
        return self._carry_out(request, proposal, gate.execute_jog_session,
                               session_end=step.ended, jog_session=True)

    def session_view(self):
        """The interlock's active jog session (read-only), or None."""
        return self.interlock.jog_session()

    def end_session(self, why: str) -> None:
        """A change of frame, branch or a larger step ends the jog session now."""
        if self.interlock.jog_session() is not None:
            self.interlock.end_jog_session(why)
            self.set_message(f"jog session ended: {why}; the next jog asks again")
            self.jog_screen.log_event("session", f"ended: {why}")
            self.refresh_view()

    def on_motion_done(self, message: MotionDone) -> None:
        self.busy = None
        self._show_at_first_setpoint = False
        if message.session_end and message.session_end != "no jog session":
            self.jog_screen.log_event("session", f"ended: {message.session_end}")
        self.plan_warnings = [f"last plan: {w}" for w in message.warnings]
        self.plan_warnings += [f"refused: {r}" for r in message.reasons]
        self.jog_screen.log_event(message.outcome, f"{message.words}: {message.detail}")
        if message.end_joints is not None:
            self.last_end_joints = message.end_joints
        elif message.request.kind == "home" and message.outcome == "done":
            self.last_end_joints = None  # homed: no commanded Cartesian pose to compare with
        ok = message.outcome == "done"
        self.set_message(f"{message.words}: {message.detail}",
                         error=not ok and message.outcome not in ("lapsed", "dropped"))
        pending, self.pending = self.pending, None
        self.refresh_view()
        # a held key goes on only inside a session, and only with a fresh repeat
        if (pending is not None and ok and message.session
                and time.monotonic() - pending.key_at <= DEADMAN_S):
            self.request_motion(pending)

    def ask_confirm(self, lines, title: str, callback) -> None:
        """On the UI thread: the one confirmation box, composed once and then reused
        (updating two texts is much quicker than composing a screen)."""
        box = self._confirm_box
        if box is None:
            box = self._confirm_box = ConfirmMoveScreen(lines, title=title)
            self.install_screen(box, name="confirm-box")
        else:
            box.ask(lines, title=title)
        self.show_confirm(box, callback)

    def show_confirm(self, screen: ConfirmMoveScreen, callback) -> None:
        """On the UI thread: push the confirmation; remember it so stop can answer no."""
        self.confirm_screen = screen

        def answered(result: bool | None) -> None:
            self.confirm_screen = None
            self.pending = None   # keys from before the question never move the arm later
            callback(result)

        self.push_screen(screen, answered)

    # -- controls (driver I/O in a worker, stop at once) ----------------------------------
    def action_stop(self) -> None:
        # The gate's stop reaches the driver before anything else and never raises or
        # waits (drivers/interlock.py); nothing here stands before it.
        self.interlock.stop()            # returns at once, from the UI thread
        self.pending = None
        try:
            if self.confirm_screen is not None and self.confirm_screen.is_attached:
                self.confirm_screen.action_answer(False)
            self.jog_screen.log_event("stop", "stop sent")
            journal_error = self.interlock.journal_error
            self.set_message("stop sent" + (f" (journal failing: {journal_error})"
                                            if journal_error else ""), error=True)
        except Exception:  # noqa: BLE001 - the stop went out; the screen must not crash on it
            pass

    def action_drives(self) -> None:
        on = self.state is not None and self.state.enabled
        self._control_worker("disable" if on else "enable")

    def action_reset(self) -> None:
        self._control_worker("reset")

    @work(thread=True, group="control", exit_on_error=False)
    def _control_worker(self, what: str) -> None:
        try:
            getattr(self.interlock, what)()
        except Exception as exc:  # noqa: BLE001 - one line in the UI
            self.post_message(ControlDone(what, one_line(exc)))
            return
        self.post_message(ControlDone(what))

    def on_control_done(self, message: ControlDone) -> None:
        if message.error:
            self.jog_screen.log_event(message.what, f"failed: {message.error}")
            self.set_message(f"{message.what} failed: {message.error}", error=True)
        else:
            self.jog_screen.log_event(message.what, "done")
            self.set_message(f"{message.what}: done")
        self._poll_tick()

    def action_home(self) -> None:
        self.request_motion(MotionRequest("home"))

    def has_teach(self) -> bool:
        if self._has_teach is None:
            try:
                self._has_teach = importlib.util.find_spec(TEACH_MODULE) is not None
            except (ImportError, ValueError):
                self._has_teach = False
        return self._has_teach

    def action_teach(self) -> None:
        """The teach screen; one for the whole session, so that what it holds (a frame
        half taught, the settings for new steps, its file locks) survives going back to
        jog and returning."""
        if self._install_teach():
            self.push_screen("teach")

    def _install_teach(self) -> bool:
        """The one teach screen of the session, installed on first use (kept, not
        unmounted, when left); False with a one-line message when it cannot be made."""
        if not self.is_screen_installed("teach"):
            try:
                module = importlib.import_module(TEACH_MODULE)
                screen = module.TeachScreen(self.interlock, self.arm, self.points_path,
                                            self.program_path)
            except Exception as exc:  # noqa: BLE001 - a broken plug-in screen is one line
                self.set_message(f"teach screen unavailable: {one_line(exc)}", error=True)
                return False
            self.install_screen(screen, name="teach")
            self._teach_screen = screen
        return True

    def action_calibrate(self) -> None:
        """The calibration screen; one for the session, so its touches survive jogging."""
        if not self.is_screen_installed("calibrate"):
            from benchjog.console.tui.screens.commission import CalibrationScreen

            # the touches go beside the cell's points file, never into the shell's folder
            touches = (self.points_path.with_name("touches.toml") if self.points_path
                       else Path("touches.toml"))
            self.install_screen(CalibrationScreen(self.interlock, self.arm, touches_path=touches),
                                name="calibrate")
        if self.screen is not self.get_screen("calibrate"):
            self.push_screen("calibrate")

    def action_commission(self) -> None:
        """The commissioning screen; one for the session, so what it found survives
        going back to jog and returning."""
        if not self.is_screen_installed("commission"):
            from benchjog.console.tui.screens.commissioning import CommissioningScreen

            self.install_screen(CommissioningScreen(self.interlock, self.arm), name="commission")
        if self.screen is not self.get_screen("commission"):
            self.end_session("commissioning")   # its motions are single steps that ask
            self.push_screen("commission")

    async def action_quit(self) -> None:
        try:
            self.interlock.stop()        # the driver's stop first; never raises
        finally:
            self.closing = True
            self.exit(0)

    def check_action(self, action: str, parameters: tuple) -> bool | None:
        if action == "drives":
            s = self.state
            if s is None or not s.is_open:
                return None
            return True if s.enabled else (None if self.latched() else True)
        if action == "home":
            if getattr(self.screen, "HOMES_ITSELF", False):
                return False   # its own h records the homing; a dimmed one must not fall through
            s = self.state
            ok = (s is not None and s.is_open and s.enabled and not self.latched()
                  and self.busy is None)
            return True if ok else None
        if action == "reset":
            s = self.state
            not_connected = s is not None and not s.is_open
            return True if (self.latched() or not_connected) else None
        if action == "teach":
            return True if (self.has_teach() and self.busy is None) else None
        if action == "commission":
            # from the jog screen only: the teach and calibration screens have c keys of
            # their own, and one of theirs that is dimmed must not fall through to this
            if self.screen is not self.jog_screen:
                return False
            return True if self.busy is None else None
        return True


    # -- teaching from the jog screen ------------------------------------------------------
    def teach_point_here(self) -> None:
        """Teach the pose here as a new point (p1, p2, ...) without leaving the jog
        screen: the teach screen's book does it, so its files, locks and rules apply."""
        if self.busy is not None:
            self.set_message(f"not taught: the arm is moving ({self.busy.words(self.arm)}); "
                             "teach when it has stopped", error=True)
            return
        if not self._install_teach():
            return
        words, ok = self.get_screen("teach").teach_here()
        self.jog_screen.log_event("teach", words)
        self.set_message(words, error=not ok)

    # -- help: every key and why a dimmed one cannot act ----------------------------------
    def action_help(self) -> None:
        if not isinstance(self.screen, HelpScreen):
            self.push_screen(HelpScreen(self.screen))

    def why_dimmed(self, action: str, parameters: tuple = ()) -> str:
        """Why one of the app's keys is dimmed now, in words (the help panel and a
        refused key show it)."""
        s = self.state
        if action in ("drives", "home", "reset") and (s is None or not s.is_open):
            return "not connected: r connects" if action != "reset" else "not connected yet"
        if action == "drives":
            return "latched: clear it with r first"
        if action == "home":
            if self.busy is not None:
                return f"busy with {self.busy.words(self.arm)}"
            if self.latched():
                return "latched: clear it with r first"
            return "drives off: e switches them on"
        if action == "reset":
            return "nothing to reset: no e-stop, fault or lost link latched"
        if action == "teach":
            if not self.has_teach():
                return "the teach screen is not installed"
            return f"busy with {self.busy.words(self.arm)}" if self.busy else "not available now"
        if action == "commission" and self.busy is not None:
            return f"busy with {self.busy.words(self.arm)}"
        return "not available now"


def make_app(arm: Arm, interlock: Interlock, *, points_path: Path | str | None = None,
             program_path: Path | str | None = None) -> BenchjogApp:
    """The console on an open interlock (shared by the CLI and the tests). The caller
    closes the interlock."""
    return BenchjogApp(arm, interlock, points_path=points_path, program_path=program_path)


def run_console(args) -> int:
    """``benchjog`` with no subcommand: the console on the simulated arm, or on a
    controller over serial when ``--port`` is given."""
    from benchjog.console.cell.armfile import load_arm
    from benchjog.console.cell.link import open_gate
    from benchjog.console.cell.programs import arm_for_files

    # --arm, else the arm the program or points file names (a mismatch: one line, exit 2)
    arm = arm_for_files(args.arm, getattr(args, "program", None), getattr(args, "points", None),
                        load_arm)
    gate = open_gate(arm, args, require_link=False)  # not connected: shown, r retries
    try:
        make_app(arm, gate, points_path=getattr(args, "points", None),
                 program_path=getattr(args, "program", None)).run()
    finally:
        gate.close()
    return 0
