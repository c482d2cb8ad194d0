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
import threading
import time
from contextlib import redirect_stdout
from pathlib import Path

import pytest

from replay.session import SessionReader
from tui.cli import main

ROOT = Path(__file__).resolve().parent.parent
CLI = [sys.executable, "-m", "tui.cli"]
KILLS = 10  # recordings killed in this suite (issue asks for at least 10)
MAX_LOSS_S = 1.0  # bound checked here, loaded machine included (commits every 0.2 s)


def _env() -> dict[str, str]:
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    return env


@pytest.fixture(scope="module")
def publisher(tmp_path_factory):
    d = tmp_path_factory.mktemp("pub")
    endpoint = f"ipc://{d}/beam.sock"
    proc = subprocess.Popen(CLI + ["synth", "--endpoint", endpoint, "--rate-sps", "50000",
                                   "--batch", "500", "--seed", "11", "--duration", "600"],
                            cwd=ROOT, env=_env(), stdout=subprocess.DEVNULL,
                            stderr=subprocess.DEVNULL)
    deadline = time.monotonic() + 120  # a bound against hanging (slow start under load)
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


class _Run:
    """One recording process, its stdout collected by a thread, and when to kill it."""

    def __init__(self, endpoint: str, path: Path, during_startup: bool, delay: float):
        self.path = path
        self.proc = _start_recorder(endpoint, path)
        self.spawned = time.time()
        self.lines: list[str] = []
        self.first_readout: float | None = None
        self.during_startup = during_startup
        self.delay = delay
        self.killed_at: float | None = None
        self.reader = threading.Thread(target=self._read, daemon=True)
        self.reader.start()

    def _read(self) -> None:
        for raw in self.proc.stdout:
            line = raw.decode("utf-8", "replace")
            self.lines.append(line)
            if self.first_readout is None and '"type":"metrics"' in line:
                self.first_readout = time.time()

    def due(self, now: float) -> bool:
        if self.during_startup:
            return now - self.spawned >= self.delay
        return self.first_readout is not None and now - self.first_readout >= self.delay


