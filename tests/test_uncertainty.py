"""Uncertainty of peak direction, HPBW and SLL: coverage on brute-force patterns.

Truth comes from outside the code under test: the array factor of a uniform linear
array as an explicit complex sum over the elements, |sum_n exp(j pi n (sin th - sin th0))|^2
(C. A. Balanis, *Antenna Theory*, 3rd ed., ch. 6), its half-power points solved with
``scipy.optimize.brentq`` and its side lobe level found on a 0.001-degree grid.  The
stated one-sigma interval of a normal error holds about 68.3 % of the time (textbook);
with 200 seeded draws the binomial spread is about +/-3.3 %, so 55-80 % is asked.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from scipy.optimize import brentq

from stream.pattern import measure
from stream.uncertainty import noise_sigma_db

KEYS = ("peak_angle_deg", "hpbw_deg", "sll_db")


def af_lin(theta_deg: np.ndarray, n: int, steer_deg: float) -> np.ndarray:
    """Array factor power of n isotropic elements, half a wavelength apart, as a complex
    sum (normalised to 1 at the steering direction)."""
    th = np.radians(np.atleast_1d(theta_deg))
    k = np.arange(n)
    phase = np.pi * (np.sin(th)[:, None] - np.sin(np.radians(steer_deg))) * k
    return np.abs(np.exp(1j * phase).sum(axis=1)) ** 2 / n ** 2


def truth(n: int, steer_deg: float) -> dict[str, float]:
    f = lambda x: af_lin(x, n, steer_deg)[0] - 0.5  # noqa: E731
    left = brentq(f, steer_deg - 40.0, steer_deg)
    right = brentq(f, steer_deg, steer_deg + 40.0)
    s0 = np.sin(np.radians(steer_deg))
    null_l = np.degrees(np.arcsin(s0 - 2.0 / n))  # first nulls: psi = +/-2 pi / n
    null_r = np.degrees(np.arcsin(s0 + 2.0 / n))
    g = np.arange(-60.0, 60.0, 0.001)
    side = (g < null_l) | (g > null_r)
    sll = 10 * np.log10(af_lin(g[side], n, steer_deg).max())
    return {"peak_angle_deg": steer_deg, "hpbw_deg": right - left, "sll_db": sll}


def test_truth_against_the_textbook():
    # N = 8 broadside: HPBW about 12.8 deg, first side lobe about -12.8 dB (Balanis
    # ch. 6, from memory; the complex sum above is the reference actually used)
    t = truth(8, 0.0)
    assert t["hpbw_deg"] == pytest.approx(12.8, abs=0.1)
    assert t["sll_db"] == pytest.approx(-12.8, abs=0.1)


@pytest.mark.parametrize("n,steer_deg,step_deg,noise_db,seed", [
    (8, 10.0, 0.5, 0.3, 1),
    (6, -5.0, 1.0, 0.2, 2),
])
def test_stated_one_sigma_covers_about_68_percent(n, steer_deg, step_deg, noise_db, seed):
    tr = truth(n, steer_deg)
    a = np.arange(-60.0, 60.0 + 1e-9, step_deg)
    clean = 10 * np.log10(np.maximum(af_lin(a, n, steer_deg), 1e-12))
    rng = np.random.default_rng(seed)
    inside = {k: 0 for k in KEYS}
    draws = 200
    for _ in range(draws):
        m = measure(a, clean + rng.normal(0.0, noise_db, a.size))
        for k in KEYS:
            v, u = getattr(m, k), m.uncertainty.get(k)
            assert v is not None and u is not None and u > 0, (k, m.reasons.get(k))
            inside[k] += abs(v - tr[k]) <= u
    for k in KEYS:
        frac = inside[k] / draws
        assert 0.55 <= frac <= 0.80, f"{k}: {frac:.0%} of draws inside +/-1 sigma"


def test_noise_estimate_from_second_differences():
    """White noise of known sigma on a smooth curve: the estimate is within 15 %."""
    rng = np.random.default_rng(3)
    x = np.linspace(-1.0, 1.0, 2001)
    est = noise_sigma_db(-3.0 * x ** 2 + rng.normal(0.0, 0.5, x.size))
    assert est == pytest.approx(0.5, rel=0.15)


def test_a_clean_fine_pattern_is_certain_to_a_few_hundredths():
    a = np.arange(-60.0, 60.0 + 1e-9, 0.25)
    m = measure(a, 10 * np.log10(np.maximum(af_lin(a, 8, 10.0), 1e-12)))
    assert all(m.uncertainty[k] < 0.05 for k in KEYS), m.uncertainty
    assert not any(k in m.reasons for k in KEYS)  # no caveat


def test_a_5_degree_hand_sweep_says_the_step_limits_the_answer():
    """Four columns, 5-degree steps: about 5 samples across a 26-degree beam.  The
    values come with wide uncertainty, each within about 2 sigma of the truth, and
    a note that the step limits them (what ``--json`` prints under ``notes``)."""
    tr = truth(4, 0.0)
    a = np.arange(-90.0, 90.0 + 1e-9, 5.0)
    a = a[np.abs(a) < 90.0]
    m = measure(a, 10 * np.log10(np.maximum(af_lin(a, 4, 0.0), 1e-12)))
    notes = m.notes()
    for k in ("peak_angle_deg", "hpbw_deg"):
        assert "sampling step (5 deg) limits" in notes[k], notes
        assert abs(getattr(m, k) - tr[k]) <= 2.0 * m.uncertainty[k]
    assert m.uncertainty["hpbw_deg"] > 0.3


@given(arrays(np.float64, st.integers(1, 600),
              elements=st.floats(-1e6, 1e6, allow_nan=False) | st.just(0.5)))
def test_fast_median_gives_the_float_of_numpy_median(v: np.ndarray) -> None:
    from stream.uncertainty import _median
    assert _median(v) == float(np.median(v))  # the reference: numpy's own median


@given(arrays(np.int64, st.integers(1, 200), elements=st.integers(-180_000, 180_000),
              unique=True),
       st.floats(-200, 200), st.floats(0.0, 50.0))
def test_bisected_neighbourhoods_give_the_reference_expressions(
        milli: np.ndarray, e: float, h: float) -> None:
    # offsets as measure() hands them: sorted, distinct by more than its 1e-9 deg
    # duplicate tolerance (here a 0.001 deg grid)
    from stream.uncertainty import _nearest, _within
    r = np.sort(milli) / 1000.0
    k = _nearest(r, e)
    assert k == int(np.abs(r - e).argmin())
    lo, hi = _within(r, k, h)
    assert np.array_equal(np.arange(r.size)[lo:hi],
                          np.flatnonzero(np.abs(r - r[k]) <= h))
