"""End to end with real sockets on 127.0.0.1: simulated IQ + angle telemetry with a clock
lag -> IqSource -> Monitor, checked against a brute-force array pattern."""

from __future__ import annotations

import asyncio
import contextlib
import threading
import time

import numpy as np
import pytest
import scipy.optimize

from stream.angle_join import JoinConfig
from stream.estimator import EstimatorConfig, RollingPattern
from stream.iq_source import IqSource, decode_angle_message, lag_text
from stream.monitor import Monitor
from stream.synth_iq import IqSynthConfig, run_iq_publisher

pytestmark = pytest.mark.timeout(90)

N_ELEMENTS = 8
PEAK_DEG = 7.3
LAG_S = 0.040
#: The test's clock runs this many times faster than the wall clock (publisher and
#: receiver share it), so 26 simulated seconds take 13.  Receive delays are stretched by
#: the same factor, so it stays small (a busy shared machine delays frames by ms).
SPEED = 2.0


def brute_force_lin(angle_deg: np.ndarray) -> np.ndarray:
    """|AF|^2 of N isotropic elements at half a wavelength, steered to PEAK_DEG, by the
    explicit complex sum (C. A. Balanis, Antenna Theory, 3rd ed., ch. 6): 1 at the peak."""
    k = np.arange(N_ELEMENTS)
    psi = np.pi * (np.sin(np.deg2rad(angle_deg)) - np.sin(np.deg2rad(PEAK_DEG)))
    af = np.exp(1j * np.multiply.outer(psi, k)).sum(axis=-1) / N_ELEMENTS
    return np.abs(af) ** 2


def true_hpbw_deg() -> float:
    """Half-power points of the brute-force pattern by root finding (scipy.optimize)."""
    def f(a: float) -> float:
        return float(brute_force_lin(np.array([a]))[0]) - 0.5
    lo = scipy.optimize.brentq(f, PEAK_DEG - 12.0, PEAK_DEG)
    hi = scipy.optimize.brentq(f, PEAK_DEG, PEAK_DEG + 12.0)
    return hi - lo


def test_angle_messages_in_wire_v1_shapes() -> None:
    t, a = decode_angle_message(b'{"t": 10.5, "angle_deg": 12.0}', 99.0)
    assert t.tolist() == [10.5] and a.tolist() == [12.0]
    t, a = decode_angle_message(b'{"t0": 1.0, "dt": 0.1, "angle_deg": [1, 2, 3]}', 99.0)
    np.testing.assert_allclose(t, [1.0, 1.1, 1.2])
    t, _ = decode_angle_message(b'{"angle_deg": 5, "power_dbm": -40}', 99.0)
    assert t.tolist() == [99.0]  # no t: the receive time
    for bad in (b"nope", b'{"t": 1}', b'{"angle_deg": 400}', b'{"t": [1, 2], "angle_deg": 1}'):
        with pytest.raises(ValueError):
            decode_angle_message(bad, 0.0)


def test_swept_tone_with_lagging_angles_gives_the_true_beam() -> None:
    base = time.time()
    m0 = time.monotonic()

    def clock() -> float:
        return base + SPEED * (time.monotonic() - m0)

    cfg = IqSynthConfig(sample_rate_hz=20_000.0, frame_samples=200, tone_offset_hz=2_000.0,
                        peak_dbfs=-12.0, noise_dbfs=-60.0, span_deg=60.0, rate_dps=30.0,
                        angle_rate_hz=50.0, angle_lag_s=LAG_S, seed=3)
    stop = threading.Event()
    ready = threading.Event()
    addrs: list[str] = []

    def on_ready(iq: str, ang: str) -> None:
        addrs.extend((iq, ang))
        ready.set()

    pub = threading.Thread(target=run_iq_publisher, daemon=True,
                           args=("tcp://127.0.0.1:*", "tcp://127.0.0.1:*", cfg, brute_force_lin,
                                 stop), kwargs={"clock": clock, "on_ready": on_ready})
    pub.start()
    assert ready.wait(10)
    lags = []
    src = IqSource(addrs[0], addrs[1], sample_rate_hz=cfg.sample_rate_hz, block_s=0.01,
                   join=JoinConfig(lag_s=None), clock=clock,
                   on_lag=lambda t, est: lags.append(est))
    mon = Monitor(RollingPattern(EstimatorConfig(bin_deg=0.5, averaging="sweeps",
                                                 sweeps_k=2)))
    t_end = clock() + 26.0  # 6.5 one-way sweeps of 4 s (simulated time)

    async def consume() -> None:
        async for batches in src.batches():
            for b in batches:
                mon.ingest(b)

    async def run() -> None:
        task = asyncio.create_task(consume())
        try:
            while clock() < t_end and not task.done():
                await asyncio.sleep(0.05)
            if task.done():
                task.result()  # a failure in the source surfaces here
        finally:
            task.cancel()
            with contextlib.suppress(asyncio.CancelledError):
                await task
            await src.aclose()

    try:
        asyncio.run(run())
    finally:
        stop.set()
        pub.join(10)
    tick = mon.tick(clock())
    est = src.join.estimate
    assert est is not None, "no lag estimate from the sweeps"
    # the lag seen is the telemetry's 40 ms plus whatever the IQ time base still carries
    # of the receive latency (a fraction of a millisecond of real time on loopback)
    assert abs(est.lag_s - LAG_S) < 0.010, lag_text(est)
    assert est.pairs >= 2 and est.sigma_s is not None
    assert est.rate_dps == pytest.approx(30.0, rel=0.02)
    m = tick.metrics
    assert m.peak_angle_deg == pytest.approx(PEAK_DEG, abs=0.3), (m, lag_text(est))
    assert m.hpbw_deg == pytest.approx(true_hpbw_deg(), abs=0.5), (m, lag_text(est))
    assert not tick.calibrated  # no --cal-db: the readout says dB, not dBm
    assert src.stats(clock()).messages > 0 and lags
    info = src.info()
    assert info["lag_mode"] == "auto" and info["lag_estimate"]["pairs"] == est.pairs
