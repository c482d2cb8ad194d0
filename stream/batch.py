"""The one type that flows through the pipeline: a batch of (time, angle, power) samples.

Sources (ZeroMQ, session files, CSV/JSON Lines readers, the simulator) produce
``SampleBatch``; everything downstream consumes it.  Arrays are float64 and of equal
length; ``power_db`` is dBm when ``calibrated`` is true, otherwise uncalibrated dB.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


@dataclass(frozen=True, slots=True)
class SampleBatch:
    """Equal-length sample arrays plus where they came from.

    ``t`` is in Unix seconds as stamped by the publisher (or the receive time when the
    publisher sent none).  ``rx_t`` is the receiver's clock when the batch was taken in
    (live) or the recorded receive time (replay); the pipeline runs on ``rx_t`` only, so
    a replay computes exactly what the live run computed.
    """

    t: np.ndarray
    angle_deg: np.ndarray
    power_db: np.ndarray
    rx_t: float = 0.0
    seq: int | None = None
    epoch: str | None = None
    stream: str = ""
    calibrated: bool = True
    extra: dict = field(default_factory=dict)

    def __len__(self) -> int:
        return int(self.angle_deg.shape[0])

    @classmethod
    def from_arrays(
        cls,
        angle_deg: np.ndarray | list[float],
        power_db: np.ndarray | list[float],
        t: np.ndarray | list[float] | float | None = None,
        *,
        rx_t: float = 0.0,
        seq: int | None = None,
        epoch: str | None = None,
        stream: str = "",
        calibrated: bool = True,
    ) -> SampleBatch:
        """Build a batch from array-likes; a scalar or missing ``t`` is broadcast."""
        a = np.ascontiguousarray(angle_deg, dtype=np.float64).reshape(-1)
        p = np.ascontiguousarray(power_db, dtype=np.float64).reshape(-1)
        if a.shape != p.shape:
            raise ValueError(f"angle_deg has {a.size} values but power_db has {p.size}")
        if t is None:
            tt = np.full(a.shape, float(rx_t))
        elif np.ndim(t) == 0:
            tt = np.full(a.shape, float(t))  # type: ignore[arg-type]
        else:
            tt = np.ascontiguousarray(t, dtype=np.float64).reshape(-1)
            if tt.shape != a.shape:
                raise ValueError(f"t has {tt.size} values but angle_deg has {a.size}")
        return cls(tt, a, p, rx_t=float(rx_t), seq=seq, epoch=epoch, stream=stream,
                   calibrated=calibrated)

    def with_rx_t(self, rx_t: float) -> SampleBatch:
        """The same samples stamped with a receive time."""
        return SampleBatch(self.t, self.angle_deg, self.power_db, rx_t=float(rx_t),
                           seq=self.seq, epoch=self.epoch, stream=self.stream,
                           calibrated=self.calibrated, extra=self.extra)


def wrap_angle_deg(angle_deg: np.ndarray | float) -> np.ndarray:
    """Map any angle to [-180, 180) degrees."""
    return (np.asarray(angle_deg, dtype=np.float64) + 180.0) % 360.0 - 180.0


def mod360(a: np.ndarray) -> np.ndarray:
    """``a % 360.0`` (deg, numpy's floored remainder), the same floats, without a
    per-element ``fmod`` when every value is within one turn (the usual case; ``%`` took
    a tenth of ``measure()``): there the remainder is ``a``, ``a + 360`` below 0 or
    ``a - 360`` from 360 up to 720 (a zero keeps its sign).  May return ``a`` itself;
    callers must not write into it.  tests/test_batch.py holds it equal to ``%``."""
    if a.size == 0:
        return a % 360.0
    lo = a.min()
    hi = a.max()
    if lo >= 0.0 and hi < 360.0:
        return a
    if lo > -360.0 and hi < 360.0:
        return np.where(a < 0.0, a + 360.0, a)
    if lo >= 0.0 and hi < 720.0:  # offsets shifted by +180 (wrap180) land here
        # fmod is exact and so is a - 360 on [360, 720] (Sterbenz): the same floats
        return np.where(a >= 360.0, a - 360.0, a)
    if lo > -360.0 and hi < 720.0:
        return np.where(a < 0.0, a + 360.0, np.where(a >= 360.0, a - 360.0, a))
    return a % 360.0


def wrap180(a: np.ndarray) -> np.ndarray:
    """``(a + 180) % 360 - 180`` (deg, into [-180, 180)), the same floats, by
    :func:`mod360`."""
    return mod360(a + 180.0) - 180.0
