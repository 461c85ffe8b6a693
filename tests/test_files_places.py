"""Where state and the cell's files go (console/paths.py, README "Files").

Reference: the XDG Base Directory Specification (freedesktop.org, 0.8): state data in
``$XDG_STATE_HOME`` (default ``~/.local/state``), user data in ``$XDG_DATA_HOME``
(default ``~/.local/share``); platformdirs implements it on Linux.
"""

from __future__ import annotations

import sys
from pathlib import Path

import pytest

from benchjog.console.paths import cell_dir, journal_dir, state_dir
from benchjog.drivers.journal import Journal, default_journal_dir

pytestmark = pytest.mark.skipif(not sys.platform.startswith("linux"), reason="XDG is Linux's")


def test_journal_goes_to_the_xdg_state_home(tmp_path, monkeypatch):
    monkeypatch.setenv("XDG_STATE_HOME", str(tmp_path / "state"))
    assert state_dir() == tmp_path / "state" / "benchjog"
    assert default_journal_dir() == journal_dir() == tmp_path / "state" / "benchjog" / "journal"
    journal = Journal.for_run()
    try:
        journal.record("open", arm="x")
    finally:
        journal.close()
    assert list((tmp_path / "state" / "benchjog" / "journal").iterdir())


def test_journal_default_without_xdg_is_local_state(tmp_path, monkeypatch):
    monkeypatch.delenv("XDG_STATE_HOME", raising=False)
    monkeypatch.setenv("HOME", str(tmp_path))
    assert default_journal_dir() == tmp_path / ".local" / "state" / "benchjog" / "journal"


def test_cell_folder_precedence(tmp_path, monkeypatch):
    monkeypatch.delenv("BENCHJOG_CELL", raising=False)
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "data"))
    assert cell_dir() == tmp_path / "data" / "benchjog" / "cell"
    monkeypatch.setenv("BENCHJOG_CELL", str(tmp_path / "env-cell"))
    assert cell_dir() == tmp_path / "env-cell"
    assert cell_dir(tmp_path / "given") == tmp_path / "given"


def test_console_files_default_to_the_cell_not_the_current_folder(tmp_path, monkeypatch):
    # the console itself needs a terminal; what it is handed is checked here
    import benchjog.console.cli.main as cli
    import benchjog.console.tui.app as app

    seen = {}
    monkeypatch.setattr(app, "run_console", lambda args: seen.update(vars(args)) or 0)
    monkeypatch.setattr(cli.sys.stdin, "isatty", lambda: True, raising=False)
    monkeypatch.setattr(cli.sys, "stdout", _Tty())
    monkeypatch.setenv("BENCHJOG_CELL", str(tmp_path / "cell"))
    monkeypatch.chdir(tmp_path)
    assert cli.main([]) == 0
    assert Path(seen["points"]) == tmp_path / "cell" / "points.toml"
    assert Path(seen["program"]) == tmp_path / "cell" / "program.toml"
    assert (tmp_path / "cell").is_dir()
    assert cli.main(["--cell", str(tmp_path / "other"), "--points", "mine.toml"]) == 0
    assert seen["points"] == "mine.toml"
    assert Path(seen["program"]) == tmp_path / "other" / "program.toml"


class _Tty:
    def isatty(self) -> bool:
        return True

    def write(self, text: str) -> int:
        return len(text)

    def flush(self) -> None:
        pass
