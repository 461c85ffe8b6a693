"""Taught points and user frames, and the points file (TOML) that holds them.

A taught point is the tool pose the arm was at when it was taught, expressed in a
frame ("base" or a user frame's name), together with the joint values, their IK
branch, the time (ISO 8601, UTC) and an optional note. Motion goes to the point's
Cartesian values in its frame on its branch, so a point taught in a user frame moves
with the frame when the frame is taught again.

In memory: mm and radians. In the file: mm and degrees (CONTRACT.md).

The points file::

    [file]
    kind = "benchjog-points"
    version = 1
    arm = "planar-bench"               # the arm the points were taught on

    [[frames]]                         # zero or more user frames
    name = "fixture"
    origin = [-40.0, 250.0]            # mm, base frame
    angle_deg = 0.0                    # direction of the frame's +x axis, CCW from base x
    z_mm = 0.0                         # height of the origin (SCARA)
    taught = "2026-12-01T09:30:00Z"

    [[points]]
    name = "pick"
    frame = "fixture"                  # "base" or a frame above
    cartesian = [20.0, 10.0]           # in the frame: x, y mm (SCARA: x, y, z mm, roll deg)
    joints = [58.31, 74.52]            # deg (mm for the quill), as taught
    branch = "elbow-down"              # or "elbow-up"
    taught = "2026-12-01T09:31:12Z"
    note = "tray slot 1"               # optional
"""

from __future__ import annotations

import difflib
import math
import re
import tomllib
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass, field, replace
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

from benchjog.kinematics.armspec import number_problem
from benchjog.console.cell.safe_files import (FileError, FileLock, TomlPiece, parse_toml,
                                             parse_toml_pieces, read_text, real_path, toml_key,
                                             toml_pieces, toml_text_keeping, toml_value,
                                             write_atomic)
from benchjog.kinematics.frames import FrameError, UserFrame, base_from_frame, frame_from_base, \
    frame_from_two_points
from benchjog.kinematics.model import Arm, Branch
from benchjog.kinematics.solve import joints_from_tool, tool_from_joints

FILE_KIND = "benchjog-points"
FILE_VERSION = 1
BASE = "base"
CONSISTENCY_MM = 0.05  # stored joints and Cartesian values further apart than this: a warning
POINT_KEYS = ("name", "frame", "cartesian", "joints", "branch", "taught", "note")
MAX_CELL_MM = 1e6  # a kilometre: any bench cell's coordinates are far inside this
FRAME_KEYS = ("name", "origin", "angle_deg", "z_mm", "taught")
PROGRESS_EVERY = 256  # points checked between two calls of a load's progress callback

# a load's progress callback: (points checked, points in the file); it may raise to stop
Progress = Callable[[int, int], None]


class PointError(ValueError):
    """An edit that cannot be made (unknown or duplicate name, frame in use...)."""


def utc_now_iso() -> str:
    """Now, ISO 8601 UTC to the second: ``2026-12-01T09:31:12Z``."""
    return datetime.now(timezone.utc).isoformat(timespec="seconds").replace("+00:00", "Z")


def branch_of(arm: Arm, joints: Sequence[float]) -> Branch:
    """The IK branch of a joint pose: elbow-down when the elbow's DH theta has
    sin > 0, elbow-up when sin < 0; a stretched or folded elbow (sin = 0) counts as
    elbow-down when theta >= 0 (the convention of benchjog.kinematics.solve)."""
    t2 = joints[1] + arm.joints[1].offset_rad
    s = math.sin(t2)
    if abs(s) < 1e-12:
        return Branch.ELBOW_DOWN if math.remainder(t2, 2 * math.pi) >= 0 else Branch.ELBOW_UP
    return Branch.ELBOW_DOWN if s > 0 else Branch.ELBOW_UP


def target_from_pose(arm: Arm, pose: Sequence[float]) -> tuple[float, ...]:
    """The target part of a tool pose: planar (x, y) (the heading follows from the
    joints), SCARA (x, y, z, roll)."""
    return tuple(pose[:4]) if arm.is_scara else tuple(pose[:2])


def check_name(name: str, what: str = "point") -> str:
    name = name.strip() if isinstance(name, str) else ""
    if not name:
        raise PointError(f"a {what} needs a non-empty name")
    if any(ord(ch) < 0x20 or ord(ch) == 0x7F for ch in name):
        raise PointError(f"{what} name {name!r}: no control characters")
    if len(name) > 64:
        raise PointError(f"{what} name {name[:20]!r}...: at most 64 characters")
    return name


@dataclass(frozen=True)
class TaughtPoint:
    """A taught point. ``cartesian`` is in ``frame`` (mm, rad); ``joints`` (rad, mm)
    are the values it was taught (or last recomputed) at, on ``branch``."""

    name: str
    cartesian: tuple[float, ...]
    joints: tuple[float, ...]
    branch: Branch
    frame: str = BASE
    taught: str = ""
    note: str = ""


