"""Ingest: samples/s through receive, decode and estimator, next to raw pyzmq.

The publisher runs in a separate process (``multiprocessing`` spawn) and is steered
over a pipe; the monitor side runs in this process.  All in the same run:

* capacity -- the publisher queues a burst (JSON singles, JSON batches of 1,000, binary
  batches of 1,000; angles swept like a real steering sweep) and goes idle; then the
  consumer drains it alone, timed.  Consumers: ``raw`` (plain pyzmq poll + non-blocking
  receives), ``raw+decode`` (the same plus the obvious decode: ``json.loads`` per
  message, ``np.frombuffer`` for binary) and ``pipeline``
  (:class:`stream.zmq_source.ZmqSource` + :class:`stream.live.LiveDriver` + the real
  :class:`stream.monitor.Monitor`: validation, estimator, 10 Hz tick);
* sustained -- the publisher paces a rate while the pipeline runs: ingested samples/s,
  this process's CPU (all threads, % of one core) and messages lost (sent - received);
* latency -- the publisher stamps each message's send time into ``t`` (binary batches
  of 100 samples, paced); a batch sink after the estimator compares it with the time the
  batch has been received, decoded and folded in (same machine, same clock);
* drain strategies (``bench/bench_ingest.py --drain``): ``await recv()`` per message,
  awaited poll + non-blocking drain, and a thread with a synchronous socket, each with a
  10 ms timer task alongside (the measurement behind ``stream/zmq_source.py``).

Peak resident memory of this (monitor) process is sampled during the pipeline runs: the
paced and latency runs (as live), and apart from them the capacity runs, whose queued
burst (up to ~100 MB of messages) sits in the socket's receive queue on purpose.
"""

from __future__ import annotations

import asyncio
import json
import multiprocessing as mp
import os
import resource
import socket
import threading
import time
from typing import Any

import numpy as np
import zmq

from tui.bench.figures import Progress, median, quiet

KINDS = ("json-single", "json-batch", "binary")
BATCH = 1000
HWM = 100_000
#: Samples per message of the latency stream.
LATENCY_BATCH = 100


# -- memory ----------------------------------------------------------------------------------
def rss_mb() -> float:
    """Resident memory of this process now, MB (peak so far where /proc is missing)."""
    try:
        with open("/proc/self/statm") as fh:
            pages = int(fh.read().split()[1])
        return pages * os.sysconf("SC_PAGE_SIZE") / 1e6
    except (OSError, ValueError, IndexError):
        return peak_rss_mb()


def peak_rss_mb() -> float:
    """Peak resident memory of this process so far, MB (Linux reports kB)."""
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1e3


class RssSampler:
    """Keeps the largest resident size seen by :meth:`sample`."""

    def __init__(self) -> None:
        self.peak_mb = 0.0

    def sample(self) -> None:
        self.peak_mb = max(self.peak_mb, rss_mb())


# -- publisher process ---------------------------------------------------------------------
def _triangle(n: int) -> np.ndarray:
    """Angles of one up-and-down sweep over +/-60 deg in ``n`` samples (swept data, as
    a real steering sweep produces; random angles would be a sweep reversal per sample)."""
    u = np.arange(n) / n * 2.0
    return np.round(-60.0 + 120.0 * np.where(u < 1.0, u, 2.0 - u), 3)


