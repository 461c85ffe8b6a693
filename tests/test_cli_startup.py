"""Start-up: what each command imports (not how long it takes: tests never time).

``python -X importtime`` lists every module a process imports (CPython docs, "-X
importtime"); the command must not load what it does not use. The timings themselves
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
    done = subprocess.run([sys.executable, "-X", "importtime", "-m", "benchjog", *args],
                          capture_output=True, text=True, timeout=60, cwd=HERE)
    assert done.returncode in (0, 1), done.stderr[-2000:]
    return {line.split("|")[-1].strip() for line in done.stderr.splitlines()
            if line.startswith("import time:") and "|" in line} - {"package"}


@pytest.mark.parametrize("args", [("--version",), ("--help",), ("solve", "--help"),
                                  ("run", "--help")])
def test_version_and_help_load_nothing_heavy(args):
    mods = imported(*args)
    assert "benchjog" in mods  # the listing works at all
    assert not {m for m in mods if m.split(".")[0] in HEAVY or m in HEAVY}


@pytest.mark.parametrize("args", [("solve", "150", "-200", "--json"), ("fk", "0", "90", "--json")])
def test_kinematics_json_loads_numpy_but_no_ui_planner_or_link(args):
    mods = imported(*args)
    assert "numpy" in mods and "benchjog.kinematics.solve" in mods
    unused = {"rich", "textual", "serial", "tomlkit", "shtab", "logging"}
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
