"""ConfirmMoveScreen: the yes/no question before anything moves."""

from __future__ import annotations

from collections.abc import Sequence

from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical, VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import Static

from benchjog.console.tui.widgets.keys import KeyFooter, TooSmall


class ConfirmMoveScreen(ModalScreen[bool]):
    """Shows a proposal's lines (Proposal.lines(arm)); y -> True, n or escape -> False.

    Lines starting with ``REFUSED:`` or ``warning`` are highlighted. The stop keys work
    here too (they stop the arm and answer False)."""

    BINDINGS = [
        Binding("y", "answer(True)", "yes, move", tooltip="Confirm: send this motion to the arm",
                id="confirm.yes"),
        Binding("n", "answer(False)", "no", tooltip="Cancel: nothing moves", id="confirm.no"),
        Binding("escape", "answer(False)", "cancel", tooltip="Cancel: nothing moves",
                id="confirm.cancel"),
        # a modal hides the app's keys, so the stop keys are repeated here
        Binding("space", "app.stop", "stop", tooltip="Stop the arm at once and answer no",
                id="confirm.stop"),
        Binding("s", "app.stop", "stop", show=False, tooltip="Stop the arm at once and answer no",
                id="confirm.stop-s"),
        Binding("f1", "app.help", "help", tooltip="List these keys", id="confirm.help"),
    ]
    HELP_NAME = "confirmation"
    # The screen itself draws nothing but its background (the box is its children):
    # Textual then paints it as one blank strip a line instead of laying out each line
    # when the box is shown (Textual 8; older versions ignore this).
    BLANK = True

    def __init__(self, lines: Sequence[str], *, title: str = "confirm motion"):
        super().__init__()
        self.lines = list(lines)
        self.title_words = title
        self.answered = False
        self._styled_for: tuple | None = None

    def compose(self) -> ComposeResult:
        # the answer keys stay in view at any size: only the plan scrolls
        yield TooSmall()
        with Vertical(id="confirm-box"):
            yield Static(Text(self.title_words, style="bold"), id="confirm-title")
            yield Static(Text("y: move now    n / escape: cancel (nothing moves)",
                              style="bold"), id="confirm-keys")
            with VerticalScroll(id="confirm-scroll"):
                yield Static(self._lines_text(), id="confirm-lines")
            yield Static(Text("Keep clear of the arm; the hardware e-stop is the safety "
                              "function, this prompt is not.", style="yellow"), id="confirm-caution")
        yield KeyFooter(compact=True)   # composed once: the box is shown again and again

    def check_action(self, action: str, parameters: tuple) -> bool | None:
        if action == "answer" and parameters and parameters[0] is True and (
                self.has_class("-too-narrow") or self.has_class("-too-short")):
            return None   # no yes to a plan the terminal is too small to show
        return True

    def why_dimmed(self, action: str, parameters: tuple = ()) -> str:
        return "the terminal is too small to show the plan: enlarge it first"

    def action_answer(self, yes: bool) -> None:
        if not self.answered:
            self.answered = True
            self.dismiss(bool(yes))

    # -- reuse (key to screen within one frame) ------------------------------------------
    def _on_screen_resume(self, event) -> None:
        """Shown again: Textual recomputes every node's styles on each resume; when the
        stylesheet (theme), the terminal size and this screen's classes are what they were
        the last time the box was shown, its styles are too, so that is skipped."""
        if not hasattr(event, "refresh_styles"):
            # a Textual without the switch (6.x at the dependency floor): its handler
            # takes no event, and every resume refreshes the styles
            super()._on_screen_resume()
            return
        version = getattr(self.app, "_css_update_count", None)   # Textual's stylesheet version
        styled_for = (version, self.app.size, frozenset(self.classes))
        if version is not None and styled_for == self._styled_for:
            event.refresh_styles = False
        super()._on_screen_resume(event)
        self._styled_for = styled_for

    def ask(self, lines: Sequence[str], *, title: str | None = None) -> None:
        """Show new lines in this box before it is pushed again, so the console composes
        it once and every later question only updates two texts."""
        self.lines = list(lines)
        self.answered = False
        if title is not None:
            self.title_words = title
        if not self.is_mounted:
            return   # compose() will use the new lines
        self.query_one("#confirm-title", Static).update(Text(self.title_words, style="bold"))
        self.query_one("#confirm-lines", Static).update(self._lines_text())
        self.query_one("#confirm-scroll", VerticalScroll).scroll_home(animate=False)

    def _lines_text(self) -> Text:
        text = Text()
        for n, line in enumerate(self.lines):
            if n:
                text.append("\n")
            low = line.lower()
            style = ("bold red" if line.startswith("REFUSED") else
                     "yellow" if ("warning" in low or "near" in low) else "")
            text.append(line, style=style)
        return text
