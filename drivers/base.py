"""The driver interface every arm driver implements, its state and errors.

A :class:`Driver` holds one link to one controller (or a simulated one). The interlock
(drivers/interlock.py) is the only code that holds a Driver and commands motion; the
rest of the program reads :meth:`Driver.state` and :meth:`Driver.poll_events`.

Joint values cross this interface in internal units (radians, mm); the conversion to
controller counts is the driver's job (drivers/calibration.py).
"""

from __future__ import annotations

import math
import threading
import time
from abc import ABC, abstractmethod
from dataclasses import dataclass
from enum import Enum
from typing import ClassVar

from benchjog.kinematics.model import Arm, Segment

MAX_SEGMENT_S = 60.0  # PROTOCOL.md: MOVE takes 1..60000 ms
OUTPUT_CHANNELS = 8   # PROTOCOL.md: OUT channel 0..7


class Mode(str, Enum):
    """The controller's mode, the MODE strings of PROTOCOL.md."""

    DISABLED = "DISABLED"
    UNHOMED = "UNHOMED"
    IDLE = "IDLE"
    MOVING = "MOVING"
    FAULT = "FAULT"
    ESTOP = "ESTOP"

    def __str__(self) -> str:
        return self.value


@dataclass(frozen=True)
class DriverState:
    """A snapshot of the driver and its controller.

    ``joints`` are in internal units (rad, mm), converted from the controller's counts
    with the arm's calibration; ``queued`` counts segments sent without a DONE yet;
    ``outputs`` is a bit mask (output n is bit ``1 << n``); ``age_s`` is the time since
    the last position report; ``latched`` is None or a one-line reason such as
    ``"estop"``, ``"fault: FOLLOWING axis=2"``, ``"link lost: no reply after 3 tries"``;
    ``fresh`` is False while ``joints`` cannot be trusted: after a stop, a halt, an
    e-stop or a fault, until the controller reports its position again (PROTOCOL.md:
    nothing is planned from the old one); ``queue_ran_dry`` counts the segments that
    reached the controller's queue while it was empty (by the controller's own count,
    where the driver has one): the first segment of each motion, and each stop-and-go
    where the queue ran empty mid-move.
    """

    mode: Mode
    joints: tuple[float, ...]
    queued: int
    outputs: int
    age_s: float
    is_open: bool
    enabled: bool
    homed: bool
    latched: str | None
    link: str
    fresh: bool = True
    queue_ran_dry: int = 0


@dataclass(frozen=True)
class DriverEvent:
    """Something the controller reported: kind is one of ``EVENT_KINDS``."""

    kind: str
    detail: str
    time_s: float


EVENT_KINDS = ("estop", "estop-clear", "fault", "link-lost", "done", "info")


class DriverError(Exception):
    """Base of every driver error; ``str()`` is one line for people."""


class DriverNotFound(DriverError):
    """No driver is registered under that name."""


class DriverImportError(DriverError):
    """A driver is registered but its module or class could not be loaded."""


class LinkError(DriverError):
    """The link to the controller failed or was lost (CLI exit 3)."""


class ControllerError(DriverError):
    """The controller refused (an ERR reply, a latched e-stop or fault, not enabled,
    not homed, out of its hard range...)."""


def check_segment(arm: Arm, segment: Segment) -> None:
    """The checks every driver makes before a segment goes anywhere.

    Raises:
        ControllerError: wrong number of joints, a non-finite value, or a duration
            outside (0, 60] s.

    >>> from benchjog.console.cell.armfile import builtin_arm
    >>> check_segment(builtin_arm(), Segment((0.0, 1.0), 0.5))
    >>> check_segment(builtin_arm(), Segment((0.0,), 0.5))
    Traceback (most recent call last):
    ...
    benchjog.drivers.base.ControllerError: segment has 1 joint values, the arm has 2 joints
    """
    if len(segment.joints) != arm.n_joints:
        raise ControllerError(f"segment has {len(segment.joints)} joint values, "
                              f"the arm has {arm.n_joints} joints")
    for joint, value in zip(arm.joints, segment.joints):
        if not isinstance(value, (int, float)) or not math.isfinite(value):
            raise ControllerError(f"segment value for {joint.name} is not a finite number ({value!r})")
    d = segment.duration_s
    if not isinstance(d, (int, float)) or not math.isfinite(d) or not 0.0 < d <= MAX_SEGMENT_S:
        raise ControllerError(f"segment duration must be in (0, {MAX_SEGMENT_S:g}] s, got {d!r}")


