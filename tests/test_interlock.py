"""The safety gate: no motion without the interlock's checks and a yes, approvals bind
to exactly one plan, trouble halts and stays latched, and the journal records it all."""

from __future__ import annotations

import ast
import dataclasses
import math
import threading
import time
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from benchjog.console.cell.armfile import builtin_arm
from benchjog.drivers.calibration import joints_from_counts
from benchjog.drivers.emulator import Emulator
from benchjog.drivers.base import LinkError
from benchjog.drivers.interlock import Confirmer, Dwell, Interlock, SetOutput
from benchjog.drivers.journal import Journal, read_journal
from benchjog.kinematics.model import Branch
from benchjog.kinematics.solve import tool_from_joints

ROOT = Path(__file__).resolve().parents[1]
ARM = builtin_arm("planar-bench")


class Answer(Confirmer):
    """A confirmer that answers as told and counts the questions."""

    def __init__(self, yes: bool, before=None):
        self.yes, self.before, self.asked = yes, before, 0

    def confirm(self, proposal) -> bool:
        self.asked += 1
        if self.before:
            self.before()
        return self.yes


YES, NO = (lambda: Answer(True)), (lambda: Answer(False))


def moves(gate) -> list[tuple]:
    return [c for c in gate.sim.commands if c[0] == "MOVE"]


@pytest.fixture
def gate():
    g = Interlock.open(ARM, "sim", journal=False, time_scale=50.0)
    g.enable()
    yield g
    g.close()


def test_no_path_around_the_gate():
    """Structural: outside drivers/ no module imports a driver class, the registry or
    builds a driver; inside drivers/ only the interlock builds one. A new path to a
    driver's motion calls would have to break one of these rules."""
    forbidden_modules = {"benchjog.drivers.registry", "benchjog.drivers.sim", "benchjog.drivers.serial_link"}
    forbidden_names = {"Driver", "SimDriver", "SerialDriver", "create_driver", "load_driver_class"}
    offenders = []
    for path in sorted(ROOT.glob("*/**/*.py")):
        rel = path.relative_to(ROOT)
        top = rel.parts[0]
        if top in ("tests", ".venv") or top.startswith("."):
            continue
        if top == "drivers" and rel.name in ("interlock.py", "registry.py", "base.py", "sim.py",
                                              "serial_link.py"):
            continue
        if rel.as_posix() == "drivers/servobus/driver.py":  # a Driver subclass, built by the registry
            continue
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            if isinstance(node, ast.ImportFrom) and node.module:
                names = {a.name for a in node.names}
                if node.module in forbidden_modules or (names & forbidden_names):
                    offenders.append(f"{rel}: from {node.module} import {sorted(names)}")
            elif isinstance(node, ast.Import):
                for alias in node.names:
                    if alias.name in forbidden_modules:
                        offenders.append(f"{rel}: import {alias.name}")
    assert offenders == []
    # The interlock keeps its driver private (name-mangled, not a public attribute).
    g = Interlock.open(ARM, "sim", journal=False)
    try:
        public = [k for k in vars(g) if not k.startswith("_")]
        assert all(not hasattr(getattr(g, k), "queue") for k in public if k != "sim")
        assert not hasattr(g.sim, "queue") and not hasattr(g.sim, "home")
    finally:
        g.close()


def test_yes_moves_the_arm_to_the_target(gate):
    target = (150.0, 200.0)
    proposal = gate.propose_move(target, branch=Branch.ELBOW_UP)
    assert proposal.ok, proposal.verdict.reasons
    result = gate.execute(proposal, YES())
    assert result.completed and result.outcome == "done"
    x, y, _ = tool_from_joints(ARM, gate.state().joints)
    # The sim reports counts: 40 counts/deg, so the pose is good to ~0.0125 deg.
    assert math.hypot(x - target[0], y - target[1]) < 0.2
    assert gate.state().joints[1] < 0  # elbow-up: j2 < 0 (CONTRACT.md)


def test_no_and_refusals_move_nothing(gate):
    before = gate.state().joints
    assert gate.execute(gate.propose_move((150.0, 200.0)), NO()).outcome == "cancelled"
    out_of_reach = gate.propose_move((500.0, 0.0))
    assert not out_of_reach.ok
    asked = Answer(True)
    assert gate.execute(out_of_reach, asked).outcome == "refused"
    assert asked.asked == 0  # a refused plan is never even offered for confirmation
    assert moves(gate) == [] and gate.state().joints == before


