"""Keys people can find: the footer of the most used keys, the rows of the help panel,
the reason a dimmed key gives, and the notice shown when the terminal is too small.

A screen names the keys its footer shows in ``FOOTER_KEYS`` (binding ids, in order);
every other key is listed by the help panel (f1 or ?), with its tooltip. A screen may
say why a key is dimmed with ``why_dimmed(action, parameters) -> str``; the app's keys
ask the app. Pressing a dimmed key puts that reason on the screen
(:meth:`DimmedKeyHints.on_key`).
"""

from __future__ import annotations

from dataclasses import dataclass
from itertools import groupby

from rich.text import Text
from textual import events
from textual.binding import Binding
from textual.widgets import Footer, Static
from textual.widgets._footer import FooterKey, FooterLabel, KeyGroup

MIN_WIDTH = 80    # the smallest terminal the console is laid out for (columns)
MIN_HEIGHT = 24   # (rows); below either: "terminal too small"

# breakpoints (textual App.HORIZONTAL_BREAKPOINTS / VERTICAL_BREAKPOINTS): the class set
# on every screen for the terminal's width and height
WIDTH_CLASSES = [(0, "-too-narrow"), (MIN_WIDTH, "-narrow"), (120, "-wide")]
HEIGHT_CLASSES = [(0, "-too-short"), (MIN_HEIGHT, "-short"), (36, "-tall")]


def too_small(width: int, height: int) -> bool:
    return width < MIN_WIDTH or height < MIN_HEIGHT


@dataclass(frozen=True)
class KeyRow:
    """One key of a screen as the help panel lists it."""

    key: str          # as displayed ("f1", "spc", "^q")
    label: str        # the footer label
    tooltip: str      # what it does
    enabled: bool
    reason: str       # why it is dimmed ("" when enabled)
    where: str        # "screen" or "app"


def why_dimmed(node, action: str, parameters: tuple = ()) -> str:
    """The reason ``node`` (a screen or the app) gives for a dimmed ``action``."""
    explain = getattr(node, "why_dimmed", None)
    if explain is None:
        return "not available now"
    try:
        return explain(action, parameters) or "not available now"
    except Exception:  # noqa: BLE001 - a reason is a courtesy, never a crash
        return "not available now"


def _parsed(binding: Binding) -> tuple[str, tuple]:
    from textual.actions import parse
    try:
        _ns, name, params = parse(binding.action)
    except Exception:  # noqa: BLE001
        return binding.action, ()
    return name, tuple(params)


def key_rows(screen) -> list[KeyRow]:
    """Every key that acts on ``screen`` now or could (hidden ones included), each once,
    the screen's keys before the app's; a key another binding shadows is left out."""
    app = screen.app
    rows: list[KeyRow] = []
    seen: set[str] = set()
    for key, active in screen.active_bindings.items():
        binding = active.binding
        if key in seen or not binding.id or active.node is not screen and active.node is not app:
            continue   # a widget's own keys (table cursor, focus, copy) are Textual's
        seen.add(key)
        name, params = _parsed(binding)
        reason = "" if active.enabled else why_dimmed(active.node, name, params)
        shown = app.get_key_display(binding)
        if not shown.strip("/[]") or shown.startswith("/"):   # a footer group's shorthand
            shown = binding.key
        rows.append(KeyRow(shown, binding.description,
                           binding.tooltip or binding.description, active.enabled, reason,
                           "app" if active.node is app else "screen"))
    rows.sort(key=lambda r: r.where == "app")   # stable: the screen's first
    return rows


