"""Jog sessions at the gate: one yes for a run of small jog steps inside approved bounds;
everything outside them, and every stop, reset, latch, timeout or other motion, ends the
session so that the next jog asks again.

The checks use an independent picture of the arm: joint values from the controller counts
with the arm file's own numbers (read with tomllib) and the closed-form 2R forward
kinematics (Lynch & Park, Modern Robotics, 2017, section 4.1, from memory), not the
project's kinematics."""

from __future__ import annotations

import math
import threading
import time
import tomllib
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from benchjog.console.cell.armfile import builtin_arm
from benchjog.drivers.interlock import Confirmer, Interlock
from benchjog.drivers.jog_session import (DEADMAN_S, SessionError, SessionView,
                                          TEACH_SPEED_MAX_MM_S)
from benchjog.drivers.journal import Journal, read_journal

from console_helpers import count_calls

ROOT = Path(__file__).resolve().parents[1]
ARM = builtin_arm("planar-bench")
TABLE = tomllib.loads((ROOT / "console/cell/arms/planar-bench.toml").read_text())


class Answer(Confirmer):
    def __init__(self, yes: bool):
        self.yes, self.asked, self.tokens = yes, 0, []

    def confirm(self, proposal) -> bool:
        self.asked += 1
        self.tokens.append(proposal.token)
        return self.yes


class Clock:
    """The interlock's clock, moved by hand (the simulated arm keeps real time)."""

    def __init__(self):
        import time
        self.base, self.offset, self._real = time.monotonic(), 0.0, time.monotonic

    def __call__(self) -> float:
        return self._real() + self.offset

    def advance(self, seconds: float) -> None:
        self.offset += seconds


def joints_deg_from_counts(counts) -> list[float]:
    # the arm file's calibration: value = zero + direction * counts / counts_per_unit
    return [j["zero"] + j["direction"] * c / j["counts_per_unit"]
            for j, c in zip(TABLE["joints"], counts)]


def xy_from_deg(j1: float, j2: float) -> tuple[float, float]:
    # 2R forward kinematics (Lynch & Park, Modern Robotics, 2017, section 4.1, from memory)
    a1, a2 = TABLE["joints"][0]["a"], TABLE["joints"][1]["a"]
    t1, t2 = math.radians(j1), math.radians(j2)
    return (a1 * math.cos(t1) + a2 * math.cos(t1 + t2), a1 * math.sin(t1) + a2 * math.sin(t1 + t2))


def moves(gate) -> list[tuple]:
    return [c for c in gate.sim.commands if c[0] == "MOVE"]


def tool_xy(gate) -> tuple[float, float]:
    counts = moves(gate)[-1][2] if moves(gate) else (0, 0)
    return xy_from_deg(*joints_deg_from_counts(counts))


@pytest.fixture
def clock():
    return Clock()


@pytest.fixture
def gate(tmp_path, clock):
    g = Interlock.open(ARM, "sim", journal=Journal(tmp_path / "j.jsonl"), time_scale=50.0,
                       clock=clock)
    g.enable()
    yield g
    g.close()


def start(gate, axis="x", delta=1.0, step=1.0, yes=True, **options):
    proposal = gate.propose_jog_session(axis, delta, step=step, **options)
    answer = Answer(yes)
    result = gate.execute_jog_session(proposal, answer)
    return proposal, answer, result


def kinds(gate) -> list[str]:
    assert gate.wait_journal(5.0)  # the journal is written in the background
    return [e["kind"] for e in read_journal(gate.journal_path)]


def test_ten_one_mm_jogs_take_one_confirmation(gate):
    x0, y0 = xy_from_deg(*joints_deg_from_counts((0, 0)))
    _, answer, result = start(gate)
    assert result.completed and answer.asked == 1
    for _ in range(9):
        step = gate.session_jog("x", 1.0)
        assert step.ended is None and step.result.completed, step
    assert answer.asked == 1
    x, y = tool_xy(gate)
    assert x - x0 == pytest.approx(10.0, abs=0.2) and y == pytest.approx(y0, abs=0.2)
    view = gate.jog_session()
    assert isinstance(view, SessionView) and view.steps == 9
    assert gate.wait_journal(5.0)
    entries = read_journal(gate.journal_path)
    assert [e["kind"] for e in entries].count("session-start") == 1
    assert [e["kind"] for e in entries].count("session-step") == 9


