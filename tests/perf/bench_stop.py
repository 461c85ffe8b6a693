"""Stop latency: from the call of ``Interlock.stop()`` to the driver's stop, with the
motion journal's fsync slowed down, failing, and without a journal.

Run by hand: ``python tests/perf/bench_stop.py [--stops 40]``.

Each case opens a gate on the simulated arm (its ``stop`` timestamped on entry), keeps
the journal busy from a second thread (a segment line every 2 ms, as a streaming plan
writes them), and calls ``stop()`` ``--stops`` times at random moments. fsync is
replaced by a sleep of 0, 50 or 500 ms, or the journal's file fails every write
(ENOSPC). Printed per case: median and max latency, and the ratio of each to the
no-journal case measured in the same run; and whether the median is within one frame
of a 60 Hz display (16.7 ms) of the no-journal case.

Then the serial driver on a pty (the controller emulator behind tests/lossy_pty.py):
how long ``Interlock.stop()`` takes to return with the controller answering at once,
and with a controller gone silent (every line to the host held from the STOP on, let go
only after ``stop()`` returned); the ratio of the two, measured in the same run. A stop
that waited for its OK would take the retries (4 x 0.3 s) in the silent case.
Asserts nothing.
"""

from __future__ import annotations

import argparse
import errno
import os
import random
import shutil
import statistics
import sys
import tempfile
import threading
import time
from pathlib import Path

from benchjog.console.cell.armfile import builtin_arm
from benchjog.drivers.interlock import Interlock
from benchjog.drivers.journal import Journal
from benchjog.drivers.sim import SimDriver

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))   # tests/: the lossy pty
from lossy_pty import PASS, TO_CTRL, TO_HOST, LossyLink  # noqa: E402

ARM = builtin_arm("planar-bench")
FRAME_S = 1 / 60


class TimedSim(SimDriver):
    """The simulated arm, noting when its stop was entered."""

    def __init__(self, arm, **options):
        super().__init__(arm, **options)
        self.stop_at: list[float] = []

    def stop(self) -> None:
        self.stop_at.append(time.perf_counter())
        super().stop()


class FullDisk:
    """A journal file on a full disk: every write fails with ENOSPC."""

    def __init__(self, path):
        self._real = open(path, "ab")

    def write(self, data):
        raise OSError(errno.ENOSPC, "No space left on device")

    def flush(self):
        pass

    def fileno(self):
        return self._real.fileno()

    def close(self):
        self._real.close()


def measure(journal, stops: int) -> list[float]:
    driver = TimedSim(ARM)
    driver.open()
    gate = Interlock(ARM, driver, journal=journal)
    busy = threading.Event()
    busy.set()

    def stream():
        n = 0
        while busy.is_set():
            journal.record("segment", n=n, joints=[0.1, 0.2], duration_s=0.01) if journal else None
            n += 1
            time.sleep(0.002)

    writer = threading.Thread(target=stream, daemon=True)
    writer.start()
    latencies = []
    rng = random.Random(1)
    try:
        for _ in range(stops):
            time.sleep(rng.uniform(0.005, 0.03))
            before = len(driver.stop_at)
            t0 = time.perf_counter()
            gate.stop()
            latencies.append(driver.stop_at[before] - t0)
    finally:
        busy.clear()
        writer.join()
        gate.close()
    return latencies


def serial_stops(stops: int, silent: bool) -> list[float]:
    """stop() call to return on the serial driver, a move under way each time."""
    from benchjog.drivers.emulator import Emulator
    from benchjog.drivers.interlock import Confirmer

    class Yes(Confirmer):
        def confirm(self, proposal):
            return True

    release = threading.Event()
    holding = threading.Event()

    def rule(direction, line):
        if direction == TO_CTRL and b" STOP" in line and silent:
            holding.set()
        elif direction == TO_HOST and holding.is_set():
            release.wait(5.0)
        return PASS

    emu = Emulator(ARM, {"home_s": 0.05})
    link = LossyLink(emu.start(), rule=rule)
    gate = Interlock.open(ARM, "serial", journal=False, port=link.start())
    out = []
    try:
        gate.enable()
        gate.home(Yes())
        for k in range(stops):
            release.clear()
            holding.clear()
            proposal = gate.propose_jog("x", 20.0 if k % 2 == 0 else -20.0)
            runner = threading.Thread(target=gate.execute, args=(proposal, Yes()))
            runner.start()
            time.sleep(0.05)
            t0 = time.perf_counter()
            gate.stop()
            out.append(time.perf_counter() - t0)
            release.set()
            runner.join(5.0)
            gate.wait_stopped(5.0)
            gate.reset() if gate.state().latched else None
    finally:
        release.set()
        gate.close()
        link.stop()
        emu.stop()
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--stops", type=int, default=40)
    args = parser.parse_args()
    folder = Path(tempfile.mkdtemp(prefix="bench-stop-"))
    cases = [("no journal", None)]
    for ms in (0, 50, 500):
        def slow(fd, s=ms / 1000.0):
            time.sleep(s)
            os.fsync(fd)
        cases.append((f"fsync {ms} ms", lambda slow=slow, ms=ms: Journal(folder / f"j{ms}.jsonl",
                                                                           fsync=slow)))
    cases.append(("journal failing", lambda: Journal(folder / "full.jsonl", opener=FullDisk)))
    results = {}
    for name, make in cases:
        journal = make() if make else None
        results[name] = measure(journal, args.stops)
        if journal is not None:
            note = f" (journal_error: {journal.error})" if journal.error else ""
            journal.close()
        else:
            note = ""
        results[name + "#note"] = note
    base_med = statistics.median(results["no journal"])
    base_max = max(results["no journal"])
    print(f"stop() call -> driver stop, {args.stops} stops per case (microseconds)")
    print(f"{'case':<18}{'median':>10}{'max':>10}{'median/none':>13}{'max/none':>10}  within a frame")
    for name, _ in cases:
        lat = results[name]
        med, top = statistics.median(lat), max(lat)
        within = "yes" if med - base_med <= FRAME_S and top - base_max <= FRAME_S else "NO"
        print(f"{name:<18}{med * 1e6:>10.1f}{top * 1e6:>10.1f}{med / base_med:>13.2f}"
              f"{top / base_max:>10.2f}  {within}{results[name + '#note']}")
    shutil.rmtree(folder, ignore_errors=True)

    n = max(5, args.stops // 4)
    answering = serial_stops(n, silent=False)
    silent = serial_stops(n, silent=True)
    print(f"\nserial driver, stop() call -> return, {n} stops per case (microseconds)")
    print(f"{'case':<22}{'median':>10}{'max':>10}{'median/answering':>18}")
    for name, lat in (("controller answering", answering), ("controller silent", silent)):
        print(f"{name:<22}{statistics.median(lat) * 1e6:>10.1f}{max(lat) * 1e6:>10.1f}"
              f"{statistics.median(lat) / statistics.median(answering):>18.2f}")


if __name__ == "__main__":
    main()
