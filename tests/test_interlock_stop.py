"""Stop first, always: the driver's stop comes before anything that can block or raise;
a failing journal never stops a stop and refuses new motion; a stop voids the proposals
made before it; the command line switches the drives on only after the yes; proposals
from many threads at once."""

from __future__ import annotations

import dataclasses
import io
import math
import threading

import pytest

from benchjog.console.cell.armfile import builtin_arm
from benchjog.console.cell.program_runs import load_program, run_program
from benchjog.console.cli.common import exit_code_of
from benchjog.console.cli.main import main
from benchjog.drivers.emulator import Emulator
from benchjog.drivers.interlock import ISSUED_MAX, Confirmer, Interlock
from benchjog.drivers.journal import Journal, read_journal
from test_journal import FailingFile

ARM = builtin_arm("planar-bench")
PROGRAM = "examples/bench-cell/program.toml"


class Answer(Confirmer):
    def __init__(self, yes: bool, before=None):
        self.yes, self.before, self.asked = yes, before, 0

    def confirm(self, proposal) -> bool:
        self.asked += 1
        if self.before:
            self.before()
        return self.yes


def kinds(gate) -> list[str]:
    return [c[0] for c in gate.sim.commands]


class SpyJournal:
    """A journal that notes what the simulated arm had received when each line came,
    and can be told to raise (a broken journal object) or to block."""

    path = None
    error = None
    lost = 0

    def __init__(self):
        self.gate = None
        self.seen: list[tuple[str, tuple]] = []
        self.raise_on: set[str] = set()

    def record(self, kind, **fields):
        if self.gate is not None and self.gate.sim is not None:
            self.seen.append((kind, tuple(c[0] for c in self.gate.sim.commands)))
        if kind in self.raise_on:
            raise OSError(28, "No space left on device")

    def wait_written(self, timeout_s):
        return True

    def recover(self, timeout_s=2.0):
        return True

    def close(self):
        pass


def _sim_gate(journal, **kw):
    from benchjog.drivers.sim import SimDriver   # tests may hand the gate a driver
    driver = SimDriver(ARM, time_scale=kw.pop("time_scale", 50.0), **kw)
    driver.open()
    return Interlock(ARM, driver, journal=journal)


# -- stop first ------------------------------------------------------------------------
def test_the_driver_stop_comes_before_the_journal_line():
    spy = SpyJournal()
    gate = _sim_gate(spy)
    spy.gate = gate
    gate.stop()
    stop_lines = [seen for kind, seen in spy.seen if kind == "stop"]
    assert stop_lines and stop_lines[0][-1] == "STOP"   # the driver had it already
    gate.close()


def test_a_journal_that_raises_never_stops_a_stop():
    spy = SpyJournal()
    spy.raise_on = {"stop", "close"}
    gate = _sim_gate(spy)
    spy.gate = gate
    gate.stop()                      # no exception escapes
    assert kinds(gate)[-1] == "STOP"
    gate.close()
    assert kinds(gate).count("STOP") >= 2


def test_with_the_journal_failing_stop_reaches_the_driver(tmp_path):
    path = tmp_path / "j.jsonl"
    journal = Journal(path, opener=lambda p: FailingFile(p))   # every write: disk full
    gate = _sim_gate(journal)
    try:
        gate.enable()
        assert gate.wait_journal(5) and gate.journal_error
        gate.stop()
        assert kinds(gate)[-1] == "STOP"
    finally:
        gate.close()
    assert "No space left on device" in gate.journal_error


def test_stop_does_not_wait_for_a_running_plan_or_a_stuck_journal():
    release = threading.Event()
    journal = Journal("/dev/null", fsync=lambda fd: release.wait(10))  # fsync never returns
    gate = _sim_gate(journal)
    gate.enable()
    gate._busy.acquire()             # as a plan streaming segments holds it
    try:
        for _ in range(3):
            journal.record("segment")
        stopper = threading.Thread(target=gate.stop)
        stopper.start()
        stopper.join(5)
        assert not stopper.is_alive() and kinds(gate)[-1] == "STOP"
    finally:
        gate._busy.release()
        release.set()
        gate.close()


def test_no_motion_starts_while_the_journal_fails(tmp_path):
    journal = Journal(tmp_path / "j.jsonl", opener=lambda p: FailingFile(p))
    gate = _sim_gate(journal)
    try:
        gate.enable()
        assert gate.wait_journal(5)
        proposal = gate.propose_move((150.0, 200.0))
        assert not proposal.ok
        assert any("journal cannot be written" in r and "stop always works" in r
                   for r in proposal.verdict.reasons)
        asked = Answer(True)
        assert gate.execute(proposal, asked).outcome == "refused" and asked.asked == 0
        assert gate.home(Answer(True)).outcome == "refused"
        assert "MOVE" not in kinds(gate) and "HOME" not in kinds(gate)
    finally:
        gate.close()


