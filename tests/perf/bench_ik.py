"""Benchmark of the closed-form IK against modern_robotics' numerical IK (run by hand).

    python tests/perf/bench_ik.py [--n 1000000] [--scalar-n 200000] [--mr-n 300]

Prints the time per target of
- the raw scalar 2R IK (planar.thetas_from_tool_xy) and the full scalar front with its
  findings (solve.joints_from_tool),
- the batch IK (planar.thetas_from_tool_xy_batch, solve.joints_from_tool_batch) on N
  targets (first call and best of 5, the first one pays for fresh memory),
- a bare numpy solve of the same law of cosines (a dozen array operations written here,
  no checks): the floor a vectorised batch path can reach, its honest reference,
- modern_robotics' Newton-Raphson IK (mr.IKinSpace, Lynch & Park, "Modern Robotics",
  2017, section 6.2) on a few hundred of the same targets, with eomg = 1e-9 rad and
  ev = 1e-9 mm, started twice: 10 degrees (and 10 mm) from the answer, and from the
  arm's home pose (its iteration count, so its time, depends on that initial guess),
and the max position error of each (FK of the answer against the target), all from this
one run, with the ratios. ``--runs K`` repeats the whole measurement and prints the
spread (min..max) of every ratio across the runs. The project's targets: scalar IK ~2 us per target, batch
>= 10 million targets/s on a 2-core machine, >= 1000x faster than the numerical
reference per target at the same accuracy.
"""

from __future__ import annotations

import argparse
import gc
import math
import os
import sys
import time

import modern_robotics as mr
import numpy as np


from benchjog.console.cell.armfile import builtin_arm  # noqa: E402
from benchjog.kinematics import planar, solve  # noqa: E402