@dataclass(frozen=True)
class FrameChange:
    """What teaching a frame again did to the points taught in it."""

    frame: UserFrame
    moved: tuple[str, ...]
    unreachable: tuple[tuple[str, str], ...]  # (point name, reason)

    def lines(self) -> list[str]:
        out = [f"frame {self.frame.name}: {len(self.moved)} point(s) moved with it"]
        out += [f"point {name} is now unreachable: {why} (kept, frame coordinates unchanged)"
                for name, why in self.unreachable]
        return out


@dataclass
class PointBook:
    """The points and user frames of one points file.

    ``load`` reads for checking; ``open`` reads (or starts an empty book) and holds
    the file's lock until ``close``, for editing. Every edit changes memory only;
    ``save`` writes the file atomically with one backup.
    """

    arm: Arm
    points: list[TaughtPoint] = field(default_factory=list)
    frames: dict[str, UserFrame] = field(default_factory=dict)
    frame_taught: dict[str, str] = field(default_factory=dict)
    path: Path | None = None
    warnings: list[str] = field(default_factory=list)
    _lock: FileLock | None = field(default=None, repr=False)
    _where: dict[str, int] | None = field(default=None, repr=False, compare=False)
    _as_read: str | None = field(default=None, repr=False)  # the file's text: a save keeps its style
    _pieces: list[TomlPiece] | None = field(default=None, repr=False, compare=False)  # its tables

    # --- files ---------------------------------------------------------------------

    @classmethod
    def load(cls, path: str | Path, arm: Arm, *, progress: Progress | None = None,
             parsing: Progress | None = None) -> "PointBook":
        """Read and validate a points file (no lock). ``progress(done, total)``, when
        given, is called as the points are checked (see :func:`book_from_mapping`);
        ``parsing(done, total)`` as the text is parsed (characters, table by table:
        safe_files.parse_toml_pieces, the same mapping as one tomllib.loads).

        Raises:
            FileError: one line naming the file, the key and the problem.
        """
        path = Path(path)
        text = read_text(path)
        data, pieces = parse_toml_pieces(text, str(path), _TABLES, _ARRAYS, progress=parsing)
        book = book_from_mapping(data, arm, str(path), progress=progress)
        book.path = path
        book._as_read = text
        book._pieces = pieces
        return book

    @classmethod
    def open(cls, path: str | Path, arm: Arm, *, progress: Progress | None = None,
             parsing: Progress | None = None) -> "PointBook":
        """The book for editing: takes the file's lock (FileLocked if another console
        holds it), then reads the file, or starts an empty book when there is none.
        An exception from ``progress`` (a load given up) releases the lock."""
        path = Path(path)
        lock = FileLock(path).acquire()
        try:
            book = cls.load(path, arm, progress=progress, parsing=parsing) if path.exists() \
                else cls(arm, path=path)
        except BaseException:
            lock.release()
            raise
        book._lock = lock
        return book

    def close(self) -> None:
        if self._lock is not None:
            self._lock.release()
            self._lock = None

    def __enter__(self) -> "PointBook":
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def save(self, path: str | Path | None = None) -> Path:
        """Write the book atomically (temp file, fsync, ``.bak`` of the old one,
        ``os.replace``). Without the book's own lock (``open``) the target's lock is
        taken for the write, so a file another console holds is never written."""
        target = Path(path) if path is not None else self.path
        if target is None:
            raise PointError("the book has no file yet: give a path")
        same_file = self.path is not None and real_path(target) == real_path(self.path)
        text, pieces = self._text_and_pieces(self._as_read if same_file else None)
        if self._lock is not None and same_file:
            write_atomic(target, text)
        else:
            with FileLock(target):
                write_atomic(target, text)
        if same_file:
            self._as_read, self._pieces = text, pieces
        return target

    def to_text(self, keep: str | None = None) -> str:
        """The file's text; ``keep``: the text as read, whose comments, blank lines,
        spacing and key order stay.

        Three roads to the same data, the fastest that can be proven first:

        - no text to keep: the plain writer, :meth:`_plain_text` (byte for byte
          ``toml_text(self.to_mapping(), header)``);
        - the text as read, table by table (:func:`_spliced`): every table the save
          does not change is kept byte for byte with the comments and blank lines above
          it, a changed one has only its changed lines rewritten (an inline comment
          after a value stays), a deleted one is dropped, a new one is written in after
          the one before it. Each table written is parsed on its own by tomllib and must
          be what :meth:`to_mapping` holds for it; the kept ones were parsed on their
          own when the file was read (safe_files.toml_pieces), so the whole text reads
          back as ``to_mapping`` says;
        - where that cannot be proven (a value over several lines that changed, tables
          out of their order, a text that could not be read in pieces): the plain text
          when the text as read holds nothing a person wrote (:func:`_nothing_to_keep`),
          else tomlkit's keeping road (safe_files.toml_text_keeping)."""
        return self._text_and_pieces(keep)[0]

    def _text_and_pieces(self, keep: str | None) -> tuple[str, list[TomlPiece] | None]:
        if not keep or not keep.strip():
            return self._plain_text(), None
        pieces = self._pieces if keep is self._as_read else None
        if pieces is None:
            split = toml_pieces(keep, _TABLES, _ARRAYS)
            pieces = split[1] if split is not None else None
        if pieces is not None:
            spliced = _spliced(self, keep, pieces)
            if spliced is not None:
                return spliced
        fresh = self._plain_text()
        if _nothing_to_keep(keep, fresh):
            return fresh, None
        return toml_text_keeping(keep, self.to_mapping(), header=_HEADER), None

    def _point_row(self, p: TaughtPoint) -> dict[str, Any]:
        """``p``'s row of :meth:`to_mapping` (an empty time stamp or note is None: not
        written)."""
        return {"name": p.name, "frame": p.frame,
                "cartesian": [_r(v) for v in _display_cartesian(self.arm, p.cartesian)],
                "joints": [_r(j.to_display(v)) for j, v in zip(self.arm.joints, p.joints)],
                "branch": p.branch.value, "taught": p.taught or None, "note": p.note or None}

    def _plain_text(self) -> str:
        """``safe_files.toml_text(self.to_mapping(), header)``, the points written by one
        f-string each (the frames, few, by the general writer)."""
        import re

        from benchjog.console.cell.safe_files import toml_string, toml_text

        plain = re.compile(_PLAIN_STRING).match
        quoted: dict[str, str] = {}   # frames, branches and times repeat from point to point

        def text(value: str) -> str:
            found = quoted.get(value)
            if found is None:
                found = quoted[value] = f'"{value}"' if plain(value) else toml_string(value)
            return found

        head = PointBook(self.arm, frames=self.frames, frame_taught=self.frame_taught)
        out = [toml_text(head.to_mapping(), _HEADER)]
        shown = [j.to_display for j in self.arm.joints]
        scara = self.arm.is_scara
        branches = {b: text(b.value) for b in Branch}
        for p in self.points:   # each number as _r and toml_value write it
            cart = _display_cartesian(self.arm, p.cartesian) if scara else p.cartesian
            c = ", ".join([repr(0.0 if (r := round(v, 6)) == 0 else r) for v in cart])
            j = ", ".join([repr(0.0 if (r := round(f(v), 6)) == 0 else r)
                           for f, v in zip(shown, p.joints)])
            if "n" in c or "n" in j:   # inf or nan: no finite float's repr has an n
                raise ValueError(f"cannot write a non-finite number ([{c}], [{j}])")  # as toml_value
            block = (f"\n[[points]]\nname = {text(p.name)}\nframe = {text(p.frame)}\n"
                     f"cartesian = [{c}]\njoints = [{j}]\nbranch = {branches[p.branch]}\n")
            if p.taught:
                block += f"taught = {text(p.taught)}\n"
            if p.note:
                block += f"note = {text(p.note)}\n"
            out.append(block)
        return "".join(out)

    def to_mapping(self) -> dict[str, Any]:
        doc: dict[str, Any] = {"file": {"kind": FILE_KIND, "version": FILE_VERSION,
                                        "arm": self.arm.name}}
        doc["frames"] = [{
            "name": f.name, "origin": [_r(f.origin_x), _r(f.origin_y)],
            "angle_deg": _r(math.degrees(f.angle_rad)), "z_mm": _r(f.z_mm),
            "taught": self.frame_taught.get(f.name) or None,
        } for f in self.frames.values()]
        doc["points"] = [self._point_row(p) for p in self.points]
        return {k: v for k, v in doc.items() if v != []}

    # --- lookups -------------------------------------------------------------------

    @property
    def names(self) -> list[str]:
        return [p.name for p in self.points]

    def has(self, name: str) -> bool:
        return self._position(name) is not None

    def point(self, name: str) -> TaughtPoint:
        i = self._position(name)
        if i is not None:
            return self.points[i]
        if not self.points:
            raise PointError(f"no point named {name!r} (the book is empty)")
        close = difflib.get_close_matches(name, self.names, n=3, cutoff=0.6)
        hint = (f"did you mean {', '.join(map(repr, close))}?" if close
                else f"{len(self.points)} points, none like it")
        raise PointError(f"no point named {name!r} ({hint})")

    def _position(self, name: str) -> int | None:
        """Where the point of that name is in ``points``, by a name index kept beside
        the list (rebuilt when the list was changed other than through the book)."""
        where = self._where
        if where is None or len(where) != len(self.points):
            where = self._where = {p.name: i for i, p in enumerate(self.points)}
        i = where.get(name)
        if i is not None and self.points[i].name != name:
            self._where = None
            return self._position(name)
        return i

    def _append(self, point: TaughtPoint) -> None:
        if self._where is not None and len(self._where) == len(self.points):
            self._where[point.name] = len(self.points)
        self.points.append(point)

    def frame(self, name: str) -> UserFrame | None:
        """The user frame of that name; None for "base"."""
        if name == BASE:
            return None
        if name not in self.frames:
            raise PointError(f"no frame named {name!r} (frames: "
                             f"{', '.join([BASE, *self.frames]) })")
        return self.frames[name]

    def base_target(self, point: TaughtPoint | str) -> tuple[float, ...]:
        """The point's target in the base frame (mm, rad), what motion goes to."""
        if isinstance(point, str):
            point = self.point(point)
        frame = self.frame(point.frame)
        return tuple(point.cartesian) if frame is None else base_from_frame(frame, point.cartesian)

    def cartesian_in(self, frame_name: str, joints: Sequence[float]) -> tuple[float, ...]:
        """The tool target of a joint pose, expressed in a frame."""
        base = target_from_pose(self.arm, tool_from_joints(self.arm, joints))
        frame = self.frame(frame_name)
        return base if frame is None else frame_from_base(frame, base)

    # --- edits ---------------------------------------------------------------------

    def teach(self, name: str, joints: Sequence[float], *, frame: str = BASE, note: str = "",
              taught: str | None = None) -> TaughtPoint:
        """A new point at the pose of ``joints`` (rad, mm), expressed in ``frame``."""
        name = check_name(name)
        if self.has(name):
            raise PointError(f"a point named {name!r} exists already (update or rename it)")
        point = self._make(name, joints, frame, note, taught)
        self._append(point)
        return point

    def teach_current(self, interlock: Any, name: str, *, frame: str = BASE,
                      note: str = "") -> TaughtPoint:
        """Teach the arm's current pose (``interlock.state().joints``)."""
        return self.teach(name, interlock.state().joints, frame=frame, note=note)

    def update(self, name: str, joints: Sequence[float], *, frame: str | None = None,
               note: str | None = None) -> TaughtPoint:
        """Teach an existing point again at ``joints`` (keeps its name, and its frame
        and note unless given)."""
        old = self.point(name)
        new = self._make(old.name, joints, old.frame if frame is None else frame,
                         old.note if note is None else note, None)
        self.points[self._index(name)] = new
        return new

    def rename(self, old: str, new: str) -> TaughtPoint:
        new = check_name(new)
        point = self.point(old)
        if new != old and self.has(new):
            raise PointError(f"a point named {new!r} exists already")
        renamed = replace(point, name=new)
        self.points[self._index(old)] = renamed
        self._where = None
        return renamed

    def set_note(self, name: str, note: str) -> TaughtPoint:
        point = replace(self.point(name), note=note)
        self.points[self._index(name)] = point
        return point

    def delete(self, name: str) -> TaughtPoint:
        point = self.point(name)
        del self.points[self._index(name)]
        self._where = None
        return point

    def define_frame(self, name: str, origin_joints: Sequence[float],
                     x_joints: Sequence[float]) -> FrameChange:
        """Define (or teach again) a user frame from two taught poses: the origin and
        a point on its +x axis, both as joint values; its height is the origin's z."""
        name = check_name(name, "frame")
        if name == BASE:
            raise PointError("'base' is the arm's own frame; choose another name")
        origin = tool_from_joints(self.arm, origin_joints)
        x_point = tool_from_joints(self.arm, x_joints)
        z = origin[2] if self.arm.is_scara else 0.0
        try:
            frame = frame_from_two_points(name, origin, x_point, z)
        except FrameError as exc:
            raise PointError(str(exc)) from None
        return self.set_frame(frame)

    def set_frame(self, frame: UserFrame, taught: str | None = None) -> FrameChange:
        """Put ``frame`` in the book. When it replaces a frame of the same name, the
        points taught in it keep their frame coordinates; their joints are recomputed
        by IK on their branch. A point that becomes unreachable there is kept and
        reported (its joints are left as they were)."""
        self.frames[frame.name] = frame
        self.frame_taught[frame.name] = taught or utc_now_iso()
        moved, unreachable = [], []
        for i, point in enumerate(self.points):
            if point.frame != frame.name:
                continue
            base = base_from_frame(frame, point.cartesian)
            result = joints_from_tool(self.arm, base)
            sol = result.solution(point.branch) if result.reachable else None
            if sol is None:
                why = result.warnings[0] if result.warnings else f"no {point.branch} solution"
                unreachable.append((point.name, why))
                continue
            if not sol.usable:
                unreachable.append((point.name, "; ".join(sol.problems)))
                continue
            self.points[i] = replace(point, joints=sol.joints)
            moved.append(point.name)
        return FrameChange(frame, tuple(moved), tuple(unreachable))

    def delete_frame(self, name: str) -> UserFrame:
        frame = self.frame(name)
        if frame is None:
            raise PointError("the base frame cannot be deleted")
        users = [p.name for p in self.points if p.frame == name]
        if users:
            raise PointError(f"frame {name!r} holds {len(users)} point(s) ({', '.join(users)}): "
                             "delete or re-teach them first")
        del self.frames[name]
        self.frame_taught.pop(name, None)
        return frame

    def _index(self, name: str) -> int:
        i = self._position(name)
        if i is None:
            self.point(name)  # raises, in words
        return i

    def _make(self, name: str, joints: Sequence[float], frame: str, note: str,
              taught: str | None) -> TaughtPoint:
        self.frame(frame)  # raises for an unknown frame
        joints = tuple(float(v) for v in joints)
        if len(joints) != self.arm.n_joints or not all(math.isfinite(v) for v in joints):
            raise PointError(f"a {self.arm.geometry} arm has {self.arm.n_joints} finite "
                             f"joint values, got {joints}")
        return TaughtPoint(name, self.cartesian_in(frame, joints), joints,
                           branch_of(self.arm, joints), frame, taught or utc_now_iso(),
                           note.strip() if note else "")


