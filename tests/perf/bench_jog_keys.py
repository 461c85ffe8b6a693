"""Benchmark of the console's keys, headless with Textual's App.run_test and Pilot (run by hand).

    python tests/perf/bench_jog_keys.py [--runs 15] [--profile]

What is timed is what a person sees: from the moment the key event exists (the
``events.Key`` the pilot hands to the app's driver, its own time stamp) to the moment the
first frame that shows the key's answer is handed to the driver for output. The headless
driver writes nothing, so the benchmark wraps ``App._display``: each compositor update is
turned into the terminal text a real driver would get (``render_segments``), time-stamped,
and searched for the answer's words. The pilot's own round trip (from the call to
``pilot.press`` to that frame) is printed beside it.

Prints, from one run, median / min / max and the ratio to one 16.7 ms frame (60 Hz) of
- a jog key with no jog session, until the frame with the confirmation box (first box,
  composed; later ones, the box reused), against the same box pushed by a key in a bare
  Textual app measured the same way in the same run (ratio console / bare);
- a step-size key (3 / 2) until the frame with the new step in the status line;
- the branch key (b) until the frame saying which branch was chosen;
- a jog key inside a jog session until the simulated controller takes the first MOVE of
  the step, and until the frame showing the step as the motion in progress;
- release to stop: a key repeated at ~30 Hz, then no more repeats; from the last key
  until the simulated arm has nothing queued and is not moving (the dead-man window is
  DEADMAN_S).
Asserts nothing. ``--profile`` also prints, per key, where the time between key and
frame went (cProfile of the UI thread, and of the motion worker thread).
"""

from __future__ import annotations

import argparse
import asyncio
import cProfile
import io
import os
import pstats
import random
import statistics
import threading
import time

from textual._compositor import CompositorUpdate
from textual.app import App
from textual.binding import Binding
from textual.drivers.headless_driver import HeadlessDriver
from textual import events

from benchjog.console.cell.armfile import builtin_arm
from benchjog.console.tui.app import BenchjogApp, make_app
from benchjog.console.tui.screens.confirm import ConfirmMoveScreen
from benchjog.drivers.interlock import Interlock
from benchjog.drivers.jog_session import DEADMAN_S

FRAME_S = 1 / 60
# Textual draws on a fixed 60 Hz grid (TEXTUAL_FPS); the pauses between keys here are
# whole numbers of frames, so every key would land at the same point of that grid. A
# random wait of up to one frame before each timed key spreads them over it, as a
# person's keys are (seeded: the same spread every run).
PHASE = random.Random(16)
SIZE = (120, 40)
LINES = [f"line {n} of a confirmation" for n in range(14)]
SHOWN = int(os.environ.get("BENCH_PROFILE_LINES", "14"))   # lines per profile
BOX_WORDS = "before the arm moves"   # in both titles: the bare app's and the console's


class Frames:
    """Key events and frames, time-stamped on one clock (time.monotonic, the clock of
    Textual's event stamps). Optionally profiles the UI thread from a key to its frame."""

    def __init__(self):
        self.key_at: float | None = None
        self.frames: list[tuple[float, str]] = []
        self.profile: cProfile.Profile | None = None
        self.profiling = False

    def install(self) -> None:
        frames = self
        send = HeadlessDriver.send_message
        display = App._display

        def send_message(driver, message) -> None:
            if isinstance(message, events.Key):
                frames.key_at = message.time
                if frames.profile is not None and not frames.profiling:
                    frames.profiling = True
                    frames.profile.enable()
            send(driver, message)

        def _display(app, screen, renderable) -> None:
            if isinstance(renderable, CompositorUpdate) and app._running and not app._closed:
                text = renderable.render_segments(app.console)   # what a terminal would get
                frames.frames.append((time.monotonic(), text))
            display(app, screen, renderable)

        HeadlessDriver.send_message = send_message
        App._display = _display

    def clear(self) -> None:
        self.key_at = None
        self.frames.clear()

    def shown_at(self, words: str) -> float | None:
        for at, text in self.frames:
            if words in text:
                return at
        return None

    def stop_profile(self) -> None:
        if self.profile is not None and self.profiling:
            self.profile.disable()
            self.profiling = False


class Setpoints(list):
    """The simulated controller's command record, stamping each MOVE as it is taken."""

    def __init__(self, *args):
        super().__init__(*args)
        self.moves_at: list[float] = []

    def append(self, command) -> None:
        if command and command[0] == "MOVE":
            self.moves_at.append(time.monotonic())
        super().append(command)


