"""Several streams in one process: stations, the fleet, topics, config tables, headless.

The stations here are fed by in-memory sources (a scripted list of batches) and an
injected clock, so nothing depends on timing; one test at the end uses real sockets
through the command line.  Expected beam values come from the simulator's closed-form
array factor (C. A. Balanis, *Antenna Theory*, 3rd ed., ch. 6; 4 elements, half-wave
spacing, broadside: HPBW about 26.3 deg, quoted from memory and re-derived in
tests/test_headless.py).
"""

from __future__ import annotations

import asyncio
import io
import json
import os
import subprocess
import sys
import time
from pathlib import Path

import pytest
import zmq

from replay.fleet import FAILED, Fleet, MixedTopicsError, Station, TopicGuard
from replay.session import SessionReader
from stream.batch import SampleBatch
from stream.errors import InputFileError, UserError
from stream.estimator import EstimatorConfig, RollingPattern
from stream.monitor import Monitor
from stream.synth import SynthConfig, SynthSource
from stream.tick import SourceStats
from stream.wire_encode import encode_binary_batch
from tui.cli import UsageError, build_parser
from tui.fleet_options import (
    fleet_requested,
    monitor_for_spec,
    parse_stream_arg,
    stream_specs_from_args,
)
from tui.fleet_run import build_fleet, run_fleet_headless

ROOT = Path(__file__).resolve().parents[1]
T0 = 1_800_000_000.0


class ScriptedSource:
    """A LiveSource that yields prepared batch lists, then ends."""

    def __init__(self, lists: list[list[SampleBatch]]) -> None:
        self.lists = lists
        self.closed = False
        self.last_rx: float | None = None

    async def batches(self):
        for batches in self.lists:
            self.last_rx = batches[-1].rx_t
            yield batches
            await asyncio.sleep(0)

    def stats(self, now: float) -> SourceStats:
        state = "ended" if self.closed else ("receiving" if self.last_rx else "waiting")
        return SourceStats(state=state, messages=sum(len(x) for x in self.lists))

    async def aclose(self) -> None:
        self.closed = True


class StepClock:
    def __init__(self) -> None:
        self.t = T0

    def __call__(self) -> float:
        self.t += 0.5
        return self.t


def synth_lists(seconds: float = 3.0, topic: str = "", seed: int = 1,
                scenario: str = "steady") -> list[list[SampleBatch]]:
    src = SynthSource(SynthConfig(seed=seed, scenario=scenario), start_t=T0)
    out = []
    for b in src.batches(T0, seconds):
        out.append([SampleBatch(b.t, b.angle_deg, b.power_db, rx_t=b.rx_t, stream=topic)])
    return out


def monitor() -> Monitor:
    return Monitor(RollingPattern(EstimatorConfig(tau_s=1.0)), None)


def parse(*argv: str):
    return build_parser().parse_args(["live", *argv])


# -- topic guard -------------------------------------------------------------------------

def test_topic_guard_refuses_a_second_topic_before_it_reaches_the_monitor():
    lists = synth_lists(1.0, topic="east")
    mixed = synth_lists(1.0, topic="west")[0]
    src = ScriptedSource([*lists, [lists[0][0], *mixed]])
    guard = TopicGuard(src, "tcp://127.0.0.1:5557")
    got: list[SampleBatch] = []

    async def consume() -> None:
        async for batches in guard.batches():
            got.extend(batches)

    with pytest.raises(MixedTopicsError) as info:
        asyncio.run(consume())
    msg = str(info.value)
    assert "'east'" in msg and "'west'" in msg and "--topic" in msg and "[streams." in msg
    assert "\n" not in msg
    assert {b.stream for b in got} == {"east"}  # nothing of the mixed list was passed on


