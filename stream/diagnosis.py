"""Column diagnosis from a power-only pattern: which columns of the array are dead or weak.

Model (steering, element exponent, spacing, gain and noise floor from
:func:`stream.fit.fit_model`; per-column real amplitudes ``a_k`` free)::

    P(theta) = 10 log10( g E(theta) |sum_k a_k z^k|^2 / (sum w)^2 + 10^(F/10) ),
    z = exp(j 2 pi d (sin theta - sin theta_0))

fitted by :func:`scipy.optimize.least_squares` (bounds ``0 <= a_k``, analytic Jacobian)
from the healthy start ``a = w`` (the nominal taper) and from one start per mirror pair
with that pair's column switched off; the lowest cost wins.  ``amplitudes`` are
``a_k / w_k`` divided by the largest (1.0 = as strong as designed; columns not
named by the search stay at their nominal weight).

What a power pattern can tell: with real amplitudes, ``|sum a_k z^k| = |sum a_(N+1-k)
z^k|`` on the unit circle (the mirrored array has the complex-conjugate factor times a
phase), so column k and column N+1-k are indistinguishable.  Candidates are therefore
reported as the pair ``[k, N+1-k]`` (a single column for the centre of an odd array).
Phase errors are outside the model: they fill nulls and raise side lobes, which the fit
may explain as amplitude changes (see docs/commissioning.md for measured limits).

References
----------
1. C. A. Balanis, *Antenna Theory*, 3rd ed., Wiley 2005, ch. 6 (array factor as a
   polynomial in z), from memory.
2. A. V. Oppenheim, R. W. Schafer, *Discrete-Time Signal Processing*, 3rd ed., 2010:
   a real sequence and its time reverse have the same DTFT magnitude, from memory.
3. SciPy reference, ``scipy.optimize.least_squares``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy.optimize import least_squares
from scipy.stats import f as f_dist

from stream.array_model import ArrayModel, element_power, taper_weights
from stream.batch import wrap_angle_deg
from stream.fit import ABOVE_FLOOR_DB, FitError, ModelFit, _peak_raw_db, fit_model

#: A column below this fraction of the largest amplitude is reported dead (-10.5 dB).
DEAD_REL: float = 0.3
#: ... below this fraction weak (-3 dB).
WEAK_REL: float = 0.708
#: Larger patterns are thinned to about this many points (means of neighbouring samples)
#: before the hypothesis fits: a 0.1-deg pattern oversamples any beam many times.
MAX_SAMPLES: int = 720
#: Significance of the F test that admits a suspect (family-wise over the pairs tried).
ALPHA: float = 1e-3
#: Most columns the forward selection frees (one per step).
MAX_STEPS: int = 3
#: Highest amplitude searched, relative to the nominal weight.
AMPLITUDE_MAX: float = 30.0

_DB = 10.0 / math.log(10.0)


@dataclass(frozen=True, slots=True)
class ColumnDiagnosis:
    """Estimated column amplitudes (1-based order: ``amplitudes[0]`` is column 1).

    ``amplitudes`` is one of two mirror-equivalent answers (its reverse fits the data
    equally well); ``suspects`` lists candidate pairs ``[k, N+1-k]`` (1-based), or
    ``[k]`` alone when both columns of a pair are low or k is the centre column; an
    empty list means healthy.  ``kinds`` says "dead" or "weak" for each suspect.
    ``elements_effective`` is ``(sum a)^2 / sum a^2`` of the relative amplitudes
    (N for a healthy array, 3 for 3 equal columns of 4).
    """

    amplitudes: list[float]
    elements_effective: float
    suspects: list[list[int]] = field(default_factory=list)
    kinds: list[str] = field(default_factory=list)
    amplitude_sigma: list[float] = field(default_factory=list)
    residual_rms_db: float = float("nan")

    def to_dict(self) -> dict:
        return {"amplitudes": list(self.amplitudes),
                "amplitude_sigma": list(self.amplitude_sigma),
                "elements_effective": self.elements_effective,
                "suspects": [list(s) for s in self.suspects], "kinds": list(self.kinds),
                "residual_rms_db": self.residual_rms_db}

    def summary(self) -> str:
        """One line for a screen: e.g. ``3.0 of 4 columns; suspect 1 or 4 (dead)``."""
        n = len(self.amplitudes)
        text = f"{self.elements_effective:.1f} of {n} columns"
        if not self.suspects:
            return text + "; no suspect"
        return text + "; suspect " + ", ".join(self.suspect_parts())

    def suspect_parts(self) -> list[str]:
        """The suspects as phrases: a mirror pair ``2 or 3 (dead)``; columns found low
        on their own, of one kind, together: ``1 and 4 (dead)``."""
        alone: dict[str, list[int]] = {}
        parts: list[tuple[int, str]] = []
        for s, k in zip(self.suspects, self.kinds, strict=True):
            if len(s) == 1:
                alone.setdefault(k, []).append(s[0])
            else:
                parts.append((min(s), " or ".join(str(c) for c in s) + f" ({k})"))
        for k, cols in alone.items():
            parts.append((min(cols), " and ".join(str(c) for c in sorted(cols)) + f" ({k})"))
        return [text for _, text in sorted(parts)]


def mirror_pairs(n_elements: int) -> list[list[int]]:
    """The 1-based pairs {k, N+1-k} a power pattern cannot tell apart."""
    return [sorted({k, n_elements + 1 - k}) for k in range(1, n_elements // 2 + n_elements % 2
                                                           + 1)]


class _Problem:
    """The pattern and the fixed parts of the model, for fits with some columns free."""

    def __init__(self, a: np.ndarray, p: np.ndarray, model: ArrayModel, fit: ModelFit) -> None:
        self.n = int(model.n_elements)
        self.w = taper_weights(model.taper, self.n)
        self.p = p
        self.a = a
        theta = np.deg2rad(a)
        self.sin_t = np.sin(theta)
        cos_t = np.cos(theta)
        self.log_cos = np.where(cos_t > 0, np.log(np.maximum(cos_t, 1e-300)), 0.0)
        self.d = fit.spacing_wl
        self.kk = np.arange(self.n, dtype=np.float64)
        self.norm = float(np.sum(self.w)) ** 2
        self.top = float(p.max())

    def solve(self, free: list[int], x0: np.ndarray):  # -> OptimizeResult
        """Least squares over x = [steer, offset, q, floor, a_free...] (0-based ``free``)."""
        n, w = self.n, self.w

        def parts(x: np.ndarray):
            amp = w.copy()
            amp[free] = x[4:]
            z = np.exp(1j * 2.0 * np.pi * self.d * (self.sin_t - math.sin(math.radians(x[0]))))
            zk = np.cumprod(np.column_stack([np.ones_like(z)] + [z] * (n - 1)), axis=1)
            # einsum, not @: a BLAS call this small costs more in thread hand-offs on a
            # busy machine than the arithmetic.
            af = np.einsum("ij,j->i", zk, amp)
            elem = element_power(self.a, x[2])
            g = 10.0 ** (x[1] / 10.0) / self.norm
            sig = g * elem * (af.real ** 2 + af.imag ** 2)
            fl = 10.0 ** (x[3] / 10.0)
            return amp, zk, af, elem, g, sig, fl, sig + fl

        def resid(x: np.ndarray) -> np.ndarray:
            return 10.0 * np.log10(parts(x)[7]) - self.p

        def jac(x: np.ndarray) -> np.ndarray:
            amp, zk, af, elem, g, sig, fl, lin = parts(x)
            s = _DB * g * elem / lin
            caf = np.conj(af)
            dpsi = 2.0 * np.real(caf * np.einsum("ij,j->i", zk, 1j * self.kk * amp))
            d_steer = s * dpsi * (-2.0 * np.pi * self.d * math.cos(math.radians(x[0]))
                                  * math.pi / 180.0)
            cols = [d_steer, sig / lin, _DB * sig / lin * self.log_cos, fl / lin]
            for k in free:
                cols.append(2.0 * s * np.real(caf * zk[:, k]))
            return np.column_stack(cols)

        lo = [-89.0, self.top - 80.0, 0.0, self.top - 90.0] + [0.0] * len(free)
        hi = [89.0, self.top + 80.0, 20.0, self.top - ABOVE_FLOOR_DB] + \
            [AMPLITUDE_MAX * w[k] for k in free]
        x0 = np.clip(x0, np.array(lo) + 1e-6, np.array(hi) - 1e-6)
        return least_squares(resid, x0, jac=jac, bounds=(lo, hi), method="trf",
                             x_scale=np.array([0.1, 1.0, 0.3, 1.0] + [0.1] * len(free)))


def diagnose(angle_deg: np.ndarray, power_db: np.ndarray, model: ArrayModel,
             fit: ModelFit | None = None) -> ColumnDiagnosis:
    """Name dead or weak columns (as mirror pairs) by testing hypotheses.

    Forward selection: H0 is the nominal array (``fit``); each mirror pair's
    hypothesis "column k is off or weak" frees that column's amplitude (steering,
    gain, element exponent and floor refitted too).  The best pair is kept when it
    lowers the residual sum of squares significantly (F test at ``ALPHA`` for one
    extra parameter, Bonferroni over the pairs tried) and its amplitude is below
    ``WEAK_REL``; the search then tries one more column (the mirror of a chosen one
    included), up to ``MAX_STEPS``.

    Why not fit every amplitude freely: an array with an interior column off has
    other non-negative amplitude sets with exactly the same power pattern (flipping
    zeros of the array polynomial to their mirror images about the unit circle;
    16 sets for N = 8, column 3 off), so only the simplest explanation can be named.
    """
    n = int(model.n_elements)
    if fit is None:
        fit = fit_model(angle_deg, power_db, model)
    w = taper_weights(model.taper, n)
    if n == 1:
        return ColumnDiagnosis([1.0], 1.0, [], [], [0.0], fit.residual_rms_db)
    a = wrap_angle_deg(np.asarray(angle_deg, dtype=np.float64).reshape(-1))
    p = np.asarray(power_db, dtype=np.float64).reshape(-1)
    ok = np.isfinite(a) & np.isfinite(p)
    a, p = a[ok], p[ok]
    if int(np.sum(p > fit.floor_db + ABOVE_FLOOR_DB)) < n + 2:
        raise FitError(f"too few samples above the noise floor; {n + 2} are needed "
                       f"to test {n} columns")
    if a.size > MAX_SAMPLES:
        a, p = _thin(a, p, MAX_SAMPLES)
    prob = _Problem(a, p, model, fit)
    offset = fit.gain_db - _peak_raw_db(n, fit.spacing_wl, fit.steer_deg, fit.element_exp, w)
    base = np.array([fit.steer_deg, offset, fit.element_exp, fit.floor_db])
    h0 = prob.solve([], base)
    peak_dir = float(a[int(np.argmax(p))])
    hpbw_deg = 50.8 / max(n * fit.spacing_wl * 2.0, 1.0)  # ~0.886 rad / (N d)
    cur_free: list[int] = []
    cur = h0
    pairs = mirror_pairs(n)
    m = a.size
    for _ in range(min(MAX_STEPS, n - 1)):
        # one candidate per pair: its first column, or its mirror once the first is free
        tried = [c - 1 for pr in pairs
                 for c in [next((c for c in pr if c - 1 not in cur_free), None)]
                 if c is not None]
        best = None
        for k in tried:
            steers = [float(cur.x[0])]
            if abs(peak_dir - steers[0]) > hpbw_deg / 8.0:
                steers.append(peak_dir)
            for steer0 in steers:
                x0 = np.concatenate([[steer0], cur.x[1:], [0.05 * w[k]]])
                r = prob.solve(cur_free + [k], x0)
                if best is None or r.cost < best[1].cost:
                    best = (k, r)
        if best is None:
            break
        k, r = best
        dof = max(m - r.x.size, 1)
        f_stat = (cur.cost - r.cost) / max(r.cost / dof, 1e-300)
        crit = float(f_dist.ppf(1.0 - ALPHA / len(tried), 1, dof))
        ratio = r.x[-1] / w[k]
        # a column found stronger than the rest means the rest are weak (the gain is free)
        if f_stat <= crit or WEAK_REL <= ratio <= 1.0 / WEAK_REL:
            break
        cur_free.append(k)
        cur = r
    rel = np.ones(n)
    rel[cur_free] = cur.x[4:] / w[cur_free]
    scale = float(np.max(rel))
    rel = rel / scale
    sigma = np.zeros(n)
    if cur_free:
        dof = max(m - cur.x.size, 1)
        try:
            cov = np.linalg.inv(cur.jac.T @ cur.jac) * (2.0 * float(cur.cost) / dof)
            sigma[cur_free] = np.sqrt(np.clip(np.diag(cov)[4:], 0.0, None)) / w[cur_free] \
                / scale
        except np.linalg.LinAlgError:
            sigma[cur_free] = np.nan
    suspects, kinds = _suspects(rel)
    total = float(np.sum(rel))
    n_eff = total ** 2 / float(np.sum(rel ** 2)) if total > 0 else 0.0
    return ColumnDiagnosis([float(v) for v in rel], n_eff, suspects, kinds,
                           [float(s) for s in sigma],
                           float(math.sqrt(2.0 * float(cur.cost) / m)))


def _thin(a: np.ndarray, p: np.ndarray, target: int) -> tuple[np.ndarray, np.ndarray]:
    """Means (angle, dB) of groups of k neighbouring samples in angle order."""
    k = int(math.ceil(a.size / target))
    order = np.argsort(a, kind="stable")
    m = (a.size // k) * k
    a2 = a[order][:m].reshape(-1, k).mean(axis=1)
    p2 = p[order][:m].reshape(-1, k).mean(axis=1)
    return a2, p2


def _suspects(rel: np.ndarray) -> tuple[list[list[int]], list[str]]:
    """Low columns as mirror pairs (or single columns when both of a pair are low)."""
    n = rel.size
    suspects: list[list[int]] = []
    kinds: list[str] = []
    for pair in mirror_pairs(n):
        low = [k for k in pair if rel[k - 1] < WEAK_REL]
        if not low:
            continue
        if len(pair) == 2 and len(low) == 2:
            for k in pair:
                suspects.append([k])
                kinds.append("dead" if rel[k - 1] < DEAD_REL else "weak")
        else:
            suspects.append(pair)
            kinds.append("dead" if min(rel[k - 1] for k in low) < DEAD_REL else "weak")
    return suspects, kinds
