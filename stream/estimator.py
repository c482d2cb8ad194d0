"""Rolling beam pattern: per-angle-bin power averaged over time, plus sweep detection.

The angle axis is cut into bins over the whole circle, so a steered array (a sector such
as -60..+60 degrees) and a turning mount (all of [-180, 180)) are handled alike.  Each
batch is folded in with a handful of vectorised numpy calls (``np.bincount`` with
weights); nothing loops per sample, and the state is a fixed set of per-bin arrays plus a
bounded sweep history, so its size is O(bins + history) however long the session runs.

Power is averaged in linear units (mW ratio, ``10**(dB/10)``): averaging dB values would
bias the pattern low where the signal fades (Jensen's inequality; common practice).
"""

from __future__ import annotations

import math
import numbers
from collections import deque
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from stream.batch import SampleBatch, wrap_angle_deg
from stream.pattern import measure

#: A completed sweep whose samples fill fewer distinct bins than this is not a sweep
#: (a fly-back, a wrap, jitter at a turning point); its samples stay with the next sweep.
MIN_SWEEP_BINS: int = 5

#: Smallest retreat from the furthest angle reached that counts as a direction reversal,
#: degrees.  The working hysteresis is ``max(bin_deg / 2, MIN_REVERSAL_DEG)``, so encoder
#: jitter of a few tenths of a degree does not split sweeps when the bins are fine.
MIN_REVERSAL_DEG: float = 0.5

#: ln(10)/10: ``10**(p/10) == exp(p * _DB_TO_NEPER)``, and exp is the cheaper ufunc.
_DB_TO_NEPER: float = math.log(10.0) / 10.0

_AVERAGING: tuple[str, ...] = ("ema", "sweeps")

#: Up to this many bins per batch the per-bin bookkeeping runs on Python scalars.
_FEW_BINS: int = 4

#: A sweep whose extent reaches this is a full turn (a turning mount), degrees.
_FULL_TURN_DEG: float = 360.0 - 1e-9


#: First chunk scanned for a sweep end; later chunks double.
_SCAN_CHUNK: int = 256

#: Fewest and most batches :meth:`RollingPattern.update_many` tries to fold in with one
#: set of numpy calls.
_RUN_MIN: int = 8
_RUN_MAX: int = 256

def _is_real(v: object) -> bool:
    return isinstance(v, numbers.Real) and not isinstance(v, bool)


def _is_int(v: object) -> bool:
    return isinstance(v, numbers.Integral) and not isinstance(v, bool)


@dataclass(frozen=True, slots=True)
class EstimatorConfig:
    """Settings of the rolling pattern.

    ``bin_deg`` is rounded to the nearest width that divides the circle evenly
    (``360 / round(360 / bin_deg)``; exact for 0.1, 0.25, 0.5, 1, 2, 5, 10 ...).
    ``averaging`` is ``"ema"`` (exponential in receive time, time constant ``tau_s``) or
    ``"sweeps"`` (mean over the last ``sweeps_k`` complete sweeps and the one in
    progress).  A bin not refreshed for ``stale_after_s`` seconds is left out of the
    snapshot.  ``history`` sweep records are kept.
    """

    bin_deg: float = 1.0
    averaging: str = "ema"
    tau_s: float = 3.0
    sweeps_k: int = 3
    stale_after_s: float = 30.0
    history: int = 256

    def __post_init__(self) -> None:
        b = self.bin_deg
        if not (_is_real(b) and math.isfinite(b) and 0.1 <= b <= 10.0):
            raise ValueError(f"bin width must be between 0.1 and 10 degrees, got {b!r}")
        if self.averaging not in _AVERAGING:
            raise ValueError(f"averaging must be 'ema' or 'sweeps', got {self.averaging!r}")
        if not (_is_real(self.tau_s) and math.isfinite(self.tau_s) and self.tau_s > 0):
            raise ValueError(f"averaging time constant must be a positive number of seconds, "
                             f"got {self.tau_s!r}")
        if not (_is_int(self.sweeps_k) and 1 <= self.sweeps_k <= 1000):
            raise ValueError(f"sweeps to average must be a whole number from 1 to 1000, "
                             f"got {self.sweeps_k!r}")
        if not (_is_real(self.stale_after_s) and self.stale_after_s > 0):
            raise ValueError(f"bin maximum age must be a positive number of seconds, "
                             f"got {self.stale_after_s!r}")
        if not (_is_int(self.history) and 1 <= self.history <= 1_000_000):
            raise ValueError(f"sweep history must be a whole number from 1 to 1000000, "
                             f"got {self.history!r}")

    @property
    def n_bins(self) -> int:
        """Number of bins around the circle."""
        return int(round(360.0 / self.bin_deg))

    @property
    def bin_width_deg(self) -> float:
        """The bin width actually used (divides 360 evenly)."""
        return 360.0 / self.n_bins