def test_one_failing_stream_does_not_stop_the_others():
    good_lists = synth_lists(3.0, seed=2)
    bad = ScriptedSource([*synth_lists(0.5, topic="x"), *synth_lists(0.5, topic="y")])
    good = ScriptedSource(good_lists)
    # StepClock moves 0.5 s per readout: readouts every 50 ms of loop time keep it near
    # the scripted data's own times (the good stream's last reading must still be fresh)
    a = Station("bad", monitor(), bad, interval_s=0.05, clock=StepClock())
    b = Station("good", monitor(), good, interval_s=0.05, clock=StepClock())
    statuses: list[dict] = []
    a.monitor.event_sinks.append(lambda e: statuses.append(e.data))
    fleet = Fleet([a, b])
    asyncio.run(fleet.run(asyncio.Event()))
    assert a.state == FAILED and "several topics" in (a.error or "")
    assert any(s.get("state") == FAILED for s in statuses)
    assert b.error is None
    assert b.monitor.estimator.samples == sum(len(x[0]) for x in good_lists)
    assert b.reading is not None and b.reading.tick.metrics.hpbw_deg == pytest.approx(26.3, abs=1.0)


def test_station_batches_carry_the_stream_name():
    seen: list[str] = []
    mon = monitor()
    mon.batch_sinks.append(lambda batch: seen.append(batch.stream))
    st = Station("mast-3", mon, ScriptedSource(synth_lists(1.0, topic="sector-a")),
                 interval_s=0.001, clock=StepClock())
    asyncio.run(Fleet([st]).run(asyncio.Event()))
    assert seen and set(seen) == {"mast-3"}
    assert st.guard is not None and st.guard.topic == "sector-a"


def test_fleet_refuses_duplicate_names_and_bad_names():
    with pytest.raises(UserError, match="twice"):
        Fleet([Station("a", monitor()), Station("a", monitor())])
    with pytest.raises(UserError, match="stream name"):
        Station("../etc", monitor())


# -- options and config tables --------------------------------------------------------

def test_stream_argument_parsing():
    assert parse_stream_arg("east=tcp://127.0.0.1:5557") == ("east", "tcp://127.0.0.1:5557")
    with pytest.raises(UsageError, match="NAME=ENDPOINT"):
        parse_stream_arg("tcp://127.0.0.1:5557")
    with pytest.raises(UserError, match="ZeroMQ address"):
        parse_stream_arg("east=127.0.0.1:5557")


def write(tmp_path: Path, text: str) -> str:
    p = tmp_path / "site.toml"
    p.write_text(text)
    return str(p)


def test_config_tables_give_per_stream_settings(tmp_path):
    path = write(tmp_path, """
[alarms]
raise_hold_s = 1.0

[streams.north]
endpoint = "tcp://127.0.0.1:5601"
topic = "n"
format = "auto"
target_deg = 12.0
tolerance_deg = 3.0
curve_server_key = "keys/north.key"

[streams.north.model]
elements = 8
spacing_wl = 0.5

[streams.north.alarms.sidelobe_rise]
limit_db = -14.0

[streams.south]
endpoint = "tcp://127.0.0.1:5602"
""")
    args = parse("--config", path, "--stream", "lab=tcp://127.0.0.1:5603", "--elements", "4")
    assert fleet_requested(args)
    specs = stream_specs_from_args(args)
    assert [s.name for s in specs] == ["lab", "north", "south"]
    north = specs[1]
    assert north.topic == "n" and north.fmt == "auto"
    assert north.extra == {"curve_server_key": "keys/north.key"}  # passed through
    mon = monitor_for_spec(north, args)
    assert mon.model.n_elements == 8
    assert mon.target_deg == 12.0 and mon.tolerance_deg == 3.0
    assert mon.alarms.config.sll_limit_db == -14.0
    assert mon.alarms.config.raise_hold_s == 1.0  # the file's [alarms] still applies
    south = monitor_for_spec(specs[2], args)
    assert south.model.n_elements == 4 and south.target_deg is None
    assert south.alarms.config.sll_limit_db == -10.0


@pytest.mark.parametrize("text, match", [
    ('[streams.a]\nendpoint = "tcp://127.0.0.1:1"\nendpiont = 3\n', "unknown key 'endpiont'"),
    ('[streams.a]\ntopic = "x"\n', "needs endpoint"),
    ('[streams.a]\nendpoint = "tcp://127.0.0.1:1"\nformat = "xml"\n', "format"),
    ('[streams.a]\nendpoint = "tcp://127.0.0.1:1"\n[streams.a.model]\nelements = 0\n',
     "elements"),
    ('[streams.a]\nendpoint = "tcp://127.0.0.1:1"\n[streams.a.alarms.drift]\nsweep = 3\n',
     r"streams\.a\.alarms\.drift"),
])
def test_config_errors_name_the_key_and_file(tmp_path, text, match):
    path = write(tmp_path, text)
    with pytest.raises(InputFileError, match=match) as info:
        stream_specs_from_args(parse("--config", path))
    assert path in str(info.value) and "\n" not in str(info.value)


