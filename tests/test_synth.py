"""The simulated array against textbook closed forms, and its determinism.

Reference: C. A. Balanis, *Antenna Theory: Analysis and Design*, 3rd ed., Wiley 2005,
ch. 6: normalised array factor of a uniform N-element linear array
AF_n = sin(N psi / 2) / (N sin(psi / 2)), psi = k d (sin theta - sin theta_0)
(eq. 6-10c form, theta from broadside; equation number quoted from memory).  Half-power
points are solved here with scipy's ``brentq`` on that closed form.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import brentq

from stream.pattern import measure
from stream.scenarios import SCENARIOS, get_scenario
from stream.synth import SynthConfig, SynthSource, encode_batch
from stream.wire import Decoder

T0 = 1767225600.0


def closed_form_af2(theta_deg, n, d_wl, steer_deg=0.0):
    psi = 2 * np.pi * d_wl * (np.sin(np.deg2rad(theta_deg)) - np.sin(np.deg2rad(steer_deg)))
    with np.errstate(invalid="ignore", divide="ignore"):
        af = np.sin(n * psi / 2) / (n * np.sin(psi / 2))
    return np.where(np.abs(np.sin(psi / 2)) < 1e-12, 1.0, af) ** 2


def closed_form_hpbw(n, d_wl):
    """Broadside HPBW from the closed form (Balanis ch. 6), via scipy brentq."""
    th = brentq(lambda x: closed_form_af2(x, n, d_wl) - 0.5, 1e-6, 89.0 / n)
    return 2 * th


def test_closed_form_hpbw_matches_the_quoted_value():
    # N=4, d=0.5: 26.32 deg (Balanis ch. 6 uniform broadside array; brute force gives
    # the same) -- the value the end-to-end tests use.
    assert closed_form_hpbw(4, 0.5) == pytest.approx(26.32, abs=0.01)


def quiet(**kw):
    base = dict(element_exp=0.0, noise_db=0.0, fading_db=0.0, noise_floor_dbm=-190.0,
                step_deg=0.0)
    base.update(kw)
    return SynthConfig(**base)


@pytest.mark.parametrize("n,d", [(4, 0.5), (8, 0.5), (6, 0.7)])
def test_sweep_scan_pattern_is_the_closed_form_af(n, d):
    src = SynthSource(quiet(n_elements=n, spacing_wl=d), start_t=T0)
    ang = np.linspace(-60, 60, 2401)
    t = np.full(ang.shape, T0 + 1.0)
    p = src.pattern_lin(t, ang)
    np.testing.assert_allclose(p, closed_form_af2(ang, n, d), atol=1e-12)


def test_noise_free_sweep_measures_the_closed_form_hpbw():
    src = SynthSource(quiet(rate_sps=2000.0), start_t=T0)
    b = src.generate(T0, 0.5)  # one sweep -60..+60 at 2 sweeps/s
    m = measure(b.angle_deg, b.power_db + 40.0)
    assert m.peak_angle_deg == pytest.approx(0.0, abs=0.05)
    assert m.peak_power_db == pytest.approx(0.0, abs=0.01)
    assert m.hpbw_deg == pytest.approx(closed_form_hpbw(4, 0.5), abs=0.05)
    # first side lobe of a uniform array: -13.26 dB as N -> inf; for N = 4 it is
    # -11.30 dB (closed form evaluated numerically below)
    x = np.linspace(30, 90, 60001)
    sll = 10 * np.log10(closed_form_af2(x, 4, 0.5).max())
    assert m.sll_db == pytest.approx(sll, abs=0.05)


def test_dead_end_column_drops_gain_and_widens_beam():
    cfg = quiet(scenario="dead-column", rate_sps=2000.0)
    src = SynthSource(cfg, start_t=T0)
    fail = get_scenario("dead-column").fail_at_s
    before = src.generate(T0 + fail - 1.0, 0.5)
    after = src.generate(T0 + fail + 1.0, 0.5)
    mb = measure(before.angle_deg, before.power_db)
    ma = measure(after.angle_deg, after.power_db)
    # coherent sum of 3 of 4 equal columns: 20 log10(3/4) = -2.50 dB (array factor algebra)
    assert ma.peak_power_db - mb.peak_power_db == pytest.approx(20 * np.log10(0.75), abs=0.02)
    # the remaining 3 contiguous columns form a uniform 3-element array
    assert ma.hpbw_deg == pytest.approx(closed_form_hpbw(3, 0.5), abs=0.1)
    assert ma.hpbw_deg > mb.hpbw_deg * 1.25


def test_mast_sway_moves_the_measured_peak():
    sc = get_scenario("mast-sway")
    src = SynthSource(quiet(scenario="mast-sway", rate_sps=2000.0), start_t=T0)
    assert src.true_peak_deg(T0 + 30.0) == 0.0
    assert src.true_peak_deg(T0 + 180.0) == pytest.approx(2.0)
    assert src.true_peak_deg(T0 + 400.0) == pytest.approx(sc.drift_max_deg)
    assert src.true_peak_deg(T0 + 2000.0) == 0.0
    b = src.generate(T0 + 400.0, 0.5)
    assert measure(b.angle_deg, b.power_db).peak_angle_deg == pytest.approx(5.0, abs=0.05)


def test_reflector_changes_power_near_the_watched_direction_only():
    sc = get_scenario("reflector")
    src = SynthSource(quiet(scenario="reflector"), start_t=T0)
    ang = np.array([sc.reflector_deg, 0.0])
    on = 10 * np.log10(src.pattern_lin(np.full(2, T0 + 200.0), ang))
    off = 10 * np.log10(src.pattern_lin(np.full(2, T0 + 100.0), ang))
    assert on[0] - off[0] == pytest.approx(sc.reflector_db, abs=1e-9)
    assert on[1] == pytest.approx(off[1], abs=0.01)
    late = 10 * np.log10(src.pattern_lin(np.full(2, T0 + 400.0), ang))
    assert late[0] == pytest.approx(off[0])


def test_mount_mode_has_the_configured_front_to_back():
    src = SynthSource(quiet(scenario="turntable", mount_dps=36.0, rate_sps=1000.0,
                            element_exp=1.0), start_t=T0)
    b = src.generate(T0, 10.0)  # one full turn
    assert b.angle_deg.min() >= 0 and b.angle_deg.max() < 360
    m = measure(b.angle_deg, b.power_db)
    # |AF| is equal at 0 and 180 deg for a line array, so F/B = -back_lobe_db
    assert m.front_to_back_db == pytest.approx(25.0, abs=0.3)
    assert m.peak_angle_deg == pytest.approx(0.0, abs=0.2)


def test_sweep_is_a_quantised_triangle_at_the_configured_rate():
    src = SynthSource(SynthConfig(rate_sps=4000.0, sweeps_per_s=2.0, step_deg=0.5), T0)
    a = src.generate(T0, 2.0).angle_deg
    assert a.min() == -60.0 and a.max() == 60.0
    assert np.allclose(np.round(a * 2) / 2, a)
    turns = np.sum(np.diff(np.sign(np.diff(a[np.diff(a, prepend=a[0] - 1) != 0]))) != 0)
    assert 3 <= turns <= 5  # 4 one-way sweeps in 2 s -> 3 or 4 reversals


def test_deterministic_with_seed_and_independent_of_chunking():
    cfg = SynthConfig(seed=42)
    whole = SynthSource(cfg, T0).generate(T0, 3.0)
    parts = list(SynthSource(cfg, T0).batches(T0, 3.0, batch=777))
    cat = np.concatenate([p.power_db for p in parts])
    np.testing.assert_array_equal(whole.power_db, cat)
    np.testing.assert_array_equal(whole.t, np.concatenate([p.t for p in parts]))
    other = SynthSource(SynthConfig(seed=43), T0).generate(T0, 3.0)
    assert not np.array_equal(other.power_db, whole.power_db)
    assert parts[-1].rx_t == parts[-1].t[-1]


def test_rate_and_time_grid():
    src = SynthSource(SynthConfig(rate_sps=1000.0), T0)
    b = src.generate(T0 + 1.0, 2.0)
    assert len(b) == 2000
    assert b.t[0] == pytest.approx(T0 + 1.0, abs=1e-6)
    assert np.allclose(np.diff(b.t), 1e-3, rtol=0, atol=1e-6)  # float64 Unix time


@pytest.mark.parametrize("fmt", ["json-single", "json-batch", "binary", "raw-f32"])
def test_every_format_decodes_back(fmt):
    src = SynthSource(SynthConfig(rate_sps=1000.0), T0)
    b = src.generate(T0, 0.05)
    msgs = encode_batch(b, fmt, 0, "abcd", b"", 1000.0)
    d = Decoder("raw-f32" if fmt == "raw-f32" else "auto")
    out = d.decode_many(msgs, T0)
    assert not d.rejected and d.lost == 0
    got = np.concatenate([x.angle_deg for x in out])
    np.testing.assert_allclose(got, b.angle_deg, atol=1e-4)
    if fmt != "raw-f32":
        np.testing.assert_allclose(np.concatenate([x.t for x in out]), b.t, atol=1e-6)


def test_scenarios_are_documented_and_valid():
    assert {"steady", "mast-sway", "dead-column", "reflector"} <= set(SCENARIOS)
    for name, sc in SCENARIOS.items():
        assert sc.name == name and sc.description and sc.timeline
        SynthConfig(scenario=name).validate()
    with pytest.raises(ValueError):
        get_scenario("nope")