def test_a_no_opens_no_session_and_moves_nothing(gate):
    _, answer, result = start(gate, yes=False)
    assert answer.asked == 1 and result.outcome == "cancelled"
    step = gate.session_jog("x", 1.0)
    assert step.result is None and step.ended
    assert moves(gate) == [] and gate.jog_session() is None
    assert "session-start" not in kinds(gate)


def test_the_confirmation_shows_the_bounds(gate):
    proposal = gate.propose_jog_session("x", 1.0, step=1.0, box_mm=20.0, idle_s=15.0)
    text = "\n".join(gate.jog_session_lines(proposal))
    x0, y0 = xy_from_deg(*joints_deg_from_counts((0, 0)))
    assert f"x {x0 - 20:.1f}..{x0 + 20:.1f}" in text and f"y {y0 - 20:.1f}..{y0 + 20:.1f}" in text
    for words in ("elbow-", "step at most 1", "250 mm/s", "15 s", "shoulder", "elbow "):
        assert words in text, words


def test_the_arm_file_sets_the_envelope_and_the_idle_timeout(tmp_path, clock):
    # a cramped cell: the arm file asks for +/-8 mm and 12 s (README, "The arm file")
    from benchjog.console.cell.armfile import load_arm

    text = (ROOT / "console/cell/arms/planar-bench.toml").read_text()
    path = tmp_path / "cramped.toml"
    path.write_text(text.replace("[arm]\n", "[arm]\njog_session_box = 8.0\njog_session_idle = 12.0\n", 1))
    arm = load_arm(path)
    g = Interlock.open(arm, "sim", journal=False, time_scale=50.0, clock=clock)
    try:
        g.enable()
        proposal = g.propose_jog_session("x", 1.0, step=1.0)
        text = "\n".join(g.jog_session_lines(proposal))
        x0, y0 = xy_from_deg(*joints_deg_from_counts((0, 0)))
        assert f"x {x0 - 8:.1f}..{x0 + 8:.1f}" in text and "12 s" in text
        assert g.execute_jog_session(proposal, Answer(True)).completed
        for _ in range(7):
            assert g.session_jog("x", 1.0).ended is None
        step = g.session_jog("x", 1.0)            # the ninth mm leaves the +/-8 mm box
        assert step.result is None and step.ended
        assert tool_xy(g)[0] - x0 == pytest.approx(8.0, abs=0.2)
    finally:
        g.close()


@pytest.mark.parametrize("interrupt, words", [
    (lambda g, c: g.stop(), "stop"),
    (lambda g, c: g.disable(), "drives"),
    (lambda g, c: (g.sim.inject_fault("DRIVE", 1), g.sim.release_estop(), g.reset(), g.enable()),
     "reset"),
    (lambda g, c: g.sim.inject_estop(), "state"),
    (lambda g, c: c.advance(31.0), "idle"),
    (lambda g, c: g.propose_jog("y", 1.0), "another motion"),
    (lambda g, c: g.end_jog_session("the branch was changed"), "branch"),
])
def test_interruptions_end_the_session_and_the_next_jog_asks(gate, clock, interrupt, words):
    start(gate)
    assert gate.session_jog("x", 1.0).result.completed
    sent = len(moves(gate))
    interrupt(gate, clock)
    step = gate.session_jog("x", 1.0)
    assert step.result is None and step.ended
    assert words in gate.jog_session_ended(), gate.jog_session_ended()
    assert len(moves(gate)) == sent
    assert gate.jog_session() is None
    assert kinds(gate).count("session-end") == 1


