"""Start-up: what each command imports (not how long it takes: tests never time).

A fresh interpreter runs the command and lists ``sys.modules`` (every module it imported,
CPython docs, "sys.modules"); the command must not load what it does not use. The timings themselves
are in tests/perf/bench_startup.py, as ratios against ``python -c pass`` and
``python -c "import numpy"`` measured in the same run.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

HERE = Path(__file__).resolve().parent  # not the repository root, whose benchjog/ folder
# would shadow the installed package for `python -m benchjog` in a non-editable install

HEAVY = ("numpy", "rich", "textual", "serial", "tomlkit", "shtab", "importlib.metadata", "logging",
         "benchjog.kinematics.planner", "benchjog.drivers.interlock", "benchjog.kinematics.solve",
         "benchjog.console.cell.points", "benchjog.console.cell.program_runs",
         "benchjog.kinematics.model", "benchjog.console.cell.armfile", "tomllib", "dataclasses")


def imported(*args: str) -> set[str]:
    """The modules in sys.modules once ``benchjog ARGS`` is done, in a fresh interpreter.
    (Not ``-X importtime``'s list: an editable install's finder loads some of the
    package's modules without their lines appearing there.)"""
    code = ("import sys\nfrom benchjog.console.cli.main import main\n"
            "try:\n    main(sys.argv[1:])\nexcept SystemExit:\n    pass\n"
            "sys.stdout.flush()\nprint('\\n'.join(sys.modules), file=sys.stderr)")
    done = subprocess.run([sys.executable, "-c", code, *args], capture_output=True, text=True,
                          timeout=60, cwd=HERE)
    assert done.returncode == 0, done.stderr[-2000:]
    return set(done.stderr.split())


@pytest.mark.parametrize("args", [("--version",), ("--help",), ("solve", "--help"),
                                  ("run", "--help")])
def test_version_and_help_load_nothing_heavy(args):
    mods = imported(*args)
    assert "benchjog" in mods  # the listing works at all
    assert not {m for m in mods if m.split(".")[0] in HEAVY or m in HEAVY}


@pytest.mark.parametrize("args", [("solve", "150", "-200", "--json"), ("fk", "0", "90", "--json")])
def test_kinematics_json_loads_neither_numpy_nor_ui_planner_or_link(args):
    # the scalar IK, FK and accuracy are plain Python (kinematics/accuracy.py): numpy is
    # loaded only by the batch paths, the DH chain and a calibration's covariance
    mods = imported(*args)
    assert "benchjog.kinematics.solve" in mods  # the listing works at all
    unused = {"numpy", "rich", "textual", "serial", "tomlkit", "shtab", "logging"}
    assert not {m for m in mods if m.split(".")[0] in unused}
    assert not mods & {"benchjog.kinematics.planner", "benchjog.drivers.interlock",
                       "benchjog.console.cell.points", "importlib.metadata"}


def test_fk_into_a_pipe_never_wraps_a_warning(tmp_path):
    # a warning longer than 80 columns (a long joint name) stays one line in a pipe
    from importlib import resources

    text = resources.files("benchjog.console.cell.arms").joinpath("planar-bench.toml").read_text()
    long_name = "elbow_" + "x" * 90
    arm = tmp_path / "long.toml"
    arm.write_text(text.replace('name = "elbow"', f'name = "{long_name}"'))
    done = subprocess.run([sys.executable, "-m", "benchjog", "fk", "0", "720", "--arm", str(arm)],
                          capture_output=True, text=True, timeout=60, cwd=HERE)
    assert done.returncode == 0, done.stderr
    lines = done.stdout.splitlines()
    warnings = [line for line in lines if line.startswith("warning:")]
    assert any(long_name in w and len(w) > 100 for w in warnings), lines
    assert all(line.startswith(("warning:", "tool:", "planar-bench")) for line in lines), lines


def test_version_alone_builds_no_parser():
    # the quickest answer: `benchjog --version` is printed before argparse is imported
    mods = imported("--version")
    assert "argparse" not in mods and "benchjog.console.cli.common" not in mods
    assert "argparse" in imported("--help")  # the listing would show it


def test_the_branch_names_offered_before_numpy_loads_are_the_solvers():
    # the parser's --branch choices come from kinematics/options.py (no numpy); they must
    # be the values of the solver's Branch, the contract strings of CONTRACT.md
    from benchjog.kinematics.model import Branch
    from benchjog.kinematics.options import BRANCHES

    assert BRANCHES == tuple(b.value for b in Branch) == ("elbow-down", "elbow-up")


def _subcommand(parser, name):
    (action,) = [a for a in parser._actions if a.__class__.__name__ == "_SubParsersAction"]
    return action.choices[name]


def test_a_parser_built_for_its_command_line_reads_as_the_whole_one():
    # build_parser(argv) registers only the command modules argv names; the overview,
    # the usage line and each command's own help must read exactly as with all of them
    from benchjog.console.cli.commands import COMMANDS
    from benchjog.console.cli.main import build_parser

    full = build_parser()
    for argv in (["--help"], [], ["solve", "150", "-200"], ["--arm", "x.toml", "commission", "1"]):
        lazy = build_parser(argv)
        assert lazy.format_help() == full.format_help()
        assert lazy.format_usage() == full.format_usage()
    assert [n for n, _, _ in COMMANDS] == [a.dest for a in _subcommand_actions(full)]
    for name, _, _ in COMMANDS:
        assert (_subcommand(build_parser([name, "--help"]), name).format_help()
                == _subcommand(full, name).format_help())


def _subcommand_actions(parser):
    (action,) = [a for a in parser._actions if a.__class__.__name__ == "_SubParsersAction"]
    return action._choices_actions


def test_the_overview_imports_no_command_module_and_a_command_only_its_own():
    assert "benchjog.console.cli.main" in imported("--help")   # the listing works at all
    assert not {m for m in imported("--help") if ".cli.cmd_" in m}
    assert {m for m in imported("solve", "--help") if ".cli.cmd_" in m} == {
        "benchjog.console.cli.cmd_kinematics"}
