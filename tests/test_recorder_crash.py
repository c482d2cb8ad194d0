"""Crash safety for real: recordings killed with SIGKILL at random moments.

A simulated array publisher (``lobewatch synth``) feeds ``lobewatch live --headless
--record`` processes that are killed with ``kill -9`` at random moments, some during
start-up.  The headless JSON Lines each process printed before it died are its
progress log: every readout printed at a time at least 1 s before the kill must be in
the file with all the samples it had counted, the file must open, and replaying it
must print the very same readouts.
"""

from __future__ import annotations

import io
import json
import os
import random
import signal
import subprocess
import sys
import time
from contextlib import redirect_stdout
from pathlib import Path

import pytest

from replay.session import SessionReader
from tui.cli import main

ROOT = Path(__file__).resolve().parent.parent
CLI = [sys.executable, "-m", "tui.cli"]
KILLS = 12  # recordings killed in this suite (issue asks for at least 10)
MAX_LOSS_S = 1.0  # a kill may lose at most the last second


def _env() -> dict[str, str]:
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    return env


@pytest.fixture(scope="module")
def publisher(tmp_path_factory):
    d = tmp_path_factory.mktemp("pub")
    endpoint = f"ipc://{d}/beam.sock"
    proc = subprocess.Popen(CLI + ["synth", "--endpoint", endpoint, "--rate-sps", "50000",
                                   "--batch", "500", "--seed", "11", "--duration", "120"],
                            cwd=ROOT, env=_env(), stdout=subprocess.DEVNULL,
                            stderr=subprocess.DEVNULL)
    deadline = time.monotonic() + 15
    while not os.path.exists(f"{d}/beam.sock"):
        assert proc.poll() is None, "publisher died"
        assert time.monotonic() < deadline, "publisher did not bind"
        time.sleep(0.05)
    yield endpoint
    proc.kill()
    proc.wait(5)


def _start_recorder(endpoint: str, path: Path) -> subprocess.Popen:
    return subprocess.Popen(CLI + ["live", endpoint, "--headless", "--interval", "0.1",
                                   "--record", str(path), "--elements", "4"],
                            cwd=ROOT, env=_env(), stdout=subprocess.PIPE,
                            stderr=subprocess.DEVNULL)


def _metrics(text: str) -> list[dict]:
    out = []
    for line in text.splitlines():
        try:
            rec = json.loads(line)
        except ValueError:  # the last line may be cut by the kill
            continue
        if rec.get("type") == "metrics":
            out.append(rec)
    return out


def _replay_metrics(path: Path) -> list[dict]:
    buf = io.StringIO()
    with redirect_stdout(buf):
        assert main(["replay", str(path), "--headless"]) == 0
    return _metrics(buf.getvalue())


def test_kill_minus_nine_loses_at_most_a_second(publisher, tmp_path):
    rng = random.Random(20260101)
    checked_with_data = 0
    for round_ in range(KILLS // 2):
        # two recorders at once (the publisher fans out), killed at independent moments
        runs = []
        for j in range(2):
            path = tmp_path / f"rec{round_}_{j}.lws"
            runs.append((path, _start_recorder(publisher, path), rng.uniform(0.3, 3.2)))
        t_start = time.time()
        kill_t: dict[Path, float] = {}
        while len(kill_t) < len(runs):
            now = time.time()
            for path, proc, delay in runs:
                if path not in kill_t and now - t_start >= delay:
                    kill_t[path] = time.time()
                    os.kill(proc.pid, signal.SIGKILL)
            time.sleep(0.01)
        for path, proc, _ in runs:
            out, _ = proc.communicate(timeout=10)
            assert proc.returncode == -signal.SIGKILL
            printed = _metrics(out.decode("utf-8", "replace"))
            cutoff = kill_t[path] - MAX_LOSS_S
            due = [r for r in printed if r["t"] <= cutoff]
            if not path.exists():
                # killed before the session file was linked into place: nothing was due
                assert not due, f"{path.name}: no file but readouts were printed"
                continue
            with SessionReader(path) as reader:  # it opens
                ticks = {it.t for it in reader.iter_items(kinds=("tick",))}
                samples = reader.counts()["samples"]
            for r in due:
                assert round(r["t"], 4) in {round(t, 4) for t in ticks}, \
                    f"{path.name}: readout at {r['t']} lost ({kill_t[path] - r['t']:.2f} s " \
                    "before the kill)"
            if due:
                checked_with_data += 1
                assert samples >= due[-1]["samples"]
                # it replays, and the replay prints the readouts the live run printed
                again = {r["t"]: r for r in _replay_metrics(path)}
                for r in due:
                    assert again[r["t"]] == r
    assert checked_with_data >= 3  # enough kills landed after real data was flowing