@pytest.mark.parametrize("axis, delta, words", [
    ("j1", math.radians(1.0), "frame"),
    ("x", 5.0, "larger"),
    ("y", 4.0, "larger"),
])
def test_a_step_beyond_the_approval_ends_the_session(gate, axis, delta, words):
    start(gate)
    sent = len(moves(gate))
    step = gate.session_jog(axis, delta)
    assert step.result is None and words in step.ended
    assert len(moves(gate)) == sent


def test_leaving_the_envelope_ends_the_session_before_the_step_moves(gate):
    start(gate, delta=2.0, step=2.0, box_mm=5.0)
    x0 = tool_xy(gate)[0] - 2.0
    done = 0
    while True:
        step = gate.session_jog("x", 2.0)
        if step.ended:
            break
        done += 1
    assert done == 1 and "envelope" in step.ended    # 2 + 2 mm fit in 5 mm, 6 mm does not
    assert tool_xy(gate)[0] - x0 == pytest.approx(4.0, abs=0.2)


def test_the_session_speed_cap_holds_and_cannot_exceed_the_teaching_speed(gate):
    start(gate, step=1.0, delta=1.0, speed_cap_mm_s=20.0)
    for _ in range(3):
        assert gate.session_jog("y", -1.0).result.completed
    previous = (0, 0)
    for command in moves(gate):
        a = xy_from_deg(*joints_deg_from_counts(previous))
        b = xy_from_deg(*joints_deg_from_counts(command[2]))
        # a straight chord under-estimates the arc only slightly; 5 % covers it and rounding
        assert math.dist(a, b) / (command[1] / 1000.0) <= 20.0 * 1.05
        previous = command[2]
    with pytest.raises(SessionError):
        gate.propose_jog_session("x", 1.0, step=1.0, speed_cap_mm_s=TEACH_SPEED_MAX_MM_S + 1)
    with pytest.raises(SessionError):
        gate.propose_jog_session("x", 1.0, step=float("nan"))


def test_a_step_longer_than_the_dead_man_window_runs_alone(gate):
    proposal = gate.propose_jog_session("x", 40.0, step=40.0, box_mm=50.0)
    assert proposal.ok and proposal.duration_s > DEADMAN_S
    assert "single step" in gate.jog_session_lines(proposal)[0]
    answer = Answer(True)
    assert gate.execute_jog_session(proposal, answer).completed and answer.asked == 1
    assert gate.jog_session() is None


def test_a_plain_proposal_still_asks_while_a_session_runs(gate):
    start(gate)
    proposal = gate.propose_jog("x", 1.0)
    sent = len(moves(gate))
    no = Answer(False)
    assert gate.execute(proposal, no).outcome == "cancelled" and no.asked == 1
    assert len(moves(gate)) == sent


def test_a_refused_step_moves_nothing_and_keeps_the_limits(gate):
    """A session near a soft limit: the gate's own checks still refuse steps past it."""
    elbow = gate.state().joints[1]
    assert gate.execute(gate.propose_joints((math.radians(-149.0), elbow)), Answer(True)).completed
    start(gate, axis="j1", delta=math.radians(-0.1), step=10.0, box_mm=50.0)
    results = [gate.session_jog("j1", math.radians(-0.25)) for _ in range(4)]
    outcomes = [r.result.outcome for r in results]
    assert outcomes[:2] == ["done", "refused"] and all(r.ended is None for r in results)
    for command in moves(gate):
        assert joints_deg_from_counts(command[2])[0] >= TABLE["joints"][0]["min"] + 0.5 - 1e-9


# -- steps planned ahead of their key (prepare_session_jog) ---------------------------------
PLAN_JOG = "benchjog.drivers.interlock.plan_jog"   # the gate's jog planner (it still plans)


