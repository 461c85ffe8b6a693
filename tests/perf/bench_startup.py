"""Command start-up, as the user waits for it: wall time of whole processes.

Run: ``.venv/bin/python tests/perf/bench_startup.py [runs]``. Prints the minimum over
``runs`` (default 15) of each command and its ratio to the reference measured in the
same run, interleaved so that machine load hits all alike:
- ``benchjog --version`` and ``--help`` against ``python -c pass`` (target: within 2x);
- ``solve --json`` and ``fk --json`` against ``python -c "import numpy"`` (target: within
  1.2x).
Nothing here asserts a time; which modules each command loads is tested in
tests/test_cli_startup.py.
"""

from __future__ import annotations

import subprocess
import sys
import time

PY = sys.executable
REFERENCES = {
    "python -c pass": [PY, "-c", "pass"],
    "python -c 'import numpy'": [PY, "-c", "import numpy"],
}
COMMANDS = {
    "benchjog --version": ([PY, "-m", "benchjog", "--version"], "python -c pass", 2.0),
    "benchjog --help": ([PY, "-m", "benchjog", "--help"], "python -c pass", 2.0),
    "benchjog solve 150 -200 --json": ([PY, "-m", "benchjog", "solve", "150", "-200", "--json"],
                                       "python -c 'import numpy'", 1.2),
    "benchjog fk 0 90 --json": ([PY, "-m", "benchjog", "fk", "0", "90", "--json"],
                                "python -c 'import numpy'", 1.2),
}


def wall(cmd: list[str]) -> float:
    start = time.perf_counter()
    subprocess.run(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, check=False)
    return time.perf_counter() - start


def main(runs: int = 15) -> None:
    every = {**REFERENCES, **{k: v[0] for k, v in COMMANDS.items()}}
    best = {name: float("inf") for name in every}
    for name, cmd in every.items():  # warm the file cache once
        wall(cmd)
    for _ in range(runs):
        for name, cmd in every.items():
            best[name] = min(best[name], wall(cmd))
    print(f"start-up, minimum of {runs} runs each ({sys.version.split()[0]})")
    for name in REFERENCES:
        print(f"  {name:34s} {best[name] * 1000:7.1f} ms  (reference)")
    for name, (_, ref, target) in COMMANDS.items():
        ratio = best[name] / best[ref]
        print(f"  {name:34s} {best[name] * 1000:7.1f} ms  {ratio:5.2f}x {ref} "
              f"(target {target}x: {'met' if ratio <= target else 'NOT met'})")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 15)
