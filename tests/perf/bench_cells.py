"""Benchmark (run by hand): big cells. Loading and saving a points file of 1,000 and
10,000 points against the bare floor (tomllib.loads of the same text; writing the same
text to a file), reading it table by table (safe_files.toml_pieces) against tomllib.loads,
saving 10,000 points against an f-string loop that writes the same text (a new book, a
file as benchjog wrote it, and a file with a comment of a person's, whose text is
edited; tomlkit's keeping road beside it), and `check` of a 1,000-step program against
the step-by-step dry run and the bare IK solve. Ratios are measured in one run.

    python tests/perf/bench_cells.py
"""

from __future__ import annotations

import math
import tempfile
import time
import tomllib
from pathlib import Path

from benchjog.console.cell.armfile import builtin_arm
from benchjog.console.cell.points import PointBook
from benchjog.console.cell.program_runs import plan_program
from benchjog.console.cell.programs import MoveStep, Program
from benchjog.console.cell.safe_files import toml_pieces
from benchjog.kinematics.model import Branch
from benchjog.kinematics.solve import joints_from_tool


def best_of(fn, runs=3):
    times = []
    for _ in range(runs):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return out, min(times)


def grid_book(arm, n: int, path: Path) -> PointBook:
    """n points on a grid inside the planar demo arm's reach (invented demo data)."""
    book = PointBook(arm, path=path)
    side = math.ceil(math.sqrt(n))
    k = 0
    for i in range(side):
        for j in range(side):
            if k == n:
                return book
            x, y = -100.0 + 200.0 * i / side, 180.0 + 120.0 * j / side
            sol = joints_from_tool(arm, (x, y)).solution(Branch.ELBOW_DOWN)
            book.teach(f"p{k:05d}", sol.joints, taught="2026-01-01T00:00:00Z")
            k += 1
    return book


def floor_text(book: PointBook, header_lines: list[str]) -> str:
    """The points file's text by a plain f-string loop (planar arm, names and notes
    that need no escaping): the floor a save is measured against."""
    j1, j2 = book.arm.joints

    def r6(v: float) -> float:
        v = round(v, 6)
        return 0.0 if v == 0 else v
    out = header_lines + ["", "[file]", 'kind = "benchjog-points"', "version = 1",
                          f'arm = "{book.arm.name}"']
    for p in book.points:
        x, y = p.cartesian
        out.append(f'\n[[points]]\nname = "{p.name}"\nframe = "{p.frame}"\n'
                   f"cartesian = [{r6(x)!r}, {r6(y)!r}]\n"
                   f"joints = [{r6(j1.to_display(p.joints[0]))!r}, "
                   f"{r6(j2.to_display(p.joints[1]))!r}]\n"
                   f'branch = "{p.branch.value}"\ntaught = "{p.taught}"')
    return "\n".join(out) + "\n"


def bench_save(arm, tmp: Path) -> None:
    """Saving 10,000 points: a new book, the same file loaded and saved again after one
    change (as benchjog wrote it: nothing of a person's to keep), and a file with a
    comment of a person's (its text edited, PointBook.to_text), against the f-string
    floor; tomlkit's keeping road (the save's fallback) on that file once, beside it."""
    n = 10000
    path = tmp / "save-10000.toml"
    book = grid_book(arm, n, path)
    _, t_new = best_of(lambda: book.save() if not path.unlink(missing_ok=True) else None)
    text = path.read_text()
    header = [line for line in text.split("\n\n")[0].splitlines()]
    floor_path = tmp / "floor-10000.toml"

    def floor() -> None:
        with open(floor_path, "w", encoding="utf-8") as f:
            f.write(floor_text(book, header))
    _, t_floor = best_of(floor)
    same = floor_path.read_text() == text
    loaded = PointBook.load(path, arm)
    loaded.path = path
    loaded.set_note("p00001", "moved 2 mm")
    _, t_again = best_of(loaded.save)
    print(f"{n:6d} points saved: new book {t_new:.3f} s, loaded and saved after one change "
          f"{t_again:.3f} s, vs an f-string loop writing the same text {t_floor:.3f} s "
          f"(same text: {same}; ratios {t_new / t_floor:.2f} and {t_again / t_floor:.2f})")
    touched = text.replace("[[points]]", "# re-taught in March\n[[points]]", 1)
    path.write_text(touched)
    hand = PointBook.load(path, arm)
    hand.set_note("p00001", "moved 2 mm")

    def save_touched() -> None:
        hand._as_read, hand._pieces = touched, kept_pieces   # each run: the file as read
        hand.save()
    kept_pieces = hand._pieces
    _, t_hand = best_of(save_touched)
    after = path.read_text()
    right = tomllib.loads(after) == tomllib.loads(hand._plain_text())
    kept = after.replace('note = "moved 2 mm"\n', "", 1) == touched   # all else byte for byte
    hand._as_read, hand._pieces = touched, None

    def careful() -> str:   # the road the save took before: tomlkit's
        from benchjog.console.cell.points import _HEADER
        from benchjog.console.cell.safe_files import toml_text_keeping
        return toml_text_keeping(touched, hand.to_mapping(), header=_HEADER)
    _, t_tomlkit = best_of(careful, runs=1)
    print(f"{n:6d} points saved, the file with one comment of a person's, one note changed "
          f"(its text edited: unchanged tables kept byte for byte): {t_hand:.3f} s vs the "
          f"f-string floor {t_floor:.3f} s (ratio {t_hand / t_floor:.2f}); reads back right: {right}, "
          f"only the note's line new: {kept}; tomlkit's keeping road on the same "
          f"file {t_tomlkit:.1f} s ({t_tomlkit / t_hand:.0f}x)")