def test_a_step_planned_ahead_moves_exactly_as_one_planned_at_its_key(tmp_path, clock,
                                                                      monkeypatch):
    """Two gates walk the same steps; one has each step planned ahead. The controller
    takes the very same setpoints from both, and the ahead one plans nothing at the key."""
    twin = Interlock.open(ARM, "sim", journal=False, time_scale=50.0, clock=clock)
    ahead = Interlock.open(ARM, "sim", journal=False, time_scale=50.0, clock=clock)
    planned = count_calls(monkeypatch, PLAN_JOG)
    try:
        for g in (twin, ahead):
            g.enable()
            assert g.execute_jog_session(g.propose_jog_session("x", 1.0, step=1.0),
                                         Answer(True)).completed
        walk = [("x", 1.0), ("x", 1.0), ("y", -1.0), ("x", -1.0), ("y", 1.0)]
        for axis, delta in walk:
            assert twin.session_jog(axis, delta).result.completed
            assert ahead.prepare_session_jog(axis, -delta)     # a guess that is not taken
            assert ahead.prepare_session_jog(axis, delta)
            before = planned[0]
            assert ahead.session_jog(axis, delta).result.completed
            assert planned[0] == before                      # the key planned nothing
        assert moves(ahead) == moves(twin)
    finally:
        twin.close()
        ahead.close()
    x0, y0 = xy_from_deg(*joints_deg_from_counts((0, 0)))
    x, y = tool_xy(ahead)
    assert x - x0 == pytest.approx(2.0, abs=0.2) and y - y0 == pytest.approx(0.0, abs=0.2)


def test_a_session_offered_ahead_reads_as_one_worked_out_at_its_key(clock, monkeypatch):
    """The first step planned ahead also has its session worked out (bounds, and why a
    step cannot open one); the question then reads exactly as on a gate that worked it
    all out at the key, and the key computes no bounds."""
    twin = Interlock.open(ARM, "sim", journal=False, time_scale=50.0, clock=clock)
    ahead = Interlock.open(ARM, "sim", journal=False, time_scale=50.0, clock=clock)
    made = count_calls(monkeypatch, "benchjog.drivers.interlock.make_bounds")
    try:
        for g in (twin, ahead):
            g.enable()
        # a step that fits, a larger one, and one too long for a session (single step)
        for axis, delta, step in (("x", 1.0, 1.0), ("y", -10.0, 10.0), ("x", 40.0, 40.0)):
            assert ahead.prepare_session_jog(axis, delta, step=step)
            before = made[0]
            offered = ahead.propose_jog_session(axis, delta, step=step)
            assert made[0] == before
            reference = twin.propose_jog_session(axis, delta, step=step)
            assert ahead.jog_session_lines(offered) == twin.jog_session_lines(reference)
            assert offered.lines(ARM) == reference.lines(ARM)
        assert "single step" in ahead.jog_session_lines(offered)[0]
    finally:
        twin.close()
        ahead.close()


def test_a_step_planned_from_a_pose_the_arm_has_left_is_planned_again(gate, monkeypatch):
    start(gate)
    x0, y0 = tool_xy(gate)
    assert gate.prepare_session_jog("x", 1.0)
    planned = count_calls(monkeypatch, PLAN_JOG)
    assert gate.session_jog("y", 1.0).result.completed          # the arm moves elsewhere
    assert gate.session_jog("x", 1.0).result.completed
    assert planned[0] == 2                                      # both planned at their key
    x, y = tool_xy(gate)
    assert x - x0 == pytest.approx(1.0, abs=0.2) and y - y0 == pytest.approx(1.0, abs=0.2)


def test_a_step_planned_ahead_still_ends_the_session_at_the_envelope(gate):
    start(gate, delta=2.0, step=2.0, box_mm=5.0)
    assert gate.session_jog("x", 2.0).result.completed          # 4 mm of 5
    sent = len(moves(gate))
    assert gate.prepare_session_jog("x", 2.0)                    # planned: 6 mm, outside
    step = gate.session_jog("x", 2.0)
    assert step.result is None and "envelope" in step.ended
    assert len(moves(gate)) == sent and gate.jog_session() is None