def test_a_journal_that_recovers_lets_motion_start_again(tmp_path):
    disk_full = [True]

    def opener(p):
        fake = FailingFile(p)
        fake.fail = disk_full[0]
        return fake

    journal = Journal(tmp_path / "j.jsonl", opener=opener)
    gate = _sim_gate(journal)
    try:
        gate.enable()
        assert gate.wait_journal(5) and gate.journal_error
        disk_full[0] = False
        gate.reset()                     # a person's reset tries the journal again
        assert gate.journal_error is None
        assert gate.execute(gate.propose_move((150.0, 200.0)), Answer(True)).completed
    finally:
        gate.close()


def test_a_journal_failing_during_a_move_makes_the_command_fail_loudly(tmp_path, capsys):
    fake = FailingFile(tmp_path / "j.jsonl", good=10**6, fail_on=b'"segment"')  # fills mid-move
    journal = Journal(tmp_path / "j.jsonl", opener=lambda p: fake)
    gate = _sim_gate(journal)
    try:
        gate.enable()
        gate.wait_journal(5)
        proposal = gate.propose_move((150.0, 200.0), path="line")
        assert proposal.ok and gate.journal_error is None
        result = gate.execute(proposal, Answer(True))
        assert result.completed                     # the journal does not halt a move ...
        assert exit_code_of(result, gate) == 3      # ... but the command does not say 0
    finally:
        gate.close()
    assert "warning: the motion journal failed" in capsys.readouterr().err


def test_a_stop_between_propose_and_execute_voids_the_proposal():
    gate = Interlock.open(ARM, "sim", journal=False, time_scale=50.0)
    try:
        gate.enable()
        first = gate.propose_move((150.0, 200.0))
        second = gate.propose_jog("x", 5.0)
        gate.stop()
        for proposal in (first, second):
            asked = Answer(True)
            result = gate.execute(proposal, asked)
            assert result.outcome == "refused" and "stop" in result.detail and asked.asked == 0
        assert "MOVE" not in kinds(gate)
        assert gate.execute(gate.propose_move((150.0, 200.0)), Answer(True)).completed
    finally:
        gate.close()


def test_close_stops_first_even_when_the_driver_close_fails():
    spy = SpyJournal()
    gate = _sim_gate(spy)
    spy.gate = gate
    driver = gate._Interlock__driver

    def broken_close():
        raise RuntimeError("port vanished")

    driver._close = broken_close
    gate.close()                       # no exception
    assert "STOP" in kinds(gate)


# -- the approval binds to the content -----------------------------------------------
def test_a_proposal_changed_in_place_is_refused():
    gate = Interlock.open(ARM, "sim", journal=False, time_scale=50.0)
    try:
        gate.enable()
        proposal = gate.propose_move((150.0, 200.0))
        last = proposal.plans[0].segments[-1]
        object.__setattr__(last, "joints", (last.joints[0] + 0.2, last.joints[1]))
        result = gate.execute(proposal, Answer(True))
        assert result.outcome == "refused" and "changed" in result.detail
        other = gate.propose_move((150.0, 200.0))
        object.__setattr__(other, "request", "something milder")
        assert gate.execute(other, Answer(True)).outcome == "refused"
        assert "MOVE" not in kinds(gate)
    finally:
        gate.close()


# -- many threads --------------------------------------------------------------------
def test_proposals_from_many_threads_at_once():
    gate = Interlock.open(ARM, "sim", journal=False, time_scale=50.0)
    errors = []
    try:
        gate.enable()

        def propose(n: int) -> None:
            try:
                for k in range(40):
                    gate.propose_jog("x", 60.0 if k % 2 else 1.0)   # refused and fine ones
            except Exception as exc:  # noqa: BLE001 - the test collects them
                errors.append(exc)

        threads = [threading.Thread(target=propose, args=(n,)) for n in range(8)]
        for t in threads:
            t.start()
        for t in threads:
            t.join()
        assert errors == []
        issued = [entry[0] for entry in gate._issued.values()]
        assert len(issued) <= ISSUED_MAX and all(p.ok for p in issued)   # refused: not kept
    finally:
        gate.close()


# -- drives on only after the yes ---------------------------------------------------------
class SeesDrives(Confirmer):
    def __init__(self, gate, yes):
        self.gate, self.yes, self.enabled_when_asked = gate, yes, None

    def confirm(self, proposal) -> bool:
        self.enabled_when_asked = self.gate.state().enabled
        return self.yes


@pytest.mark.parametrize("what", ["move", "home", "program"])
def test_drives_come_on_only_after_the_yes(what):
    arm_program = load_program(PROGRAM, ARM) if what == "program" else None
    gate = Interlock.open(ARM, "sim", journal=False, time_scale=50.0, enable_on_yes=True)
    try:
        def attempt(yes: bool):
            asker = SeesDrives(gate, yes)
            if what == "move":
                proposal = gate.propose_move((150.0, 200.0))
                assert proposal.ok and proposal.enables
                assert any("switched on only after your yes" in line for line in proposal.lines(ARM))
                result = gate.execute(proposal, asker)
            elif what == "home":
                result = gate.home(asker)
            else:
                result = run_program(gate, ARM, *arm_program, asker)[1]
            return asker, result

        asker, result = attempt(False)
        assert result.outcome == "cancelled" and asker.enabled_when_asked is False
        assert "ENABLE" not in kinds(gate)          # a cancelled command never enabled
        asker, result = attempt(True)
        assert result.completed, result.detail
        assert asker.enabled_when_asked is False
        record = kinds(gate)
        motion = [k for k in record if k in ("MOVE", "HOME")]
        assert motion and record.index("ENABLE") < record.index(motion[0])
    finally:
        gate.close()


