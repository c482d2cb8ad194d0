"""``lobewatch bench`` group ``fleet``: many streams in one headless process, exported.

A publisher process (``multiprocessing`` spawn) binds one XPUB socket per stream and,
once every socket has its subscriber, paces binary batches of 1,000 samples (float32,
``t0``/``dt`` header, numbered) at ``RATE_SPS`` per stream.  This process runs the real
fleet: one :class:`~replay.fleet.Station` per stream (ZmqSource + Monitor with alarms,
ticked once a second), a JSON Lines printer per stream writing to /dev/null, and the
Prometheus exporter on loopback.  The publisher process also scrapes the exporter over
HTTP once a second, as Prometheus would, and times each scrape.

Figures (the measured window follows a warm-up; this process's CPU counts every thread,
libzmq's I/O threads included, as % of one core):

* ``fleet_cpu_pct`` -- CPU of the monitoring process (target <= 60 % of one core);
* ``fleet_lost`` -- messages sent but never counted by a station, or missing from the
  numbering, whichever is larger (target 0);
* ``fleet_rss_mb`` -- peak resident memory during the run (target <= 250 MB);
* ``fleet_scrape_ms`` -- median HTTP scrape time; ``fleet_scrape_max_ms`` the worst;
  ``fleet_collect_ms`` -- the exposition's own cost (``generate_latest`` on the loop),
  which shows how much of a scrape is waiting for the interpreter lock;
* ``fleet_sps`` -- samples per second folded in, all streams together (for scale).
"""

from __future__ import annotations

import asyncio
import json
import multiprocessing as mp
import os
import resource
import time
import urllib.request
from typing import Any

import numpy as np
import zmq

from tui.bench.figures import Progress, figure, median

#: Streams and per-stream rate of the issue's benchmark.
STREAMS = 20
RATE_SPS = 50_000.0
#: Samples per message.
BATCH = 1000
#: Targets (issue 13, 2 cores).
TARGET_CPU_PCT = 60.0
TARGET_RSS_MB = 250.0
TARGET_SCRAPE_MS = 20.0

FIGURES: tuple[str, ...] = ("fleet_cpu_pct", "fleet_lost", "fleet_rss_mb", "fleet_scrape_ms",
                            "fleet_scrape_max_ms", "fleet_collect_ms", "fleet_sps")


def _pool(n_msgs: int = 50) -> list[tuple[np.ndarray, np.ndarray]]:
    """One triangle sweep of +-60 deg cut into batches, a 4-element broadside pattern
    (array factor, Balanis ch. 6) plus a little noise."""
    n = n_msgs * BATCH
    phase = np.arange(n) / n
    ang = 120.0 * np.abs(2.0 * phase - 1.0) - 60.0
    psi = np.pi * np.sin(np.radians(ang))
    with np.errstate(divide="ignore", invalid="ignore"):
        af = np.where(np.abs(np.sin(psi / 2)) < 1e-12, 1.0,
                      np.sin(2 * psi) / (4 * np.sin(psi / 2)))
    pw = 10 * np.log10(af ** 2 + 1e-6) - 40.0
    pw += np.random.default_rng(1).normal(0.0, 0.2, n)
    return [(ang[i * BATCH:(i + 1) * BATCH], pw[i * BATCH:(i + 1) * BATCH])
            for i in range(n_msgs)]


def _publisher_main(conn: Any, n_streams: int, rate_sps: float) -> None:
    """Bind, report the ports, wait for subscribers, then serve ("run", seconds, url)."""
    from stream.wire_encode import encode_binary_batch
    ctx = zmq.Context()
    socks = []
    ports = []
    for _ in range(n_streams):
        s = ctx.socket(zmq.XPUB)
        s.sndhwm = 100_000
        s.linger = 0
        ports.append(s.bind_to_random_port("tcp://127.0.0.1"))
        socks.append(s)
    conn.send(ports)
    deadline = time.monotonic() + 30
    for s in socks:  # the subscription message of each stream's monitor
        if not s.poll(max(0, int((deadline - time.monotonic()) * 1000))):
            conn.send({"error": "a subscriber did not connect"})
            return
        s.recv()
    conn.send("subscribed")
    pool = _pool()
    sent = [0] * n_streams
    msgs_per_s = rate_sps / BATCH
    dt = 1.0 / rate_sps
    while True:
        cmd = conn.recv()
        if cmd[0] == "quit":
            break
        _, seconds, url = cmd
        scrapes: list[float] = []
        start = time.monotonic()
        t_wall = time.time()
        next_scrape = start + 1.0
        k = 0
        while True:
            now = time.monotonic()
            if now - start >= seconds:
                break
            due = int((now - start) * msgs_per_s)
            while k < due:
                a, p = pool[k % len(pool)]
                t0 = t_wall + k * BATCH * dt
                for i, s in enumerate(socks):
                    s.send_multipart(encode_binary_batch(a, p, seq=k, epoch="bench",
                                                         dtype="<f4", t0=t0, dt=dt))
                    sent[i] += 1
                k += 1
            if url and now >= next_scrape:
                next_scrape += 1.0
                t0s = time.perf_counter()
                with urllib.request.urlopen(url, timeout=5) as resp:
                    resp.read()
                scrapes.append((time.perf_counter() - t0s) * 1000.0)
            time.sleep(max(0.0, min((k + 1) / msgs_per_s - (time.monotonic() - start), 0.005)))
        conn.send({"sent": list(sent), "scrapes_ms": scrapes})
    for s in socks:
        s.close(0)
    ctx.term()


