"""Files that must never be lost or half written: atomic save, one backup, a lock,
and a small TOML writer (``tomllib`` reads TOML but does not write it).

- :func:`write_atomic`: the new text goes to a temporary file in the same directory,
  is flushed and ``os.fsync``-ed, the previous version is kept as ``<file>.bak``, and
  ``os.replace`` puts the new file in place in one step; a crash at any moment leaves
  either the old file or the new one, whole.
- :class:`FileLock`: ``fcntl.flock`` on ``<file>.lock``, held for the editor's
  lifetime, so two consoles cannot both write one file. The kernel drops the lock when
  its holder dies, so a lock can never go stale; the file holds the holder's pid for
  the message.
- :func:`toml_text`: tables, arrays of tables, strings (escaped), numbers, booleans and
  flat arrays of them - all our files need.
"""

from __future__ import annotations

import fcntl
import math
import os
import re
import stat
import tempfile
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any


class FileError(ValueError):
    """A file that cannot be read, parsed, validated or written: one line, naming the
    file, the key and the problem (``points.toml: point 'pick': joints: ...``)."""

    def __init__(self, source: str, key: str, problem: str):
        self.source, self.key, self.problem = source, key, problem
        super().__init__(f"{source}: {key}: {problem}" if key else f"{source}: {problem}")


class FileLocked(FileError):
    """Another console holds the file's lock."""


# --- atomic save -------------------------------------------------------------------

def real_path(path: str | Path) -> Path:
    """The file a path names, through any symbolic links: saves, backups and locks go
    to the real file, so a link is never replaced by a copy and one file has one lock."""
    return Path(os.path.realpath(path))


def backup_path(path: str | Path) -> Path:
    path = real_path(path)
    return path.with_name(path.name + ".bak")


