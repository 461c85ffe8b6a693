"""The motion journal: an append-only JSON Lines file per run, written behind motion.

Every request, verdict, confirmation, segment sent and driver event is one line. The
caller's :meth:`Journal.record` only puts the line on a bounded queue and returns: it
never blocks and never raises. One background writer thread takes everything queued,
writes it, flushes, and fsyncs once per batch; while an fsync is slow, the lines behind
it gather into the next batch. So motion (and above all a stop) never waits on the disk.

A journal that cannot be written (disk full, a dead device, a full queue) is reported,
never raised: :attr:`Journal.error` holds one line saying why, lines lost meanwhile are
counted, and the interlock refuses to *start* motion while it is set (a cell keeps its
record or does not move); a stop always works. :meth:`Journal.recover` tries again.

A crash mid-write tears at most the last line: a journal reopened after one, and every
write after a failed one, starts on a new line, and :func:`read_journal` skips what is
not a whole JSON object (torn lines, non-UTF-8 garbage) instead of failing.

Rotation (the default journal only, in the user's state directory): one cap for the
folder, ``max_bytes`` (50 MB) and ``max_age_s`` (30 days). At each start and each
rotation the oldest run files are removed while the folder's run files add up to more
than ``max_bytes``, and any older than ``max_age_s``; the file in use is never removed.
A run's file moves on to a new part (``run-...part1.jsonl``) at ``max_bytes / 10``, so a
long run keeps its latest lines within the cap too.
A file named with ``--journal`` is the user's: appended to, never rotated or removed.
"""

from __future__ import annotations

import json
import math
import os
import queue
import threading
import time
from collections.abc import Callable
from datetime import datetime, timezone
from pathlib import Path
from typing import Any, BinaryIO

MAX_BYTES = 50 * 1024 * 1024      # the cap for the journal folder
MAX_AGE_S = 30 * 24 * 3600.0      # run files older than this are removed
QUEUE_LINES = 10_000              # lines waiting for the writer before new ones are lost
BATCH_LINES = 2_000               # at most this many lines per write and fsync
CLOSE_WAIT_S = 5.0                # close() waits this long for the writer to drain
PARTS = 10                        # a run's file moves on to a new part at max_bytes / PARTS


class JournalError(OSError):
    """The journal file cannot be opened (at start: a one-line error, exit 2)."""


def default_journal_dir() -> Path:
    """The journal folder in the user's state directory (platformdirs):
    ``$XDG_STATE_HOME/benchjog/journal``, i.e. ``~/.local/state/benchjog/journal`` on
    Linux."""
    from platformdirs import user_state_dir

    return Path(user_state_dir("benchjog", appauthor=False)) / "journal"


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


def _why(exc: BaseException) -> str:
    if isinstance(exc, OSError) and exc.strerror:
        return exc.strerror
    return str(exc) or type(exc).__name__


def _open_append(path: Path) -> BinaryIO:
    return open(path, "ab")


def _ends_torn(path: Path) -> bool:
    """True when a regular file's last byte is not a newline (a torn last line)."""
    try:
        if not path.is_file() or path.stat().st_size == 0:
            return False
        with open(path, "rb") as handle:
            handle.seek(-1, os.SEEK_END)
            return handle.read(1) != b"\n"
    except OSError:
        return False


def prune_journal_dir(folder: Path, *, max_bytes: int = MAX_BYTES, max_age_s: float = MAX_AGE_S,
                      keep: tuple[Path, ...] = (), now: float | None = None) -> list[Path]:
    """Remove run files (``run-*.jsonl``) older than ``max_age_s``, then the oldest while
    the folder's run files add up to more than ``max_bytes``; never a file in ``keep``.
    Returns what was removed. Errors (a file gone meanwhile) are skipped."""
    now = time.time() if now is None else now
    keep_set = {p.resolve() for p in keep}
    files = []
    for path in folder.glob("run-*.jsonl"):
        try:
            info = path.stat()
        except OSError:
            continue
        files.append((info.st_mtime, info.st_size, path))
    files.sort()
    total = sum(size for _, size, _ in files)
    removed = []
    for mtime, size, path in files:
        if path.resolve() in keep_set:
            continue
        if now - mtime > max_age_s or total > max_bytes:
            try:
                path.unlink()
            except OSError:
                continue
            total -= size
            removed.append(path)
    return removed


