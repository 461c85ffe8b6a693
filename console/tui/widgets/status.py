"""The small panels: the banner, the link state, warnings, recent events, jog settings."""

from __future__ import annotations

import time
from collections import deque
from collections.abc import Sequence

from rich.text import Text
from textual.widget import Widget
from textual.widgets import Static

STALE_S = 0.5   # a position report older than this is called stale (the interlock's limit)

LEVEL_STYLE = {"estop": "bold white on red", "warn": "bold black on yellow", "info": ""}


# The controller's fault codes (PROTOCOL.md, EVT FAULT) in words: the cause and how to
# clear it. The causes are the usual ones of the trade (from memory), not a diagnosis.
FAULT_WORDS = {
    "FOLLOWING": ("following error on {axis}: the axis fell too far behind its command "
                  "(blocked, overloaded, or a loose coupling)",
                  "free the axis and check the load, then press r"),
    "WATCHDOG": ("controller watchdog: the host's heartbeat stopped reaching the controller",
                 "check the cable and that this console is still running, then press r"),
    "LIMIT_SWITCH": ("limit switch on {axis}: the axis reached the end of its travel",
                     "press r, then jog the axis away from the switch (check the arm "
                     "file's soft limits)"),
    "DRIVE": ("drive fault on {axis}: the amplifier reported an error (overcurrent, "
              "overtemperature or supply)",
              "check the drive's indicator, wiring and supply, then press r"),
}


def fault_words(latched: str) -> str:
    """A latched fault (``fault: CODE axis=N``) as its cause and how to clear it.

    >>> fault_words("fault: DRIVE axis=2")[:48]
    'drive fault on axis 2: the amplifier reported an'
    >>> fault_words("fault: WATCHDOG axis=0").split(". ")[0]
    "controller watchdog: the host's heartbeat stopped reaching the controller"
    >>> fault_words("fault: reported by the controller")
    'reported by the controller. Clear the cause, then press r to reset.'
    """
    text = latched.removeprefix("fault:").strip()
    parts = text.split()
    code = parts[0] if parts else ""
    axis = next((p.split("=", 1)[1] for p in parts[1:] if p.startswith("axis=")), "0")
    if code in FAULT_WORDS:
        cause, clear = FAULT_WORDS[code]
        where = "the controller" if axis in ("0", "") else f"axis {axis}"
        return f"{cause.format(axis=where)}. To clear: {clear}."
    return f"{text or 'the controller reports a fault'}. Clear the cause, then press r to reset."


def banner_lines(state, error: str | None = None, reach_warning: str | None = None,
                 ) -> list[tuple[str, str]]:
    """The conditions that block or endanger motion, most serious first, as
    (level, text) with level ``estop`` (red) or ``warn`` (yellow). ``state`` is a
    benchjog.drivers.base.DriverState or None (never read)."""
    out: list[tuple[str, str]] = []
    if error or state is None or not state.is_open:
        why = error or ("no state read yet" if state is None else "the driver is closed")
        out.append(("estop", f"NOT CONNECTED: {why}. Check the cable and the port, then "
                             "press r to connect."))
        return out
    latched = state.latched or ""
    mode = getattr(state.mode, "value", str(state.mode))
    if latched.startswith("estop") or mode == "ESTOP":
        out.append(("estop", f"E-STOP{' LATCHED' if latched else ''}: motion is blocked. "
                             "Release the e-stop button, then press r to reset."))
    elif latched.startswith("link lost"):
        out.append(("estop", f"LINK LOST: {latched}. Check the cable; press r to reset when "
                             "the controller answers."))
    elif latched or mode == "FAULT":
        out.append(("estop", f"FAULT: {fault_words(latched)}"))
    if not state.enabled and not latched:
        out.append(("warn", "DRIVES OFF: press e to enable them."))
    if not state.homed:
        out.append(("warn", "NOT HOMED: press h to run the homing cycle; jogs and moves are "
                            "refused until then."))
    if state.age_s > STALE_S:
        out.append(("warn", f"STALE POSITION: the last report is {state.age_s:.1f} s old; the "
                            "link may be failing."))
    if reach_warning:
        out.append(("warn", f"TARGET OUT OF REACH: {reach_warning}"))
    return out


def update_in_place(widget: Static, content, *, same_size: bool = False) -> None:
    """``widget.update(content)`` without laying out the whole screen again when the
    widget's size cannot change: its height and width are fixed by the styles (cells,
    fractions or percent, or unset: filling the container), or the caller knows the new
    content takes the same room (``same_size``). A layout is what makes a one-line change
    cost a whole frame."""
    styles = widget.styles
    fixed = all(scalar is None or not scalar.is_auto   # None: fills its container
                for scalar in (styles.height, styles.width))
    widget.update(content, layout=not (fixed or same_size) or not widget.size)


class Banner(Static):
    """Full width, hidden when all is well; red for e-stop/fault/link, yellow for
    conditions the user fixes with a key."""

    def __init__(self, *, id: str | None = None):
        super().__init__(id=id)
        self.items: list[tuple[str, str]] = []

    def show(self, items: Sequence[tuple[str, str]]) -> None:
        items = list(items)
        if items == self.items:
            return
        self.items = items
        self.set_class(not items, "-hidden")
        self.set_class(any(level == "estop" for level, _ in items), "-estop")
        text = Text()
        for n, (level, words) in enumerate(items):
            if n:
                text.append("\n")
            text.append(f" {words} ", style=LEVEL_STYLE[level])
        self.update(text)

    @property
    def text(self) -> str:
        return "\n".join(words for _, words in self.items)


