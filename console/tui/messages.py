"""App-wide messages: what the worker threads report back to the UI thread.

Workers never touch widgets; they post one of these and the app updates the screen.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from textual.message import Message


@dataclass
class StateUpdated(Message):
    """A fresh driver state and the events since the last poll (or the error that
    prevented reading them)."""

    state: Any                      # benchjog.drivers.base.DriverState | None
    events: list = field(default_factory=list)
    error: str | None = None


@dataclass
class MotionDone(Message):
    """A motion request ended: refused at planning, ran, or failed with an error."""

    request: Any                    # benchjog.console.tui.app.MotionRequest
    words: str                      # what was asked, for people
    outcome: str                    # done, cancelled, refused, halted, stopped, expired, error
    detail: str                     # one line
    reasons: tuple[str, ...] = ()   # refusal reasons of the proposal
    end_joints: tuple[float, ...] | None = None   # where the plan ends (rad, mm)
    warnings: tuple[str, ...] = ()  # the planner's warnings (speed, singularity, clearance)
    session: bool = False           # a jog step run inside the interlock's jog session
    session_end: str | None = None  # why the jog session ended on this request, if it did


class MotionStarted(Message):
    """The first setpoint of a jog-session step has gone to the controller (the screen
    says it moves from then on, not before: a redraw at the key would hold up the
    motion thread that sends the setpoint)."""


@dataclass
class ControlDone(Message):
    """enable / disable / reset finished (``error`` one line when it failed)."""

    what: str
    error: str | None = None
