"""Beam metrics of one sampled power pattern: the numbers an installer acts on.

Input is angle in degrees and power in dB (dBm or uncalibrated dB), in any order, with
irregular spacing, duplicates, NaN gaps, and either a sector sweep or a full turn of a
rotating mount.  Output is a :class:`stream.beam.BeamMetrics`; a value the data cannot
determine is ``None`` and ``reasons`` says why.  Pure numpy, vectorised: no Python loop
per sample (a 3,600-point pattern takes a fraction of a millisecond, see
bench/bench_metrics.py).

Preparation: NaN samples are dropped; angles equal to within ``DUPLICATE_TOL_DEG``
(modulo 360) are merged by averaging their *linear* power, 10 log10(mean 10^(p/10)).

Definitions (terms of IEEE Std 145, definitions of terms for antennas; the procedures
are common practice):

* peak: the highest sample, refined by the parabola (in dB) through it and its two
  neighbours (sub-step direction and level).  A highest sample on the edge of a sector
  sweep gives ``None`` everywhere: the beam may point outside the sweep;
* half-power beamwidth: distance between the two points where the pattern crosses
  exactly ``HALF_POWER_DB`` (10 log10 0.5) below the refined peak, each found by linear
  interpolation in dB between the samples that bracket it.  A side that crosses the
  level several times (noise, a shoulder) uses the mean of the innermost and the
  outermost crossing inside the main lobe (identical on clean data);
* ``bw10_deg``: the same at -10 dB, inside the first nulls;
* first-null beamwidth: distance between the first minima either side of the main
  lobe.  A minimum counts once the pattern has risen again by a hysteresis above it
  (:func:`_hysteresis_db`: 1 dB on clean data, more on noisy data).  The minimum is
  refined by a V fit in linear amplitude (a simple null is a straight-line zero of the
  field amplitude);
* side lobe level: highest lobe outside the first nulls, parabola-refined, relative to
  the peak (negative dB).  In a sector sweep a side maximum on the edge of the span is
  not a lobe peak (the lobe may continue outside): ``None``;
* front-to-back ratio: peak minus the highest level within +/-``BACK_WINDOW_DEG`` of
  the direction opposite the peak (a window around the back direction is common
  practice for rotating-mount measurements), only when a sample lies within
  ``BACK_COVER_DEG`` of that direction.

Noisy data: when the main lobe above half power holds at least 9 samples and a
least-squares quartic through them leaves more than ``_NOISE_DB`` rms (clean lobes,
steered and tapered ones included, leave < 0.01 dB), the peak is taken from that
quartic, the lobes are walked on a Savitzky-Golay (quadratic) smoothing over about a
third of the beamwidth, and the side lobe top is a least-squares parabola.  Accuracy reached is
stated in tests/test_pattern.py.

Angles are reported in the input's own frame for a sector sweep that does not cross
the +/-180 (or 0/360) seam; a full turn, or a sweep across the seam, is reported in
[-180, 180).  A full turn is recognised when no gap around the circle exceeds
``_CIRCLE_GAP_FACTOR`` times the mean of the other steps; it then has no edges, and a
beam at +/-180 deg is one lobe.
"""

from __future__ import annotations

import math

import numpy as np

from stream.batch import mod360, wrap180
from stream.beam import HALF_POWER_DB, METRIC_KEYS, BeamMetrics
from stream.lobe_fits import lsq_parabola_vertex, quartic_peak, savgol_smooth
from stream.uncertainty import with_uncertainty

#: Level of the -10 dB beamwidth, dB.
BW10_DB: float = -10.0
#: Half width of the window around the back direction searched for the back level, deg.
BACK_WINDOW_DEG: float = 10.0
#: The back direction counts as covered when a sample lies this close to it, deg.
BACK_COVER_DEG: float = 5.0
#: Angles closer than this are the same angle (averaged in linear power), deg.
DUPLICATE_TOL_DEG: float = 1e-9
#: A sweep closes the circle when its largest gap is at most this many typical steps.
_CIRCLE_GAP_FACTOR: float = 2.0
#: A side lobe fitted this far above the fitted peak means no main lobe can be named;
#: up to it, an equal lobe (a grating lobe) gives sll_db = 0.
_SLL_ABOVE_PEAK_DB: float = 0.1
#: Power spread below which a pattern is flat (no beam), dB.
_FLAT_DB: float = 1e-9
#: Bounds of the null-detection hysteresis, dB (see :func:`_hysteresis_db`).
_RISE_MIN_DB: float = 1.0
_RISE_MAX_DB: float = 6.0
_RISE_NOISE_FACTOR: float = 5.0
#: A main lobe sampled by fewer points than this is "coarse": rise capped at
#: _RISE_COARSE_DB (a side lobe sampled every 5 deg may show only a few dB of rise).
_COARSE_LOBE_SAMPLES: int = 12
_RISE_COARSE_DB: float = 2.0
#: Residual (dB rms) of a quartic through the main lobe above half power beyond which
#: the data are treated as noisy (clean lobes leave < 0.01 dB).
_NOISE_DB: float = 0.02