def _fsync_dir(directory: Path) -> None:
    try:
        fd = os.open(directory, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def write_atomic(path: str | Path, text: str, *, backup: bool = True) -> None:
    """Replace ``path`` with ``text`` (UTF-8) atomically, keeping one ``.bak``.

    Steps: write a temporary file beside ``path``, flush, fsync; hard-link the current
    file to ``<file>.bak`` (through a temporary name and ``os.replace``, so the old
    backup is also replaced in one step); ``os.replace`` the temporary file onto
    ``path``; fsync the directory. On any failure the temporary file is removed and
    ``path`` is untouched.

    Raises:
        FileError: the directory is not writable or the disk is full, in one line.
    """
    path = real_path(path)
    directory = path.parent
    tmp_name = None
    try:
        fd, tmp_name = tempfile.mkstemp(dir=directory, prefix=f".{path.name}.", suffix=".tmp")
        os.fchmod(fd, _mode_for(path))  # mkstemp makes 0600; keep the file's own mode
        with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as handle:
            handle.write(text)
            handle.flush()
            os.fsync(handle.fileno())
        if backup and path.exists():
            _keep_backup(path)
        os.replace(tmp_name, path)
        tmp_name = None
        _fsync_dir(directory)
    except OSError as exc:
        raise FileError(str(path), "", f"cannot save: {exc.strerror or exc}") from None
    except UnicodeError:
        raise FileError(str(path), "", "cannot save: the text holds characters that are not "
                        "valid Unicode") from None
    finally:
        if tmp_name is not None:
            try:
                os.unlink(tmp_name)
            except OSError:
                pass


def _mode_for(path: Path) -> int:
    """The permission bits the saved file should have: the old file's, or for a new
    file what ``open`` would give (0666 less the umask)."""
    try:
        return stat.S_IMODE(os.stat(path).st_mode)
    except OSError:
        mask = os.umask(0)
        os.umask(mask)
        return 0o666 & ~mask


def _keep_backup(path: Path) -> None:
    bak = backup_path(path)
    tmp_bak = bak.with_name(f".{bak.name}.{os.getpid()}.tmp")
    if tmp_bak.exists():
        tmp_bak.unlink()
    try:
        os.link(path, tmp_bak)
    except OSError:  # no hard links here (some file systems): copy instead
        data = path.read_bytes()
        with open(tmp_bak, "wb") as handle:
            handle.write(data)
            handle.flush()
            os.fsync(handle.fileno())
    try:
        os.replace(tmp_bak, bak)
    except OSError:
        try:
            os.unlink(tmp_bak)
        except OSError:
            pass
        raise


def read_text(path: str | Path) -> str:
    """A file's UTF-8 text, or a one-line FileError."""
    try:
        raw = Path(path).read_bytes()
    except OSError as exc:
        raise FileError(str(path), "", f"cannot read: {exc.strerror or exc}") from None
    try:
        return raw.decode("utf-8-sig")  # a leading byte-order mark (some editors) is dropped
    except UnicodeDecodeError:
        raise FileError(str(path), "", "not UTF-8 text") from None


# --- lock ----------------------------------------------------------------------------

def lock_path(path: str | Path) -> Path:
    path = real_path(path)
    return path.with_name(path.name + ".lock")


class FileLock:
    """An exclusive, non-blocking ``flock`` on ``<file>.lock`` for as long as it is held.

    >>> import tempfile, pathlib
    >>> d = pathlib.Path(tempfile.mkdtemp())
    >>> with FileLock(d / "points.toml"):
    ...     FileLock(d / "points.toml").acquire()  # doctest: +ELLIPSIS
    Traceback (most recent call last):
    ...
    benchjog.console.cell.safe_files.FileLocked: ...points.toml: locked by another console (pid ...)
    """

    def __init__(self, path: str | Path):
        self.path = real_path(path)
        self.lock_file = lock_path(self.path)
        self._fd: int | None = None

    @property
    def held(self) -> bool:
        return self._fd is not None

    def acquire(self) -> "FileLock":
        if self._fd is not None:
            return self
        try:
            fd = os.open(self.lock_file, os.O_RDWR | os.O_CREAT, 0o644)
        except OSError as exc:
            raise FileError(str(self.path), "", f"cannot lock: {exc.strerror or exc}") from None
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            try:
                holder = os.pread(fd, 32, 0).decode("ascii", "replace").strip() or "unknown"
            finally:
                os.close(fd)
            raise FileLocked(str(self.path), "",
                             f"locked by another console (pid {holder})") from None
        except OSError as exc:
            os.close(fd)
            raise FileError(str(self.path), "", f"cannot lock: {exc.strerror or exc}") from None
        os.ftruncate(fd, 0)
        os.pwrite(fd, f"{os.getpid()}\n".encode("ascii"), 0)
        self._fd = fd
        return self

    def release(self) -> None:
        fd, self._fd = self._fd, None
        if fd is None:
            return
        try:
            os.ftruncate(fd, 0)
            fcntl.flock(fd, fcntl.LOCK_UN)
        finally:
            os.close(fd)

    def __enter__(self) -> "FileLock":
        return self.acquire()

    def __exit__(self, *exc: object) -> None:
        self.release()

    def __del__(self) -> None:  # pragma: no cover - belt and braces
        try:
            self.release()
        except Exception:  # noqa: BLE001
            pass


# --- TOML writer -----------------------------------------------------------------------

_BARE_KEY = re.compile(r"^[A-Za-z0-9_-]+$")
_ESCAPES = {'"': '\\"', "\\": "\\\\", "\b": "\\b", "\t": "\\t", "\n": "\\n",
            "\f": "\\f", "\r": "\\r"}


def toml_string(text: str) -> str:
    r"""A TOML basic string: quotes, backslashes and control characters escaped.

    TOML 1.0 (toml.io, "String", from memory): a basic string may hold any Unicode
    character except the quote, the backslash and the control characters other than
    tab, which must be escaped (\b \t \n \f \r \" \\ or \uXXXX).

    >>> print(toml_string('say "hi"\n'))
    "say \"hi\"\n"
    >>> print(toml_string("C:\\parts"))
    "C:\\parts"
    >>> print(toml_string("bell\x07"))
    "bell\u0007"
    """
    out = []
    for ch in text:
        if ch in _ESCAPES:
            out.append(_ESCAPES[ch])
        elif ord(ch) < 0x20 or ord(ch) == 0x7F:
            out.append(f"\\u{ord(ch):04X}")
        else:
            out.append(ch)
    return '"' + "".join(out) + '"'


def toml_key(key: str) -> str:
    return key if _BARE_KEY.match(key) else toml_string(key)


def toml_value(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if not math.isfinite(value):
            raise ValueError(f"cannot write a non-finite number ({value})")
        value = 0.0 if value == 0 else value  # never -0.0
        return repr(value)
    if isinstance(value, str):
        return toml_string(value)
    if isinstance(value, Sequence):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    raise TypeError(f"cannot write {type(value).__name__} to TOML")


def _table_body(table: Mapping[str, Any]) -> list[str]:
    return [f"{toml_key(k)} = {toml_value(v)}" for k, v in table.items() if v is not None]


def toml_text(doc: Mapping[str, Any], header: str = "") -> str:
    """TOML text for ``doc``: top-level scalars, then tables (``[name]``) and arrays of
    tables (``[[name]]``, a list of mappings), in the mapping's order. ``None``
    values are left out. ``header`` lines are written first as comments.

    >>> print(toml_text({"file": {"kind": "points"}, "points": [{"name": "a"}, {"name": "b"}]}))
    [file]
    kind = "points"
    <BLANKLINE>
    [[points]]
    name = "a"
    <BLANKLINE>
    [[points]]
    name = "b"
    <BLANKLINE>
    """
    lines = [f"# {line}" if line else "#" for line in header.splitlines()]
    scalars = {k: v for k, v in doc.items()
               if not isinstance(v, Mapping) and not _is_table_array(v)}
    lines += _table_body(scalars)
    for key, value in doc.items():
        if isinstance(value, Mapping):
            if lines:
                lines.append("")
            lines.append(f"[{toml_key(key)}]")
            lines += _table_body(value)
        elif _is_table_array(value):
            for item in value:
                if lines:
                    lines.append("")
                lines.append(f"[[{toml_key(key)}]]")
                lines += _table_body(item)
    return "\n".join(lines) + "\n"


def _is_table_array(value: Any) -> bool:
    return (isinstance(value, Sequence) and not isinstance(value, str) and len(value) > 0
            and all(isinstance(v, Mapping) for v in value))


__all__ = ["FileError", "FileLocked", "FileLock", "write_atomic", "read_text",
           "backup_path", "lock_path", "toml_text", "toml_string", "toml_value"]
