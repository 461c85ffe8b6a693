"""The setpoint line protocol of PROTOCOL.md: CRC, framing and parsing. Pure.

Every line is ``BODY*CCCC\\n`` where CCCC is the CRC-16/CCITT-FALSE of BODY in four
uppercase hex digits. Nothing here raises on garbage from the wire: a bad line parses
to ``None``.
"""

from __future__ import annotations

import binascii
import re
from dataclasses import dataclass

MAX_LINE_BYTES = 120   # with the newline
MAX_SEQ = 65535
COUNTER_MOD = 65536    # STATE's moves= counts modulo this
PROTO_VERSION = 1
MODES = ("DISABLED", "UNHOMED", "IDLE", "MOVING", "FAULT", "ESTOP")
ERROR_CODES = ("BAD_CRC", "BAD_SEQ", "SYNTAX", "UNKNOWN", "NOT_ENABLED", "NOT_HOMED",
               "QUEUE_FULL", "RANGE", "ESTOP", "FAULT")
HOST_VERBS = ("HELLO", "ENABLE", "DISABLE", "HOME", "MOVE", "STOP", "STATE", "OUT", "RESET")
FAULT_CODES = ("FOLLOWING", "WATCHDOG", "LIMIT_SWITCH", "DRIVE")


def crc16(body: bytes) -> int:
    """CRC-16/CCITT-FALSE: poly 0x1021, init 0xFFFF, no reflection, no final xor.

    >>> hex(crc16(b"123456789"))   # the published check value
    '0x29b1'
    """
    return binascii.crc_hqx(body, 0xFFFF)


def frame(body: str | bytes) -> bytes:
    """``BODY*CCCC\\n`` as bytes.

    >>> frame("1 HELLO")
    b'1 HELLO*7DF0\\n'
    """
    raw = body.encode("ascii") if isinstance(body, str) else bytes(body)
    if b"\n" in raw or b"\r" in raw or b"*" in raw:
        raise ValueError(f"a line body cannot contain newline, CR or '*': {raw!r}")
    line = raw + b"*%04X\n" % crc16(raw)
    if len(line) > MAX_LINE_BYTES:
        raise ValueError(f"line is {len(line)} bytes, the limit is {MAX_LINE_BYTES}")
    return line


def parse_line(line: bytes) -> str | None:
    """The BODY of one received line, or None when it is too long, not ASCII,
    malformed or fails its CRC. Accepts ``\\n`` or ``\\r\\n`` (or none) at the end.

    >>> parse_line(frame("OK 1"))
    'OK 1'
    >>> parse_line(b"OK 1*0000\\n") is None
    True
    """
    try:
        if not isinstance(line, (bytes, bytearray)) or len(line) > MAX_LINE_BYTES:
            return None
        raw = bytes(line)
        if raw.endswith(b"\n"):
            raw = raw[:-1]
        if raw.endswith(b"\r"):
            raw = raw[:-1]
        if any(b > 0x7E or (b < 0x20) for b in raw):
            return None  # not printable ASCII (a stray CR/LF inside included)
        star = raw.rfind(b"*")
        if star < 0 or len(raw) - star != 5:
            return None
        body, crc_hex = raw[:star], raw[star + 1:]
        if not all(c in b"0123456789ABCDEF" for c in crc_hex):
            return None
        if int(crc_hex, 16) != crc16(body) or b"*" in body:
            return None
        return body.decode("ascii")
    except Exception:  # noqa: BLE001 - garbage never raises out of the parser
        return None


def next_seq(seq: int) -> int:
    """The seq after ``seq``, wrapping from 65535 to 1.

    >>> next_seq(1), next_seq(65535)
    (2, 1)
    """
    return 1 if seq >= MAX_SEQ else seq + 1


def host_line(seq: int, verb: str, *args: int | str) -> bytes:
    """One framed host line.

    >>> host_line(4, "MOVE", 1500, 4500, -9000)[:-6]
    b'4 MOVE 1500 4500 -9000'
    """
    if not 1 <= seq <= MAX_SEQ:
        raise ValueError(f"seq must be 1..{MAX_SEQ}, got {seq}")
    return frame(" ".join([str(seq), verb, *(str(a) for a in args)]))


def _fields(tokens: list[str]) -> tuple[tuple[str, str], ...] | None:
    out = []
    for tok in tokens:
        key, sep, value = tok.partition("=")
        if not sep or not key:
            return None
        out.append((key, value))
    return tuple(out)


