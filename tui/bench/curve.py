"""``lobewatch bench`` group ``curve``: the cost of CURVE on the live ingest path.

A publisher process streams binary batches of 1,000 samples as fast as it can to the
monitor's real source (``ZmqSource`` bound, driver, monitor), once in plain text and once
with CURVE (the monitor a CURVE server with an allow list, the publisher its client), in
alternating runs of the same size.  ``ingest_curve_sps`` is the CURVE rate and
``ingest_curve_ratio`` its ratio to the plain rate measured in the same run, so machine
load cancels out.  A stream is timed from its first to its last message: CURVE costs
encryption in the publisher's I/O thread and decryption in ours, which a queued burst
(decrypted before it is queued) would hide.  The publisher waits for the subscription
(an XPUB socket sees it) before sending, so nothing is lost to a slow join.
"""

from __future__ import annotations

import asyncio
import multiprocessing as mp
import shutil
import tempfile
import time
from pathlib import Path
from typing import Any

import zmq
import zmq.auth

from tui.bench.figures import Progress, figure, median
from tui.bench.ingest import BATCH as INGEST_BATCH

#: Samples per message (the same batches as the ingest group).
BATCH = INGEST_BATCH
#: Messages per stream, full run and ``--quick``.
STREAM_MSGS = 3000
STREAM_MSGS_QUICK = 600
#: Target ratio of CURVE to plain ingest (issue 14).
TARGET_RATIO = 0.4


def _publisher_main(conn: Any) -> None:
    """Serve ("stream", endpoint, keys | None, n) and ("quit",)."""
    from tui.bench.ingest import _pool
    pool = _pool("binary")  # the ingest group's frames: one triangle sweep over them
    ctx = zmq.Context()
    conn.send("ready")
    while True:
        cmd = conn.recv()
        if cmd[0] == "quit":
            break
        _, endpoint, keys, n = cmd
        s = ctx.socket(zmq.XPUB)
        s.sndhwm = 0
        s.linger = 0
        if keys is not None:
            s.curve_publickey, s.curve_secretkey, s.curve_serverkey = keys
        s.connect(endpoint)
        if not s.poll(20_000):  # the subscription, once the handshake is done
            conn.send(-1)
            conn.recv()  # ("done",)
            s.close(0)
            continue
        s.recv()
        send = s.send_multipart
        n_pool = len(pool)
        for i in range(int(n)):
            send(pool[i % n_pool])
        conn.send(int(n))
        conn.recv()  # ("done",): close only after the monitor has everything
        s.close(0)
    ctx.term()


async def _stream(conn: Any, endpoint: str, curve: Any, pub_keys: Any,
                  n_msgs: int) -> float:
    """Samples per second through the monitor for one stream of ``n_msgs`` messages."""
    from stream.estimator import EstimatorConfig, RollingPattern
    from stream.live import LiveDriver
    from stream.monitor import Monitor
    from stream.zmq_source import ZmqSource
    src = ZmqSource(endpoint, bind=True, hwm=0, max_message_bytes=16 << 20, curve=curve)
    monitor = Monitor(RollingPattern(EstimatorConfig()))
    driver = LiveDriver(src, monitor, interval_s=0.1)
    stop = asyncio.Event()
    task = asyncio.create_task(driver.run(stop))
    dec = src.decoder
    try:
        conn.send(("stream", endpoint, pub_keys, n_msgs))
        t0 = m0 = None
        last = time.perf_counter()
        seen = 0
        while dec.messages < n_msgs:
            await asyncio.sleep(0.002)
            now = time.perf_counter()
            if dec.messages != seen:
                seen, last = dec.messages, now
                if t0 is None:
                    t0, m0 = now, seen
            elif now - last > (25.0 if t0 is None else 3.0):
                break
        t1 = last
        if t0 is None or t1 <= t0 or dec.messages <= (m0 or 0):
            raise RuntimeError(f"the stream did not arrive ({dec.messages} of {n_msgs})")
        rate = (dec.messages - m0) * BATCH / (t1 - t0)
    finally:
        if conn.poll(30):
            conn.recv()
        conn.send(("done",))
        stop.set()
        await task
        await src.aclose()
    return rate


def run_curve(runs: int, n_msgs: int, progress: Progress) -> dict[str, float]:
    """Median plain and CURVE ingest rates (samples/s) of ``runs`` alternating pairs."""
    from stream.curve import CurveConfig
    from tui.bench.ingest import tcp_endpoint
    ctx = mp.get_context("spawn")
    conn, child = ctx.Pipe()
    proc = ctx.Process(target=_publisher_main, args=(child,), daemon=True,
                       name="lobewatch-bench-curve-publisher")
    proc.start()
    tmp = Path(tempfile.mkdtemp(prefix="lobewatch-bench-curve-"))
    try:
        if not conn.poll(60) or conn.recv() != "ready":
            raise RuntimeError("the benchmark publisher process did not start")
        zmq.auth.create_certificates(tmp, "monitor")
        _, pub_secret = zmq.auth.create_certificates(tmp, "publisher")
        (tmp / "allow").mkdir()
        shutil.copy(tmp / "publisher.key", tmp / "allow" / "publisher.key")
        (tmp / "monitor.key_secret").chmod(0o600)
        curve = CurveConfig.load(tmp / "monitor.key_secret", allow=tmp / "allow")
        pk, sk = zmq.auth.load_certificate(pub_secret)
        pub_keys = (pk, sk, curve.public_key)
        plain: list[float] = []
        secure: list[float] = []
        for i in range(runs):
            progress(f"curve: run {i + 1}/{runs}, {n_msgs:,} batches plain then CURVE")
            plain.append(asyncio.run(_stream(conn, tcp_endpoint(), None, None, n_msgs)))
            secure.append(asyncio.run(_stream(conn, tcp_endpoint(), curve, pub_keys,
                                              n_msgs)))
        ratios = [s / p for s, p in zip(secure, plain, strict=True)]
        return {"plain_sps": median(plain), "curve_sps": median(secure),
                "ratio": median(ratios)}
    finally:
        try:
            conn.send(("quit",))
        except OSError:
            pass
        proc.join(10)
        if proc.is_alive():
            proc.kill()
            proc.join(5)
        shutil.rmtree(tmp, ignore_errors=True)


def run_group(plan: Any, quick: bool, progress: Progress) -> dict[str, dict[str, Any]]:
    """The ``curve`` group's figures for ``lobewatch bench``."""
    runs = 1 if quick else 3
    r = run_curve(runs, STREAM_MSGS_QUICK if quick else STREAM_MSGS, progress)
    note = f"binary batches of {BATCH:,} streamed, full pipeline"
    return {
        "ingest_curve_sps": figure(r["curve_sps"], "samples/s",
                                   note=f"{note}, CURVE (plain {r['plain_sps']:,.0f})"),
        "ingest_curve_ratio": figure(r["ratio"], "ratio", TARGET_RATIO,
                                     note="CURVE / plain ingest, same run"),
    }