def _cpu_s() -> float:
    r = resource.getrusage(resource.RUSAGE_SELF)
    return r.ru_utime + r.ru_stime


async def _run(conn: Any, ports: list[int], warmup_s: float, measure_s: float,
               progress: Progress) -> dict[str, Any]:
    from prometheus_client import generate_latest

    from replay.fleet import Fleet, Station
    from stream.alarms import AlarmConfig, AlarmEngine
    from stream.estimator import EstimatorConfig, RollingPattern
    from stream.monitor import Monitor
    from stream.zmq_source import ZmqSource
    from tui.bench.ingest import rss_mb
    from tui.exporter import MetricsServer, make_registry
    from tui.fleet_run import StreamPrinter

    devnull = open(os.devnull, "w")  # noqa: SIM115 - closed below
    stations = []
    for i, port in enumerate(ports):
        mon = Monitor(RollingPattern(EstimatorConfig()),
                      AlarmEngine(AlarmConfig(target_deg=0.0, tolerance_deg=2.0)))
        src = ZmqSource(f"tcp://127.0.0.1:{port}", hwm=100_000, stale_after_s=3.0)
        st = Station(f"s{i:02d}", mon, src, interval_s=1.0)
        printer = StreamPrinter(st.name, devnull)
        mon.tick_sinks.append(printer.on_tick)
        mon.event_sinks.append(printer.on_event)
        stations.append(st)
    fleet = Fleet(stations)
    registry = make_registry(lambda: fleet.stations)
    server = MetricsServer(registry, "127.0.0.1", 0)
    stop = asyncio.Event()
    task = asyncio.create_task(fleet.run(stop))
    try:
        ready = await asyncio.to_thread(conn.recv)
        if ready != "subscribed":
            raise RuntimeError(str(ready))
        conn.send(("run", warmup_s + measure_s, server.url))
        await asyncio.sleep(warmup_s)
        progress(f"fleet: {len(ports)} streams x {RATE_SPS:g} samples/s, measuring "
                 f"{measure_s:g} s")
        cpu0, wall0 = _cpu_s(), time.monotonic()
        samples0 = sum(s.monitor.estimator.samples for s in stations)
        peak_rss = rss_mb()
        end = wall0 + measure_s
        while time.monotonic() < end:
            await asyncio.sleep(0.5)
            peak_rss = max(peak_rss, rss_mb())
        cpu1, wall1 = _cpu_s(), time.monotonic()
        samples1 = sum(s.monitor.estimator.samples for s in stations)
        collect_ms = []
        for _ in range(20):  # the exposition's own cost, on the loop (no GIL hand-off)
            t0 = time.perf_counter()
            generate_latest(registry)
            collect_ms.append((time.perf_counter() - t0) * 1000.0)
            await asyncio.sleep(0.01)
        result = await asyncio.to_thread(conn.recv)
        received: list[int] = []
        for _ in range(20):  # until the last messages are in (at most 5 s)
            await asyncio.sleep(0.25)
            now = [s.source.stats(time.time()).messages for s in stations]
            if now == received:
                break
            received = now
        gaps = sum(s.source.stats(time.time()).lost for s in stations)
    finally:
        stop.set()
        await task
        server.close()
        fleet.close()
        devnull.close()
    lost = max(sum(result["sent"]) - sum(received), gaps)
    return {"cpu_pct": 100.0 * (cpu1 - cpu0) / (wall1 - wall0), "lost": lost,
            "rss_mb": peak_rss, "scrapes_ms": result["scrapes_ms"],
            "collect_ms": median(collect_ms),
            "sps": (samples1 - samples0) / (wall1 - wall0)}


def run_fleet_bench(quick: bool, progress: Progress, n_streams: int = STREAMS,
                    rate_sps: float = RATE_SPS) -> dict[str, Any]:
    """One run: start the publisher, run the fleet, return the raw figures."""
    ctx = mp.get_context("spawn")
    parent, child = ctx.Pipe()
    pub = ctx.Process(target=_publisher_main, args=(child, n_streams, rate_sps), daemon=True)
    pub.start()
    try:
        ports = parent.recv()
        return asyncio.run(_run(parent, ports, 2.0 if quick else 3.0,
                                4.0 if quick else 10.0, progress))
    finally:
        try:
            parent.send(("quit",))
        except (BrokenPipeError, OSError):
            pass
        pub.join(timeout=5)
        if pub.is_alive():
            pub.kill()
            pub.join()


def run_group(plan: Any, quick: bool, progress: Progress) -> dict[str, dict[str, Any]]:
    """The ``fleet`` figures for ``lobewatch bench``."""
    r = run_fleet_bench(quick, progress)
    scrapes = r["scrapes_ms"]
    return {
        "fleet_cpu_pct": figure(r["cpu_pct"], "% core", TARGET_CPU_PCT, higher_is_better=False),
        "fleet_lost": figure(float(r["lost"]), "msgs", 0.0, higher_is_better=False),
        "fleet_rss_mb": figure(r["rss_mb"], "MB", TARGET_RSS_MB, higher_is_better=False),
        "fleet_scrape_ms": figure(median(scrapes) if scrapes else None, "ms",
                                  TARGET_SCRAPE_MS, higher_is_better=False),
        "fleet_scrape_max_ms": figure(max(scrapes) if scrapes else None, "ms"),
        "fleet_collect_ms": figure(r["collect_ms"], "ms"),
        "fleet_sps": figure(r["sps"], "samples/s"),
    }


if __name__ == "__main__":  # python -m tui.bench.fleet: one full run, JSON
    print(json.dumps(run_fleet_bench(False, print), indent=1))