def targets_for(arm, n: int, rng) -> np.ndarray:
    """Random reachable targets (FK of random joint values within the limits)."""
    cols = [rng.uniform(j.min, j.max, n) for j in arm.joints]
    a1, a2 = arm.link1_mm, arm.link2_mm
    t1, t2 = cols[0] + arm.joints[0].offset_rad, cols[1] + arm.joints[1].offset_rad
    x = a1 * np.cos(t1) + a2 * np.cos(t1 + t2)
    y = a1 * np.sin(t1) + a2 * np.sin(t1 + t2)
    if not arm.is_scara:
        return np.column_stack([x, y])
    pose = np.array([solve.tool_from_joints(arm, row) for row in np.column_stack(cols)[:2000]])
    reps = -(-n // len(pose))
    z = np.tile(pose[:, 2], reps)[:n]
    roll = np.tile(pose[:, 3], reps)[:n]
    # keep x, y from all n rows; z and roll from the FK rows (any z and roll are reachable)
    return np.column_stack([x, y, z, roll])


def timed(fn, repeat: int = 1) -> tuple[float, float, object]:
    """(first, best) wall time in seconds, and the last result; the garbage collector
    is off while timing, as in timeit."""
    times, result = [], None
    gc.collect()
    gc.disable()
    try:
        for _ in range(repeat):
            t0 = time.perf_counter()
            result = fn()
            times.append(time.perf_counter() - t0)
    finally:
        gc.enable()
    return times[0], min(times), result


def fk_error_batch(arm, targets: np.ndarray, joints: np.ndarray, reachable: np.ndarray) -> float:
    a1, a2 = arm.link1_mm, arm.link2_mm
    worst = 0.0
    for row in (0, 1):
        t1 = joints[row, reachable, 0] + arm.joints[0].offset_rad
        t2 = joints[row, reachable, 1] + arm.joints[1].offset_rad
        x = a1 * np.cos(t1) + a2 * np.cos(t1 + t2)
        y = a1 * np.sin(t1) + a2 * np.sin(t1 + t2)
        worst = max(worst, float(np.max(np.hypot(x - targets[reachable, 0],
                                                 y - targets[reachable, 1]))))
    return worst


def screws(arm):
    """Space screw axes and home pose from the geometry (see tests/test_ik_reference.py)."""
    a1, a2 = arm.link1_mm, arm.link2_mm
    s1 = np.array([0, 0, 1, 0, 0, 0.0])
    s2 = np.array([0, 0, 1, 0, -a1, 0.0])
    m = np.eye(4)
    m[0, 3] = a1 + a2
    if not arm.is_scara:
        return m, np.column_stack([s1, s2])
    j1, j2, j3, j4 = arm.joints
    m[:3, :3] = np.diag([1.0, -1.0, -1.0])
    m[2, 3] = j1.d_mm + j2.d_mm - j3.d_mm - j4.d_mm
    return m, np.column_stack([s1, s2, [0, 0, 0, 0, 0, -1.0], [0, 0, -1, 0, a1 + a2, 0.0]])


def bare_numpy_ik(a1: float, a2: float, x: np.ndarray, y: np.ndarray):
    """Both 2R branches by the law of cosines and atan2, nothing else (no reach, limit
    or wrapping checks): the reference floor for the batch paths."""
    c2 = np.clip((x * x + y * y - a1 * a1 - a2 * a2) / (2.0 * a1 * a2), -1.0, 1.0)
    t2 = np.arccos(c2)
    k1, k2 = a1 + a2 * c2, a2 * np.sin(t2)
    base = np.arctan2(y, x)
    corr = np.arctan2(k2, k1)
    return base - corr, t2, base + corr, -t2


def mr_run(arm, targets: np.ndarray, answers: np.ndarray, rng, from_home: bool = False
           ) -> tuple[float, float, int]:
    """Seconds per target, max position error (mm) and the number converged; the
    initial guess near the answer, or the arm's home pose."""
    m, slist = screws(arm)
    goals, guesses = [], []
    for target, answer in zip(targets, answers):
        t = np.eye(4)
        if arm.is_scara:
            x, y, z, roll = target
            c, s = math.cos(roll), math.sin(roll)
            t[:3, :3] = np.array([[c, -s, 0], [s, c, 0], [0, 0, 1.0]]) @ np.diag([1.0, -1, -1])
            t[:3, 3] = (x, y, z)
        else:
            heading = answer[0] + answer[1]
            c, s = math.cos(heading), math.sin(heading)
            t[:3, :3] = [[c, -s, 0], [s, c, 0], [0, 0, 1.0]]
            t[:2, 3] = target
        goals.append(t)
        noise = [rng.choice([-1.0, 1.0]) * (math.radians(10.0) if j.is_revolute else 10.0)
                 for j in arm.joints]
        guesses.append(np.array(arm.home_joints, dtype=float) if from_home
                       else answer + np.array(noise))
    t0 = time.perf_counter()
    found = [mr.IKinSpace(slist, m, g, s, 1e-9, 1e-9) for g, s in zip(goals, guesses)]
    per = (time.perf_counter() - t0) / len(goals)
    worst, converged = 0.0, 0
    for (theta, ok), goal in zip(found, goals):
        converged += bool(ok)
        if ok:
            worst = max(worst, float(np.linalg.norm(mr.FKinSpace(m, slist, theta)[:3, 3]
                                                    - goal[:3, 3])))
    return per, worst, converged


def measure(arm, args, rng) -> dict[str, float]:
    """One run on one arm: prints the table, returns its ratios."""
    a1, a2 = arm.link1_mm, arm.link2_mm
    targets = targets_for(arm, args.n, rng)
    print(f"\n== {arm.name} ({a1:g} + {a2:g} mm), {args.n} batch targets")

    xs, ys = targets[:args.scalar_n, 0].tolist(), targets[:args.scalar_n, 1].tolist()
    ik = planar.thetas_from_tool_xy

    def raw_loop():
        for x, y in zip(xs, ys):
            ik(a1, a2, x, y)

    _, raw_s, _ = timed(raw_loop, 3)
    raw_per = raw_s / len(xs)
    raw_err = max(math.hypot(fx - x, fy - y) for x, y in zip(xs, ys)
                  for fx, fy in (planar.tool_xy_from_thetas(a1, a2, *s) for s in ik(a1, a2, x, y)))
    front = [tuple(t) for t in targets[:args.front_n].tolist()]
    _, front_s, front_res = timed(lambda: [solve.joints_from_tool(arm, t) for t in front])
    front_per = front_s / len(front)
    front_err = max(math.hypot(p[0] - t[0], p[1] - t[1]) for t, r in zip(front, front_res)
                    for p in (solve.tool_from_joints(arm, s.joints) for s in r.solutions))

    x, y = targets[:, 0].copy(), targets[:, 1].copy()
    _, bare_best, _ = timed(lambda: bare_numpy_ik(a1, a2, x, y), 5)
    b_first, b_best, (t1, t2, ok, _) = timed(
        lambda: planar.thetas_from_tool_xy_batch(a1, a2, x, y), 5)
    b_err = fk_error_batch(arm, targets, np.stack([t1, t2], axis=-1), ok)
    s_first, s_best, batch = timed(lambda: solve.joints_from_tool_batch(arm, targets), 5)
    s_err = fk_error_batch(arm, targets, batch.joints, batch.reachable)

    answers = np.array([r.solutions[0].joints for r in front_res[:args.mr_n]])
    mr_per, mr_err, mr_ok = mr_run(arm, targets[:args.mr_n], answers, rng)
    home_per, home_err, home_ok = mr_run(arm, targets[:args.mr_n], answers, rng, from_home=True)

    rows = [
        ("planar.thetas_from_tool_xy (scalar)", raw_per, raw_err, len(xs)),
        ("solve.joints_from_tool (scalar, findings)", front_per, front_err, len(front)),
        ("bare numpy law of cosines (batch floor)", bare_best / args.n, float("nan"), args.n),
        ("planar.thetas_from_tool_xy_batch", b_best / args.n, b_err, args.n),
        ("solve.joints_from_tool_batch", s_best / args.n, s_err, args.n),
        ("mr.IKinSpace, guess near the answer", mr_per, mr_err, args.mr_n),
        ("mr.IKinSpace, guess at home", home_per, home_err, args.mr_n),
    ]
    print(f"{'':44s} {'us/target':>10s} {'targets/s':>12s} {'max err mm':>11s} {'n':>8s}")
    for label, per, err, n in rows:
        print(f"{label:44s} {per * 1e6:10.4f} {1 / per:12.4g} {err:11.2e} {n:8d}")
    print(f"batch first call (fresh memory): raw {args.n / b_first / 1e6:.1f} M/s, "
          f"solve {args.n / s_first / 1e6:.1f} M/s; best of 5 above")
    print(f"mr.IKinSpace converged on {mr_ok}/{args.mr_n} targets from near the answer, "
          f"{home_ok}/{args.mr_n} from home")
    ratios = {
        "scalar vs IKinSpace near the answer": mr_per / raw_per,
        "scalar vs IKinSpace from home": home_per / raw_per,
        "scalar with findings vs IKinSpace near": mr_per / front_per,
        "raw batch vs bare numpy (time ratio, <1 faster)": b_best / bare_best,
        "solve batch vs bare numpy (time ratio)": s_best / bare_best,
    }
    for name, value in ratios.items():
        print(f"  {name}: {value:.2f}")
    return ratios


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=1_000_000, help="batch targets")
    ap.add_argument("--scalar-n", type=int, default=200_000, help="raw scalar IK targets")
    ap.add_argument("--front-n", type=int, default=50_000, help="solve.joints_from_tool targets")
    ap.add_argument("--mr-n", type=int, default=300, help="mr.IKinSpace targets")
    ap.add_argument("--runs", type=int, default=1, help="repeat and print the spread of the ratios")
    args = ap.parse_args(argv)
    rng = np.random.default_rng(2024)
    print(f"numpy {np.__version__}, {os.cpu_count()} CPUs, python {sys.version.split()[0]}")
    spread: dict[tuple[str, str], list[float]] = {}
    for _ in range(args.runs):
        for name in ("planar-bench", "scara-bench"):
            for key, value in measure(builtin_arm(name), args, rng).items():
                spread.setdefault((name, key), []).append(value)
    if args.runs > 1:
        print(f"\n== spread over {args.runs} runs (min..max)")
        for (name, key), values in spread.items():
            print(f"{name:13s} {key}: {min(values):.2f}..{max(values):.2f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