def _r(value: float, digits: int = 6) -> float:
    value = round(value, digits)
    return 0.0 if value == 0 else value


# --- saving fast (PointBook.to_text) ----------------------------------------------------

_HEADER = ("benchjog points file: taught points and user frames (mm and degrees).\n"
           "Written by benchjog; edit with care: motion goes to cartesian, in frame,\n"
           "on branch.")
_PLAIN_STRING = r'[^"\\\x00-\x1f\x7f]*\Z'   # nothing safe_files.toml_string escapes
_CHANGED_TABLES_MAX = 64   # past this many changed tables, the careful road (tomlkit)


def _nothing_to_keep(original: str, fresh: str) -> bool:
    """True when ``original`` (a points file as read) holds nothing of a person's own
    that a save should keep: each of its tables (the blocks between blank lines) is
    either written again exactly as it is, or is itself exactly the plain writer's text
    for its own contents (tomllib reads it; safe_files.toml_text writes it back the
    same). A comment, a blank line, spacing, key order or a number spelled otherwise
    than the plain writer does makes it False, and so does a file with more than
    _CHANGED_TABLES_MAX changed tables (then tomlkit's keeping road decides)."""
    import tomllib

    from benchjog.console.cell.safe_files import toml_text

    if "\r" in original or not original.endswith("\n"):
        return False
    written = set(fresh[:-1].split("\n\n"))
    changed = [block for block in original[:-1].split("\n\n") if block not in written]
    if len(changed) > _CHANGED_TABLES_MAX:
        return False
    for block in changed:
        if not block.startswith("["):
            return False   # a comment block of a person's own (the header is never changed)
        try:
            data = tomllib.loads(block)
        except tomllib.TOMLDecodeError:
            return False
        if toml_text(data) != block + "\n":
            return False
    return True