class KeyFooter(Footer):
    """A footer of the screen's most used keys (``screen.FOOTER_KEYS``, binding ids),
    so that it fits 80 columns; the help key is always last. A dimmed key's tooltip
    says why. Without ``FOOTER_KEYS`` it shows what Textual's footer shows.

    Textual's footer composes all its keys again whenever the screen's bindings may
    have changed (a key dimmed, the screen covered or shown again: every jog key and
    every question). This one composes only when the keys shown change; when only a
    key's dimming or its reason changes, it updates that key in place."""

    _shape: tuple | None = None

    def _entries(self) -> list[tuple[Binding, bool, str]]:
        """One (binding, enabled, tooltip) per action, in the footer's order."""
        wanted = getattr(self.screen, "FOOTER_KEYS", None)
        active = self.screen.active_bindings
        picked = []
        for _key, (node, binding, enabled, tooltip) in active.items():
            if wanted is None:
                if not binding.show:
                    continue
            elif binding.id not in wanted:
                continue
            if not enabled:
                name, params = _parsed(binding)
                tooltip = f"{binding.tooltip or binding.description} (dimmed: " \
                          f"{why_dimmed(node, name, params)})"
            picked.append((binding, enabled, tooltip))
        if wanted is not None:
            order = {bid: n for n, bid in enumerate(wanted)}
            picked.sort(key=lambda item: order.get(item[0].id, len(order)))
        by_action: dict[str, tuple[Binding, bool, str]] = {}
        for item in picked:
            by_action.setdefault(item[0].action, item)
        return list(by_action.values())

    def _shape_of(self, entries) -> tuple:
        """What the composed keys depend on, apart from dimming and tooltips."""
        return tuple((b.key, self.app.get_key_display(b), b.description, b.action,
                      None if b.group is None else (b.group.description, b.group.compact))
                     for b, _enabled, _tooltip in entries)

    def compose(self):
        if not self._bindings_ready:
            return
        entries = self._entries()
        self._shape = self._shape_of(entries)
        self.styles.grid_size_columns = len(entries)
        for group, items in groupby(entries, lambda entry: entry[0].group):
            items = list(items)
            if group is not None and len(items) > 1:
                with KeyGroup(classes="-compact" if group.compact else ""):
                    for binding, enabled, tooltip in items:
                        yield FooterKey(binding.key, self.app.get_key_display(binding), "",
                                        binding.action, disabled=not enabled,
                                        tooltip=tooltip or binding.description,
                                        classes="-grouped").data_bind(compact=Footer.compact)
                yield FooterLabel(group.description)
            else:
                for binding, enabled, tooltip in items:
                    yield FooterKey(binding.key, self.app.get_key_display(binding),
                                    binding.description, binding.action,
                                    disabled=not enabled,
                                    tooltip=tooltip).data_bind(compact=Footer.compact)

    def bindings_changed(self, screen) -> None:
        if not (self._bindings_ready and screen.app.app_focus and self.is_attached
                and screen is self.screen and self._shape is not None):
            super().bindings_changed(screen)   # Textual's way: compose again
            return
        entries = self._entries()
        keys = list(self.query(FooterKey))
        by_action = {key.action: key for key in keys}
        if self._shape_of(entries) != self._shape or len(keys) != len(entries) or \
                any(binding.action not in by_action for binding, _e, _t in entries):
            self._shape = None   # stale until compose runs again
            self.call_after_refresh(self.recompose)
            return
        for binding, enabled, tooltip in entries:
            key = by_action[binding.action]
            tooltip = tooltip or (binding.description if key.has_class("-grouped") else "")
            if key._disabled == enabled:   # Textual's FooterKey keeps it in _disabled
                key._disabled = not enabled
                key.set_class(not enabled, "-disabled")
            if key.tooltip != (tooltip or None):
                key.tooltip = tooltip or None


class TooSmall(Static):
    """Shown instead of a screen when the terminal is below MIN_WIDTH x MIN_HEIGHT
    (benchjog.tcss shows it on the breakpoint classes)."""

    def __init__(self) -> None:
        super().__init__(Text(f"terminal too small: benchjog needs at least {MIN_WIDTH} x "
                              f"{MIN_HEIGHT}; make the window larger (space still stops "
                              "the arm, ctrl+q quits)", style="bold"), classes="too-small")


class DimmedKeyHints:
    """Screen mix-in: a key pressed while it is dimmed says why, on the screen's
    message line (``show_refusal(words)``), instead of doing nothing silently."""

    def on_key(self, event: events.Key) -> None:
        active = self.active_bindings.get(event.key)
        if active is None or active.enabled:
            return
        name, params = _parsed(active.binding)
        words = f"{active.binding.description or event.key}: {why_dimmed(active.node, name, params)}"
        show = getattr(self, "show_refusal", None)
        if show is not None:
            show(words)
