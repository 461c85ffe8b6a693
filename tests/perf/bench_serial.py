"""Streaming rate of the serial driver against the emulator with bytes paced at the baud.

Run by hand: ``python tests/perf/bench_serial.py [--baud 115200] [--segments 1000]``.

Two ways to stream short MOVE segments over a pty to the emulator (``pace`` on: every
byte takes 10 bit times, both ways):
- flow control: MOVE lines are pipelined (up to 4 without their OK, the driver's
  default ``window``; PROTOCOL.md allows it because STATE's ``moves=``/``last=`` find a
  MOVE whose reply was lost) and the controller's queue is kept full (the driver waits
  for a DONE only when it is full); also against an older controller whose STATE has no
  counters, where the driver awaits each OK (as ``window=1`` does);
- stop-and-wait: the next MOVE goes out only after the previous segment's DONE.

Rates are printed in segments/s and as a ratio to the line rate the baud allows for
one MOVE line plus its OK reply (10 bits per byte). The segments are ``--ms`` long (2 ms
by default) so that the link, not the arm, is the bottleneck; ``--ms 20`` shows the
arm-bound case (at most 50 segments/s whatever the link).
"""

from __future__ import annotations

import argparse
import sys
import time


from benchjog.console.cell.armfile import builtin_arm  # noqa: E402
from benchjog.drivers import protocol as P  # noqa: E402
from benchjog.drivers.calibration import joints_from_counts  # noqa: E402
from benchjog.drivers.emulator import BITS_PER_BYTE, Emulator  # noqa: E402
from benchjog.drivers.serial_link import SerialDriver  # noqa: E402
from benchjog.kinematics.model import Segment  # noqa: E402


def _counts(k: int) -> tuple[int, int]:
    """A zig-zag of small steps around the home pose (counts)."""
    return (1000 + (k % 200) * 5, -500 + (k % 100) * 3)


def _wait_done(d: SerialDriver) -> None:
    # the driver's own condition: wake on the DONE (private, a benchmark may peek)
    with d._cond:
        while d._outstanding and d.state().latched is None:
            d._cond.wait(0.5)


def run(mode: str, arm, baud: int, n: int, ms: int, window: int,
        counters: bool = True) -> tuple[float, float, float, int]:
    emu = Emulator(arm, {"pace": True, "baud": baud, "home_s": 0.05, "counters": counters})
    path = emu.start()
    d = SerialDriver(arm, port=path, baud=baud, window=window)
    try:
        d.open()
        d.enable()
        d.home(timeout_s=5.0)
        segs = [Segment(joints_from_counts(arm, _counts(k)), ms / 1000.0) for k in range(n)]
        first_seq = d._seq + 1
        t0 = time.perf_counter()
        for seg in segs:
            d.queue(seg, timeout_s=10.0)
            if mode == "stop-and-wait":
                _wait_done(d)
        t_sent = time.perf_counter() - t0
        _wait_done(d)
        dry = d.state().queue_ran_dry
        assert emu.position_counts() == _counts(n - 1), "the arm did not reach the last target"
        assert d.state().latched is None
        moves = [b for b in emu.received if " MOVE " in b]
        assert len(moves) == n
        # bytes per MOVE line and its OK reply, averaged over the seqs used
        seqs = range(first_seq, first_seq + n)
        move_b = sum(len(P.host_line(s, "MOVE", ms, *_counts(k))) for k, s in enumerate(seqs)) / n
        ok_b = sum(len(P.frame(f"OK {s} free=0")) for s in seqs) / n
        done_b = sum(len(P.frame(f"DONE {s}")) for s in seqs) / n
        return n / t_sent, move_b + ok_b, max(move_b, ok_b + done_b), dry - 1
    finally:
        d.close()
        emu.stop()


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--baud", type=int, default=115200)
    ap.add_argument("--segments", type=int, default=1000)
    ap.add_argument("--ms", type=int, default=2, help="segment duration in ms (default 2)")
    args = ap.parse_args()
    arm = builtin_arm("planar-bench")
    print(f"baud {args.baud}, {args.segments} segments of {args.ms} ms, emulator paced at "
          f"{BITS_PER_BYTE} bits/byte, queue 8")
    byte_rate = args.baud / BITS_PER_BYTE
    print(f"the arm could run {1000.0 / args.ms:.0f} segments/s")
    for label, mode, window, counters in (
            ("flow control, pipelined (window 4)", "flow", 4, True),
            ("flow control, controller without counters", "flow", 4, False),
            ("stop-and-wait, each DONE awaited", "stop-and-wait", 1, True)):
        n = args.segments if mode == "flow" else max(50, args.segments // 3)
        rate, line_bytes, busiest, underruns = run(mode, arm, args.baud, n, args.ms, window, counters)
        line_rate = byte_rate / line_bytes
        duplex = byte_rate / busiest
        print(f"{label:>36}: {rate:6.1f} segments/s = {rate / line_rate:6.1%} of the line rate "
              f"({line_rate:.1f}/s: {line_bytes:.1f} bytes MOVE+OK), "
              f"{rate / duplex:6.1%} of the full-duplex bound ({duplex:.1f}/s: "
              f"{busiest:.1f} bytes on the busier direction, OK+DONE or MOVE); "
              f"the queue ran empty mid-stream {underruns} of {n - 1} times")
    return 0


if __name__ == "__main__":
    sys.exit(main())
