"""A Protocol 2.0 bus on one serial port: send an instruction, collect the status packets.

One transaction at a time (the bus is half-duplex: servos answer only when asked); the
caller holds :attr:`ServoBus.lock` around a sequence that must not interleave. A status
packet that does not come within the reply timeout is a :class:`NoReply` (the caller
decides whether to retry); a status packet with its error number set is a
:class:`PacketRefused`; a port that fails is a :class:`~benchjog.drivers.base.LinkError`.
"""

from __future__ import annotations

import threading
import time
from collections.abc import Iterable

import serial

try:
    import termios
    _PORT_ERRORS: tuple[type[BaseException], ...] = (serial.SerialException, OSError, termios.error)
except ImportError:  # not a POSIX system
    _PORT_ERRORS = (serial.SerialException, OSError)

from benchjog.drivers.base import ControllerError, LinkError
from benchjog.drivers.servobus import packet as P
from benchjog.drivers.servobus import table as T

STATUS_OVERHEAD = 11        # header 4, id, length 2, instruction, error, CRC 2
DEFAULT_LATENCY_S = 0.030   # USB adapter latency (FTDI default timer 16 ms, common practice) + return delay, with margin


class NoReply(Exception):
    """Servos that did not answer in time: ``missing`` is their ids."""

    def __init__(self, missing: Iterable[int], got: dict | None = None) -> None:
        self.missing = tuple(missing)
        self.got = dict(got or {})
        super().__init__(f"no reply from servo id {', '.join(map(str, self.missing))}")


class PacketRefused(ControllerError):
    """A servo answered with its error number set (the instruction was not carried out)."""

    def __init__(self, servo_id: int, number: int) -> None:
        self.servo_id, self.number = servo_id, number
        super().__init__(f"servo id {servo_id}: {P.packet_error_text(number)}")


