"""HelpScreen: every key of the screen below, with what it does and, for a dimmed key,
why it cannot act now. Opened with f1 (or ?) on every screen; any of escape, q, f1 or
? closes it. The stop keys still stop the arm from here."""

from __future__ import annotations

from rich.table import Table
from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import Footer, Static

from benchjog.console.tui.widgets.keys import KeyRow, TooSmall, key_rows


def help_table(title: str, rows: list[KeyRow]) -> Table:
    table = Table(title=Text(title, style="bold"), title_justify="left", expand=True,
                  box=None, show_edge=False, pad_edge=False)
    table.add_column("key", style="bold", no_wrap=True)
    table.add_column("does", ratio=3)
    table.add_column("now", ratio=2)
    for row in rows:
        now = Text("ready", style="green") if row.enabled else Text(row.reason, style="yellow")
        table.add_row(row.key, f"{row.label}: {row.tooltip}" if row.label else row.tooltip, now)
    return table


class HelpScreen(ModalScreen[None]):
    """The keys of ``screen`` (read when the panel opens)."""

    BINDINGS = [
        Binding("escape", "close", "close", tooltip="Close the help panel", id="help.close"),
        Binding("q", "close", "close", show=False, tooltip="Close the help panel",
                id="help.close-q"),
        Binding("f1", "close", "close", show=False, tooltip="Close the help panel",
                id="help.close-f1"),
        Binding("question_mark", "close", "close", show=False, tooltip="Close the help panel",
                id="help.close-qm"),
        Binding("space", "app.stop", "stop", tooltip="Stop the arm at once", id="help.stop"),
    ]

    def __init__(self, screen, title: str | None = None):
        super().__init__()
        self.rows = key_rows(screen)
        self.title_words = title or f"keys of the {getattr(screen, 'HELP_NAME', 'screen')}"

    def compose(self) -> ComposeResult:
        yield TooSmall()
        with VerticalScroll(id="help-box"):
            yield Static(help_table(self.title_words, self.rows), id="help-table")
            yield Static(Text("Dimmed keys say why in the right column. The software interlock "
                              "is not a safety function: keep the hardware e-stop within reach.",
                              style="yellow"), id="help-caution")
        yield Footer(compact=True)

    def action_close(self) -> None:
        self.dismiss(None)
