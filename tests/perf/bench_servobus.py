"""Setpoint streaming of the servo-bus driver against the bus emulation, bytes paced at
the baud rate.

Run by hand: ``python tests/perf/bench_servobus.py [--axes 2] [--seconds 2]``.

A pty moves bytes as fast as the kernel copies them, so the emulation models the bus:
with ``pace`` on, an instruction packet counts as received only after its bytes would
have crossed the wire (10 bits a byte, 8N1) and each status packet waits its own wire
time (plus a return delay, 20 us here) before it is written; the wire is one (half-
duplex), so a reply waits for the bytes before it. The host's reply timeout keeps the
driver's default margin.

For 1 Mbaud and 57,600 baud, and each write rate asked for (``rate_hz``), it streams one
long segment and reports:
- the achieved setpoint rate (sync writes of goal positions per second, measured from
  the timestamps of the writes) and its ratio to the rate asked for;
- the bus's byte budget: bytes per tick (one sync write, one sync read and its status
  packets) times the achieved rate, as a ratio to the byte rate the baud allows
  (baud / 10); and the highest rate the bytes alone would allow;
- the worst jitter of the write period: the largest |interval - 1/rate| between two
  consecutive writes, and the 99th percentile.
"""

from __future__ import annotations

import argparse
import os
import math
import statistics
import time

from benchjog.console.cell.armfile import builtin_arm
from benchjog.drivers.servobus import packet as P
from benchjog.drivers.servobus import table as T
from benchjog.drivers.servobus.bus import STATUS_OVERHEAD
from benchjog.drivers.servobus.config import tick_bytes as config_tick_bytes
from benchjog.drivers.servobus.config import BusConfig
from benchjog.drivers.servobus.driver import ServoBusDriver
from benchjog.drivers.servobus.emulator import BusEmulator, ServoSpec
from benchjog.kinematics.model import Segment

ARM = builtin_arm("planar-bench")


def tick_bytes(n_axes: int) -> int:
    """Bytes on the wire for one tick: sync write of n goals, sync read, n statuses."""
    ids = list(range(1, n_axes + 1))
    write = len(P.frame(P.BROADCAST_ID, P.SYNC_WRITE, P.sync_write_params(
        T.GOAL_POSITION.address, 4, {i: bytes(4) for i in ids})))
    read = len(P.frame(P.BROADCAST_ID, P.SYNC_READ, P.sync_read_params(T.PRESENT_POSITION.address, 4, ids)))
    return write + read + n_axes * (STATUS_OVERHEAD + 4)


def run(baud: int, rate_hz: float, seconds: float, n_axes: int) -> dict:
    emu = BusEmulator([ServoSpec(1), ServoSpec(2)], baud=baud, pace=True, return_delay_s=20e-6)
    path = emu.start()
    watchdog = max(100, min(2540, math.ceil(4000.0 / rate_hz / 20.0) * 20))
    cfg = BusConfig.for_arm(ARM, mode=T.EXTENDED_POSITION_MODE, baud=baud, rate_hz=rate_hz,
                            watchdog_ms=watchdog)
    d = ServoBusDriver(ARM, port=path, bus=cfg, following_deg=720.0)
    try:
        d.open()
        d.enable()
        d.write_times.clear()
        d.queue(Segment((math.radians(60.0), math.radians(60.0)), seconds))
        d.wait_idle(seconds + 5.0)
        times = list(d.write_times)
        latched = d.state().latched
    finally:
        d.close()
        emu.stop()
    intervals = [b - a for a, b in zip(times, times[1:])]
    achieved = (len(times) - 1) / (times[-1] - times[0]) if len(times) > 1 else 0.0
    period = 1.0 / rate_hz
    dev = sorted(abs(x - period) for x in intervals) or [0.0]
    per_tick = tick_bytes(n_axes)
    return {"baud": baud, "rate_hz": rate_hz, "achieved_hz": achieved, "writes": len(times),
            "bus_use": per_tick * achieved / (baud / 10.0), "bytes_per_tick": per_tick,
            "byte_bound_hz": (baud / 10.0) / per_tick,
            "jitter_max_ms": dev[-1] * 1000.0, "jitter_p99_ms": dev[int(0.99 * (len(dev) - 1))] * 1000.0,
            "mean_interval_ms": statistics.fmean(intervals) * 1000.0 if intervals else math.nan,
            "latched": latched}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=2.0)
    args = ap.parse_args()
    n_axes = 2
    print(f"{n_axes} servos, one tick = {tick_bytes(n_axes)} bytes on the wire (config's formula: "
          f"{config_tick_bytes(n_axes)}); load average now "
          f"{os.getloadavg()[0]:.2f} on {os.cpu_count()} cores (jitter grows with the load)")
    print(f"{'baud':>8} {'asked Hz':>8} {'got Hz':>8} {'got/asked':>9} {'bus use':>8} "
          f"{'byte-bound Hz':>13} {'jitter max ms':>13} {'p99 ms':>7}  latched")
    for baud, rates in ((1_000_000, (50, 100, 200, 500)), (57_600, (25, 50, 100, 200))):
        for rate in rates:
            r = run(baud, float(rate), args.seconds, n_axes)
            print(f"{r['baud']:>8} {r['rate_hz']:>8.0f} {r['achieved_hz']:>8.1f} "
                  f"{r['achieved_hz'] / r['rate_hz']:>9.3f} {r['bus_use']:>8.3f} {r['byte_bound_hz']:>13.0f} "
                  f"{r['jitter_max_ms']:>13.2f} {r['jitter_p99_ms']:>7.2f}  {r['latched']}")


if __name__ == "__main__":
    main()
