"""Numbers as benchjog prints them (JSON and text)."""

from __future__ import annotations


def round_out(value: float, digits: int = 9) -> float:
    """Round for output, and never print -0.0.

    >>> round_out(-1e-12)
    0.0
    >>> round_out(1.23456789012)
    1.23456789
    """
    value = round(value, digits)
    return 0.0 if value == 0 else value
