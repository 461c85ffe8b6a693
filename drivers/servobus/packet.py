"""Protocol 2.0 packets of the smart-servo bus: CRC, byte stuffing, framing. Pure.

An instruction packet (host -> servo) and a status packet (servo -> host) share one frame::

    FF FF FD 00 | ID | LEN_L LEN_H | INST | PARAM... | CRC_L CRC_H

``LEN`` counts the bytes after itself: instruction, parameters (after stuffing) and the
two CRC bytes. A status packet's instruction is ``0x55`` and its first parameter is the
error byte. Multi-byte values are little-endian. The CRC is CRC-16 with polynomial 0x8005,
initial value 0, no reflection, no final xor, over every byte from the header to the
last parameter. Byte stuffing: wherever ``FF FF FD`` would appear from the instruction
on, a ``FD`` is added after it so that a receiver never mistakes data for a header.
Source: the bus's published Protocol 2.0 documentation (packet, CRC and stuffing
sections), cross-checked in tests/test_servobus_packet.py against the ``dynamixel-sdk``
package from PyPI.
"""

from __future__ import annotations

import struct
from dataclasses import dataclass

HEADER = b"\xff\xff\xfd\x00"
BROADCAST_ID = 0xFE
MAX_ID = 252  # 0..252 are servo ids; 253 is reserved, 254 broadcast

# Instructions
PING = 0x01
READ = 0x02
WRITE = 0x03
REBOOT = 0x08
STATUS = 0x55
SYNC_READ = 0x82
SYNC_WRITE = 0x83
BULK_READ = 0x92

# Status packet error byte: bit 7 is the alert (a hardware error is set in the servo),
# the low seven bits a number for the packet's own problem.
ALERT_BIT = 0x80
PACKET_ERRORS = {
    1: "result fail",
    2: "instruction error",
    3: "CRC error",
    4: "data range error",
    5: "data length error",
    6: "data limit error",
    7: "access error",
}

_CRC_POLY = 0x8005


def _crc_table() -> tuple[int, ...]:
    table = []
    for i in range(256):
        crc = i << 8
        for _ in range(8):
            crc = ((crc << 1) ^ _CRC_POLY) if crc & 0x8000 else (crc << 1)
        table.append(crc & 0xFFFF)
    return tuple(table)


_TABLE = _crc_table()


def crc16(data: bytes, crc: int = 0) -> int:
    """CRC-16 of the bus: polynomial 0x8005, init 0, not reflected, no final xor
    (the catalogue's CRC-16/UMTS, also listed as CRC-16/BUYPASS).

    Source: the bus's Protocol 2.0 documentation (CRC section); check value from the
    published CRC catalogue (CRC-16/UMTS, check = 0xFEE8).

    >>> hex(crc16(b"123456789"))
    '0xfee8'
    """
    for byte in data:
        crc = ((crc << 8) ^ _TABLE[((crc >> 8) ^ byte) & 0xFF]) & 0xFFFF
    return crc


def stuff(body: bytes) -> bytes:
    """Add a ``FD`` after every ``FF FF FD`` in ``body`` (instruction and parameters).

    The look-back for the pattern starts inside ``body`` itself: the frame bytes before
    the instruction (length) never end in ``FF FF`` for a length below 0xFF00.

    >>> stuff(bytes([0x03, 0xFF, 0xFF, 0xFD, 0x01])).hex(" ")
    '03 ff ff fd fd 01'
    """
    out = bytearray()
    for i, byte in enumerate(body):
        out.append(byte)
        if byte == 0xFD and i >= 2 and body[i - 1] == 0xFF and body[i - 2] == 0xFF:
            out.append(0xFD)
    return bytes(out)


def unstuff(body: bytes) -> bytes:
    """Remove the ``FD`` added after every ``FF FF FD`` (the inverse of :func:`stuff`).

    >>> unstuff(bytes.fromhex("03 ff ff fd fd 01")).hex(" ")
    '03 ff ff fd 01'
    """
    out = bytearray()
    i = 0
    while i < len(body):
        out.append(body[i])
        if body[i] == 0xFD and i >= 2 and body[i - 1] == 0xFF and body[i - 2] == 0xFF \
                and i + 1 < len(body) and body[i + 1] == 0xFD:
            i += 1  # skip the stuffed FD
        i += 1
    return bytes(out)


def frame(servo_id: int, instruction: int, params: bytes = b"") -> bytes:
    """A whole packet for ``servo_id`` (instruction or status), stuffed, with its CRC.

    >>> frame(1, PING).hex(" ")        # ping id 1: the protocol documentation's example
    'ff ff fd 00 01 03 00 01 19 4e'
    """
    if not 0 <= servo_id <= 0xFE:
        raise ValueError(f"servo id must be 0..254, got {servo_id}")
    body = stuff(bytes([instruction]) + bytes(params))
    length = len(body) + 2
    head = HEADER + bytes([servo_id]) + struct.pack("<H", length)
    packet = head + body
    return packet + struct.pack("<H", crc16(packet))


