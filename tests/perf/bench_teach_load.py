"""Benchmark (run by hand): how long the console's UI thread is blocked when the teach
screen opens a big points file, beside the time PointBook.load takes for the same file
(the ratio is measured in one run). Headless, with Textual's App.run_test.

    python tests/perf/bench_teach_load.py [--points 10000] [--runs 3]

The UI thread's blocking is measured by a probe on the app's event loop: a task that
sleeps 2 ms at a time and records how late it wakes. The longest lateness is the
longest time a key (space: stop) would have waited; the sum is the time the UI thread
was busy. Both are taken from the t key until the points table shows every point.
The same is measured with the files read and the table filled at once on the UI
thread (the screen's size thresholds raised), which is how the screen opened them
before, so the ratio compares the two in one run. Asserts nothing.
"""

from __future__ import annotations

import argparse
import asyncio
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))

from bench_cells import best_of, grid_book  # noqa: E402

from benchjog.console.cell.armfile import builtin_arm  # noqa: E402
from benchjog.console.cell.points import PointBook  # noqa: E402
from benchjog.console.tui.app import make_app  # noqa: E402
from benchjog.console.tui.screens import teach  # noqa: E402
from benchjog.drivers.interlock import Interlock  # noqa: E402

TICK_S = 0.002


class LagProbe:
    """Wakes every TICK_S on the event loop and keeps how late each wake-up was."""

    def __init__(self):
        self.lags: list[float] = []
        self.running = True

    async def run(self) -> None:
        while self.running:
            t0 = time.perf_counter()
            await asyncio.sleep(TICK_S)
            self.lags.append(max(0.0, time.perf_counter() - t0 - TICK_S))


async def open_teach(arm, gate, points: Path, program: Path, n: int) -> tuple[float, float, float]:
    """(longest block, total blocked, wall time) from the t key to the full table."""
    app = make_app(arm, gate, points_path=points, program_path=program)
    async with app.run_test(size=(120, 40)) as pilot:
        for _ in range(300):
            if app.state is not None:
                break
            await pilot.pause(0.02)
        probe = LagProbe()
        task = asyncio.create_task(probe.run())
        await asyncio.sleep(0.05)
        probe.lags.clear()
        t0 = time.perf_counter()
        await pilot.press("t")
        while True:
            screen = app.screen
            table = screen.query("#points-table")
            if type(screen).__name__ == "TeachScreen" and screen.book is not None and \
                    table and table.first().row_count == n:
                break
            await asyncio.sleep(0.005)
        wall = time.perf_counter() - t0
        await asyncio.sleep(0.05)
        probe.running = False
        await task
        return max(probe.lags), sum(probe.lags), wall


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--points", type=int, default=10000)
    parser.add_argument("--runs", type=int, default=3)
    args = parser.parse_args()
    arm = builtin_arm("planar-bench")
    with tempfile.TemporaryDirectory() as tmp:
        points = Path(tmp) / "points.toml"
        grid_book(arm, args.points, points).save()
        _, t_load = best_of(lambda: PointBook.load(points, arm), runs=args.runs)
        figures = {}
        for mode in ("at once", "off the UI thread"):
            saved = teach.INLINE_LOAD_BYTES, teach.FILL_CHUNK
            if mode == "at once":
                teach.INLINE_LOAD_BYTES = teach.FILL_CHUNK = 1 << 62
            try:
                results = []
                for _ in range(args.runs):
                    with Interlock.open(arm, "sim", journal=False, time_scale=50.0) as gate:
                        results.append(asyncio.run(open_teach(
                            arm, gate, points, Path(tmp) / "program.toml", args.points)))
            finally:
                teach.INLINE_LOAD_BYTES, teach.FILL_CHUNK = saved
            figures[mode] = block, busy, wall = min(results)
            print(f"teach screen on {args.points} points, {mode}: UI thread blocked at most "
                  f"{block:.3f} s (busy {busy:.3f} s in all) of {wall:.3f} s from the t key to "
                  f"the full table; longest block / PointBook.load {block / t_load:.2f}")
        print(f"PointBook.load of the same file: {t_load:.3f} s; longest block off the UI thread "
              f"/ at once: {figures['off the UI thread'][0] / figures['at once'][0]:.2f}")


if __name__ == "__main__":
    main()