class IdleWatch:
    """A thread that stamps when the simulated arm comes to rest (nothing queued, not
    moving); it polls only while ``active`` is set, so it takes no time from the keys
    that are timed."""

    def __init__(self, gate):
        self.gate = gate
        self.stop = threading.Event()
        self.active = threading.Event()
        self.idle_at: float | None = None
        self.thread = threading.Thread(target=self._run, daemon=True)
        self.thread.start()

    def _run(self) -> None:
        was_idle = True
        while not self.stop.is_set():
            if not self.active.wait(0.05):
                was_idle = True
                continue
            state = self.gate.state()
            now = time.monotonic()
            idle = state.queued == 0 and state.mode.value != "MOVING"
            if idle and not was_idle:
                self.idle_at = now   # the latest time the arm came to rest
            was_idle = idle
            time.sleep(0.0005)


def summary(values: list[float], bare: list[float] | None = None) -> str:
    if not values:
        return "no samples"
    med = statistics.median(values)
    words = (f"median {med * 1000:6.1f} ms  min {min(values) * 1000:6.1f}  max "
             f"{max(values) * 1000:6.1f}  ({med / FRAME_S:.2f} frames; "
             f"{sum(v <= FRAME_S for v in values)}/{len(values)} within one)")
    if bare:
        words += f"  {med / statistics.median(bare):.2f}x bare"
    return words


async def until(pilot, condition, timeout_s: float = 5.0) -> bool:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if condition():
            return True
        await pilot.pause(0.002)
    return condition()


def repeat_key(app, key: str) -> None:
    """A terminal's key repeat: the key event handed to the driver, without the pilot's
    wait for an idle process after each key (which lasts up to 2 s while the arm moves
    and the idle watch polls, so that a pilot's "30 Hz" would be one key per 2 s)."""
    event = events.Key(key, None)
    event.set_sender(app)
    app._driver.send_message(event)


class Timing:
    """Key-to-frame (from the key event) and pilot-to-frame (from the press call)."""

    def __init__(self):
        self.key: list[float] = []
        self.pilot: list[float] = []

    async def press(self, pilot, frames: Frames, key: str, words: str) -> float | None:
        await pilot.pause(PHASE.uniform(0.0, FRAME_S))   # a person's key, not in step with frames
        frames.clear()
        t0 = time.monotonic()
        await pilot.press(key)
        await until(pilot, lambda: frames.shown_at(words) is not None)
        at = frames.shown_at(words)
        frames.stop_profile()
        if at is None or frames.key_at is None:
            print(f"  no frame showed {words!r} after {key}")
            return None
        self.key.append(at - frames.key_at)
        self.pilot.append(at - t0)
        return at - frames.key_at


class BareApp(App):
    """The reference: a key pushes the same confirmation box, nothing else."""

    BINDINGS = [Binding("right", "ask", "ask")]

    def action_ask(self) -> None:
        self.push_screen(ConfirmMoveScreen(LINES, title="Confirm before the arm moves"))


async def bare_key_to_box(runs: int, frames: Frames) -> Timing:
    out = Timing()
    app = BareApp()
    async with app.run_test(size=SIZE) as pilot:
        await pilot.pause(0.1)
        for _ in range(runs):
            await out.press(pilot, frames, "right", BOX_WORDS)
            await pilot.press("n")
            await pilot.pause(0.05)
    return out


async def ready_console(pilot, app) -> None:
    await until(pilot, lambda: app.state is not None)
    await pilot.press("e")
    await until(pilot, app.ready)
    await pilot.pause(0.1)


async def console_keys(runs: int, frames: Frames) -> dict[str, Timing]:
    arm = builtin_arm("planar-bench")
    gate = Interlock.open(arm, "sim", journal=False)
    out = {name: Timing() for name in ("first", "box", "step", "branch")}
    try:
        app = make_app(arm, gate)
        async with app.run_test(size=SIZE) as pilot:
            await ready_console(pilot, app)
            for n in range(runs + 1):
                await out["first" if n == 0 else "box"].press(pilot, frames, "right", BOX_WORDS)
                await pilot.press("n")
                await until(pilot, lambda: app.busy is None)
                await pilot.pause(0.05)
            for n in range(runs):
                key, words = ("3", "step 10 mm") if n % 2 == 0 else ("2", "step 1 mm")
                await out["step"].press(pilot, frames, key, words)
                await pilot.pause(0.05)
            for n in range(runs + 1):
                branch = app.branch or app.branch_of(app.actual)
                words = f"{branch.other()} chosen"
                await out["branch"].press(pilot, frames, "b", words)
                await pilot.pause(0.05)
            out["branch"].key.pop(0)   # the first b also makes the target: not a repeat
            out["branch"].pilot.pop(0)
            return out
    finally:
        gate.close()


