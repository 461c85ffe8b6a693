"""Output behaviour every command shares: a closed pipe, --quiet and -v, --json.

The closed pipe is made for real (``os.pipe`` with the read end closed before the
command writes, as after ``| head -1``): the write fails with EPIPE, which Python turns
into BrokenPipeError (Python docs, "Note on SIGPIPE"). The command must end with its own
exit status (never 70) and print nothing about it on stderr.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

HERE = Path(__file__).resolve().parent  # not the repository root, whose benchjog/ folder
# would shadow the installed package for `python -m benchjog` in a non-editable install

from benchjog.console.cli.main import main

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "examples" / "bench-cell" / "program.toml"


def run_into_closed_pipe(*args: str) -> subprocess.CompletedProcess:
    read_end, write_end = os.pipe()
    os.close(read_end)  # the reader is gone before the first write
    try:
        return subprocess.run([sys.executable, "-m", "benchjog", *args], stdout=write_end,
                              stderr=subprocess.PIPE, stdin=subprocess.DEVNULL, text=True,
                              timeout=60, cwd=HERE)
    finally:
        os.close(write_end)


@pytest.mark.parametrize("args, code", [
    (("solve", "150", "-200"), 0),
    (("solve", "150", "-200", "--json"), 0),
    (("solve", "9000", "0"), 1),
    (("fk", "0", "720"), 0),
    (("check", str(DEMO)), 0),
    (("check", str(DEMO), "--json"), 0),
    (("--help",), 0),
    (("--version",), 0),
    (("--print-completion", "bash"), 0),
])
def test_a_closed_pipe_ends_quietly_with_the_commands_own_status(args, code):
    done = run_into_closed_pipe(*args)
    assert done.stderr == ""
    assert done.returncode == code


def test_head_minus_one_on_a_real_shell_pipe():
    # the case from the field, as typed: the shell's pipeline status of benchjog itself
    script = (f'"{sys.executable}" -m benchjog check "{DEMO}" | head -1; '
              'echo "status=${PIPESTATUS[0]}"')
    done = subprocess.run(["bash", "-c", script], capture_output=True, text=True, timeout=60, cwd=HERE)
    assert done.stdout.strip().splitlines()[-1] == "status=0"
    assert "Error" not in done.stderr and "internal" not in done.stderr


def test_quiet_and_verbose_exist_on_every_command():
    import argparse

    from benchjog.console.cli.main import build_parser

    parser = build_parser()
    subs = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    for name, sub in subs.choices.items():
        flags = {s for a in sub._actions for s in a.option_strings}
        assert {"--quiet", "-q", "--verbose", "-v", "--json"} <= flags, name
        assert sub.description, f"{name} --help has no description"


def test_verbose_logs_and_quiet_silences_notes(capsys):
    assert main(["fk", "0", "90", "-v"]) == 0
    err = capsys.readouterr().err
    assert "benchjog: INFO: arm planar-bench" in err
    assert main(["-q", "fk", "0", "90"]) == 0
    assert capsys.readouterr().err == ""


def test_quiet_and_verbose_together_is_a_usage_error(capsys):
    assert main(["fk", "0", "90", "-q", "-v"]) == 2
    assert "not allowed with" in capsys.readouterr().err


def test_completion_script_is_generated_from_the_parser(capsys):
    assert main(["--print-completion", "bash"]) == 0
    script = capsys.readouterr().out
    # shtab's bash output defines a completion function and registers it for the command
    # (the -o option differs between shtab releases)
    import re

    assert re.search(r"^complete -o \w+ -F _shtab_benchjog benchjog$", script, re.M), script[-300:]
    for command in ("solve", "fk", "move", "home", "check", "run", "emulate", "ports"):
        assert command in script


@pytest.mark.parametrize("argv", [["--print-completion", "bash"], ["--print-completion=bash"],
                                  ["--print-comp", "bash"]])
def test_the_completion_script_knows_every_commands_options(capsys, argv):
    # only the named command's module is loaded for a command line (console/cli/main.py);
    # a completion script describes every command, so it is made from the whole parser
    assert main(argv) == 0
    script = capsys.readouterr().out
    for option in ("--tolerance", "--start", "--probe", "--force"):
        assert option in script, option