# --- saving what a person wrote (PointBook.to_text) --------------------------------------

_TABLES = ("file",)              # a points file's tables, read and saved piece by piece
_ARRAYS = ("frames", "points")   # and its arrays of tables
_KEY_LINE = re.compile(r"([ \t]*)([A-Za-z0-9_-]+)([ \t]*=[ \t]*)([^\r\n]*?)(\r?\n)?\Z")
_LINES = re.compile(r"[^\n]*\n|[^\n]+\Z")


def _spliced(book: PointBook, original: str,
             pieces: list[TomlPiece]) -> tuple[str, list[TomlPiece]] | None:
    """The book's file made from ``original`` (the text as read) and its ``pieces``
    (safe_files.toml_pieces: each parsed alone to its table), and the new text's
    pieces; None where the result cannot be proven to read back as the book's mapping.

    Tables of ``[[frames]]`` and ``[[points]]`` are matched by name; a new name that
    takes the place of a name that went (a rename) is matched to that table. A table
    whose data is the book's is kept byte for byte, a changed one is edited line by
    line (:func:`_edited_table`), one whose name went is dropped, a new one is written
    after the one before it (a first new frame after ``[file]``, a first new point at
    the end). Line endings follow the file's (CRLF stays CRLF)."""
    if not pieces or pieces[0].kind != "" or pieces[0].table:
        return None
    nl = "\r\n" if "\r\n" in original else "\n"
    head = PointBook(book.arm, frames=book.frames, frame_taught=book.frame_taught).to_mapping()
    head_rows = {"file": [_without_none(head["file"])],
                 "frames": [_without_none(f) for f in head.get("frames", [])]}
    names = {"file": [None], "frames": [f["name"] for f in head_rows["frames"]],
             "points": [p.name for p in book.points]}
    olds: dict[str, list[TomlPiece]] = {"file": [], "frames": [], "points": []}
    for piece in pieces[1:]:
        olds[piece.kind].append(piece)
    if len(olds["file"]) != 1:
        return None

    def row(kind: str, j: int) -> dict[str, Any]:   # what tomllib reads back of it
        return _without_none(book._point_row(book.points[j])) if kind == "points" else \
            head_rows[kind][j]

    same_point = _point_test(book.arm)

    def same(kind: str, table: dict[str, Any], j: int) -> bool:
        return same_point(table, book.points[j]) if kind == "points" else \
            table == head_rows[kind][j]

    # which old table each new row is (index into olds[kind]), and what comes after it
    pair: dict[str, list[int | None]] = {"file": [0]}
    after: dict[tuple[str, int], list[int]] = {}
    lead: dict[str, list[int]] = {"frames": [], "points": []}
    for kind in _ARRAYS:
        by_name = {p.table.get("name"): i for i, p in enumerate(olds[kind])}
        matched = [by_name.get(name) for name in names[kind]]
        if None in matched:
            used = set(matched)
            for j in range(len(matched)):
                if matched[j] is None:
                    cand = 0 if j == 0 else \
                        (matched[j - 1] + 1 if matched[j - 1] is not None else None)
                    if cand is not None and cand < len(olds[kind]) and cand not in used:
                        matched[j] = cand    # in the place of a name that went: a rename
                        used.add(cand)
        kept = [i for i in matched if i is not None]
        if any(a >= b for a, b in zip(kept, kept[1:])):
            return None   # tables in another order than the file's: the careful road
        if None in matched:
            last = None
            for j, i in enumerate(matched):
                if i is not None:
                    last = i
                elif last is None:
                    lead[kind].append(j)
                else:
                    after.setdefault((kind, last), []).append(j)
        pair[kind] = matched
    row_of = {kind: {i: j for j, i in enumerate(matched) if i is not None}
              for kind, matched in pair.items()}
    first_kept = {kind: min((i for i in pair[kind] if i is not None), default=None)
                  for kind in _ARRAYS}

    out: list[str] = []
    new_pieces: list[TomlPiece] = []
    emitted: dict[str, list[str | None]] = {"file": [], "frames": [], "points": []}
    at = 0

    def put(text: str, kind: str, table: dict, header: int, body: int) -> None:
        nonlocal at
        if at and not out[-1].endswith("\n"):
            out.append(nl)
            at += len(nl)
        new_pieces.append(TomlPiece(kind, at, at + header, at + body, at + len(text), table))
        if text:
            out.append(text)
            at += len(text)
        if kind:
            emitted[kind].append(table.get("name"))

    def put_new(kind: str, j: int) -> bool:
        new = row(kind, j)
        header = f"[[{kind}]]"
        text = f"{nl}{header}{nl}" + "".join(f"{toml_key(k)} = {toml_value(v)}{nl}"
                                             for k, v in new.items())
        if _parsed_alone(text) != {kind: [new]}:
            return False
        put(text, kind, new, len(nl), 2 * len(nl) + len(header))
        return True

    put(original[:pieces[0].end], "", {}, 0, 0)
    index = {"file": 0, "frames": 0, "points": 0}
    for piece in pieces[1:]:
        kind = piece.kind
        i = index[kind]
        index[kind] += 1
        j = row_of[kind].get(i)
        if j is None:
            continue   # deleted (or its place taken by a rename: then j is set)
        if kind in _ARRAYS and i == first_kept[kind]:
            for k in lead[kind]:
                if not put_new(kind, k):
                    return None
        text = original[piece.start:piece.end]
        if same(kind, piece.table, j):
            if at == piece.start:   # nothing before it changed: the piece as it was
                new_pieces.append(piece)
                out.append(text)
                at = piece.end
                emitted[kind].append(piece.table.get("name"))
            else:
                put(text, kind, piece.table, piece.header - piece.start, piece.body - piece.start)
        else:
            new = row(kind, j)
            text = _edited_table(text, piece.body - piece.start, piece.table, new, nl)
            want = {kind: new} if kind == "file" else {kind: [new]}
            if text is None or _parsed_alone(text) != want:
                return None
            put(text, kind, new, piece.header - piece.start, piece.body - piece.start)
        if kind == "file" and first_kept["frames"] is None:
            for k in lead["frames"]:
                if not put_new("frames", k):
                    return None
        for k in after.get((kind, i), ()):
            if not put_new(kind, k):
                return None
    if first_kept["points"] is None:
        for k in lead["points"]:
            if not put_new("points", k):
                return None
    # the whole text reads back as the mapping: each piece reads alone as its row (kept:
    # the same data; edited or new: parsed above), [file] once, the rows in the book's order
    if emitted != names:
        return None
    return "".join(out), new_pieces