class ServoBus:
    """The port and the packet exchange. ``baud`` sets the port and the reply timeouts
    (bytes on the wire at 10 bits a byte, plus ``latency_s``)."""

    def __init__(self, port: str, baud: int, latency_s: float = DEFAULT_LATENCY_S,
                 trace=None) -> None:
        self.port_name, self.baud, self.latency_s = port, int(baud), float(latency_s)
        self.lock = threading.RLock()
        self._serial: serial.SerialBase | None = None
        self._deframer = P.Deframer()
        self._trace = trace
        self.tx_bytes = 0
        self.rx_bytes = 0

    # -- port ---------------------------------------------------------------------------
    def open(self) -> None:
        try:
            self._serial = serial.serial_for_url(self.port_name, baudrate=self.baud, timeout=0)
        except (serial.SerialException, OSError, ValueError) as exc:
            raise LinkError(f"servo bus: cannot open {self.port_name}: {exc}") from None

    def close(self) -> None:
        ser, self._serial = self._serial, None
        if ser is not None:
            try:
                ser.close()
            except Exception:  # noqa: BLE001 - closing a port that already failed
                pass

    @property
    def is_open(self) -> bool:
        return self._serial is not None

    def _port(self) -> serial.SerialBase:
        if self._serial is None:
            raise LinkError("servo bus: the port is not open")
        return self._serial

    def _log(self, direction: str, data: bytes) -> None:
        if self._trace is not None:
            self._trace(direction, data)

    def send(self, data: bytes) -> None:
        """Write one instruction packet (nothing is expected back)."""
        with self.lock:
            port = self._port()
            try:
                port.reset_input_buffer()
                port.write(data)
                port.flush()
            except _PORT_ERRORS as exc:
                raise LinkError(f"servo bus: {self.port_name}: {exc}") from None
            self.tx_bytes += len(data)
            self._deframer = P.Deframer()
            self._log(">", data)

    def reply_timeout_s(self, tx_len: int, rx_len: int) -> float:
        return P.frame_time_s(tx_len + rx_len, self.baud) + self.latency_s

    def transact(self, data: bytes, ids: Iterable[int], rx_len_each: int) -> dict[int, P.Packet]:
        """Send ``data`` and wait for one status packet from each of ``ids``.

        Raises:
            NoReply: some did not answer within the timeout (``got`` has the others).
            LinkError: the port failed.
        """
        wanted = list(ids)
        with self.lock:
            self.send(data)
            port = self._port()
            deadline = time.monotonic() + self.reply_timeout_s(len(data), rx_len_each * len(wanted))
            got: dict[int, P.Packet] = {}
            while True:
                try:
                    chunk = port.read(port.in_waiting or 1)
                except _PORT_ERRORS + (TypeError,) as exc:
                    raise LinkError(f"servo bus: {self.port_name}: {exc}") from None
                if chunk:
                    self.rx_bytes += len(chunk)
                    self._log("<", chunk)
                    for pkt in self._deframer.feed(chunk):
                        if pkt.instruction == P.STATUS and pkt.servo_id in wanted:
                            got.setdefault(pkt.servo_id, pkt)
                    if len(got) == len(wanted):
                        return got
                elif time.monotonic() >= deadline:
                    raise NoReply([i for i in wanted if i not in got], got)
                else:
                    time.sleep(0.0002)

    # -- instructions -----------------------------------------------------------------
    def ping(self, servo_id: int) -> P.Packet:
        """Ping one id: the status packet carries model number (2 bytes) and firmware."""
        return self.transact(P.frame(servo_id, P.PING), [servo_id], STATUS_OVERHEAD + 3)[servo_id]

    def read(self, servo_id: int, entry: T.Entry) -> tuple[int, P.Packet]:
        pkt = self.transact(P.frame(servo_id, P.READ, P.read_params(entry.address, entry.size)),
                            [servo_id], STATUS_OVERHEAD + entry.size)[servo_id]
        _check(pkt)
        if len(pkt.params) != entry.size:
            raise NoReply([servo_id])
        return P.int_from(pkt.params, entry.signed), pkt

    def write(self, servo_id: int, entry: T.Entry, value: int) -> P.Packet:
        pkt = self.transact(
            P.frame(servo_id, P.WRITE, P.write_params(entry.address, P.int_bytes(value, entry.size))),
            [servo_id], STATUS_OVERHEAD)[servo_id]
        _check(pkt)
        return pkt

    def write_broadcast(self, entry: T.Entry, value: int) -> None:
        """Write one value to every servo at once (no status comes back)."""
        self.send(P.frame(P.BROADCAST_ID, P.WRITE,
                          P.write_params(entry.address, P.int_bytes(value, entry.size))))

    def sync_write(self, entry: T.Entry, values: dict[int, int]) -> int:
        """One packet writing ``values[id]`` to each id; no status comes back. Returns
        the packet's length in bytes."""
        data = P.frame(P.BROADCAST_ID, P.SYNC_WRITE, P.sync_write_params(
            entry.address, entry.size, {i: P.int_bytes(v, entry.size) for i, v in values.items()}))
        self.send(data)
        return len(data)

    def sync_read(self, entry: T.Entry, ids: Iterable[int]) -> dict[int, tuple[int, P.Packet]]:
        """One packet asking each id for ``entry``; each answers in turn.

        Raises NoReply (with the answers that did come in ``got``)."""
        ids = list(ids)
        data = P.frame(P.BROADCAST_ID, P.SYNC_READ, P.sync_read_params(entry.address, entry.size, ids))
        got = self.transact(data, ids, STATUS_OVERHEAD + entry.size)
        out = {}
        for i, pkt in got.items():
            _check(pkt)
            if len(pkt.params) != entry.size:
                raise NoReply([i])
            out[i] = (P.int_from(pkt.params, entry.signed), pkt)
        return out

    def reboot(self, servo_id: int) -> None:
        """Reboot one servo (clears its Hardware Error Status; torque comes back off)."""
        _check(self.transact(P.frame(servo_id, P.REBOOT), [servo_id], STATUS_OVERHEAD)[servo_id])


def _check(pkt: P.Packet) -> None:
    if pkt.packet_error:
        raise PacketRefused(pkt.servo_id, pkt.packet_error)
