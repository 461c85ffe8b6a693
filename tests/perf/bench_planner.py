"""Benchmark (run by hand): plan a 300 mm line at 0.01 mm tolerance and a joint move.

    python tests/perf/bench_planner.py

Prints segment counts, the best of several runs, and the sagitta lower bound on the
number of chords (tests/test_planner.py: chord_lower_bound) for the line; and, for the
line's knots alone, the balanced placement the planner uses against the greedy cut it
falls back to.
"""

from __future__ import annotations

import math
import sys
import time
from pathlib import Path

import numpy as np

sys.path[:0] = [str(Path(__file__).resolve().parents[1])]  # tests/ helpers; benchjog is installed

from benchjog.console.cell.armfile import builtin_arm  # noqa: E402
from benchjog.kinematics import planner, solve  # noqa: E402
from benchjog.kinematics.model import Branch  # noqa: E402
from test_planner import chord_lower_bound  # noqa: E402


def best_of(fn, runs=15):
    times = []
    for _ in range(runs):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return out, min(times)


def tight_lines(arm, start, target) -> None:
    """Duration against the continuous speed profile at each tolerance (one run)."""
    for tol in (0.1, 0.01, 0.001, 0.0005, 0.0001):
        plan, t = best_of(lambda: planner.plan_line_move(arm, start, target, tolerance_mm=tol), runs=3)
        s = plan.summary
        print(f"{arm.name}:   tolerance {tol:g} mm: {s.duration_s:.3f} s, continuous profile "
              f"{s.continuous_s:.3f} s (ratio {s.duration_s / s.continuous_s:.4f}), "
              f"{s.segment_count} segments ({s.chord_count} chords), planned in {t * 1e3:.1f} ms")


def main() -> None:
    cases = []
    arm = builtin_arm("planar-bench")
    a, b = (60.0, 300.0), (260.0, 76.4)          # 300.2 mm, inside the reach, clear of the tray
    start = solve.joints_from_tool(arm, a).solution(Branch.ELBOW_DOWN).joints
    cases.append((arm, start, b))
    arm_s = builtin_arm("scara-bench")
    start_s = solve.joints_from_tool(arm_s, (60.0, 300.0, 130.0, 0.0)).solution(Branch.ELBOW_DOWN).joints
    cases.append((arm_s, start_s, (260.0, 80.0, 50.0, math.radians(40))))
    for arm, start, target in cases:
        tool0 = np.array(solve.tool_from_joints(arm, start))
        n = 3 if arm.is_scara else 2
        length = float(np.linalg.norm(np.array(target[:n]) - tool0[:n]))
        plan, t = best_of(lambda: planner.plan_line_move(arm, start, target, tolerance_mm=0.01))
        assert plan.ok, plan.problems
        bound = chord_lower_bound(arm, start, target, 0.01)
        print(f"{arm.name}: line {length:.1f} mm at 0.01 mm: {len(plan.segments)} segments, "
              f"lower bound {bound:.1f} (ratio {len(plan.segments) / bound:.2f}), "
              f"best {t * 1e3:.2f} ms, duration {plan.summary.duration_s:.3f} s")
        tight_lines(arm, start, target)
        q0 = np.array(start)
        line, _ = planner._line_setup(arm, q0, solve.check_target(arm, target), plan.summary.branch)
        (u, _), t_bal = best_of(lambda: planner._balanced_knots(line, q0, 0.01))
        (ug, _), t_greedy = best_of(lambda: planner._greedy_knots(line, q0, 0.01), runs=5)
        print(f"{arm.name}:   knots: balanced {len(u) - 1} chords in {t_bal * 1e3:.2f} ms, "
              f"greedy {len(ug) - 1} chords in {t_greedy * 1e3:.2f} ms")
        end = np.array(start) + np.array([1.2, -0.8] + [20.0, 1.0][:arm.n_joints - 2])
        plan, t = best_of(lambda: planner.plan_joint_move(arm, start, end))
        assert plan.ok, plan.problems
        print(f"{arm.name}: joint move: {len(plan.segments)} segments, best {t * 1e3:.2f} ms, "
              f"duration {plan.summary.duration_s:.3f} s")


if __name__ == "__main__":
    main()
