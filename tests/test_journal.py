"""The motion journal: written behind motion by one thread, failures reported and never
raised, batched fsyncs, rotation, and a reader that survives torn lines and garbage.

Facts of the trade used here: JSON Lines (jsonlines.org) is one JSON value per line, so a
torn last line costs that line only; /dev/full (Linux, null(4)) fails every write with
ENOSPC, a real "disk full" without filling a disk."""

from __future__ import annotations

import errno
import json
import os
import threading
import time
from pathlib import Path

import pytest

from benchjog.drivers.journal import Journal, prune_journal_dir, read_journal


class FailingFile:
    """A binary file whose writes fail (after ``good`` successful ones) like a full disk;
    ``partial`` bytes of the failing write still reach the real file first (a torn line)."""

    def __init__(self, path: Path, good: int = 0, partial: int = 0, fail_on: bytes | None = None):
        self._real = open(path, "ab")
        self.good, self.partial, self.fail_on = good, partial, fail_on
        self.fail = True

    def write(self, data: bytes) -> int:
        if self.fail_on is not None and self.fail_on in data:
            self.good = 0     # the disk fills just as this line comes
            self.fail_on = None
        if self.fail and self.good <= 0:
            if self.partial:
                self._real.write(data[:self.partial])
                self._real.flush()
            raise OSError(errno.ENOSPC, "No space left on device")
        self.good -= 1
        return self._real.write(data)

    def flush(self) -> None:
        self._real.flush()

    def fileno(self) -> int:
        return self._real.fileno()

    def close(self) -> None:
        self._real.close()


def test_lines_are_json_and_complete(tmp_path):
    path = tmp_path / "j.jsonl"
    journal = Journal(path)
    for n in range(20):
        journal.record("segment", n=n, joints=[0.1, float("nan")])
    journal.close()
    entries = read_journal(path)
    assert [e["n"] for e in entries] == list(range(20))
    assert entries[0]["joints"] == [0.1, "nan"]   # non-finite numbers kept as text, valid JSON
    assert all(line.endswith("\n") for line in path.read_text().splitlines(keepends=True))


def test_record_never_waits_for_a_slow_fsync_and_fsyncs_are_batched(tmp_path):
    release = threading.Event()
    calls = []

    def stuck_fsync(fd: int) -> None:
        calls.append(fd)
        release.wait(10)   # a disk that takes as long as the test wants

    journal = Journal(tmp_path / "j.jsonl", fsync=stuck_fsync)
    journal.record("first")
    recorder = threading.Thread(target=lambda: [journal.record("segment", n=n) for n in range(500)])
    recorder.start()
    recorder.join(5)
    finished_while_fsync_blocked = not recorder.is_alive()
    release.set()
    recorder.join()
    assert finished_while_fsync_blocked   # the caller never waited on the disk
    assert journal.wait_written(5)
    journal.close()
    assert len(read_journal(journal.path)) == 501
    assert 1 <= len(calls) < 50            # one fsync per batch, not per line
    assert journal.error is None


def test_a_failing_write_is_reported_and_never_raised(tmp_path):
    path = tmp_path / "j.jsonl"
    fake = FailingFile(path, good=2)
    journal = Journal(path, opener=lambda p: fake)
    journal.record("a")
    assert journal.wait_written(5)
    journal.record("b")
    assert journal.wait_written(5)
    assert journal.error is None
    journal.record("c")                     # this write fails: no exception here ...
    journal.record("d")
    assert journal.wait_written(5)
    assert "No space left on device" in journal.error   # ... but it is reported
    assert journal.lost >= 1
    journal.close()


def test_dev_full_is_reported(tmp_path):
    if not os.path.exists("/dev/full"):
        pytest.skip("no /dev/full on this system (Linux has one)")
    journal = Journal("/dev/full")
    journal.record("open")
    assert journal.wait_written(5)
    assert journal.error and "No space left on device" in journal.error
    journal.close()


def test_a_full_queue_loses_lines_loudly_without_waiting(tmp_path):
    release = threading.Event()
    journal = Journal(tmp_path / "j.jsonl", fsync=lambda fd: release.wait(10), queue_lines=5)
    for n in range(50):
        journal.record("segment", n=n)   # returns at once even with the queue full
    assert journal.error and "behind" in journal.error
    assert journal.lost > 0
    release.set()
    journal.close()


