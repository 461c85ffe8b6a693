"""The serial link tells the truth (PROTOCOL.md: STATE's ``moves=``/``last=``, the
pipelining rule, the stale-position rule), shown on real ptys: the serial driver talks to
the controller emulator through :mod:`lossy_pty`, a man-in-the-middle that drops,
corrupts, delays and rewrites lines. The host's claims ("done", where the arm is) are
checked against what the controller really received and answered, rebuilt from the wire
by :func:`lossy_pty.controller_truth` (not from the driver's own bookkeeping)."""

from __future__ import annotations

import io
import math
import random
import threading
import time

import pytest

from benchjog.console.cell.armfile import builtin_arm
from benchjog.console.cli.common import exit_code_of
from benchjog.console.cli.main import main
from benchjog.drivers import protocol as P
from benchjog.drivers.calibration import counts_from_joints, joints_from_counts
from benchjog.drivers.emulator import Emulator
from benchjog.drivers.interlock import Confirmer, Interlock
from driver_contract import wait_for
from lossy_pty import PASS, TO_CTRL, TO_HOST, Fate, LossyLink, controller_truth

ARM = builtin_arm("planar-bench")
DEG = math.radians


class Yes(Confirmer):
    def confirm(self, proposal):
        return True


def body_of(line: bytes) -> str:
    return (P.parse_line(line) or "")


class MoveRule:
    """Acts on the k-th MOVE line (1-based, counted per session after homing, re-sends
    included by seq) and on the controller's reply to it."""

    def __init__(self, k: int, *, drop_reply: bool = False, refuse: bool = False,
                 drop_next: bool = False):
        self.k, self.drop_reply, self.refuse, self.drop_next = k, drop_reply, refuse, drop_next
        self.next_dropped = False
        self.moves: list[int] = []
        self.target_seq: int | None = None
        self.replies_dropped = 0

    def __call__(self, direction: str, line: bytes) -> Fate:
        body = body_of(line)
        cmd = P.parse_host(body) if direction == TO_CTRL and body else None
        if cmd is not None and cmd.verb == "MOVE":
            if cmd.seq not in self.moves:
                self.moves.append(cmd.seq)
            if len(self.moves) == self.k and self.target_seq is None:
                self.target_seq = cmd.seq
            if (self.drop_next and not self.next_dropped and self.target_seq is not None
                    and cmd.seq == P.next_seq(self.target_seq)):
                self.next_dropped = True          # the line after it is lost on the way in:
                return Fate(drop=True)            # the controller answers the next with BAD_SEQ
            if self.refuse and cmd.seq == self.target_seq:
                # the controller refuses it: a zero duration is a SYNTAX error
                return Fate(replace=P.host_line(cmd.seq, "MOVE", 0, *cmd.args[1:]))
        if direction == TO_HOST and self.drop_reply and self.target_seq is not None:
            msg = P.parse_reply(body) if body else None
            if (msg is not None and not isinstance(msg, P.Event) and msg.kind in ("OK", "ERR")
                    and msg.seq == self.target_seq and self.replies_dropped == 0):
                self.replies_dropped += 1   # the first reply only: a re-send is answered
                return Fate(drop=True)
        return PASS


class Rig:
    """Emulator, lossy link and an interlock on the serial driver, homed and enabled."""

    def __init__(self, tmp_path, rule=None, emu_options=None, gap_s=0.0, **driver_options):
        opts = {"home_s": 0.05}
        opts.update(emu_options or {})
        self.emu = Emulator(ARM, opts)
        self.link = LossyLink(self.emu.start(), gap_s=gap_s)
        self.path = self.link.start()
        self.trace = tmp_path / "trace.txt"
        driver_options.setdefault("trace", str(self.trace))
        self.gate = Interlock.open(ARM, "serial", journal=False, port=self.path, **driver_options)
        self.gate.enable()
        assert self.gate.home(Yes()).completed
        if rule is not None:
            self.link.rule = rule

    def close(self):
        try:
            self.gate.close()
        finally:
            self.link.stop()
            self.emu.stop()

    def true_joints(self):
        return joints_from_counts(ARM, self.emu.position_counts())


@pytest.fixture
def rig(tmp_path):
    made = []

    def make(*args, **kwargs):
        r = Rig(tmp_path, *args, **kwargs)
        made.append(r)
        return r

    yield make
    for r in made:
        r.close()