def measure(angle_deg: np.ndarray, power_db: np.ndarray, *,
            uncertainty: bool = True) -> BeamMetrics:
    """Measure peak, beamwidths, side lobe level and front-to-back of one pattern.

    Raises ``ValueError`` only when the two arrays differ in shape; any pattern the
    data cannot characterise (too few samples, flat, beam outside the sweep) gives
    ``None`` values with reasons.  Two passes: :func:`_clean_pass` (3-point parabola
    peak [2], level crossings by linear interpolation in dB), then, when the quartic
    residual above half power exceeds ``_NOISE_DB``, :func:`_noisy_pass` (least-squares
    quartic peak, Savitzky-Golay smoothed walk [3], least-squares side lobe top).
    ``uncertainty=False`` leaves out the one-sigma uncertainties (the estimator's
    per-sweep records need only peak and width: half the time of a readout's measure).

    Returns:
        BeamMetrics: angles (``peak_angle_deg``, ``hpbw_left_deg``/``_right_deg``,
        ``sll_angle_deg``) in degrees in the input's frame (see the module docstring);
        widths (``hpbw_deg``, ``bw10_deg``, ``fnbw_deg``) in degrees; ``peak_power_db``
        in the input's unit (dBm or dB); ``sll_db`` and ``front_to_back_db`` in dB
        relative to the peak; ``reasons`` a sentence per ``None`` value.

    References:
        [1] IEEE Std 145-2013, IEEE Standard for Definitions of Terms for Antennas
            (half-power beamwidth, side lobe level, front-to-back ratio).
        [2] Three-point parabolic interpolation of a sampled maximum: common practice
            (e.g. J. O. Smith, *Spectral Audio Signal Processing*, "Quadratic
            Interpolation of Spectral Peaks" -- from memory).
        [3] A. Savitzky, M. J. E. Golay, "Smoothing and differentiation of data by
            simplified least squares procedures", Anal. Chem. 36(8), 1964.
    """
    frame = _frame_or_reason(angle_deg, power_db)
    if isinstance(frame, BeamMetrics):
        return frame
    fit = _clean_pass(frame)
    if fit.right.hp is not None and fit.left.hp is not None:
        _noisy_pass(frame, fit)
    metrics = _report(frame, fit)
    if not uncertainty:
        return metrics
    # one-sigma uncertainty of peak, HPBW and SLL (and step caveats): stream.uncertainty
    return with_uncertainty(metrics, frame.x_pk + frame.r, frame.pr)


class _Frame:
    """A pattern re-centred on its highest sample: ``r`` offsets from it (deg, sorted),
    ``pr`` power (dB), ``ic`` the peak's index, ``x_pk`` its angle."""

    __slots__ = ("r", "pr", "ic", "x_pk", "circular", "report_wrapped")

    def __init__(self, r: np.ndarray, pr: np.ndarray, ic: int, x_pk: float, circular: bool,
                 report_wrapped: bool) -> None:
        self.r, self.pr, self.ic, self.x_pk = r, pr, ic, x_pk
        self.circular, self.report_wrapped = circular, report_wrapped


class _Fit:
    """What a pass found: peak offset ``v_r`` (deg) and level ``pk_db``, the series the
    lobes were walked on ``ps``, both sides, the side lobe index and its top ``sl``."""

    __slots__ = ("v_r", "pk_db", "ps", "right", "left", "k_sl", "sl_edge", "sl")

    def __init__(self, v_r: float, pk_db: float, ps: np.ndarray, right: _Side, left: _Side,
                 k_sl: int | None, sl_edge: bool, sl: tuple[float, float] | None) -> None:
        self.v_r, self.pk_db, self.ps = v_r, pk_db, ps
        self.right, self.left, self.k_sl, self.sl_edge, self.sl = right, left, k_sl, sl_edge, sl


