"""Numbers as benchjog reads them from people and prints them (JSON and text)."""

from __future__ import annotations

import math


def finite_number(text: str, error: type[Exception], name: str = "") -> float:
    """A finite float typed by a person, or ``error`` with one line (``name: `` first
    when given). The command line raises UsageError, the console's cell logic its own.

    >>> finite_number(" 10.5 ", ValueError)
    10.5
    >>> finite_number("1e400", ValueError, "X")
    Traceback (most recent call last):
    ...
    ValueError: X: not a finite number ('1e400')
    """
    head = f"{name}: " if name else ""
    try:
        value = float(text)
    except ValueError:
        raise error(f"{head}not a number ({text.strip()!r})") from None
    if not math.isfinite(value):
        raise error(f"{head}not a finite number ({text.strip()!r})")
    return value


def round_out(value: float, digits: int = 9) -> float:
    """Round for output, and never print -0.0.

    >>> round_out(-1e-12)
    0.0
    >>> round_out(1.23456789012)
    1.23456789
    """
    value = round(value, digits)
    return 0.0 if value == 0 else value