@dataclass(frozen=True)
class Packet:
    """One received packet, unstuffed. For a status packet ``error`` is the error byte
    and ``params`` what follows it; for an instruction packet ``error`` is None."""

    servo_id: int
    instruction: int
    params: bytes
    error: int | None = None

    @property
    def alert(self) -> bool:
        """The servo has a hardware error set (read its Hardware Error Status)."""
        return self.error is not None and bool(self.error & ALERT_BIT)

    @property
    def packet_error(self) -> int:
        """The status packet's own error number (0: none)."""
        return 0 if self.error is None else self.error & 0x7F


def packet_error_text(number: int) -> str:
    """Words for a status packet's error number.

    >>> packet_error_text(4)
    'data range error'
    """
    return PACKET_ERRORS.get(number, f"error {number}")


class Deframer:
    """Finds packets in a byte stream. Bytes before a header, packets with a bad CRC or
    an impossible length are dropped (counted in :attr:`dropped`); the search restarts
    one byte after the header that failed."""

    MAX_LENGTH = 1024

    def __init__(self) -> None:
        self._buf = bytearray()
        self.dropped = 0

    def feed(self, data: bytes) -> list[Packet]:
        self._buf.extend(data)
        out: list[Packet] = []
        while True:
            start = self._buf.find(HEADER)
            if start < 0:
                # keep a possible partial header at the end
                keep = 0
                for n in (3, 2, 1):
                    if self._buf.endswith(HEADER[:n]):
                        keep = n
                        break
                del self._buf[:len(self._buf) - keep]
                return out
            if start:
                del self._buf[:start]
            if len(self._buf) < 7:
                return out
            length = self._buf[5] | (self._buf[6] << 8)
            if length < 3 or length > self.MAX_LENGTH:
                self.dropped += 1
                del self._buf[:1]
                continue
            total = 7 + length
            if len(self._buf) < total:
                return out
            raw = bytes(self._buf[:total])
            if crc16(raw[:-2]) != (raw[-2] | (raw[-1] << 8)):
                self.dropped += 1
                del self._buf[:1]
                continue
            del self._buf[:total]
            body = unstuff(raw[7:-2])
            instruction = body[0]
            if instruction == STATUS:
                if len(body) < 2:
                    self.dropped += 1
                    continue
                out.append(Packet(raw[4], STATUS, body[2:], body[1]))
            else:
                out.append(Packet(raw[4], instruction, body[1:]))


# -- instruction parameters ---------------------------------------------------------------
def read_params(address: int, size: int) -> bytes:
    return struct.pack("<HH", address, size)


def write_params(address: int, data: bytes) -> bytes:
    return struct.pack("<H", address) + bytes(data)


def sync_read_params(address: int, size: int, ids: list[int] | tuple[int, ...]) -> bytes:
    return struct.pack("<HH", address, size) + bytes(ids)


def sync_write_params(address: int, size: int, data_by_id: dict[int, bytes]) -> bytes:
    """Parameters of a sync write: address, size, then id and ``size`` bytes per servo.

    >>> sync_write_params(116, 4, {1: (150).to_bytes(4, "little"), 2: (170).to_bytes(4, "little")}).hex(" ")
    '74 00 04 00 01 96 00 00 00 02 aa 00 00 00'
    """
    out = bytearray(struct.pack("<HH", address, size))
    for servo_id, data in data_by_id.items():
        if len(data) != size:
            raise ValueError(f"sync write: {len(data)} bytes for id {servo_id}, expected {size}")
        out.append(servo_id)
        out.extend(data)
    return bytes(out)


def int_bytes(value: int, size: int) -> bytes:
    """``value`` as ``size`` little-endian bytes, two's complement when negative."""
    return (value & ((1 << (8 * size)) - 1)).to_bytes(size, "little")


def int_from(data: bytes, signed: bool = True) -> int:
    """A little-endian integer, signed (two's complement) unless told otherwise.

    >>> int_from(bytes.fromhex("ff ff ff ff")), int_from(b"\\xff", signed=False)
    (-1, 255)
    """
    return int.from_bytes(data, "little", signed=signed)


def frame_time_s(n_bytes: int, baud: int) -> float:
    """Time ``n_bytes`` take on the wire at ``baud``, 10 bits a byte (8N1).

    >>> round(frame_time_s(10, 57600) * 1000, 3)
    1.736
    """
    return n_bytes * 10.0 / baud
