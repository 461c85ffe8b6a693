"""CalibrationScreen: touch fixture-plate holes from the console and calibrate the arm
file (docs/calibration.md; the command line's ``benchjog calibrate``).

``p`` loads a plate file and plans the touches (holes and branches chosen for
observability); up/down choose a hole; ``a`` approaches it (through the interlock at
reduced speed, after the console's confirmation); escape goes back to the jog screen to
bring the tool tip onto the hole with the jog keys, and ``k`` returns here (one screen
for the session, so the touches survive); ``c`` records the counts where the arm is for
the chosen hole (saved at once to the touches file); ``f`` fits and shows the report;
``w`` shows the corrected arm file as a diff and writes it after ``y`` (with a backup).
The interlock is not a safety-rated function: keep clear of the arm while it moves.
"""

from __future__ import annotations

import io
from collections.abc import Callable
from pathlib import Path

from rich.text import Text
from textual import work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical, VerticalScroll
from textual.message import Message
from textual.screen import ModalScreen, Screen
from textual.widgets import Footer, Input, Label, Static

from benchjog.console.cell import calibration_files as cf
from benchjog.console.cell import touching
from benchjog.console.cell.calibration_report import print_report, report_dict
from benchjog.kinematics import identify as ident
from benchjog.kinematics.model import Arm
from benchjog.kinematics.planner import JOINT


def one_line(exc: BaseException) -> str:
    text = str(exc).strip().splitlines()
    return text[0] if text else type(exc).__name__


class PlatePathScreen(ModalScreen[str | None]):
    """Asks for the plate file's path; enter returns it, escape None."""

    DEFAULT_CSS = """
    PlatePathScreen { align: center middle; }
    #plate-box { width: 72; height: auto; border: thick $accent; padding: 1 2; background: $surface; }
    """
    BINDINGS = [Binding("escape", "cancel", "cancel", tooltip="Close without loading", id="plate.cancel")]

    def __init__(self, value: str = ""):
        super().__init__()
        self.value = value

    def compose(self) -> ComposeResult:
        with Vertical(id="plate-box"):
            yield Label(Text("Plate file (TOML): the holes in the plate's frame", style="bold"))
            yield Input(value=self.value, id="plate-path", placeholder="examples/bench-cell/plate.toml")
        yield Footer()

    def on_input_submitted(self, event: Input.Submitted) -> None:
        self.dismiss(event.value.strip() or None)

    def action_cancel(self) -> None:
        self.dismiss(None)


class WriteFileScreen(ModalScreen[bool]):
    """The diff of a file about to be written; y writes, n or escape does not."""

    DEFAULT_CSS = """
    WriteFileScreen { align: center middle; }
    #write-box { width: 90%; height: 80%; border: thick $accent; padding: 1 2; background: $surface; }
    """
    BINDINGS = [
        Binding("y", "answer(True)", "yes, write", tooltip="Write the file (the old one kept as .bak)",
                id="write.yes"),
        Binding("n", "answer(False)", "no", tooltip="Write nothing", id="write.no"),
        Binding("escape", "answer(False)", "cancel", tooltip="Write nothing", id="write.cancel"),
    ]

    def __init__(self, title: str, diff: str):
        super().__init__()
        self.title_words, self.diff = title, diff

    def compose(self) -> ComposeResult:
        with VerticalScroll(id="write-box"):
            yield Static(Text(self.title_words, style="bold"))
            text = Text()
            for line in self.diff.splitlines():
                style = "green" if line.startswith("+") else "red" if line.startswith("-") else ""
                text.append(line + "\n", style=style)
            yield Static(text, id="write-diff")
            yield Static(Text("y: write    n / escape: write nothing", style="bold"))
        yield Footer()

    def action_answer(self, yes: bool) -> None:
        self.dismiss(bool(yes))


def arm_file_out(arm: Arm, suffix: str) -> Path:
    """Where a changed arm file is written: the arm's own file, or (a built-in arm)
    ``<name>-<suffix>.toml`` in the working directory."""
    if Path(arm.source).is_file():
        return Path(arm.source)
    return Path(f"{arm.name}-{suffix}.toml")