@pytest.mark.parametrize("setup, words", [
    (lambda g: g.disable(), "drives are off"),
    (lambda g: g.sim.inject_estop(), "latched: estop"),
    (lambda g: g.sim.inject_fault("DRIVE", 2), "latched: fault"),
])
def test_driver_state_refusals(gate, setup, words):
    setup(gate)
    proposal = gate.propose_move((150.0, 200.0))
    assert not proposal.ok
    assert any(words in r for r in proposal.verdict.reasons), proposal.verdict.reasons
    assert gate.execute(proposal, YES()).outcome == "refused"
    assert moves(gate) == []


def test_soft_limit_margin_is_kept(gate):
    # The shoulder's max is 150 deg and the margin 0.5 deg: 149.8 deg is refused.
    proposal = gate.propose_joints((math.radians(149.8), math.radians(30.0)))
    assert not proposal.ok
    assert any("shoulder at 149." in r and "outside its soft limits" in r and "margin 0.5 deg" in r
               for r in proposal.verdict.reasons)
    assert gate.execute(proposal, YES()).outcome == "refused" and moves(gate) == []


def test_jog_step_cap(gate):
    proposal = gate.propose_jog("x", 60.0)
    assert any("jog step 60 mm exceeds the cap 50 mm" in r for r in proposal.verdict.reasons)
    small = gate.propose_jog("y", -5.0)
    assert small.ok, small.verdict.reasons
    assert gate.execute(small, YES()).completed


def test_approval_expires(gate):
    clock = [1000.0]
    g = Interlock(ARM, gate._Interlock__driver, journal=None, clock=lambda: clock[0])
    proposal = g.propose_move((150.0, 200.0))
    late = Answer(True, before=lambda: clock.__setitem__(0, clock[0] + Interlock.APPROVAL_TTL_S + 1))
    result = g.execute(proposal, late)
    assert result.outcome == "expired" and moves(gate) == []


def test_approval_binds_to_the_arm_position_and_the_plan(gate):
    first = gate.propose_move((150.0, 200.0))
    second = gate.propose_move((100.0, 250.0))
    assert gate.execute(first, YES()).completed
    # The arm moved since `second` was made: it needs a new confirmation.
    assert gate.execute(second, YES()).outcome == "expired"
    # A proposal changed after it was made is refused.
    third = gate.propose_move((120.0, 240.0))
    tampered = dataclasses.replace(third, actions=third.actions + (Dwell(0.1),))
    assert gate.execute(tampered, YES()).outcome == "refused"
    # An approval is used once.
    assert gate.execute(third, YES()).completed
    count = len(moves(gate))
    assert gate.execute(third, YES()).outcome == "refused" and len(moves(gate)) == count


def test_estop_mid_move_halts_and_stays_latched():
    g = Interlock.open(ARM, "sim", journal=False, time_scale=1.0)
    try:
        g.enable()
        proposal = g.propose_joints((math.radians(-60.0), math.radians(60.0)), speed_pct=100)
        assert proposal.ok, proposal.verdict.reasons
        timer = threading.Timer(0.15, g.sim.inject_estop)
        timer.start()
        result = g.execute(proposal, YES())
        timer.join()
        assert result.outcome == "halted" and "estop" in result.detail
        state = g.state()
        assert state.latched == "estop"
        # Nothing more moves until an explicit reset.
        assert not g.propose_jog("x", 1.0).ok
        g.sim.release_estop()
        g.reset()
        g.enable()
        assert g.state().latched is None
    finally:
        g.close()


def test_stop_never_waits_for_a_confirmation(gate):
    asking, release = threading.Event(), threading.Event()

    class Slow(Confirmer):
        def confirm(self, proposal):
            asking.set()
            release.wait(5)
            return True

    worker = threading.Thread(target=lambda: gate.execute(gate.propose_move((150.0, 200.0)), Slow()))
    worker.start()
    assert asking.wait(5)
    gate.stop()  # returns while the confirmer is still blocked
    assert not release.is_set()
    release.set()
    worker.join(5)
    assert ("STOP",) in gate.sim.commands or any(c[0] == "STOP" for c in gate.sim.commands)


