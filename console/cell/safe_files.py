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
- :func:`toml_text_keeping`: a save over a file a person edited keeps their comments,
  key order and formatting (tomlkit, the style-preserving TOML library), changing only
  the values that changed.
- :func:`toml_pieces` / :func:`parse_toml_pieces`: ``tomllib.loads`` table by table,
  with progress, proven to give the same mapping (else one whole parse); the pieces let
  a save edit the text it read (points.PointBook.to_text).
- :func:`read_text` caps the size (:data:`MAX_FILE_BYTES`) and turns every way a path
  can be bad (too long, a NUL byte, a device) into one line; :func:`parse_toml` turns a
  too-deep nesting (RecursionError in ``tomllib``) into one line too.
"""

from __future__ import annotations

import fcntl
import math
import os
import re
import stat
import tempfile
import time
import tomllib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
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
    remove_stale_temps(path)
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


STALE_TEMP_S = 60.0  # a temp file of a save this old was left by a save that was killed


def remove_stale_temps(path: str | Path, *, older_than_s: float = STALE_TEMP_S) -> list[Path]:
    """Remove the hidden temporary files (``.<name>.*.tmp``) that a killed save left
    beside ``path``. Saves hold the file's lock, so no other save of this file is in
    progress; the age limit spares a temp file that something else is still writing.
    Returns what was removed."""
    path = real_path(path)
    removed = []
    now = time.time()
    try:
        entries = list(os.scandir(path.parent))
    except OSError:
        return removed
    prefix = f".{path.name}."
    for entry in entries:
        if not (entry.name.startswith(prefix) and entry.name.endswith(".tmp")):
            continue
        try:
            if entry.is_file(follow_symlinks=False) and \
                    now - entry.stat(follow_symlinks=False).st_mtime >= older_than_s:
                os.unlink(entry.path)
                removed.append(Path(entry.path))
        except OSError:
            pass
    return removed


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


MAX_FILE_BYTES = 16 * 1024 * 1024  # far above any hand-kept cell (10,000 points: ~2 MB)


def read_bytes(path: str | Path, limit: int = MAX_FILE_BYTES) -> bytes:
    """A file's bytes, at most ``limit`` of them, or a one-line FileError: a missing or
    unreadable file, a name too long (ENAMETOOLONG), a NUL byte in the name, a
    directory, or something larger than the limit (``/dev/zero`` included: it is read
    only up to the limit)."""
    name = str(path)
    shown = name if len(name) <= 80 else name[:60] + "..." + name[-16:]
    if "\0" in name:
        raise FileError(shown.replace("\0", "\\0"), "", "the file name holds a NUL byte")
    try:
        with open(path, "rb") as handle:
            raw = handle.read(limit + 1)
    except OSError as exc:
        raise FileError(shown, "", f"cannot read: {exc.strerror or exc}") from None
    if len(raw) > limit:
        raise FileError(shown, "", f"larger than {limit // (1024 * 1024)} MiB: not a benchjog file")
    return raw


def read_text(path: str | Path, limit: int = MAX_FILE_BYTES) -> str:
    """A file's UTF-8 text (size-capped, see :func:`read_bytes`), or a one-line FileError."""
    raw = read_bytes(path, limit)
    try:
        return raw.decode("utf-8-sig")  # a leading byte-order mark (some editors) is dropped
    except UnicodeDecodeError:
        raise FileError(str(path), "", "not UTF-8 text") from None


def parse_toml(text: str, source: str) -> dict[str, Any]:
    """``tomllib.loads``, with every failure one FileError line: a syntax error, and
    arrays or inline tables nested so deep that the parser's recursion runs out."""
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise FileError(source, "toml", str(exc).splitlines()[0]) from None
    except RecursionError:
        raise FileError(source, "toml", "arrays or tables nested too deeply") from None


# --- reading in pieces ------------------------------------------------------------------

PIECES_EVERY = 256   # pieces parsed between two calls of a split parse's progress callback


