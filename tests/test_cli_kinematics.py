"""`benchjog solve` and `benchjog fk` against CONTRACT.md: JSON shape, conventions, exit
codes, and one-line errors for bad input."""

from __future__ import annotations

import json
import math
import subprocess
import sys

import pytest

from benchjog.console.cli.main import main


def run(capsys, *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def solve_json(capsys, *argv: str) -> tuple[int, dict]:
    code, out, _ = run(capsys, "solve", *argv, "--json")
    return code, json.loads(out)


def test_solve_json_has_exactly_the_contract_keys(capsys):
    code, doc = solve_json(capsys, "150", "-200")
    assert code == 0
    assert set(doc) == {"target", "reachable", "solutions", "warnings"}
    assert doc["target"] == [150.0, -200.0]
    assert doc["reachable"] is True
    for sol in doc["solutions"]:
        # the contract's keys, and the one documented extra (docs/calibration.md)
        assert set(sol) == {"branch", "joints", "usable", "problems", "accuracy"}


def test_branch_labels_follow_the_sign_of_j2(capsys):
    # CONTRACT.md: elbow-down has j2 > 0, elbow-up j2 < 0.
    _, doc = solve_json(capsys, "-120", "250")
    by_branch = {s["branch"]: s["joints"] for s in doc["solutions"]}
    assert by_branch["elbow-down"][1] > 0 > by_branch["elbow-up"][1]


def test_solve_agrees_with_fk_on_both_branches(capsys):
    # Independent check through the other command: the law of cosines is not reused here.
    _, doc = solve_json(capsys, "-120", "250")
    for sol in doc["solutions"]:
        code, out, _ = run(capsys, "fk", *(str(v) for v in sol["joints"]), "--json")
        assert code == 0
        x, y, _heading = json.loads(out)["tool"]
        assert math.isclose(x, -120, abs_tol=1e-6) and math.isclose(y, 250, abs_tol=1e-6)


def test_fk_json_shape_and_heading(capsys):
    # Planar heading = j1 + j2 (CONTRACT.md); 30 + 45 = 75 degrees.
    code, out, _ = run(capsys, "fk", "30", "45", "--json")
    doc = json.loads(out)
    assert code == 0 and set(doc) == {"joints", "tool", "warnings"}
    assert doc["joints"] == [30.0, 45.0]
    # Tool point by hand: 220 (cos30, sin30) + 160 (cos75, sin75).
    assert doc["tool"][0] == pytest.approx(220 * math.cos(math.radians(30)) + 160 * math.cos(math.radians(75)))
    assert doc["tool"][1] == pytest.approx(220 * math.sin(math.radians(30)) + 160 * math.sin(math.radians(75)))
    assert doc["tool"][2] == pytest.approx(75.0)


def test_fk_scara_roll_is_j1_plus_j2_minus_j4(capsys):
    code, out, _ = run(capsys, "fk", "10", "20", "30", "5", "--arm", "scara-bench", "--json")
    doc = json.loads(out)
    assert code == 0 and len(doc["tool"]) == 4
    assert doc["tool"][3] == pytest.approx(10 + 20 - 5)
    # z = d1 + d2 - (d3 + quill) - d4 = 180 + 0 - 30 - 40 (the demo table).
    assert doc["tool"][2] == pytest.approx(110.0)


def test_fk_beyond_limits_still_exits_0_with_a_warning(capsys):
    code, out, _ = run(capsys, "fk", "170", "10", "--json")
    doc = json.loads(out)
    assert code == 0
    assert any("shoulder at 170.00 deg passes its max 150.00 deg" in w for w in doc["warnings"])


def test_out_of_reach_exits_1_with_no_solutions(capsys):
    code, doc = solve_json(capsys, "500", "0")
    assert code == 1 and doc["reachable"] is False and doc["solutions"] == []


def test_stretched_target_gives_one_solution_and_a_warning(capsys):
    code, doc = solve_json(capsys, "0", "380")
    assert code == 0 and len(doc["solutions"]) == 1
    assert doc["warnings"]


def test_no_usable_solution_exits_1(capsys):
    # Behind the base on the -x axis the shoulder needs about +/-170 deg: beyond +/-150.
    code, doc = solve_json(capsys, "-330", "0")
    assert code == 1 and doc["reachable"] is True
    assert not any(s["usable"] for s in doc["solutions"])
    assert all(s["problems"] for s in doc["solutions"])


@pytest.mark.parametrize("argv, needle", [
    (["solve", "abc", "0"], "X: not a number"),
    (["solve", "1e400", "0"], "X: not a finite number"),
    (["solve", "nan", "0"], "X: not a finite number"),
    (["solve", "1", "2", "3"], "a planar arm takes X Y"),
    (["fk", "1"], "the following arguments are required: J2"),
    (["fk", "1", "2", "3"], "a planar arm takes 2 joint values"),
    (["solve", "1", "2", "--arm", "/no/such/arm.toml"], "/no/such/arm.toml: file:"),
    (["move", "100", "200", "--port", "loop://", "--baud", "0"], "--baud: must be > 0"),
    (["move", "100", "200", "--port", " "], "--port: empty"),
    (["check", "/no/such/program.toml"], "cannot read"),
])
def test_bad_input_is_one_line_and_exit_2(capsys, argv, needle):
    try:
        code = main(argv)
    except SystemExit as exc:  # argparse usage errors
        code = exc.code
    _, err = capsys.readouterr()
    assert code == 2
    assert needle in err
    assert len(err.strip().splitlines()) == 1
    assert "Traceback" not in err


def test_the_installed_command_prints_no_traceback(tmp_path):
    bad = tmp_path / "arm.toml"
    bad.write_text('[arm]\nname = "x"\ngeometry = "delta"\n')
    proc = subprocess.run([sys.executable, "-m", "benchjog.console.cli.main", "solve", "1", "2", "--arm", str(bad)],
                          capture_output=True, text=True, timeout=60)
    assert proc.returncode == 2
    assert proc.stderr.strip() == f"benchjog: {bad}: arm.geometry: unknown geometry 'delta' (planar or scara)"
    assert proc.stdout == ""


def test_an_internal_error_is_one_line_and_exit_70(capsys, monkeypatch):
    # A bug must not spill a traceback on a technician either (BENCHJOG_DEBUG=1 shows it).
    import benchjog.kinematics.solve as cmd  # the command imports the solver when it runs

    def broken(*args, **kwargs):
        raise RuntimeError("something inside broke\nsecond line")

    monkeypatch.setattr(cmd, "joints_from_tool", broken)
    monkeypatch.delenv("BENCHJOG_DEBUG", raising=False)
    code = main(["solve", "100", "200"])
    err = capsys.readouterr().err
    assert code == 70
    assert err.strip() == ("benchjog: internal error: RuntimeError: something inside broke "
                           "(a bug: please report it; BENCHJOG_DEBUG=1 shows the traceback)")
    monkeypatch.setenv("BENCHJOG_DEBUG", "1")
    with pytest.raises(RuntimeError):
        main(["solve", "100", "200"])


def test_huge_values_print_sensibly_and_fk_warns_as_for_720(capsys):
    # solve 1e308 1e308: refused as out of reach, the target shown as 1e+308, not 309 digits
    assert main(["solve", "1e308", "1e308"]) == 1
    out = capsys.readouterr().out
    assert "x 1e+308 mm, y 1e+308 mm" in out and max(len(line) for line in out.splitlines()) < 120
    # fk 1e308 0 warns like fk 720 0: beyond the shoulder's max, exit 0, short lines
    assert main(["fk", "720", "0"]) == 0
    small = capsys.readouterr().out
    assert main(["fk", "1e308", "0"]) == 0
    huge = capsys.readouterr().out
    assert "warning: shoulder at 720.00 deg passes its max 150.00 deg" in small
    assert "warning: shoulder at 1e+308 deg passes its max 150.00 deg" in huge
    assert max(len(line) for line in huge.splitlines()) < 120
    assert "-0.000" not in small


@pytest.mark.parametrize("argv, words", [
    (["fk", "0", "0", "--arm", "nosuch"], "nosuch: arm: no such arm file or built-in arm "
                                           "(built-in: planar-bench, scara-bench)"),
    (["move", "100", "200", "--speed", "1e-9"], "--speed: must be 1 to 100"),
    (["move", "100", "200", "--speed", "0.5"], "--speed: must be 1 to 100"),
    (["move", "100", "200", "--speed", "nan"], "--speed: must be 1 to 100"),
    (["move", "100", "200", "--speed", "101"], "--speed: must be 1 to 100"),
])
def test_arm_names_and_speed_bounds_are_one_line_exit_2(capsys, argv, words):
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert words in err and len(err.strip().splitlines()) == 1


def test_usage_lines_name_one_target():
    # nargs='+' printed "X Y [Z [ROLL]] [X Y [Z [ROLL]] ...]", as if several targets were taken
    from benchjog.console.cli.main import build_parser
    import argparse

    parser = build_parser()
    subs = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction)).choices
    assert subs["solve"].format_usage().rstrip().endswith("X Y [Z] [ROLL]")
    assert subs["move"].format_usage().rstrip().endswith("X Y [Z] [ROLL]")
    assert subs["fk"].format_usage().rstrip().endswith("J1 J2 [J3] [J4]")
    assert "..." not in subs["solve"].format_usage()