def test_program_actions_run_in_order(gate):
    start = gate.state().joints
    from benchjog.kinematics.planner import plan_move
    a = plan_move(ARM, start, (150.0, 200.0))
    b = plan_move(ARM, a.segments[-1].joints, (100.0, 250.0))
    proposal = gate.propose_actions([a, SetOutput(1, True), Dwell(0.05), b], "test program")
    assert proposal.ok, proposal.verdict.reasons
    result = gate.execute(proposal, YES())
    assert result.completed
    kinds = [c[0] for c in gate.sim.commands if c[0] in ("MOVE", "OUT")]
    assert kinds.index("OUT") > 0 and kinds[-1] == "MOVE"
    assert gate.state().outputs & 0b10


def test_journal_records_request_confirmation_segments_and_result(tmp_path):
    path = tmp_path / "journal.jsonl"
    g = Interlock.open(ARM, "sim", journal=Journal(path), time_scale=50.0)
    try:
        g.enable()
        g.execute(g.propose_move((150.0, 200.0)), NO())
        g.execute(g.propose_move((150.0, 200.0)), YES())
    finally:
        g.close()
    entries = read_journal(path)
    kinds = [e["kind"] for e in entries]
    assert kinds[0] == "open" and kinds[-1] == "close"
    assert kinds.count("request") == 2 and kinds.count("confirmation") == 2
    yes_tokens = {e["token"] for e in entries if e["kind"] == "confirmation" and e["yes"]}
    segments = [e for e in entries if e["kind"] == "segment"]
    assert segments and {e["token"] for e in segments} == yes_tokens
    results = [e["outcome"] for e in entries if e["kind"] == "result"]
    assert results == ["cancelled", "done"]


# -- random sequences -------------------------------------------------------------------
ACTIONS = st.one_of(
    st.tuples(st.just("jog"), st.sampled_from(["x", "y", "j1", "j2"]), st.floats(-70, 70),
              st.booleans()),
    st.tuples(st.just("move"), st.floats(-400, 400), st.floats(-400, 400), st.booleans()),
    st.tuples(st.just("estop"), st.just(0), st.just(0), st.just(False)),
    st.tuples(st.just("fault"), st.just(0), st.just(0), st.just(False)),
    st.tuples(st.just("reset"), st.just(0), st.just(0), st.just(False)),
)


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(ACTIONS, min_size=1, max_size=8))
def test_random_sequences_never_pass_the_soft_limits_or_move_without_a_yes(tmp_path_factory, seq):
    path = tmp_path_factory.mktemp("j") / "journal.jsonl"
    g = Interlock.open(ARM, "sim", journal=Journal(path), time_scale=200.0)
    yes_count = 0
    try:
        g.enable()
        for kind, a, b, answer in seq:
            if kind == "estop":
                g.sim.inject_estop()
            elif kind == "fault":
                g.sim.inject_fault("DRIVE", 1)
            elif kind == "reset":
                g.sim.release_estop()
                g.reset()
                g.enable()
            else:
                if kind == "jog":
                    delta = math.radians(b) / 5 if a.startswith("j") else b
                    proposal = g.propose_jog(a, delta)
                else:
                    proposal = g.propose_move((a, b))
                confirmer = Answer(answer)
                g.execute(proposal, confirmer)
                yes_count += confirmer.asked and answer
    finally:
        g.close()
    for command in g.sim.commands:
        if command[0] == "MOVE":
            joints = joints_from_counts(ARM, command[2])
            for joint, value in zip(ARM.joints, joints):
                assert joint.min <= value <= joint.max, (joint.name, math.degrees(value))
    entries = read_journal(path)
    confirmed = {e["token"] for e in entries if e["kind"] == "confirmation" and e["yes"]}
    assert {e["token"] for e in entries if e["kind"] == "segment"} <= confirmed
    if yes_count == 0:
        assert not [c for c in g.sim.commands if c[0] == "MOVE"]