async def console_session(runs: int, frames: Frames) -> dict[str, object]:
    arm = builtin_arm("planar-bench")
    gate = Interlock.open(arm, "sim", journal=False)
    sim = gate.sim._driver   # the simulated controller (the benchmark only watches it)
    sim.commands = Setpoints(sim.commands)
    watch = IdleWatch(gate)
    shown = Timing()
    setpoint: list[float] = []
    release: list[float] = []
    try:
        app = make_app(arm, gate)
        async with app.run_test(size=SIZE) as pilot:
            await ready_console(pilot, app)
            await pilot.press("right")   # 1 mm steps, alternating: they stay in the envelope
            await until(pilot, lambda: isinstance(app.screen, ConfirmMoveScreen))
            await pilot.press("y")
            await until(pilot, lambda: app.busy is None and app.session_view() is not None)
            for n in range(runs):
                key = "right" if n % 2 == 0 else "left"
                words = f"motion: jog x {'+' if key == 'right' else '-'}1 mm"
                await until(pilot, lambda: app.busy is None and gate.state().queued == 0)
                await pilot.pause(0.05)
                sim.commands.moves_at.clear()
                await shown.press(pilot, frames, key, words)
                key_at = frames.key_at
                await until(pilot, lambda: sim.commands.moves_at)
                if sim.commands.moves_at and key_at is not None:
                    setpoint.append(sim.commands.moves_at[0] - key_at)
                await until(pilot, lambda: app.busy is None and gate.state().queued == 0)
                await pilot.pause(0.05)
                # hold: ~30 Hz repeats for 0.3 s, then release
                watch.idle_at = None
                watch.active.set()
                for _ in range(9):
                    last = time.monotonic()   # the last repeat's key
                    repeat_key(app, key)
                    await asyncio.sleep(1 / 30)
                await until(pilot, lambda: app.busy is None and gate.state().queued == 0, 3.0)
                await pilot.pause(0.02)
                watch.active.clear()
                if watch.idle_at is not None:   # 0 when the last step ended before the release
                    release.append(max(0.0, watch.idle_at - last))
                if app.session_view() is None or isinstance(app.screen, ConfirmMoveScreen):
                    print(f"run {n}: the session ended ({gate.jog_session_ended()}); stopping")
                    break
            return {"setpoint": setpoint, "shown": shown, "release": release}
    finally:
        watch.stop.set()
        gate.close()