@pytest.mark.timeout(900)  # ten recorder processes; slow on a loaded machine
def test_kill_minus_nine_loses_at_most_a_second(publisher, tmp_path):
    rng = random.Random(20260101)
    checked_with_data = 0
    for round_ in range(KILLS // 2):
        # two recorders at once (the publisher fans out), killed at independent moments:
        # one in four during start-up, the others 1.05 .. 2.5 s after the first readout
        runs = []
        for j in range(2):
            startup = (2 * round_ + j) % 4 == 0
            delay = rng.uniform(0.05, 1.0) if startup else rng.uniform(1.05, 2.5)
            runs.append(_Run(publisher, tmp_path / f"rec{round_}_{j}.lwsession", startup, delay))
        deadline = time.monotonic() + 120  # a bound against hanging; start-up is slow under load
        while any(r.killed_at is None for r in runs):
            assert time.monotonic() < deadline, "recorder never produced a readout"
            now = time.time()
            for r in runs:
                if r.killed_at is None and r.due(now):
                    r.killed_at = time.time()
                    os.kill(r.proc.pid, signal.SIGKILL)
            time.sleep(0.005)
        for r in runs:
            r.proc.wait(10)
            r.reader.join(10)
            assert r.proc.returncode == -signal.SIGKILL
            path = r.path
            printed = _metrics("".join(r.lines))
            cutoff = r.killed_at - MAX_LOSS_S
            due = [x for x in printed if x["t"] <= cutoff]
            if not path.exists():
                # killed before the session file was linked into place: nothing was due
                assert not due, f"{path.name}: no file but readouts were printed"
                continue
            with SessionReader(path) as reader:  # it opens
                ticks = {round(it.t, 4) for it in reader.iter_items(kinds=("tick",))}
                samples = reader.counts()["samples"]
            if ticks:  # the figure for the report (pytest -s shows it), not an assertion
                print(f"kill -9 {path.name}: last committed readout "
                      f"{r.killed_at - max(ticks):.2f} s before the kill, {samples} samples")
            for x in due:
                assert round(x["t"], 4) in ticks, \
                    f"{path.name}: readout at {x['t']} lost ({r.killed_at - x['t']:.2f} s " \
                    "before the kill)"
            if due:
                checked_with_data += 1
                assert samples >= due[-1]["samples"]
                # it replays, and the replay prints the readouts the live run printed
                again = {x["t"]: x for x in _replay_metrics(path)}
                for x in due:
                    assert again[x["t"]] == x
    assert checked_with_data >= 6  # enough kills landed after real data was flowing


class _Sinks:
    """The three sink lists of a monitor, nothing else."""

    def __init__(self) -> None:
        self.batch_sinks: list = []
        self.tick_sinks: list = []
        self.event_sinks: list = []
        self.reference = None


def _feed(m: _Sinks, rx_t: float) -> None:
    import numpy as np

    from stream.batch import SampleBatch
    b = SampleBatch.from_arrays(np.linspace(-5, 5, 10), np.zeros(10), rx_t=rx_t)
    for s in m.batch_sinks:
        s(b)


def test_commits_follow_recorded_time_not_the_wall_clock(tmp_path):
    """The first samples are committed at once, then whenever 0.5 s of recorded time
    has passed: another process sees the rows without the recorder being closed."""
    from replay.recorder import Recorder
    m = _Sinks()
    path = tmp_path / "c.lwsession"
    rec = Recorder(path, {}, threaded=False, commit_interval_s=0.5).attach(m)

    def stored() -> int:
        with SessionReader(path) as r:
            return r.counts()["batches"]

    _feed(m, 100.0)  # the first batch: committed at once (a kill now leaves it)
    assert stored() == 1 and rec.commits == 1
    for k in range(1, 5):  # 0.1 .. 0.4 s: not yet due
        _feed(m, 100.0 + 0.1 * k)
    assert stored() == 1
    _feed(m, 100.5)  # 0.5 s after the last commit: commit
    assert stored() == 6 and rec.commits == 2
    _feed(m, 100.6)
    assert stored() == 6
    rec.close()
    assert stored() == 7 and not rec.recording and rec.size_bytes > 0
    assert m.batch_sinks == [] and m.tick_sinks == [] and m.event_sinks == []


def test_write_failure_stops_recording_without_raising_into_the_pipeline(tmp_path):
    from replay.recorder import Recorder
    from stream.errors import UserError
    m = _Sinks()
    rec = Recorder(tmp_path / "f.lwsession", {}, threaded=True, commit_interval_s=0.5).attach(m)

    def broken() -> None:
        raise UserError("disk full (simulated)")

    rec._writer.commit = broken  # the next commit fails like a full disk
    for k in range(20):
        _feed(m, 10.0 + 0.1 * k)  # never raises into the caller
    rec.flush()
    assert rec.error is not None and "disk full" in rec.error and not rec.recording
    with pytest.raises(UserError, match="recording stopped: .*disk full"):
        rec.close()


def test_reference_trace_is_stored_with_its_event(tmp_path):
    import numpy as np

    from replay.recorder import Recorder
    from stream.beam import BeamMetrics
    from stream.tick import Event, Reference
    m = _Sinks()
    path = tmp_path / "r.lwsession"
    rec = Recorder(path, {}, threaded=False).attach(m)
    m.reference = Reference(5.0, np.array([-1.0, 0.0, 1.0]), np.array([-3.0, 0.0, -3.0]),
                            BeamMetrics(peak_angle_deg=0.0, hpbw_deg=2.0))
    for s in m.event_sinks:
        s(Event(5.0, "reference", {"peak_angle_deg": 0.0}))
    rec.close()
    with SessionReader(path) as r:
        (eid, ev), = r.event_rows()
        ref = r.reference_for(eid, ev)
    assert np.array_equal(ref.power_db, [-3.0, 0.0, -3.0]) and ref.metrics.hpbw_deg == 2.0


@pytest.mark.timeout(900)  # ten recorder processes; slow on a loaded machine
def test_kill_minus_nine_in_the_first_second_keeps_what_was_taken_in(publisher, tmp_path):
    """Killed 0.6 .. 0.95 s after its first readout, a recording is not empty: every
    readout printed at least 0.5 s before the kill is in the file with its samples
    (the first batch is committed at once, then every 0.2 s of recorded or wall time),
    and the file replays to the same readouts."""
    rng = random.Random(20260102)
    results = []
    for k in range(4):
        r = _Run(publisher, tmp_path / f"first{k}.lwsession", False, rng.uniform(0.6, 0.95))
        deadline = time.monotonic() + 120  # a bound against hanging; start-up is slow under load
        while r.killed_at is None:
            assert time.monotonic() < deadline, "recorder never produced a readout"
            if r.due(time.time()):
                r.killed_at = time.time()
                os.kill(r.proc.pid, signal.SIGKILL)
            time.sleep(0.002)
        r.proc.wait(10)
        r.reader.join(10)
        printed = _metrics("".join(r.lines))
        assert printed and r.path.exists()
        with SessionReader(r.path) as reader:
            samples = reader.counts()["samples"]
            ticks = {round(it.t, 4) for it in reader.iter_items(kinds=("tick",))}
        due = [x for x in printed if x["t"] <= r.killed_at - 0.5]
        results.append((r.killed_at - r.first_readout, len(printed), len(due), samples))
        if ticks:
            print(f"kill -9 {r.killed_at - r.first_readout:.2f} s after the first readout: "
                  f"{samples} samples kept, last committed readout "
                  f"{r.killed_at - max(ticks):.2f} s before the kill")
        assert samples > 0, f"killed {r.killed_at - r.first_readout:.2f} s after the first " \
                            "readout: empty session"
        for x in due:
            assert round(x["t"], 4) in ticks
        if due:
            assert samples >= due[-1]["samples"]
            again = {x["t"]: x for x in _replay_metrics(r.path)}
            assert all(again[x["t"]] == x for x in due)
    assert sum(1 for *_, d, _s in results if d) >= 2, results
