"""Rolling beam pattern: per-angle-bin power averaged over time or over sweeps.

The angle axis is cut into bins over the whole circle, so a steered array (a sector such
as -60..+60 degrees) and a turning mount (all of [-180, 180)) are handled alike.  Each
batch is folded in with a handful of vectorised numpy calls (``np.bincount`` with
weights); nothing loops per sample, and the state is a fixed set of per-bin arrays plus a
bounded sweep history, so its size is O(bins + history) however long the session runs.
Where sweeps end is :mod:`stream.sweeps`' business.

Power is averaged in linear units (mW ratio, ``10**(dB/10)``): averaging dB values would
bias the pattern low where the signal fades (Jensen's inequality; common practice).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from stream.batch import SampleBatch, wrap_angle_deg
from stream.estimator_config import EstimatorConfig
from stream.sweep_log import SweepLog, SweepRecord
from stream.sweeps import SweepDetector

#: A completed sweep whose samples fill fewer distinct bins than this is not a sweep
#: (a fly-back, a wrap, jitter at a turning point); its samples stay with the next sweep.
MIN_SWEEP_BINS: int = 5

#: Smallest retreat from the furthest angle reached that counts as a direction reversal,
#: degrees.  The working hysteresis is ``max(bin_deg / 2, MIN_REVERSAL_DEG)``, so encoder
#: jitter of a few tenths of a degree does not split sweeps when the bins are fine.
MIN_REVERSAL_DEG: float = 0.5

#: Natural log of the power ratio per dB, ln(10)/10 (so ``10**(p/10) == exp(p * this)``;
#: exp is the cheaper ufunc).  Not the neper: one dB is ln(10)/20 Np, which counts field
#: (amplitude) ratios; a power ratio's natural log is twice that.
_LN_POWER_PER_DB: float = math.log(10.0) / 10.0

#: Up to this many bins per batch the per-bin bookkeeping runs on Python scalars.
_FEW_BINS: int = 4

#: Fewest and most batches :meth:`RollingPattern.update_many` tries to fold in with one
#: set of numpy calls.
_RUN_MIN: int = 8
_RUN_MAX: int = 256


@dataclass(frozen=True, slots=True)
class PatternSnapshot:
    """The valid bins at time ``t``: centres sorted ascending in [-180, 180), power in dB
    (dBm when the input was calibrated), both float64 and owned by the snapshot."""

    t: float
    angle_deg: np.ndarray
    power_db: np.ndarray

    def __len__(self) -> int:
        return int(self.angle_deg.shape[0])


class RollingPattern:
    """Per-bin linear power, averaged over time or over sweeps, with sweep detection.

    Averaging, for a bin that receives ``m`` samples of mean linear power ``x`` in a batch
    received at ``now`` (all of a batch's samples count as received at ``now``):

    * ``ema``: with ``dt = now - last_t`` (the bin's previous update time),
      ``alpha = 1 - exp(-dt / tau_s)`` and ``P <- P + alpha * (x - P)``; the first fill
      takes ``P = x``.  This is the exact discretisation of the first-order low-pass
      ``tau dP/dt = x(t) - P`` with ``x`` held since the previous update [1], so a step
      in the input is followed as ``1 - exp(-t/tau)`` whatever the batch timing.
      Batches received at the same ``now`` (or earlier than the bin's last update) are
      pooled with that update: its ``x`` becomes the mean of all their samples, so
      splitting a batch without changing ``now`` changes nothing.
    * ``sweeps``: the pooled mean of all samples that fell in the bin during the last
      ``sweeps_k`` complete sweeps and the sweep in progress (sum and count per bin in a
      ring of ``sweeps_k`` rows).

    Where sweeps end is decided by :class:`stream.sweeps.SweepDetector` (per sample,
    causal).  The sample that reveals the end starts the next sweep.  A sweep filling
    fewer than ``MIN_SWEEP_BINS`` bins is not counted; its samples join the next sweep.
    Each counted sweep is measured on its own binned samples with
    ``stream.pattern.measure``.

    Fold paths (all give the same bits; :meth:`_fold_path_allowed` is the one place
    that chooses, and tests pin each one with the private ``_path``):

    * ``vector`` (:meth:`_fold_vector`): any batch, a dozen numpy calls over the window
      of bins it touches, split at the sweep ends in it;
    * ``scalar`` (:meth:`_fold_scalar`): a batch within ``_FEW_BINS`` bins and no sweep
      end (the usual batch at high sample rates), Python floats per touched bin;
    * ``run`` (:meth:`_fold_run`): a run of equal-length quiet scalar-sized batches from
      :meth:`update_many` (a replay), one set of numpy calls for the whole run.

    :meth:`_fold_reference` is the plain per-sample statement of all three.

    References:
    [1] A. Eckner, "Algorithms for unevenly spaced time series", 2012 working paper
        (from memory).
    """

    def __init__(self, config: EstimatorConfig | None = None) -> None:
        self.config = config if config is not None else EstimatorConfig()
        cfg = self.config
        self._nb = cfg.n_bins
        w = cfg.bin_width_deg
        self._bins_per_deg = 1.0 / w
        self._c0_bins = 180.0 / w + 0.5
        # Bin i covers [centre_i - w/2, centre_i + w/2), centre_i = -180 + i*w; index =
        # floor((a + 180)/w + 1/2), where the top value n_bins folds onto bin 0 (the wrap).
        self._centres_deg = -180.0 + w * np.arange(self._nb, dtype=np.float64)
        self._hysteresis_deg = max(0.5 * w, MIN_REVERSAL_DEG)
        self._inv_tau_per_s = 1.0 / float(cfg.tau_s)
        self._ema = cfg.averaging == "ema"
        #: None: every fold path where it applies; else tests pin one ("vector",
        #: "scalar", "run") or the plain per-sample statement ("reference").
        self._path: str | None = None
        self.reset()

    # -- state ------------------------------------------------------------------------
    def reset(self) -> None:
        """Forget everything: bins, sweep in progress, history and counters."""
        nb = self._nb
        self._last_t = np.full(nb, -np.inf)           # last update time per bin, Unix s
        self._p = np.zeros(nb)                        # ema: averaged linear power
        self._p_prev = np.zeros(nb)                   # ema: value before the last update
        self._alpha = np.zeros(nb)                    # ema: weight of the last update
        self._u_sum = np.zeros(nb)                    # ema: linear sum of the last update
        self._u_cnt = np.zeros(nb)                    # ema: sample count of the last update
        self._sw_sum = np.zeros(nb)                   # sweep in progress: sum per bin
        self._sw_cnt = np.zeros(nb, dtype=np.int64)   # sweep in progress: count per bin
        self._sw_off_bins = np.zeros(nb)              # sweep in progress: offset sum
        self._sw_lo_deg = math.inf                    # sweep in progress: range of u
        self._sw_hi_deg = -math.inf
        k = self.config.sweeps_k if not self._ema else 0
        self._ring_sum = np.zeros((k, nb))            # sweeps: last K complete sweeps
        self._ring_cnt = np.zeros((k, nb), dtype=np.int64)
        self._ring_pos = 0
        self._tot_sum = np.zeros(nb if k else 0)      # sweeps: sum of the ring rows
        self._tot_cnt = np.zeros(nb if k else 0, dtype=np.int64)
        self._off_sum_bins = np.zeros(nb)             # sum of sample offsets from centre
        self._off_cnt = np.zeros(nb)                  # (in bins) and their count
        self._now_max = -math.inf                     # latest receive time seen, Unix s
        self._det = SweepDetector(self._hysteresis_deg)
        self._log = SweepLog(self._centres_deg, self.config.bin_width_deg,
                             self.config.history)
        self._samples = 0
        self._run_backoff = (_RUN_MIN, 0, 0)  # update_many: run size, skip, batches to wait

    @property
    def samples(self) -> int:
        """Samples taken in since the start or the last reset (non-finite ones dropped)."""
        return self._samples

    @property
    def sweep_count(self) -> int:
        """Sweeps completed since the start or the last reset (not bounded by history)."""
        return self._log.count

    @property
    def sweeps(self) -> tuple[SweepRecord, ...]:
        """The most recent sweep records, oldest first, at most ``config.history``."""
        return self._log.records

    @property
    def bin_centres_deg(self) -> np.ndarray:
        """Centres of all bins (a copy), ascending from -180."""
        return self._centres_deg.copy()

    def peak_angle_spread_deg(self, n: int = 8) -> float | None:
        """Sample standard deviation of the peak angle over the last ``n`` sweeps that had
        a peak (circular-safe, see :func:`stream.sweep_log.circular_std_deg`); ``None``
        when fewer than 2."""
        return self._log.peak_angle_spread_deg(n)

    # -- data in: the one place a fold path is chosen ---------------------------------
    def _fold_path_allowed(self, path: str) -> bool:
        """Whether fold path ``path`` may be taken where it applies (all of them unless a
        test pinned one; the vector path is the fallback of every other)."""
        return self._path is None or self._path == path

    def update(self, batch: SampleBatch, now: float) -> None:
        """Fold in one batch whose samples were all received at ``now`` (Unix s)."""
        if self._path == "reference":
            self._fold_reference(batch, now)
            return
        prep = self._prepare(batch)
        if prep is None:
            return
        a, t, lin, idx, off, i0, span, seam, lo, hi = prep
        now = float(now)
        self._samples += int(a.shape[0])
        s, c, so = self._bin_sums(idx, lin, off, span, seam)
        u, u_lo, u_hi = self._det.unwrap(a, lo, hi)
        b = self._det.next_boundary(u, 0, u_lo, u_hi)
        if b < 0 and span <= _FEW_BINS and self._fold_path_allowed("scalar"):
            self._sw_lo_deg = min(self._sw_lo_deg, u_lo)
            self._sw_hi_deg = max(self._sw_hi_deg, u_hi)
            self._fold_scalar(i0, s.tolist(), c.tolist(), now, so.tolist())
            return
        self._fold_vector(u, u_lo, u_hi, b, idx, lin, off, i0, seam, s, c, so, now, t)

    def update_many(self, batches: Sequence[SampleBatch], nows: Sequence[float]) -> None:
        """Fold in several batches in order, batch ``i`` received at ``nows[i]``.

        The result is bit for bit that of calling :meth:`update` on each in turn (a
        replay feeds thousands of small batches; the run path folds a run of them in a
        few numpy calls).  After a run that could not be taken, the next batches go one
        by one (doubling each time) so a stream that never runs pays little for trying.
        """
        n = len(batches)
        i = 0
        # The back-off lives on between calls: a replay hands over ten batches a tick,
        # and a stream whose batches never run would otherwise try afresh every call.
        size, skip, wait = self._run_backoff
        use_run = self._fold_path_allowed("run") and self._path != "reference"
        pinned = self._path == "run"
        while i < n:
            j = i
            tried = False
            if wait > 0:
                wait -= 1
            elif use_run and n - i > 1:
                j = self._fold_run(batches, nows, i, size)
                tried = True
            if j == i:
                if tried and not pinned:  # a failed try: back off
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
        self._run_backoff = (size, skip, wait)

    def _prepare(self, batch: SampleBatch) -> tuple | None:
        """Clean angles and sample times, linear power, window-relative bin index and
        offset in the bin (bins, -1/2 .. 1/2) of every sample, and the window: ``(a, t,
        lin, idx, off, i0, span, seam, lo, hi)``, or None for a batch with no usable
        sample."""
        # float64 throughout: the bin window relies on scalar and array index arithmetic
        # agreeing exactly (a no-op for the usual float64 arrays).
        a = np.asarray(batch.angle_deg, dtype=np.float64)
        p = np.asarray(batch.power_db, dtype=np.float64)
        t = batch.t
        if a.shape[0] == 0:
            return None
        lo = float(a.min())
        hi = float(a.max())
        if not (-180.0 <= lo and hi < 180.0 and math.isfinite(float(p.sum()))):
            a, p, t = _clean(a, p, t)
            if a.shape[0] == 0:
                return None
            lo = float(a.min())
            hi = float(a.max())
        lin = p * _LN_POWER_PER_DB
        np.exp(lin, out=lin)
        # The window of bins [i0, i0 + span) the batch touches, so the cost does not grow
        # with the number of bins.  Index nb (just below +180) is bin 0.  The scalar and
        # the array index use the same float operations, hence agree.
        c0 = self._c0_bins
        i0, i1 = _window(lo, hi, self._bins_per_deg, c0)
        seam = i1 >= self._nb
        if seam:
            i0 = 0
        x = a * self._bins_per_deg
        x += c0
        idx = x.astype(np.intp)
        if i0:
            idx -= i0
        # Where in its bin each sample fell: a bin's angle is its samples' mean angle,
        # not its centre, so a steering grid that does not line up with the bins
        # (0.5-degree steps in 1-degree bins) gives no bias.
        x -= idx
        x -= i0 + 0.5
        return a, t, lin, idx, x, i0, i1 - i0 + 1, seam, lo, hi

    # -- fold path: vector ------------------------------------------------------------
    def _fold_vector(self, u: np.ndarray, u_lo: float, u_hi: float, b: int, idx: np.ndarray,
                     lin: np.ndarray, off: np.ndarray, i0: int, seam: bool, s: np.ndarray,
                     c: np.ndarray, so: np.ndarray, now: float, t: np.ndarray) -> None:
        """Any batch: the sweep in progress gets each stretch between sweep ends (the
        first end at ``b``, -1 for none; ``t[b]`` the sample time there), the averages
        get the whole batch's bin sums."""
        win = slice(i0, i0 + s.shape[0])
        if b < 0:
            self._sw_lo_deg = min(self._sw_lo_deg, u_lo)
            self._sw_hi_deg = max(self._sw_hi_deg, u_hi)
            self._add_sums(win, s, c, so)
        else:
            n = u.shape[0]
            k = 0
            while b >= 0:
                if b > k:
                    self._add_stretch(u[k:b], idx[k:b], lin[k:b], off[k:b], win, seam)
                self._end_sweep(now, float(t[b]))
                k = b
                b = self._det.next_boundary(u, b + 1, math.nan, math.nan) if b + 1 < n else -1
            self._add_stretch(u[k:], idx[k:], lin[k:], off[k:], win, seam)
        tl = np.flatnonzero(c)
        tb = tl + i0 if i0 else tl
        lt = self._last_t[tb]
        if self._ema:
            self._average_vector(tb, s[tl], c[tl].astype(np.float64), lt, now)
        if now > self._now_max:
            self._last_t[tb] = now
            self._now_max = now
        else:
            self._last_t[tb] = np.maximum(lt, now)

    def _average_vector(self, tb: np.ndarray, ss: np.ndarray, cs: np.ndarray, lt: np.ndarray,
                        now: float) -> None:
        """Apply the recurrence of the class docstring to the touched bins ``tb``."""
        if now <= self._now_max and (merge := lt >= now).any():
            pp = np.where(merge, self._p_prev[tb], self._p[tb])
            al = np.where(merge, self._alpha[tb],
                          -np.expm1((lt - now) * self._inv_tau_per_s))
            ss = ss + np.where(merge, self._u_sum[tb], 0.0)
            cs = cs + np.where(merge, self._u_cnt[tb], 0.0)
        else:
            pp = self._p[tb]
            # lt = -inf (never filled) gives alpha = 1, hence P = x.
            al = -np.expm1((lt - now) * self._inv_tau_per_s)
        self._p[tb] = pp + al * (ss / cs - pp)
        self._p_prev[tb] = pp
        self._alpha[tb] = al
        self._u_sum[tb] = ss
        self._u_cnt[tb] = cs

    def _add_sums(self, win: slice, s: np.ndarray, c: np.ndarray, so: np.ndarray) -> None:
        """Add a window's bin sums to the sweep in progress and the bins' mean angles."""
        self._sw_sum[win] += s
        self._sw_cnt[win] += c
        self._off_sum_bins[win] += so
        self._off_cnt[win] += c
        self._sw_off_bins[win] += so

    def _add_stretch(self, u: np.ndarray, idx: np.ndarray, lin: np.ndarray, off: np.ndarray,
                     win: slice, seam: bool) -> None:
        """Add samples (continuous angles, window-relative bin indices, offsets in their
        bins) to the sweep in progress and to the bins' mean angles."""
        self._sw_lo_deg = min(self._sw_lo_deg, float(u.min()))
        self._sw_hi_deg = max(self._sw_hi_deg, float(u.max()))
        span = win.stop - win.start + (1 if seam else 0)
        self._add_sums(win, *self._bin_sums(idx, lin, off, span, seam))

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

    # -- fold path: scalar ------------------------------------------------------------
    def _fold_scalar(self, i0: int, sums: list[float], counts: list[int], now: float,
                     offs: list[float] | None = None) -> None:
        """A batch within a few bins and no sweep end: the vector path's arithmetic on
        Python floats per touched bin (with ``offs``, the bins' offset sums too; the run
        path adds those itself).  A bin no sample reached would only add zero."""
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
                self._off_sum_bins[b] += oj
                self._off_cnt[b] += cj
                self._sw_off_bins[b] += oj
            sj = sums[j]
            sw_sum[b] += sj
            sw_cnt[b] += cj
            lt = float(last_t[b])
            if ema:
                self._average_scalar(b, sj, cj, lt, now, later)
            if now > lt:
                last_t[b] = now

    def _average_scalar(self, b: int, sj: float, cj: float, lt: float, now: float,
                        later: bool) -> None:
        """The recurrence of the class docstring for one bin, on Python floats."""
        if later or lt < now:
            pp = float(self._p[b])
            al = -math.expm1((lt - now) * self._inv_tau_per_s)
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

    # -- fold path: run ---------------------------------------------------------------
    def _fold_run(self, batches: Sequence[SampleBatch], nows: Sequence[float],
                  start: int, size: int) -> int:
        """Fold in the longest run (at most ``size``) of equal-length batches from
        ``start`` that the scalar path would take one by one and that cross no seam;
        returns the index after it (``start``: none taken)."""
        det = self._det
        if det.direction == 0 or det.turning or det.seam_turns != 0:
            return start
        m = len(batches[start])
        a0 = batches[start].angle_deg
        if m and not self._few_bins(float(a0.min()), float(a0.max())):
            return start  # the first batch alone spans too many bins: no run here
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
        d = det.direction
        back = (np.less if d > 0 else np.greater)(A[:, 1:], A[:, :-1]).any(axis=1).tolist()
        bpd, c0, nb = self._bins_per_deg, self._c0_bins, self._nb
        i0s: list[int] = []
        spans: list[int] = []
        # update()'s decisions per batch, in order (the detector's own checks); the run
        # ends before the first batch that would take another path.
        for k in range(n_run):
            lo, hi = los[k], his[k]
            if not (-180.0 <= lo and hi < 180.0):
                break
            i0, i1 = _window(lo, hi, bpd, c0)
            if i1 >= nb or i1 - i0 + 1 > _FEW_BINS:
                break
            if not det.may_skip_unwrap(lo, hi, firsts[k]):
                break
            if not det.take_quiet(lo, hi, firsts[k], back[k]):
                break
            det.last_angle_deg = lasts[k]
            i0s.append(i0)
            spans.append(i1 - i0 + 1)
        e = len(i0s)
        if e == 0:
            return start
        lin = P[:e] * _LN_POWER_PER_DB
        np.exp(lin, out=lin)
        x = A[:e] * bpd
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
        np.add.at(self._off_sum_bins, gbin, so_used)
        np.add.at(self._off_cnt, gbin, c_all[used].astype(np.float64))
        np.add.at(self._sw_off_bins, gbin, so_used)
        sums = s_all.tolist()
        counts = c_all.tolist()
        for k in range(e):
            self._samples += m
            self._sw_lo_deg = min(self._sw_lo_deg, los[k])
            self._sw_hi_deg = max(self._sw_hi_deg, his[k])
            o = k * _FEW_BINS
            self._fold_scalar(i0s[k], sums[o:o + spans[k]], counts[o:o + spans[k]],
                              float(nows[start + k]))
        return start + e

    def _few_bins(self, lo: float, hi: float) -> bool:
        """Whether angles in [lo, hi] fall within ``_FEW_BINS`` bins without crossing
        the seam (the run path's condition on each batch)."""
        if not (-180.0 <= lo and hi < 180.0):
            return False
        i0, i1 = _window(lo, hi, self._bins_per_deg, self._c0_bins)
        return i1 < self._nb and i1 - i0 + 1 <= _FEW_BINS

    # -- the reference: every fold path, stated plainly --------------------------------
    def _fold_reference(self, batch: SampleBatch, now: float) -> None:
        """What every fold path computes, one sample at a time in plain Python: the same
        float operations in the same order (bin sums in sample order, the seam bin's
        sum added to bin 0's after), no shortcuts.  Slow; for tests only."""
        prep = self._prepare(batch)
        if prep is None:
            return
        a, t, lin, idx, off, i0, _, seam, _, _ = prep
        now = float(now)
        det = self._det
        self._samples += int(a.shape[0])
        a_l, lin_l, idx_l, off_l = a.tolist(), lin.tolist(), idx.tolist(), off.tolist()
        t_l = np.asarray(t, dtype=np.float64).tolist()

        def sums(lo: int, hi: int) -> dict[int, list]:
            """Touched bin -> [sum, count, offset sum], added in sample order; the
            seam index n_bins is folded onto bin 0 after."""
            acc: dict[int, list] = {}
            for i in range(lo, hi):
                e = acc.setdefault(idx_l[i], [0.0, 0, 0.0])
                e[0] += lin_l[i]
                e[1] += 1
                e[2] += off_l[i]
            top = acc.pop(self._nb, None) if seam else None
            if top is not None:
                e = acc.setdefault(0, [0.0, 0, 0.0])
                e[0] += top[0]
                e[1] += top[1]
                e[2] += top[2]
            return acc

        def add(lo: int, hi: int) -> None:
            for j, (sj, cj, oj) in sums(lo, hi).items():
                self._sw_sum[i0 + j] += sj
                self._sw_cnt[i0 + j] += cj
                self._off_sum_bins[i0 + j] += oj
                self._off_cnt[i0 + j] += cj
                self._sw_off_bins[i0 + j] += oj

        k = 0
        for i, ai in enumerate(a_l):
            u = det.unwrap_one(ai)
            if det.step(u):
                add(k, i)
                self._end_sweep(now, t_l[i])
                k = i
            self._sw_lo_deg = min(self._sw_lo_deg, u)
            self._sw_hi_deg = max(self._sw_hi_deg, u)
        add(k, len(a_l))
        later = now > self._now_max
        for j, (sj, cj, _) in sorted(sums(0, len(a_l)).items()):
            b = i0 + j
            lt = float(self._last_t[b])
            if self._ema:
                self._average_scalar(b, sj, cj, lt, now, later)
            self._last_t[b] = max(lt, now)
        self._now_max = max(self._now_max, now)

    # -- sweeps -----------------------------------------------------------------------
    def _end_sweep(self, now: float, t_end: float) -> None:
        """Close the sweep in progress: count, measure and record it (the sweep log pools
        sweeps faster than ``MIN_RECORD_S``), or, if it filled too few bins, keep its
        samples for the next sweep."""
        cnt = self._sw_cnt
        filled = np.flatnonzero(cnt)
        if filled.shape[0] < MIN_SWEEP_BINS:
            return
        recorded, peak = self._log.close(self._sw_sum, cnt, self._sw_off_bins,
                                         self._sw_lo_deg, self._sw_hi_deg, now, t_end)
        if recorded:
            self._det.sweep_measured(peak)
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
        self._sw_off_bins = np.zeros(self._nb)
        self._sw_lo_deg = math.inf
        self._sw_hi_deg = -math.inf

    # -- readout ----------------------------------------------------------------------
    def _bin_angle(self, sel: np.ndarray) -> np.ndarray:
        """Mean angle of the samples that fell in bins ``sel`` (all samples so far: the
        angle grid of a sweep does not change with time), in degrees."""
        n = self._off_cnt[sel]
        off = self._off_sum_bins[sel] / np.where(n > 0, n, 1.0)
        return self._centres_deg[sel] + off * self.config.bin_width_deg

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


def _clean(a: np.ndarray, p: np.ndarray, t: np.ndarray
           ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Angles wrapped into [-180, 180) and samples with a non-finite value dropped
    (with their times).

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
        t = np.asarray(t)[ok]
    return a, p, t


def _window(lo_deg: float, hi_deg: float, bins_per_deg: float, c0_bins: float) -> tuple[int, int]:
    """First and last bin index of angles in [lo, hi] (before the
    seam fold): ``int(a / w + 180 / w + 1/2)``, the same float operations as the arrays."""
    return int(lo_deg * bins_per_deg + c0_bins), int(hi_deg * bins_per_deg + c0_bins)