@dataclass
class TomlPiece:
    """One table of a TOML text read in pieces: ``text[start:end]`` is its leading
    comment and blank lines, its header line (from ``header``), and its body (from
    ``body``); ``kind`` is the table's name ("" for the text before the first table) and
    ``table`` what it holds."""

    kind: str
    start: int
    header: int
    body: int
    end: int
    table: dict[str, Any]


def _header_pattern(tables: Sequence[str], arrays: Sequence[str]) -> re.Pattern[str]:
    heads = [rf"\[\[[ \t]*{re.escape(k)}[ \t]*\]\]" for k in arrays] + \
        [rf"\[[ \t]*{re.escape(k)}[ \t]*\]" for k in tables]
    return re.compile(r"^(?:[ \t]*(?:#[^\n]*)?\r?\n)*(?P<head>[ \t]*(?:" + "|".join(heads) +
                      r")[ \t]*(?:#[^\r\n]*)?)\r?$", re.M)


def toml_pieces(text: str, tables: Sequence[str], arrays: Sequence[str], *,
                progress: Any = None) -> tuple[dict[str, Any], list[TomlPiece]] | None:
    """``tomllib.loads(text)`` read table by table, or None where that cannot be proven
    the same (then one whole parse decides).

    The text is cut at the line starts where a header line of one of ``tables``
    (``[file]``) or ``arrays`` (``[[points]]``) begins, with the comment and blank lines
    just above it; each piece is parsed alone by ``tomllib``. Why it is the whole
    parse (TOML 1.0, from memory): a piece that starts where the whole text's reader
    is between statements and parses alone cannot end inside a string, an array or
    an inline table (that is an error at the end of a text), so the next piece starts
    between statements too; the whole text's statements are then the pieces' in turn.
    A piece must hold exactly its own header's table (the first piece: nothing), so no
    statement of one piece reaches into another's table; a ``[table]`` met twice, a
    sub-table header (``[file.x]``) or anything else is refused (None).

    ``progress(done, total)`` (characters parsed of the text's length) is called at the
    start, every PIECES_EVERY pieces and at the end; an exception it raises is passed on.

    Raises:
        tomllib.TOMLDecodeError, RecursionError: never here; a piece that does not
        parse alone gives None, for the whole parse to say what is wrong.
    """
    pattern = _header_pattern(tables, arrays)
    cuts = [(m.start(), m.start("head"), m.end()) for m in pattern.finditer(text)]
    total = len(text)
    data: dict[str, Any] = {}
    pieces: list[TomlPiece] = []
    starts = [c[0] for c in cuts] + [total]
    if progress is not None:
        progress(0, total)
    try:
        if tomllib.loads(text[:starts[0]]):
            return None   # keys before the first table: not a file these pieces make
        pieces.append(TomlPiece("", 0, 0, 0, starts[0], {}))
        for first in range(0, len(cuts), PIECES_EVERY):
            group = cuts[first:first + PIECES_EVERY]
            found = _parsed_group(text, group, starts[first + len(group)], tables, arrays)
            if found is None:   # a bracket at a line start that is no header: one by one
                found = []
                for n, cut in enumerate(group):
                    one = _parsed_group(text, [cut], starts[first + n + 1], tables, arrays,
                                        alone=True)
                    if one is None:
                        return None
                    found += one
            for n, (kind, table) in enumerate(found):
                start, header, head_end = group[n]
                end = starts[first + n + 1]
                if kind in tables:
                    if kind in data:
                        return None   # a [table] met twice
                    data[kind] = table
                else:
                    data.setdefault(kind, []).append(table)
                body = head_end + 1 if head_end < end else end   # past the header line's \n
                pieces.append(TomlPiece(kind, start, header, body, end, table))
            if progress is not None:
                progress(starts[first + len(group)], total)
    except (tomllib.TOMLDecodeError, RecursionError):
        return None
    if progress is not None and not cuts:
        progress(total, total)
    return data, pieces


_LINE_BRACKET = re.compile(r"^[ \t]*\[", re.M)


