"""The point book and the points file: teach, edit, frames carrying their points,
TOML round trip, atomic save under a crash, the lock, and corrupt files."""

from __future__ import annotations

import math
import os
import signal
import subprocess
import sys
import textwrap
import tomllib
from pathlib import Path

import numpy as np
import pytest

from benchjog.console.cell.armfile import builtin_arm
from benchjog.console.cell.points import PointBook, PointError, branch_of
from benchjog.console.cell.safe_files import FileError, FileLocked, toml_text, write_atomic
from benchjog.kinematics.frames import UserFrame
from benchjog.kinematics.model import Branch
from benchjog.kinematics.solve import joints_from_tool, tool_from_joints

ROOT = Path(__file__).resolve().parents[1]
PLANAR = builtin_arm("planar-bench")
SCARA = builtin_arm("scara-bench")


def ik(arm, target, branch=Branch.ELBOW_DOWN):
    sol = joints_from_tool(arm, target).solution(branch)
    assert sol is not None and sol.usable
    return sol.joints


def test_teach_at_home_worked_by_hand():
    # planar-bench home: shoulder 0, elbow 90 deg; FK (Lynch & Park 2017, 4.1, from
    # memory): x = 220 cos0 + 160 cos90 = 220, y = 220 sin0 + 160 sin90 = 160.
    book = PointBook(PLANAR)
    p = book.teach("home", PLANAR.home_joints)
    assert p.cartesian == pytest.approx((220.0, 160.0))
    assert p.branch is Branch.ELBOW_DOWN and p.frame == "base"
    assert p.taught.endswith("Z") and "T" in p.taught
    # The same pose in a frame at (200, 100) with its x axis along base +y:
    # (220, 160) - (200, 100) = (20, 60); rotated by -90 deg: (60, -20).
    book.set_frame(UserFrame("plate", 200.0, 100.0, math.pi / 2))
    q = book.teach("home-in-plate", PLANAR.home_joints, frame="plate", note="check")
    assert q.cartesian == pytest.approx((60.0, -20.0))
    assert book.base_target("home-in-plate") == pytest.approx((220.0, 160.0))


def test_teach_current_reads_the_interlock_state():
    class Gate:  # only what teach_current reads: state().joints
        class _State:
            joints = (math.radians(10.0), math.radians(-60.0))

        def state(self):
            return self._State()

    book = PointBook(PLANAR)
    p = book.teach_current(Gate(), "p1")
    assert p.branch is Branch.ELBOW_UP  # j2 < 0 (CONTRACT.md)
    assert p.cartesian == pytest.approx(tool_from_joints(PLANAR, p.joints)[:2])


def test_edits_rename_update_delete():
    book = PointBook(PLANAR)
    book.teach("a", ik(PLANAR, (200.0, 100.0)))
    book.teach("b", ik(PLANAR, (150.0, 150.0)))
    with pytest.raises(PointError, match="exists"):
        book.teach("a", PLANAR.home_joints)
    with pytest.raises(PointError, match="exists"):
        book.rename("a", "b")
    book.rename("a", "pick")
    assert book.names == ["pick", "b"]
    new = book.update("pick", ik(PLANAR, (210.0, 90.0), Branch.ELBOW_UP))
    assert new.cartesian == pytest.approx((210.0, 90.0)) and new.branch is Branch.ELBOW_UP
    book.delete("b")
    assert book.names == ["pick"]
    with pytest.raises(PointError, match="no point named 'b'"):
        book.point("b")
    with pytest.raises(PointError, match="non-empty"):
        book.teach("  ", PLANAR.home_joints)
    with pytest.raises(PointError, match="no frame"):
        book.teach("c", PLANAR.home_joints, frame="nowhere")


