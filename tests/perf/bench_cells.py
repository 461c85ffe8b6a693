"""Benchmark (run by hand): big cells. Loading and saving a points file of 1,000 and
10,000 points against the bare floor (tomllib.loads of the same text; writing the same
text to a file), and `check` of a 1,000-step program. Ratios are measured in one run.

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
            print(f"{n:6d} points: teach {t_teach * 1e6 / n:.0f} us/point; "
                  f"load {t_load:.3f} s vs tomllib.loads {t_toml:.3f} s (ratio {t_load / t_toml:.2f}), "
                  f"{t_load * 1e6 / n:.0f} us/point; save {t_save:.3f} s vs plain write "
                  f"{t_write:.4f} s (ratio {t_save / t_write:.1f})")
        book = PointBook.load(Path(tmp) / "points-1000.toml", arm)
        names = book.names
        steps = [MoveStep(names[(i * 37) % len(names)]) for i in range(1000)]
        program = Program("big", "points-1000.toml", steps)
        report, t_check = best_of(lambda: plan_program(arm, program, book))
        print(f"check of a {len(steps)}-step program, every move different: {t_check:.3f} s "
              f"({t_check * 1e3 / len(steps):.2f} ms per move step), ok={report.ok}")
        cycle = [MoveStep(names[k]) for k in (0, 500, 999, 250, 750)] * 200  # a repeated cycle
        program = Program("cycle", "points-1000.toml", cycle)
        report, t_cycle = best_of(lambda: plan_program(arm, program, book))
        print(f"check of a {len(cycle)}-step program, a 5-move cycle repeated: {t_cycle:.3f} s "
              f"({t_cycle * 1e3 / len(cycle):.2f} ms per move step; ratio to every-move-different "
              f"{t_cycle / t_check:.2f}), ok={report.ok}")


if __name__ == "__main__":
    main()
