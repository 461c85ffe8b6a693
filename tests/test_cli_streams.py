"""The streaming and small JSON outputs (docs/cli-json.md): `run --json` (one line per
step, then the result), `run` into a pipe (no progress bar, only the result line),
`emulate --json` (the start line), `ports --json`, `move --json`."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
from pathlib import Path

from benchjog.console.cell.program_runs import load_program
from benchjog.console.cell.armfile import builtin_arm

ROOT = Path(__file__).resolve().parents[1]
HERE = Path(__file__).resolve().parent
DEMO = ROOT / "examples" / "bench-cell" / "program.toml"


def bench(*args: str, answer: str = "y\n", timeout: float = 120) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "benchjog", *args], input=answer,
                          capture_output=True, text=True, timeout=timeout, cwd=HERE)


def test_run_json_streams_one_line_per_step_then_the_result(tmp_path):
    program, _ = load_program(DEMO, builtin_arm("planar-bench"))
    done = bench("run", str(DEMO), "--json", "--journal", str(tmp_path / "j.jsonl"))
    assert done.returncode == 0, done.stderr[-500:]
    lines = [json.loads(line) for line in done.stdout.splitlines()]
    steps, result = lines[:-1], lines[-1]
    assert [s["step"] for s in steps] == list(range(1, len(program.steps) + 1))
    assert all(s["event"] == "step" and s["of"] == len(program.steps) for s in steps)
    assert [s["description"] for s in steps] == [s.describe() for s in program.steps]
    assert result["event"] == "result" and result["command"] == "run"
    assert result["completed"] is True and result["outcome"] == "done"
    assert result["segments_sent"] > 0


def test_run_cancelled_streams_no_step(tmp_path):
    done = bench("run", str(DEMO), "--json", "--journal", str(tmp_path / "j.jsonl"), answer="n\n")
    assert done.returncode == 1
    lines = [json.loads(line) for line in done.stdout.splitlines()]
    assert [line["event"] for line in lines] == ["result"]
    assert lines[0]["outcome"] == "cancelled"


def test_run_into_a_pipe_prints_no_progress_only_the_result(tmp_path):
    done = bench("run", str(DEMO), "--journal", str(tmp_path / "j.jsonl"))
    assert done.returncode == 0
    assert done.stdout.strip().splitlines() == [done.stdout.strip()]
    assert done.stdout.startswith("done: program")
    assert "\r" not in done.stderr and "\x1b[" not in done.stderr  # no bar, no escapes


def test_move_json_is_one_result_object(tmp_path):
    done = bench("move", "100", "200", "--json", "--journal", str(tmp_path / "j.jsonl"))
    assert done.returncode == 0, done.stderr
    doc = json.loads(done.stdout)
    assert doc["command"] == "move" and doc["completed"] is True and doc["segments_sent"] > 0
    cancelled = bench("move", "100", "200", "--json", "--journal", str(tmp_path / "j.jsonl"),
                      answer="")
    assert cancelled.returncode == 1
    assert json.loads(cancelled.stdout)["outcome"] == "cancelled"


def test_emulate_json_start_line(tmp_path):
    proc = subprocess.Popen([sys.executable, "-m", "benchjog", "emulate", "--json", "-q"],
                            stdin=subprocess.PIPE, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            text=True, cwd=HERE)
    try:
        first = json.loads(proc.stdout.readline())
        assert first["device"].startswith("/dev/") and os.path.exists(first["device"])
        assert first == {"device": first["device"], "arm": "planar-bench", "axes": 2, "baud": 115200}
        proc.send_signal(signal.SIGINT)
        out, err = proc.communicate(timeout=10)
        assert proc.returncode == 0 and out == ""
        assert "emulating" not in err  # --quiet drops the banner
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()


def test_ports_json_is_an_array():
    done = bench("ports", "--json", answer="")
    assert done.returncode == 0
    ports = json.loads(done.stdout)
    assert isinstance(ports, list)
    assert all(set(p) == {"device", "vid_pid", "serial_number", "description", "hwid", "guess"}
               for p in ports)  # docs/cli-json.md


def test_run_on_a_terminal_shows_a_progress_bar(tmp_path):
    # a real pseudo-terminal for stdin, stdout and stderr, as a person's shell gives
    import pty
    import select
    import time

    controller, terminal = pty.openpty()
    env = {**os.environ, "COLUMNS": "100", "LINES": "30", "TERM": "xterm"}
    proc = subprocess.Popen([sys.executable, "-m", "benchjog", "run", str(DEMO), "--journal",
                             str(tmp_path / "j.jsonl")], stdin=terminal, stdout=terminal,
                            stderr=terminal, cwd=HERE, env=env, close_fds=True)
    os.close(terminal)
    seen = b""
    answered = False
    deadline = time.monotonic() + 120
    try:
        while time.monotonic() < deadline:
            ready, _, _ = select.select([controller], [], [], 0.2)
            if ready:
                try:
                    chunk = os.read(controller, 65536)
                except OSError:  # the child closed the terminal
                    break
                if not chunk:
                    break
                seen += chunk
                if not answered and b"[y/N]" in seen:
                    os.write(controller, b"y\n")
                    answered = True
            elif proc.poll() is not None:
                break
        assert proc.wait(timeout=30) == 0
    finally:
        if proc.poll() is None:
            proc.kill()
        os.close(controller)
    after = seen.split(b"[y/N]", 1)[1].decode("utf-8", "replace")
    assert "step 1: move to clear" in after          # the bar's label names the step
    assert "/14" in after                             # rich's MofNCompleteColumn: k/14
    assert "done: program" in after