def plan_counts(proposal) -> list[tuple[int, ...]]:
    return [counts_from_joints(ARM, s.joints) for p in proposal.plans for s in p.segments]


def check_claim(result, proposal, link, emu) -> None:
    """The independent checker: "done" only when every segment of the plan was accepted
    by the controller, in order, and finished there."""
    truth = controller_truth(link)
    wanted = plan_counts(proposal)
    if result.completed:
        got = [target for _seq, target in truth.accepted][-len(wanted):]
        assert got == wanted, "done, but the controller did not accept every segment in order"
        assert all(seq in truth.done for seq, _t in truth.accepted[-len(wanted):]), \
            "done, but the controller did not finish every segment"
        assert emu.position_counts() == wanted[-1]
    else:
        assert result.outcome in ("halted", "stopped", "refused"), result


# -- the counters in STATE ---------------------------------------------------------------------

def _state_replies(link):
    return [P.parse_reply(body_of(ln)) for ln, _ in link.lines(TO_HOST) if " mode=" in body_of(ln)]


def test_state_counts_accepted_moves_since_hello_and_an_older_controller_leaves_them_out(rig):
    r = rig()
    p = r.gate.propose_move((150.0, 200.0))
    assert r.gate.execute(p, Yes()).completed
    n = len(_state_replies(r.link))
    assert wait_for(lambda: len(_state_replies(r.link)) > n, 2.0)   # a heartbeat after it
    reply = _state_replies(r.link)[-1]
    moves = [P.parse_host(body_of(ln)) for ln, _ in r.link.lines(TO_CTRL) if " MOVE " in body_of(ln)]
    # PROTOCOL.md: moves= counts the MOVE lines accepted since HELLO, last= is the last one's seq
    assert reply.int_field("moves") == len({m.seq for m in moves}) == len(p.plans[0].segments)
    assert reply.int_field("last") == moves[-1].seq
    old = rig(None, {"counters": False})
    assert all(st.get("moves") is None and st.get("last") is None for st in _state_replies(old.link))


# -- the position after a stop -----------------------------------------------------------------

def _start_long_move(gate):
    p = gate.propose_move((-150.0, 200.0))        # ~1.5 s of shoulder travel
    assert p.ok, p.verdict
    box = {}
    t = threading.Thread(target=lambda: box.setdefault("r", gate.execute(p, Yes())))
    t.start()
    return t, box


def test_ten_plans_right_after_a_stop_start_from_where_the_arm_stopped(rig):
    # issue 11 §4, measured before: 10/10 plans started from a stale pose, up to 10.75 deg off
    r = rig()
    t, box = _start_long_move(r.gate)
    time.sleep(0.35)
    r.gate.stop()
    t.join(3.0)
    assert box["r"].outcome == "stopped"
    starts = []
    for k in range(10):
        proposal = r.gate.propose_jog("x", 1.0 if k % 2 else -1.0)
        if not proposal.ok:
            # a machine too loaded to see the stop's fresh STATE within STOP_SETTLE_S
            # refuses the plan as stale (never plans from the old pose); once the
            # stop is answered, the plan is made
            assert any("stale" in reason for reason in proposal.verdict.reasons), proposal.verdict
            assert r.gate.wait_stopped(5.0)
            proposal = r.gate.propose_jog("x", 1.0 if k % 2 else -1.0)
        truth = r.true_joints()
        assert proposal.ok, proposal.verdict
        starts.append(max(abs(a - b) for a, b in zip(proposal.start_joints, truth)))
    # within one count (1/40 deg, the calibration of the built-in arm)
    assert max(starts) <= DEG(1 / 40) + 1e-12, [math.degrees(s) for s in starts]


