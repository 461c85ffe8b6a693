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
before, so the ratio compares the two in one run. Beside them, the longest time the
points table's title (the load's count: percent of the text parsed, then points
checked) stood still: with the text parsed table by table it moves during the parse
too. Asserts nothing.
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
from benchjog.console.cell import points as points_module  # noqa: E402
from benchjog.console.cell.points import PointBook  # noqa: E402
from benchjog.console.cell.safe_files import parse_toml  # noqa: E402
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


async def open_teach(arm, gate, points: Path, program: Path,
                     n: int) -> tuple[float, float, float, float]:
    """(longest block, total blocked, wall time, longest still title) from the t key to
    the full table; the last: the longest time the points table's title (the load's
    count) did not change, polled every 5 ms."""
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
        titles: list[tuple[float, str | None]] = []
        watching = True

        async def watch() -> None:   # beside the key press, which waits for the app to idle
            while watching:
                title = app.screen.query("#points-title")
                words = str(title.first().render()) if title else None
                if not titles or titles[-1][1] != words:
                    titles.append((time.perf_counter(), words))
                await asyncio.sleep(0.005)
        watcher = asyncio.create_task(watch())
        await pilot.press("t")
        while True:
            screen = app.screen
            table = screen.query("#points-table")
            if type(screen).__name__ == "TeachScreen" and screen.book is not None and \
                    table and table.first().row_count == n:
                break
            await asyncio.sleep(0.005)
        end = time.perf_counter()
        wall = end - t0
        watching = False
        await watcher
        moments = [t0] + [t for t, _w in titles if t > t0] + [end]
        still = max(b - a for a, b in zip(moments, moments[1:]))
        await asyncio.sleep(0.05)
        probe.running = False
        await task
        return max(probe.lags), sum(probe.lags), wall, still


def parsed_whole(text, source, tables, arrays, *, progress=None):
    """safe_files.parse_toml_pieces as one whole parse (how the points were read before)."""
    data = parse_toml(text, source)
    if progress is not None:
        progress(len(text), len(text))
    return data, None


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
        for mode in ("at once", "off the UI thread, the text parsed whole", "off the UI thread"):
            saved = teach.INLINE_LOAD_BYTES, teach.FILL_CHUNK, points_module.parse_toml_pieces
            if mode == "at once":
                teach.INLINE_LOAD_BYTES = teach.FILL_CHUNK = 1 << 62
            if mode.endswith("whole"):   # one tomllib.loads, no count while it runs
                points_module.parse_toml_pieces = parsed_whole
            try:
                results = []
                for _ in range(args.runs):
                    with Interlock.open(arm, "sim", journal=False, time_scale=50.0) as gate:
                        results.append(asyncio.run(open_teach(
                            arm, gate, points, Path(tmp) / "program.toml", args.points)))
            finally:
                teach.INLINE_LOAD_BYTES, teach.FILL_CHUNK, points_module.parse_toml_pieces = saved
            figures[mode] = block, busy, wall, still = min(results)
            print(f"teach screen on {args.points} points, {mode}: UI thread blocked at most "
                  f"{block:.3f} s (busy {busy:.3f} s in all) of {wall:.3f} s from the t key to "
                  f"the full table; longest block / PointBook.load {block / t_load:.2f}; "
                  f"longest time the title's count stood still {still:.3f} s "
                  f"({still / wall:.0%} of the wait)")
        print(f"PointBook.load of the same file: {t_load:.3f} s; longest block off the UI thread "
              f"/ at once: {figures['off the UI thread'][0] / figures['at once'][0]:.2f}")


if __name__ == "__main__":
    main()
