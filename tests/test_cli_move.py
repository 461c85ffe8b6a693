"""`benchjog move` and `benchjog home` end to end: the real serial driver against the
controller emulator over a pty, and the simulated arm. CONTRACT.md: only y/yes moves;
anything else or end of input moves nothing; an unhomed controller is refused (exit 1);
an unreachable or out-of-limit target exits 1 and moves nothing."""

from __future__ import annotations

import io

import pytest

from benchjog.console.cell.armfile import builtin_arm
from benchjog.console.cli.main import main
from benchjog.drivers.calibration import counts_from_joints
from benchjog.drivers.emulator import Emulator
from benchjog.kinematics.model import Branch
from benchjog.kinematics.solve import joints_from_tool

ARM = builtin_arm("planar-bench")


@pytest.fixture
def emulator():
    emu = Emulator(ARM, {"home_s": 0.05})
    path = emu.start()
    yield emu, path
    emu.stop()


def run(monkeypatch, capsys, answer: str, *argv: str) -> tuple[int, str]:
    monkeypatch.setattr("sys.stdin", io.StringIO(answer))
    code = main(list(argv))
    return code, capsys.readouterr().err


def moves(emu) -> list[str]:
    return [line for line in emu.received if " MOVE " in f" {line} "]


def test_unhomed_controller_is_refused(monkeypatch, capsys, emulator, tmp_path):
    emu, path = emulator
    code, err = run(monkeypatch, capsys, "y\n", "move", "150", "200", "--port", path,
                    "--journal", str(tmp_path / "j.jsonl"))
    assert code == 1 and "not homed" in err
    assert moves(emu) == []


@pytest.mark.parametrize("answer", ["n\n", "", "yess\n", "ok\n"])
def test_anything_but_yes_moves_nothing(monkeypatch, capsys, emulator, tmp_path, answer):
    emu, path = emulator
    journal = str(tmp_path / "j.jsonl")
    assert run(monkeypatch, capsys, "y\n", "home", "--port", path, "--journal", journal)[0] == 0
    code, err = run(monkeypatch, capsys, answer, "move", "150", "200", "--port", path,
                    "--journal", journal)
    assert code == 1 and "cancelled" in err
    assert moves(emu) == []


def test_yes_moves_the_controller(monkeypatch, capsys, emulator, tmp_path):
    emu, path = emulator
    journal = str(tmp_path / "j.jsonl")
    assert run(monkeypatch, capsys, "y\n", "home", "--port", path, "--journal", journal)[0] == 0
    code, err = run(monkeypatch, capsys, "Y\n", "move", "150", "200", "--branch", "elbow-up",
                    "--port", path, "--journal", journal)
    assert code == 0, err
    assert moves(emu)
    expected = joints_from_tool(ARM, (150.0, 200.0)).solution(Branch.ELBOW_UP).joints
    assert emu.position_counts() == counts_from_joints(ARM, expected)
    assert "Move? [y/N]" in err


@pytest.mark.parametrize("target", [("500", "0"), ("-330", "0")])
def test_unreachable_or_beyond_limits_exits_1_and_moves_nothing(monkeypatch, capsys, emulator,
                                                                tmp_path, target):
    emu, path = emulator
    journal = str(tmp_path / "j.jsonl")
    assert run(monkeypatch, capsys, "y\n", "home", "--port", path, "--journal", journal)[0] == 0
    code, err = run(monkeypatch, capsys, "y\n", "move", *target, "--port", path, "--journal", journal)
    assert code == 1 and "refused" in err
    assert moves(emu) == []


def test_move_on_the_simulated_arm_with_a_line_path(monkeypatch, capsys, tmp_path):
    code, err = run(monkeypatch, capsys, "yes\n", "move", "200", "100", "--path", "line",
                    "--journal", str(tmp_path / "j.jsonl"))
    assert code == 0, err
    assert "done" in err


def test_a_journal_in_a_missing_folder_is_one_line_and_makes_no_folder(monkeypatch, capsys, tmp_path):
    # a typo in --journal must not create folders wherever it points; nothing moves
    missing = tmp_path / "no-such-folder" / "sub"
    code, err = run(monkeypatch, capsys, "y\n", "move", "150", "200", "--journal",
                    str(missing / "j.jsonl"))
    assert code == 2 and err.count("\n") == 1 and "--journal: no folder" in err, err
    assert not (tmp_path / "no-such-folder").exists()
