"""A bus of emulated Protocol 2.0 servos on a pseudo-terminal, for tests, the benchmark
and trying the driver without hardware.

It speaks the bytes: instruction packets in (CRC checked, stuffing removed), status
packets out, for PING, READ, WRITE, REBOOT, SYNC_READ, SYNC_WRITE and BULK_READ over the
control-table subset of table.py. Each servo:

- holds EEPROM entries across power cuts and RAM entries that reset at power-up and reboot;
  refuses an EEPROM write while its torque is on (access error);
- moves its position toward the goal while torque is on, no faster than its profile
  velocity (a servo told ``lag_s`` also follows with that first-order time constant: a
  servo that lags); the profile acceleration is stored but not modelled;
- in one-turn position mode refuses a goal outside its position limits (data limit error);
- runs its bus watchdog: with torque on and the register > 0, no instruction for that many
  20 ms units stops the servo where it is and the register reads -1; goal writes are then
  ignored until the register is written 0;
- with a hardware error set (``inject_hardware_error``) drops torque, sets the alert bit in
  every status packet and keeps the error until a reboot.

The bus can lose power (``power_cut``: every servo goes silent and limp, as when an e-stop
contact cuts the servo supply) and get it back (``power_restore``: RAM defaults, errors
cleared). Faults on the wire: a status packet dropped (``drop_next``, ``drop_every``) or
sent with a bad CRC (``corrupt_every``).

Byte rate: a pty moves bytes as fast as the kernel copies them, so with ``pace=True`` the
emulator models the bus at ``baud``: an instruction packet counts as received only once
its bytes would have crossed the wire (10 bits a byte), and each status packet is held for
the servo's return delay and its own wire time before it is written. The bus is one wire:
a wire clock makes replies wait for the bytes before them.
"""

from __future__ import annotations

import math
import os
import select
import threading
import time
from dataclasses import dataclass, field

from benchjog.drivers.pty_pair import close_pty, open_raw_pty
from benchjog.drivers.servobus import packet as P
from benchjog.drivers.servobus import table as T


@dataclass
class ServoSpec:
    """One emulated servo: its id, model number, where its shaft starts (raw pulses),
    how fast it can turn (pulses/s) and its lag time constant (s, 0: none)."""

    servo_id: int
    model: int = 1060
    start_raw: int = T.CENTER
    max_speed_pps: float = 200_000.0
    lag_s: float = 0.0


@dataclass
class _Servo:
    spec: ServoSpec
    regs: dict[int, int] = field(default_factory=dict)   # address -> value (by Entry)
    raw: float = 0.0            # shaft position, pulses, before offset
    t_last: float = 0.0         # physics clock
    t_heard: float = 0.0        # last instruction addressed to it
    hw_error: int = 0

    def reg(self, entry: T.Entry) -> int:
        return self.regs[entry.address]

    def present(self) -> int:
        return round(self.raw) + self.reg(T.HOMING_OFFSET)


_ENTRIES_BY_ADDRESS = {e.address: e for e in T.ENTRIES}