def test_stop_returns_before_a_silent_controller_answers(rig):
    # issue 11 §1: nothing stands before the stop, not even the controller's reply. The
    # proxy holds every line to the host from the STOP on until the test lets it go; a
    # stop() that waited for its OK would sit out its retries (4 x 0.3 s) and then declare
    # the link lost, while the test could not let go before stop() returned.
    release = threading.Event()
    seen_stop = threading.Event()

    def hold_after_stop(direction, line):
        body = body_of(line)
        if direction == TO_CTRL and " STOP" in body:
            seen_stop.set()
        elif direction == TO_HOST and seen_stop.is_set():
            release.wait(10.0)
        return PASS

    r = rig(hold_after_stop)
    t, box = _start_long_move(r.gate)
    time.sleep(0.3)
    r.gate.stop()
    stops_at_return = sum(" STOP" in body_of(ln) for ln, _ in r.link.lines(TO_CTRL))
    stop_on_wire = seen_stop.wait(2.0)
    release.set()
    # returned after the first STOP line, before any re-send for want of an answer
    assert stop_on_wire and stops_at_return <= 1
    t.join(3.0)
    assert box["r"].outcome == "stopped"
    # the answer arrives after the return: the link holds and the pose is fresh again
    assert wait_for(lambda: r.gate.state().fresh, 3.0)
    assert r.gate.state().latched is None
    assert r.emu.mode != "MOVING"


def test_between_the_stops_ok_and_a_fresh_state_nothing_is_planned(rig, monkeypatch):
    # a plan waits up to STOP_SETTLE_S for the stop's fresh position; with no wait it
    # must be refused as stale, never made from the old position
    import benchjog.drivers.interlock as gate_module

    monkeypatch.setattr(gate_module, "STOP_SETTLE_S", 0.0)
    hold = threading.Event()

    def slow_state(direction, line):
        body = body_of(line)
        if direction == TO_HOST and hold.is_set() and " mode=" in body:
            return Fate(delay_s=0.2)                # STATE replies arrive late (timeout 0.3 s)
        return PASS

    r = rig(slow_state)
    t, box = _start_long_move(r.gate)
    time.sleep(0.3)
    hold.set()
    stopper = threading.Thread(target=r.gate.stop)
    stopper.start()
    # the STOP's OK is in, the STATE after it is not yet: the old position is stale
    assert wait_for(lambda: any(" STOP" in body_of(ln) for ln, _ in r.link.lines(TO_CTRL)), 2.0)
    assert wait_for(lambda: not r.gate.state().fresh, 1.0)
    proposal = r.gate.propose_jog("x", 1.0)
    assert not proposal.ok and any("stale" in why for why in proposal.verdict.reasons)
    stopper.join(3.0)
    t.join(3.0)
    hold.clear()
    assert wait_for(lambda: r.gate.state().fresh, 2.0)
    proposal = r.gate.propose_jog("x", 1.0)
    assert proposal.ok, proposal.verdict
    assert max(abs(a - b) for a, b in zip(proposal.start_joints, r.true_joints())) <= DEG(1 / 40)


def test_after_an_estop_the_position_is_fresh_only_once_reported_again(rig):
    r = rig()
    t, box = _start_long_move(r.gate)
    time.sleep(0.3)
    r.emu.press_estop()
    t.join(3.0)
    assert box["r"].outcome == "halted"
    r.emu.release_estop()
    r.gate.reset()
    r.gate.enable()
    st = r.gate.state()
    assert st.fresh
    assert max(abs(a - b) for a, b in zip(st.joints, r.true_joints())) <= DEG(1 / 40)


# -- a pipelined MOVE whose reply is lost ------------------------------------------------------

def test_a_lost_ok_is_checked_with_the_counters_and_the_move_completes(rig):
    rule = MoveRule(4, drop_reply=True)
    r = rig(rule)
    p = r.gate.propose_move((150.0, 200.0))
    result = r.gate.execute(p, Yes())
    assert rule.replies_dropped == 1
    assert result.completed, result.detail
    check_claim(result, p, r.link, r.emu)
    # the host asked the controller's count before it went on (a STATE after the lost OK)
    sent = [body_of(ln) for ln, _ in r.link.lines(TO_CTRL)]
    i = next(i for i, b in enumerate(sent) if b.startswith(f"{rule.target_seq} MOVE"))
    assert any(" STATE" in b for b in sent[i + 1:])