def _field(fields: tuple[tuple[str, str], ...], key: str, default: str | None) -> str | None:
    """The value of ``key`` among a line's ``key=value`` fields."""
    for k, v in fields:
        if k == key:
            return v
    return default


@dataclass(frozen=True)
class Reply:
    """A controller reply: ``kind`` is OK, ERR or DONE; ``code`` the ERR code."""

    kind: str
    seq: int
    code: str | None = None
    fields: tuple[tuple[str, str], ...] = ()

    def get(self, key: str, default: str | None = None) -> str | None:
        return _field(self.fields, key, default)

    def int_field(self, key: str) -> int | None:
        value = self.get(key)
        try:
            return int(value) if value is not None else None
        except ValueError:
            return None

    def describe(self) -> str:
        extra = " ".join(f"{k}={v}" for k, v in self.fields)
        return " ".join(p for p in (self.code or "", extra) if p)


@dataclass(frozen=True)
class Event:
    """An unsolicited controller event: ``EVT <name> [key=value...]``."""

    name: str
    fields: tuple[tuple[str, str], ...] = ()

    def get(self, key: str, default: str | None = None) -> str | None:
        return _field(self.fields, key, default)


def _seq(token: str, allow_zero: bool = False) -> int | None:
    if not token.isdigit() or len(token) > 5:
        return None
    value = int(token)
    if value > MAX_SEQ or (value == 0 and not allow_zero):
        return None
    return value


def parse_reply(body: str) -> Reply | Event | None:
    """A controller line's BODY as a :class:`Reply` or :class:`Event`, or None.

    >>> parse_reply("OK 4 free=7")
    Reply(kind='OK', seq=4, code=None, fields=(('free', '7'),))
    >>> parse_reply("ERR 0 BAD_CRC").code
    'BAD_CRC'
    >>> parse_reply("EVT FAULT code=WATCHDOG axis=0").get("code")
    'WATCHDOG'
    >>> parse_reply("MOVE 1 2 3") is None
    True
    """
    try:
        tokens = body.split(" ")
        if not tokens or any(not t for t in tokens):
            return None
        kind = tokens[0]
        if kind == "EVT":
            if len(tokens) < 2 or not re.fullmatch(r"[A-Z][A-Z_]*", tokens[1]):
                return None
            fields = _fields(tokens[2:])
            return None if fields is None else Event(tokens[1], fields)
        if kind not in ("OK", "ERR", "DONE") or len(tokens) < 2:
            return None
        seq = _seq(tokens[1], allow_zero=(kind == "ERR"))
        if seq is None:
            return None
        if kind == "ERR":
            if len(tokens) < 3 or "=" in tokens[2]:
                return None
            fields = _fields(tokens[3:])
            return None if fields is None else Reply("ERR", seq, tokens[2], fields)
        fields = _fields(tokens[2:])
        if fields is None or (kind == "DONE" and fields):
            return None
        return Reply(kind, seq, None, fields)
    except Exception:  # noqa: BLE001
        return None


@dataclass(frozen=True)
class HostLine:
    """A host line's BODY split up: seq, verb, arguments (as strings)."""

    seq: int
    verb: str
    args: tuple[str, ...]


def parse_host(body: str) -> HostLine | None:
    """A host line's BODY, or None when it has no valid seq and verb.

    >>> parse_host("4 MOVE 1500 4500 -9000")
    HostLine(seq=4, verb='MOVE', args=('1500', '4500', '-9000'))
    """
    try:
        tokens = body.split(" ")
        if len(tokens) < 2 or any(not t for t in tokens):
            return None
        seq = _seq(tokens[0])
        if seq is None or not tokens[1].isalpha() or not tokens[1].isupper():
            return None
        return HostLine(seq, tokens[1], tuple(tokens[2:]))
    except Exception:  # noqa: BLE001
        return None


def parse_int(token: str) -> int | None:
    """A decimal integer token (optional minus sign), or None.

    >>> parse_int("-9000"), parse_int("1e3"), parse_int("+1")
    (-9000, None, None)
    """
    body = token[1:] if token.startswith("-") else token
    if not body.isdigit() or not body.isascii() or len(body) > 12:
        return None
    return int(token)


def parse_counts(text: str, n: int) -> tuple[int, ...] | None:
    """``pos=`` values: n comma-separated integers, or None.

    >>> parse_counts("1210,-2420", 2)
    (1210, -2420)
    """
    parts = text.split(",")
    if len(parts) != n:
        return None
    values = [parse_int(p) for p in parts]
    if any(v is None for v in values):
        return None
    return tuple(values)  # type: ignore[arg-type]