def _point_test(arm: Arm) -> Callable[[Mapping[str, Any], TaughtPoint], bool]:
    """``test(table, point)``: whether a points table as tomllib read it holds exactly
    the point's row (PointBook._point_row), compared value by value without making the
    row (numbers rounded as the plain writer rounds them; an int equals its float)."""
    degrees = [j.is_revolute for j in arm.joints]   # Joint.to_display: math.degrees or as is
    scara = arm.is_scara
    branch = {b: b.value for b in Branch}
    to_deg = math.degrees

    def test(t: Mapping[str, Any], p: TaughtPoint) -> bool:
        if len(t) != 5 + (p.taught != "") + (p.note != "") or t.get("name") != p.name or \
                t.get("frame") != p.frame or t.get("branch") != branch[p.branch] or \
                t.get("taught") != (p.taught or None) or t.get("note") != (p.note or None):
            return False
        c, j = t.get("cartesian"), t.get("joints")
        cart, joints = p.cartesian, p.joints
        if scara:
            cart = _display_cartesian(arm, cart)
        if type(c) is not list or type(j) is not list or len(c) != len(cart) or \
                len(j) != len(joints):
            return False
        for a, v in zip(c, cart):
            if a != round(v, 6) or type(a) is bool:
                return False
        for a, deg, v in zip(j, degrees, joints):
            if a != round(to_deg(v) if deg else v, 6) or type(a) is bool:
                return False
        return True

    return test


