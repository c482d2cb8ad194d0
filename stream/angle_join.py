"""Pair power blocks (IQ clock) with the angle reported by a positioner (its own clock).

The radio's power blocks and the positioner's angle telemetry come from two clocks.
Each block gets the angle interpolated at its middle, shifted by the clock lag:

    angle(block) = interp(tel_t, tel_angle_deg; t_mid + lag_s)

``lag_s`` is the telemetry clock minus the IQ clock for the same instant (positive when
the angle reports are stamped late).  A block whose bracketing telemetry samples are more
than ``gap_s`` apart (or which lies outside the telemetry) is dropped and counted, never
guessed.  With ``dwell`` the telemetry announces discrete beam positions instead: a block
belongs to an announced position only if it starts ``settle_s`` or more after the
announcement and ends before the next one.

Lag from the two sweep directions
---------------------------------
With a lag L the angle assigned to the moment of peak power is off by -w L, where w is
the signed sweep rate (deg/s): a forward sweep (w > 0) puts the peak early, a reverse
sweep late.  For a forward/reverse pair with peaks at theta_f and theta_r,

    L = (theta_r - theta_f) / (2 |w|)                                         (1)

The peak difference is taken from the cross-correlation of the two directions' patterns
(linear power resampled on a common angle grid), which uses the whole main lobe
rather than one noisy peak sample; the correlation's maximum is then refined by least
squares over the forward pattern's main lobe (a finite window biases the correlation
peak towards zero shift).  Each consecutive pair of opposite sweeps gives one
estimate; the reported lag is the median of the last pairs and its uncertainty the
standard error of that median, 1.2533 x 1.4826 MAD / sqrt(n) (n >= 2; normal-data
constants, so one disturbed pair neither moves the lag nor inflates its uncertainty).

References
----------
1. J. S. Bendat, A. G. Piersol, *Random Data: Analysis and Measurement Procedures*,
   4th ed., Wiley 2010, ch. 5 (time delay from the cross-correlation peak; quoted from
   memory).
2. ``scipy.signal.correlate`` and ``scipy.signal.correlation_lags`` (SciPy documentation).
3. Forward/reverse sweep differencing to remove a timing offset is common practice on
   rotator and radar pedestal measurements.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

#: Angle grid step used to compare the two directions' patterns, degrees.
SHIFT_GRID_DEG: float = 0.02
#: Pairs of opposite sweeps kept for the lag estimate.
LAG_PAIRS: int = 8


@dataclass(frozen=True, slots=True)
class JoinConfig:
    """How blocks are paired with angles (times in seconds).

    ``lag_s`` None means automatic (estimated from forward and reverse sweeps; blocks are
    held until the first estimate or ``auto_wait_s``); ``hold_s`` is how long a block
    waits for telemetry that would cover it before it is counted as a gap.
    """

    gap_s: float = 0.5
    lag_s: float | None = 0.0
    dwell: bool = False
    settle_s: float = 0.2
    hold_s: float = 2.0
    auto_wait_s: float = 60.0
    min_sweep_deg: float = 10.0

    def validate(self) -> JoinConfig:
        if not self.gap_s > 0:
            raise ValueError(f"angle gap must be positive, got {self.gap_s} s")
        if self.settle_s < 0:
            raise ValueError(f"settle time must not be negative, got {self.settle_s} s")
        if self.dwell and self.lag_s is None:
            raise ValueError("an automatic lag needs continuous sweeps; with dwell give the "
                             "lag in seconds")
        if self.lag_s is not None and not math.isfinite(self.lag_s):
            raise ValueError("lag must be a finite number of seconds")
        return self


@dataclass(frozen=True, slots=True)
class LagEstimate:
    """Clock lag from forward/reverse sweep pairs: median, standard error (None from one
    pair), number of pairs and the median sweep rate used."""

    lag_s: float
    sigma_s: float | None
    pairs: int
    rate_dps: float

    def to_dict(self) -> dict[str, float | int | None]:
        return {"lag_s": self.lag_s, "lag_sigma_s": self.sigma_s, "pairs": self.pairs,
                "rate_dps": self.rate_dps}


@dataclass(frozen=True, slots=True)
class Joined:
    """Blocks with an angle: IQ-clock mid-times, angles, power (and floor) in dB."""

    t: np.ndarray
    angle_deg: np.ndarray
    power_db: np.ndarray
    floor_db: np.ndarray

    def __len__(self) -> int:
        return int(self.t.shape[0])


_EMPTY = np.zeros(0)


# -- pure functions --------------------------------------------------------------------------
def _wrap_like(angle_deg: np.ndarray, negative: bool) -> np.ndarray:
    """Back to the telemetry's own range: [-180, 180) if it used negative angles, else
    [0, 360)."""
    if negative:
        return (angle_deg + 180.0) % 360.0 - 180.0
    return angle_deg % 360.0


def interpolate_angle(query_t: np.ndarray, tel_t: np.ndarray, tel_angle_deg: np.ndarray,
                      gap_s: float) -> tuple[np.ndarray, np.ndarray]:
    """Angle at each ``query_t`` by linear interpolation, and whether it is known.

    Known means two telemetry samples bracket the query no more than ``gap_s`` apart
    (a query exactly on a sample is known).  Angles are unwrapped before interpolating,
    so a turn through 360 -> 0 interpolates the short way, then wrapped back to the
    telemetry's range.
    """
    q = np.asarray(query_t, dtype=np.float64)
    n = tel_t.shape[0]
    if n == 0:
        return np.full(q.shape, np.nan), np.zeros(q.shape, dtype=bool)
    un = np.rad2deg(np.unwrap(np.deg2rad(tel_angle_deg)))
    i1 = np.searchsorted(tel_t, q, side="left")
    exact = (i1 < n) & (tel_t[np.minimum(i1, n - 1)] == q)
    i1c = np.clip(i1, 1, n - 1) if n > 1 else np.zeros_like(i1)
    i0c = i1c - 1 if n > 1 else i1c
    t0 = tel_t[i0c]
    t1 = tel_t[i1c]
    inside = (i1 > 0) & (i1 < n) & (t1 - t0 <= gap_s)
    known = inside | exact
    with np.errstate(invalid="ignore", divide="ignore"):
        w = np.where(t1 > t0, (q - t0) / (t1 - t0), 0.0)
    a = un[i0c] + w * (un[i1c] - un[i0c])
    a = np.where(exact, un[np.minimum(i1, n - 1)], a)
    a = _wrap_like(a, bool(np.any(tel_angle_deg < 0)))
    return np.where(known, a, np.nan), known


def dwell_angle(block_t0: np.ndarray, block_t1: np.ndarray, ann_t: np.ndarray,
                ann_angle_deg: np.ndarray, settle_s: float) -> tuple[np.ndarray, np.ndarray]:
    """Angle of the announced position each block lies in, and whether it qualifies.

    A block qualifies when it starts at least ``settle_s`` after an announcement and ends
    no later than the next one (a block spanning a move is never attributed).
    """
    n = ann_t.shape[0]
    eps = 1e-9  # times within a nanosecond are equal (sums of float steps round)
    i = np.searchsorted(ann_t, np.asarray(block_t0) - settle_s + eps, side="right") - 1
    ok = i >= 0
    ic = np.clip(i, 0, max(n - 1, 0))
    nxt = np.where(ic + 1 < n, ann_t[np.minimum(ic + 1, n - 1)], np.inf)
    ok &= block_t1 <= nxt + eps
    if n == 0:
        return np.full(np.shape(block_t0), np.nan), np.zeros(np.shape(block_t0), dtype=bool)
    return np.where(ok, ann_angle_deg[ic], np.nan), ok


def sweep_runs(tel_t: np.ndarray, tel_angle_deg: np.ndarray,
               min_span_deg: float) -> list[tuple[float, float, int]]:
    """Monotone runs of the telemetry: (start t, end t, direction +1/-1), each spanning at
    least ``min_span_deg`` (pauses take the direction of the motion before them)."""
    if tel_t.shape[0] < 3:
        return []
    un = np.rad2deg(np.unwrap(np.deg2rad(tel_angle_deg)))
    s = np.sign(np.diff(un))
    if not np.any(s):
        return []
    # pauses (0) inherit the last direction (forward fill)
    idx = np.where(s != 0, np.arange(s.size), 0)
    np.maximum.accumulate(idx, out=idx)
    s = s[idx]
    first = int(np.flatnonzero(s)[0])
    s[:first] = s[first]
    edges = np.flatnonzero(np.diff(s)) + 1
    starts = np.concatenate(([0], edges))
    ends = np.concatenate((edges, [s.size]))
    runs = []
    for a, b in zip(starts, ends, strict=True):
        if abs(un[b] - un[a]) >= min_span_deg:
            runs.append((float(tel_t[a]), float(tel_t[b]), int(s[a])))
    return runs


def pattern_shift_deg(a_deg: np.ndarray, p_lin: np.ndarray, b_deg: np.ndarray,
                      q_lin: np.ndarray, step_deg: float = SHIFT_GRID_DEG) -> float | None:
    """How far pattern q (angles b) lies to the right of pattern p (angles a), degrees.

    Both are resampled in linear power on a common grid over their overlap, normalised
    to their maxima, and cross-correlated (ref. 2); the correlation maximum is refined
    by least squares over p's main lobe (``scipy.optimize.minimize_scalar``).
    None when the overlap is too small to hold a main lobe.
    """
    lo = max(float(np.min(a_deg)), float(np.min(b_deg)))
    hi = min(float(np.max(a_deg)), float(np.max(b_deg)))
    if hi - lo < 20 * step_deg:
        return None
    grid = np.arange(lo, hi, step_deg)
    oa = np.argsort(a_deg)
    ob = np.argsort(b_deg)
    p = np.interp(grid, a_deg[oa], p_lin[oa])
    q = np.interp(grid, b_deg[ob], q_lin[ob])
    if not (np.max(p) > 0 and np.max(q) > 0):
        return None
    edge = max(2, grid.size // 20)
    if not (edge <= np.argmax(p) < grid.size - edge and edge <= np.argmax(q) < grid.size - edge):
        return None  # a main lobe cut by the end of a sweep would bias the shift
    p = p / np.max(p)
    q = q / np.max(q)
    import scipy.optimize  # here: scipy is slow to import, and a lag estimate is rare
    import scipy.signal
    c = scipy.signal.correlate(q - q.mean(), p - p.mean(), mode="full", method="fft")
    lags = scipy.signal.correlation_lags(q.size, p.size, mode="full")
    coarse_deg = float(lags[int(np.argmax(c))]) * step_deg
    # the finite windows bias a correlation peak towards zero lag (its triangular
    # envelope), so refine by least squares over p's main lobe (above -10 dB, contiguous)
    k = int(np.argmax(p))
    below = p < 0.1
    left = np.flatnonzero(below[:k])
    right = np.flatnonzero(below[k:])
    i0 = int(left[-1]) + 1 if left.size else 0
    i1 = k + int(right[0]) if right.size else p.size
    x = grid[i0:i1]
    y = p[i0:i1]

    def cost(s_deg: float) -> float:
        return float(np.sum((np.interp(x + s_deg, grid, q) - y) ** 2))

    width = max(4 * step_deg, 0.25 * (x[-1] - x[0]) if x.size > 1 else 1.0)
    res = scipy.optimize.minimize_scalar(cost, bounds=(coarse_deg - width, coarse_deg + width),
                                         method="bounded",
                                         options={"xatol": step_deg / 100.0})
    return float(res.x)


def estimate_lag(block_t: np.ndarray, power_db: np.ndarray, tel_t: np.ndarray,
                 tel_angle_deg: np.ndarray, gap_s: float, min_sweep_deg: float = 10.0,
                 max_pairs: int = LAG_PAIRS) -> LagEstimate | None:
    """Clock lag (s) from consecutive forward/reverse sweeps, equation (1).

    Blocks are given their lag-0 angle; each telemetry run in one direction collects the
    blocks inside it; each pair of consecutive opposite runs gives
    ``L = shift / (2 |w|)`` with ``shift`` the reverse pattern's offset from the forward
    one (:func:`pattern_shift_deg`) and ``|w|`` the median sweep rate over the pair.
    None until one pair is complete.
    """
    runs = sweep_runs(tel_t, tel_angle_deg, min_sweep_deg)
    if len(runs) < 2 or block_t.size == 0:
        return None
    angle0, known = interpolate_angle(block_t, tel_t, tel_angle_deg, gap_s)
    lin = 10.0 ** (np.asarray(power_db) / 10.0)
    un = np.rad2deg(np.unwrap(np.deg2rad(tel_angle_deg)))
    rate = np.abs(np.diff(un)) / np.maximum(np.diff(tel_t), 1e-12)
    rate_t = 0.5 * (tel_t[1:] + tel_t[:-1])
    ests: list[float] = []
    rates: list[float] = []
    complete = runs[:-1][-(max_pairs + 1):]  # the last run may still be growing
    for (ta0, ta1, da), (tb0, tb1, db) in zip(complete[:-1], complete[1:], strict=True):
        if da == db:
            continue
        sa = known & (block_t >= ta0) & (block_t <= ta1)
        sb = known & (block_t >= tb0) & (block_t <= tb1)
        if sa.sum() < 8 or sb.sum() < 8 or block_t[-1] < tb1:
            continue
        shift = pattern_shift_deg(angle0[sa], lin[sa], angle0[sb], lin[sb])
        if shift is None:
            continue
        sel = (rate_t >= ta0) & (rate_t <= tb1) & (rate > 0)
        if not np.any(sel):
            continue
        w = float(np.median(rate[sel]))
        # forward first (da > 0): the reverse peak lies right by 2 w L; reverse first: left
        ests.append(da * shift / (2.0 * w))
        rates.append(w)
    if not ests:
        return None
    last = np.array(ests[-max_pairs:])
    sigma = None
    if last.size >= 2:  # standard error of a median, from the MAD (robust to one bad pair)
        mad = float(np.median(np.abs(last - np.median(last))))
        sigma = 1.2533 * 1.4826 * mad / math.sqrt(last.size)
    return LagEstimate(float(np.median(last)), sigma, int(last.size),
                       float(np.median(rates[-max_pairs:])))


# -- the stateful join -------------------------------------------------------------------------
@dataclass
class JoinCounts:
    """Blocks joined and dropped (by reason) so far."""

    joined: int = 0
    dropped: dict[str, int] = field(default_factory=lambda: {"angle_gap": 0, "settling": 0})


class AngleJoin:
    """Blocks and telemetry in (each in time order), joined samples out.

    Blocks wait until the telemetry covers them (or ``hold_s`` passes on the IQ clock).
    With an automatic lag they wait for the first estimate instead (at most
    ``auto_wait_s``, then lag 0 is used and :attr:`lag_note` says why).  A history of
    blocks and telemetry (``history_s``) feeds the running lag estimate.
    """

    def __init__(self, config: JoinConfig, block_s: float, history_s: float = 120.0) -> None:
        self.config = config.validate()
        self.block_s = float(block_s)
        # telemetry kept: the lag estimate's history in auto mode, else what a held block
        # can still need
        self.history_s = (max(float(history_s), config.auto_wait_s + 10.0)
                          if config.lag_s is None
                          else config.hold_s + config.gap_s + abs(config.lag_s) + 5.0)
        self.counts = JoinCounts()
        self.estimate: LagEstimate | None = None
        self.lag_note: str | None = None
        self._auto = config.lag_s is None
        self._auto_gave_up = False
        self._tel_t = _EMPTY
        self._tel_a = _EMPTY
        self._pend_t = _EMPTY
        self._pend_p = _EMPTY
        self._pend_f = _EMPTY
        self._hist_t = _EMPTY
        self._hist_p = _EMPTY
        self._first_block_t: float | None = None
        self._runs_seen = -math.inf

    @property
    def lag_s(self) -> float:
        """The lag applied now (the estimate in auto mode, 0 before one exists)."""
        if self._auto:
            return self.estimate.lag_s if self.estimate is not None else 0.0
        return float(self.config.lag_s or 0.0)

    @property
    def waiting_for_lag(self) -> bool:
        return self._auto and self.estimate is None and not self._auto_gave_up

    def add_angles(self, t: np.ndarray, angle_deg: np.ndarray) -> None:
        """Telemetry samples (telemetry clock); out-of-order samples are sorted in."""
        t = np.asarray(t, dtype=np.float64)
        a = np.asarray(angle_deg, dtype=np.float64)
        if t.size == 0:
            return
        tt = np.concatenate((self._tel_t, t))
        aa = np.concatenate((self._tel_a, a))
        if tt.size > 1 and np.any(np.diff(tt) < 0):
            o = np.argsort(tt, kind="stable")
            tt, aa = tt[o], aa[o]
        keep = tt >= tt[-1] - self.history_s
        self._tel_t, self._tel_a = tt[keep], aa[keep]

    def add_blocks(self, t_mid: np.ndarray, power_db: np.ndarray,
                   floor_db: np.ndarray | None = None) -> None:
        """Power blocks (IQ clock mid-times)."""
        t_mid = np.asarray(t_mid, dtype=np.float64)
        if t_mid.size == 0:
            return
        if self._first_block_t is None:
            self._first_block_t = float(t_mid[0])
        p = np.asarray(power_db, dtype=np.float64)
        f = np.full(t_mid.shape, np.nan) if floor_db is None else np.asarray(floor_db)
        self._pend_t = np.concatenate((self._pend_t, t_mid))
        self._pend_p = np.concatenate((self._pend_p, p))
        self._pend_f = np.concatenate((self._pend_f, f))
        if self._auto:
            self._hist_t = np.concatenate((self._hist_t, t_mid))
            self._hist_p = np.concatenate((self._hist_p, p))
            keep = self._hist_t >= self._hist_t[-1] - self.history_s
            self._hist_t, self._hist_p = self._hist_t[keep], self._hist_p[keep]

    def retime(self, delta_s: float, since_t: float = -math.inf) -> None:
        """Shift the blocks at or after ``since_t`` that are not yet emitted (and the lag
        history) by ``delta_s``: the IQ time base found a better anchor for them."""
        self._pend_t = np.where(self._pend_t >= since_t, self._pend_t + delta_s, self._pend_t)
        self._hist_t = np.where(self._hist_t >= since_t, self._hist_t + delta_s, self._hist_t)
        if self._first_block_t is not None and self._first_block_t >= since_t:
            self._first_block_t += delta_s

    def _update_estimate(self) -> None:
        runs = sweep_runs(self._tel_t, self._tel_a, self.config.min_sweep_deg)
        if len(runs) < 3 or not self._hist_t.size:
            return
        end_t = runs[-2][1]  # end of the last complete sweep
        if end_t == self._runs_seen or self._hist_t[-1] < end_t:
            return  # a new estimate once a sweep has ended and its blocks are in
        self._runs_seen = end_t
        est = estimate_lag(self._hist_t, self._hist_p, self._tel_t, self._tel_a,
                           self.config.gap_s, self.config.min_sweep_deg)
        if est is not None:
            self.estimate = est
            self.lag_note = None

    def pop(self) -> Joined:
        """The blocks that can be decided now, joined (dropped ones are counted)."""
        if self._auto:
            self._update_estimate()
            if self.estimate is None and not self._auto_gave_up:
                newest = self._pend_t[-1] if self._pend_t.size else None
                if (newest is None or self._first_block_t is None
                        or newest - self._first_block_t < self.config.auto_wait_s):
                    return Joined(_EMPTY, _EMPTY, _EMPTY, _EMPTY)
                self._auto_gave_up = True
                self.lag_note = ("no lag estimate: it needs sweeps in both directions; "
                                 "joining with lag 0")
        if self._pend_t.size == 0:
            return Joined(_EMPTY, _EMPTY, _EMPTY, _EMPTY)
        lag = self.lag_s
        t = self._pend_t
        half = self.block_s / 2.0
        tel_end = self._tel_t[-1] if self._tel_t.size else -math.inf
        newest = t[-1]
        if self.config.dwell:
            ready = (t + half + lag <= tel_end) | (newest - t > self.config.hold_s)
        else:
            ready = (t + lag <= tel_end) | (newest - t > self.config.hold_s)
        n = int(np.argmin(ready)) if not np.all(ready) else t.size  # leading ready run
        if n == 0:
            return Joined(_EMPTY, _EMPTY, _EMPTY, _EMPTY)
        bt, bp, bf = t[:n], self._pend_p[:n], self._pend_f[:n]
        self._pend_t, self._pend_p, self._pend_f = t[n:], self._pend_p[n:], self._pend_f[n:]
        if self.config.dwell:
            ang, ok = dwell_angle(bt - half + lag, bt + half + lag, self._tel_t, self._tel_a,
                                  self.config.settle_s)
            covered = (bt - half + lag) >= (self._tel_t[0] if self._tel_t.size else math.inf)
            self.counts.dropped["settling"] += int(np.sum(~ok & covered))
            self.counts.dropped["angle_gap"] += int(np.sum(~ok & ~covered))
        else:
            # only the telemetry around these blocks (the unwrap is linear in its length)
            tt = self._tel_t
            i0 = max(int(np.searchsorted(tt, bt[0] + lag - self.config.gap_s)) - 1, 0)
            i1 = int(np.searchsorted(tt, bt[-1] + lag + self.config.gap_s)) + 1
            ang, ok = interpolate_angle(bt + lag, tt[i0:i1], self._tel_a[i0:i1],
                                        self.config.gap_s)
            self.counts.dropped["angle_gap"] += int(np.sum(~ok))
        self.counts.joined += int(np.sum(ok))
        return Joined(bt[ok], ang[ok], bp[ok], bf[ok])