def _pool(kind: str, small: bool = False) -> list[list[bytes]]:
    from stream.wire_encode import (
        encode_binary_batch,
        encode_json_batch,
        encode_json_single,
        encode_raw_f32,
    )
    rng = np.random.default_rng(1)
    if kind == "json-single":
        n = 5_000 if small else 20_000
        ang = _triangle(n)
        pw = np.round(rng.uniform(-80, -40, n), 3)
        return [encode_json_single(float(a), float(p), 1767225600.0 + i * 1e-4)
                for i, (a, p) in enumerate(zip(ang.tolist(), pw.tolist(), strict=True))]
    n_msg = 64
    ang = _triangle(n_msg * BATCH).reshape(n_msg, BATCH)
    if kind == "binary-sweeps":  # every batch one whole sweep, -60 to +60 deg
        ang = np.broadcast_to(np.round(np.linspace(-60.0, 60.0, BATCH), 3), (n_msg, BATCH))
    out = []
    for i in range(n_msg):
        a = ang[i]
        p = np.round(rng.uniform(-80, -40, BATCH), 3)
        t0 = 1767225600.0 + i * 0.1
        if kind == "json-batch":
            out.append(encode_json_batch(a, p, t0=t0, dt=1e-4, decimals=3))
        elif kind == "raw-f32":
            out.append(encode_raw_f32(a, p))
        elif kind == "binary-sweeps":  # stamped as sent in the paced run, 1 M samples/s
            out.append(encode_binary_batch(a, p, 1767225600.0 + (i * BATCH + np.arange(BATCH))
                                           * 1e-6))
        else:
            out.append(encode_binary_batch(a, p, t0 + np.arange(BATCH) * 1e-4))
    return out


def _stamped(rate_msgs: float, conn: Any, send: Any) -> int:
    """Binary batches of LATENCY_BATCH samples at ``rate_msgs`` messages/s, each sample's
    ``t`` the wall-clock time just before sending (the latency stream)."""
    from stream.wire_encode import encode_binary_batch
    ang = _triangle(64 * LATENCY_BATCH).reshape(64, LATENCY_BATCH)
    pw = np.full(LATENCY_BATCH, -50.0)
    ones = np.ones(LATENCY_BATCH)
    sent = 0
    start = time.perf_counter()
    while not conn.poll():
        due = int((time.perf_counter() - start) * rate_msgs)
        while sent < due:
            send(encode_binary_batch(ang[sent % 64], pw, ones * time.time(), seq=sent,
                                     epoch="lat"))
            sent += 1
        time.sleep(0.0005)
    return sent


def publisher_main(endpoint: str, conn: Any, small: bool = False) -> None:
    """Serve commands: ("burst", kind, n) | ("rate", kind, msgs_per_s) |
    ("stamp", msgs_per_s) | ("idle",) | ("quit",).  A burst replies when sent; idle
    after a paced command replies with the count sent."""
    ctx = zmq.Context()
    s = ctx.socket(zmq.PUB)
    s.setsockopt(zmq.SNDHWM, 0)  # bursts are queued whole (capacity runs)
    s.setsockopt(zmq.LINGER, 0)
    s.bind(endpoint)
    pools = {k: _pool(k, small) for k in (*KINDS, "raw-f32", "binary-sweeps")}
    conn.send("ready")
    cmd: tuple = ("idle",)
    while True:
        sent = 0
        if cmd[0] == "quit":
            break
        if cmd[0] == "idle":
            cmd = conn.recv()
            continue
        if cmd[0] == "burst":  # send N messages as fast as possible, then wait
            pool = pools[cmd[1]]
            n = len(pool)
            send = s.send_multipart
            for i in range(int(cmd[2])):
                send(pool[i % n])
            sent = int(cmd[2])
            conn.send(sent)
            cmd = ("idle",)
            continue
        if cmd[0] == "stamp":
            sent = _stamped(float(cmd[1]), conn, s.send_multipart)
        elif cmd[0] == "rate":  # a kind at a message rate, paced
            pool = pools[cmd[1]]
            n = len(pool)
            rate = float(cmd[2])
            send = s.send_multipart
            start = time.perf_counter()
            while not conn.poll():
                due = int((time.perf_counter() - start) * rate)
                while sent < due:
                    send(pool[sent % n])
                    sent += 1
                time.sleep(0.0005)
        cmd = conn.recv()
        conn.send(sent)
    s.close(0)
    ctx.term()