def _parsed_group(text: str, group: list[tuple[int, int, int]], end: int, tables: Sequence[str],
                  arrays: Sequence[str], alone: bool = False) -> list[tuple[str, dict]] | None:
    """The (kind, table) of each piece of a run of pieces, parsed together, or None.
    Together only when no line of the run starts with a bracket but the pieces' own
    headers (so no statement of one piece reaches another's table); ``alone`` (one
    piece) needs only that the piece hold exactly its own header's table.

    Raises:
        tomllib.TOMLDecodeError, RecursionError: the run does not parse alone."""
    chunk = text[group[0][0]:end]
    if not alone and len(_LINE_BRACKET.findall(chunk)) != len(group):
        return None
    got = tomllib.loads(chunk)
    kinds = [_kind_of(text[h:e]) for _s, h, e in group]
    want = {k: kinds.count(k) for k in kinds}
    if set(got) != set(want):
        return None
    taken = {k: 0 for k in want}
    out = []
    for kind in kinds:
        value = got[kind]
        if kind in arrays:
            if not (isinstance(value, list) and len(value) == want[kind]
                    and isinstance(value[taken[kind]], dict)):
                return None
            out.append((kind, value[taken[kind]]))
            taken[kind] += 1
        elif kind in tables and want[kind] == 1 and isinstance(value, dict):
            out.append((kind, value))
        else:
            return None
    return out


def _kind_of(header: str) -> str:
    """The table name of a header line the pattern found (``[[ points ]]`` -> points)."""
    return header.split("#", 1)[0].strip().strip("[]").strip()


def parse_toml_pieces(text: str, source: str, tables: Sequence[str], arrays: Sequence[str], *,
                      progress: Any = None) -> tuple[dict[str, Any], list[TomlPiece] | None]:
    """:func:`parse_toml` read in pieces (:func:`toml_pieces`) with progress, and the
    pieces; where the pieces are refused, one whole parse (pieces None)."""
    split = toml_pieces(text, tables, arrays, progress=progress)
    if split is not None:
        return split
    data = parse_toml(text, source)
    if progress is not None:
        progress(len(text), len(text))
    return data, None


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
        for _ in range(10):  # a holder removed the lock file between our open and flock
            fd = self._try_acquire()
            if fd is not None:
                self._fd = fd
                return self
        raise FileError(str(self.path), "", "cannot lock: the lock file keeps changing")

    def _try_acquire(self) -> int | None:
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
        try:
            if not os.path.samestat(os.fstat(fd), os.stat(self.lock_file)):
                os.close(fd)  # locked a file that its last holder had just removed
                return None
        except FileNotFoundError:
            os.close(fd)
            return None
        try:
            os.ftruncate(fd, 0)
            if os.pwrite(fd, f"{os.getpid()}\n".encode("ascii"), 0) <= 0:
                raise OSError(28, "No space left on device")
        except OSError as exc:  # a full disk: the project's one line, not a raw OSError
            self._drop(fd)
            raise FileError(str(self.path), "", f"cannot lock: {exc.strerror or exc}") from None
        return fd

    def _drop(self, fd: int) -> None:
        """Remove the lock file, then unlock and close (removal first, while still
        held, so nobody else can be holding it when it goes)."""
        try:
            try:
                if os.path.samestat(os.fstat(fd), os.stat(self.lock_file)):
                    os.unlink(self.lock_file)
            except OSError:
                pass
            fcntl.flock(fd, fcntl.LOCK_UN)
        finally:
            os.close(fd)

    def release(self) -> None:
        """Unlock and remove the lock file (a lock file left behind means its holder
        died; the kernel has dropped its lock even then)."""
        fd, self._fd = self._fd, None
        if fd is None:
            return
        self._drop(fd)

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