def _parsed_alone(text: str) -> dict[str, Any] | None:
    try:
        return tomllib.loads(text)
    except (tomllib.TOMLDecodeError, RecursionError):
        return None


def _without_none(table: Mapping[str, Any]) -> dict[str, Any]:
    return {k: v for k, v in table.items() if v is not None}


def _edited_table(text: str, body_at: int, old: Mapping[str, Any], new: Mapping[str, Any],
                  nl: str) -> str | None:
    """A table's text (its leading comments, header, body) with the values that changed
    from ``old`` to ``new`` rewritten on their own lines (the key's spacing and an
    inline comment after the value stay), keys that went removed, and new keys added
    after the last key line; None when a key's statement is not alone on one line (a
    value over several lines, a dotted key). The caller checks the result."""
    head, lines = text[:body_at], _LINES.findall(text[body_at:])
    where: dict[str, tuple[int, re.Match[str]]] = {}
    for i, line in enumerate(lines):
        m = _KEY_LINE.match(line)
        if m and m.group(2) in old and m.group(2) not in where:
            where[m.group(2)] = (i, m)
    if where.keys() != old.keys():
        return None
    for key, value in old.items():
        if key in new and new[key] == value:
            continue
        i, m = where[key]
        if _parsed_alone(lines[i]) != {key: value}:
            return None   # the statement goes on past this line
        if key not in new:
            lines[i] = ""
            continue
        rest = m.group(4)
        cut = len(rest)
        for pos in [k for k, ch in enumerate(rest) if ch == "#"]:
            if _parsed_alone("v = " + rest[:pos]) == {"v": value}:
                cut = pos   # an inline comment starts here
                break
        end = len(rest[:cut].rstrip())
        lines[i] = (m.group(1) + key + m.group(3) + toml_value(new[key]) + rest[end:]
                    + (m.group(5) or ""))
    added = [f"{toml_key(k)} = {toml_value(v)}{nl}" for k, v in new.items() if k not in old]
    if added:
        at = max((i for i, _m in where.values()), default=-1) + 1
        if at and not lines[at - 1].endswith("\n"):
            lines[at - 1] += nl
        if not at and head and not head.endswith("\n"):
            head += nl
        lines[at:at] = added
    return head + "".join(lines)