def bench_check(arm, book: PointBook, names: list[str]) -> None:
    from benchjog.kinematics.solve import joints_from_tool as ik
    steps = [MoveStep(names[(i * 37) % len(names)]) for i in range(1000)]
    program = Program("big", "points-1000.toml", steps)
    report, t_check = best_of(lambda: plan_program(arm, program, book))
    old, t_old = best_of(lambda: plan_program(arm, program, book, ahead=False), runs=1)
    targets = [book.base_target(book.point(s.point)) for s in steps]
    _, t_ik = best_of(lambda: [ik(arm, t) for t in targets])
    same = [(s.problems, s.warnings, s.summary) for s in report.steps] == \
        [(s.problems, s.warnings, s.summary) for s in old.steps]
    print(f"check of a {len(steps)}-step program, every move different: {t_check:.3f} s "
          f"({t_check * 1e3 / len(steps):.2f} ms per move step), ok={report.ok}; "
          f"step by step (ahead=False) {t_old:.3f} s: {t_old / t_check:.1f}x faster, same "
          f"report: {same}; {t_check / t_ik:.0f}x the bare IK solve of every target "
          f"({t_ik * 1e6 / len(steps):.0f} us per target)")
    cycle = [MoveStep(names[k]) for k in (0, 500, 999, 250, 750)] * 200  # a repeated cycle
    program = Program("cycle", "points-1000.toml", cycle)
    report, t_cycle = best_of(lambda: plan_program(arm, program, book))
    print(f"check of a {len(cycle)}-step program, a 5-move cycle repeated: {t_cycle:.3f} s "
          f"({t_cycle * 1e3 / len(cycle):.2f} ms per move step; ratio to every-move-different "
          f"{t_cycle / t_check:.2f}), ok={report.ok}")


def main() -> None:
    arm = builtin_arm("planar-bench")
    with tempfile.TemporaryDirectory() as tmp:
        for n in (1000, 10000):
            path = Path(tmp) / f"points-{n}.toml"
            book, t_teach = best_of(lambda: grid_book(arm, n, path), runs=1)
            _, t_save = best_of(book.save)
            text = path.read_text()
            floor_file = Path(tmp) / "floor.txt"
            _, t_write = best_of(lambda: floor_file.write_text(text))
            _, t_load = best_of(lambda: PointBook.load(path, arm))
            _, t_toml = best_of(lambda: tomllib.loads(text))
            split, t_split = best_of(lambda: toml_pieces(text, ("file",), ("frames", "points")))
            print(f"{n:6d} points: teach {t_teach * 1e6 / n:.0f} us/point; "
                  f"load {t_load:.3f} s vs tomllib.loads {t_toml:.3f} s (ratio {t_load / t_toml:.2f}), "
                  f"{t_load * 1e6 / n:.0f} us/point; read table by table {t_split:.3f} s "
                  f"(ratio {t_split / t_toml:.2f}, same: {split[0] == tomllib.loads(text)}); "
                  f"save {t_save:.3f} s vs plain write "
                  f"{t_write:.4f} s (ratio {t_save / t_write:.1f})")
        book = PointBook.load(Path(tmp) / "points-1000.toml", arm)
        bench_check(arm, book, book.names)
        bench_save(arm, Path(tmp))

if __name__ == "__main__":
    main()
