"""Protocol 2.0 packets: the CRC and the framing against published example packets and
against the ``dynamixel-sdk`` package from PyPI (the general-purpose library for this
bus), and the emulation's bytes as the SDK's own client reads them over a pty."""

from __future__ import annotations

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from dynamixel_sdk import COMM_RX_TIMEOUT, COMM_SUCCESS, GroupSyncRead, PacketHandler, PortHandler

from benchjog.drivers.servobus import packet as P
from benchjog.drivers.servobus import table as T
from benchjog.drivers.servobus.emulator import BusEmulator, ServoSpec

SDK = PacketHandler(2.0)


def sdk(call, *args):
    """One SDK call, retried on a receive timeout only (a loaded test machine can be
    late past the SDK's 34 ms; a wrong CRC or frame still fails every try)."""
    for _ in range(4):
        out = call(*args)
        result = out[-2] if isinstance(out, tuple) else out
        if result != COMM_RX_TIMEOUT:
            return out
    return out


def test_crc_check_value_of_the_catalogue():
    # reference: CRC catalogue, CRC-16/UMTS (poly 0x8005, init 0, no reflection, no xorout),
    # check value of "123456789" = 0xFEE8 (from memory)
    assert P.crc16(b"123456789") == 0xFEE8


@pytest.mark.parametrize("packet_hex", [
    # reference: the bus's Protocol 2.0 documentation, example packets (from memory):
    "ff ff fd 00 01 03 00 01 19 4e",                       # ping id 1
    "ff ff fd 00 01 07 00 02 84 00 04 00 1d 15",           # read 4 bytes at 132 from id 1
    "ff ff fd 00 01 09 00 03 74 00 00 02 00 00 ca 89",     # write 512 at 116 to id 1
])
def test_crc_of_published_example_packets(packet_hex):
    raw = bytes.fromhex(packet_hex)
    assert P.crc16(raw[:-2]) == raw[-2] | raw[-1] << 8


def test_frames_equal_the_published_examples():
    # reference: the same published examples, built by our framing
    assert P.frame(1, P.PING).hex(" ") == "ff ff fd 00 01 03 00 01 19 4e"
    assert P.frame(1, P.READ, P.read_params(132, 4)).hex(" ") == "ff ff fd 00 01 07 00 02 84 00 04 00 1d 15"
    assert P.frame(1, P.WRITE, P.write_params(116, P.int_bytes(512, 4))).hex(" ") == \
        "ff ff fd 00 01 09 00 03 74 00 00 02 00 00 ca 89"


@settings(max_examples=200, deadline=None)
@given(st.binary(max_size=300))
def test_crc_equals_the_sdk_crc(data):
    # reference: dynamixel-sdk Protocol2PacketHandler.updateCRC
    assert P.crc16(data) == SDK.updateCRC(0, list(data), len(data))


@settings(max_examples=200, deadline=None)
@given(st.integers(0, 252), st.integers(0, 255).filter(lambda i: i != P.STATUS),
       st.lists(st.sampled_from([0xFF, 0xFD, 0x00, 0x01]), max_size=40))
def test_stuffing_equals_the_sdk_and_round_trips(servo_id, instruction, params):
    # reference: dynamixel-sdk Protocol2PacketHandler.addStuffing, fed an unstuffed packet
    # (header, id, length = params + 3, instruction, params, two CRC placeholders)
    unstuffed = list(P.HEADER) + [servo_id, (len(params) + 3) & 0xFF, (len(params) + 3) >> 8,
                                  instruction] + params + [0, 0]
    sdk = SDK.addStuffing(list(unstuffed))
    ours = P.frame(servo_id, instruction, bytes(params))
    assert list(ours[:-2]) == sdk[:-2]
    got = P.Deframer().feed(ours)
    assert got == [P.Packet(servo_id, instruction, bytes(params))]


