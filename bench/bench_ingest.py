"""Ingest benchmark: samples/s through receive, decode and estimator, next to raw pyzmq.

The publisher runs in a separate process (spawned) and is steered over a pipe; the
monitor side runs here.  Two kinds of figure, all in the same run:

* capacity -- the publisher queues a burst (JSON singles, JSON batches of 1,000, binary
  batches of 1,000; angles swept like a real steering sweep) and goes idle; then the
  consumer drains it alone, timed.  Consumers: ``raw`` (plain pyzmq poll + non-blocking
  receives), ``raw+decode`` (the same plus the obvious decode: ``json.loads`` per
  message, ``np.frombuffer`` for binary) and ``pipeline``
  (:class:`stream.zmq_source.ZmqSource` + :class:`stream.live.LiveDriver` + the real
  :class:`stream.monitor.Monitor`: validation, estimator, 10 Hz tick);
* sustained -- the publisher paces a rate while the pipeline runs: ingested samples/s,
  the monitor process's CPU (psutil, all threads, % of one core) and messages lost
  (sent - received).

Medians of ``--runs`` runs.  ``--drain`` compares receive strategies instead (the
measurement behind the design in ``stream/zmq_source.py``): ``await recv()`` per
message, awaited poll + non-blocking drain, and a thread with a synchronous socket, each
with a 10 ms timer task alongside.

Usage: ``python bench/bench_ingest.py [--runs N] [--window S] [--quick] [--drain] [--json]``
"""

from __future__ import annotations

import argparse
import asyncio
import json
import multiprocessing as mp
import os
import statistics
import sys
import threading
import time
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

import numpy as np  # noqa: E402
import psutil  # noqa: E402
import zmq  # noqa: E402

KINDS = ("json-single", "json-batch", "binary")
BATCH = 1000
HWM = 100_000


# -- publisher process ---------------------------------------------------------------------
def _triangle(n: int) -> np.ndarray:
    """Angles of one up-and-down sweep over +/-60 deg in ``n`` samples (swept data, as
    a real steering sweep produces; random angles would be a sweep reversal per sample)."""
    u = np.arange(n) / n * 2.0
    return np.round(-60.0 + 120.0 * np.where(u < 1.0, u, 2.0 - u), 3)


def _pool(kind: str) -> list[list[bytes]]:
    from stream.wire import encode_binary_batch, encode_json_batch, encode_json_single
    rng = np.random.default_rng(1)
    if kind == "json-single":
        n = 20_000
        ang = _triangle(n)
        pw = np.round(rng.uniform(-80, -40, n), 3)
        return [encode_json_single(float(a), float(p), 1767225600.0 + i * 1e-4)
                for i, (a, p) in enumerate(zip(ang.tolist(), pw.tolist(), strict=True))]
    n_msg = 64
    ang = _triangle(n_msg * BATCH).reshape(n_msg, BATCH)
    out = []
    for i in range(n_msg):
        a = ang[i]
        p = np.round(rng.uniform(-80, -40, BATCH), 3)
        t0 = 1767225600.0 + i * 0.1
        if kind == "json-batch":
            out.append(encode_json_batch(a, p, t0=t0, dt=1e-4, decimals=3))
        else:
            out.append(encode_binary_batch(a, p, t0 + np.arange(BATCH) * 1e-4))
    return out


def publisher_main(endpoint: str, conn: Any) -> None:
    """Serve commands: ("burst", kind, n) | ("rate", kind, msgs_per_s) | ("idle",) |
    ("quit",).  A burst replies when sent; idle after rate replies with the count."""
    ctx = zmq.Context()
    s = ctx.socket(zmq.PUB)
    s.setsockopt(zmq.SNDHWM, 0)  # bursts are queued whole (capacity runs)
    s.setsockopt(zmq.LINGER, 0)
    s.bind(endpoint)
    pools = {k: _pool(k) for k in KINDS}
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
        if cmd[0] == "rate":  # a kind at a message rate, paced
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
    def __init__(self, endpoint: str) -> None:
        ctx = mp.get_context("spawn")
        self.conn, child = ctx.Pipe()
        self.proc = ctx.Process(target=publisher_main, args=(endpoint, child), daemon=True)
        self.proc.start()
        if not self.conn.poll(30) or self.conn.recv() != "ready":
            raise RuntimeError("publisher did not start")
        self.active = False

    def command(self, *cmd: Any) -> int:
        self.conn.send(cmd)
        if self.active or cmd[0] == "burst":
            sent = int(self.conn.recv())
        else:
            sent = 0
        self.active = cmd[0] in ("rate", "pace")
        return sent

    def close(self) -> None:
        if self.active:
            self.command("idle")
        self.conn.send(("quit",))
        self.proc.join(5)
        if self.proc.is_alive():
            self.proc.kill()