class Publisher:
    """The publisher process (spawned, so nothing of this process is shared)."""

    def __init__(self, endpoint: str, small: bool = False) -> None:
        ctx = mp.get_context("spawn")
        self.conn, child = ctx.Pipe()
        self.proc = ctx.Process(target=publisher_main, args=(endpoint, child, small),
                                daemon=True, name="lobewatch-bench-publisher")
        self.proc.start()
        if not self.conn.poll(60) or self.conn.recv() != "ready":
            self.proc.kill()
            raise RuntimeError("the benchmark publisher process did not start")
        self.active = False

    def command(self, *cmd: Any) -> int:
        self.conn.send(cmd)
        if self.active or cmd[0] == "burst":
            if not self.conn.poll(120):
                raise RuntimeError("the benchmark publisher stopped answering")
            sent = int(self.conn.recv())
        else:
            sent = 0
        self.active = cmd[0] in ("rate", "stamp")
        return sent

    def close(self) -> None:
        try:
            if self.active:
                self.command("idle")
            self.conn.send(("quit",))
        except (OSError, RuntimeError):
            pass
        self.proc.join(5)
        if self.proc.is_alive():
            self.proc.kill()
            self.proc.join(5)

    def __enter__(self) -> Publisher:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


def tcp_endpoint() -> str:
    """A free loopback TCP endpoint."""
    with socket.socket() as so:
        so.bind(("127.0.0.1", 0))
        return f"tcp://127.0.0.1:{so.getsockname()[1]}"


# -- consumers -------------------------------------------------------------------------------
#: Messages per capacity burst, by kind (about 0.5-1 s of work for the pipeline here).
BURST = {"json-single": 150_000, "json-batch": 600, "binary": 4_000, "raw-f32": 4_000}
#: The same for ``--quick``.
BURST_QUICK = {"json-single": 40_000, "json-batch": 150, "binary": 1_000, "raw-f32": 1_000}
PER_MSG = {"json-single": 1, "json-batch": BATCH, "binary": BATCH, "raw-f32": BATCH,
           "binary-sweeps": BATCH}
#: Seconds for the subscription to reach the publisher, and for a burst to land.
SUBSCRIBE_S = 0.3
LAND_S = 0.2


def _sub(endpoint: str) -> tuple[zmq.Context, zmq.Socket]:
    ctx = zmq.Context()
    s = ctx.socket(zmq.SUB)
    s.setsockopt(zmq.RCVHWM, 0)
    s.setsockopt(zmq.LINGER, 0)
    s.setsockopt(zmq.SUBSCRIBE, b"")
    s.connect(endpoint)
    return ctx, s


def _decode_plain(kind: str, msg: list[bytes]) -> int:
    if kind == "json-single":
        json.loads(msg[0])
        return 1
    if kind == "json-batch":
        o = json.loads(msg[0])
        a = np.array(o["angle_deg"], dtype=np.float64)
        np.array(o["power_dbm"], dtype=np.float64)
        return a.size
    h = json.loads(msg[0])
    np.frombuffer(msg[1], dtype="<f8").reshape(len(h["fields"]), h["count"])
    return int(h["count"])


def raw_capacity(pub: Publisher, endpoint: str, kind: str, decode: bool,
                 n_total: int) -> dict[str, float]:
    """Drain a queued burst with a plain pyzmq loop (optionally decoding)."""
    ctx, s = _sub(endpoint)
    recv = s.recv
    more = s.getsockopt
    RM, NB = zmq.RCVMORE, zmq.NOBLOCK
    try:
        time.sleep(SUBSCRIBE_S)  # subscription reaches the publisher
        pub.command("burst", kind, n_total)
        time.sleep(LAND_S)  # the burst lands in the receive queue
        n_msg = n_smp = 0
        t0 = time.perf_counter()
        deadline = t0 + 60
        while n_msg < n_total and time.perf_counter() < deadline:
            if not s.poll(200):
                break
            for _ in range(2000):
                try:
                    f = recv(NB)
                except zmq.Again:
                    break
                msg = [f]
                while more(RM):
                    msg.append(recv(NB))
                n_msg += 1
                n_smp += _decode_plain(kind, msg) if decode else PER_MSG[kind]
        dt = time.perf_counter() - t0
    finally:
        s.close(0)
        ctx.term()
    return {"msgs_per_s": n_msg / dt, "samples_per_s": n_smp / dt,
            "received": float(n_msg), "sent": float(n_total)}