class Driver(ABC):
    """Base of every arm driver (like python-can's ``BusABC``).

    Subclasses implement the abstract methods; the base keeps the shared checks
    (:meth:`queue` validates the segment, :meth:`set_output` the channel), an
    idempotent :meth:`close` that stops motion first, the context manager and
    :meth:`wait_idle`. ``state()``, ``stop()`` and ``poll_events()`` must be safe to
    call from any thread while another thread is inside ``queue()``.
    """

    name: ClassVar[str] = "abstract"
    #: What :meth:`home` does, for the confirmation: None when it runs a homing cycle
    #: that moves the arm (the usual case); words when it moves nothing (absolute encoders).
    homing_without_motion: ClassVar[str | None] = None

    def __init__(self, arm: Arm, **options) -> None:
        self.arm = arm
        self.options = dict(options)
        self._close_lock = threading.Lock()
        self._closed = False

    # -- life cycle -----------------------------------------------------------------
    @abstractmethod
    def open(self) -> None:
        """Open the link (and greet the controller). Raises LinkError on failure."""

    @abstractmethod
    def _close(self) -> None:
        """Release the link; called once by :meth:`close` after :meth:`stop`."""

    def close(self) -> None:
        """Stop any motion, then release the link. Safe to call more than once."""
        with self._close_lock:
            if self._closed:
                return
            self._closed = True
        try:
            self.stop()
        finally:
            self._close()

    def __enter__(self) -> "Driver":
        self.open()
        return self

    def __exit__(self, *exc_info) -> None:
        self.close()

    # -- commands -------------------------------------------------------------------
    @abstractmethod
    def enable(self) -> None:
        """Drives on. ControllerError while an e-stop or fault is latched."""

    @abstractmethod
    def disable(self) -> None:
        """Drives off, queue flushed."""

    @abstractmethod
    def home(self, timeout_s: float = 60.0) -> None:
        """Run the homing cycle; block until it is DONE."""

    def queue(self, segment: Segment, timeout_s: float = 5.0) -> None:
        """Queue one timed joint segment (internal units).

        Blocks only for flow control, until a queue slot is free. Raises
        ControllerError when latched, not enabled, not homed or refused; LinkError
        when the link is gone. Never sends motion after an e-stop, fault or link loss
        until :meth:`reset`.
        """
        check_segment(self.arm, segment)
        self._queue(segment, timeout_s)

    @abstractmethod
    def _queue(self, segment: Segment, timeout_s: float) -> None:
        """Queue a segment that passed :func:`check_segment`."""

    @abstractmethod
    def stop(self) -> None:
        """Halt at once and flush the queue; thread-safe; never raises for a dead link;
        never waits for a reply (a driver whose controller answers a stop awaits that
        answer in a thread of its own: :meth:`wait_stopped`)."""

    def wait_stopped(self, timeout_s: float | None = None) -> bool:
        """Wait until every stop so far has its controller's answer; True when none is
        under way. A driver whose stop is complete when it returns keeps this default."""
        return True

    @abstractmethod
    def state(self) -> DriverState:
        """The latest snapshot; thread-safe."""

    def set_output(self, channel: int, on: bool) -> None:
        """Set digital output ``channel`` (0..7) on or off, at once."""
        if isinstance(channel, bool) or not isinstance(channel, int) or not 0 <= channel < OUTPUT_CHANNELS:
            raise ControllerError(f"output channel must be 0..{OUTPUT_CHANNELS - 1}, got {channel!r}")
        self._set_output(channel, bool(on))

    @abstractmethod
    def _set_output(self, channel: int, on: bool) -> None:
        """Set a checked output channel."""

    @abstractmethod
    def reset(self) -> None:
        """Clear a latched fault (an e-stop once its input is released).
        ControllerError while the e-stop input is still active."""

    @abstractmethod
    def poll_events(self) -> list[DriverEvent]:
        """The events since the last poll (they are also latched into the state)."""

    # -- helpers --------------------------------------------------------------------
    def wait_idle(self, timeout_s: float) -> bool:
        """Wait until the queue has drained and the mode is not MOVING.

        Returns True when idle, False on timeout, and False at once when the link is
        lost (nothing can be known about the arm then).
        """
        deadline = time.monotonic() + max(0.0, timeout_s)
        while True:
            st = self.state()
            if st.queued == 0 and st.mode is not Mode.MOVING:
                return True
            if st.latched is not None and st.latched.startswith("link lost"):
                return False
            if time.monotonic() >= deadline:
                return False
            time.sleep(0.005)

    def _require_motion_allowed(self, st: DriverState) -> None:
        """The shared refusals before any motion command."""
        if not st.is_open:
            raise LinkError(f"{self.name}: the link is not open")
        if st.latched is not None:
            if st.latched.startswith("link lost"):
                raise LinkError(f"{self.name}: {st.latched}")
            raise ControllerError(f"refused: {st.latched} is latched (reset first)")
        if not st.enabled:
            raise ControllerError("refused: drives are not enabled")
        if not st.homed:
            raise ControllerError("refused: the controller is not homed")