def _display_cartesian(arm: Arm, values: Sequence[float]) -> list[float]:
    out = list(values)
    if arm.is_scara:
        out[3] = math.degrees(out[3])
    return out


# --- reading ---------------------------------------------------------------------------

def points_arm(path: str | Path) -> str | None:
    """The arm a points file names in ``[file] arm`` (None when it names none).

    Raises:
        FileError: the file cannot be read or is not TOML.
    """
    head = _parse(Path(path)).get("file")
    arm = head.get("arm") if isinstance(head, Mapping) else None
    return arm.strip() if isinstance(arm, str) and arm.strip() else None


def _parse(path: Path) -> Mapping[str, Any]:
    return parse_toml(read_text(path), str(path))


class _Reader:
    def __init__(self, source: str):
        self.source = source

    def fail(self, key: str, problem: str) -> FileError:
        return FileError(self.source, key, problem)

    def text(self, data: Mapping[str, Any], key: str, where: str, *, required: bool = True,
             default: str = "") -> str:
        if key not in data:
            if required:
                raise self.fail(f"{where}: {key}", "missing")
            return default
        value = data[key]
        if not isinstance(value, str):
            raise self.fail(f"{where}: {key}", f"must be a string ({value!r})")
        return value

    def number(self, data: Mapping[str, Any], key: str, where: str,
               default: float | None = None) -> float:
        if key not in data:
            if default is None:
                raise self.fail(f"{where}: {key}", "missing")
            return default
        return self.as_number(data[key], f"{where}: {key}")

    def as_number(self, value: Any, key: str) -> float:
        problem = number_problem(value)
        if problem:
            raise self.fail(key, problem)
        return float(value)

    def numbers(self, data: Mapping[str, Any], key: str, where: str, count: int,
                what: str) -> list[float]:
        if key not in data:
            raise self.fail(f"{where}: {key}", "missing")
        value = data[key]
        if not isinstance(value, list) or len(value) != count:
            raise self.fail(f"{where}: {key}", f"must be {count} numbers ({what})")
        return [self.as_number(v, f"{where}: {key}[{i}]") for i, v in enumerate(value)]

    def timestamp(self, data: Mapping[str, Any], where: str) -> str:
        stamp = self.text(data, "taught", where, required=False)
        if stamp:
            try:
                datetime.fromisoformat(stamp)
            except ValueError:
                raise self.fail(f"{where}: taught", f"not an ISO 8601 time ({stamp!r})") from None
        return stamp

    def unknown(self, data: Mapping[str, Any], allowed: Iterable[str], where: str) -> None:
        extra = [k for k in data if k not in allowed]
        if extra:
            raise self.fail(f"{where}: {extra[0]}", "unknown key")

    def table_list(self, data: Mapping[str, Any], key: str) -> list[Mapping[str, Any]]:
        value = data.get(key, [])
        if not isinstance(value, list) or not all(isinstance(v, Mapping) for v in value):
            raise self.fail(key, f"must be an array of tables ([[{key}]])")
        return value


