"""Sweep records: each completed sweep measured on its own samples, kept in a bounded log.

The rolling pattern (:mod:`stream.estimator`) decides where sweeps end and hands each
finished sweep's bin sums here.  A sweep is measured with ``stream.pattern.measure``
(peak and half-power width suffice: no uncertainty) and appended to a log of at most
``history`` records; the spread of the recent peaks is what the alarms call jitter.

Sweeps that end less than :data:`MIN_RECORD_S` (sample time) after the last record are
pooled into the next one -- an array that sweeps its sector in a millisecond would
otherwise spend half a core measuring sweeps no reader could use.
"""

from __future__ import annotations

import math
from collections import deque
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from stream.batch import wrap_angle_deg
from stream.pattern import measure

#: Sweeps that end less than this after the last sweep record are pooled into the next
#: record (their bins summed, measured once), seconds.  A sweep lasting longer is
#: recorded on its own; an array that sweeps its sector in a millisecond (1,000
#: sweeps/s) gets a record every 50 ms instead of a measurement per sweep that took half
#: of a core and that no reader could use (the history keeps 256 records).
MIN_RECORD_S: float = 0.05


@dataclass(frozen=True, slots=True)
class SweepRecord:
    """One completed sweep, measured on its own samples (or, for sweeps faster than
    :data:`MIN_RECORD_S`, the sweeps since the last record, pooled).

    ``t`` is the receive time at which the sweep was seen to end.  The sweep covers
    from ``angle_min_deg`` counter-clockwise (increasing angle) to ``angle_max_deg``,
    both wrapped to [-180, 180): when it crosses the +-180 seam, ``angle_max_deg`` is
    the smaller number (150 .. -150 is a 60 deg sector facing 180).
    """

    t: float
    peak_angle_deg: float | None
    hpbw_deg: float | None
    peak_power_db: float | None
    angle_min_deg: float
    angle_max_deg: float
    #: Sweeps pooled into this record (more than 1 only when sweeps end faster than
    #: :data:`MIN_RECORD_S` apart).
    sweeps: int = 1


def circular_std_deg(angle_deg: Sequence[float] | np.ndarray) -> float | None:
    """Sample standard deviation (ddof = 1) of angles, safe across the +-180 wrap.

    Each angle is replaced by its wrapped offset from the circular mean direction
    atan2(mean sin, mean cos) (N. I. Fisher, *Statistical Analysis of Circular Data*,
    CUP 1993, sec. 2.2 -- from memory), and the ordinary sample standard deviation of the
    offsets is returned.  For angles that do not straddle the wrap it equals
    ``numpy.std(angle_deg, ddof=1)`` exactly up to rounding.  ``None`` for fewer than two.
    """
    a = np.asarray(angle_deg, dtype=np.float64).reshape(-1)
    a = a[np.isfinite(a)]
    if a.size < 2:
        return None
    r = np.deg2rad(a)
    mean_dir = math.degrees(math.atan2(float(np.mean(np.sin(r))), float(np.mean(np.cos(r)))))
    dev = wrap_angle_deg(a - mean_dir)
    return float(np.std(dev, ddof=1))


class SweepLog:
    """The bounded log of sweep records, the pool of sweeps waiting to be recorded and
    the count of sweeps completed.

    ``centres_deg`` and ``bin_deg`` describe the estimator's bins, so a sweep's bin sums
    (linear power, sample count, offsets from the bin centre in bins) become angles at
    each bin's mean sample angle and powers in dB.
    """

    def __init__(self, centres_deg: np.ndarray, bin_deg: float, history: int) -> None:
        self._centres_deg = centres_deg
        self._bin_deg = float(bin_deg)
        self._records: deque[SweepRecord] = deque(maxlen=history)
        self._pool: tuple[np.ndarray, np.ndarray, np.ndarray, float, float, int] | None = None
        self._last_record_t = -math.inf  # sample time of the last record
        self._count = 0
        self._spread_cache: tuple[tuple[int, int, int], float | None] | None = None

    @property
    def count(self) -> int:
        """Sweeps completed (not bounded by the history)."""
        return self._count

    @property
    def records(self) -> tuple[SweepRecord, ...]:
        """The most recent records, oldest first."""
        return tuple(self._records)

    def close(self, sw_sum: np.ndarray, cnt: np.ndarray, off: np.ndarray, lo_deg: float,
              hi_deg: float, now: float, t_end: float) -> tuple[bool, float | None]:
        """Count a completed sweep (bin sums, continuous angle range ``lo_deg`` ..
        ``hi_deg``) and measure and record it -- with any pooled before it -- or pool it
        when the last record is younger than :data:`MIN_RECORD_S`.

        Age is taken on the sample times (``t_end``: the first sample after the sweep),
        so where a stream was cut into batches does not matter; sweeps with no time
        between them (samples without times) or with time running backwards are
        recorded one by one.  Returns ``(recorded, peak_angle_deg)``."""
        self._count += 1
        n = 1
        if self._pool is not None:
            p_sum, p_cnt, p_off, p_lo, p_hi, p_n = self._pool
            sw_sum, cnt, off = sw_sum + p_sum, cnt + p_cnt, off + p_off
            lo_deg, hi_deg, n = min(lo_deg, p_lo), max(hi_deg, p_hi), n + p_n
        if 0.0 < t_end - self._last_record_t < MIN_RECORD_S:
            self._pool = (sw_sum, cnt, off, lo_deg, hi_deg, n)  # the next record takes them
            return False, None
        self._pool = None
        self._last_record_t = t_end
        filled = np.flatnonzero(cnt)
        # Each sweep is measured on its own samples, their mean angle per bin included.
        angle = self._centres_deg[filled] + (off[filled] / cnt[filled] * self._bin_deg)
        power_db = 10.0 * np.log10(sw_sum[filled] / cnt[filled])
        metrics = measure(angle, power_db, uncertainty=False)  # peak and width suffice
        self._records.append(SweepRecord(
            t=now, peak_angle_deg=metrics.peak_angle_deg, hpbw_deg=metrics.hpbw_deg,
            peak_power_db=metrics.peak_power_db, angle_min_deg=_wrap1(lo_deg),
            angle_max_deg=_wrap1(hi_deg), sweeps=n))
        return True, metrics.peak_angle_deg

    def peak_angle_spread_deg(self, n: int = 8) -> float | None:
        """Sample standard deviation of the peak angle over the last ``n`` records that
        had a peak (circular-safe, see :func:`circular_std_deg`); ``None`` when fewer
        than 2."""
        if n < 2:
            return None
        key = (self._count, len(self._records), n)
        if self._spread_cache is not None and self._spread_cache[0] == key:
            return self._spread_cache[1]  # no sweep ended since: the same answer
        peaks: list[float] = []
        for rec in reversed(self._records):
            if rec.peak_angle_deg is not None:
                peaks.append(rec.peak_angle_deg)
                if len(peaks) == n:
                    break
        spread = circular_std_deg(peaks)
        self._spread_cache = (key, spread)
        return spread


def _wrap1(angle_deg: float) -> float:
    """One angle into [-180, 180), unchanged when already there."""
    return angle_deg if -180.0 <= angle_deg < 180.0 else float(wrap_angle_deg(angle_deg))
