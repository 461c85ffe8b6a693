"""Stop latency: from the call of ``Interlock.stop()`` to the driver's stop, with the
motion journal's fsync slowed down, failing, and without a journal.

Run by hand: ``python tests/perf/bench_stop.py [--stops 40]``.

Each case opens a gate on the simulated arm (its ``stop`` timestamped on entry), keeps
the journal busy from a second thread (a segment line every 2 ms, as a streaming plan
writes them), and calls ``stop()`` ``--stops`` times at random moments. fsync is
replaced by a sleep of 0, 50 or 500 ms, or the journal's file fails every write
(ENOSPC). Printed per case: median and max latency, and the ratio of each to the
no-journal case measured in the same run; and whether the median is within one frame
of a 60 Hz display (16.7 ms) of the no-journal case. Asserts nothing.
"""

from __future__ import annotations

import argparse
import errno
import os
import random
import shutil
import statistics
import tempfile
import threading
import time
from pathlib import Path

from benchjog.console.cell.armfile import builtin_arm
from benchjog.drivers.interlock import Interlock
from benchjog.drivers.journal import Journal
from benchjog.drivers.sim import SimDriver

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


if __name__ == "__main__":
    main()