def test_reteaching_a_frame_carries_its_points():
    book = PointBook(PLANAR)
    book.define_frame("fixture", ik(PLANAR, (100.0, 220.0)), ik(PLANAR, (180.0, 220.0)))
    assert math.degrees(book.frames["fixture"].angle_rad) == pytest.approx(0.0, abs=1e-9)
    book.teach("pick", ik(PLANAR, (130.0, 230.0)), frame="fixture")
    book.teach("fixed", ik(PLANAR, (250.0, 0.0)))
    assert book.point("pick").cartesian == pytest.approx((30.0, 10.0))
    fixed_joints = book.point("fixed").joints
    # teach the fixture again: origin moved to (110, 200), x axis turned to 30 deg
    a = math.radians(30.0)
    change = book.define_frame("fixture", ik(PLANAR, (110.0, 200.0)),
                               ik(PLANAR, (110.0 + 60 * math.cos(a), 200.0 + 60 * math.sin(a))))
    assert change.moved == ("pick",) and change.unreachable == ()
    pick = book.point("pick")
    assert pick.cartesian == pytest.approx((30.0, 10.0))  # frame coordinates kept
    # the new base position, by an independently built homogeneous matrix
    T = np.array([[math.cos(a), -math.sin(a), 110.0], [math.sin(a), math.cos(a), 200.0], [0, 0, 1]])
    expected = T @ np.array([30.0, 10.0, 1.0])
    assert tool_from_joints(PLANAR, pick.joints)[:2] == pytest.approx(tuple(expected[:2]), abs=1e-6)
    assert pick.branch is Branch.ELBOW_DOWN and branch_of(PLANAR, pick.joints) is Branch.ELBOW_DOWN
    assert book.point("fixed").joints == fixed_joints  # a base point does not move


def test_a_point_made_unreachable_by_a_frame_is_reported_and_kept():
    book = PointBook(PLANAR)
    book.set_frame(UserFrame("plate", 150.0, 150.0, 0.0))
    book.teach("edge", ik(PLANAR, (300.0, 150.0)), frame="plate")  # (150, 0) in the plate
    # move the plate 200 mm further out: (350, 150) is |r| = 380.8 > 380 mm reach
    change = book.set_frame(UserFrame("plate", 200.0, 150.0, 0.0))
    assert change.moved == ()
    assert [name for name, _ in change.unreachable] == ["edge"]
    assert "reach" in change.unreachable[0][1]
    assert any("unreachable" in line for line in change.lines())
    assert book.point("edge").cartesian == pytest.approx((150.0, 0.0))


def test_frame_in_use_cannot_be_deleted():
    book = PointBook(PLANAR)
    book.set_frame(UserFrame("plate", 150.0, 150.0, 0.0))
    book.teach("p", ik(PLANAR, (200.0, 150.0)), frame="plate")
    with pytest.raises(PointError, match="holds 1 point"):
        book.delete_frame("plate")
    book.delete("p")
    book.delete_frame("plate")
    assert book.frames == {}


def _sample_book(path: Path, arm=PLANAR) -> PointBook:
    book = PointBook(arm, path=path)
    if arm.is_scara:
        book.define_frame("tray", ik(arm, (200.0, 100.0, 90.0, 0.3)),
                          ik(arm, (260.0, 140.0, 90.0, 0.3)))
        book.teach("s1", ik(arm, (220.0, 120.0, 80.0, 0.5)), frame="tray", note="slot")
        book.teach("s2", ik(arm, (150.0, -100.0, 110.0, -1.0), Branch.ELBOW_UP))
        return book
    book.define_frame("fixture", ik(arm, (100.0, 220.0)), ik(arm, (175.0, 247.0)))
    book.teach("pick", ik(arm, (130.0, 230.0)), frame="fixture",
               note='nest "A"\\back\tslash\nline 2 \u00b5m \x07')
    book.teach("clear", ik(arm, (240.0, 60.0), Branch.ELBOW_UP))
    return book


@pytest.mark.parametrize("arm", [PLANAR, SCARA], ids=["planar", "scara"])
def test_file_round_trip(tmp_path, arm):
    path = tmp_path / "points.toml"
    book = _sample_book(path, arm)
    book.save()
    again = PointBook.load(path, arm)
    assert again.warnings == []
    assert again.names == book.names
    for a, b in zip(book.points, again.points):
        assert (a.name, a.frame, a.branch, a.taught, a.note) == (b.name, b.frame, b.branch,
                                                                   b.taught, b.note)
        assert b.cartesian == pytest.approx(a.cartesian, abs=1e-5)
        assert b.joints == pytest.approx(a.joints, abs=1e-7)
    f0, f1 = book.frames, again.frames
    assert f0.keys() == f1.keys()
    for name in f0:
        assert f1[name].angle_rad == pytest.approx(f0[name].angle_rad, abs=1e-7)
        assert (f1[name].origin_x, f1[name].origin_y, f1[name].z_mm) == pytest.approx(
            (f0[name].origin_x, f0[name].origin_y, f0[name].z_mm), abs=1e-6)
    # saving what was loaded gives the same text (a stable format)
    assert again.to_text() == book.to_text()