def test_a_first_step_planned_ahead_still_asks_and_a_no_moves_nothing(gate, monkeypatch):
    """With no session, the step planned ahead is the first step a jog key offers: the
    key plans nothing, the question is asked all the same, and a no moves nothing."""
    assert gate.prepare_session_jog("x", 1.0)
    planned = count_calls(monkeypatch, PLAN_JOG)
    proposal = gate.propose_jog_session("x", 1.0, step=1.0)
    assert planned[0] == 0 and proposal.ok
    answer = Answer(False)
    assert gate.execute_jog_session(proposal, answer).outcome == "cancelled"
    assert answer.asked == 1 and moves(gate) == [] and gate.jog_session() is None


def test_nothing_is_planned_ahead_while_the_arm_moves(clock):
    g = Interlock.open(ARM, "sim", journal=False, time_scale=0.5, clock=clock)  # ~0.2 s move
    runner = threading.Thread(target=lambda: g.execute(g.propose_jog("x", 10.0), Answer(True)))
    try:
        g.enable()
        runner.start()
        deadline = time.monotonic() + 5.0
        while not g.state().queued and time.monotonic() < deadline:
            time.sleep(0.001)
        assert g.state().queued and not g.prepare_session_jog("x", 1.0)
    finally:
        runner.join(10.0)
        g.close()


# -- random sequences with an independent checker ------------------------------------------
OPS = st.lists(st.one_of(
    st.tuples(st.just("start"), st.sampled_from(["x", "y", "j1", "j2"]),
              st.sampled_from([-1, 1]), st.sampled_from([0.1, 1.0, 10.0]), st.booleans()),
    st.tuples(st.just("jog"), st.sampled_from(["x", "y", "j1", "j2"]), st.sampled_from([-1, 1]),
              st.sampled_from([0.1, 1.0, 10.0]), st.booleans()),
    st.tuples(st.just("ahead"), st.sampled_from(["x", "y", "j1", "j2"]), st.sampled_from([-1, 1]),
              st.sampled_from([0.1, 1.0, 10.0]), st.booleans()),
    st.tuples(st.sampled_from(["stop", "branch", "idle", "estop", "fault", "reset", "move"]),
              st.just("x"), st.just(1), st.just(1.0), st.booleans()),
), min_size=1, max_size=14)

BOX_MM = 12.0
ALLOW_MM = 0.3   # count rounding (1/40 deg) at full reach, with room


def _delta(axis: str, sign: int, step: float) -> float:
    return sign * (math.radians(step) if axis.startswith("j") else step)


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow,
                                                                    HealthCheck.function_scoped_fixture])
