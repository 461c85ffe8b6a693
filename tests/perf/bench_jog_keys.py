"""Benchmark of the console's jog keys, headless with Textual's App.run_test (run by hand).

    python tests/perf/bench_jog_keys.py [--runs 15]

Prints, from one run, the median / min / max of
- key to visible confirmation: a jog key with no jog session until the confirmation box
  has been refreshed on screen; the first question (the box composed) and later ones (the
  same box reused), against the same box pushed by a key in a bare Textual app (ratio);
- key to first setpoint inside a jog session: a jog key until the simulated controller
  has taken the first MOVE of the step;
- release to stop: a key repeated at ~30 Hz, then no more repeats; from the last key
  until the simulated arm has nothing queued and is not moving (the dead-man window is
  DEADMAN_S);
and the ratio of each figure to one 16.7 ms frame (60 Hz). Asserts nothing.
"""

from __future__ import annotations

import argparse
import asyncio
import statistics
import threading
import time

from textual.app import App
from textual.binding import Binding

from benchjog.console.cell.armfile import builtin_arm
from benchjog.console.tui.app import make_app
from benchjog.console.tui.screens.confirm import ConfirmMoveScreen
from benchjog.drivers.interlock import Interlock
from benchjog.drivers.jog_session import DEADMAN_S

FRAME_S = 1 / 60
SIZE = (120, 40)
LINES = [f"line {n} of a confirmation" for n in range(14)]


class Marks:
    """Time stamps from the screen: set when a ConfirmMoveScreen has been refreshed after
    it became the active screen."""

    def __init__(self):
        self.shown: list[float] = []

    def install(self) -> None:
        marks = self

        def on_screen_resume(screen) -> None:
            screen.call_after_refresh(lambda: marks.shown.append(time.perf_counter()))

        ConfirmMoveScreen.on_screen_resume = on_screen_resume


class Watch:
    """A thread that stamps when the simulated controller's record grows (a setpoint)
    and when the arm is idle (nothing queued, not moving)."""

    def __init__(self, gate):
        self.gate = gate
        self.stop = threading.Event()
        self.moves_at: list[tuple[float, int]] = []
        self.idle_at: float | None = None
        self.thread = threading.Thread(target=self._run, daemon=True)

    def _run(self) -> None:
        seen = len(self.gate.sim.commands)
        was_idle = True
        while not self.stop.is_set():
            n = len(self.gate.sim.commands)
            now = time.perf_counter()
            if n > seen:
                self.moves_at.append((now, n))
                seen = n
            state = self.gate.state()
            idle = state.queued == 0 and state.mode.value != "MOVING"
            if idle and not was_idle:
                self.idle_at = now   # the latest time the arm came to rest
            was_idle = idle
            time.sleep(0.0005)


def summary(values: list[float]) -> str:
    if not values:
        return "no samples"
    med = statistics.median(values)
    return (f"median {med * 1000:6.1f} ms  min {min(values) * 1000:6.1f}  max "
            f"{max(values) * 1000:6.1f}  ({med / FRAME_S:.2f} frames)")


async def until(pilot, condition, timeout_s: float = 5.0) -> bool:
    deadline = time.perf_counter() + timeout_s
    while time.perf_counter() < deadline:
        if condition():
            return True
        await pilot.pause(0.002)
    return condition()


class BareApp(App):
    """The reference: a key pushes the same confirmation box, nothing else."""

    BINDINGS = [Binding("right", "ask", "ask")]

    def action_ask(self) -> None:
        self.push_screen(ConfirmMoveScreen(LINES, title="Confirm before the arm moves"))


async def bare_key_to_box(runs: int, marks: Marks) -> list[float]:
    out = []
    app = BareApp()
    async with app.run_test(size=SIZE) as pilot:
        for _ in range(runs):
            marks.shown.clear()
            t0 = time.perf_counter()
            await pilot.press("right")
            await until(pilot, lambda: marks.shown)
            out.append(marks.shown[0] - t0)
            await pilot.press("n")
            await pilot.pause(0.05)
    return out