def offer_arm_file(screen, path: Path, new: str, title: str, diff: str,
                   say: Callable[[str, bool], None], on_written=None) -> None:
    """Show ``diff`` in the write dialog; on yes write ``new`` to ``path`` (the old file
    kept as .bak). What happened is one line through ``say(words, is_error)``;
    ``on_written(path)`` after a write."""

    def answered(yes: bool | None) -> None:
        if not yes:
            say("nothing written", False)
            return
        try:
            cf.write_arm_file(path, new)
        except Exception as exc:  # noqa: BLE001 - one line on the screen
            say(f"not written: {one_line(exc)}", True)
            return
        if on_written is not None:
            on_written(path)
        say(f"wrote {path} (the old one kept as .bak); restart the console on it and home", False)

    screen.app.push_screen(WriteFileScreen(title, diff), answered)


class CalibrationScreen(Screen):
    """See the module docstring."""

    AUTO_FOCUS = ""
    BINDINGS = [
        Binding("p", "plate", "plate", tooltip="Load a plate file and plan the touches", id="cal.plate"),
        Binding("up", "select(-1)", "hole-", tooltip="Choose the previous hole", id="cal.up"),
        Binding("down", "select(1)", "hole+", tooltip="Choose the next hole", id="cal.down"),
        Binding("a", "approach", "approach", tooltip="Move to the chosen hole at reduced speed "
                "(asks first)", id="cal.approach"),
        Binding("c", "capture", "record", tooltip="Record the counts here as a touch of the chosen hole",
                id="cal.capture"),
        Binding("f", "fit", "fit", tooltip="Fit the arm to the touches and show the report", id="cal.fit"),
        Binding("w", "write", "write", tooltip="Write the corrected arm file (shows the diff, asks)",
                id="cal.write"),
        Binding("escape", "back", "jog", tooltip="Back to the jog screen (k returns here)", id="cal.back"),
    ]

    class ApproachDone(Message):
        def __init__(self, words: str):
            super().__init__()
            self.words = words

    def __init__(self, interlock, arm: Arm, *, plate_path: str | None = None,
                 touches_path: str | Path = "touches.toml"):
        super().__init__()
        self.interlock, self.arm = interlock, arm
        self.plate_path = plate_path or ""
        self.touches_path = Path(touches_path)
        self.plate: cf.Plate | None = None
        self.visits: list[ident.Candidate] = []
        self.cursor = 0
        self.records: list[cf.TouchRecord] = []
        self.result: ident.Identification | None = None
        self.status = "p: load a plate file"
        self.report = ""

    def compose(self) -> ComposeResult:
        yield Static(Text("calibration: touch fixture-plate holes", style="bold"), id="cal-title")
        yield Static(Text("Keep clear of the arm while it moves; the hardware e-stop is the safety "
                          "function, this console is not.", style="yellow"), id="cal-caution")
        yield Static("", id="cal-plan")
        yield Static("", id="cal-status")
        with VerticalScroll(id="cal-report-box"):
            yield Static("", id="cal-report")
        yield Footer()

    def on_mount(self) -> None:
        self.refresh_view()

    # -- view --------------------------------------------------------------------------
    def plan_lines(self) -> list[str]:
        touched = {(r.hole, r.branch) for r in self.records}
        lines = []
        for i, c in enumerate(self.visits):
            mark = ">" if i == self.cursor else " "
            done = "touched" if (c.label, c.branch.value) in touched else ""
            coords = ", ".join(f"{v:.1f}" for v in c.hole_mm)
            lines.append(f"{mark} {c.label:8s} {coords:>18s} mm  {c.branch.value:10s} {done}")
        return lines

    def refresh_view(self) -> None:
        self.query_one("#cal-plan", Static).update("\n".join(self.plan_lines()) or "(no plan yet)")
        self.query_one("#cal-status", Static).update(
            f"{len(self.records)} touches (saved to {self.touches_path}); {self.status}")
        self.query_one("#cal-report", Static).update(self.report)

    def say(self, words: str) -> None:
        self.status = words
        self.refresh_view()

    # -- actions -----------------------------------------------------------------------
    def action_plate(self) -> None:
        self.app.push_screen(PlatePathScreen(self.plate_path), self.load_plate)

    def load_plate(self, path: str | None) -> None:
        if not path:
            return
        try:
            plate = cf.load_plate(path, self.arm)
            visits = touching.planned_visits(self.arm, plate, 12)
        except Exception as exc:  # noqa: BLE001 - one line on the screen
            self.say(f"plate not loaded: {one_line(exc)}")
            return
        self.plate_path, self.plate, self.visits, self.cursor = path, plate, visits, 0
        self.say(f"{len(visits)} touches planned from {path}: a approaches the chosen hole")

    def action_select(self, step: int) -> None:
        if self.visits:
            self.cursor = (self.cursor + int(step)) % len(self.visits)
            self.refresh_view()

    def action_approach(self) -> None:
        if not self.visits or self.plate is None:
            self.say("load a plate file first (p)")
            return
        self._approach_worker(self.visits[self.cursor])

    @work(thread=True, exclusive=True, group="cal-motion", exit_on_error=False)
    def _approach_worker(self, cand: ident.Candidate) -> None:
        words = f"approach {cand.label} ({cand.branch.value})"
        try:
            target = touching.approach_target(self.arm, self.plate, cand.hole_mm)
            proposal = self.interlock.propose_move(target, branch=cand.branch, path=JOINT,
                                                   speed_pct=touching.REDUCED_SPEED_PCT)
            result = self.interlock.execute(proposal, self.app.confirmer)
            words += f": {result.detail}"
            if result.completed:
                words += "; escape to jog onto the hole, k back here, c records"
        except Exception as exc:  # noqa: BLE001 - one line on the screen
            words += f": error: {one_line(exc)}"
        self.post_message(self.ApproachDone(words))

    def on_calibration_screen_approach_done(self, message: ApproachDone) -> None:
        self.say(message.words)

    def action_capture(self) -> None:
        if not self.visits:
            self.say("load a plate file first (p)")
            return
        cand = self.visits[self.cursor]
        try:
            record = touching.record(self.interlock, self.arm, cand.label, cand.hole_mm)
            self.records.append(record)
            cf.save_touches(self.touches_path, self.arm, self.plate_path, self.records)
        except Exception as exc:  # noqa: BLE001 - one line on the screen
            self.say(f"not recorded: {one_line(exc)}")
            return
        self.cursor = (self.cursor + 1) % len(self.visits)
        self.say(f"recorded {cand.label} ({record.branch}) at counts {list(record.counts)}")

    def action_fit(self) -> None:
        try:
            base = self.plate.base if self.plate else ()
            result = ident.identify(self.arm, cf.touches_for_fit(self.arm, self.records), base)
            doc = report_dict(self.arm, result, self.records, self.plate)
        except Exception as exc:  # noqa: BLE001 - refusals (too few, inseparable) in one line
            self.result, self.report = None, ""
            self.say(f"no fit: {one_line(exc)}")
            return
        out = io.StringIO()
        print_report(doc, out)
        self.result, self.report = result, out.getvalue()
        self.say("fitted: w writes the corrected arm file")

    def corrected_path(self) -> Path:
        return arm_file_out(self.arm, "calibrated")

    def action_write(self) -> None:
        if self.result is None:
            self.say("fit first (f)")
            return
        path = self.corrected_path()
        try:
            new = cf.corrected_text(cf.arm_text(self.arm), self.result)
            cf.check_arm_text(new, str(path))
            old = cf.read_text(path) if path.exists() else cf.arm_text(self.arm)
        except Exception as exc:  # noqa: BLE001
            self.say(f"not written: {one_line(exc)}")
            return

        offer_arm_file(self, path, new, f"Write {path}?", cf.diff_text(old, new, path.name),
                       lambda words, _error: self.say(words))

    def action_back(self) -> None:
        self.app.pop_screen()