def book_from_mapping(data: Mapping[str, Any], arm: Arm, source: str = "<points>", *,
                      progress: Progress | None = None) -> PointBook:
    """Validate a parsed points file into a :class:`PointBook`.

    ``progress(done, total)``, when given, is called with 0 before the first point,
    after every PROGRESS_EVERY points and with ``total`` after the last; an exception
    it raises stops the load and is passed on.

    Raises:
        FileError: naming the file, the key (``point 'pick': joints``) and the problem.
    """
    r = _Reader(source)
    head = data.get("file")
    if not isinstance(head, Mapping):
        raise r.fail("file", "missing table [file] (is this a points file?)")
    r.unknown(data, ("file", "frames", "points"), "top level")
    r.unknown(head, ("kind", "version", "arm"), "file")
    if head.get("kind") != FILE_KIND:
        raise r.fail("file: kind", f"must be {FILE_KIND!r} ({head.get('kind')!r})")
    version = head.get("version")
    if version != FILE_VERSION:
        raise r.fail("file: version", f"version {version!r} is not supported (only {FILE_VERSION})")
    book = PointBook(arm)
    taught_on = r.text(head, "arm", "file", required=False)
    if taught_on and taught_on != arm.name:
        book.warnings.append(f"{source}: points taught on arm {taught_on!r}, used with {arm.name!r}")

    for i, raw in enumerate(r.table_list(data, "frames")):
        where = f"frame {i + 1}"
        name = r.text(raw, "name", where)
        where = f"frame {name!r}"
        r.unknown(raw, FRAME_KEYS, where)
        try:
            check_name(name, "frame")
        except PointError as exc:
            raise r.fail(f"{where}: name", str(exc)) from None
        if name == BASE or name in book.frames:
            raise r.fail(f"{where}: name", "reserved" if name == BASE else "duplicate frame name")
        ox, oy = r.numbers(raw, "origin", where, 2, "x, y mm")
        angle = math.radians(r.number(raw, "angle_deg", where))
        z = r.number(raw, "z_mm", where, default=0.0)
        for key, value in (("origin", ox), ("origin", oy), ("z_mm", z)):
            if abs(value) > MAX_CELL_MM:  # 1e308 would overflow the frame's arithmetic
                raise r.fail(f"{where}: {key}", f"{value:g} mm is beyond +-{MAX_CELL_MM:g} mm: "
                             "not a place on a bench")
        book.frames[name] = UserFrame(name, ox, oy, angle, z)
        book.frame_taught[name] = r.timestamp(raw, where)

    n_cart = 4 if arm.is_scara else 2
    cart_words = "x, y, z mm, roll deg" if arm.is_scara else "x, y mm"
    joint_words = ", ".join(f"{j.name} {j.unit}" for j in arm.joints)
    raws = r.table_list(data, "points")
    if progress is not None:
        progress(0, len(raws))
    for i, raw in enumerate(raws):
        if progress is not None and i and not i % PROGRESS_EVERY:
            progress(i, len(raws))
        where = f"point {i + 1}"
        name = r.text(raw, "name", where)
        where = f"point {name!r}"
        r.unknown(raw, POINT_KEYS, where)
        try:
            check_name(name)
        except PointError as exc:
            raise r.fail(f"{where}: name", str(exc)) from None
        if book.has(name):
            raise r.fail(f"{where}: name", "duplicate point name")
        frame = r.text(raw, "frame", where, required=False, default=BASE)
        if frame != BASE and frame not in book.frames:
            raise r.fail(f"{where}: frame", f"no frame named {frame!r} in this file")
        cart = r.numbers(raw, "cartesian", where, n_cart, cart_words)
        if arm.is_scara:
            cart[3] = math.radians(cart[3])
        joints = r.numbers(raw, "joints", where, arm.n_joints, joint_words)
        joints = [j.from_display(v) for j, v in zip(arm.joints, joints)]
        branch_text = r.text(raw, "branch", where)
        try:
            branch = Branch(branch_text)
        except ValueError:
            raise r.fail(f"{where}: branch", f"must be 'elbow-up' or 'elbow-down' "
                         f"({branch_text!r})") from None
        point = TaughtPoint(name, tuple(cart), tuple(joints), branch, frame,
                            r.timestamp(raw, where), r.text(raw, "note", where, required=False))
        book._append(point)
        book.warnings += _consistency(book, point, source)
    if progress is not None:
        progress(len(raws), len(raws))
    return book


def _consistency(book: PointBook, point: TaughtPoint, source: str) -> list[str]:
    """Warnings when the stored joints do not give the stored Cartesian values (a hand
    edit, or a frame taught again that the point could not follow)."""
    out = []
    tool = book.cartesian_in(point.frame, point.joints)
    gap = math.hypot(tool[0] - point.cartesian[0], tool[1] - point.cartesian[1])
    if book.arm.is_scara:
        gap = math.hypot(gap, tool[2] - point.cartesian[2])
    if gap > CONSISTENCY_MM:
        out.append(f"{source}: point {point.name!r}: its joints put the tool {gap:.2f} mm from "
                   f"its cartesian values (motion goes to the cartesian values)")
    if branch_of(book.arm, point.joints) != point.branch and gap <= CONSISTENCY_MM:
        out.append(f"{source}: point {point.name!r}: its joints are {branch_of(book.arm, point.joints)}"
                   f", its branch says {point.branch}")
    return out


__all__ = ["TaughtPoint", "PointBook", "PointError", "FrameChange", "book_from_mapping",
           "branch_of", "utc_now_iso", "BASE"]
