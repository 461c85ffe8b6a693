"""Does a benchjog controller answer on this port? One HELLO, nothing else.

``HELLO`` opens a session and reports the controller; it enables nothing and moves
nothing (PROTOCOL.md), so a port listing may send it to every port it offers. A
controller already in a session with another host would see its sequence count
restarted, so probe only ports nobody is using.
"""

from __future__ import annotations

import time

import serial

from benchjog.drivers import protocol as P

PROBE_SEQ = 1


def probe_firmware(port: str, baud: int = 115200, timeout: float = 0.5) -> dict | None:
    """Send one ``HELLO`` to ``port`` (a device path or pyserial URL) and wait up to
    ``timeout`` seconds for its reply.

    Returns the controller's report as ``{"port", "proto", "axes", "queue", "name"}``
    (ints where the protocol has numbers), or None when nothing that speaks PROTOCOL.md
    answered: no reply, garbage, an echo of our own line, or a port that cannot be
    opened. Never raises for what it finds on the port; never sends anything but HELLO.

    >>> probe_firmware("loop://", timeout=0.05) is None   # an echo is not a controller
    True
    """
    try:
        link = serial.serial_for_url(port, baudrate=baud, timeout=0.02, write_timeout=timeout)
    except (serial.SerialException, OSError, ValueError):
        return None
    try:
        link.reset_input_buffer()
        link.write(P.host_line(PROBE_SEQ, "HELLO"))
        deadline = time.monotonic() + timeout
        buf = b""
        while time.monotonic() < deadline:
            buf += link.read(256)
            while b"\n" in buf:
                line, buf = buf.split(b"\n", 1)
                found = _hello_reply(P.parse_line(line + b"\n"))
                if found is not None:
                    found["port"] = port
                    return found
            if len(buf) > 4 * P.MAX_LINE_BYTES:
                buf = b""
        return None
    except (serial.SerialException, OSError):
        return None
    finally:
        try:
            link.close()
        except (serial.SerialException, OSError):
            pass


def _hello_reply(body: str | None) -> dict | None:
    if body is None:
        return None
    reply = P.parse_reply(body)
    if not isinstance(reply, P.Reply) or reply.kind != "OK" or reply.seq != PROBE_SEQ:
        return None
    proto, axes, queue = (reply.int_field(k) for k in ("proto", "axes", "queue"))
    if proto is None or axes is None or queue is None:
        return None
    return {"proto": proto, "axes": axes, "queue": queue, "name": reply.get("name", "")}