def test_names_must_be_unique_and_some_stream_is_needed(tmp_path):
    path = write(tmp_path, '[streams.default]\nendpoint = "tcp://127.0.0.1:1"\n')
    with pytest.raises(UsageError, match="twice"):
        stream_specs_from_args(parse("tcp://127.0.0.1:2", "--config", path))
    with pytest.raises(UsageError, match="--stream NAME=ENDPOINT"):
        stream_specs_from_args(parse())
    assert not fleet_requested(parse("tcp://127.0.0.1:2"))


def test_record_dir_gives_each_stream_its_own_session_file(tmp_path):
    args = parse("--stream", "a=tcp://127.0.0.1:1", "--stream", "b=tcp://127.0.0.1:2",
                 "--record-dir", str(tmp_path / "rec"))
    fleet = build_fleet(args, 1.0)
    try:
        for st in fleet:
            st.monitor.tick(T0, SourceStats())
    finally:
        fleet.close()
    for name in ("a", "b"):
        with SessionReader(tmp_path / "rec" / f"{name}.lwsession") as r:
            assert r.meta["source"]["stream"] == name
    with pytest.raises(UsageError, match="--record-dir"):
        build_fleet(parse("--stream", "a=tcp://127.0.0.1:1", "--stream",
                          "b=tcp://127.0.0.1:2", "--record", str(tmp_path / "x.lwsession")),
                    1.0)


# -- headless ----------------------------------------------------------------------------

def test_headless_lines_name_their_stream_and_each_stream_gets_a_summary():
    stations = [Station(n, monitor(), ScriptedSource(synth_lists(2.0, seed=i)),
                        interval_s=0.001, clock=StepClock())
                for i, n in enumerate(("east", "west"))]
    out = io.StringIO()
    assert run_fleet_headless(Fleet(stations), out) == 0
    lines = [json.loads(x) for x in out.getvalue().splitlines()]
    assert all(list(rec)[:2] == ["type", "stream"] for rec in lines)
    summaries = [r for r in lines if r["type"] == "summary"]
    assert sorted(r["stream"] for r in summaries) == ["east", "west"]
    for r in summaries:
        st = next(s for s in stations if s.name == r["stream"])
        assert r["samples"] == st.monitor.estimator.samples > 0
    last = {r["stream"]: r for r in lines if r["type"] == "metrics"}
    for st in stations:
        assert last[st.name]["peak_angle_deg"] == pytest.approx(
            st.monitor.last_tick.metrics.peak_angle_deg, abs=1e-4)


# -- end to end over real sockets ---------------------------------------------------------

def test_cli_refuses_two_topics_on_one_socket_with_a_hint():
    """A publisher sends two arrays' samples under two topics on one socket; `live`
    without --topic stops with a one-line message instead of merging them."""
    ctx = zmq.Context()
    pub = ctx.socket(zmq.PUB)
    port = pub.bind_to_random_port("tcp://127.0.0.1")
    proc = subprocess.Popen(
        [sys.executable, "-m", "tui.cli", "live", f"tcp://127.0.0.1:{port}", "--headless",
         "--interval", "0.2"],
        cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
        env={**os.environ, "PYTHONPATH": str(ROOT)})
    try:
        src = SynthSource(SynthConfig(), start_t=time.time())
        deadline = time.monotonic() + 20
        seq = 0
        while proc.poll() is None and time.monotonic() < deadline:
            b = src.generate(time.time() - 0.05, 0.05)
            for topic in (b"east", b"west"):
                pub.send_multipart(encode_binary_batch(b.angle_deg, b.power_db, b.t, seq,
                                                       "e1", topic=topic))
            seq += 1
            time.sleep(0.05)
        _, err = proc.communicate(timeout=10)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
        pub.close(0)
        ctx.term()
    assert proc.returncode == 1, err
    assert err.count("\n") == 1
    assert "several topics" in err and "--topic" in err