def test_an_arm_resting_in_the_margin_band_may_move_out_but_not_further_in():
    # A SCARA that homes its quill at 0 mm, its soft minimum: inside the 0.5 mm band.
    scara = builtin_arm("scara-bench")
    quill = dataclasses.replace(scara.joints[2], min=0.0)
    scara = dataclasses.replace(scara, joints=scara.joints[:2] + (quill,) + scara.joints[3:])
    g = Interlock(scara, _sim_driver(scara), journal=None)
    try:
        g.enable()
        assert g.state().joints[2] == pytest.approx(0.0)
        away = g.propose_jog("z", -10.0)  # tool down 10 mm: the quill moves away from 0
        assert away.ok, away.verdict.reasons
        assert g.execute(away, YES()).completed
        back = g.propose_jog("z", 9.8)    # ends at 0.2 mm: inside the band again
        assert not back.ok
        assert any("quill" in r and "outside its soft limits" in r for r in back.verdict.reasons)
    finally:
        g.close()


def test_program_approvals_last_longer_than_single_moves(gate):
    clock = [0.0]
    g = Interlock(ARM, gate._Interlock__driver, journal=None, clock=lambda: clock[0])
    from benchjog.kinematics.planner import plan_move
    a = plan_move(ARM, g.state().joints, (150.0, 200.0))
    single = g.propose_move((150.0, 200.0))
    late = 30.0  # between the 10 s and the 60 s limit
    assert g.execute(single, Answer(True, before=lambda: clock.__setitem__(0, late))).outcome == "expired"
    clock[0] = 0.0
    program = g.propose_actions([a, Dwell(0.01)], "two steps")
    assert g.execute(program, Answer(True, before=lambda: clock.__setitem__(0, late))).completed


def _sim_driver(arm, time_scale=50.0):
    """A simulated arm for an arm built in a test (Interlock.open takes registry names
    and arm files; tests may hand the gate a driver directly)."""
    from benchjog.drivers.sim import SimDriver
    driver = SimDriver(arm, time_scale=time_scale)
    driver.open()
    return driver


def _check_journal_and_moves(path, move_counts):
    """Every MOVE within the soft limits; every segment sent belongs to a yes."""
    for counts in move_counts:
        for joint, value in zip(ARM.joints, joints_from_counts(ARM, counts)):
            assert joint.min <= value <= joint.max, (joint.name, math.degrees(value))
    entries = read_journal(path)
    confirmed = {e["token"] for e in entries if e["kind"] == "confirmation" and e["yes"]}
    assert {e["token"] for e in entries if e["kind"] == "segment"} <= confirmed


@settings(max_examples=6, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(ACTIONS, min_size=1, max_size=5))
def test_random_sequences_on_the_emulator(tmp_path_factory, seq):
    """The same invariants over the real serial driver and the controller emulator."""
    path = tmp_path_factory.mktemp("j") / "journal.jsonl"
    emu = Emulator(ARM, {"home_s": 0.02})
    port = emu.start()
    said_yes = False
    try:
        with Interlock.open(ARM, "serial", journal=Journal(path), port=port) as g:
            g.enable()
            assert g.home(YES()).completed
            for kind, a, b, answer in seq:
                if kind == "estop":
                    emu.press_estop()
                elif kind == "fault":
                    emu.inject_fault("DRIVE", 1)
                elif kind == "reset":
                    emu.release_estop()
                    time.sleep(0.05)
                    try:
                        g.reset()
                        g.enable()
                    except Exception:  # noqa: BLE001 - a refused reset is part of the game
                        pass
                else:
                    if kind == "jog":
                        delta = math.radians(b) / 5 if a.startswith("j") else b
                        proposal = g.propose_jog(a, delta / 4)
                    else:
                        proposal = g.propose_move((a, b), speed_pct=100)
                    confirmer = Answer(answer)
                    g.execute(proposal, confirmer)
                    said_yes |= bool(confirmer.asked and answer)
    finally:
        emu.stop()
    move_counts = [tuple(int(c) for c in line.split()[3:]) for line in emu.received
                   if line.split()[1:2] == ["MOVE"]]
    _check_journal_and_moves(path, move_counts)
    if not said_yes:
        assert move_counts == []


# -- findings of the safety review, each pinned by a test --------------------------------
def test_a_stop_during_the_question_wins_over_a_later_yes(gate):
    stop_then_yes = Answer(True, before=gate.stop)
    result = gate.execute(gate.propose_move((150.0, 200.0)), stop_then_yes)
    assert result.outcome == "stopped" and moves(gate) == []
    home = gate.home(Answer(True, before=gate.stop))
    assert home.outcome == "stopped"
    assert not [c for c in gate.sim.commands if c[0] == "HOME"]