@dataclass(frozen=True, slots=True)
class SweepRecord:
    """One completed sweep, measured on its own samples.

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


@dataclass(frozen=True, slots=True)
class PatternSnapshot:
    """The valid bins at time ``t``: centres sorted ascending in [-180, 180), power in dB
    (dBm when the input was calibrated), both float64 and owned by the snapshot."""

    t: float
    angle_deg: np.ndarray
    power_db: np.ndarray

    def __len__(self) -> int:
        return int(self.angle_deg.shape[0])


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


class RollingPattern:
    """Per-bin linear power, averaged over time or over sweeps, with sweep detection.

    Averaging, for a bin that receives ``m`` samples of mean linear power ``x`` in a batch
    received at ``now`` (all of a batch's samples count as received at ``now``):

    * ``ema``: with ``dt = now - last_t`` (the bin's previous update time),
      ``alpha = 1 - exp(-dt / tau_s)`` and ``P <- P + alpha * (x - P)``; the first fill
      takes ``P = x``.  This is the exact discretisation of the first-order low-pass
      ``tau dP/dt = x(t) - P`` with ``x`` held since the previous update (A. Eckner,
      "Algorithms for unevenly spaced time series", 2012 working paper -- from memory),
      so a step in the input is followed as ``1 - exp(-t/tau)`` whatever the batch
      timing.  Batches received at the same ``now`` (or earlier than the bin's last
      update) are pooled with that update: its ``x`` becomes the mean of all their
      samples, so splitting a batch without changing ``now`` changes nothing.
    * ``sweeps``: the pooled mean of all samples that fell in the bin during the last
      ``sweeps_k`` complete sweeps and the sweep in progress (sum and count per bin in a
      ring of ``sweeps_k`` rows).

    Sweep detection (per sample, causal, so batch boundaries never change it) runs on the
    continuous angle ``u = a + 360 k``, where ``k`` counts crossings of the +-180 seam (a
    step of more than 180 deg between two samples is taken as the short way round), so a
    sector sweep facing the seam is one sweep, not two.  A sweep ends at

    * a reversal: moving up, a sample more than ``h = max(bin/2, MIN_REVERSAL_DEG)``
      below the highest angle reached (moving down: symmetric).  This also catches the
      fly-back of a sawtooth (-60 -> +60, jump to -60);
    * a cut, for a turning mount: once a sweep's extent reaches 360 deg the source is
      taken to be turning, and that sweep and every later one end where the angle
      crosses the cut angle -- +-180, or 0 when the last turn's peak faced backwards
      (|peak| > 90) -- so the main lobe is not split between two sweeps measured at
      different times.  A reversal ends this mode.  (The fly-back of a sawtooth wider
      than 180 deg is shorter the other way round the circle and reads as turning.)

    The sample that reveals the end starts the next sweep.  A sweep filling fewer than
    ``MIN_SWEEP_BINS`` bins is not counted; its samples join the next sweep.  Each
    counted sweep is measured on its own binned samples with ``stream.pattern.measure``.
    """

    def __init__(self, config: EstimatorConfig | None = None) -> None:
        self.config = config if config is not None else EstimatorConfig()
        cfg = self.config
        self._nb = cfg.n_bins
        w = cfg.bin_width_deg
        self._inv_w = 1.0 / w
        self._c0 = 180.0 / w + 0.5
        # Bin i covers [centre_i - w/2, centre_i + w/2), centre_i = -180 + i*w; index =
        # floor((a + 180)/w + 1/2), where the top value n_bins folds onto bin 0 (the wrap).
        self._centres = -180.0 + w * np.arange(self._nb, dtype=np.float64)
        self._h = max(0.5 * w, MIN_REVERSAL_DEG)
        self._inv_tau = 1.0 / float(cfg.tau_s)
        self._ema = cfg.averaging == "ema"
        self.reset()

    # -- state ------------------------------------------------------------------------
    def reset(self) -> None:
        """Forget everything: bins, sweep in progress, history and counters."""
        nb = self._nb
        self._last_t = np.full(nb, -np.inf)           # last update time per bin
        self._p = np.zeros(nb)                        # ema: averaged linear power
        self._p_prev = np.zeros(nb)                   # ema: value before the last update
        self._alpha = np.zeros(nb)                    # ema: weight of the last update
        self._u_sum = np.zeros(nb)                    # ema: linear sum of the last update
        self._u_cnt = np.zeros(nb)                    # ema: sample count of the last update
        self._sw_sum = np.zeros(nb)                   # sweep in progress: sum per bin
        self._sw_cnt = np.zeros(nb, dtype=np.int64)   # sweep in progress: count per bin
        self._sw_off = np.zeros(nb)                   # sweep in progress: offset sum
        self._sw_lo = math.inf                        # sweep in progress: range of u
        self._sw_hi = -math.inf
        k = self.config.sweeps_k if not self._ema else 0
        self._ring_sum = np.zeros((k, nb))            # sweeps: last K complete sweeps
        self._ring_cnt = np.zeros((k, nb), dtype=np.int64)
        self._ring_pos = 0
        self._tot_sum = np.zeros(nb if k else 0)      # sweeps: sum of the ring rows
        self._tot_cnt = np.zeros(nb if k else 0, dtype=np.int64)
        self._off_sum = np.zeros(nb)                  # sum of sample offsets from centre
        self._off_cnt = np.zeros(nb)                  # (in bins) and their count
        self._now_max = -math.inf                     # latest receive time seen
        self._dir = 0                                 # +1 up, -1 down, 0 not yet known
        self._ext = math.nan                          # furthest angle in the direction
        self._e_lo = math.inf                         # extent of the sweep (detection)
        self._e_hi = -math.inf
        self._k = 0                                   # seam crossings (u = a + 360 k)
        self._turning = False                         # a full turn seen: a turning mount
        self._cut = -180.0                            # turning: where turns are cut
        self._next_cut = math.inf                     # turning: u of the next cut
        self._last_a = math.nan                       # last wrapped angle seen
        self._history: deque[SweepRecord] = deque(maxlen=self.config.history)
        self._sweep_count = 0
        self._samples = 0

    @property
    def samples(self) -> int:
        """Samples taken in since the start or the last reset (non-finite ones dropped)."""
        return self._samples

    @property
    def sweep_count(self) -> int:
        """Sweeps completed since the start or the last reset (not bounded by history)."""
        return self._sweep_count

    @property
    def sweeps(self) -> tuple[SweepRecord, ...]:
        """The most recent sweep records, oldest first, at most ``config.history``."""
        return tuple(self._history)

    @property
    def bin_centres_deg(self) -> np.ndarray:
        """Centres of all bins (a copy), ascending from -180."""
        return self._centres.copy()

    def peak_angle_spread_deg(self, n: int = 8) -> float | None:
        """Sample standard deviation of the peak angle over the last ``n`` sweeps that had
        a peak (circular-safe, see :func:`circular_std_deg`); ``None`` when fewer than 2."""
        if n < 2:
            return None
        peaks: list[float] = []
        for rec in reversed(self._history):
            if rec.peak_angle_deg is not None:
                peaks.append(rec.peak_angle_deg)
                if len(peaks) == n:
                    break
        return circular_std_deg(peaks)

    # -- data in ----------------------------------------------------------------------
    def update(self, batch: SampleBatch, now: float) -> None:
        """Fold in one batch whose samples were all received at ``now`` (seconds)."""
        # float64 throughout: the bin window below relies on scalar and array index
        # arithmetic agreeing exactly (a no-op for the usual float64 arrays).
        a = np.asarray(batch.angle_deg, dtype=np.float64)
        p = np.asarray(batch.power_db, dtype=np.float64)
        if a.shape[0] == 0:
            return
        lo = float(a.min())
        hi = float(a.max())
        if not (-180.0 <= lo and hi < 180.0 and math.isfinite(float(p.sum()))):
            a, p = _clean(a, p)
            if a.shape[0] == 0:
                return
            lo = float(a.min())
            hi = float(a.max())
        now = float(now)
        nb = self._nb
        inv_w = self._inv_w
        self._samples += int(a.shape[0])
        lin = p * _DB_TO_NEPER
        np.exp(lin, out=lin)
        # Work on the window of bins [i0, i0 + span) the batch touches, so the cost does
        # not grow with the number of bins.  Index nb (just below +180) is bin 0.  The
        # scalar and the array index use the same float operations, hence agree.
        c0 = self._c0
        i0 = int(lo * inv_w + c0)
        i1 = int(hi * inv_w + c0)
        seam = i1 >= nb
        if seam:
            i0 = 0
        x = a * inv_w
        x += c0
        idx = x.astype(np.intp)
        if i0:
            idx -= i0
        span = i1 - i0 + 1
        # Where in its bin each sample fell (bins of offset, -1/2 .. 1/2): a bin's angle
        # is its samples' mean angle, not its centre, so a steering grid that does not
        # line up with the bins (0.5-degree steps in 1-degree bins) gives no bias.
        x -= idx
        x -= i0 + 0.5
        s, c, so = self._bin_sums(idx, lin, x, span, seam)
        win = slice(i0, i0 + s.shape[0])

        u, u_lo, u_hi = self._unwrap(a, lo, hi)
        b = self._next_boundary(u, 0, u_lo, u_hi)
        if b < 0:
            self._sw_lo = min(self._sw_lo, u_lo)
            self._sw_hi = max(self._sw_hi, u_hi)
            if span <= _FEW_BINS:
                # A batch inside a few bins (the usual case at high sample rates): plain
                # Python floats per touched bin beat a dozen small-array numpy calls.
                self._update_few(i0, s.tolist(), c.tolist(), now, so.tolist())
                return
            self._off_sum[win] += so
            self._off_cnt[win] += c
            self._sw_off[win] += so
            self._sw_sum[win] += s
            self._sw_cnt[win] += c
        else:
            n = a.shape[0]
            k = 0
            while b >= 0:
                if b > k:
                    self._add_to_sweep(u[k:b], idx[k:b], lin[k:b], x[k:b], win, seam)
                self._end_sweep(now)
                k = b
                b = self._next_boundary(u, b + 1, math.nan, math.nan) if b + 1 < n else -1
            self._add_to_sweep(u[k:], idx[k:], lin[k:], x[k:], win, seam)

        tl = np.flatnonzero(c)
        tb = tl + i0 if i0 else tl
        lt = self._last_t[tb]
        if self._ema:
            self._update_ema(tb, s[tl], c[tl].astype(np.float64), lt, now)
        if now > self._now_max:
            self._last_t[tb] = now
            self._now_max = now
        else:
            self._last_t[tb] = np.maximum(lt, now)

    def update_many(self, batches: Sequence[SampleBatch], nows: Sequence[float]) -> None:
        """Fold in several batches in order, batch ``i`` received at ``nows[i]``.

        The result is bit for bit that of calling :meth:`update` on each in turn (a
        replay feeds thousands of small batches; their numpy work is done in a few
        calls per run instead of a dozen per batch).  A run of equal-length batches
        that each stay inside a few bins, move one way (or stay within the reversal
        hysteresis of the furthest angle) and cross no seam takes the shared path;
        every other batch goes through :meth:`update`.
        """
        n = len(batches)
        i = 0
        size = _RUN_MIN  # grows while runs succeed
        skip = 0  # after a failed try, the next batches go one by one (doubling each time)
        wait = 0
        while i < n:
            j = i
            tried = False
            if wait > 0:
                wait -= 1
            elif n - i > 1:
                j = self._update_run(batches, nows, i, size)
                tried = True
            if j == i:
                if tried:  # a failed try: back off
                    skip = min(2 * skip + 1, _RUN_MAX)
                    wait = skip
                    size = _RUN_MIN
                self.update(batches[i], nows[i])
                j = i + 1
            else:
                skip = 0
                if j - i == size:
                    size = min(2 * size, _RUN_MAX)
            i = j

    def _update_run(self, batches: Sequence[SampleBatch], nows: Sequence[float],
                    start: int, size: int) -> int:
        """Fold in the longest simple run of batches from ``start`` (see
        :meth:`update_many`); returns the index after it (``start``: none taken)."""
        d = self._dir
        if d == 0 or self._turning or self._k != 0:
            return start
        m = len(batches[start])
        stop = min(len(batches), start + size)
        end = start + 1
        while end < stop and len(batches[end]) == m:
            end += 1
        if m == 0 or end - start < 2:
            return start
        run = batches[start:end]
        n_run = len(run)
        A = np.concatenate([b.angle_deg for b in run]).astype(np.float64, copy=False)
        A = A.reshape(n_run, m)
        P = np.concatenate([b.power_db for b in run]).astype(np.float64, copy=False)
        P = P.reshape(n_run, m)
        # Every power finite and far from overflow: then update()'s finiteness test on
        # the sum passes for each batch too.
        if not (np.isfinite(P).all() and float(np.abs(P).max()) < 1e300):
            return start
        los = A.min(axis=1).tolist()
        his = A.max(axis=1).tolist()
        firsts = A[:, 0].tolist()
        lasts = A[:, -1].tolist()
        back = (np.less if d > 0 else np.greater)(A[:, 1:], A[:, :-1]).any(axis=1).tolist()
        inv_w, c0, nb, h = self._inv_w, self._c0, self._nb, self._h
        ext, e_lo, e_hi, last = self._ext, self._e_lo, self._e_hi, self._last_a
        i0s: list[int] = []
        spans: list[int] = []
        # The per-batch decisions of update(), _unwrap() and _next_boundary(), in order;
        # the run ends before the first batch that would take another path.
        for k in range(n_run):
            lo, hi, a0 = los[k], his[k], firsts[k]
            if not (-180.0 <= lo and hi < 180.0):
                break
            i0 = int(lo * inv_w + c0)
            i1 = int(hi * inv_w + c0)
            if i1 >= nb or i1 - i0 + 1 > _FEW_BINS:
                break
            if not (hi - lo <= 180.0 and not abs(a0 - last) > 180.0):
                break
            if not max(e_hi, hi) - min(e_lo, lo) < _FULL_TURN_DEG:
                break
            if d > 0:
                if not (lo >= max(ext, hi) - h or (a0 >= ext - h and not back[k])):
                    break
                ext = max(ext, hi)
            else:
                if not (hi <= min(ext, lo) + h or (a0 <= ext + h and not back[k])):
                    break
                ext = min(ext, lo)
            e_lo, e_hi = min(e_lo, lo), max(e_hi, hi)
            last = lasts[k]
            i0s.append(i0)
            spans.append(i1 - i0 + 1)
        e = len(i0s)
        if e == 0:
            return start
        lin = P[:e] * _DB_TO_NEPER
        np.exp(lin, out=lin)
        x = A[:e] * inv_w
        x += c0
        idx = x.astype(np.intp)
        # Window-relative bin per batch and each sample's offset in its bin, as update()
        # computes them; then a key per (batch, bin): bincount adds each key's weights in
        # sample order, so every sum is update()'s own.
        i0a = np.asarray(i0s, dtype=np.intp)[:, None]
        idx -= i0a
        x -= idx
        x -= i0a + 0.5
        idx += (np.arange(e, dtype=np.intp) * _FEW_BINS)[:, None]
        keys = idx.reshape(-1)
        size = e * _FEW_BINS
        s_all = np.bincount(keys, weights=lin.reshape(-1), minlength=size)
        c_all = np.bincount(keys, minlength=size)
        so_all = np.bincount(keys, weights=x.reshape(-1), minlength=size)
        # The bins' offset sums, batch after batch: ufunc.at adds in index order, as the
        # per-batch window additions do (bins of a window no sample reached add zero).
        used = np.flatnonzero(c_all)
        gbin = used % _FEW_BINS + np.asarray(i0s, dtype=np.intp)[used // _FEW_BINS]
        so_used = so_all[used]
        np.add.at(self._off_sum, gbin, so_used)
        np.add.at(self._off_cnt, gbin, c_all[used].astype(np.float64))
        np.add.at(self._sw_off, gbin, so_used)
        sums = s_all.tolist()
        counts = c_all.tolist()
        few = self._update_few
        for k in range(e):
            self._samples += m
            self._sw_lo = min(self._sw_lo, los[k])
            self._sw_hi = max(self._sw_hi, his[k])
            o = k * _FEW_BINS
            few(i0s[k], sums[o:o + spans[k]], counts[o:o + spans[k]], float(nows[start + k]))
        self._ext, self._e_lo, self._e_hi, self._last_a = ext, e_lo, e_hi, last
        return start + e

    def _update_few(self, i0: int, sums: list[float], counts: list[int], now: float,
                    offs: list[float] | None = None) -> None:
        """Scalar twin of the vector path for a batch within a few bins, no sweep end
        (with ``offs``, the bins' offset sums too; a bin no sample reached would only add
        zero)."""
        sw_sum, sw_cnt, last_t = self._sw_sum, self._sw_cnt, self._last_t
        ema = self._ema
        later = now > self._now_max
        if later:
            self._now_max = now
        for j, cj in enumerate(counts):
            if not cj:
                continue
            b = i0 + j
            if offs is not None:
                oj = offs[j]
                self._off_sum[b] += oj
                self._off_cnt[b] += cj
                self._sw_off[b] += oj
            sj = sums[j]
            sw_sum[b] += sj
            sw_cnt[b] += cj
            lt = float(last_t[b])
            if ema:
                if later or lt < now:
                    pp = float(self._p[b])
                    al = -math.expm1((lt - now) * self._inv_tau)
                else:  # pooled with the update at the same receive time
                    pp = float(self._p_prev[b])
                    al = float(self._alpha[b])
                    sj += float(self._u_sum[b])
                    cj += float(self._u_cnt[b])
                self._p[b] = pp + al * (sj / cj - pp)
                self._p_prev[b] = pp
                self._alpha[b] = al
                self._u_sum[b] = sj
                self._u_cnt[b] = cj
            if now > lt:
                last_t[b] = now

    def _update_ema(self, tb: np.ndarray, ss: np.ndarray, cs: np.ndarray, lt: np.ndarray,
                    now: float) -> None:
        """Apply the recurrence of the class docstring to the touched bins ``tb``."""
        if now <= self._now_max and (merge := lt >= now).any():
            pp = np.where(merge, self._p_prev[tb], self._p[tb])
            al = np.where(merge, self._alpha[tb], -np.expm1((lt - now) * self._inv_tau))
            ss = ss + np.where(merge, self._u_sum[tb], 0.0)
            cs = cs + np.where(merge, self._u_cnt[tb], 0.0)
        else:
            pp = self._p[tb]
            # lt = -inf (never filled) gives alpha = 1, hence P = x.
            al = -np.expm1((lt - now) * self._inv_tau)
        self._p[tb] = pp + al * (ss / cs - pp)
        self._p_prev[tb] = pp
        self._alpha[tb] = al
        self._u_sum[tb] = ss
        self._u_cnt[tb] = cs

    def _add_to_sweep(self, u: np.ndarray, idx: np.ndarray, lin: np.ndarray, off: np.ndarray,
                      win: slice, seam: bool) -> None:
        """Add samples (continuous angles, window-relative bin indices, offsets in their
        bins) to the sweep in progress and to the bins' mean angles."""
        self._sw_lo = min(self._sw_lo, float(u.min()))
        self._sw_hi = max(self._sw_hi, float(u.max()))
        span = win.stop - win.start + (1 if seam else 0)
        s, c, so = self._bin_sums(idx, lin, off, span, seam)
        self._sw_sum[win] += s
        self._sw_cnt[win] += c
        self._off_sum[win] += so
        self._off_cnt[win] += c
        self._sw_off[win] += so

    def _bin_sums(self, idx: np.ndarray, lin: np.ndarray, off: np.ndarray, span: int,
                  seam: bool) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Per-bin sums of linear power, counts and offsets over a window of ``span``
        bins; across the seam, index n_bins (just below +180) is folded onto bin 0."""
        s = np.bincount(idx, weights=lin, minlength=span)
        c = np.bincount(idx, minlength=span)
        so = np.bincount(idx, weights=off, minlength=span)
        if seam:
            nb = self._nb
            s[0] += s[nb]
            c[0] += c[nb]
            so[0] += so[nb]
            s, c, so = s[:nb], c[:nb], so[:nb]
        return s, c, so

    def _unwrap(self, a: np.ndarray, lo: float, hi: float) -> tuple[np.ndarray, float, float]:
        """The batch on the continuous angle axis ``u = a + 360 k``, where ``k`` counts the
        seam crossings so far (a step of more than 180 deg between consecutive samples is
        a crossing of +-180, not a real move).  Returns ``u`` and its range."""
        last = self._last_a
        self._last_a = float(a[-1])
        if hi - lo <= 180.0 and not abs(float(a[0]) - last) > 180.0:
            k = self._k
            if k == 0:
                return a, lo, hi
            off = 360.0 * k
            return a + off, lo + off, hi + off
        d = np.empty(a.shape[0])
        d[0] = float(a[0]) - last if last == last else 0.0
        np.subtract(a[1:], a[:-1], out=d[1:])
        cross = (d < -180.0).astype(np.int64)
        cross -= d > 180.0
        kk = np.cumsum(cross)
        kk += self._k
        self._k = int(kk[-1])
        u = a + 360.0 * kk
        return u, float(u.min()), float(u.max())

    def _next_boundary(self, u: np.ndarray, k: int, lo: float, hi: float) -> int:
        """Index of the first sample at or after ``k`` in ``u`` (continuous angles) that
        starts a new sweep, or -1; consumes the samples up to it into the direction
        state.  ``lo``/``hi`` are the range of ``u[k:]`` when known (else NaN).

        One vectorised scan per event, shortcuts for the usual event-free batch."""
        h = self._h
        n = u.shape[0]
        d = self._dir
        ext = self._ext
        e_lo, e_hi = self._e_lo, self._e_hi
        if lo != lo:
            lo = float(u[k:].min())
            hi = float(u[k:].max())
        if d != 0:
            if self._turning:
                quiet = hi < self._next_cut if d > 0 else lo > self._next_cut
            else:
                quiet = max(e_hi, hi) - min(e_lo, lo) < _FULL_TURN_DEG
            if quiet:
                seg = u[k:]
                # Whole rest within h of the furthest point (common at high rates: a
                # batch spans a fraction of a degree), or monotone in the direction of
                # travel from within h of it: no retreat anywhere.
                if d > 0 and (lo >= max(ext, hi) - h or (
                        seg[0] >= ext - h and not np.less(seg[1:], seg[:-1]).any())):
                    self._ext = max(ext, hi)
                    self._e_lo, self._e_hi = min(e_lo, lo), max(e_hi, hi)
                    return -1
                if d < 0 and (hi <= min(ext, lo) + h or (
                        seg[0] <= ext + h and not np.greater(seg[1:], seg[:-1]).any())):
                    self._ext = min(ext, lo)
                    self._e_lo, self._e_hi = min(e_lo, lo), max(e_hi, hi)
                    return -1
        # Scan in chunks that start small and double: a batch full of reversals (junk, or
        # a jittering encoder) then costs O(chunk) per reversal instead of O(rest of batch),
        # while a long event-free stretch still takes few vector calls.
        chunk = _SCAN_CHUNK
        while k < n:
            seg = u[k:k + chunk]
            m = seg.shape[0]
            chunk *= 2
            if d == 0:
                if math.isnan(ext):
                    ext = e_lo = e_hi = float(seg[0])
                    k += 1
                    continue
                dev = seg - ext
                far = np.abs(dev) > h
                j = int(far.argmax())
                if not far[j]:
                    e_lo = min(e_lo, float(seg.min()))
                    e_hi = max(e_hi, float(seg.max()))
                    k += m
                    continue
                d = 1 if dev[j] > 0 else -1
                ext = float(seg[j])
                e_lo = min(e_lo, float(seg[:j + 1].min()))
                e_hi = max(e_hi, float(seg[:j + 1].max()))
                k += j + 1
                continue
            # run = furthest point so far (with the carried one); back = the retreat.
            if d > 0:
                run = np.maximum.accumulate(seg)
                if ext > run[0]:
                    np.maximum(run, ext, out=run)
                back = run - seg
            else:
                run = np.minimum.accumulate(seg)
                if ext < run[0]:
                    np.minimum(run, ext, out=run)
                back = seg - run
            hit = back > h
            if self._turning:
                hit |= (seg >= self._next_cut) if d > 0 else (seg <= self._next_cut)
            else:
                # Extent of the sweep at each sample: furthest point minus the far end.
                if d > 0:
                    far_end = np.minimum.accumulate(seg)
                    np.minimum(far_end, e_lo, out=far_end)
                    extent = run - far_end
                else:
                    far_end = np.maximum.accumulate(seg)
                    np.maximum(far_end, e_hi, out=far_end)
                    extent = far_end - run
                hit |= extent >= _FULL_TURN_DEG
            j = int(hit.argmax())
            if not hit[j]:
                ext = float(run[-1])
                e_lo = min(e_lo, float(seg.min()))
                e_hi = max(e_hi, float(seg.max()))
                k += m
                continue
            x = float(seg[j])
            if back[j] > h:  # reversal: a new sweep the other way
                self._dir, self._ext, self._e_lo, self._e_hi = -d, x, x, x
                self._turning = False
                return k + j
            if self._turning:  # the cut angle: a new turn the same way
                self._ext, self._e_lo, self._e_hi = x, x, x
                self._next_cut += 360.0 * d
                return k + j
            # The sweep has gone all the way round: a turning mount.  From here on, turns
            # are cut at the cut angle (away from the beam), starting with the next one.
            self._turning = True
            self._next_cut = _beyond(x, self._cut, d)
            ext = float(run[j])
            e_lo = min(e_lo, float(seg[:j + 1].min()))
            e_hi = max(e_hi, float(seg[:j + 1].max()))
            k += j + 1
        self._dir = d
        self._ext = ext
        self._e_lo = e_lo
        self._e_hi = e_hi
        return -1

    def _end_sweep(self, now: float) -> None:
        """Close the sweep in progress: measure and record it, or, if it filled too few
        bins, keep its samples for the next sweep."""
        cnt = self._sw_cnt
        filled = np.flatnonzero(cnt)
        if filled.shape[0] < MIN_SWEEP_BINS:
            return
        sums = self._sw_sum[filled]
        # Each sweep is measured on its own samples, their mean angle per bin included.
        angle = self._centres[filled] + (self._sw_off[filled] / cnt[filled]
                                         * self.config.bin_width_deg)
        power_db = 10.0 * np.log10(sums / cnt[filled])
        metrics = measure(angle, power_db)
        self._history.append(SweepRecord(
            t=now, peak_angle_deg=metrics.peak_angle_deg, hpbw_deg=metrics.hpbw_deg,
            peak_power_db=metrics.peak_power_db, angle_min_deg=_wrap1(self._sw_lo),
            angle_max_deg=_wrap1(self._sw_hi)))
        self._sweep_count += 1
        peak = metrics.peak_angle_deg
        if self._turning and peak is not None:
            cut = 0.0 if abs(peak) > 90.0 else -180.0  # the half circle behind the beam
            if cut != self._cut:
                self._cut = cut
                self._next_cut = _beyond(self._ext, cut, self._dir)
        if not self._ema:
            pos = self._ring_pos
            self._ring_sum[pos] = self._sw_sum
            self._ring_cnt[pos] = cnt
            self._ring_pos = (pos + 1) % self._ring_sum.shape[0]
            # Re-summed (not adjusted by difference) so no rounding drift accumulates.
            self._ring_sum.sum(axis=0, out=self._tot_sum)
            self._ring_cnt.sum(axis=0, out=self._tot_cnt)
        self._sw_sum = np.zeros(self._nb)
        self._sw_cnt = np.zeros(self._nb, dtype=np.int64)
        self._sw_off = np.zeros(self._nb)
        self._sw_lo = math.inf
        self._sw_hi = -math.inf

    # -- readout ----------------------------------------------------------------------
    def _bin_angle(self, sel: np.ndarray) -> np.ndarray:
        """Mean angle of the samples that fell in bins ``sel`` (all samples so far: the
        angle grid of a sweep does not change with time), in degrees."""
        n = self._off_cnt[sel]
        off = self._off_sum[sel] / np.where(n > 0, n, 1.0)
        return self._centres[sel] + off * self.config.bin_width_deg

    def snapshot(self, now: float) -> PatternSnapshot:
        """The valid bins at ``now``: filled and refreshed within ``stale_after_s``."""
        fresh = self._last_t >= float(now) - self.config.stale_after_s
        if self._ema:
            sel = np.flatnonzero(fresh)
            lin = self._p[sel]
        else:
            cnt = self._tot_cnt + self._sw_cnt
            sel = np.flatnonzero(fresh & (cnt > 0))
            lin = (self._tot_sum[sel] + self._sw_sum[sel]) / cnt[sel]
        angle = self._bin_angle(sel)
        power_db = 10.0 * np.log10(lin)
        if angle.shape[0] and angle[0] < -180.0:
            # The seam bin's samples sit mostly just below +180: keep the output in
            # [-180, 180) and sorted by moving that bin to the end.
            angle[0] += 360.0
            angle = np.roll(angle, -1)
            power_db = np.roll(power_db, -1)
        return PatternSnapshot(t=float(now), angle_deg=angle, power_db=power_db)


def _clean(a: np.ndarray, p: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Angles wrapped into [-180, 180) and samples with a non-finite value dropped.

    Only the angles outside [-180, 180) are changed, each by ``wrap_angle_deg``, so a
    sample's wrapped value never depends on which batch it came in.
    """
    with np.errstate(invalid="ignore"):
        a = np.where((a >= -180.0) & (a < 180.0), a, wrap_angle_deg(a))
    p = np.asarray(p, dtype=np.float64)
    ok = np.isfinite(a) & np.isfinite(p)
    if not ok.all():
        a = a[ok]
        p = p[ok]
    return a, p


def _wrap1(angle_deg: float) -> float:
    """One angle into [-180, 180), unchanged when already there."""
    return angle_deg if -180.0 <= angle_deg < 180.0 else float(wrap_angle_deg(angle_deg))


def _beyond(u: float, cut_deg: float, direction: int) -> float:
    """The first angle ``cut_deg + 360 m`` strictly beyond ``u`` in ``direction``."""
    if direction > 0:
        return cut_deg + 360.0 * (math.floor((u - cut_deg) / 360.0) + 1)
    return cut_deg + 360.0 * (math.ceil((u - cut_deg) / 360.0) - 1)
