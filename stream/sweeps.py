"""Sweep detection: where one sweep of a moving beam ends and the next begins.

:class:`SweepDetector` owns the direction state (which way the angle moves, the furthest
angle reached, the sweep's extent, the seam crossings, turning-mount mode) and decides,
sample by sample and causally, where sweeps end -- so batch boundaries never change the
answer.  The estimator (``stream.estimator``) asks it for the next boundary in a batch and
folds samples in between; it never touches the direction state itself.

Rules (the same as before the split, now in one place):

* angles are followed on the continuous axis ``u = a + 360 k``, where ``k`` counts
  crossings of the +-180 seam (a step of more than 180 deg between two samples is taken
  as the short way round), so a sector facing the seam is one sweep, not two;
* moving up, a sample more than the hysteresis ``h`` below the highest angle reached is
  a reversal and starts a new sweep the other way (moving down: symmetric); this also
  catches the fly-back of a sawtooth;
* once a sweep's extent reaches 360 deg the source is a turning mount: that sweep and
  every later one end where the angle crosses the cut angle (+-180, or 0 when the last
  turn's peak faced backwards, see :meth:`SweepDetector.sweep_measured`).  A reversal
  ends this mode.

:meth:`SweepDetector.next_boundary` is the vectorised scan; :meth:`SweepDetector.step`
is the plain per-sample rule it must agree with bit for bit (tests/test_estimator.py).
"""

from __future__ import annotations

import math

import numpy as np

#: A sweep whose extent reaches this is a full turn (a turning mount), degrees.
FULL_TURN_DEG: float = 360.0 - 1e-9

#: First chunk scanned for a sweep end; later chunks double.
_SCAN_CHUNK: int = 256