def test_a_proposal_with_a_forged_verdict_is_refused(gate):
    from benchjog.drivers.interlock import Verdict
    refused = gate.propose_jog("x", 60.0)  # over the jog cap
    assert not refused.ok
    forged = dataclasses.replace(refused, verdict=Verdict(True, ()))
    assert gate.execute(forged, YES()).outcome == "refused"
    assert moves(gate) == []


def test_a_plan_made_from_another_start_is_refused(gate):
    from benchjog.kinematics.planner import plan_move
    here = gate.state().joints
    elsewhere = (here[0] + math.radians(0.5), here[1] - math.radians(0.5))
    plan = plan_move(ARM, elsewhere, (150.0, 200.0))
    assert plan.ok
    proposal = gate.propose_actions([plan], "a plan from elsewhere")
    assert not proposal.ok
    assert any("starts elsewhere" in r for r in proposal.verdict.reasons)


def test_speed_caps_are_checked_on_the_durations_the_controller_is_sent(gate):
    # A 1.49 ms segment goes out as MOVE 1 (whole ms, PROTOCOL.md). Turning the elbow by
    # 0.1 deg moves the tool 0.279 mm (arc = angle x 160 mm link): 187 mm/s over the
    # planned 1.49 ms, within the 250 mm/s cap, but 279 mm/s over the 1 ms really run.
    from benchjog.kinematics.model import Segment
    from benchjog.kinematics.planner import plan_joint_move
    here = gate.state().joints
    plan = plan_joint_move(ARM, here, (here[0], here[1] - math.radians(0.1)))
    step = Segment((here[0], here[1] - math.radians(0.1)), 0.00149)
    tool_mm = math.radians(0.1) * 160.0  # the elbow turns the 160 mm link: 0.279 mm
    assert tool_mm / 0.00149 < 250.0 * 1.01 < tool_mm / 0.001
    forged = dataclasses.replace(plan, segments=(step,))
    proposal = gate.propose_actions([forged], "one short segment")
    assert any("tool speed" in r for r in proposal.verdict.reasons)


def test_the_simulated_arm_sends_nothing_after_a_stop_while_waiting_for_a_slot():
    g = Interlock.open(ARM, "sim", journal=False, time_scale=1.0, queue_depth=2)
    try:
        g.enable()
        proposal = g.propose_move((-100.0, 250.0), path="line")
        assert proposal.ok and len(proposal.plans[0].segments) > 4
        timer = threading.Timer(0.3, g.stop)
        timer.start()
        result = g.execute(proposal, YES())
        timer.join()
        assert result.outcome in ("stopped", "halted")
        commands = [c[0] for c in g.sim.commands if c[0] in ("MOVE", "STOP")]
        assert "STOP" in commands
        assert "MOVE" not in commands[commands.index("STOP"):]
    finally:
        g.close()


def test_a_console_gate_opens_unconnected_and_connects_on_reset(tmp_path):
    emu = Emulator(ARM, {"home_s": 0.02})
    pty = emu.start()
    port = tmp_path / "ttyBENCH"  # the cable is not plugged in yet: no such device
    try:
        with pytest.raises(LinkError):
            Interlock.open(ARM, "serial", journal=False, port=str(port))
        g = Interlock.open(ARM, "serial", journal=False, port=str(port), require_link=False)
        try:
            assert not g.state().is_open and "cannot open" in g.link_error
            proposal = g.propose_move((150.0, 200.0))
            assert any("not connected" in r for r in proposal.verdict.reasons)
            assert g.execute(proposal, YES()).outcome == "refused"
            with pytest.raises(LinkError):
                g.reset()            # still unplugged
            port.symlink_to(pty)     # plugged in
            g.reset()
            assert g.state().is_open and g.link_error is None
            g.enable()
            assert g.home(YES()).completed
            assert g.execute(g.propose_move((150.0, 200.0)), YES()).completed
        finally:
            g.close()
    finally:
        emu.stop()


def test_a_run_of_jogs_adds_up_exactly(gate):
    # The simulated arm reports whole controller counts (40 per degree), so each measured
    # pose is a little off the commanded one; jogs measured from the commanded end do
    # not gather that rounding: three +1 mm x jogs end 3 mm from where they began.
    x0, y0, _ = tool_from_joints(ARM, gate.state().joints)
    for _ in range(3):
        proposal = gate.propose_jog("x", 1.0)
        assert gate.execute(proposal, YES()).completed
    x, y, _ = tool_from_joints(ARM, gate._last_end)  # the commanded end of the last jog
    assert x == pytest.approx(x0 + 3.0, abs=1e-6) and y == pytest.approx(y0, abs=1e-6)


