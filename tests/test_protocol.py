"""drivers/protocol.py: CRC, framing, parsing; garbage never raises, never moves."""

from __future__ import annotations

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from benchjog.console.cell.armfile import builtin_arm
from benchjog.drivers import protocol as P
from benchjog.drivers.emulator import Emulator
from benchjog.drivers.serial_link import SerialDriver

FUZZ = settings(max_examples=150, deadline=None)


def crc16_bitwise(data: bytes) -> int:
    """CRC-16/CCITT-FALSE straight from its definition (poly 0x1021, init 0xFFFF,
    MSB first, no reflection, no final xor): the textbook shift register, one bit at
    a time. An independent check on the table-driven ``binascii.crc_hqx``."""
    crc = 0xFFFF
    for byte in data:
        crc ^= byte << 8
        for _ in range(8):
            crc = ((crc << 1) ^ 0x1021) if crc & 0x8000 else (crc << 1)
            crc &= 0xFFFF
    return crc


def test_crc_check_value():
    # reference: the CRC catalogue's check value for CRC-16/CCITT-FALSE, CRC of
    # "123456789" = 0x29B1 (also quoted in PROTOCOL.md)
    assert P.crc16(b"123456789") == 0x29B1


@pytest.mark.parametrize("data, expected", [
    (b"A", 0xB915),          # reference: CRC-CCITT with init 0xFFFF, "A" (from memory)
    (b"A" * 256, 0xEA0B),    # reference: the same table, 256 x "A" (from memory)
    (b"", 0xFFFF),           # no data: the init value is the CRC (by the definition)
])
def test_crc_more_published_values(data, expected):
    assert P.crc16(data) == expected


@FUZZ
@given(st.binary(max_size=200))
def test_crc_matches_the_bitwise_definition(data):
    assert P.crc16(data) == crc16_bitwise(data)


def test_frame_layout():
    line = P.frame("OK 1")
    assert line == b"OK 1*%04X\n" % crc16_bitwise(b"OK 1")
    assert line.endswith(b"\n") and line[-6:-5] == b"*"


def test_frame_refuses_what_cannot_be_a_line():
    with pytest.raises(ValueError):
        P.frame("OK 1*2")
    with pytest.raises(ValueError):
        P.frame("X" * 115)          # 115 + 6 = 121 bytes > 120
    assert len(P.frame("X" * 114)) == 120


@pytest.mark.parametrize("raw", [
    b"OK 1*0000\n",                                     # wrong CRC
    P.frame("OK 1").lower(),                            # lower-case hex
    P.frame("OK 1")[:-2] + b"\n",                       # CRC cut short
    b"OK 1\n",                                          # no CRC at all
    b"\xffK 1*" + b"%04X\n" % P.crc16(b"\xffK 1"),      # not ASCII, CRC right
    b"OK\t1*" + b"%04X\n" % P.crc16(b"OK\t1"),          # control character
    b"X" * 115 + b"*" + b"%04X\n" % P.crc16(b"X" * 115),  # 121 bytes
    b"", b"\n", b"*", b"FFFF\n",
])
def test_parse_line_drops_bad_lines(raw):
    assert P.parse_line(raw) is None


def test_parse_line_accepts_crlf_and_max_length():
    assert P.parse_line(P.frame("OK 1")[:-1] + b"\r\n") == "OK 1"
    assert P.parse_line(P.frame("X" * 114)) == "X" * 114


def test_every_single_bit_error_is_caught():
    # a CRC whose generator has more than one term detects every single-bit error
    # (Peterson & Brown, "Cyclic Codes for Error Detection", 1961; from memory)
    line = P.host_line(42, "MOVE", 1500, 4500, -9000)
    for i in range(len(line)):
        for bit in range(8):
            bad = bytearray(line)
            bad[i] ^= 1 << bit
            assert P.parse_line(bytes(bad)) is None, (i, bit)


