"""Which exceptions are a user's mistake or a link failure, and their exit codes.

Every layer raises its own error types; this is the one place that maps them to the
exit codes of CONTRACT.md, so ``main`` can print one line instead of a traceback.
"""

from __future__ import annotations

import sys

from benchjog.console import exit_codes


class UsageError(ValueError):
    """Bad input found after argument parsing (exit 2)."""


class Refused(RuntimeError):
    """A refusal or cancellation that ends a command with exit 1."""


def _identify_codes() -> list[tuple[type[BaseException], int]]:
    """Too few or degenerate touches end a calibration as a refusal; the module (and
    scipy) is not imported for that unless the calibration already loaded it."""
    module = sys.modules.get("benchjog.kinematics.identify")
    return [(module.IdentifyError, exit_codes.REFUSED)] if module is not None else []


def _codes() -> list[tuple[type[BaseException], int]]:
    """The error types, imported only when an error is to be mapped: a command's start
    must not pay for every layer's imports (issue: start-up time)."""
    from benchjog.console.cell.points import PointError
    from benchjog.console.cell.programs import ProgramError
    from benchjog.console.cell.safe_files import FileError
    from benchjog.drivers.base import DriverError, DriverNotFound, LinkError
    from benchjog.drivers.journal import JournalError
    from benchjog.kinematics.armspec import ArmSpecError
    from benchjog.kinematics.frames import FrameError
    from benchjog.kinematics.solve import TargetError

    return [
        (ArmSpecError, exit_codes.BAD_INPUT),
        (TargetError, exit_codes.BAD_INPUT),
        (UsageError, exit_codes.BAD_INPUT),
        (Refused, exit_codes.REFUSED),
        (JournalError, exit_codes.BAD_INPUT),
        (FileError, exit_codes.BAD_INPUT),
        (PointError, exit_codes.BAD_INPUT),
        (ProgramError, exit_codes.BAD_INPUT),
        (FrameError, exit_codes.BAD_INPUT),
        *_identify_codes(),
        (DriverNotFound, exit_codes.BAD_INPUT),
        (LinkError, exit_codes.LINK_FAILED),
        (DriverError, exit_codes.LINK_FAILED),
    ]


def known_error_code(exc: BaseException) -> int | None:
    if isinstance(exc, (UsageError, Refused)):
        return exit_codes.BAD_INPUT if isinstance(exc, UsageError) else exit_codes.REFUSED
    for exc_type, code in _codes():
        if isinstance(exc, exc_type):
            return code
    return None
