"""Simulated radio front end: IQ samples of a tone whose level follows an array pattern
as a positioner sweeps, plus the positioner's angle telemetry on a second socket.

The positioner sweeps the angle back and forth over +/-``span_deg`` at ``rate_dps``
(a triangle wave starting at -span).  The receiver sees a tone at ``tone_offset_hz``
whose power is the pattern at the current angle:

    x[k] = 10**(peak_dbfs/20) sqrt(G(theta(t_k))) exp(j (2 pi f k / fs + phi)) + n[k]

with G the linear power pattern (1 at its peak) and n complex white Gaussian noise of
total power ``noise_dbfs``.  The telemetry reports theta(t) every 1/``angle_rate_hz``
seconds, stamped and sent ``angle_lag_s`` late (a positioner clock that runs behind),
which :mod:`stream.angle_join` must estimate and undo.  All of it is invented for
trying the monitor; time is injected, so tests run it faster than real time.
"""

from __future__ import annotations

import json
import math
import threading
import time
from collections.abc import Callable
from dataclasses import asdict, dataclass

import numpy as np

from stream.iq import CI16_FULL_SCALE, IQ_FORMATS

#: Default addresses of the simulated radio and positioner.
DEFAULT_IQ_ENDPOINT: str = "tcp://127.0.0.1:5560"
DEFAULT_ANGLE_ENDPOINT: str = "tcp://127.0.0.1:5561"
#: Time step of the amplitude envelope (interpolated per sample), seconds.
ENVELOPE_STEP_S: float = 0.0005


@dataclass(frozen=True, slots=True)
class IqSynthConfig:
    """The simulated radio and positioner (rates in Hz, levels in dBFS, angles in deg)."""

    sample_rate_hz: float = 250_000.0
    frame_samples: int = 4096
    fmt: str = "cf32"
    tone_offset_hz: float = 20_000.0
    peak_dbfs: float = -12.0
    noise_dbfs: float = -55.0
    span_deg: float = 60.0
    rate_dps: float = 30.0
    angle_rate_hz: float = 20.0
    angle_lag_s: float = 0.040
    seed: int = 1

    def validate(self) -> IqSynthConfig:
        if not self.sample_rate_hz > 0 or self.frame_samples < 1:
            raise ValueError("sample rate and frame size must be positive")
        if self.fmt not in IQ_FORMATS:
            raise ValueError(f"IQ format must be one of {', '.join(IQ_FORMATS)}")
        if abs(self.tone_offset_hz) >= self.sample_rate_hz / 2:
            raise ValueError("the tone must lie inside +/- half the sample rate")
        if not 0 < self.span_deg <= 180 or not self.rate_dps > 0:
            raise ValueError("span must be in (0, 180] degrees and the sweep rate positive")
        if not self.angle_rate_hz > 0 or not math.isfinite(self.angle_lag_s):
            raise ValueError("angle rate must be positive and the lag finite")
        if self.peak_dbfs > 0:
            raise ValueError("peak level above 0 dBFS would clip")
        return self

    def to_dict(self) -> dict:
        return asdict(self)