@pytest.mark.parametrize("body, expected", [
    ("OK 5 mode=MOVING pos=1210,-2420 queued=1 out=0",
     P.Reply("OK", 5, None, (("mode", "MOVING"), ("pos", "1210,-2420"), ("queued", "1"), ("out", "0")))),
    ("ERR 4 RANGE axis=2", P.Reply("ERR", 4, "RANGE", (("axis", "2"),))),
    ("ERR 0 BAD_CRC", P.Reply("ERR", 0, "BAD_CRC")),
    ("DONE 3", P.Reply("DONE", 3)),
    ("EVT ESTOP", P.Event("ESTOP")),
    ("EVT FAULT code=FOLLOWING axis=2", P.Event("FAULT", (("code", "FOLLOWING"), ("axis", "2")))),
])
def test_parse_reply(body, expected):
    assert P.parse_reply(body) == expected


@pytest.mark.parametrize("body", [
    "OK", "OK x", "OK 0", "OK 65536", "DONE 3 extra=1", "ERR 3", "ERR 3 a=b", "OK 1 free",
    "OK  1", "EVT", "EVT lower", "1 MOVE 10 0 0", "NOPE 1", "OK 1 =3",
])
def test_parse_reply_refuses(body):
    assert P.parse_reply(body) is None


def test_seq_wraps_to_one_not_zero():
    # PROTOCOL.md: seq is 1..65535, wrapping from 65535 to 1
    assert P.next_seq(65534) == 65535
    assert P.next_seq(65535) == 1
    with pytest.raises(ValueError):
        P.host_line(0, "STATE")
    with pytest.raises(ValueError):
        P.host_line(65536, "STATE")


def test_parse_host():
    assert P.parse_host("12 OUT 3 1") == P.HostLine(12, "OUT", ("3", "1"))
    for bad in ("MOVE 1 2", "0 STATE", "70000 STATE", "12 move", "12", "12  STATE", "-1 STATE"):
        assert P.parse_host(bad) is None


# -- fuzz ---------------------------------------------------------------------------------

@FUZZ
@given(st.binary(max_size=160))
def test_garbage_never_raises(raw):
    body = P.parse_line(raw)
    assert body is None or isinstance(body, str)
    P.parse_reply(raw.decode("latin-1"))
    P.parse_host(raw.decode("latin-1"))


@FUZZ
@given(st.text(alphabet=st.characters(min_codepoint=32, max_codepoint=126), max_size=100))
def test_framed_text_round_trips_and_parsers_never_raise(text):
    text = text.replace("*", "")
    if len(text) > 114:
        return
    assert P.parse_line(P.frame(text)) == text
    P.parse_reply(text)
    P.parse_host(text)


ARM = builtin_arm("planar-bench")


def _ready_emulator() -> Emulator:
    emu = Emulator(ARM, {"home_s": 0.0})   # not started: lines are fed in directly
    emu.enabled = emu.homed = True
    emu.last_seq = 9
    emu.last_valid_t = emu.clock() + 3600  # no watchdog during the fuzz
    return emu


@FUZZ
@given(st.lists(st.binary(max_size=130), max_size=6))
def test_garbage_never_becomes_a_motion(lines):
    emu = _ready_emulator()
    for raw in lines:
        emu._receive(raw)
    assert emu.moves_accepted == 0 and not emu.segs
    # a well-formed MOVE with the next seq still works afterwards
    emu.last_seq = 9
    emu._receive(P.host_line(10, "MOVE", 100, 40, 0))
    assert emu.moves_accepted == 1


@FUZZ
@given(st.binary(max_size=60), st.integers(min_value=0, max_value=59))
def test_a_corrupted_move_never_moves(noise, where):
    line = bytearray(P.host_line(10, "MOVE", 100, 40, 0))
    where = min(where, len(line) - 2)
    damaged = bytes(line[:where]) + noise + bytes(line[where + 1:])
    emu = _ready_emulator()
    emu._receive(damaged)
    body = P.parse_line(damaged)
    if body != "10 MOVE 100 40 0":
        assert emu.moves_accepted == 0


@FUZZ
@given(st.lists(st.binary(max_size=130), max_size=6))
def test_host_side_garbage_changes_nothing(lines):
    d = SerialDriver(ARM, port="loop://")   # never opened: only its reader's dispatch runs
    d._outstanding[5] = (0, 0)
    before = d.state()
    for raw in lines:
        d._dispatch(raw)
    after = d.state()
    assert after.latched is None and after.queued == before.queued and after.mode == before.mode