def test_toml_writer_escapes_strings_for_tomllib():
    # TOML 1.0 basic strings (toml.io, from memory): tomllib must read back exactly
    tricky = ['plain', 'quote " inside', 'back\\slash', 'tab\tnew\nline', 'cr\rff\f',
              'bell\x07 del\x7f', 'unicode \u00e9\u4e2d \U0001F527', '', "'single'"]
    doc = {"t": {"s": tricky, "key with space": 1, "k.dot": True, "f": -0.0, "e": 1e-7}}
    back = tomllib.loads(toml_text(doc))
    assert back["t"]["s"] == tricky
    assert back["t"]["key with space"] == 1 and back["t"]["k.dot"] is True
    assert back["t"]["e"] == 1e-7 and math.copysign(1, back["t"]["f"]) == 1.0
    with pytest.raises(ValueError):
        toml_text({"t": {"x": math.inf}})


def test_save_keeps_one_backup(tmp_path):
    path = tmp_path / "points.toml"
    book = _sample_book(path)
    book.save()
    first = path.read_text()
    book.delete("clear")
    book.save()
    assert (tmp_path / "points.toml.bak").read_text() == first
    assert "clear" not in PointBook.load(path, PLANAR).names
    leftovers = [p.name for p in tmp_path.iterdir() if p.name.endswith(".tmp")]
    assert leftovers == []


@pytest.mark.parametrize("fail_at", ["replace", "fsync"])
def test_failed_save_leaves_the_old_file_whole(tmp_path, monkeypatch, fail_at):
    path = tmp_path / "points.toml"
    book = _sample_book(path)
    book.save()
    before = path.read_bytes()
    book.delete("pick")

    def boom(*args, **kwargs):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(os, fail_at, boom)
    with pytest.raises(FileError, match="cannot save"):
        book.save()
    monkeypatch.undo()
    assert path.read_bytes() == before
    assert [p.name for p in tmp_path.iterdir() if p.name.endswith(".tmp")] == []


def test_killed_writer_leaves_the_old_file_whole(tmp_path):
    path = tmp_path / "big.toml"
    write_atomic(path, "old = 1\n")
    script = textwrap.dedent(f"""
        import os, sys, time
        from benchjog.console.cell import safe_files
        real_fsync = os.fsync
        def slow_fsync(fd):
            print("writing", flush=True)
            time.sleep(60)
        os.fsync = slow_fsync
        safe_files.write_atomic({str(path)!r}, "x = " + repr("y" * 5_000_000) + "\\n")
    """)
    child = subprocess.Popen([sys.executable, "-c", script], stdout=subprocess.PIPE, text=True)
    try:
        assert child.stdout.readline().strip() == "writing"
        temps = [p for p in tmp_path.iterdir() if p.name.endswith(".tmp")]
        assert temps and temps[0].stat().st_size > 1_000_000  # mid-way: the new data is out
        child.send_signal(signal.SIGKILL)
        child.wait(10)
    finally:
        if child.poll() is None:
            child.kill()
    assert child.returncode == -signal.SIGKILL
    assert path.read_text() == "old = 1\n"
    assert tomllib.loads(path.read_text()) == {"old": 1}


def test_two_books_cannot_both_edit_one_file(tmp_path):
    path = tmp_path / "points.toml"
    _sample_book(path).save()
    first = PointBook.open(path, PLANAR)
    with pytest.raises(FileLocked, match=f"pid {os.getpid()}"):
        PointBook.open(path, PLANAR)
    loaded = PointBook.load(path, PLANAR)  # reading stays possible
    with pytest.raises(FileLocked):
        loaded.save()  # but a book without the lock cannot write
    first.teach("extra", PLANAR.home_joints)
    first.save()
    first.close()
    with PointBook.open(path, PLANAR) as second:
        assert "extra" in second.names


def test_lock_held_by_another_process_and_dropped_when_it_dies(tmp_path):
    path = tmp_path / "points.toml"
    _sample_book(path).save()
    script = textwrap.dedent(f"""
        import sys, time
        from benchjog.console.cell.armfile import builtin_arm
        from benchjog.console.cell.points import PointBook
        book = PointBook.open({str(path)!r}, builtin_arm("planar-bench"))
        print("locked", flush=True)
        time.sleep(60)
    """)
    child = subprocess.Popen([sys.executable, "-c", script], stdout=subprocess.PIPE, text=True)
    try:
        assert child.stdout.readline().strip() == "locked"
        with pytest.raises(FileLocked, match=f"pid {child.pid}"):
            PointBook.open(path, PLANAR)
        child.send_signal(signal.SIGKILL)  # a crashed console: its lock dies with it
        child.wait(10)
    finally:
        if child.poll() is None:
            child.kill()
    with PointBook.open(path, PLANAR) as book:
        assert book.names == ["pick", "clear"]


