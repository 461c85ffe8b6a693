"""A corpus of bad inputs: each one ends as one line on stderr and exit 2 (CONTRACT.md:
bad input), never exit 70, never a traceback, never a motion.

Where the limits come from:
- nesting: CPython's ``tomllib`` parses arrays and inline tables recursively, so a deep
  enough nesting exhausts the interpreter's recursion limit (RecursionError) - an
  implementation fact, found by a corpus run (from memory of tomllib's source);
- size: benchjog's own cap (safe_files.MAX_FILE_BYTES, 16 MiB; arm files 1 MiB);
  ``/dev/zero`` is the endless file of Linux's null(4);
- name length: Linux NAME_MAX is 255 bytes per path component (ENAMETOOLONG);
- NUL: POSIX path names cannot contain a NUL byte (Python raises ValueError);
- counts: a 32-bit signed position count holds 2**31 - 1 (common practice);
- coordinates: a bench cell lies within a kilometre of its base (benchjog's cap).
"""

from __future__ import annotations

from pathlib import Path

import pytest

from benchjog.console.cli.main import main

ROOT = Path(__file__).resolve().parents[1]
CELL = ROOT / "examples" / "bench-cell"
ARM_TEXT = (ROOT / "console" / "cell" / "arms" / "planar-bench.toml").read_text()


def _cell(tmp_path: Path, points: str | None = None, program: str | None = None) -> Path:
    (tmp_path / "points.toml").write_text(points or (CELL / "points.toml").read_text())
    (tmp_path / "program.toml").write_text(program or (CELL / "program.toml").read_text())
    return tmp_path / "program.toml"


def _nested_array(depth: int) -> str:
    return "x = " + "[" * depth + "1" + "]" * depth + "\n"


def _nested_inline(depth: int) -> str:
    return "x = " + "{a = " * depth + "1" + "}" * depth + "\n"


def corpus(tmp_path: Path):
    """(label, argv, expected words in the one line)."""
    program = (CELL / "program.toml").read_text()
    points = (CELL / "points.toml").read_text()
    cases = []
    for depth in (500, 5000):
        for kind, text in (("array", _nested_array(depth)), ("inline", _nested_inline(depth))):
            f = tmp_path / f"{kind}{depth}.toml"
            f.write_text(program + text)
            cases.append((f"program {kind} {depth} deep", ["check", str(f)], "nested too deeply"))
            a = tmp_path / f"arm-{kind}{depth}.toml"
            a.write_text(_nested_array(depth) if kind == "array" else _nested_inline(depth))
            cases.append((f"arm {kind} {depth} deep", ["fk", "0", "0", "--arm", str(a)],
                          "nested too deeply"))
    d = tmp_path / "deep"
    d.mkdir()
    _cell(d, points=_nested_array(800) + points)
    cases.append(("points file nested deep", ["check", str(d / "program.toml")], "nested too deeply"))
    cases.append(("/dev/zero program", ["check", "/dev/zero"], "larger than 16 MiB"))
    cases.append(("/dev/zero arm", ["fk", "0", "0", "--arm", "/dev/zero"], "larger than 1 MiB"))
    big = tmp_path / "big.toml"
    big.write_text(program + "# " + "x" * (17 * 1024 * 1024) + "\n")
    cases.append(("17 MiB program", ["check", str(big)], "larger than 16 MiB"))
    long_name = str(tmp_path / ("p" * 300 + ".toml"))
    cases.append(("300-character program name", ["check", long_name], "File name too long"))
    cases.append(("300-character arm name", ["solve", "1", "2", "--arm", long_name],
                  "File name too long"))
    n = tmp_path / "nul"
    n.mkdir()
    nul_program = _cell(n, program=program.replace('points = "points.toml"',
                                                   'points = "poi\\u0000nts.toml"'))
    cases.append(("NUL in the referenced points path", ["check", str(nul_program)], "NUL byte"))
    a = tmp_path / "counts.toml"
    a.write_text(ARM_TEXT.replace("counts_per_unit = ", "counts_per_unit = 1e308 #", 1))
    cases.append(("counts_per_unit 1e308", ["fk", "0", "0", "--arm", str(a)],
                  "counts_per_unit: too large"))
    o = tmp_path / "origin"
    o.mkdir()
    far = _cell(o, points=points.replace("origin = [100.0, 220.0]", "origin = [1e308, 220.0]"))
    cases.append(("frame origin 1e308", ["check", str(far)], "not a place on a bench"))
    return cases


def test_every_bad_input_is_one_line_and_exit_2(tmp_path, capsys, recwarn):
    import warnings

    warnings.simplefilter("always")  # a numpy overflow warning must not slip through either
    seen = 0
    for label, argv, words in corpus(tmp_path):
        code = main(argv)
        out, err = capsys.readouterr()
        lines = err.strip().splitlines()
        assert code == 2, f"{label}: exit {code}: {err[-300:]}"
        assert len(lines) == 1 and lines[0].startswith("benchjog: "), f"{label}: {err[-300:]}"
        assert words in lines[0], f"{label}: {lines[0]}"
        assert len(lines[0]) < 400, f"{label}: a long line"
        assert out == "", label
        seen += 1
    assert not [str(w.message) for w in recwarn], "warnings were emitted"
    assert seen >= 16


def test_the_arm_file_check_is_in_counts_not_only_in_the_demo(tmp_path, capsys):
    # the bound is in counts from home: the elbow's min, -145 deg, lies 235 deg from its
    # zero (90 deg); 235 * 9,000,000 < 2**31 - 1 < 235 * 9,200,000
    a = tmp_path / "fine.toml"
    text = ARM_TEXT
    import re
    text = re.sub(r"counts_per_unit = [0-9.e+]+", "counts_per_unit = 9000000.0", text)
    a.write_text(text)
    assert main(["fk", "0", "0", "--arm", str(a), "--json"]) == 0
    text = re.sub(r"counts_per_unit = [0-9.e+]+", "counts_per_unit = 9200000.0", ARM_TEXT)
    a.write_text(text)
    assert main(["fk", "0", "0", "--arm", str(a), "--json"]) == 2
    assert "counts_per_unit: too large" in capsys.readouterr().err