# -- random sequences from inside a keep-out zone ------------------------------------------
# The forearm starts 22 mm deep in "fixture" (tests/test_interlock_zones.py draws it);
# "bin" and "post" lie where a careless way out would go.
ZONE_ACTIONS = st.one_of(
    st.tuples(st.just("jog"), st.sampled_from(["x", "y", "j1", "j2"]), st.floats(-40, 40)),
    st.tuples(st.just("move"), st.floats(120, 300), st.floats(60, 260)),
)
ESCAPE_REF_TOL_MM = 0.1    # the gate samples every 0.02 mm of motion (a rise between its
                           # samples <= 0.04 mm) plus the reference's own 0.05 mm sampling


@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(ZONE_ACTIONS, min_size=1, max_size=5))
def test_random_motions_from_inside_a_zone_never_go_deeper(tmp_path_factory, seq):
    """Independent checker (shapely, tests/zone_reference.py) over every segment the
    journal says was sent: in a zone the motion started in, the depth never grows; no
    other zone is entered."""
    from benchjog.kinematics.model import Zone
    from zone_reference import penetrations_mm
    zones = (Zone("fixture", "box", x_min=210.0, x_max=250.0, y_min=100.0, y_max=200.0),
             Zone("bin", "box", x_min=150.0, x_max=172.0, y_min=100.0, y_max=200.0),
             Zone("post", "circle", cx=171.0, cy=211.0, r=10.0))
    arm = dataclasses.replace(ARM, zones=zones)
    path = tmp_path_factory.mktemp("j") / "journal.jsonl"
    g = Interlock(arm, _sim_driver(arm, time_scale=400.0), journal=Journal(path))
    try:
        g.enable()
        for kind, a, b in seq:
            if kind == "jog":
                proposal = g.propose_jog(a, math.radians(b) / 4 if a.startswith("j") else b)
            else:
                proposal = g.propose_move((a, b))
            g.execute(proposal, Answer(True))
    finally:
        g.close()
    entries = read_journal(path)
    starts = {e["token"]: e["start"] for e in entries if e["kind"] == "request"}
    segments: dict[int, list] = {}
    for e in entries:
        if e["kind"] == "segment":
            segments.setdefault(e["token"], []).append(e["joints"])
    for token, ends in segments.items():
        poses = [starts[token]] + ends
        first = penetrations_mm(arm, poses[0])
        inside = {name for name, depth in first.items() if depth > 0}
        last = dict(first)
        for qa, qb in zip(poses, poses[1:]):
            for f in np.linspace(0.0, 1.0, 9)[1:]:
                q = [x + (y - x) * f for x, y in zip(qa, qb)]
                depth = penetrations_mm(arm, q)
                for name, d in depth.items():
                    if name in inside:
                        assert d <= last[name] + ESCAPE_REF_TOL_MM, (name, last[name], d)
                        last[name] = min(last[name], d)   # never above the least so far
                    else:
                        assert d <= ESCAPE_REF_TOL_MM, (name, d)


def test_a_watcher_sees_every_journaled_record_and_cannot_change_the_motion(tmp_path):
    # Interlock.watch is how the command line shows a running program's steps: it must
    # see what the journal gets, in order, and a watcher that raises changes nothing
    g = Interlock.open(ARM, "sim", journal=Journal(tmp_path / "j.jsonl"), time_scale=50.0)
    try:
        g.enable()
        seen: list[str] = []

        def broken(kind, **fields):
            raise RuntimeError("a watcher's bug")

        g.watch(broken)
        unwatch = g.watch(lambda kind, **fields: seen.append(kind))
        result = g.execute(g.propose_jog("x", 2.0), YES())
        assert result.completed, result
        unwatch()
        assert g.execute(g.propose_jog("x", -2.0), YES()).completed
        assert g.wait_journal(5.0)
        written = [e["kind"] for e in read_journal(g.journal_path)]
        assert seen and "segment" in seen
        # the first motion's records, exactly as journaled; none after the unwatch
        assert written[written.index(seen[0]):][:len(seen)] == seen
        assert len(written) > len(seen) + 2
    finally:
        g.close()
