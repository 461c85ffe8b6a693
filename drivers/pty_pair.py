"""The pseudo-terminal the emulators serve on: a raw master/slave pair whose slave's
path a driver opens as its serial port (pyserial opens it like any tty)."""

from __future__ import annotations

import os
import tty


def open_raw_pty() -> tuple[int, int, str]:
    """A new pty pair, both ends raw (no echo, no line editing, no CR/LF mapping: the
    bytes pass as they are), and the slave's path."""
    master, slave = os.openpty()
    tty.setraw(master)
    tty.setraw(slave)
    return master, slave, os.ttyname(slave)


def close_pty(*fds: int | None) -> None:
    """Close the pair's file descriptors; one already closed (or None) is passed over."""
    for fd in fds:
        if fd is not None:
            try:
                os.close(fd)
            except OSError:
                pass