GOOD = """
[file]
kind = "benchjog-points"
version = 1
arm = "planar-bench"

[[frames]]
name = "fixture"
origin = [100.0, 220.0]
angle_deg = 0.0

[[points]]
name = "pick"
frame = "fixture"
cartesian = [30.0, 10.0]
joints = [0.0, 90.0]
branch = "elbow-down"
"""


@pytest.mark.parametrize("edit, words", [
    (lambda t: t + "\n[[points\n", "toml"),
    (lambda t: t.replace('cartesian = [30.0, 10.0]', 'cartesian = [30.0]'), "point 'pick': cartesian: must be 2 numbers"),
    (lambda t: t.replace('joints = [0.0, 90.0]', 'joints = [0.0, "ninety"]'), "point 'pick': joints[1]: not a number"),
    (lambda t: t.replace('"elbow-down"', '"elbow-sideways"'), "point 'pick': branch: must be"),
    (lambda t: t.replace('frame = "fixture"', 'frame = "plate"'), "point 'pick': frame: no frame named 'plate'"),
    (lambda t: t.replace('kind = "benchjog-points"', 'kind = "other"'), "file: kind"),
    (lambda t: t.replace('version = 1', 'version = 7'), "file: version"),
    (lambda t: t.replace('angle_deg = 0.0', 'angle_deg = inf'), "frame 'fixture': angle_deg: not a finite"),
    (lambda t: t.replace('branch = "elbow-down"', 'branch = "elbow-down"\ncolour = "red"'), "point 'pick': colour: unknown key"),
    (lambda t: t + '\n[[points]]\nname = "pick"\ncartesian = [1.0, 2.0]\njoints = [0.0, 1.0]\nbranch = "elbow-up"\n', "duplicate point name"),
    (lambda t: t.replace('[file]', '[head]'), "file: missing table [file]"),
])
def test_corrupt_or_invalid_file_gives_one_line_and_is_untouched(tmp_path, edit, words):
    path = tmp_path / "points.toml"
    path.write_text(edit(GOOD))
    before = path.read_bytes()
    with pytest.raises(FileError) as err:
        PointBook.load(path, PLANAR)
    message = str(err.value)
    assert message.startswith(f"{path}: ") and words in message and "\n" not in message
    with pytest.raises(FileError):
        PointBook.open(path, PLANAR)  # open refuses too, and releases its lock
    assert path.read_bytes() == before
    assert not (tmp_path / "points.toml.bak").exists()
    with PointBook.open(tmp_path / "other.toml", PLANAR):
        pass


def test_not_utf8_and_missing_file(tmp_path):
    path = tmp_path / "points.toml"
    path.write_bytes(b"\xff\xfe\x00garbage")
    with pytest.raises(FileError, match="not UTF-8"):
        PointBook.load(path, PLANAR)
    with pytest.raises(FileError, match="cannot read"):
        PointBook.load(tmp_path / "missing.toml", PLANAR)


def test_hand_edited_inconsistent_point_warns(tmp_path):
    path = tmp_path / "points.toml"
    path.write_text(GOOD)  # joints (0, 90) put the tool at (220, 160) = (120, -60) in the frame
    book = PointBook.load(path, PLANAR)
    assert len(book.warnings) == 1 and "point 'pick'" in book.warnings[0]
    # motion goes to the cartesian values in the frame: (100 + 30, 220 + 10)
    assert book.base_target("pick") == pytest.approx((130.0, 230.0))


def test_demo_points_file_is_valid_and_consistent():
    book = PointBook.load(ROOT / "examples" / "bench-cell" / "points.toml", PLANAR)
    assert book.warnings == []
    assert {"pick", "place", "inspect", "clear"} <= set(book.names)
    assert "fixture" in book.frames
    for point in book.points:
        target = book.base_target(point)
        assert tool_from_joints(PLANAR, point.joints)[:2] == pytest.approx(target, abs=1e-4)


def test_save_keeps_the_file_mode(tmp_path):
    path = tmp_path / "points.toml"
    path.write_text("# placeholder\n")
    os.chmod(path, 0o640)
    write_atomic(path, "a = 1\n")
    assert (path.stat().st_mode & 0o777) == 0o640
    fresh = tmp_path / "fresh.toml"
    write_atomic(fresh, "a = 1\n")
    umask = os.umask(0)
    os.umask(umask)
    assert (fresh.stat().st_mode & 0o777) == 0o666 & ~umask  # like open(): 0666 less the umask