def toml_text_keeping(original: str | None, doc: Mapping[str, Any], header: str = "") -> str:
    r"""TOML text for ``doc`` that keeps what a person wrote in ``original`` (the file as
    last read): comments, key order, blank lines and number formatting stay; values
    that changed are replaced, keys that went are removed, new keys and tables are
    appended. Tables in an array of tables (``[[points]]``) are matched by their
    ``name`` when every one has one (a rename or a delete leaves the others' comments
    alone), otherwise by position.

    The result is checked: it must read back (``tomllib``) exactly as ``toml_text(doc)``
    does; if not (or when ``original`` is empty or not TOML), the plain writer's text is
    returned, so a save is never wrong for the sake of formatting.

    >>> old = '# my cell\n[file]\nkind = "points"   # do not change\nscale = 1.50\n'
    >>> print(toml_text_keeping(old, {"file": {"kind": "points", "scale": 1.5, "n": 2}}), end="")
    # my cell
    [file]
    kind = "points"   # do not change
    scale = 1.50
    n = 2
    """
    fresh = toml_text(doc, header)
    if not original or not original.strip():
        return fresh
    try:
        import tomlkit

        kept = tomlkit.parse(original)
        _merge_table(kept, doc)
        text = tomlkit.dumps(kept)
        if tomllib.loads(text) == tomllib.loads(fresh):
            return text
    except Exception:  # noqa: BLE001 - any surprise: the plain writer's text, never a wrong file
        pass
    return fresh


def _same(item: Any, value: Any) -> bool:
    plain = item.unwrap() if hasattr(item, "unwrap") else item
    return type(plain) is type(value) and plain == value or (
        isinstance(plain, list) and isinstance(value, (list, tuple)) and list(value) == plain
        and all(type(a) is type(b) for a, b in zip(plain, value)))


def _merge_table(table: Any, doc: Mapping[str, Any]) -> None:
    import tomlkit

    for key in list(table.keys()):
        if doc.get(key) is None:
            del table[key]
    for key, value in doc.items():
        if value is None:
            continue
        if isinstance(value, Mapping):
            current = table.get(key)
            if isinstance(current, dict):
                _merge_table(current, value)
            else:
                table[key] = _new_table(value)
        elif _is_table_array(value):
            _merge_array(table, key, value)
        elif key in table and _same(table[key], value):
            continue
        else:
            table[key] = list(value) if isinstance(value, tuple) else value
            if isinstance(value, float):
                table[key] = tomlkit.item(0.0 if value == 0 else value)


def _new_table(value: Mapping[str, Any]) -> Any:
    import tomlkit

    table = tomlkit.table()
    for key, item in value.items():
        if item is not None:
            table[key] = list(item) if isinstance(item, tuple) else item
    return table


def _merge_array(table: Any, key: str, items: Sequence[Mapping[str, Any]]) -> None:
    import tomlkit
    from tomlkit.items import AoT

    current = table.get(key)
    if not isinstance(current, AoT):
        aot = tomlkit.aot()
        for item in items:
            aot.append(_new_table(item))
        table[key] = aot
        return
    old = list(current)
    by_name = all("name" in t for t in old) and all("name" in i for i in items)
    pool = {str(t["name"]): t for t in old} if by_name else None
    chosen = []
    for index, item in enumerate(items):
        if pool is not None:
            match = pool.pop(str(item["name"]), None)
        else:
            match = old[index] if index < len(old) else None
        if match is None:
            match = _new_table(item)
        else:
            _merge_table(match, item)
        chosen.append(match)
    kept = [t for t in chosen if any(t is o for o in old)]
    survivors = [o for o in old if any(o is t for t in chosen)]
    if chosen[:len(kept)] == kept and all(a is b for a, b in zip(kept, survivors)):
        # deletions and additions at the end only: edit the array in place, so the
        # blank lines and comments between tables stay as they were
        for index in reversed(range(len(old))):
            if not any(old[index] is t for t in chosen):
                del current[index]
        for t in chosen[len(kept):]:
            current.append(t)
        return
    aot = tomlkit.aot()
    for t in chosen:
        aot.append(t)
    table[key] = aot


def _is_table_array(value: Any) -> bool:
    return (isinstance(value, Sequence) and not isinstance(value, str) and len(value) > 0
            and all(isinstance(v, Mapping) for v in value))


__all__ = ["FileError", "FileLocked", "FileLock", "write_atomic", "read_text", "read_bytes",
           "parse_toml", "parse_toml_pieces", "toml_pieces", "TomlPiece", "remove_stale_temps",
           "toml_text_keeping", "MAX_FILE_BYTES",
           "backup_path", "lock_path", "toml_text", "toml_string", "toml_value"]