def _pipeline_parts(endpoint: str, fmt: str = "auto") -> tuple[Any, Any, Any]:
    from stream.estimator import EstimatorConfig, RollingPattern
    from stream.live import LiveDriver
    from stream.monitor import Monitor
    from stream.zmq_source import ZmqSource
    src = ZmqSource(endpoint, hwm=0, max_message_bytes=16 << 20, fmt=fmt)
    monitor = Monitor(RollingPattern(EstimatorConfig()))
    return src, monitor, LiveDriver(src, monitor, interval_s=0.1)


async def pipeline_capacity(pub: Publisher, endpoint: str, kind: str, n_total: int,
                            rss: RssSampler | None = None) -> dict[str, float]:
    """Drain a queued burst through the real source, driver and monitor."""
    src, monitor, driver = _pipeline_parts(endpoint, "raw-f32" if kind == "raw-f32" else "auto")
    await asyncio.sleep(SUBSCRIBE_S)
    pub.command("burst", kind, n_total)
    await asyncio.sleep(LAND_S)
    stop = asyncio.Event()
    dec = src.decoder
    t0 = time.perf_counter()
    task = asyncio.create_task(driver.run(stop))
    last_change = time.perf_counter()
    seen = 0
    k = 0
    while dec.messages + sum(dec.rejected.values()) < n_total:
        await asyncio.sleep(0.002)
        k += 1
        if rss is not None and not k % 25:
            rss.sample()
        if dec.messages != seen:
            seen = dec.messages
            last_change = time.perf_counter()
        elif time.perf_counter() - last_change > 1.0:
            break
    t1 = time.perf_counter() if seen >= n_total else last_change
    samples = monitor.estimator.samples
    if rss is not None:
        rss.sample()
    stop.set()
    await task
    dt = t1 - t0
    return {"msgs_per_s": dec.messages / dt, "samples_per_s": samples / dt,
            "received": float(dec.messages), "sent": float(n_total)}


async def sustained(pub: Publisher, endpoint: str, kind: str, msgs_per_s: float,
                    seconds: float, rss: RssSampler | None = None) -> dict[str, float]:
    """The pipeline under a paced publisher: rate taken in, CPU of this process (all
    threads, % of one core) and messages lost."""
    src, monitor, driver = _pipeline_parts(endpoint)
    stop = asyncio.Event()
    task = asyncio.create_task(driver.run(stop))
    await asyncio.sleep(SUBSCRIBE_S)
    pub.command("rate", kind, msgs_per_s)
    await asyncio.sleep(0.3)  # warm-up
    est = monitor.estimator
    c0 = time.process_time()
    s0 = est.samples
    dt = await _watch(seconds, rss)
    c1 = time.process_time()
    s1 = est.samples
    sent = pub.command("idle")
    await asyncio.sleep(0.3)  # let the tail arrive
    received = src.decoder.messages
    stop.set()
    await task
    return {"offered_sps": msgs_per_s * PER_MSG[kind], "samples_per_s": (s1 - s0) / dt,
            "cpu_pct": (c1 - c0) / dt * 100.0, "sent": float(sent),
            "received": float(received), "lost": float(max(sent - received, 0)),
            "rejected": float(sum(src.decoder.rejected.values()))}


async def _watch(seconds: float, rss: RssSampler | None) -> float:
    """Let the pipeline run for ``seconds``, sampling the resident size; the wall time."""
    t0 = time.perf_counter()
    end = t0 + seconds
    while time.perf_counter() < end:
        await asyncio.sleep(0.1)
        if rss is not None:
            rss.sample()
    return time.perf_counter() - t0


