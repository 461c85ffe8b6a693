"""The distribution as a user gets it: sdist -> wheel -> a fresh venv, non-editable.

Offline-safe: the sdist and wheel are built with the setuptools already in the test
environment (``--no-build-isolation``, the `test` extra pins setuptools>=77), and the fresh
venv installs with ``--no-index``; it sees benchjog's dependencies through a ``.pth`` line
naming the test environment's site-packages (plain path lines are not processed for
further ``.pth`` files, so the editable benchjog there stays invisible).

Checks (the packaging guides' expectations, common practice):
- installed beside unrelated top-level packages named ``console`` and ``drivers`` (both
  exist on the index), benchjog's command and ``python -m benchjog`` still work, and
  ``import console`` is theirs, not ours (one namespace: PyPA "Packaging namespace
  packages" / "Naming your package" guidance, from memory);
- the wheel carries LICENSE (PEP 639: under ``.dist-info/licenses/``), the SPDX
  ``License-Expression: MIT`` (core metadata 2.4, PEP 639) and the demo cells as package
  data;
- the sdist carries the tests and can run them (a fast file run from the unpacked sdist
  against the installed wheel).
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import sysconfig
import tarfile
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
pytestmark = pytest.mark.slow


def _run(cmd, cwd=None, env=None, check=True, timeout=300) -> subprocess.CompletedProcess:
    done = subprocess.run([str(c) for c in cmd], cwd=cwd, env=env, capture_output=True,
                          text=True, timeout=timeout)
    if check and done.returncode != 0:
        raise AssertionError(f"{cmd} exited {done.returncode}\n{done.stdout}\n{done.stderr}")
    return done


SKIP_PARTS = {".venv", "build", "dist", "__pycache__", ".git", ".hypothesis", ".pytest_cache"}


def _project_files(under: str = "") -> list[str]:
    """The files git knows (tracked and new, not ignored): what a checkout holds; outside
    a git checkout (an unpacked sdist) every file but build and cache folders."""
    done = subprocess.run(["git", "ls-files", "-co", "--exclude-standard", "-z", "--", under or "."],
                          cwd=ROOT, capture_output=True, text=True)
    if done.returncode == 0 and (ROOT / ".git").exists():
        return [f for f in done.stdout.split("\0") if f]
    return sorted(str(p.relative_to(ROOT)) for p in (ROOT / under).rglob("*")
                  if p.is_file() and not SKIP_PARTS & set(p.relative_to(ROOT).parts)
                  and not any(part.endswith(".egg-info") for part in p.parts)
                  and p.suffix not in (".pyc",))


def _source_tree(dest: Path) -> Path:
    for rel in _project_files():
        src = ROOT / rel
        if src.is_file():
            (dest / rel).parent.mkdir(parents=True, exist_ok=True)
            shutil.copy2(src, dest / rel)
    return dest


def _dummy(dest: Path, name: str) -> Path:
    """A project whose only package is a top-level ``name``, as on the index."""
    (dest / name).mkdir(parents=True)
    (dest / name / "__init__.py").write_text(f"WHO = 'the other {name}'\n")
    (dest / "pyproject.toml").write_text(
        '[build-system]\nrequires = ["setuptools"]\nbuild-backend = "setuptools.build_meta"\n'
        f'[project]\nname = "{name}-dummy"\nversion = "1.0"\n'
        f'[tool.setuptools]\npackages = ["{name}"]\n')
    return dest


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    base = tmp_path_factory.mktemp("dist")
    tree = _source_tree(base / "tree")
    py = sys.executable
    out = base / "out"
    out.mkdir()
    code = ("import sys; from setuptools import build_meta as b; "
            "print(b.build_sdist(sys.argv[1]))")
    sdist_name = _run([py, "-c", code, out], cwd=tree).stdout.strip().splitlines()[-1]
    sdist = out / sdist_name
    with tarfile.open(sdist) as tar:
        tar.extractall(base / "unpacked", filter="data")
    unpacked = next((base / "unpacked").iterdir())
    code = ("import sys; from setuptools import build_meta as b; "
            "print(b.build_wheel(sys.argv[1]))")
    wheel_name = _run([py, "-c", code, out], cwd=unpacked).stdout.strip().splitlines()[-1]
    return {"sdist": sdist, "unpacked": unpacked, "wheel": out / wheel_name, "base": base}


@pytest.fixture(scope="module")
def venv(built):
    env_dir = built["base"] / "venv"
    _run([sys.executable, "-m", "venv", "--without-pip", env_dir])
    bindir = env_dir / "bin"
    py = bindir / "python"
    site = Path(_run([py, "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])"]).stdout.strip())
    ours = sysconfig.get_paths()["purelib"]
    (site / "zz_test_env_deps.pth").write_text(ours + "\n")
    pip = [py, "-m", "pip", "--disable-pip-version-check", "--no-input"]
    dummies = [_dummy(built["base"] / f"dummy-{n}", n) for n in ("console", "drivers")]
    for dummy in dummies:
        _run([*pip, "install", "--no-index", "--no-build-isolation", "--no-deps", dummy])
    _run([*pip, "install", "--no-index", built["wheel"]])
    env = {k: v for k, v in os.environ.items() if not k.startswith(("PYTHON", "VIRTUAL_ENV"))}
    env["PATH"] = f"{bindir}{os.pathsep}{env.get('PATH', '')}"
    return {"py": py, "bin": bindir, "pip": pip, "env": env, "site": site}


def test_wheel_installs_one_namespace_beside_other_console_and_drivers(venv, tmp_path):
    from benchjog import __version__

    env = venv["env"]
    shown = _run([venv["bin"] / "benchjog", "--version"], cwd=tmp_path, env=env).stdout
    assert shown.strip() == f"benchjog {__version__}"
    solved = _run([venv["py"], "-m", "benchjog", "solve", "150", "-200", "--json"],
                  cwd=tmp_path, env=env)
    doc = json.loads(solved.stdout)
    assert doc["reachable"] is True and len(doc["solutions"]) == 2
    # the other projects' top-level packages are theirs; ours come from the wheel
    where = _run([venv["py"], "-c",
                  "import console, drivers, benchjog.console.cli.main as m; "
                  "print(console.WHO); print(drivers.WHO); print(m.__file__)"],
                 cwd=tmp_path, env=env).stdout.splitlines()
    assert where[:2] == ["the other console", "the other drivers"]
    assert Path(where[2]).is_relative_to(venv["site"]), where[2]
    # and uninstalling them leaves benchjog whole
    _run([*venv["pip"], "uninstall", "-y", "console-dummy", "drivers-dummy"], env=env)
    again = _run([venv["bin"] / "benchjog", "fk", "0", "90", "--json"], cwd=tmp_path, env=env)
    assert json.loads(again.stdout)["joints"] == [0.0, 90.0]


def test_wheel_carries_license_metadata_and_the_demo_cells(built):
    with zipfile.ZipFile(built["wheel"]) as whl:
        names = set(whl.namelist())
        meta_name = next(n for n in names if n.endswith(".dist-info/METADATA"))
        meta = whl.read(meta_name).decode()
    assert any(n.endswith(".dist-info/licenses/LICENSE") for n in names)
    assert "License-Expression: MIT" in meta.splitlines()
    assert "License-File: LICENSE" in meta.splitlines()
    for cell in ("bench-cell", "scara-cell"):
        for part in ("points.toml", "program.toml"):
            assert f"benchjog/examples/{cell}/{part}" in names
    assert "benchjog/console/tui/benchjog.tcss" in names
    # no stray top-level package: everything under benchjog/ or the dist-info
    tops = {n.split("/", 1)[0] for n in names}
    assert {t for t in tops if not t.endswith(".dist-info")} == {"benchjog"}


def test_installed_examples_check_cleanly(venv, tmp_path):
    code = ("from importlib.resources import files; "
            "print(files('benchjog.examples') / 'bench-cell' / 'program.toml')")
    program = _run([venv["py"], "-c", code], cwd=tmp_path, env=venv["env"]).stdout.strip()
    done = _run([venv["bin"] / "benchjog", "check", program, "--json"], cwd=tmp_path,
                env=venv["env"], check=False)
    assert done.returncode == 0, done.stderr
    assert json.loads(done.stdout.splitlines()[-1])["ok"] is True


def test_sdist_carries_its_tests_and_runs_them(built, venv):
    tracked = _project_files("tests")
    with tarfile.open(built["sdist"]) as tar:
        names = {n.split("/", 1)[1] for n in tar.getnames() if "/" in n}
    missing = [t for t in tracked if t not in names]
    assert not missing, missing
    for must in ("LICENSE", "README.md", "pyproject.toml", "examples/bench-cell/points.toml"):
        assert must in names
    # the unpacked sdist's own tests run against the installed wheel (-P: the unpacked
    # benchjog/ folder must not shadow the installed package)
    done = _run([venv["py"], "-P", "-m", "pytest", "-q", "-p", "no:cacheprovider",
                 "tests/test_ik_textbook.py"], cwd=built["unpacked"], env=venv["env"],
                check=False)
    assert done.returncode == 0, done.stdout[-2000:] + done.stderr[-2000:]
    assert " passed" in done.stdout


def test_floor_constraints_match_the_declared_floors():
    # .ci/run tests at tests/constraints-floor.txt: each pin must be the `>=` floor that
    # pyproject.toml declares, or the floor run tests something users are not promised
    import re
    import tomllib

    declared = {}
    for req in tomllib.loads((ROOT / "pyproject.toml").read_text())["project"]["dependencies"]:
        name, floor = re.fullmatch(r"([A-Za-z0-9_.-]+)>=([0-9.]+)", req).groups()
        declared[name.lower()] = floor
    pinned = {}
    for line in (ROOT / "tests" / "constraints-floor.txt").read_text().splitlines():
        line = line.split("#")[0].strip()
        if line:
            name, version = line.split("==")
            pinned[name.lower()] = version
    assert set(pinned) == set(declared)
    def norm(version: str) -> tuple[int, ...]:
        parts = [int(p) for p in version.split(".")]
        while parts and parts[-1] == 0:
            parts.pop()  # 6.2 == 6.2.0 (PEP 440 release segments pad with zeros)
        return tuple(parts)

    for name, floor in declared.items():
        assert norm(pinned[name]) == norm(floor), (name, floor, pinned[name])