class BusEmulator:
    """Servos on a pty. ``start()`` returns the device path to open with pyserial."""

    def __init__(self, servos: list[ServoSpec], *, baud: int = 1_000_000, pace: bool = False,
                 return_delay_s: float = 0.0, drop_every: int | None = None,
                 corrupt_every: int | None = None) -> None:
        self.baud, self.pace, self.return_delay_s = baud, pace, return_delay_s
        self.drop_every, self.corrupt_every = drop_every, corrupt_every
        self._lock = threading.RLock()
        now = time.monotonic()
        self.servos: dict[int, _Servo] = {}
        for spec in servos:
            s = _Servo(spec, raw=float(spec.start_raw), t_last=now, t_heard=now)
            for e in T.ENTRIES:
                s.regs[e.address] = e.default
            s.regs[T.ID.address] = spec.servo_id
            s.regs[T.MODEL_NUMBER.address] = spec.model
            s.regs[T.FIRMWARE_VERSION.address] = 46
            s.regs[T.GOAL_POSITION.address] = s.present()
            self.servos[spec.servo_id] = s
        self.powered = True
        self.path: str | None = None
        self._master: int | None = None
        self._slave: int | None = None
        self._thread: threading.Thread | None = None
        self._running = False
        self._wire_free_at = 0.0
        self._statuses = 0
        self._drop_next = 0
        self.instructions: list[tuple[int, int]] = []   # (id, instruction) as received
        self.goal_writes = 0                             # sync-written goal positions accepted
        self.goal_changes = 0                            # ... that changed a servo's goal
        self.goal_log: list[tuple[int, int]] = []        # (id, new goal) in order of arrival
        self.bad_packets = 0

    # -- life cycle -----------------------------------------------------------------------
    def start(self) -> str:
        self._master, self._slave, self.path = open_raw_pty()
        self._running = True
        self._thread = threading.Thread(target=self._serve, name="servobus-emulator", daemon=True)
        self._thread.start()
        return self.path

    def stop(self) -> None:
        self._running = False
        if self._thread is not None:
            self._thread.join(timeout=2.0)
            self._thread = None
        close_pty(self._master, self._slave)
        self._master = self._slave = None

    def _serve(self) -> None:
        deframer = P.Deframer()
        while self._running:
            try:
                ready, _, _ = select.select([self._master], [], [], 0.02)
            except (OSError, ValueError):
                return
            with self._lock:
                self._advance_all()
            if not ready:
                continue
            try:
                chunk = os.read(self._master, 4096)  # type: ignore[arg-type]
            except OSError:
                return
            t_rx = time.monotonic()
            before = deframer.dropped
            packets = deframer.feed(chunk)
            self.bad_packets += deframer.dropped - before
            for pkt in packets:
                if self.pace:
                    n = len(P.frame(pkt.servo_id, pkt.instruction, pkt.params))
                    self._wire_free_at = max(self._wire_free_at, t_rx) + P.frame_time_s(n, self.baud)
                    _sleep_until(self._wire_free_at)
                self._handle(pkt)

    # -- wire out -------------------------------------------------------------------------
    def _reply(self, servo: _Servo, error: int = 0, params: bytes = b"") -> None:
        if servo.hw_error:
            error |= P.ALERT_BIT
        data = P.frame(servo.spec.servo_id, P.STATUS, bytes([error]) + params)
        self._statuses += 1
        if self._drop_next > 0:
            self._drop_next -= 1
            return
        if self.drop_every and self._statuses % self.drop_every == 0:
            return
        if self.corrupt_every and self._statuses % self.corrupt_every == 0:
            data = data[:-1] + bytes([data[-1] ^ 0x5A])
        if self.pace:
            start = max(self._wire_free_at, time.monotonic() + self.return_delay_s)
            self._wire_free_at = start + P.frame_time_s(len(data), self.baud)
            _sleep_until(self._wire_free_at)
        elif self.return_delay_s:
            time.sleep(self.return_delay_s)
        try:
            os.write(self._master, data)  # type: ignore[arg-type]
        except OSError:
            pass

    # -- instructions ---------------------------------------------------------------------
    def _handle(self, pkt: P.Packet) -> None:
        with self._lock:
            self.instructions.append((pkt.servo_id, pkt.instruction))
            if not self.powered:
                return
            now = time.monotonic()
            self._advance_all(now)
            if pkt.servo_id == P.BROADCAST_ID:
                for s in self.servos.values():
                    s.t_heard = now
                if pkt.instruction == P.SYNC_WRITE:
                    self._sync_write(pkt.params)
                elif pkt.instruction == P.SYNC_READ:
                    self._sync_read(pkt.params)
                elif pkt.instruction == P.BULK_READ:
                    self._bulk_read(pkt.params)
                elif pkt.instruction == P.WRITE and len(pkt.params) >= 3:
                    for s in self.servos.values():
                        self._write(s, pkt.params, reply=False)
                elif pkt.instruction == P.PING:
                    for s in sorted(self.servos.values(), key=lambda s: s.spec.servo_id):
                        self._reply(s, 0, _ping_params(s))
                return
            s = self.servos.get(pkt.servo_id)
            if s is None:
                return  # nobody there: silence
            s.t_heard = now
            if pkt.instruction == P.PING:
                self._reply(s, 0, _ping_params(s))
            elif pkt.instruction == P.READ:
                if len(pkt.params) != 4:
                    self._reply(s, 5)
                    return
                address, size = pkt.params[0] | pkt.params[1] << 8, pkt.params[2] | pkt.params[3] << 8
                data = self._read_bytes(s, address, size)
                self._reply(s, 0, data) if data is not None else self._reply(s, 7)
            elif pkt.instruction == P.WRITE:
                self._write(s, pkt.params, reply=True)
            elif pkt.instruction == P.REBOOT:
                self._reply(s)
                self._reboot(s)
            else:
                self._reply(s, 2)

    def _read_bytes(self, s: _Servo, address: int, size: int) -> bytes | None:
        out = bytearray()
        end = address + size
        a = address
        while a < end:
            e = _ENTRIES_BY_ADDRESS.get(a)
            if e is None:
                out.append(0)     # not modelled: reads as zero
                a += 1
                continue
            value = s.present() if e is T.PRESENT_POSITION else s.reg(e)
            if e is T.HARDWARE_ERROR:
                value = s.hw_error
            if e is T.MOVING:
                value = int(s.reg(T.TORQUE_ENABLE) == 1 and s.present() != s.reg(T.GOAL_POSITION))
            out.extend(P.int_bytes(value, e.size))
            a += e.size
        return bytes(out[:size])

    def _write(self, s: _Servo, params: bytes, reply: bool) -> bool:
        address = params[0] | params[1] << 8
        data = params[2:]
        e = _ENTRIES_BY_ADDRESS.get(address)
        if e is None or len(data) != e.size or e in (T.MODEL_NUMBER, T.FIRMWARE_VERSION,
                                                     T.HARDWARE_ERROR, T.MOVING, T.PRESENT_POSITION):
            if reply:
                self._reply(s, 7 if e is not None and len(data) == e.size else 5)
            return False
        value = P.int_from(data, e.signed)
        error = self._set(s, e, value)
        if reply:
            self._reply(s, error)
        return error == 0

    def _set(self, s: _Servo, e: T.Entry, value: int) -> int:
        """Apply one write; the status error number (0: done)."""
        torque = s.reg(T.TORQUE_ENABLE) == 1
        if e.eeprom and torque:
            return 7
        if e is T.TORQUE_ENABLE:
            if value not in (0, 1):
                return 4
            if value == 1 and s.hw_error:
                return 7
            if value == 1 and not torque:
                s.regs[T.GOAL_POSITION.address] = s.present()   # hold where it is
            s.regs[e.address] = value
            return 0
        if e is T.GOAL_POSITION:
            if s.reg(T.BUS_WATCHDOG) == T.WATCHDOG_TRIPPED:
                return 4
            if s.reg(T.OPERATING_MODE) == T.POSITION_MODE and not (
                    s.reg(T.MIN_POSITION) <= value <= s.reg(T.MAX_POSITION)):
                return 6
            lo, hi = T.POSITION_RANGE.get(s.reg(T.OPERATING_MODE), (-2**31, 2**31 - 1))
            if not lo <= value <= hi:
                return 6
        if e is T.BUS_WATCHDOG and value not in range(0, 128):
            return 4
        if e is T.OPERATING_MODE and value not in T.POSITION_RANGE:
            return 4
        if e is T.HOMING_OFFSET:
            s.regs[T.GOAL_POSITION.address] += value - s.reg(T.HOMING_OFFSET)
        s.regs[e.address] = value
        return 0

    def _sync_write(self, params: bytes) -> None:
        if len(params) < 4:
            return
        address, size = params[0] | params[1] << 8, params[2] | params[3] << 8
        body = params[4:]
        step = 1 + size
        for k in range(0, len(body) - step + 1, step):
            s = self.servos.get(body[k])
            if s is None:
                continue
            e = _ENTRIES_BY_ADDRESS.get(address)
            if e is None or e.size != size:
                continue
            old = s.reg(T.GOAL_POSITION)
            if self._set(s, e, P.int_from(body[k + 1:k + step], e.signed)) == 0 and e is T.GOAL_POSITION:
                self.goal_writes += 1
                if s.reg(T.GOAL_POSITION) != old:
                    self.goal_changes += 1
                    self.goal_log.append((s.spec.servo_id, s.reg(T.GOAL_POSITION)))

    def _sync_read(self, params: bytes) -> None:
        if len(params) < 4:
            return
        address, size = params[0] | params[1] << 8, params[2] | params[3] << 8
        for servo_id in params[4:]:
            s = self.servos.get(servo_id)
            if s is not None:
                data = self._read_bytes(s, address, size)
                self._reply(s, 0, data) if data is not None else self._reply(s, 7)

    def _bulk_read(self, params: bytes) -> None:
        for k in range(0, len(params) - 4, 5):
            servo_id = params[k]
            address, size = params[k + 1] | params[k + 2] << 8, params[k + 3] | params[k + 4] << 8
            s = self.servos.get(servo_id)
            if s is not None:
                data = self._read_bytes(s, address, size)
                self._reply(s, 0, data) if data is not None else self._reply(s, 7)

    def _reboot(self, s: _Servo) -> None:
        for e in T.ENTRIES:
            if not e.eeprom and e is not T.PRESENT_POSITION:
                s.regs[e.address] = e.default
        s.hw_error = 0
        s.regs[T.GOAL_POSITION.address] = s.present()

    # -- physics --------------------------------------------------------------------------
    def _advance_all(self, now: float | None = None) -> None:
        now = time.monotonic() if now is None else now
        for s in self.servos.values():
            self._advance(s, now)

    def _advance(self, s: _Servo, now: float) -> None:
        dt = max(0.0, now - s.t_last)
        s.t_last = now
        if not self.powered or s.reg(T.TORQUE_ENABLE) != 1:
            return
        wd = s.reg(T.BUS_WATCHDOG)
        if wd > 0 and now - s.t_heard > wd * T.WATCHDOG_UNIT_S:
            # stop where it was when the watchdog ran out
            s.regs[T.BUS_WATCHDOG.address] = T.WATCHDOG_TRIPPED
            dt = max(0.0, dt - (now - s.t_heard - wd * T.WATCHDOG_UNIT_S))
            self._move(s, dt)
            s.regs[T.GOAL_POSITION.address] = s.present()
            return
        self._move(s, dt)

    def _move(self, s: _Servo, dt: float) -> None:
        target_raw = s.reg(T.GOAL_POSITION) - s.reg(T.HOMING_OFFSET)
        gap = target_raw - s.raw
        if gap == 0 or dt <= 0:
            return
        vmax = s.spec.max_speed_pps
        pv = s.reg(T.PROFILE_VELOCITY)
        if pv > 0:
            vmax = min(vmax, pv * T.PROFILE_VELOCITY_UNIT_RPM / 60.0 * T.PULSES_PER_REV)
        step = gap
        if s.spec.lag_s > 0:
            step = gap * (1.0 - math.exp(-dt / s.spec.lag_s))
        step = max(-vmax * dt, min(vmax * dt, step))
        s.raw += step
        if abs(target_raw - s.raw) < 0.5:
            s.raw = float(target_raw)

    # -- test hooks -----------------------------------------------------------------------
    def present(self, servo_id: int) -> int:
        with self._lock:
            self._advance_all()
            return self.servos[servo_id].present()

    def register(self, servo_id: int, entry: T.Entry) -> int:
        with self._lock:
            self._advance_all()
            s = self.servos[servo_id]
            return s.hw_error if entry is T.HARDWARE_ERROR else s.reg(entry)

    def inject_hardware_error(self, servo_id: int, bits: int) -> None:
        """A hardware error on one servo: torque off there, alert bit in its replies."""
        with self._lock:
            self._advance_all()
            s = self.servos[servo_id]
            s.hw_error |= bits
            s.regs[T.TORQUE_ENABLE.address] = 0

    def power_cut(self) -> None:
        """The servo supply goes off (an e-stop contact in series): silent and limp."""
        with self._lock:
            self._advance_all()
            self.powered = False
            for s in self.servos.values():
                s.regs[T.TORQUE_ENABLE.address] = 0

    def power_restore(self) -> None:
        """The supply comes back: every servo boots (RAM defaults, errors cleared)."""
        with self._lock:
            now = time.monotonic()
            for s in self.servos.values():
                s.t_last = s.t_heard = now
                self._reboot(s)
            self.powered = True

    def drop_next(self, n: int = 1) -> None:
        """Lose the next ``n`` status packets on the wire."""
        with self._lock:
            self._drop_next += n

    def set_lag(self, servo_id: int, lag_s: float, max_speed_pps: float | None = None) -> None:
        with self._lock:
            self._advance_all()
            spec = self.servos[servo_id].spec
            spec.lag_s = lag_s
            if max_speed_pps is not None:
                spec.max_speed_pps = max_speed_pps


