"""Model fit (stream.fit) against patterns computed here by brute force.

The reference patterns are a plain complex sum over the elements (the array factor's
definition, Balanis, *Antenna Theory*, 3rd ed., ch. 6, from memory) times cos^q, written
independently of stream.array_model and stream.fit.  The least-squares results are
checked against scipy.optimize.least_squares run directly on the same problem.
"""

from __future__ import annotations

import numpy as np
import pytest
from brute_array import FLOOR_REL, brute_db
from scipy.optimize import least_squares

from stream.array_model import ArrayModel
from stream.fit import FitError, fit_model


@pytest.mark.parametrize("n", [4, 8, 16])
@pytest.mark.parametrize("steer", [0.0, 12.3, -27.6])
def test_steering_recovered_within_0p1_deg_at_1deg_steps_with_0p5db_noise(n, steer):
    # Issue check: steering within 0.1 deg, 1-deg steps, 0.5 dB noise, N = 4, 8, 16.
    a = np.arange(-90.0, 90.5, 1.0)
    rng = np.random.default_rng(100 * n + int(steer * 10))
    p = brute_db(a, n, 0.5, steer, 1.5) + rng.normal(0.0, 0.5, a.size)
    fit = fit_model(a, p, ArrayModel(n))
    assert abs(fit.steer_deg - steer) < 0.1
    assert fit.residual_rms_db == pytest.approx(0.5, abs=0.15)


@pytest.mark.parametrize("q", [0.5, 1.2, 3.0])
def test_element_exponent_recovered(q):
    # cos^q elements (brute force): q recovered exactly without noise, within 0.1 with
    # 0.5 dB noise.
    a = np.arange(-90.0, 90.5, 1.0)
    clean = fit_model(a, brute_db(a, 8, 0.5, 5.0, q), ArrayModel(8))
    assert clean.element_exp == pytest.approx(q, abs=1e-3)
    assert clean.steer_deg == pytest.approx(5.0, abs=1e-3)
    noisy = brute_db(a, 8, 0.5, 5.0, q) + np.random.default_rng(7).normal(0, 0.5, a.size)
    assert fit_model(a, noisy, ArrayModel(8)).element_exp == pytest.approx(q, abs=0.1)


def test_gain_is_the_fitted_peak_level_and_floor_is_found():
    a = np.arange(-180.0, 180.0, 0.5)
    p = brute_db(a, 4, 0.5, 10.0, 1.0) - 40.0
    fit = fit_model(a, p, ArrayModel(4))
    fine = np.arange(-90.0, 90.0, 0.001)      # the brute pattern's own maximum
    peak = float(np.max(brute_db(fine, 4, 0.5, 10.0, 1.0, floor=0.0))) - 40.0
    assert fit.gain_db == pytest.approx(peak, abs=0.01)
    assert fit.floor_db == pytest.approx(10 * np.log10(FLOOR_REL * 16) - 40.0, abs=0.05)
    assert fit.residual_rms_db < 1e-3


def test_spacing_recovered_when_free():
    a = np.arange(-90.0, 90.5, 1.0)
    p = brute_db(a, 8, 0.42, -8.0, 1.0) + np.random.default_rng(3).normal(0, 0.3, a.size)
    fit = fit_model(a, p, ArrayModel(8, spacing_wl=0.5), fit_spacing=True)
    assert fit.spacing_free
    assert fit.spacing_wl == pytest.approx(0.42, abs=0.01)
    assert fit.steer_deg == pytest.approx(-8.0, abs=0.2)


def test_residuals_and_uncertainties_match_scipy_least_squares_directly():
    # Reference: scipy.optimize.least_squares on the brute-force model with its own
    # finite-difference Jacobian; covariance s^2 (J^T J)^-1 (Press et al., Numerical
    # Recipes 3rd ed. 15.5, from memory).
    n = 8
    a = np.arange(-90.0, 90.5, 1.0)
    p = brute_db(a, n, 0.5, 7.0, 1.3) + np.random.default_rng(11).normal(0, 0.5, a.size)
    fit = fit_model(a, p, ArrayModel(n))

    def resid(x):
        steer, off, q, floor = x
        lin = 10 ** ((brute_db(a, n, 0.5, steer, q, floor=0.0) - 10 * np.log10(n * n)
                      + off) / 10) + 10 ** (floor / 10)
        return 10 * np.log10(lin) - p

    off0 = fit.gain_db  # the uniform array's peak equals n^2 at the steering direction
    ref = least_squares(resid, [fit.steer_deg + 0.3, off0 + 0.5, fit.element_exp + 0.2,
                                fit.floor_db + 1.0], jac="2-point", method="trf",
                        x_scale=[0.1, 1.0, 0.3, 1.0])
    assert ref.x[0] == pytest.approx(fit.steer_deg, abs=2e-3)
    assert ref.x[2] == pytest.approx(fit.element_exp, abs=2e-3)
    assert ref.x[3] == pytest.approx(fit.floor_db, abs=2e-2)
    rms_all = np.sqrt(np.mean(ref.fun ** 2))
    assert fit.residual_all_rms_db == pytest.approx(rms_all, rel=1e-4)
    s2 = np.sum(ref.fun ** 2) / (a.size - 4)
    sig = np.sqrt(np.diag(np.linalg.inv(ref.jac.T @ ref.jac)) * s2)
    assert fit.uncertainty["steer_deg"] == pytest.approx(sig[0], rel=0.02)
    assert fit.uncertainty["gain_db"] == pytest.approx(sig[1], rel=0.02)
    assert fit.uncertainty["element_exp"] == pytest.approx(sig[2], rel=0.02)
    assert fit.uncertainty["floor_db"] == pytest.approx(sig[3], rel=0.05)


def test_fitted_pattern_matches_the_data_it_came_from():
    a = np.arange(-90.0, 90.5, 2.0)
    p = brute_db(a, 4, 0.5, -3.0, 1.0) - 30.0
    fit = fit_model(a, p, ArrayModel(4))
    assert np.max(np.abs(fit.power_db(a) - p)) < 0.01
    assert fit.model() == ArrayModel(4, 0.5, pytest.approx(1.0, abs=1e-3),
                                     pytest.approx(-3.0, abs=1e-3), "none")


def test_flat_or_tiny_patterns_are_refused_with_a_reason():
    with pytest.raises(FitError, match="same power"):
        fit_model(np.arange(10.0), np.zeros(10), ArrayModel(4))
    with pytest.raises(FitError, match="at least"):
        fit_model(np.arange(3.0), np.array([0.0, 1.0, 0.0]), ArrayModel(4))