def test_stuffing_of_a_header_pattern_in_the_params():
    # FF FF FD in the data becomes FF FF FD FD; the length counts the added byte
    raw = P.frame(1, P.WRITE, bytes([0x74, 0x00, 0xFF, 0xFF, 0xFD, 0x00]))
    assert raw[7:15].hex(" ") == "03 74 00 ff ff fd fd 00"
    assert raw[5] | raw[6] << 8 == 1 + 7 + 2


def test_deframer_skips_noise_bad_crc_and_split_chunks():
    good = P.frame(2, P.STATUS, bytes([0x00, 0x10, 0x20]))
    bad = bytearray(P.frame(3, P.STATUS, bytes([0x00])))
    bad[-1] ^= 0xFF
    stream = b"\x00\xff\x13" + bytes(bad) + good
    d = P.Deframer()
    out = []
    for k in range(0, len(stream), 3):          # arriving three bytes at a time
        out += d.feed(stream[k:k + 3])
    assert out == [P.Packet(2, P.STATUS, bytes([0x10, 0x20]), 0)]
    assert d.dropped == 1


def test_status_error_byte_alert_and_number():
    pkt = P.Deframer().feed(P.frame(1, P.STATUS, bytes([0x80 | 7])))[0]
    assert pkt.alert and pkt.packet_error == 7 and P.packet_error_text(7) == "access error"


@pytest.fixture
def sdk_port():
    emu = BusEmulator([ServoSpec(1, model=1060), ServoSpec(7, model=1020, start_raw=1000)])
    path = emu.start()
    port = PortHandler(path)
    assert port.openPort() and port.setBaudRate(1_000_000)
    yield emu, port
    port.closePort()
    emu.stop()


def test_the_sdk_client_reads_the_emulation(sdk_port):
    # reference: dynamixel-sdk's own client (ping, read, write, sync read) over the pty:
    # the emulation's status packets pass its CRC and framing checks
    emu, port = sdk_port
    assert sdk(SDK.ping, port, 1) == (1060, COMM_SUCCESS, 0)
    assert sdk(SDK.ping, port, 7) == (1020, COMM_SUCCESS, 0)
    assert SDK.ping(port, 3)[1] != COMM_SUCCESS          # nobody at id 3
    assert sdk(SDK.read4ByteTxRx, port, 7, T.PRESENT_POSITION.address) == (1000, COMM_SUCCESS, 0)
    assert sdk(SDK.write4ByteTxRx, port, 7, T.HOMING_OFFSET.address, 48) == (COMM_SUCCESS, 0)
    group = GroupSyncRead(port, SDK, T.PRESENT_POSITION.address, 4)
    group.addParam(1)
    group.addParam(7)
    assert sdk(group.txRxPacket) == COMM_SUCCESS
    assert group.getData(1, 132, 4) == 2048 and group.getData(7, 132, 4) == 1048


def test_the_emulation_refuses_an_eeprom_write_with_torque_on(sdk_port):
    # access error (7) for an EEPROM write while torque is on: the control table's rule
    emu, port = sdk_port
    assert sdk(SDK.write1ByteTxRx, port, 1, T.TORQUE_ENABLE.address, 1) == (COMM_SUCCESS, 0)
    assert sdk(SDK.write4ByteTxRx, port, 1, T.HOMING_OFFSET.address, 10) == (COMM_SUCCESS, 7)
    assert emu.register(1, T.HOMING_OFFSET) == 0


def test_the_emulation_answers_a_hardware_error_with_the_alert_bit(sdk_port):
    emu, port = sdk_port
    emu.inject_hardware_error(7, 1 << 5)
    value, result, error = sdk(SDK.read1ByteTxRx, port, 7, T.HARDWARE_ERROR.address)
    assert result == COMM_SUCCESS and error & 0x80 and value == 1 << 5
    assert T.hardware_error_words(value) == "overload"
    assert sdk(SDK.reboot, port, 7) == (COMM_SUCCESS, 0x80)   # the reply still carries the alert
    import time
    time.sleep(0.05)
    assert sdk(SDK.read1ByteTxRx, port, 7, T.HARDWARE_ERROR.address) == (0, COMM_SUCCESS, 0)