async def latency(pub: Publisher, endpoint: str, msgs_per_s: float,
                  seconds: float, rss: RssSampler | None = None) -> dict[str, float]:
    """Publish-to-estimate latency of a paced stamped stream, ms percentiles over every
    sample: (time the batch has been folded into the estimator) - (send time in ``t``)."""
    src, monitor, driver = _pipeline_parts(endpoint)
    lat: list[np.ndarray] = []
    recording = False

    def sink(batch: Any) -> None:
        if recording:
            lat.append(time.time() - batch.t)

    monitor.batch_sinks.append(sink)
    stop = asyncio.Event()
    task = asyncio.create_task(driver.run(stop))
    await asyncio.sleep(SUBSCRIBE_S)
    pub.command("stamp", msgs_per_s)
    await asyncio.sleep(0.3)  # warm-up
    recording = True
    s0 = monitor.estimator.samples
    dt = await _watch(seconds, rss)
    recording = False
    s1 = monitor.estimator.samples
    sent = pub.command("idle")
    stop.set()
    await task
    ms = np.concatenate(lat) * 1e3 if lat else np.array([np.nan])
    return {"p50_ms": float(np.percentile(ms, 50)), "p99_ms": float(np.percentile(ms, 99)),
            "max_ms": float(ms.max()), "samples_per_s": (s1 - s0) / dt,
            "sent": float(sent), "lost": float(src.decoder.lost)}


# -- the runs behind lobewatch bench and bench/bench_ingest.py ------------------------------
#: Sustained runs: (label, kind, messages/s).
SUSTAINED = (("binary 1M sps", "binary", 1_000.0),
             ("binary 10M sps", "binary", 10_000.0),
             ("json-single 150k msg/s", "json-single", 150_000.0))
#: The paced run of ``lobewatch bench`` (1,000,000 samples/s).
PACED = SUSTAINED[0]
#: The same rate with every batch of 1,000 one whole sweep (1,000 sweeps/s).
PACED_SWEEPS = ("binary-sweeps 1M sps", "binary-sweeps", 1_000.0)


def run_ingest(runs: int, window: float, *, quick: bool = False,
               modes: tuple[str, ...] = ("raw", "raw+decode", "pipeline"),
               decode_kinds: tuple[str, ...] = KINDS,
               sustained_runs: tuple[tuple[str, str, float], ...] = SUSTAINED,
               latency_s: float = 0.0, latency_sps: float = 100_000.0,
               progress: Progress = quiet) -> dict[str, Any]:
    """Medians over ``runs`` of every capacity mode and kind and the sustained runs
    (``raw+decode`` for ``decode_kinds`` only); ``latency_s > 0`` adds the latency run;
    ``rss_peak_mb`` is the peak resident size of this process during the paced and
    latency runs (the monitor as it runs live), ``rss_burst_peak_mb`` during the capacity
    runs (which park a whole burst in the socket's receive queue on purpose)."""
    burst = BURST_QUICK if quick else BURST
    endpoint = tcp_endpoint()
    progress("ingest: starting the publisher process")
    results: dict[str, list[dict[str, float]]] = {}
    rss = RssSampler()  # paced and latency runs: the monitor as it runs live
    rss_sweeps = RssSampler()  # paced whole-sweep batches (noisy sweeps load scipy.signal)
    rss_burst = RssSampler()  # capacity runs: the whole burst waits in the socket queue
    sweep_runs = tuple(r for r in sustained_runs if r[1] == "binary-sweeps")
    with Publisher(endpoint, small=quick) as pub:
        # Paced and latency runs first: the resident size they show is not inflated by
        # the heap the queued bursts leave behind; the whole-sweep runs after them, as
        # measuring noisy sweeps imports scipy.signal (about 70 MB resident).
        for r in range(runs):
            for label, kind, rate in sustained_runs:
                if kind == "binary-sweeps":
                    continue
                progress(f"ingest: paced {label} for {window:g} s (run {r + 1}/{runs})")
                res = asyncio.run(sustained(pub, endpoint, kind, rate, window, rss))
                results.setdefault(label, []).append(res)
        if latency_s > 0:
            progress(f"latency: {latency_sps:,.0f} samples/s for {latency_s:g} s")
            res = asyncio.run(latency(pub, endpoint, latency_sps / LATENCY_BATCH, latency_s,
                                      rss))
            results["latency"] = [res]
        for r in range(runs):
            for label, kind, rate in sweep_runs:
                progress(f"ingest: paced {label} for {window:g} s (run {r + 1}/{runs})")
                res = asyncio.run(sustained(pub, endpoint, kind, rate, window, rss_sweeps))
                results.setdefault(label, []).append(res)
        for r in range(runs):
            for kind in KINDS:
                for mode in modes:
                    if mode == "raw+decode" and kind not in decode_kinds:
                        continue
                    progress(f"ingest: {kind} {mode} (run {r + 1}/{runs})")
                    if mode == "pipeline":
                        res = asyncio.run(pipeline_capacity(pub, endpoint, kind, burst[kind],
                                                            rss_burst))
                    else:
                        res = raw_capacity(pub, endpoint, kind, mode == "raw+decode",
                                           burst[kind])
                    results.setdefault(f"{kind}/{mode}", []).append(res)
    med: dict[str, Any] = {}
    for key, rs in results.items():
        med[key] = {k: median(r[k] for r in rs) for k in rs[0]}
    med["rss_peak_mb"] = rss.peak_mb
    med["rss_sweeps_peak_mb"] = rss_sweeps.peak_mb
    med["rss_burst_peak_mb"] = rss_burst.peak_mb
    return med


