"""Pilot helpers shared by the console tests (tests/test_console_*.py), and a call
counter the jog-session tests share with them.

Each waits by letting the app run (``pilot.pause``) for a bounded number of short
pauses; none asserts a wall-clock time. Callers keep the number of tries and the pause
they have always used, so every test waits exactly as long as it did before.
"""

from __future__ import annotations

import importlib

from benchjog.console.tui.screens.confirm import ConfirmMoveScreen


async def until(pilot, condition, tries: int = 200, pause_s: float = 0.03) -> bool:
    """Let the app run until ``condition()`` holds (at most ``tries`` pauses of
    ``pause_s``); the condition's last value."""
    for _ in range(tries):
        if condition():
            return True
        await pilot.pause(pause_s)
    return condition()


async def drives_on(pilot, app, **wait) -> None:
    """Wait for the first state, press e, and wait until the app would take a motion
    (connected, drives on, homed, nothing latched). ``wait``: until()'s tries/pause_s."""
    await until(pilot, lambda: app.state is not None, **wait)
    await pilot.press("e")
    assert await until(pilot, app.ready, **wait)


async def confirm_shown(pilot, app, **wait) -> ConfirmMoveScreen:
    """Wait for the confirmation box; the box."""
    assert await until(pilot, lambda: isinstance(app.screen, ConfirmMoveScreen), **wait)
    return app.screen


def count_calls(monkeypatch, target: str) -> list[int]:
    """Count the calls of the function at the dotted path ``target`` (it still runs):
    a one-item list whose item is the count so far."""
    module, name = target.rsplit(".", 1)
    real = getattr(importlib.import_module(module), name)
    calls = [0]

    def counted(*args, **kwargs):
        calls[0] += 1
        return real(*args, **kwargs)

    monkeypatch.setattr(target, counted)
    return calls