class Journal:
    """Append-only JSON Lines journal with one background writer (module docstring).

    Args:
        path: the file to append to (created with its folder).
        rotate: rotate and prune (the default journal in the state directory).
        max_bytes, max_age_s: the rotation caps.
        opener: ``opener(path) -> binary file`` (tests: a file whose write fails).
        fsync: ``fsync(fd)`` (tests and benchmarks: a slow or failing one).
    """

    def __init__(self, path: str | os.PathLike[str], *, rotate: bool = False,
                 max_bytes: int = MAX_BYTES, max_age_s: float = MAX_AGE_S,
                 opener: Callable[[Path], BinaryIO] = _open_append,
                 fsync: Callable[[int], None] = os.fsync, queue_lines: int = QUEUE_LINES):
        self.path = Path(path)
        self.rotate = rotate
        self.max_bytes = max_bytes
        self.max_age_s = max_age_s
        self._opener = opener
        self._fsync = fsync
        self._queue: queue.Queue[bytes | None] = queue.Queue(maxsize=max(1, queue_lines))
        self._state_lock = threading.Lock()  # guards error/lost only; never held over I/O
        self._error: str | None = None
        self._lost = 0
        self._closed = False
        self._written = 0        # lines written and fsynced
        self._synced = threading.Condition()
        self._part = 0
        try:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            self._newline_first = _ends_torn(self.path)
            self._file: BinaryIO | None = self._opener(self.path)
        except OSError as exc:
            raise JournalError(f"{self.path}: journal: {_why(exc)}") from None
        self._size = self._file_size()
        if self.rotate:
            self._prune()
        self._writer = threading.Thread(target=self._write_loop, name="benchjog-journal",
                                        daemon=True)
        self._writer.start()

    @classmethod
    def for_run(cls, directory: str | os.PathLike[str] | None = None, **options: Any) -> "Journal":
        """A new, rotated journal file named by the run's start time and process id."""
        folder = Path(directory) if directory is not None else default_journal_dir()
        stamp = datetime.now(timezone.utc).strftime("%Y%m%dT%H%M%SZ")
        return cls(folder / f"run-{stamp}-{os.getpid()}.jsonl", rotate=True, **options)

    # -- the caller's side: never blocks, never raises ------------------------------------
    @property
    def error(self) -> str | None:
        """Why the journal is not being written (one line), or None."""
        return self._error

    @property
    def lost(self) -> int:
        """Lines that could not be written (or queued) since the last recovery."""
        return self._lost

    def record(self, kind: str, **fields: Any) -> None:
        """Queue one line; returns at once. A full queue loses the line and sets
        :attr:`error` (it is never a reason to wait)."""
        try:
            line = {"t": datetime.now(timezone.utc).isoformat(timespec="milliseconds"),
                    "mono": round(time.monotonic(), 6), "kind": kind}
            line.update({k: _jsonable(v) for k, v in fields.items()})
            data = (json.dumps(line, allow_nan=False) + "\n").encode("utf-8")
        except Exception as exc:  # noqa: BLE001 - a record that cannot be made is lost, loudly
            self._fail(f"journal: a {kind!r} record could not be encoded: {exc}", 1)
            return
        if self._closed:
            return
        try:
            self._queue.put_nowait(data)
        except queue.Full:
            self._fail(f"{self.path}: journal: the writer is {self._queue.maxsize} lines "
                       f"behind (disk too slow); lines are being lost", 1)

    def wait_written(self, timeout_s: float) -> bool:
        """Wait until everything queued so far is written and fsynced (tests, recovery).
        Never call this on a motion path."""
        deadline = time.monotonic() + timeout_s
        with self._synced:
            while self._queue.unfinished_tasks:
                left = deadline - time.monotonic()
                if left <= 0:
                    return False
                self._synced.wait(min(left, 0.05))
        return True

    def recover(self, timeout_s: float = 2.0) -> bool:
        """Try the journal again (a person's reset): write a ``journal-resumed`` line
        and wait for it. True, and :attr:`error` cleared, when it was written."""
        if self._error is None:
            return True
        with self._state_lock:
            lost, self._error = self._lost, None
        self.record("journal-resumed", lines_lost=lost)
        if self.wait_written(timeout_s) and self._error is None:
            with self._state_lock:
                self._lost -= lost
            return True
        return False

    def close(self) -> None:
        """Write what is queued (waiting at most CLOSE_WAIT_S), then close the file."""
        if self._closed:
            return
        self._closed = True
        try:
            self._queue.put(None, timeout=CLOSE_WAIT_S)
        except queue.Full:
            pass
        self._writer.join(CLOSE_WAIT_S)

    # -- the writer thread ------------------------------------------------------------
    def _fail(self, why: str, lines: int) -> None:
        with self._state_lock:
            self._lost += lines
            if self._error is None:
                self._error = why

    def _file_size(self) -> int:
        try:
            return os.fstat(self._file.fileno()).st_size if self._file is not None else 0
        except (OSError, ValueError, AttributeError):
            return 0

    def _write_loop(self) -> None:
        done = False
        while not done:
            batch = [self._queue.get()]
            while len(batch) < BATCH_LINES:
                try:
                    batch.append(self._queue.get_nowait())
                except queue.Empty:
                    break
            lines = [b for b in batch if b is not None]
            done = len(lines) < len(batch)
            if lines:
                self._write(lines)
            for _ in batch:
                self._queue.task_done()
            with self._synced:
                self._synced.notify_all()
        if self._file is not None:
            try:
                self._file.close()
            except Exception:  # noqa: BLE001 - nothing left to lose
                pass

    def _write(self, lines: list[bytes]) -> None:
        data = b"".join(lines)
        if self._newline_first:
            data = b"\n" + data   # the torn line before stays alone on its line
        try:
            if self._file is None:
                self._file = self._opener(self.path)
            self._file.write(data)
            self._file.flush()
            self._fsync(self._file.fileno())
        except Exception as exc:  # noqa: BLE001 - reported, never raised into motion
            self._newline_first = True
            self._fail(f"{self.path}: journal cannot be written: {_why(exc)}", len(lines))
            try:
                if self._file is not None:
                    self._file.close()
            except Exception:  # noqa: BLE001 - its buffer may hold the failed bytes
                pass
            self._file = None  # reopened (fresh buffer) on the next batch
            return
        self._newline_first = False
        self._size += len(data)
        self._written += len(lines)
        if self.rotate and self._size > self.max_bytes // PARTS:
            self._next_part()

    def _next_part(self) -> None:
        self._part += 1
        stem = self.path.stem.split(".part")[0]
        try:
            if self._file is not None:
                self._file.close()
        except Exception:  # noqa: BLE001
            pass
        self._file = None
        self.path = self.path.with_name(f"{stem}.part{self._part}.jsonl")
        self._size = 0
        try:
            self._file = self._opener(self.path)
        except OSError as exc:
            self._fail(f"{self.path}: journal cannot be opened: {_why(exc)}", 0)
        self._prune()

    def _prune(self) -> None:
        try:
            prune_journal_dir(self.path.parent, max_bytes=self.max_bytes, max_age_s=self.max_age_s,
                              keep=(self.path,))
        except OSError:
            pass


class NullJournal:
    """No journal (tests, dry runs)."""

    path = None
    error = None
    lost = 0

    def record(self, kind: str, **fields: Any) -> None:
        pass

    def wait_written(self, timeout_s: float) -> bool:
        return True

    def recover(self, timeout_s: float = 2.0) -> bool:
        return True

    def close(self) -> None:
        pass


def read_journal(path: str | os.PathLike[str]) -> list[dict]:
    """Every whole line of a journal that is a JSON object. Torn lines, non-UTF-8 bytes
    and other garbage are skipped, never an error."""
    entries = []
    with open(path, "rb") as handle:
        for raw in handle:
            try:
                entry = json.loads(raw.decode("utf-8"))
            except (UnicodeDecodeError, ValueError):
                continue
            if isinstance(entry, dict):
                entries.append(entry)
    return entries