def link_words(state, driver_name: str, error: str | None, polled_age_s: float | None) -> str:
    """The link state in one or two lines."""
    if state is None:
        return f"driver {driver_name}  link -  {error or 'waiting for the first state'}"
    latched = state.latched or ""
    estop = "LATCHED" if latched.startswith("estop") else (
        "pressed" if getattr(state.mode, "value", "") == "ESTOP" else "clear")
    heart = f"{state.age_s:.2f} s"
    if polled_age_s is not None:
        heart += f" (read {polled_age_s:.1f} s ago)"
    return (f"driver {driver_name}   link {state.link}   "
            f"mode {getattr(state.mode, 'value', state.mode)}\n"
            f"e-stop {estop}   drives {'on' if state.enabled else 'off'}   "
            f"homed {'yes' if state.homed else 'no'}   queued {state.queued}   "
            f"heartbeat {heart}" + (f"\nlatched: {latched}" if latched else "")
            + (f"\nerror: {error}" if error else ""))


def link_short(state, driver_name: str, error: str | None) -> str:
    """The link state in one line, for the compact layout (80 x 24)."""
    if state is None:
        return f"{driver_name}: {error or 'waiting for the first state'}"
    latched = state.latched or ""
    return (f"{driver_name} {getattr(state.mode, 'value', state.mode)}  "
            f"drives {'on' if state.enabled else 'off'}  "
            f"{'homed' if state.homed else 'NOT HOMED'}  q{state.queued}"
            + (f"  latched: {latched}" if latched else "") + (f"  error: {error}" if error else ""))


def compact_screen(widget: Widget) -> bool:
    """True when the widget's screen uses the compact layout (below 120 x 36)."""
    try:
        screen = widget.screen
    except Exception:  # noqa: BLE001 - not mounted
        return False
    return not (screen.has_class("-wide") and screen.has_class("-tall"))


class LinkStatus(Static):
    """The link panel: several lines in the wide layout, one in the compact one."""

    def __init__(self, *, id: str | None = None):
        super().__init__(id=id)
        self.border_title = "link"
        self.words = ""
        self.shown: tuple = ()
        self._lines: int | None = None   # the shown text's height, wrapped

    def show(self, words: str, short: str | None = None) -> None:
        self.words = words
        text = short if (short is not None and compact_screen(self)) else words
        if text != self.shown:
            # as many lines as before once wrapped to the panel: the same size
            width = self.content_size.width
            lines = len(Text(text).wrap(self.app.console, width)) if width else None
            same = lines is not None and lines == self._lines
            self.shown, self._lines = text, lines
            update_in_place(self, text, same_size=same)


class WarningsPanel(Static):
    """Warnings that are always on screen: reach, limits, singularity, keep-out, speed."""

    def __init__(self, *, id: str | None = None):
        super().__init__(id=id)
        self.border_title = "warnings"
        self.items: list[str] | None = None

    def show(self, items: Sequence[str]) -> None:
        items = list(dict.fromkeys(items))   # keep order, drop repeats
        if items == self.items:
            return
        self.items = items
        if not items:
            update_in_place(self, Text("none", style="green"))
            return
        text = Text()
        for n, item in enumerate(items):
            if n:
                text.append("\n")
            text.append("! " + item, style="yellow")
        update_in_place(self, text)


class EventLog(Widget):
    """Recent events, newest at the bottom; as many as fit."""

    def __init__(self, *, id: str | None = None, keep: int = 200):
        super().__init__(id=id)
        self.border_title = "events"
        self.entries: deque[str] = deque(maxlen=keep)

    @staticmethod
    def stamp() -> str:
        """The time of day an event is logged at (tests freeze it)."""
        return time.strftime("%H:%M:%S")

    def add(self, kind: str, detail: str) -> None:
        stamp = self.stamp()
        self.entries.append(f"{stamp} {kind:<9} {detail}")
        self.refresh()

    def render(self) -> Text:
        """The newest entries that fit; a long one wraps onto indented lines, so a reason
        cut short on the one-line message bar is read here in full."""
        width, height = self.content_size
        height = max(1, height)
        shown: list[str] = []
        for entry in reversed(self.entries):
            lines = wrap_entry(entry, width)
            shown[:0] = lines
            if len(shown) >= height:
                break
        shown = shown[-height:]
        return Text("\n".join(shown) if shown else "no events yet", no_wrap=True)


def wrap_entry(entry: str, width: int, indent: str = "  ") -> list[str]:
    """One event log entry as lines of at most ``width``; continuation lines indented.

    >>> wrap_entry("12:00:00 reset     failed: the e-stop input is still active", 30)
    ['12:00:00 reset     failed: the', '  e-stop input is still active']
    """
    import textwrap

    if len(entry) <= width or width <= len(indent) + 1:   # fits, or no room to wrap into
        return [entry[:width] if width > 0 else entry]
    return textwrap.wrap(entry, width, subsequent_indent=indent, break_long_words=True,
                         break_on_hyphens=False, drop_whitespace=True) or [""]


class JogStatus(Static):
    def __init__(self, *, id: str | None = None):
        super().__init__(id=id)
        self.words = ""

    def show(self, words: str) -> None:
        if words != self.words:
            self.words = words
            update_in_place(self, words)