# -- consumers -------------------------------------------------------------------------------
#: Messages per capacity burst, by kind (about 1-3 s of work for the pipeline here).
BURST = {"json-single": 300_000, "json-batch": 1_500, "binary": 4_000}
PER_MSG = {"json-single": 1, "json-batch": BATCH, "binary": BATCH}


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


def raw_capacity(pub: Publisher, endpoint: str, kind: str, decode: bool) -> dict[str, float]:
    """Drain a queued burst with a plain pyzmq loop (optionally decoding)."""
    ctx, s = _sub(endpoint)
    recv = s.recv
    more = s.getsockopt
    RM, NB = zmq.RCVMORE, zmq.NOBLOCK
    n_total = BURST[kind]
    try:
        time.sleep(0.5)  # subscription reaches the publisher
        pub.command("burst", kind, n_total)
        time.sleep(0.3)  # the burst lands in the receive queue
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


def _pipeline_parts(endpoint: str) -> tuple[Any, Any, Any]:
    from stream.estimator import EstimatorConfig, RollingPattern
    from stream.live import LiveDriver
    from stream.monitor import Monitor
    from stream.zmq_source import ZmqSource
    src = ZmqSource(endpoint, hwm=0, max_message_bytes=16 << 20)
    monitor = Monitor(RollingPattern(EstimatorConfig()))
    return src, monitor, LiveDriver(src, monitor, interval_s=0.1)


async def _pipeline_capacity(pub: Publisher, endpoint: str, kind: str) -> dict[str, float]:
    src, monitor, driver = _pipeline_parts(endpoint)
    n_total = BURST[kind]
    await asyncio.sleep(0.5)
    pub.command("burst", kind, n_total)
    await asyncio.sleep(0.3)
    stop = asyncio.Event()
    dec = src.decoder
    t0 = time.perf_counter()
    task = asyncio.create_task(driver.run(stop))
    last_change = time.perf_counter()
    seen = 0
    while dec.messages + sum(dec.rejected.values()) < n_total:
        await asyncio.sleep(0.002)
        if dec.messages != seen:
            seen = dec.messages
            last_change = time.perf_counter()
        elif time.perf_counter() - last_change > 1.0:
            break
    t1 = time.perf_counter() if seen >= n_total else last_change
    samples = monitor.estimator.samples
    stop.set()
    await task
    dt = t1 - t0
    return {"msgs_per_s": dec.messages / dt, "samples_per_s": samples / dt,
            "received": float(dec.messages), "sent": float(n_total)}


async def _sustained(pub: Publisher, endpoint: str, kind: str, msgs_per_s: float,
                     seconds: float) -> dict[str, float]:
    src, monitor, driver = _pipeline_parts(endpoint)
    stop = asyncio.Event()
    task = asyncio.create_task(driver.run(stop))
    await asyncio.sleep(0.5)
    pub.command("rate", kind, msgs_per_s)
    await asyncio.sleep(0.5)  # warm-up
    proc = psutil.Process()
    est = monitor.estimator
    c0 = proc.cpu_times()
    s0 = est.samples
    t0 = time.perf_counter()
    await asyncio.sleep(seconds)
    dt = time.perf_counter() - t0
    c1 = proc.cpu_times()
    s1 = est.samples
    sent = pub.command("idle")
    await asyncio.sleep(0.5)  # let the tail arrive
    received = src.decoder.messages
    stop.set()
    await task
    cpu = (c1.user - c0.user + c1.system - c0.system) / dt * 100.0
    return {"offered_sps": msgs_per_s * PER_MSG[kind], "samples_per_s": (s1 - s0) / dt,
            "cpu_pct": cpu, "sent": float(sent), "received": float(received),
            "lost": float(max(sent - received, 0)),
            "rejected": float(sum(src.decoder.rejected.values()))}


# -- drain strategy comparison ---------------------------------------------------------------
async def _timer(stats: dict[str, Any]) -> None:
    last = time.perf_counter()
    while True:
        await asyncio.sleep(0.01)
        now = time.perf_counter()
        stats["runs"] += 1
        stats["worst"] = max(stats["worst"], now - last)
        last = now


async def _drain_strategy(endpoint: str, how: str, seconds: float) -> dict[str, float]:
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


# -- driver ----------------------------------------------------------------------------------
#: Sustained runs: (label, kind, messages/s).
SUSTAINED = (("binary 1M sps", "binary", 1_000.0),
             ("binary 10M sps", "binary", 10_000.0),
             ("json-single 150k msg/s", "json-single", 150_000.0))


