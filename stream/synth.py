"""Simulated swept array: generates (t, angle, power) samples and publishes them.

Physics (C. A. Balanis, *Antenna Theory*, 3rd ed., ch. 6, quoted from memory):

* ``sweep`` mode: the array's beam is electronically steered to ``theta_s`` while a
  far-end source sits at ``theta_src`` (0 deg = aligned; a drifting mast moves it).
  The received power is the scan pattern

      P(theta_s) = E(theta_src) * |AF(theta_src; theta_s)|^2,
      AF = sum_n w_n exp(j 2 pi n d (sin theta_src - sin theta_s)) / sum_n w_n(healthy)

  which, as a function of ``theta_s``, has the same shape as the pattern of the array
  steered to ``theta_src`` (so for an isotropic element, ``element_exp = 0``, it equals
  ``ArrayModel(steer_deg=theta_src).power_db``).  The element factor is constant over a
  sweep here.  A dead column has weight 0 but the normalisation keeps the healthy sum, so
  the peak drops (N=4, one end column: 20 log10(3/4) = -2.5 dB) and the beam widens.
* ``mount`` mode: the whole array turns; the published angle is the mount azimuth in
  [0, 360) and P = (cos^q(theta) + b) |AF(theta)|^2 with theta = azimuth - theta_src and
  ``b = 10**(back_lobe_db/10)`` leaking energy all round, which makes a back lobe
  ``back_lobe_db`` below the peak (|AF| is the same at 0 and 180 deg for a line array).

Measured power (dBm when calibrated) = 10 log10(P * 10**((offset + fading(t))/10)
+ 10**(noise_floor/10)) + N(0, noise_db); slow fading is a sum of two sinusoids with
seeded phases.  Everything is deterministic for a given seed and sequence of calls, and
time is injected: :meth:`SynthSource.generate` runs faster than real time with no sockets.
The publisher (:func:`run_publisher`) paces the same generator onto a PUB socket.
"""

from __future__ import annotations

import math
import secrets
import threading
import time
from collections.abc import Callable, Iterator
from dataclasses import asdict, dataclass, replace
from typing import TYPE_CHECKING

import numpy as np

from stream.array_model import element_power, taper_weights
from stream.batch import SampleBatch
from stream.scenarios import Scenario, get_scenario
from stream.wire_encode import (
    encode_binary_batch,
    encode_json_batch,
    encode_json_single,
    encode_raw_f32,
)

if TYPE_CHECKING:
    from stream.curve import CurveConfig

#: Message formats the publisher can emit.
SYNTH_FORMATS: tuple[str, ...] = ("json-single", "json-batch", "binary", "raw-f32")
DEFAULT_ENDPOINT: str = "tcp://127.0.0.1:5557"


@dataclass(frozen=True, slots=True)
class SynthConfig:
    """Simulated array and measurement.  Angles in degrees, levels in dB."""

    n_elements: int = 4
    spacing_wl: float = 0.5
    element_exp: float = 1.0
    taper: str = "none"
    mode: str = "sweep"              # "sweep" (steered) or "mount" (turning)
    span_deg: float = 60.0           # sweep covers [-span, +span]
    step_deg: float = 0.5            # steering step (0: continuous)
    sweeps_per_s: float = 2.0        # one-way passes per second
    mount_dps: float = 36.0          # mount turn rate, deg/s
    rate_sps: float = 5000.0         # samples per second
    batch: int = 250                 # samples per message (batch formats)
    fmt: str = "binary"
    noise_db: float = 0.3            # measurement jitter (std, dB)
    noise_floor_dbm: float = -95.0   # receiver noise floor
    fading_db: float = 0.5           # slow fading depth (peak, dB)
    back_lobe_db: float = -25.0      # leak level making the back lobe (mount mode)
    power_offset_dbm: float = -40.0  # received power at the beam peak
    calibrated: bool = True
    scenario: str = "steady"
    seed: int = 1
    topic: bytes = b""

    def validate(self) -> SynthConfig:
        if self.n_elements < 1:
            raise ValueError("n_elements must be at least 1")
        if not 0 < self.spacing_wl <= 4:
            raise ValueError("spacing_wl must be in (0, 4] wavelengths")
        if self.mode not in ("sweep", "mount"):
            raise ValueError("mode must be 'sweep' or 'mount'")
        if not 0 < self.span_deg <= 90:
            raise ValueError("span_deg must be in (0, 90]")
        if self.rate_sps <= 0 or self.batch < 1:
            raise ValueError("rate_sps and batch must be positive")
        if self.fmt not in SYNTH_FORMATS:
            raise ValueError(f"fmt must be one of {', '.join(SYNTH_FORMATS)}")
        if self.sweeps_per_s <= 0 or self.mount_dps == 0:
            raise ValueError("sweeps_per_s must be positive and mount_dps non-zero")
        get_scenario(self.scenario)
        taper_weights(self.taper, self.n_elements)
        return self

    def to_dict(self) -> dict:
        d = asdict(self)
        d["topic"] = self.topic.decode("utf-8", "replace")
        return d


