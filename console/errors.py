"""Which exceptions are a user's mistake or a link failure, and their exit codes.

Every layer raises its own error types; this is the one place that maps them to the
exit codes of CONTRACT.md, so ``main`` can print one line instead of a traceback.
"""

from __future__ import annotations

from benchjog.console import exit_codes
from benchjog.drivers.base import DriverError, DriverNotFound, LinkError
from benchjog.drivers.journal import JournalError
from benchjog.console.cell.points import PointError
from benchjog.console.cell.programs import ProgramError
from benchjog.console.cell.safe_files import FileError
from benchjog.kinematics.armspec import ArmSpecError
from benchjog.kinematics.frames import FrameError
from benchjog.kinematics.identify import IdentifyError
from benchjog.kinematics.solve import TargetError


class UsageError(ValueError):
    """Bad input found after argument parsing (exit 2)."""


class Refused(RuntimeError):
    """A refusal or cancellation that ends a command with exit 1."""


_CODES: list[tuple[type[BaseException], int]] = [
    (ArmSpecError, exit_codes.BAD_INPUT),
    (TargetError, exit_codes.BAD_INPUT),
    (UsageError, exit_codes.BAD_INPUT),
    (Refused, exit_codes.REFUSED),
    (JournalError, exit_codes.BAD_INPUT),
    (FileError, exit_codes.BAD_INPUT),
    (PointError, exit_codes.BAD_INPUT),
    (ProgramError, exit_codes.BAD_INPUT),
    (FrameError, exit_codes.BAD_INPUT),
    (IdentifyError, exit_codes.REFUSED),   # too few or degenerate touches: a refusal
    (DriverNotFound, exit_codes.BAD_INPUT),
    (LinkError, exit_codes.LINK_FAILED),
    (DriverError, exit_codes.LINK_FAILED),
]


def known_error_code(exc: BaseException) -> int | None:
    for exc_type, code in _CODES:
        if isinstance(exc, exc_type):
            return code
    return None