class SweepDetector:
    """Direction state of a swept beam and the one rule for where sweeps end.

    ``hysteresis_deg`` is the smallest retreat from the furthest angle reached that
    counts as a reversal.
    """

    __slots__ = ("hysteresis_deg", "direction", "ext_deg", "lo_deg", "hi_deg", "seam_turns",
                 "turning", "cut_deg", "next_cut_deg", "last_angle_deg")

    def __init__(self, hysteresis_deg: float) -> None:
        self.hysteresis_deg = float(hysteresis_deg)
        self.reset()

    def reset(self) -> None:
        """Forget the direction, the extent, the seam count and turning-mount mode."""
        self.direction = 0                 # +1 up, -1 down, 0 not yet known
        self.ext_deg = math.nan            # furthest continuous angle in the direction
        self.lo_deg = math.inf             # extent of the sweep so far (continuous)
        self.hi_deg = -math.inf
        self.seam_turns = 0                # k in u = a + 360 k
        self.turning = False               # a full turn seen: a turning mount
        self.cut_deg = -180.0              # turning: where turns are cut
        self.next_cut_deg = math.inf       # turning: u of the next cut
        self.last_angle_deg = math.nan     # last wrapped angle seen

    # -- the continuous axis ------------------------------------------------------------
    def may_skip_unwrap(self, lo_deg: float, hi_deg: float, first_deg: float) -> bool:
        """True when a batch of wrapped angles in [lo, hi] starting at ``first`` crosses
        no seam (no step between consecutive samples can exceed 180 deg)."""
        return hi_deg - lo_deg <= 180.0 and not abs(first_deg - self.last_angle_deg) > 180.0

    def unwrap(self, angle_deg: np.ndarray, lo_deg: float,
               hi_deg: float) -> tuple[np.ndarray, float, float]:
        """The batch on the continuous axis and its range; records the seam crossings."""
        a = angle_deg
        if self.may_skip_unwrap(lo_deg, hi_deg, float(a[0])):
            self.last_angle_deg = float(a[-1])
            k = self.seam_turns
            if k == 0:
                return a, lo_deg, hi_deg
            off = 360.0 * k
            return a + off, lo_deg + off, hi_deg + off
        last = self.last_angle_deg
        self.last_angle_deg = float(a[-1])
        d = np.empty(a.shape[0])
        d[0] = float(a[0]) - last if last == last else 0.0
        np.subtract(a[1:], a[:-1], out=d[1:])
        cross = (d < -180.0).astype(np.int64)
        cross -= d > 180.0
        kk = np.cumsum(cross)
        kk += self.seam_turns
        self.seam_turns = int(kk[-1])
        u = a + 360.0 * kk
        return u, float(u.min()), float(u.max())

    def unwrap_one(self, angle_deg: float) -> float:
        """Plain per-sample twin of :meth:`unwrap`."""
        last = self.last_angle_deg
        d = angle_deg - last if last == last else 0.0
        self.seam_turns += (d < -180.0) - (d > 180.0)
        self.last_angle_deg = angle_deg
        return angle_deg + 360.0 * self.seam_turns

    # -- the shared quiet-batch check ---------------------------------------------------
    def take_quiet(self, lo_deg: float, hi_deg: float, first_deg: float,
                   backward: bool | None, seg: np.ndarray | None = None) -> bool:
        """Consume a stretch of continuous angles in [lo, hi] starting at ``first`` if it
        cannot hold a sweep end, and say whether it did.

        Quiet means: the direction is known; no cut (turning) or full turn (not turning)
        is reached; and either every angle lies within ``h`` of the furthest point, or
        the stretch starts within ``h`` of it and never steps ``backward`` (computed from
        ``seg`` when None).  Both the batch and the run fold paths ask this, so they
        cannot disagree about which batches are quiet.
        """
        d = self.direction
        if d == 0:
            return False
        ext, h = self.ext_deg, self.hysteresis_deg
        if self.turning:
            if not (hi_deg < self.next_cut_deg if d > 0 else lo_deg > self.next_cut_deg):
                return False
        elif not max(self.hi_deg, hi_deg) - min(self.lo_deg, lo_deg) < FULL_TURN_DEG:
            return False
        if d > 0:
            if not lo_deg >= max(ext, hi_deg) - h:
                if not first_deg >= ext - h:
                    return False
                if backward is None:
                    backward = bool(np.less(seg[1:], seg[:-1]).any())  # type: ignore[index]
                if backward:
                    return False
            self.ext_deg = max(ext, hi_deg)
        else:
            if not hi_deg <= min(ext, lo_deg) + h:
                if not first_deg <= ext + h:
                    return False
                if backward is None:
                    backward = bool(np.greater(seg[1:], seg[:-1]).any())  # type: ignore[index]
                if backward:
                    return False
            self.ext_deg = min(ext, lo_deg)
        self.lo_deg = min(self.lo_deg, lo_deg)
        self.hi_deg = max(self.hi_deg, hi_deg)
        return True

    # -- where sweeps end -------------------------------------------------------------
    def next_boundary(self, u: np.ndarray, k: int, lo_deg: float, hi_deg: float) -> int:
        """Index of the first sample at or after ``k`` in ``u`` (continuous angles) that
        starts a new sweep, or -1; consumes the samples up to it.  ``lo``/``hi`` are the
        range of ``u[k:]`` when known (else NaN).

        One vectorised scan per event, after the quiet-batch shortcut."""
        if lo_deg != lo_deg:
            lo_deg = float(u[k:].min())
            hi_deg = float(u[k:].max())
        if self.take_quiet(lo_deg, hi_deg, float(u[k]), None, u[k:]):
            return -1
        h = self.hysteresis_deg
        n = u.shape[0]
        d = self.direction
        ext = self.ext_deg
        e_lo, e_hi = self.lo_deg, self.hi_deg
        # Chunks that start small and double: a batch full of reversals (junk, or a
        # jittering encoder) costs O(chunk) per reversal instead of O(rest of batch),
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
            if self.turning:
                hit |= (seg >= self.next_cut_deg) if d > 0 else (seg <= self.next_cut_deg)
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
                hit |= extent >= FULL_TURN_DEG
            j = int(hit.argmax())
            if not hit[j]:
                ext = float(run[-1])
                e_lo = min(e_lo, float(seg.min()))
                e_hi = max(e_hi, float(seg.max()))
                k += m
                continue
            x = float(seg[j])
            if back[j] > h:
                self._reverse(x, d)
                return k + j
            if self.turning:
                self._cut(x, d)
                return k + j
            self._start_turning(x, d)
            ext = float(run[j])
            e_lo = min(e_lo, float(seg[:j + 1].min()))
            e_hi = max(e_hi, float(seg[:j + 1].max()))
            k += j + 1
        self.direction = d
        self.ext_deg = ext
        self.lo_deg = e_lo
        self.hi_deg = e_hi
        return -1

    def step(self, u: float) -> bool:
        """Plain per-sample rule (the reference for :meth:`next_boundary`): take one
        continuous angle and say whether it starts a new sweep."""
        d, h = self.direction, self.hysteresis_deg
        if d == 0:
            if math.isnan(self.ext_deg):
                self.ext_deg = self.lo_deg = self.hi_deg = u
                return False
            if abs(u - self.ext_deg) > h:
                self.direction = 1 if u - self.ext_deg > 0 else -1
                self.ext_deg = u
            self.lo_deg = min(self.lo_deg, u)
            self.hi_deg = max(self.hi_deg, u)
            return False
        run = max(self.ext_deg, u) if d > 0 else min(self.ext_deg, u)
        back = run - u if d > 0 else u - run
        if back > h:
            self._reverse(u, d)
            return True
        lo, hi = min(self.lo_deg, u), max(self.hi_deg, u)
        if self.turning:
            if (u >= self.next_cut_deg) if d > 0 else (u <= self.next_cut_deg):
                self._cut(u, d)
                return True
        elif (run - lo if d > 0 else hi - run) >= FULL_TURN_DEG:
            self._start_turning(u, d)
        self.ext_deg, self.lo_deg, self.hi_deg = run, lo, hi
        return False

    def _reverse(self, u: float, d: int) -> None:
        """A reversal at ``u``: a new sweep the other way (ends turning-mount mode)."""
        self.direction, self.ext_deg, self.lo_deg, self.hi_deg = -d, u, u, u
        self.turning = False

    def _cut(self, u: float, d: int) -> None:
        """The cut angle reached at ``u``: a new turn the same way."""
        self.direction, self.ext_deg, self.lo_deg, self.hi_deg = d, u, u, u
        self.next_cut_deg += 360.0 * d

    def _start_turning(self, u: float, d: int) -> None:
        """The sweep has gone all the way round: from here on turns are cut at the cut
        angle (away from the beam), starting with the next one."""
        self.turning = True
        self.next_cut_deg = _beyond(u, self.cut_deg, d)

    def sweep_measured(self, peak_angle_deg: float | None) -> None:
        """After a turn is measured: cut turns in the half circle behind its beam."""
        if not self.turning or peak_angle_deg is None:
            return
        cut = 0.0 if abs(peak_angle_deg) > 90.0 else -180.0
        if cut != self.cut_deg:
            self.cut_deg = cut
            self.next_cut_deg = _beyond(self.ext_deg, cut, self.direction)


def _beyond(u_deg: float, cut_deg: float, direction: int) -> float:
    """The first angle ``cut_deg + 360 m`` strictly beyond ``u`` in ``direction``."""
    if direction > 0:
        return cut_deg + 360.0 * (math.floor((u_deg - cut_deg) / 360.0) + 1)
    return cut_deg + 360.0 * (math.ceil((u_deg - cut_deg) / 360.0) - 1)