# -- drain strategy comparison ---------------------------------------------------------------
async def _timer(stats: dict[str, Any]) -> None:
    last = time.perf_counter()
    while True:
        await asyncio.sleep(0.01)
        now = time.perf_counter()
        stats["runs"] += 1
        stats["worst"] = max(stats["worst"], now - last)
        last = now


async def drain_strategy(endpoint: str, how: str, seconds: float) -> dict[str, float]:
    """Messages/s of one receive strategy, with a 10 ms timer task alongside."""
    import zmq.asyncio
    ctx = zmq.Context()
    s = ctx.socket(zmq.SUB)
    s.setsockopt(zmq.RCVHWM, HWM)
    s.setsockopt(zmq.LINGER, 0)
    s.setsockopt(zmq.SUBSCRIBE, b"")
    s.connect(endpoint)
    a = zmq.asyncio.Socket.from_socket(s)
    await a.poll(10_000)
    count = 0
    stop = threading.Event()
    tstats: dict[str, Any] = {"runs": 0, "worst": 0.0}

    deadline = 0.0

    async def per_message() -> None:
        nonlocal count
        while time.perf_counter() < deadline:
            await a.recv_multipart()
            count += 1

    async def poll_drain() -> None:
        nonlocal count
        recv, more = s.recv, s.getsockopt
        while time.perf_counter() < deadline:
            await a.poll()
            for _ in range(2000):
                try:
                    msg = [recv(zmq.NOBLOCK)]
                except zmq.Again:
                    break
                while more(zmq.RCVMORE):
                    msg.append(recv(zmq.NOBLOCK))
                count += 1
            await asyncio.sleep(0)

    async def threaded() -> None:
        nonlocal count
        loop = asyncio.get_running_loop()
        q: asyncio.Queue[int] = asyncio.Queue()
        ts = zmq.Socket.shadow(s.underlying)

        def worker() -> None:
            while not stop.is_set():
                if not ts.poll(50):
                    continue
                got = []
                for _ in range(2000):
                    try:
                        m = [ts.recv(zmq.NOBLOCK)]
                    except zmq.Again:
                        break
                    while ts.getsockopt(zmq.RCVMORE):
                        m.append(ts.recv(zmq.NOBLOCK))
                    got.append(m)
                loop.call_soon_threadsafe(q.put_nowait, len(got))

        th = threading.Thread(target=worker, daemon=True)
        th.start()
        try:
            while time.perf_counter() < deadline:
                count += await q.get()
        finally:
            stop.set()
            th.join(2)

    fn = {"await-recv": per_message, "poll-drain": poll_drain, "thread": threaded}[how]
    timer = asyncio.create_task(_timer(tstats))
    t0 = time.perf_counter()
    deadline = t0 + seconds
    await fn()  # each strategy stops itself at the deadline (one never yields)
    dt = time.perf_counter() - t0
    n = count
    timer.cancel()
    try:
        await timer
    except asyncio.CancelledError:
        pass
    stop.set()
    a.close(linger=0)
    ctx.term()
    return {"msgs_per_s": n / dt, "timer_runs_per_s": tstats["runs"] / dt,
            "timer_worst_ms": tstats["worst"] * 1e3}