async def console_key_to_box(runs: int, marks: Marks) -> tuple[float, list[float]]:
    arm = builtin_arm("planar-bench")
    gate = Interlock.open(arm, "sim", journal=False)
    try:
        app = make_app(arm, gate)
        async with app.run_test(size=SIZE) as pilot:
            await until(pilot, lambda: app.state is not None)
            await pilot.press("e")
            await until(pilot, app.ready)
            first = None
            out = []
            for n in range(runs + 1):
                marks.shown.clear()
                t0 = time.perf_counter()
                await pilot.press("right")
                await until(pilot, lambda: marks.shown)
                if n == 0:
                    first = marks.shown[0] - t0
                else:
                    out.append(marks.shown[0] - t0)
                await pilot.press("n")
                await until(pilot, lambda: app.busy is None)
            return first, out
    finally:
        gate.close()


async def console_session(runs: int) -> tuple[list[float], list[float]]:
    arm = builtin_arm("planar-bench")
    gate = Interlock.open(arm, "sim", journal=False)
    watch = Watch(gate)
    try:
        app = make_app(arm, gate)
        async with app.run_test(size=SIZE) as pilot:
            await until(pilot, lambda: app.state is not None)
            await pilot.press("e")
            await until(pilot, app.ready)
            await pilot.press("right")   # 1 mm steps, alternating: they stay in the envelope
            await until(pilot, lambda: isinstance(app.screen, ConfirmMoveScreen))
            await pilot.press("y")
            await until(pilot, lambda: app.busy is None and app.session_view() is not None)
            watch.thread.start()
            setpoint = []
            release = []
            for n in range(runs):
                key = "right" if n % 2 == 0 else "left"
                await until(pilot, lambda: app.busy is None and gate.state().queued == 0)
                await pilot.pause(0.05)
                watch.moves_at.clear()
                t0 = time.perf_counter()
                await pilot.press(key)
                await until(pilot, lambda: watch.moves_at)
                if watch.moves_at:
                    setpoint.append(watch.moves_at[0][0] - t0)
                await until(pilot, lambda: app.busy is None and gate.state().queued == 0)
                await pilot.pause(0.05)
                # hold: ~30 Hz repeats for 0.3 s, then release
                for _ in range(9):
                    last = time.perf_counter()   # the last repeat's key
                    await pilot.press(key)
                    await pilot.pause(1 / 30)
                await until(pilot, lambda: app.busy is None and gate.state().queued == 0, 3.0)
                await pilot.pause(0.02)
                if watch.idle_at is not None:   # 0 when the last step ended before the release
                    release.append(max(0.0, watch.idle_at - last))
                if app.session_view() is None or isinstance(app.screen, ConfirmMoveScreen):
                    print(f"run {n}: the session ended ({gate.jog_session_ended()}); stopping")
                    break
            return setpoint, release
    finally:
        watch.stop.set()
        gate.close()


async def main(runs: int) -> None:
    marks = Marks()
    marks.install()
    bare = await bare_key_to_box(runs, marks)
    first, reused = await console_key_to_box(runs, marks)
    setpoint, release = await console_session(runs)
    print(f"runs: {runs}; one frame = {FRAME_S * 1000:.1f} ms; dead-man window "
          f"{DEADMAN_S * 1000:.0f} ms")
    print(f"key to box, bare Textual app:         {summary(bare)}")
    print(f"key to box, console, first question:  {first * 1000:6.1f} ms")
    print(f"key to box, console, box reused:      {summary(reused)}")
    if bare and reused:
        print(f"  ratio console (reused) / bare app:  "
              f"{statistics.median(reused) / statistics.median(bare):.2f}x")
    print(f"key to first setpoint, in a session:  {summary(setpoint)}")
    print(f"release to stop (held key, 30 Hz):    {summary(release)}")
    if release:
        print(f"  ratio release-to-stop / window:     "
              f"{statistics.median(release) / DEADMAN_S:.2f} (max {max(release) / DEADMAN_S:.2f})")


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=15)
    asyncio.run(main(parser.parse_args().runs))