class SynthSource:
    """Deterministic generator of the simulated measurement.

    ``start_t`` anchors the scenario clock and the sample grid (sample ``k`` is at
    ``start_t + k / rate_sps``); when ``None`` the first :meth:`generate` call sets it.
    """

    def __init__(self, config: SynthConfig, start_t: float | None = None) -> None:
        self.config = config.validate()
        self.scenario: Scenario = get_scenario(config.scenario)
        self.mode = self.scenario.mode if self.scenario.mode != "sweep" else config.mode
        self.start_t = start_t
        self._rng = np.random.default_rng(config.seed)
        phase_rng = np.random.default_rng([config.seed, 7])
        self._fade_phase = phase_rng.uniform(0.0, 2.0 * math.pi, size=2)
        n = config.n_elements
        self._w = taper_weights(config.taper, n).astype(np.float64)
        self._norm = float(np.sum(self._w))
        self._w_failed = self._w.copy()
        fe = min(max(self.scenario.fail_element, 0), n - 1)
        self._w_failed[fe] = 0.0
        self._idx = np.arange(n) - (n - 1) / 2.0
        self._back = 10.0 ** (config.back_lobe_db / 10.0)
        self._floor = 10.0 ** (config.noise_floor_dbm / 10.0)

    # -- truth -------------------------------------------------------------------------
    def elapsed(self, t: np.ndarray | float) -> np.ndarray:
        return np.asarray(t, dtype=np.float64) - (self.start_t or 0.0)

    def true_peak_deg(self, t: np.ndarray | float) -> np.ndarray:
        """Direction of the true main lobe at time ``t`` (the scenario's drift)."""
        return self.scenario.offset_deg(self.elapsed(t))

    def angle_at(self, t: np.ndarray) -> np.ndarray:
        """The published angle (steering angle or mount azimuth) at each time."""
        cfg = self.config
        e = self.elapsed(t)
        if self.mode == "mount":
            az = (cfg.mount_dps * e) % 360.0
            if cfg.step_deg > 0:
                az = (np.round(az / cfg.step_deg) * cfg.step_deg) % 360.0
            return az
        u = (e * cfg.sweeps_per_s) % 2.0
        frac = np.where(u < 1.0, u, 2.0 - u)
        ang = -cfg.span_deg + 2.0 * cfg.span_deg * frac
        if cfg.step_deg > 0:
            ang = -cfg.span_deg + np.round((ang + cfg.span_deg) / cfg.step_deg) * cfg.step_deg
        return np.clip(ang, -cfg.span_deg, cfg.span_deg)

    def _af2(self, sin_diff: np.ndarray, failed: np.ndarray) -> np.ndarray:
        """|AF|^2 for sin(theta_src) - sin(theta_s) per sample (healthy-normalised)."""
        psi = 2.0 * np.pi * self.config.spacing_wl * sin_diff
        ph = np.exp(1j * np.multiply.outer(psi, self._idx))
        af = ph @ self._w
        if failed.any():
            af = np.where(failed, ph @ self._w_failed, af)
        return np.abs(af / self._norm) ** 2

    def pattern_lin(self, t: np.ndarray, angle_deg: np.ndarray) -> np.ndarray:
        """Noise-free linear power (1 = healthy peak) at each (t, angle)."""
        cfg = self.config
        e = self.elapsed(t)
        src = self.scenario.offset_deg(e)
        failed = self.scenario.failed(e)
        if self.mode == "mount":
            rel = (np.asarray(angle_deg) - src + 180.0) % 360.0 - 180.0
            p = (element_power(rel, cfg.element_exp) + self._back) / (1.0 + self._back) \
                * self._af2(np.sin(np.deg2rad(rel)), failed)
        else:
            s_src = np.sin(np.deg2rad(src))
            s_st = np.sin(np.deg2rad(angle_deg))
            p = element_power(src, cfg.element_exp) * self._af2(s_src - s_st, failed)
        refl = self.scenario.reflector_gain_db(e, angle_deg)
        return p * 10.0 ** (refl / 10.0)

    def fading_db(self, t: np.ndarray) -> np.ndarray:
        e = self.elapsed(t)
        a, b = self._fade_phase
        return self.config.fading_db * (0.6 * np.sin(2 * np.pi * e / 17.0 + a)
                                        + 0.4 * np.sin(2 * np.pi * e / 43.0 + b))

    # -- samples -----------------------------------------------------------------------
    def samples_k(self, k0: int, k1: int) -> SampleBatch:
        """Samples ``k0 <= k < k1`` of the grid, with noise (consumes the RNG)."""
        cfg = self.config
        if self.start_t is None:
            self.start_t = 0.0
        k = np.arange(int(k0), int(max(k1, k0)), dtype=np.float64)
        t = self.start_t + k / cfg.rate_sps
        ang = self.angle_at(t)
        p = self.pattern_lin(t, ang)
        lvl = cfg.power_offset_dbm + self.fading_db(t)
        lin = p * 10.0 ** (lvl / 10.0) + self._floor
        power = 10.0 * np.log10(lin) + self._rng.normal(0.0, cfg.noise_db, size=k.size)
        power = np.clip(power, -199.0, 59.0)
        rx = float(t[-1]) if t.size else float(self.start_t)
        return SampleBatch(t, ang, power, rx_t=rx, calibrated=cfg.calibrated)

    def _k_range(self, t0: float, duration_s: float) -> tuple[int, int]:
        if self.start_t is None:
            self.start_t = float(t0)
        r = self.config.rate_sps
        k0 = math.ceil(round((t0 - self.start_t) * r, 6))
        k1 = math.ceil(round((t0 + duration_s - self.start_t) * r, 6))
        return k0, k1

    def generate(self, t0: float, duration_s: float) -> SampleBatch:
        """All samples with ``t0 <= t < t0 + duration_s`` as one batch (``rx_t`` = the
        last sample's time)."""
        return self.samples_k(*self._k_range(t0, duration_s))

    def batches(self, t0: float, duration_s: float,
                batch: int | None = None) -> Iterator[SampleBatch]:
        """The same samples cut into batches of ``batch`` (default ``config.batch``), each
        stamped with its last sample's time as receive time: feed them to
        ``Monitor.ingest`` to run the pipeline faster than real time."""
        k0, k1 = self._k_range(t0, duration_s)
        step = int(batch or self.config.batch)
        for a in range(k0, k1, step):
            yield self.samples_k(a, min(a + step, k1))