@pytest.mark.parametrize("counters,drop_next", [(True, False), (False, False), (True, True)])
def test_a_refused_move_whose_error_is_lost_stops_the_arm_and_names_it(rig, counters, drop_next):
    # issue 11 §4, measured before: 26 of 27 segments ran and the command said "done"
    rule = MoveRule(4, drop_reply=True, refuse=True, drop_next=drop_next)
    r = rig(rule, {"counters": counters})
    p = r.gate.propose_move((150.0, 200.0))
    result = r.gate.execute(p, Yes())
    assert not result.completed and result.outcome == "halted"
    assert exit_code_of(result) == 3
    seg = joints_from_counts(ARM, counts_from_joints(ARM, p.plans[0].segments[3].joints))  # as sent
    words = ", ".join(f"{j.name} {math.degrees(v):.2f} deg" for j, v in zip(ARM.joints, seg))
    assert f"MOVE {rule.target_seq}" in result.detail and words in result.detail, result.detail
    assert rule.next_dropped == drop_next
    check_claim(result, p, r.link, r.emu)
    assert wait_for(lambda: any(" STOP" in body_of(ln) for ln, _ in r.link.lines(TO_CTRL)), 2.0)
    assert wait_for(lambda: r.emu.mode == "IDLE" and not r.emu.segs, 2.0)
    assert r.emu.position_counts() != counts_from_joints(ARM, p.plans[0].segments[-1].joints)


def test_an_older_controller_is_not_pipelined(rig):
    r = rig(None, {"counters": False, "slow_ms": 5})
    p = r.gate.propose_move((150.0, 200.0))
    assert r.gate.execute(p, Yes()).completed
    # replay the wire: never a MOVE sent while another MOVE still waits for its reply
    waiting: set[int] = set()
    events = sorted([(rec.t, rec.direction, body_of(rec.line)) for rec in r.link.records])
    n_moves = 0
    for _t, direction, body in events:
        if direction == TO_CTRL:
            cmd = P.parse_host(body) if body else None
            if cmd is not None and cmd.verb == "MOVE":
                assert not waiting - {cmd.seq}, f"MOVE {cmd.seq} sent while {waiting} unanswered"
                waiting.add(cmd.seq)
                n_moves += 1
        else:
            msg = P.parse_reply(body) if body else None
            if msg is not None and not isinstance(msg, P.Event) and msg.kind in ("OK", "ERR"):
                waiting.discard(msg.seq)
    assert n_moves == len(p.plans[0].segments)


def test_the_move_command_exits_3_naming_the_segment(monkeypatch, capsys, tmp_path):
    emu = Emulator(ARM, {"home_s": 0.05})
    link = LossyLink(emu.start())
    path = link.start()
    try:
        journal = str(tmp_path / "j.jsonl")
        monkeypatch.setattr("sys.stdin", io.StringIO("y\n"))
        assert main(["home", "--port", path, "--journal", journal]) == 0
        rule = MoveRule(3, drop_reply=True, refuse=True)
        link.rule = rule
        monkeypatch.setattr("sys.stdin", io.StringIO("y\n"))
        code = main(["move", "150", "200", "--port", path, "--journal", journal])
        err = capsys.readouterr().err
        assert code == 3, err
        last = err.strip().splitlines()[-1]
        assert f"MOVE {rule.target_seq}" in last and "not accepted" in last, last
        assert "done" not in last
    finally:
        link.stop()
        emu.stop()


# -- fuzzed line faults, with an independent checker -------------------------------------------

class RandomFaults:
    """Seeded faults on every line both ways; now and then a MOVE is refused by the
    controller and that refusal lost (the case that used to pass for "done")."""

    def __init__(self, seed: int, p: float, refuse_at: int | None = None):
        self.rnd = random.Random(seed)
        self.p = p
        self.refuse_at = refuse_at   # also refuse this MOVE line (1-based), for certain
        self.moves: list[int] = []
        self.refused: set[int] = set()
        self.lost_refusals = 0

    def _forced(self) -> int | None:
        at = self.refuse_at
        return self.moves[at - 1] if at is not None and len(self.moves) >= at else None

    def __call__(self, direction: str, line: bytes) -> Fate:
        rnd = self.rnd
        body = body_of(line)
        cmd = P.parse_host(body) if direction == TO_CTRL and body else None
        if cmd is not None and cmd.verb == "MOVE" and cmd.seq not in self.moves:
            self.moves.append(cmd.seq)
            if len(self.moves) == self.refuse_at or rnd.random() < self.p / 2:
                self.refused.add(cmd.seq)
        if cmd is not None and cmd.verb == "MOVE" and cmd.seq in self.refused:
            self.refused.add(cmd.seq)
            return Fate(replace=P.host_line(cmd.seq, "MOVE", 0, *cmd.args[1:]))
        msg = P.parse_reply(body) if direction == TO_HOST and body else None
        if (msg is not None and not isinstance(msg, P.Event) and msg.kind == "ERR"
                and msg.seq in self.refused and (msg.seq == self._forced() or rnd.random() < 0.7)):
            self.lost_refusals += 1
            return Fate(drop=True)
        x = rnd.random()
        if x < self.p:
            return Fate(drop=True)
        if x < 2 * self.p:
            return Fate(corrupt=True)
        if x < 3 * self.p:
            return Fate(delay_s=rnd.uniform(0.005, 0.12))
        return PASS