def _frame_or_reason(angle_deg: np.ndarray, power_db: np.ndarray) -> _Frame | BeamMetrics:
    """Finite samples, merged duplicates, re-centred on the highest; or empty metrics
    saying why the data cannot be measured."""
    a = np.asarray(angle_deg, dtype=np.float64)
    p = np.asarray(power_db, dtype=np.float64)
    if a.shape != p.shape:
        raise ValueError(f"angle_deg has shape {a.shape} but power_db has shape {p.shape}")
    a = a.reshape(-1)
    p = p.reshape(-1)
    if not math.isfinite(float(a.sum()) + float(p.sum())):  # a NaN or inf somewhere
        ok = np.isfinite(a) & np.isfinite(p)
        a = a[ok]
        p = p[ok]
    if a.size < 3:
        return BeamMetrics.empty(
            f"only {a.size} usable sample(s); at least 3 are needed to measure a beam")
    x, p, circular, report_wrapped = _frame(a, p)
    n = x.size
    if n < 3:
        return BeamMetrics.empty(
            f"only {n} distinct angle(s); at least 3 are needed to measure a beam")
    spread = float(p.max() - p.min())
    if spread <= _FLAT_DB:
        return BeamMetrics.empty(
            f"all {n} angles have the same power ({p[0]:.2f} dB): there is no beam to measure")

    i = int(p.argmax())
    if not circular and (i == 0 or i == n - 1):
        edge = _out(x[i], report_wrapped)
        return BeamMetrics.empty(
            f"the highest sample is at the edge of the sweep ({edge:.2f} deg): the main "
            "lobe may lie outside the scanned span; extend the sweep")

    # Re-centre on the peak sample: r is the offset from it, p_r the power.
    x_pk = float(x[i])
    if circular:
        r, pr = _sort_by(wrap180(x - x_pk), p)
        ic = int(r.searchsorted(0.0))
    else:
        r = x - x_pk
        pr = p
        ic = i
    return _Frame(r, pr, ic, x_pk, circular, report_wrapped)


def _clean_pass(f: _Frame) -> _Fit:
    """Peak by the 3-point parabola, lobes walked on the raw samples."""
    r, pr, ic, circular = f.r, f.pr, f.ic, f.circular
    v_r, pk_db = _vertex(r, pr, ic, circular)
    # Samples out to the outermost half-power crossings (side lobes stay below -3 dB):
    # few means a coarse sweep, whose side lobes may rise only a few dB between
    # sampled nulls.
    above = pr >= pk_db + HALF_POWER_DB
    lobe_samples = (above[ic:].size - int(above[ic:][::-1].argmax())
                    + above[:ic + 1].size - int(above[:ic + 1].argmax()))
    rise = _hysteresis_db(pr)
    if lobe_samples < _COARSE_LOBE_SAMPLES:
        rise = min(rise, _RISE_COARSE_DB)
    right, left, k_sl, sl_edge = _lobes(r, pr, ic, pk_db, rise, circular)
    sl = _vertex(r, pr, k_sl, circular) if k_sl is not None and not sl_edge else None
    return _Fit(v_r, pk_db, pr, right, left, k_sl, sl_edge, sl)


