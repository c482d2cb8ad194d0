"""A fixed, invented beam readout for snapshots, widget tests and the redraw benchmark.

The pattern is the textbook model of an 8-element half-wave-spaced array steered to
+12 degrees (``stream.array_model``), with a little seeded ripple; the metrics are
measured here by plain interpolation so the picture does not depend on the live
estimator.  Nothing here comes from a real measurement.
"""

from __future__ import annotations

import numpy as np

from stream.array_model import ArrayModel
from stream.beam import HALF_POWER_DB, BeamMetrics
from stream.tick import Event, Reference, SourceStats, Tick

#: Invented start time of the sample session (2026-01-01 12:00:00 UTC).
SAMPLE_T0 = 1767268800.0


def _crossing(a: np.ndarray, p: np.ndarray, i_peak: int, level: float, step: int) -> float | None:
    """Angle where ``p`` first falls below ``level`` walking from the peak by ``step``."""
    i = i_peak
    while 0 <= i + step < a.size:
        j = i + step
        if p[j] < level:
            f = (p[i] - level) / (p[i] - p[j])
            return float(a[i] + f * (a[j] - a[i]))
        i = j
    return None


def _first_min(p: np.ndarray, i_peak: int, step: int) -> int | None:
    i = i_peak
    while 0 <= i + step < p.size:
        if p[i + step] > p[i]:
            return i
        i += step
    return None


def simple_metrics(angle_deg: np.ndarray, power_db: np.ndarray) -> BeamMetrics:
    """Peak, -3/-10 dB widths, FNBW and highest side lobe of a sorted, gap-free trace."""
    a = np.asarray(angle_deg, dtype=np.float64)
    p = np.asarray(power_db, dtype=np.float64)
    i = int(np.argmax(p))
    peak = float(p[i])
    lo3 = _crossing(a, p, i, peak + HALF_POWER_DB, -1)
    hi3 = _crossing(a, p, i, peak + HALF_POWER_DB, +1)
    lo10 = _crossing(a, p, i, peak - 10.0, -1)
    hi10 = _crossing(a, p, i, peak - 10.0, +1)
    nl, nr = _first_min(p, i, -1), _first_min(p, i, +1)
    sll = sll_a = fnbw = None
    if nl is not None and nr is not None:
        fnbw = float(a[nr] - a[nl])
        side = np.concatenate((np.arange(0, nl), np.arange(nr + 1, a.size)))
        if side.size:
            j = int(side[np.argmax(p[side])])
            sll, sll_a = float(p[j] - peak), float(a[j])
    return BeamMetrics(
        peak_angle_deg=float(a[i]), peak_power_db=peak,
        hpbw_deg=(hi3 - lo3) if lo3 is not None and hi3 is not None else None,
        hpbw_left_deg=lo3, hpbw_right_deg=hi3,
        bw10_deg=(hi10 - lo10) if lo10 is not None and hi10 is not None else None,
        fnbw_deg=fnbw, sll_db=sll, sll_angle_deg=sll_a, front_to_back_db=None,
        reasons={"front_to_back_db": "the scan does not reach the back direction"},
    )


def sample_model(steer_deg: float = 12.0) -> ArrayModel:
    return ArrayModel(n_elements=8, spacing_wl=0.5, element_exp=1.0, steer_deg=steer_deg)


def sample_tick(*, t: float = SAMPLE_T0 + 300.0, steer_deg: float = 12.0,
                state: str = "receiving", target_deg: float | None = 10.0,
                tolerance_deg: float | None = 3.0, with_reference: bool = True,
                span_deg: float = 90.0, step_deg: float = 1.0, seed: int = 7,
                peak_dbm: float = -31.0) -> Tick:
    """A deterministic tick: model pattern + seeded ripple, 300 s of sweep peaks."""
    rng = np.random.default_rng(seed)
    model = sample_model(steer_deg)
    a = np.arange(-span_deg, span_deg + 1e-9, step_deg)
    p = np.maximum(model.power_db(a), -45.0) + peak_dbm + rng.normal(0.0, 0.3, a.size)
    metrics = simple_metrics(a, p)
    ref = None
    if with_reference:
        ra = a.copy()
        rp = np.maximum(sample_model(10.0).power_db(ra), -45.0) + peak_dbm + 1.0
        ref = Reference(t - 240.0, ra, rp, simple_metrics(ra, rp))
    sweep_t = np.arange(t - 300.0, t + 1e-9, 2.0)
    drift = np.linspace(10.0, steer_deg, sweep_t.size)
    peaks = drift + rng.normal(0.0, 0.25, sweep_t.size)
    rejected = {"bad_json": 2} if state == "receiving" else {}
    return Tick(
        t=t, metrics=metrics, angle_deg=a, power_db=p, samples=1_234_567, sweeps=151,
        rate_sps=1_000_000.0, peak_angle_spread_deg=0.21, sweep_peaks_deg=peaks,
        sweep_peak_t=sweep_t, last_sample_t=t - (0.05 if state == "receiving" else 42.0),
        source=SourceStats(state=state, messages=1234, rejected=rejected, lost=3),
        target_deg=target_deg, tolerance_deg=tolerance_deg, reference=ref,
        expected_hpbw_deg=None, calibrated=True,
        events=(Event(t, "marker", {"text": "sample"}),),
        age_s=0.05 if state == "receiving" else 42.0, provisional=False,
    )
