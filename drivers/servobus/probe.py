"""Ping a list of ids on a bus, without moving anything: who is there, which model, and
where each shaft is (the present position a zero offset is worked out from).

Only PING and READ instructions go out: nothing is written, torque is never touched.
"""

from __future__ import annotations

from dataclasses import dataclass

from benchjog.drivers.servobus import table as T
from benchjog.drivers.servobus.bus import NoReply, PacketRefused, ServoBus


@dataclass(frozen=True)
class ServoFound:
    servo_id: int
    model: int
    firmware: int
    present: int | None          # present position, pulses (None: could not be read)
    hardware_error: int | None   # Hardware Error Status bits

    @property
    def model_name(self) -> str:
        return T.model_name(self.model)

    def words(self) -> str:
        """One line for people.

        >>> ServoFound(3, 1060, 46, 2100, 0).words()
        'id 3: XL430-W250 (model 1060, firmware 46), present position 2100, no hardware error'
        """
        pos = "present position unknown" if self.present is None else f"present position {self.present}"
        if self.hardware_error is None:
            err = "hardware error status unknown"
        elif self.hardware_error:
            err = f"hardware error: {T.hardware_error_words(self.hardware_error)}"
        else:
            err = "no hardware error"
        return f"id {self.servo_id}: {self.model_name} (model {self.model}, firmware {self.firmware}), {pos}, {err}"


def probe_bus(port: str, baud: int, ids, tries: int = 3, latency_s: float = 0.050) -> list[ServoFound]:
    """Ping each id (``tries`` times before giving up on it); read the present position
    and hardware error status of those that answer. Raises LinkError when the port
    cannot be opened."""
    bus = ServoBus(port, baud, latency_s)
    bus.open()
    found: list[ServoFound] = []
    try:
        for sid in ids:
            pkt = None
            for _ in range(tries):
                try:
                    pkt = bus.ping(sid)
                    break
                except NoReply:
                    continue
            if pkt is None or len(pkt.params) < 3:
                continue
            model = pkt.params[0] | pkt.params[1] << 8
            present = error = None
            try:
                present, _ = bus.read(sid, T.PRESENT_POSITION)
                error, _ = bus.read(sid, T.HARDWARE_ERROR)
            except (NoReply, PacketRefused):
                pass
            found.append(ServoFound(sid, model, pkt.params[2], present, error))
    finally:
        bus.close()
    return found


def parse_ids(text: str) -> list[int]:
    """Ids from ``1,2,5-8`` (0..252).

    >>> parse_ids("1,3-5")
    [1, 3, 4, 5]
    >>> parse_ids("300")
    Traceback (most recent call last):
    ...
    ValueError: servo ids are 0..252, got 300
    """
    out: list[int] = []
    for part in text.split(","):
        part = part.strip()
        if not part:
            raise ValueError(f"empty id in {text!r}")
        lo_s, dash, hi_s = part.partition("-")
        try:
            lo = int(lo_s)
            hi = int(hi_s) if dash else lo
        except ValueError:
            raise ValueError(f"not an id or a range of ids: {part!r}") from None
        for v in (lo, hi):
            if not 0 <= v <= 252:
                raise ValueError(f"servo ids are 0..252, got {v}")
        if hi < lo:
            raise ValueError(f"empty range {part!r}")
        out.extend(v for v in range(lo, hi + 1) if v not in out)
    return out