async def profile_keys(frames: Frames, runs: int) -> None:
    """cProfile of the UI thread (key event to its frame) and of the motion worker, per key."""
    worker_profile: dict[str, cProfile.Profile | None] = {"p": None}
    run_motion = BenchjogApp._run_motion

    def profiled_run_motion(app, request):
        prof = worker_profile["p"]
        if prof is None:
            return run_motion(app, request)
        prof.enable()
        try:
            return run_motion(app, request)
        finally:
            prof.disable()

    BenchjogApp._run_motion = profiled_run_motion
    arm = builtin_arm("planar-bench")
    gate = Interlock.open(arm, "sim", journal=False)
    try:
        app = make_app(arm, gate)
        async with app.run_test(size=SIZE) as pilot:
            await ready_console(pilot, app)
            await pilot.press("right")
            await pilot.press("n")
            await until(pilot, lambda: app.busy is None)

            async def profile(name: str, presses) -> None:
                ui, work = cProfile.Profile(), cProfile.Profile()
                timing = Timing()
                for key, words, after in presses:
                    frames.profile, worker_profile["p"] = ui, work
                    await timing.press(pilot, frames, key, words)
                    frames.profile = worker_profile["p"] = None
                    await after()
                print(f"\n== {name}: key to frame, profiler overhead included: {summary(timing.key)}")
                for label, prof in (("UI thread", ui), ("motion worker", work)):
                    if not prof.getstats():
                        continue
                    for order in ("tottime", "cumulative"):
                        buf = io.StringIO()
                        pstats.Stats(prof, stream=buf).sort_stats(order).print_stats(SHOWN)
                        print(f"-- {label}, {len(presses)} keys, by {order}:")
                        print("\n".join(line for line in buf.getvalue().splitlines()[6:]
                                        if line))

            async def answer_no():
                await pilot.press("n")
                await until(pilot, lambda: app.busy is None)
                await pilot.pause(0.05)

            async def settle():
                await pilot.pause(0.05)

            await profile("jog key, box", [("right", BOX_WORDS, answer_no)] * runs)
            await profile("step key", [(("3", "step 10 mm") if n % 2 == 0 else ("2", "step 1 mm"))
                                       + (settle,) for n in range(runs)])
            await app.run_action("screen.branch")
            await pilot.pause(0.1)
            branches = []
            branch = app.branch
            for _ in range(runs):
                branch = branch.other()
                branches.append(("b", f"{branch} chosen", settle))
            await profile("branch key", branches)
            await app.run_action("screen.branch")   # back where it was
            await pilot.pause(0.1)
            app.clear_target()
            await pilot.press("right")
            await until(pilot, lambda: isinstance(app.screen, ConfirmMoveScreen))
            await pilot.press("y")
            await until(pilot, lambda: app.busy is None and app.session_view() is not None)

            async def step_done():
                await until(pilot, lambda: app.busy is None and gate.state().queued == 0)
                await pilot.pause(0.05)

            await profile("key in a jog session (frame showing the step)",
                          [(k, f"motion: jog x {'+' if k == 'right' else '-'}1 mm", step_done)
                           for k in ("right", "left") * (runs // 2)])
    finally:
        BenchjogApp._run_motion = run_motion
        gate.close()


def load_words() -> str:
    one, five, fifteen = os.getloadavg()
    return f"load average {one:.2f} {five:.2f} {fifteen:.2f} on {os.cpu_count()} cores"


async def main(runs: int, profile: bool, profile_only: bool = False) -> None:
    frames = Frames()
    frames.install()
    if profile_only:
        await profile_keys(frames, max(4, runs // 2 * 2))
        return
    before = load_words()
    bare = await bare_key_to_box(runs, frames)
    keys = await console_keys(runs, frames)
    session = await console_session(runs, frames)
    print(f"runs: {runs}; one frame = {FRAME_S * 1000:.1f} ms; dead-man window "
          f"{DEADMAN_S * 1000:.0f} ms; {before} (before), {load_words()} (after)")
    print("key event to the frame that shows the answer (handed to the driver):")
    print(f"  box, bare Textual app:            {summary(bare.key)}")
    print(f"  box, console, first (composed):   {keys['first'].key[0] * 1000:6.1f} ms")
    print(f"  box, console, reused:             {summary(keys['box'].key, bare.key)}")
    print(f"  step key (3 / 2):                 {summary(keys['step'].key, bare.key)}")
    print(f"  branch key (b):                   {summary(keys['branch'].key, bare.key)}")
    print(f"  jog key in a session (shown):     {summary(session['shown'].key, bare.key)}")
    print("key event to the first setpoint taken by the simulated controller:")
    print(f"  jog key in a session:             {summary(session['setpoint'])}")
    print("pilot.press() call to the same frame (the pilot's round trip included):")
    print(f"  box, bare Textual app:            {summary(bare.pilot)}")
    print(f"  box, console, reused:             {summary(keys['box'].pilot, bare.pilot)}")
    print(f"  step key:                         {summary(keys['step'].pilot, bare.pilot)}")
    print(f"  branch key:                       {summary(keys['branch'].pilot, bare.pilot)}")
    release = session["release"]
    print(f"release to stop (held key, 30 Hz):  {summary(release)}")
    if release:
        print(f"  ratio release-to-stop / window:   "
              f"{statistics.median(release) / DEADMAN_S:.2f} (max {max(release) / DEADMAN_S:.2f})")
    if profile:
        await profile_keys(frames, max(4, runs // 2 * 2))


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=15)
    parser.add_argument("--profile", action="store_true",
                        help="also profile what runs between each key and its frame")
    parser.add_argument("--profile-only", action="store_true", help="only the profiles")
    args = parser.parse_args()
    asyncio.run(main(args.runs, args.profile, args.profile_only))