def test_recover_after_the_disk_has_room_again(tmp_path):
    path = tmp_path / "j.jsonl"
    disk_full = [True]

    def opener(p):   # each (re)open is a new file object on the same disk
        fake = FailingFile(p)
        fake.fail = disk_full[0]
        return fake

    journal = Journal(path, opener=opener)
    journal.record("a")
    assert journal.wait_written(5) and journal.error
    disk_full[0] = False
    assert journal.recover(5)
    assert journal.error is None
    journal.close()
    kinds = [e["kind"] for e in read_journal(path)]
    assert kinds == ["journal-resumed"]
    assert read_journal(path)[0]["lines_lost"] == 1


def test_a_torn_last_line_costs_only_that_line(tmp_path):
    path = tmp_path / "j.jsonl"
    path.write_bytes(b'{"kind": "segment", "n": 1}\n{"kind": "segm')   # a crash mid-write
    journal = Journal(path)
    journal.record("open")
    journal.close()
    lines = path.read_bytes().split(b"\n")
    assert lines[1] == b'{"kind": "segm'            # the torn line stays alone on its line
    assert [e["kind"] for e in read_journal(path)] == ["segment", "open"]


def test_a_write_torn_by_a_failure_costs_only_that_line(tmp_path):
    path = tmp_path / "j.jsonl"
    fake = FailingFile(path, good=1, partial=7)
    opened = []

    def opener(p):
        opened.append(p)
        return fake if len(opened) == 1 else open(p, "ab")

    journal = Journal(path, opener=opener)
    journal.record("a")
    assert journal.wait_written(5)
    journal.record("b")                     # 7 bytes reach the file, then ENOSPC
    assert journal.wait_written(5) and journal.error
    journal.record("c")                     # reopened: starts on a new line
    journal.close()
    assert [e["kind"] for e in read_journal(path)] == ["a", "c"]
    assert len(path.read_bytes().split(b"\n")) == 4   # a, the torn 7 bytes, c, ""


def test_garbage_never_makes_a_journal_unreadable(tmp_path):
    path = tmp_path / "j.jsonl"
    path.write_bytes(b'{"kind": "a"}\n\xff\xfe\x00garbage\n[1, 2]\n\n{"kind": "b"}\n\xc3')
    assert [e["kind"] for e in read_journal(path)] == ["a", "b"]


def test_rotation_caps_the_folder_by_size_and_age(tmp_path):
    folder = tmp_path / "journal"
    folder.mkdir()
    old = folder / "run-20000101T000000Z-1.jsonl"
    old.write_text('{"kind": "open"}\n')
    month_ago = time.time() - 31 * 24 * 3600
    os.utime(old, (month_ago, month_ago))
    mine = folder / "notes.jsonl"          # not a run file: never touched
    mine.write_text("{}\n")
    journal = Journal.for_run(folder, max_bytes=4000)
    assert not old.exists() and mine.exists()   # older than 30 days: removed at start
    for n in range(400):
        journal.record("segment", n=n, joints=[0.123456789, 1.23456789])
        journal.wait_written(5)   # one line a batch, as a slow trickle of records would be
    journal.close()
    runs = sorted(folder.glob("run-*.jsonl"))
    assert len(runs) >= 2 and journal.path in runs   # the run went on in part files
    assert ".part" in journal.path.name
    total = sum(p.stat().st_size for p in runs)
    assert total - journal.path.stat().st_size <= 4000   # older parts pruned to the cap
    assert journal.error is None
    assert all(isinstance(e, dict) for p in runs for e in read_journal(p))


def test_prune_keeps_the_file_in_use(tmp_path):
    a = tmp_path / "run-a.jsonl"
    a.write_bytes(b"x" * 100)
    removed = prune_journal_dir(tmp_path, max_bytes=10, keep=(a,))
    assert removed == [] and a.exists()


def test_a_named_journal_is_appended_to_and_never_rotated(tmp_path):
    path = tmp_path / "run-mine.jsonl"
    path.write_text(json.dumps({"kind": "earlier"}) + "\n")
    journal = Journal(path, max_bytes=10)
    for n in range(50):
        journal.record("segment", n=n)
    journal.close()
    assert [p.name for p in tmp_path.iterdir()] == ["run-mine.jsonl"]
    assert read_journal(path)[0]["kind"] == "earlier" and len(read_journal(path)) == 51


def test_the_default_folder_is_the_user_state_directory(monkeypatch, tmp_path):
    # platformdirs on Linux: $XDG_STATE_HOME, else ~/.local/state (XDG Base Directory spec)
    from benchjog.drivers.journal import default_journal_dir
    monkeypatch.setenv("XDG_STATE_HOME", str(tmp_path / "state"))
    if os.name == "posix" and not os.sys.platform.startswith("darwin"):
        assert default_journal_dir() == tmp_path / "state" / "benchjog" / "journal"