def encode_batch(b: SampleBatch, fmt: str, seq: int, epoch: str, topic: bytes = b"",
                 rate_sps: float = 0.0) -> list[list[bytes]]:
    """Wire messages for a batch in the given synth format (one per sample for
    ``json-single``)."""
    top = topic or None
    cal = b.calibrated
    if fmt == "json-single":
        return [encode_json_single(float(a), float(p), float(t), seq + i, epoch,
                                   calibrated=cal, topic=top)
                for i, (t, a, p) in enumerate(zip(b.t.tolist(), b.angle_deg.tolist(),
                                                  b.power_db.tolist(), strict=True))]
    if fmt == "json-batch":
        dt = 1.0 / rate_sps if rate_sps > 0 else 0.0
        return [encode_json_batch(b.angle_deg, b.power_db, None, seq, epoch,
                                  t0=float(b.t[0]), dt=dt, calibrated=cal, topic=top,
                                  decimals=4)]
    if fmt == "binary":
        return [encode_binary_batch(b.angle_deg, b.power_db, b.t, seq, epoch, calibrated=cal,
                                    topic=top)]
    if fmt == "raw-f32":
        return [encode_raw_f32(b.angle_deg, b.power_db, topic=top)]
    raise ValueError(f"unknown format {fmt!r}")