def test_fuzzed_drops_corruption_and_delays_never_make_a_false_done(rig):
    outcomes = {}
    lost_refusals = 0
    for seed in range(8):
        faults = RandomFaults(seed, p=0.04, refuse_at=3 + seed if seed % 3 == 1 else None)
        r = rig(None, timeout_s=0.15)
        r.link.rule = faults
        target = (150.0, 200.0) if seed % 2 else (250.0, 100.0)
        p = r.gate.propose_move(target, path="line" if seed % 3 == 0 else "joint")
        if not p.ok:               # a report lost on the way: the gate refuses, nothing moves
            outcomes["refused"] = outcomes.get("refused", 0) + 1
            continue
        result = r.gate.execute(p, Yes())
        r.link.rule = lambda d, ln: PASS   # let the closing lines through
        check_claim(result, p, r.link, r.emu)
        truth = controller_truth(r.link)
        if any(seq in faults.refused for seq, _ in truth.accepted):
            raise AssertionError("a refused line was taken as accepted by the checker")
        if result.completed:
            assert not (faults.refused & {s for s, _ in truth.accepted})
        elif not faults.refused:      # no false alarm: a gap is claimed only after a refusal
            assert "not accepted by the controller" not in result.detail, result.detail
        lost_refusals += faults.lost_refusals
        outcomes[result.outcome] = outcomes.get(result.outcome, 0) + 1
        r.close()
    # the fuzz did exercise both endings and the lost refusals
    print("fuzz outcomes", outcomes, "lost refusals", lost_refusals)
    assert outcomes.get("done") and outcomes.get("halted"), outcomes
    assert lost_refusals > 0


# -- stop-and-go streaming ---------------------------------------------------------------------

def test_underruns_are_counted_and_reported(rig):
    # a slow link: every host line is held 40 ms behind the one before, longer than a
    # segment lasts, so the controller's queue runs dry between segments
    r = rig(None, gap_s=0.04)
    p = r.gate.propose_move((150.0, 200.0))
    result = r.gate.execute(p, Yes())
    assert result.completed, result.detail
    # independent count: a MOVE answered with every slot free went into an empty queue
    free_all = [body_of(ln) for ln, _ in r.link.lines(TO_HOST)
                if body_of(ln).startswith("OK ") and f"free={r.emu.opts.queue_depth - 1}" in body_of(ln)]
    true_dry = len(set(b.split(" ")[1] for b in free_all)) - 1      # the first one starts the move
    assert 0 < result.underruns <= true_dry
    assert "stop-and-go" in result.detail and f"{result.underruns} time" in result.detail


def test_a_fast_link_has_no_underruns(rig):
    r = rig()
    p = r.gate.propose_move((150.0, 200.0))
    result = r.gate.execute(p, Yes())
    assert result.completed and result.underruns == 0 and result.detail == "done"


def test_the_move_command_says_stop_and_go(monkeypatch, capsys, tmp_path):
    emu = Emulator(ARM, {"home_s": 0.05})
    link = LossyLink(emu.start(), gap_s=0.04)           # a slow link, as above
    path = link.start()
    try:
        journal = str(tmp_path / "j.jsonl")
        monkeypatch.setattr("sys.stdin", io.StringIO("y\n"))
        assert main(["home", "--port", path, "--journal", journal]) == 0
        monkeypatch.setattr("sys.stdin", io.StringIO("y\n"))
        code = main(["move", "150", "200", "--port", path, "--journal", journal])
        last = capsys.readouterr().err.strip().splitlines()[-1]
        assert code == 0, last
        assert "done (stop-and-go: the controller's queue ran empty" in last
    finally:
        link.stop()
        emu.stop()