def _ping_params(s: _Servo) -> bytes:
    return P.int_bytes(s.reg(T.MODEL_NUMBER), 2) + bytes([s.reg(T.FIRMWARE_VERSION)])


def _sleep_until(t: float) -> None:
    delay = t - time.monotonic()
    if delay > 0:
        time.sleep(delay)


def main(argv: list[str] | None = None) -> int:
    """``python -m benchjog.drivers.servobus.emulator [--ids 1,2] [--baud N] [--pace]``:
    servos on a pty for trying the driver by hand. Prints the device path on the first
    line of stdout; then type ``cut`` / ``restore`` (servo supply off/on, as an e-stop
    contact does), ``error ID`` (an overload on that servo) and Enter; ctrl+c stops."""
    import argparse
    import sys

    from benchjog.drivers.servobus.probe import parse_ids

    ap = argparse.ArgumentParser(prog="python -m benchjog.drivers.servobus.emulator",
                                 description=main.__doc__.splitlines()[0])
    ap.add_argument("--ids", default="1,2", help="servo ids (default 1,2)")
    ap.add_argument("--baud", type=int, default=1_000_000)
    ap.add_argument("--pace", action="store_true", help="move bytes at the baud rate")
    args = ap.parse_args(argv)
    try:
        ids = parse_ids(args.ids)
    except ValueError as exc:
        print(f"servobus emulator: --ids: {exc}", file=sys.stderr)
        return 2
    emu = BusEmulator([ServoSpec(i) for i in ids], baud=args.baud, pace=args.pace)
    print(emu.start(), flush=True)
    try:
        for line in sys.stdin:
            words = line.split()
            if words == ["cut"]:
                emu.power_cut()
            elif words == ["restore"]:
                emu.power_restore()
            elif len(words) == 2 and words[0] == "error" and words[1].isdigit() and int(words[1]) in emu.servos:
                emu.inject_hardware_error(int(words[1]), 1 << 5)
            elif words:
                print("commands: cut, restore, error ID", file=sys.stderr)
        while True:   # stdin closed: serve until interrupted
            time.sleep(1.0)
    except KeyboardInterrupt:
        pass
    finally:
        emu.stop()
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