@given(OPS)
def test_random_session_sequences_never_leave_the_envelope_or_move_without_a_yes(tmp_path, ops):
    clock = Clock()
    path = tmp_path / f"fuzz-{len(list(tmp_path.iterdir()))}.jsonl"
    g = Interlock.open(ARM, "sim", journal=Journal(path), time_scale=200.0, clock=clock)
    # the checker's own model: which tokens a person said yes to, and the session it believes
    # is open (its box centre from the counts, its frame, its step); session steps it saw
    person_yes: set[int] = set()
    allowed_session_steps: dict[int, tuple] = {}
    model = None
    try:
        g.enable()
        for op, axis, sign, step, yes in ops:
            here = xy_from_deg(*(math.degrees(v) for v in g.state().joints))
            if op == "start":
                proposal = g.propose_jog_session(axis, _delta(axis, sign, step), step=step,
                                                 box_mm=BOX_MM)
                answer = Answer(yes)
                result = g.execute_jog_session(proposal, answer)
                if answer.asked and yes:
                    person_yes.add(proposal.token)
                model = None
                if yes and result.completed and proposal.duration_s <= DEADMAN_S:
                    model = (here, "joint" if axis.startswith("j") else "tool", step)
            elif op == "jog":
                out = g.session_jog(axis, _delta(axis, sign, step))
                fits = model is not None and model[1] == ("joint" if axis.startswith("j")
                                                          else "tool") and step <= model[2]
                if out.token is not None and fits:
                    allowed_session_steps[out.token] = model
                if out.ended:
                    model = None
            elif op == "ahead":   # a step planned ahead of its key: changes nothing by itself
                g.prepare_session_jog(axis, _delta(axis, sign, step))
            else:
                model = None
                if op == "stop":
                    g.stop()
                elif op == "branch":
                    g.end_jog_session("the branch was changed")
                elif op == "idle":
                    clock.advance(40.0)
                elif op == "estop":
                    g.sim.inject_estop()
                elif op == "fault":
                    g.sim.inject_fault("DRIVE", 1)
                elif op == "reset":
                    g.sim.release_estop()
                    g.reset()
                    g.enable()
                else:   # a typed move, dialog and all
                    proposal = g.propose_move((here[0] + 5.0, here[1]))
                    answer = Answer(yes)
                    g.execute(proposal, answer)
                    if answer.asked and yes:
                        person_yes.add(proposal.token)
    finally:
        g.close()
    segments = [e for e in read_journal(path) if e["kind"] == "segment"]
    commands = [c for c in g.sim.commands if c[0] == "MOVE"]
    assert len(segments) == len(commands)   # one journal line per MOVE, in order
    for entry, command in zip(segments, commands):
        token = entry["token"]
        degs = joints_deg_from_counts(command[2])
        for joint, value in zip(TABLE["joints"], degs):
            assert joint["min"] <= value <= joint["max"], (joint["name"], value)
        if token in person_yes:
            continue
        assert token in allowed_session_steps, f"segment of token {token} ran without a yes"
        centre, _, _ = allowed_session_steps[token]
        x, y = xy_from_deg(*degs)
        assert abs(x - centre[0]) <= BOX_MM + ALLOW_MM and abs(y - centre[1]) <= BOX_MM + ALLOW_MM
    # the envelope itself, against the centre recorded in the journal at each start
    starts = {e["session"]: e for e in read_journal(path) if e["kind"] == "session-start"}
    steps = {e["token"]: e["session"] for e in read_journal(path) if e["kind"] == "session-step"}
    for entry, command in zip(segments, commands):
        if entry["token"] in steps:
            centre = starts[steps[entry["token"]]]["center"]
            x, y = xy_from_deg(*joints_deg_from_counts(command[2]))
            assert abs(x - centre[0]) <= BOX_MM + ALLOW_MM
            assert abs(y - centre[1]) <= BOX_MM + ALLOW_MM


def test_a_scara_session_bounds_z_and_roll_too(tmp_path):
    arm = builtin_arm("scara-bench")
    g = Interlock.open(arm, "sim", journal=False, time_scale=50.0)
    try:
        g.enable()
        proposal = g.propose_jog_session("z", -1.0, step=1.0, z_mm=2.5)
        text = "\n".join(g.jog_session_lines(proposal))
        assert "z " in text and "roll " in text and arm.joints[2].name in text
        assert g.execute_jog_session(proposal, Answer(True)).completed
        assert g.session_jog("z", -1.0).result.completed       # 2 mm of 2.5
        step = g.session_jog("z", -1.0)                          # 3 mm: outside
        assert step.result is None and "envelope" in step.ended and "z" in step.ended
        proposal = g.propose_jog_session("roll", math.radians(1.0), step=1.0, roll_deg=1.5)
        assert g.execute_jog_session(proposal, Answer(True)).completed
        assert g.session_jog("roll", math.radians(-1.0)).result.completed   # back to 0
        assert g.session_jog("roll", math.radians(-1.0)).result.completed   # -1 of 1.5
        step = g.session_jog("roll", math.radians(-1.0))
        assert step.result is None and "roll" in step.ended
    finally:
        g.close()


def test_a_step_that_would_end_after_the_dead_man_window_of_its_key_lapses(gate):
    start(gate)
    sent = len(moves(gate))
    step = gate.session_jog("x", 1.0, end_within_s=0.01)   # a 1 mm step lasts ~0.09 s
    assert step.result.outcome == "lapsed" and step.ended is None
    assert len(moves(gate)) == sent and gate.jog_session() is not None
    assert gate.session_jog("x", 1.0, end_within_s=DEADMAN_S).result.completed