def _cli(monkeypatch, capsys, answer, *argv):
    monkeypatch.setattr("sys.stdin", io.StringIO(answer))
    code = main(list(argv))
    return code, capsys.readouterr().err


def test_cli_move_home_run_enable_only_after_the_yes_on_the_emulator(monkeypatch, capsys,
                                                                       tmp_path):
    emu = Emulator(ARM, {"home_s": 0.05})
    port = emu.start()
    journal = str(tmp_path / "j.jsonl")

    def enables() -> int:
        return sum(1 for line in emu.received if line.split()[1:2] == ["ENABLE"])

    try:
        code, err = _cli(monkeypatch, capsys, "n\n", "home", "--port", port, "--journal", journal)
        assert code == 1 and "cancelled" in err and enables() == 0
        assert "NOT checked" in err            # homing's path: said plainly
        code, err = _cli(monkeypatch, capsys, "y\n", "home", "--port", port, "--journal", journal)
        assert code == 0 and enables() == 1
        for argv in (("move", "150", "200"), ("run", PROGRAM)):
            code, err = _cli(monkeypatch, capsys, "n\n", *argv, "--port", port, "--journal", journal)
            assert code == 1 and enables() == 1, err   # cancelled: the drives never came on
        code, err = _cli(monkeypatch, capsys, "y\n", "move", "150", "200", "--port", port,
                         "--journal", journal)
        assert code == 0 and enables() == 2, err
        body = [line.split()[1] for line in emu.received]
        last_enable = len(body) - 1 - body[::-1].index("ENABLE")
        assert "MOVE" in body[last_enable:] and "MOVE" not in body[:last_enable]
    finally:
        emu.stop()
    entries = read_journal(journal)
    assert any(e["kind"] == "enable" and e.get("after_yes") for e in entries)


def test_cli_move_with_a_journal_on_a_full_disk_never_says_done(monkeypatch, capsys, tmp_path):
    import os
    if not os.path.exists("/dev/full"):
        pytest.skip("no /dev/full on this system")
    code, err = _cli(monkeypatch, capsys, "y\n", "move", "150", "200", "--journal", "/dev/full")
    assert code in (1, 3) and "journal" in err
    assert "Traceback" not in err


# -- stop during homing, and the console's stop key, with the journal failing -------------
def test_stop_during_homing_with_the_journal_failing_reaches_the_controller(tmp_path):
    import time
    files = []

    def opener(p):
        fake = FailingFile(p)
        fake.fail = False
        files.append(fake)
        return fake

    emu = Emulator(ARM, {"home_s": 3.0})
    port = emu.start()
    try:
        gate = Interlock.open(ARM, "serial", journal=Journal(tmp_path / "j.jsonl", opener=opener),
                              port=port, enable_on_yes=True)
        try:
            box = {}
            worker = threading.Thread(target=lambda: box.setdefault("r", gate.home(Answer(True))))
            worker.start()
            for _ in range(200):
                if any(line.split()[1:2] == ["HOME"] for line in emu.received):
                    break
                time.sleep(0.01)
            for fake in files:               # the disk fills while the arm homes
                fake.fail = True
            gate._journal.record("event", detail="filler")   # the next batch fails
            gate.wait_journal(5)
            assert gate.journal_error        # ... and the journal says so
            gate.stop()                      # no exception, whatever the journal does
            worker.join(10)
            assert not worker.is_alive()
            result = box["r"]
            assert result.outcome == "stopped" and not result.completed, result
            assert gate.wait_stopped(5.0)    # the STOP's answer is awaited in its own thread
            assert any(line.split()[1:2] == ["STOP"] for line in emu.received)
            assert not gate.state().homed    # it did not home to the end
        finally:
            gate.close()
    finally:
        emu.stop()


async def test_the_console_stop_key_with_a_failing_journal(tmp_path):
    from benchjog.console.tui.app import make_app
    journal = Journal(tmp_path / "j.jsonl", opener=lambda p: FailingFile(p))
    gate = _sim_gate(journal)
    try:
        app = make_app(ARM, gate)
        async with app.run_test(size=(120, 40)) as pilot:
            journal.record("open")
            gate.wait_journal(5)
            assert gate.journal_error
            await pilot.press("space")
            await pilot.pause(0.1)
            assert app.is_running
            assert kinds(gate)[-1] == "STOP"
            assert "journal failing" in app.message
            await pilot.press("ctrl+q")
        assert kinds(gate).count("STOP") >= 2   # quitting stopped first
    finally:
        gate.close()