def run_ingest(runs: int, window: float) -> dict[str, Any]:
    endpoint = _tcp_endpoint()
    pub = Publisher(endpoint)
    results: dict[str, list[dict[str, float]]] = {}
    try:
        for _ in range(runs):
            for kind in KINDS:
                for mode in ("raw", "raw+decode", "pipeline"):
                    if mode == "pipeline":
                        r = asyncio.run(_pipeline_capacity(pub, endpoint, kind))
                    else:
                        r = raw_capacity(pub, endpoint, kind, decode=(mode == "raw+decode"))
                    results.setdefault(f"{kind}/{mode}", []).append(r)
            for label, kind, rate in SUSTAINED:
                r = asyncio.run(_sustained(pub, endpoint, kind, rate, window))
                results.setdefault(label, []).append(r)
    finally:
        pub.close()
    med: dict[str, Any] = {}
    for key, rs in results.items():
        med[key] = {k: statistics.median(r[k] for r in rs) for k in rs[0]}
    return med


def run_drain(runs: int, window: float) -> dict[str, Any]:
    endpoint = _tcp_endpoint()
    pub = Publisher(endpoint)
    results: dict[str, list[dict[str, float]]] = {}
    try:
        pub.command("rate", "json-single", 1_000_000.0)  # more than any consumer takes
        for _ in range(runs):
            for how in ("await-recv", "poll-drain", "thread"):
                r = asyncio.run(_drain_strategy(endpoint, how, window))
                results.setdefault(how, []).append(r)
        pub.command("idle")
    finally:
        pub.close()
    return {k: {m: statistics.median(r[m] for r in rs) for m in rs[0]}
            for k, rs in results.items()}


def _tcp_endpoint() -> str:
    import socket
    with socket.socket() as so:
        so.bind(("127.0.0.1", 0))
        return f"tcp://127.0.0.1:{so.getsockname()[1]}"


def ingest_table(med: dict[str, Any]) -> str:
    lines = ["capacity: a queued burst drained by the consumer alone",
             f"{'stream':<12} {'consumer':<11} {'msgs/s':>12} {'samples/s':>14} "
             f"{'vs raw+decode':>14}"]
    for kind in KINDS:
        ref = med[f"{kind}/raw+decode"]["samples_per_s"]
        for mode in ("raw", "raw+decode", "pipeline"):
            r = med[f"{kind}/{mode}"]
            ratio = r["samples_per_s"] / ref if ref else float("nan")
            lines.append(f"{kind:<12} {mode:<11} {r['msgs_per_s']:>12,.0f} "
                         f"{r['samples_per_s']:>14,.0f} {ratio:>14.2f}")
    lines += ["", "sustained: publisher process paced, monitor process measured",
              f"{'offered':<24} {'ingested samples/s':>19} {'CPU % of a core':>16} "
              f"{'lost msgs':>10} {'of sent':>9}"]
    for label, _kind, _rate in SUSTAINED:
        r = med[label]
        lines.append(f"{label:<24} {r['samples_per_s']:>19,.0f} {r['cpu_pct']:>16.1f} "
                     f"{r['lost']:>10,.0f} {r['sent']:>9,.0f}")
    return "\n".join(lines)


def drain_table(med: dict[str, Any]) -> str:
    lines = [f"{'strategy':<12} {'msgs/s':>10} {'10ms timer runs/s':>18} {'worst gap ms':>13}"]
    for k, r in med.items():
        lines.append(f"{k:<12} {r['msgs_per_s']:>10,.0f} {r['timer_runs_per_s']:>18.1f} "
                     f"{r['timer_worst_ms']:>13.1f}")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--runs", type=int, default=3, help="runs; medians reported (default 3)")
    ap.add_argument("--window", type=float, default=3.0,
                    help="seconds per sustained figure (default 3)")
    ap.add_argument("--quick", action="store_true", help="one run, 1.5 s windows")
    ap.add_argument("--drain", action="store_true",
                    help="compare receive strategies instead of the ingest benchmark")
    ap.add_argument("--json", action="store_true", help="print one JSON object")
    args = ap.parse_args(argv)
    if args.quick:
        args.runs, args.window = 1, 1.5
    info = {"cpus": os.cpu_count(), "pyzmq": zmq.__version__, "libzmq": zmq.zmq_version(),
            "python": sys.version.split()[0], "runs": args.runs,
            "date": time.strftime("%Y-%m-%d", time.gmtime())}
    if args.drain:
        med = run_drain(args.runs, args.window)
        table = drain_table(med)
    else:
        med = run_ingest(args.runs, args.window)
        table = ingest_table(med)
    if args.json:
        print(json.dumps({"info": info, "results": med}, indent=1))
    else:
        print(f"# {info}")
        print(table)
    return 0


if __name__ == "__main__":
    sys.exit(main())
