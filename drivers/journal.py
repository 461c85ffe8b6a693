"""The motion journal: an append-only JSON Lines file per run.

Every request, verdict, confirmation, segment sent and driver event is one line, written
and flushed (and fsynced) as it happens, so a crash loses nothing already done and the
last moves of a cell can be reconstructed with any JSON Lines reader.
"""

from __future__ import annotations

import json
import math
import os
import threading
import time
from datetime import datetime, timezone
from pathlib import Path
from typing import Any


class JournalError(OSError):
    """The journal file cannot be written."""


def default_journal_dir() -> Path:
    """The ``journal`` folder in the user's state directory (console/paths.py:
    ``~/.local/state/benchjog/journal`` on Linux, ``$XDG_STATE_HOME`` honoured)."""
    from benchjog.console.paths import journal_dir

    return journal_dir()


def _jsonable(value: Any) -> Any:
    if isinstance(value, float):
        return value if math.isfinite(value) else str(value)
    if isinstance(value, (list, tuple)):
        return [_jsonable(v) for v in value]
    if isinstance(value, dict):
        return {str(k): _jsonable(v) for k, v in value.items()}
    if isinstance(value, (str, int, bool)) or value is None:
        return value
    return str(value)


class Journal:
    """Append-only JSON Lines writer; thread-safe; one line per ``record`` call."""

    def __init__(self, path: str | os.PathLike[str]):
        self.path = Path(path)
        try:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            self._file = open(self.path, "a", encoding="utf-8")
        except OSError as exc:
            raise JournalError(f"{self.path}: journal: {exc.strerror or exc}") from None
        self._lock = threading.Lock()

    @classmethod
    def for_run(cls, directory: str | os.PathLike[str] | None = None) -> "Journal":
        """A new journal file named by the run's start time and process id."""
        folder = Path(directory) if directory is not None else default_journal_dir()
        stamp = datetime.now(timezone.utc).strftime("%Y%m%dT%H%M%SZ")
        return cls(folder / f"run-{stamp}-{os.getpid()}.jsonl")

    def record(self, kind: str, **fields: Any) -> None:
        line = {"t": datetime.now(timezone.utc).isoformat(timespec="milliseconds"),
                "mono": round(time.monotonic(), 6), "kind": kind}
        line.update({k: _jsonable(v) for k, v in fields.items()})
        text = json.dumps(line, allow_nan=False) + "\n"
        with self._lock:
            if self._file.closed:
                return
            self._file.write(text)
            self._file.flush()
            os.fsync(self._file.fileno())

    def close(self) -> None:
        with self._lock:
            if not self._file.closed:
                self._file.close()


class NullJournal:
    """No journal (tests, dry runs)."""

    path = None

    def record(self, kind: str, **fields: Any) -> None:
        pass

    def close(self) -> None:
        pass


def read_journal(path: str | os.PathLike[str]) -> list[dict]:
    """Every complete line of a journal (a torn last line is skipped)."""
    entries = []
    with open(path, encoding="utf-8") as handle:
        for line in handle:
            try:
                entries.append(json.loads(line))
            except json.JSONDecodeError:
                continue
    return entries