class IqSynth:
    """Deterministic generator: sample ``k`` is at ``start_t + k / fs``."""

    def __init__(self, config: IqSynthConfig, pattern_lin: Callable[[np.ndarray], np.ndarray],
                 start_t: float = 0.0) -> None:
        self.config = config.validate()
        self.pattern_lin = pattern_lin
        self.start_t = float(start_t)
        self._rng = np.random.default_rng(config.seed)
        self._amp = 10.0 ** (config.peak_dbfs / 20.0)
        self._noise_sd = math.sqrt(10.0 ** (config.noise_dbfs / 10.0) / 2.0)

    def angle_at(self, t: np.ndarray | float) -> np.ndarray:
        """True positioner angle at Unix time ``t`` (triangle wave from -span)."""
        c = self.config
        period = 4.0 * c.span_deg / c.rate_dps
        ph = np.mod(np.asarray(t, dtype=np.float64) - self.start_t, period) / period
        return -c.span_deg + 2.0 * c.span_deg * (1.0 - np.abs(2.0 * ph - 1.0))

    def iq(self, k0: int, k1: int) -> np.ndarray:
        """Samples ``k0 .. k1-1`` as complex64."""
        c = self.config
        fs = c.sample_rate_hz
        k = np.arange(k0, k1, dtype=np.float64)
        t = self.start_t + k / fs
        # the pattern on a coarse time grid, interpolated per sample (the sweep moves
        # rate_dps * ENVELOPE_STEP_S = 0.015 deg per step at 30 deg/s)
        tg = np.arange(t[0] - ENVELOPE_STEP_S, t[-1] + 2 * ENVELOPE_STEP_S, ENVELOPE_STEP_S)
        env = np.sqrt(np.maximum(self.pattern_lin(self.angle_at(tg)), 0.0))
        a = self._amp * np.interp(t, tg, env)
        ph = 2.0 * np.pi * np.mod(c.tone_offset_hz * k / fs, 1.0) + 0.7
        x = a * np.exp(1j * ph)
        n = k1 - k0
        x += self._noise_sd * (self._rng.standard_normal(n) + 1j * self._rng.standard_normal(n))
        return x.astype(np.complex64)

    def frame_bytes(self, x: np.ndarray) -> bytes:
        """Samples as the radio would send them (cf32, or ci16 at full scale 32768)."""
        if self.config.fmt == "cf32":
            return x.astype("<c8").tobytes()
        iq = np.empty(2 * x.size, dtype=np.float64)
        iq[0::2] = x.real
        iq[1::2] = x.imag
        return np.clip(np.round(iq * CI16_FULL_SCALE), -32768, 32767).astype("<i2").tobytes()

    def telemetry_times(self, j0: int, j1: int) -> np.ndarray:
        """True times of telemetry readings ``j0 .. j1-1``."""
        return self.start_t + np.arange(j0, j1) / self.config.angle_rate_hz


def angle_message(t: float, angle_deg: float) -> bytes:
    """One angle reading in wire v1's JSON single shape without power keys."""
    return json.dumps({"t": round(t, 6), "angle_deg": round(angle_deg, 5)}).encode()


def run_iq_publisher(iq_endpoint: str, angle_endpoint: str, config: IqSynthConfig,
                     pattern_lin: Callable[[np.ndarray], np.ndarray],
                     stop: threading.Event | None = None, *, duration_s: float | None = None,
                     clock: Callable[[], float] = time.time,
                     on_ready: Callable[[str, str], None] | None = None) -> int:
    """Bind two PUB sockets and publish IQ frames and angle readings paced by ``clock``
    until ``stop`` is set or ``duration_s`` (on that clock) has passed.  Returns the IQ
    frames sent."""
    import zmq  # local: the generator above must not need a socket library

    config = config.validate()
    stop = stop or threading.Event()
    ctx = zmq.Context()
    socks = []
    try:
        for ep in (iq_endpoint, angle_endpoint):
            s = ctx.socket(zmq.PUB)
            s.setsockopt(zmq.LINGER, 0)
            s.setsockopt(zmq.SNDHWM, 10_000)
            socks.append(s)
            try:
                s.bind(ep)
            except zmq.ZMQError as exc:
                from stream.errors import UserError
                raise UserError(f"cannot bind {ep}: {exc.strerror}; pick another port") \
                    from None
        iq_sock, ang_sock = socks
        if on_ready is not None:
            on_ready(iq_sock.getsockopt_string(zmq.LAST_ENDPOINT),
                     ang_sock.getsockopt_string(zmq.LAST_ENDPOINT))
        start = clock()
        gen = IqSynth(config, pattern_lin, start_t=start)
        fs = config.sample_rate_hz
        step = config.frame_samples
        lag = config.angle_lag_s
        next_k = 0
        next_j = 0
        sent = 0
        while not stop.is_set():
            now = clock()
            if duration_s is not None and now - start >= duration_s:
                break
            # angle readings: taken at true time tj, stamped and sent at tj + lag
            j_due = int(math.floor((now - start - lag) * config.angle_rate_hz)) + 1
            if j_due > next_j:
                for tj in gen.telemetry_times(next_j, j_due):
                    ang_sock.send(angle_message(tj + lag, float(gen.angle_at(tj))))
                next_j = j_due
            while (next_k + step) / fs <= now - start and not stop.is_set():
                iq_sock.send(gen.frame_bytes(gen.iq(next_k, next_k + step)), copy=False)
                next_k += step
                sent += 1
            wait = min((next_k + step) / fs, (next_j + 1) / config.angle_rate_hz + lag) \
                - (clock() - start)
            if wait > 0:
                stop.wait(min(wait, 0.005))
        return sent
    finally:
        for s in socks:
            s.close(0)
        ctx.term()