def run_drain(runs: int, window: float) -> dict[str, Any]:
    endpoint = tcp_endpoint()
    results: dict[str, list[dict[str, float]]] = {}
    with Publisher(endpoint) as pub:
        pub.command("rate", "json-single", 1_000_000.0)  # more than any consumer takes
        for _ in range(runs):
            for how in ("await-recv", "poll-drain", "thread"):
                r = asyncio.run(drain_strategy(endpoint, how, window))
                results.setdefault(how, []).append(r)
        pub.command("idle")
    return {k: {m: median(r[m] for r in rs) for m in rs[0]} for k, rs in results.items()}


# -- tables ------------------------------------------------------------------------------------
def ingest_table(med: dict[str, Any]) -> str:
    lines = ["capacity: a queued burst drained by the consumer alone",
             f"{'stream':<12} {'consumer':<11} {'msgs/s':>12} {'samples/s':>14} "
             f"{'vs raw+decode':>14}"]
    for kind in KINDS:
        ref = med.get(f"{kind}/raw+decode", {}).get("samples_per_s")
        for mode in ("raw", "raw+decode", "pipeline"):
            r = med.get(f"{kind}/{mode}")
            if r is None:
                continue
            ratio = r["samples_per_s"] / ref if ref else float("nan")
            lines.append(f"{kind:<12} {mode:<11} {r['msgs_per_s']:>12,.0f} "
                         f"{r['samples_per_s']:>14,.0f} {ratio:>14.2f}")
    lines += ["", "sustained: publisher process paced, monitor process measured",
              f"{'offered':<24} {'ingested samples/s':>19} {'CPU % of a core':>16} "
              f"{'lost msgs':>10} {'of sent':>9}"]
    for label, _kind, _rate in SUSTAINED:
        r = med.get(label)
        if r is None:
            continue
        lines.append(f"{label:<24} {r['samples_per_s']:>19,.0f} {r['cpu_pct']:>16.1f} "
                     f"{r['lost']:>10,.0f} {r['sent']:>9,.0f}")
    if "latency" in med:
        r = med["latency"]
        lines += ["", f"latency at {r['samples_per_s']:,.0f} samples/s: p50 "
                      f"{r['p50_ms']:.1f} ms, p99 {r['p99_ms']:.1f} ms, max {r['max_ms']:.1f} ms"]
    lines.append(f"peak RSS of the monitor process: {med['rss_peak_mb']:.0f} MB paced, "
                 f"{med['rss_burst_peak_mb']:.0f} MB with a queued burst")
    return "\n".join(lines)


def drain_table(med: dict[str, Any]) -> str:
    lines = [f"{'strategy':<12} {'msgs/s':>10} {'10ms timer runs/s':>18} {'worst gap ms':>13}"]
    for k, r in med.items():
        lines.append(f"{k:<12} {r['msgs_per_s']:>10,.0f} {r['timer_runs_per_s']:>18.1f} "
                     f"{r['timer_worst_ms']:>13.1f}")
    return "\n".join(lines)