def run_publisher(endpoint: str, config: SynthConfig, stop: threading.Event | None = None,
                  *, duration_s: float | None = None, clock: Callable[[], float] = time.time,
                  on_ready: Callable[[str], None] | None = None,
                  sndhwm: int = 100_000, curve: CurveConfig | None = None) -> int:
    """Bind a PUB socket at ``endpoint`` and publish the simulation in real time until
    ``stop`` is set or ``duration_s`` has passed.  Returns the messages sent.

    Each start draws a random ``epoch`` and numbers messages from ``seq`` 0, so a
    subscriber tells a restart from a loss.  ``on_ready`` gets the bound address (useful
    with ``tcp://127.0.0.1:*``).  ``curve`` (:mod:`stream.curve`) makes the socket a
    CURVE server that admits only the subscribers in its allow list.
    """
    import zmq  # local: the generator above must not need a socket library

    from stream.curve import CurveGuard

    config = config.validate()
    stop = stop or threading.Event()
    ctx = zmq.Context()
    sock = ctx.socket(zmq.PUB)
    sock.setsockopt(zmq.LINGER, 0)
    sock.setsockopt(zmq.SNDHWM, int(sndhwm))
    guard = CurveGuard(curve, ctx) if curve is not None else None
    if guard is not None:
        guard.apply(sock)
    try:
        sock.bind(endpoint)
    except zmq.ZMQError as exc:
        sock.close(0)
        if guard is not None:
            guard.close()
        ctx.term()
        from stream.errors import UserError
        raise UserError(f"cannot bind {endpoint}: {exc.strerror}; pick another port "
                        "with --endpoint") from None
    bound = sock.getsockopt_string(zmq.LAST_ENDPOINT)
    if on_ready is not None:
        on_ready(bound)
    epoch = secrets.token_hex(4)
    start = clock()
    src = SynthSource(config, start_t=start)
    rate = config.rate_sps
    step = config.batch if config.fmt != "json-single" else max(1, int(rate / 200))
    next_k = 0
    seq = 0
    sent = 0
    try:
        while not stop.is_set():
            now = clock()
            if duration_s is not None and now - start >= duration_s:
                break
            due = int((now - start) * rate)
            while due - next_k >= step and not stop.is_set():
                b = src.samples_k(next_k, next_k + step)
                next_k += step
                for frames in encode_batch(b, config.fmt, seq, epoch, config.topic, rate):
                    sock.send_multipart(frames, copy=len(frames[-1]) < 65536)
                    seq += 1
                    sent += 1
            wait = (next_k + step) / rate - (clock() - start)
            if wait > 0:
                stop.wait(min(wait, 0.05))
    finally:
        sock.close(0)
        if guard is not None:
            guard.close()
        ctx.term()
    return sent


def with_overrides(config: SynthConfig, **kw: object) -> SynthConfig:
    """A copy of ``config`` with the given fields changed (``None`` values ignored)."""
    return replace(config, **{k: v for k, v in kw.items() if v is not None})