def _noisy_pass(f: _Frame, fit: _Fit) -> None:
    """Noisy data: a 3-point parabola would follow the noise.  When the main lobe above
    half power holds enough samples and a least-squares quartic through them (which
    fits a clean lobe, steered and asymmetric ones included, to a few mdB) leaves
    residuals above _NOISE_DB, take the peak from that quartic, walk a smoothed series,
    and fit the side lobe top by least squares (updates ``fit``; clean data leave it)."""
    r, pr, circular = f.r, f.pr, f.circular
    right, left = fit.right, fit.left
    half = 0.5 * (right.hp + left.hp)  # type: ignore[operator]
    ctr = 0.5 * (right.hp - left.hp)  # type: ignore[operator]
    top = quartic_peak(r, pr, ctr, half, circular, peak_above_rms=_NOISE_DB)
    if top is None or top[2] <= _NOISE_DB:
        return
    ps = pr
    k_sl, sl_edge = fit.k_sl, fit.sl_edge
    # Two passes: the second sizes its windows from the first's beamwidth (the raw
    # walk's width is biased narrow by noise).
    k_done = 0
    for npass in range(2):
        if npass:
            top = quartic_peak(r, pr, ctr, half, circular) or top
        sigma, cnt = top[2], top[3]
        v_r, pk_db = top[0], top[1]
        k = 2 * (cnt // 12) + 1
        if k != k_done:
            ps = savgol_smooth(pr, 2 * k - 1, circular) if k >= 3 else pr
            k_done = k
        j = int(np.abs(r - v_r).argmin())
        rise = max(_RISE_MIN_DB, _RISE_NOISE_FACTOR * sigma / math.sqrt(k))
        right, left, k_sl, sl_edge = _lobes(r, ps, j, pk_db, rise, circular)
        # Offsets from sample j -> offsets from the peak sample.
        right.shift(float(r[j]))
        left.shift(-float(r[j]))
        if right.hp is None or left.hp is None:
            break
        new_half = 0.5 * (right.hp + left.hp)
        converged = abs(new_half - half) <= 0.05 * half
        half = new_half
        ctr = 0.5 * (right.hp - left.hp)
        if converged:
            break
    if right.hp is not None and left.hp is not None and not (-left.hp <= v_r <= right.hp):
        v_r = 0.5 * (right.hp - left.hp)  # fit ran off the lobe: use its centre
    sl = None
    if k_sl is not None and not sl_edge:
        f2 = lsq_parabola_vertex(r, pr, float(r[k_sl]), 0.5 * half, circular)
        sl = (f2[0], f2[1]) if f2 is not None else _vertex(r, ps, k_sl, circular)
    fit.v_r, fit.pk_db, fit.ps = v_r, pk_db, ps
    fit.right, fit.left, fit.k_sl, fit.sl_edge, fit.sl = right, left, k_sl, sl_edge, sl


def _report(f: _Frame, fit: _Fit) -> BeamMetrics:
    """The metrics (in the input's frame) and a reason for each one left ``None``."""
    r, x_pk, report_wrapped = f.r, f.x_pk, f.report_wrapped
    v_r, pk_db, ps, right, left = fit.v_r, fit.pk_db, fit.ps, fit.right, fit.left
    k_sl, sl = fit.k_sl, fit.sl
    reasons: dict[str, str] = {}
    vals: dict[str, float | None] = dict.fromkeys(METRIC_KEYS)
    vals["peak_angle_deg"] = _out(x_pk + v_r, report_wrapped)
    vals["peak_power_db"] = pk_db
    span_edge = "the pattern never falls {0} below the peak on the {1} side inside the " \
                "scanned span"

    # Half-power beamwidth.
    if right.hp is not None and left.hp is not None:
        vals["hpbw_left_deg"] = _out(x_pk - left.hp, report_wrapped)
        vals["hpbw_right_deg"] = _out(x_pk + right.hp, report_wrapped)
        vals["hpbw_deg"] = right.hp + left.hp
    else:
        side = "left" if left.hp is None else "right"
        why = span_edge.format("3 dB", side)
        for k in ("hpbw_deg", "hpbw_left_deg", "hpbw_right_deg"):
            reasons[k] = why
    if right.bw10 is not None and left.bw10 is not None:
        vals["bw10_deg"] = right.bw10 + left.bw10
    else:
        side = "left" if left.bw10 is None else "right"
        reasons["bw10_deg"] = (span_edge.format("10 dB", side) + " before its first minimum")

    # First-null beamwidth.
    if right.null is not None and left.null is not None:
        vals["fnbw_deg"] = right.null + left.null
    else:
        side = "left" if left.null is None else "right"
        reasons["fnbw_deg"] = (f"no minimum on the {side} side of the main lobe inside the "
                               "scanned span (the pattern keeps falling to its edge)")

    # Side lobe level.
    if k_sl is None:
        reasons["sll_db"] = reasons["sll_angle_deg"] = (
            "no side lobe: the pattern has a single lobe inside the scanned span")
    elif sl is None:
        edge = _out(x_pk + r[k_sl], report_wrapped)
        reasons["sll_db"] = reasons["sll_angle_deg"] = (
            f"the highest side level is on the edge of the sweep ({edge:.2f} deg) and "
            "still rising; the side lobe may lie outside the scanned span")
    elif sl[1] - pk_db > _SLL_ABOVE_PEAK_DB:
        reasons["sll_db"] = reasons["sll_angle_deg"] = (
            f"a lobe outside the main lobe is {sl[1] - pk_db:.1f} dB above it: the data "
            "are too noisy (or show several beams) to name one main lobe")
    else:
        vals["sll_db"] = min(sl[1] - pk_db, 0.0)
        vals["sll_angle_deg"] = _out(x_pk + sl[0], report_wrapped)

    # Front-to-back ratio.
    back = float(vals["peak_angle_deg"]) + 180.0  # type: ignore[arg-type]
    d_back = np.abs(wrap180(r - (v_r + 180.0)))
    if float(d_back.min()) <= BACK_COVER_DEG:
        vals["front_to_back_db"] = pk_db - float(ps[d_back <= BACK_WINDOW_DEG].max())
    else:
        reasons["front_to_back_db"] = (
            f"the data do not cover the back direction ({_wrap(back):.1f} deg, opposite "
            "the peak); sweep the full circle to get the front-to-back ratio")
    return BeamMetrics(**vals, reasons=reasons)  # type: ignore[arg-type]


def sweep_arc(angle_deg: np.ndarray) -> tuple[float, float, bool]:
    """The arc a sweep covers: ``(start_deg, stop_deg, full_circle)``.

    ``stop_deg - start_deg`` is at most 360; a full turn gives ``(-180, 180, True)``.
    The arc is in the frame :func:`measure` reports in, so a model evaluated on a grid
    over it is measured the same way as the data (``lobewatch report`` does this).
    """
    a = np.asarray(angle_deg, dtype=np.float64).reshape(-1)
    a = a[np.isfinite(a)]
    if a.size == 0:
        raise ValueError("no finite angles")
    x, _, circular, _ = _frame(a, np.zeros(a.size))
    if circular:
        return -180.0, 180.0, True
    return float(x[0]), float(x[-1]), False


# -- helpers -------------------------------------------------------------------------


def _wrap(a: float | np.ndarray) -> float | np.ndarray:
    return (a + 180.0) % 360.0 - 180.0


def _out(angle: float, wrapped: bool) -> float:
    """An angle in the reporting frame (see module docstring)."""
    return float(_wrap(angle)) if wrapped else float(angle)


def _frame(a: np.ndarray, p: np.ndarray) -> tuple[np.ndarray, np.ndarray, bool, bool]:
    """Sort, merge duplicates (mean of linear power) and choose the angle frame.

    Returns ``(x, p, circular, report_wrapped)`` with ``x`` strictly increasing.
    """
    w = mod360(a)
    if w is not a and np.count_nonzero(w >= 360.0):  # a tiny negative angle rounds to 360
        w = np.where(w >= 360.0, 0.0, w)  # it is 0
    ws, ps = _sort_by(w, p)
    # Merge duplicate angles in linear power.
    d = ws[1:] - ws[:-1]
    merge = np.count_nonzero(d <= DUPLICATE_TOL_DEG)
    if merge:
        new = np.concatenate(([True], d > DUPLICATE_TOL_DEG))
        grp = np.cumsum(new) - 1
        lin = np.bincount(grp, weights=10.0 ** (ps / 10.0))
        cnt = np.bincount(grp)
        ps = 10.0 * np.log10(lin / cnt)
        ws = ws[new]
        d = ws[1:] - ws[:-1]
    n = ws.size
    if n < 3:
        return ws, ps, False, True
    gaps = np.empty(n)
    gaps[:-1] = d
    gaps[-1] = ws[0] + 360.0 - ws[-1]
    g = int(gaps.argmax())
    typical = (360.0 - gaps[g]) / (n - 1)  # mean step without the largest gap
    if gaps[g] <= _CIRCLE_GAP_FACTOR * typical:
        return ws, ps, True, True
    amin = float(a.min())
    amax = float(a.max())
    if amax - amin < 360.0 and 360.0 - (amax - amin) >= gaps[g] - 1e-9:
        # A sector sweep that does not cross the seam of its own frame: keep that frame.
        x, ps = _sort_by(mod360(ws - amin) + amin, ps)
        return x, ps, False, False
    # Cut the circle at its largest gap.
    start = ws[(g + 1) % n]
    x, ps = _sort_by(mod360(ws - start) + start, ps)
    return x, ps, False, True


def _sort_by(x: np.ndarray, p: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``x`` and ``p`` in ascending order of ``x`` (stable), as ``np.argsort`` gives it.

    Angles taken mod 360 from a sorted pattern are a rotated increasing sequence (the
    estimator's snapshots always are): then one rotation at the minimum sorts them, and
    with no equal values it is the only ascending order, so the result is argsort's."""
    k = int(x.argmin())
    xs = np.concatenate((x[k:], x[:k])) if k else x
    if not np.count_nonzero(xs[1:] <= xs[:-1]):  # no NaN here: the same as all(>)
        return xs, (np.concatenate((p[k:], p[:k])) if k else p)
    o = np.argsort(x, kind="stable")
    return x[o], p[o]


def _vertex(r: np.ndarray, p: np.ndarray, k: int, circular: bool) -> tuple[float, float]:
    """Vertex (offset, level) of the parabola in dB through samples k-1, k, k+1.

    Falls back to the sample itself at an edge of a sector sweep or when the three
    points are not concave.
    """
    m = r.size
    if circular:
        km, kp = (k - 1) % m, (k + 1) % m
        x0 = r[km] - (360.0 if km > k else 0.0)
        x2 = r[kp] + (360.0 if kp < k else 0.0)
    else:
        if k == 0 or k == m - 1:
            return float(r[k]), float(p[k])
        km, kp = k - 1, k + 1
        x0, x2 = r[km], r[kp]
    x0, x1, x2 = float(x0), float(r[k]), float(x2)  # Python floats: a dozen scalar ops
    y0, y1, y2 = float(p[km]), float(p[k]), float(p[kp])
    d1 = (y1 - y0) / (x1 - x0)
    d2 = (y2 - y1) / (x2 - x1)
    c = (d2 - d1) / (x2 - x0)
    if not c < 0.0:
        return float(x1), float(y1)
    xv = 0.5 * (x0 + x1) - d1 / (2.0 * c)
    xv = min(max(xv, x0), x2)
    yv = y0 + d1 * (xv - x0) + c * (xv - x0) * (xv - x1)
    return xv, yv


def _hysteresis_db(p: np.ndarray) -> float:
    """Rise (dB) that makes a minimum count as a null rather than a noise wiggle.

    Noise is estimated from second differences of the dB values (white noise of
    deviation s gives second differences of deviation s*sqrt(6)).  The pattern's own
    curvature also shows in them, four times more at twice the step, so the estimate
    at step h (v1) and at step 2h (v2) separate the two: s^2 ~ (16 v1 - v2) / 15.
    The rise is ``_RISE_NOISE_FACTOR`` s clipped to [1, 6] dB: clean coarse sweeps
    get 1 dB, noisy dense ones enough to step over noise.
    """
    if p.size < 9:
        return _RISE_MIN_DB
    stride = -(-p.size // 512)  # a subsample of <= 512 values is plenty for a median
    d1 = p[2:] - 2.0 * p[1:-1] + p[:-2]
    d2 = p[4:] - 2.0 * p[2:-2] + p[:-4]
    v1 = (1.4826 * _median(np.abs(d1[::stride]))) ** 2 / 6.0
    v2 = (1.4826 * _median(np.abs(d2[::stride]))) ** 2 / 6.0
    sigma = math.sqrt(max(16.0 * v1 - v2, 0.0) / 15.0)
    return min(max(_RISE_NOISE_FACTOR * sigma, _RISE_MIN_DB), _RISE_MAX_DB)


class _Side:
    """What one walk outward from the peak found (offsets are >= 0)."""

    __slots__ = ("hp", "bw10", "null", "null_idx")

    def __init__(self) -> None:
        self.hp: float | None = None
        self.bw10: float | None = None
        self.null: float | None = None
        self.null_idx: int | None = None

    def shift(self, d: float) -> None:
        """Add ``d`` to every offset found (walk started off the peak sample)."""
        if self.hp is not None:
            self.hp += d
        if self.bw10 is not None:
            self.bw10 += d
        if self.null is not None:
            self.null += d


def _crossing(r: np.ndarray, p: np.ndarray, level: float, stop: int) -> float | None:
    """Offset where p falls through ``level`` within p[:stop+1]: mean of the innermost
    and outermost crossing, each linearly interpolated in dB."""
    seg = p[: stop + 1]
    below = seg < level
    j = int(below.argmax())  # first sample below; j >= 1 since p[0] is the peak
    if not below[j]:
        return None
    ra, rb = r[j - 1:j + 1].tolist()
    pa, pb = p[j - 1:j + 1].tolist()
    inner = ra + (level - pa) * (rb - ra) / (pb - pa)
    q = seg.size - 1 - int((~below[::-1]).argmax())  # last sample at/above the level
    if q >= seg.size - 1:
        return inner
    ra, rb = r[q:q + 2].tolist()
    pa, pb = p[q:q + 2].tolist()
    outer = ra + (level - pa) * (rb - ra) / (pb - pa)
    return 0.5 * (inner + outer)


def _walk(r: np.ndarray, p: np.ndarray, lvl3: float, lvl10: float, rise: float) -> _Side:
    """Walk outward from the peak (index 0) along one side."""
    s = _Side()
    n = r.size
    if n < 2:
        return s
    below3 = p < lvl3
    j = int(below3.argmax())
    if j == 0:  # the start is below half power, or nothing is
        return s
    q = p[j:]
    runmin = np.minimum.accumulate(q)
    up = (q - runmin) > rise
    stop = n - 1
    k = int(up.argmax())
    if up[k]:
        nidx = j + int(q[:k].argmin())
        s.null_idx = nidx
        s.null = _null_offset(r, p, nidx)
        stop = nidx
    s.hp = _crossing(r, p, lvl3, stop)
    s.bw10 = _crossing(r, p, lvl10, stop)
    if s.null is not None:  # the V fit may not move a null inside a level crossing
        s.null = max(s.null, s.hp or 0.0, s.bw10 or 0.0)
    return s


def _null_offset(r: np.ndarray, p: np.ndarray, k: int) -> float:
    """Null position near sample k from a V fit in linear amplitude.

    Near a simple zero the field amplitude |E| is proportional to |x - x0|; the slope
    is taken from the higher neighbour and x0 placed on the lower neighbour's side.
    """
    if k <= 0 or k >= r.size - 1:
        return float(r[k])
    a0, a1, a2 = (10.0 ** (v / 20.0) for v in p[k - 1:k + 2].tolist())
    x0, x1, x2 = r[k - 1:k + 2].tolist()
    if a0 >= a2:  # null between k and k+1, slope from the left pair
        s = (a0 - a1) / (x1 - x0)
        xz = x1 + (a1 / s if s > 0 else 0.0)
        return min(xz, 0.5 * (x1 + x2))
    s = (a2 - a1) / (x2 - x1)
    xz = x1 - (a1 / s if s > 0 else 0.0)
    return max(xz, 0.5 * (x0 + x1))


def _lobes(r: np.ndarray, q: np.ndarray, j: int, pk_db: float, rise: float,
           circular: bool) -> tuple[_Side, _Side, int | None, bool]:
    """Walk both sides from sample j and locate the highest side level.

    Returns the two sides (offsets from r[j]), the index of the highest sample outside
    the first nulls (``None`` when no null was found) and whether that sample sits on
    the edge of a sector sweep.
    """
    lvl3 = pk_db + HALF_POWER_DB
    lvl10 = pk_db + BW10_DB
    right = _walk(r[j:] - r[j], q[j:], lvl3, lvl10, rise)
    left = _walk(r[j] - r[j::-1], q[j::-1], lvl3, lvl10, rise)
    m = r.size
    best: int | None = None
    if right.null_idx is not None and j + right.null_idx + 1 < m:
        lo = j + right.null_idx + 1
        best = lo + int(q[lo:].argmax())
    if left.null_idx is not None and j - left.null_idx > 0:
        k = int(q[: j - left.null_idx].argmax())
        if best is None or q[k] > q[best]:
            best = k
    if best is None:
        return right, left, None, False
    return right, left, best, (not circular and (best == 0 or best == m - 1))


def _median(x: np.ndarray) -> float:
    """Median (upper one for even sizes), without np.median's overhead."""
    return float(np.sort(x)[x.size // 2])  # sort: partition is slow on equal values
