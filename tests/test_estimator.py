"""Rolling estimator: averaging, sweep detection, staleness, bounded state.

References used below:
- Uniform linear array, N = 4, d = lambda/2, broadside, isotropic elements: power pattern
  |AF|^2 with AF = sum_n exp(j n pi sin(theta)) / N (C. A. Balanis, *Antenna Theory*,
  3rd ed., ch. 6, the N-element uniform array factor -- equation numbering from memory).
  The half-power points are found here by a brute-force complex sum and
  ``scipy.optimize.brentq``: HPBW = 26.3230 deg.
- Step response of a first-order low-pass: 1 - exp(-t/tau) (any signals text, e.g.
  A. V. Oppenheim & A. S. Willsky, *Signals and Systems*, 2nd ed., sec. 6.5.1 -- from
  memory): 0.632 at t = tau.
- Sample standard deviation: ``numpy.std(..., ddof=1)``.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scipy.optimize import brentq

from stream.array_model import ArrayModel
from stream.batch import SampleBatch
from stream.estimator import (
    MIN_SWEEP_BINS,
    EstimatorConfig,
    PatternSnapshot,
    RollingPattern,
)
from stream.pattern import measure
from stream.sweep_log import SweepRecord, circular_std_deg
from stream.sweeps import SweepDetector

# -- helpers -------------------------------------------------------------------------


def _feed(est: RollingPattern, angle: np.ndarray, power: np.ndarray, *, size: int = 1000,
          t0: float = 0.0, dt: float = 0.0) -> float:
    """Feed samples in batches of ``size``; batch j is received at t0 + j*dt."""
    now = t0
    for j, i in enumerate(range(0, len(angle), size)):
        now = t0 + j * dt
        est.update(SampleBatch.from_arrays(angle[i:i + size], power[i:i + size]), now)
    return now


def _feed_split(est: RollingPattern, angle: np.ndarray, power: np.ndarray,
                cuts: list[int], times: np.ndarray | None) -> None:
    """Feed samples cut at ``cuts``; a batch is received at the time of its last sample
    (``times``) or at 0 when ``times`` is None."""
    edges = [0, *sorted(set(c for c in cuts if 0 < c < len(angle))), len(angle)]
    for lo, hi in zip(edges[:-1], edges[1:], strict=True):
        now = 0.0 if times is None else float(times[hi - 1])
        est.update(SampleBatch.from_arrays(angle[lo:hi], power[lo:hi]), now)


def _legs(turns: list[float], step: float) -> tuple[np.ndarray, np.ndarray]:
    """Back-and-forth angles through the turning points ``turns``; each leg ends on its
    turning point.  Returns the angles and each sample's leg number."""
    ang = [np.array([turns[0]])]
    lab = [np.array([0])]
    for k, (a, b) in enumerate(zip(turns[:-1], turns[1:], strict=True)):
        n = int(round(abs(b - a) / step))
        seg = a + (b - a) * np.arange(1, n + 1) / n
        ang.append(seg)
        lab.append(np.full(n, k))
    return np.concatenate(ang), np.concatenate(lab)


def _hpbw_reference_deg(n: int = 4) -> float:
    """HPBW of the uniform broadside array from a brute-force complex sum (Balanis ch. 6)."""
    def af2(theta_deg: float) -> float:
        psi = math.pi * math.sin(math.radians(theta_deg))
        return abs(np.sum(np.exp(1j * np.arange(n) * psi))) ** 2 / n ** 2
    return 2.0 * brentq(lambda t: af2(t) - 0.5, 0.1, 29.0)


def _state_nbytes(est: RollingPattern) -> int:
    return sum(v.nbytes for v in vars(est).values() if isinstance(v, np.ndarray))


# -- configuration -------------------------------------------------------------------


@pytest.mark.parametrize("kwargs, words", [
    ({"bin_deg": 0.05}, "bin width"),
    ({"bin_deg": 11.0}, "bin width"),
    ({"bin_deg": float("nan")}, "bin width"),
    ({"averaging": "median"}, "averaging"),
    ({"tau_s": 0.0}, "time constant"),
    ({"sweeps_k": 0}, "sweeps"),
    ({"stale_after_s": -1.0}, "age"),
    ({"history": 0}, "history"),
])
def test_config_rejects_bad_values_with_a_clear_message(kwargs: dict, words: str) -> None:
    with pytest.raises(ValueError, match=words):
        EstimatorConfig(**kwargs)


def test_config_bins_divide_the_circle() -> None:
    assert EstimatorConfig(bin_deg=0.1).n_bins == 3600
    assert EstimatorConfig(bin_deg=1.0).n_bins == 360
    assert EstimatorConfig(bin_deg=0.7).bin_width_deg == pytest.approx(360.0 / 514)
    assert EstimatorConfig(bin_deg=10).n_bins == 36


# -- the known pattern ---------------------------------------------------------------


@pytest.mark.parametrize("bin_deg, tol_deg", [(0.1, 0.01), (1.0, 0.05)])
@pytest.mark.parametrize("averaging", ["ema", "sweeps"])
def test_known_array_pattern_is_recovered(bin_deg: float, tol_deg: float,
                                          averaging: str) -> None:
    """Swept N=4, d=0.5 lambda broadside array: the snapshot's HPBW matches the brute-force
    value (26.32 deg) within a small fraction of a bin (binning in linear power and
    interpolation between bin centres are the only error sources)."""
    ref = _hpbw_reference_deg()
    assert ref == pytest.approx(26.323, abs=1e-3)  # brute-force complex sum, Balanis ch. 6
    model = ArrayModel(n_elements=4, spacing_wl=0.5)
    ang, _ = _legs([-60.0, 60.0, -60.0, 60.0], 0.013)
    est = RollingPattern(EstimatorConfig(bin_deg=bin_deg, averaging=averaging))
    now = _feed(est, ang, model.power_db(ang), dt=0.01)
    snap = est.snapshot(now)
    assert isinstance(snap, PatternSnapshot)
    assert np.all(np.diff(snap.angle_deg) > 0)
    # A bin's angle is the mean angle of the samples that fell in it (not its centre).
    for got, centre in ((snap.angle_deg[0], -60.0), (snap.angle_deg[-1], 60.0)):
        inside = ang[(ang >= centre - bin_deg / 2) & (ang < centre + bin_deg / 2)]
        assert got == pytest.approx(inside.mean(), abs=1e-9)
    m = measure(snap.angle_deg, snap.power_db)
    assert m.hpbw_deg == pytest.approx(ref, abs=tol_deg)
    assert m.peak_angle_deg == pytest.approx(0.0, abs=tol_deg)
    # Each completed sweep is measured on its own samples and agrees too.
    assert est.sweep_count == 2
    for rec in est.sweeps:
        assert isinstance(rec, SweepRecord)
        assert rec.hpbw_deg == pytest.approx(ref, abs=tol_deg)
        assert rec.peak_angle_deg == pytest.approx(0.0, abs=tol_deg)
        assert rec.peak_power_db == pytest.approx(0.0, abs=0.01)
        assert rec.angle_min_deg <= -59.0 and rec.angle_max_deg >= 59.0


@pytest.mark.parametrize("step_deg, bin_deg", [(0.5, 1.0), (0.25, 1.0), (0.3, 1.0), (0.5, 2.0)])
@pytest.mark.parametrize("averaging", ["ema", "sweeps"])
def test_a_steering_grid_finer_than_the_bins_gives_no_peak_bias(
        step_deg: float, bin_deg: float, averaging: str) -> None:
    """A broadside array's pattern is symmetric about 0 (Balanis ch. 6: |AF| depends on
    sin(theta) - sin(theta0) only through its magnitude), so the peak is at 0.  With a
    steering grid that does not line up with the bins (0.5-degree steps put 0 and 0.5
    in the same 1-degree bin) a bin reported at its centre would bias the peak by a
    quarter step (0.09 to 0.30 deg here); bins reported at their samples' mean angle
    stay within 3 % of a bin (measured: <= 0.014 deg at 1-deg bins, 0.054 deg at 2-deg
    bins with exponential averaging of part-filled bins)."""
    ang, _ = _legs([-60.0, 60.0, -60.0, 60.0, -60.0], step_deg)
    est = RollingPattern(EstimatorConfig(bin_deg=bin_deg, averaging=averaging))
    now = _feed(est, ang, _pattern_db(ang), size=100, dt=0.01)
    m = measure(*_snap_arrays(est.snapshot(now)))
    assert m.peak_angle_deg == pytest.approx(0.0, abs=0.03 * bin_deg)
    for rec in est.sweeps:
        assert rec.peak_angle_deg == pytest.approx(0.0, abs=0.03 * bin_deg)


def _snap_arrays(snap: PatternSnapshot) -> tuple[np.ndarray, np.ndarray]:
    return snap.angle_deg, snap.power_db


# -- exponential averaging -----------------------------------------------------------


def test_ema_step_response_follows_one_minus_exp() -> None:
    """After a step in the input, the bin moves 1 - exp(-t/tau) of the way (0.632 at
    t = tau), whatever the (irregular) update times."""
    tau = 2.0
    est = RollingPattern(EstimatorConfig(bin_deg=1.0, tau_s=tau, stale_after_s=1e9))
    a_db, b_db = -40.0, -20.0
    a_lin, b_lin = 10 ** (a_db / 10), 10 ** (b_db / 10)
    for t in np.arange(0.0, 5.0, 0.1):
        est.update(SampleBatch.from_arrays([0.2, -0.3], [a_db, a_db]), float(t))
    t_step = 4.9  # last update at the old level
    rng = np.random.default_rng(7)
    times = t_step + np.cumsum(rng.uniform(0.01, 0.2, 200))
    times = np.sort(np.concatenate((times, t_step + tau * np.array([1.0, 2.0, 3.0]))))
    frac = {}
    for t in times:
        est.update(SampleBatch.from_arrays([0.1], [b_db]), float(t))
        snap = est.snapshot(float(t))
        p_lin = 10 ** (snap.power_db[0] / 10)
        frac[round((t - t_step) / tau, 9)] = (p_lin - a_lin) / (b_lin - a_lin)
    assert frac[1.0] == pytest.approx(1 - math.exp(-1), rel=1e-9)  # 0.632
    assert frac[2.0] == pytest.approx(1 - math.exp(-2), rel=1e-9)
    assert frac[3.0] == pytest.approx(1 - math.exp(-3), rel=1e-9)


def test_ema_first_fill_takes_the_batch_mean_in_linear_power() -> None:
    est = RollingPattern(EstimatorConfig(bin_deg=1.0))
    est.update(SampleBatch.from_arrays([10.0, 10.2, 9.8], [-10.0, -20.0, -30.0]), 1.0)
    snap = est.snapshot(1.0)
    mean_lin = (0.1 + 0.01 + 0.001) / 3
    assert snap.angle_deg.tolist() == [10.0]
    assert snap.power_db[0] == pytest.approx(10 * math.log10(mean_lin), abs=1e-12)


@pytest.mark.parametrize("lo, hi", [(-5.0, 5.0), (0.6, 1.4)])  # scattered; one bin
def test_ema_batches_received_at_the_same_time_pool(lo: float, hi: float) -> None:
    """Splitting a batch without changing ``now`` leaves the state unchanged (a slow
    sweep inside a few bins takes the scalar path, a scattered one the vector path)."""
    rng = np.random.default_rng(3)
    ang = rng.uniform(lo, hi, 400)
    if hi - lo < 2:
        ang = np.sort(ang)
    pw = rng.normal(-30, 3, 400)
    one = RollingPattern(EstimatorConfig(bin_deg=1.0))
    two = RollingPattern(EstimatorConfig(bin_deg=1.0))
    for est in (one, two):
        est.update(SampleBatch.from_arrays(ang[:100], pw[:100]), 1.0)
    one.update(SampleBatch.from_arrays(ang[100:], pw[100:]), 2.5)
    two.update(SampleBatch.from_arrays(ang[100:250], pw[100:250]), 2.5)
    two.update(SampleBatch.from_arrays(ang[250:], pw[250:]), 2.5)
    s1, s2 = one.snapshot(3.0), two.snapshot(3.0)
    np.testing.assert_array_equal(s1.angle_deg, s2.angle_deg)
    np.testing.assert_allclose(s1.power_db, s2.power_db, rtol=0, atol=1e-12)


# -- averaging over sweeps -------------------------------------------------------------


@pytest.mark.parametrize("k", [1, 3])
def test_sweeps_mode_is_the_mean_of_the_last_k_sweeps(k: int) -> None:
    """Per bin, the pooled linear mean of every sample of the last K complete sweeps and
    the sweep in progress, computed here directly from the labelled samples."""
    ang, leg = _legs([-30, 30, -30, 30, -30, 30, -30], 1.0)
    rng = np.random.default_rng(11)
    pw = -20.0 + 6.0 * leg + rng.normal(0.0, 2.0, ang.size)  # each sweep at its own level
    est = RollingPattern(EstimatorConfig(bin_deg=1.0, averaging="sweeps", sweeps_k=k))
    # Stop at the sample that reveals the end of the 4th leg: legs 0..3 complete, leg 4
    # in progress with that one sample.
    stop = int(np.flatnonzero(leg == 4)[0]) + 1
    _feed(est, ang[:stop], pw[:stop], size=37)
    assert est.sweep_count == 4
    keep = (leg[:stop] >= 4 - k)
    idx = np.rint(ang[:stop][keep]).astype(int) + 180
    lin = 10 ** (pw[:stop][keep] / 10)
    exp_sum = np.bincount(idx, weights=lin, minlength=360)
    exp_cnt = np.bincount(idx, minlength=360)
    sel = exp_cnt > 0
    snap = est.snapshot(0.0)
    np.testing.assert_array_equal(snap.angle_deg, np.arange(360)[sel] - 180.0)
    np.testing.assert_allclose(snap.power_db, 10 * np.log10(exp_sum[sel] / exp_cnt[sel]),
                               rtol=1e-12)


# -- sweep detection -------------------------------------------------------------------


def _back_and_forth(n_legs: int, step: float = 0.37) -> np.ndarray:
    turns = [-60.0 if i % 2 == 0 else 60.0 for i in range(n_legs + 1)]
    ang, _ = _legs(turns, step)
    return ang


def _sawtooth(n_teeth: int, step: float = 0.5) -> np.ndarray:
    tooth = np.arange(-60.0, 60.0 + 1e-9, step)
    return np.tile(tooth, n_teeth)


def _turning(turns: float, step: float = 0.25, start: float = 0.0,
             sign: float = 1.0) -> np.ndarray:
    return start + sign * np.arange(0.0, 360.0 * turns, step)


def _pattern_db(ang: np.ndarray) -> np.ndarray:
    return ArrayModel(n_elements=4, spacing_wl=0.5, element_exp=1.0).power_db(
        (np.asarray(ang) + 180.0) % 360.0 - 180.0)


@pytest.mark.parametrize("size", [1, 7, 1000, 100_000])
def test_back_and_forth_sweeps_are_counted(size: int) -> None:
    ang = _back_and_forth(7)
    est = RollingPattern()
    _feed(est, ang, _pattern_db(ang), size=size)
    assert est.sweep_count == 6  # the 7th leg has not been seen to end yet
    ang2 = np.concatenate((ang, [59.0, 58.0]))  # the reversal reveals the end of leg 7
    est2 = RollingPattern()
    _feed(est2, ang2, _pattern_db(ang2), size=size)
    assert est2.sweep_count == 7
    for rec in est2.sweeps:
        assert rec.peak_angle_deg == pytest.approx(0.0, abs=0.2)
        assert rec.angle_max_deg - rec.angle_min_deg >= 118.0


@pytest.mark.parametrize("size", [1, 13, 1000])
def test_sawtooth_sweeps_are_counted(size: int) -> None:
    ang = _sawtooth(5)
    est = RollingPattern()
    _feed(est, ang, _pattern_db(ang), size=size)
    assert est.sweep_count == 4  # one per fly-back
    assert all(r.angle_min_deg == -60.0 and r.angle_max_deg == 60.0 for r in est.sweeps)


def _cut_crossings(travel: np.ndarray, start: float, sign: float, cut: float) -> int:
    """Independent count of the sweeps a turning mount should give: after the first full
    turn, one sweep ends at each crossing of the cut angle (``cut + 360 m``)."""
    u = start + sign * travel
    m = np.floor((u - cut) / 360.0) if sign > 0 else np.ceil((u - cut) / 360.0)
    crossed = np.flatnonzero(np.diff(m) != 0) + 1
    return int(np.count_nonzero(travel[crossed] > 360.0))


@pytest.mark.parametrize("start", [0.0, 123.0])
@pytest.mark.parametrize("sign", [1.0, -1.0])
@pytest.mark.parametrize("size", [3, 1000, 4096])
def test_turning_mount_counts_one_sweep_per_turn_cut_behind_the_beam(
        start: float, sign: float, size: int) -> None:
    """A mount turning 3.6 times (angles given unwrapped, beyond 360: the estimator
    wraps them).  Once a full turn shows it is a mount, turns are cut at +-180, behind
    the beam at 0: every sweep after the first covers the whole circle with the beam in
    the middle."""
    travel = np.arange(0.0, 360.0 * 3.6, 0.25)
    ang = start + sign * travel
    est = RollingPattern()
    _feed(est, ang, _pattern_db(ang), size=size)
    assert est.sweep_count == _cut_crossings(travel, start, sign, 180.0) >= 2
    first, *full = est.sweeps
    assert first.peak_angle_deg == pytest.approx(0.0, abs=0.2)
    for rec in full:
        assert (rec.angle_max_deg - rec.angle_min_deg) % 360.0 == pytest.approx(359.75)
        seam_end = rec.angle_min_deg if sign > 0 else rec.angle_max_deg
        assert seam_end == -180.0
        assert rec.peak_angle_deg == pytest.approx(0.0, abs=0.2)
        assert rec.hpbw_deg == pytest.approx(full[0].hpbw_deg)


@pytest.mark.parametrize("sign", [1.0, -1.0])
def test_turning_mount_moves_the_cut_away_from_a_beam_at_180(sign: float) -> None:
    """Beam at 180 deg: after the first turn is measured, turns are cut at 0 instead."""
    travel = np.arange(0.0, 360.0 * 5.2, 0.5)
    ang = 30.0 + sign * travel
    est = RollingPattern()
    _feed(est, ang, _pattern_db(ang - 180.0))
    assert est.sweep_count >= 4
    for rec in est.sweeps[-3:]:  # (0.5-deg samples in 1-deg bins: up to 0.25 deg off)
        assert abs(rec.peak_angle_deg) == pytest.approx(180.0, abs=0.3)
        seam_end = rec.angle_min_deg if sign > 0 else rec.angle_max_deg
        assert seam_end == 0.0
        assert (rec.angle_max_deg - rec.angle_min_deg) % 360.0 == pytest.approx(359.5)


@pytest.mark.parametrize("wrapped", [False, True])
@pytest.mark.parametrize("size", [5, 1000])
def test_sector_sweep_across_the_seam_is_not_split(wrapped: bool, size: int) -> None:
    """Back and forth over 150..210 deg (a beam facing +-180): the seam is crossed on
    every leg but only the reversals end sweeps."""
    ang, _ = _legs([150.0, 210.0, 150.0, 210.0, 150.0, 210.0], 0.25)
    if wrapped:
        ang = (ang + 180.0) % 360.0 - 180.0
    est = RollingPattern()
    _feed(est, ang, _pattern_db(ang - 180.0), size=size)
    assert est.sweep_count == 4
    for rec in est.sweeps:  # (ends within the reversal hysteresis of the turning points)
        assert rec.peak_angle_deg % 360.0 == pytest.approx(180.0, abs=0.2)
        assert rec.angle_min_deg == pytest.approx(150.0, abs=1.0)
        assert rec.angle_max_deg == pytest.approx(-150.0, abs=1.0)


def test_wide_sawtooth_fly_back_ends_each_sweep() -> None:
    """-150 -> +150 then back to -150: the fly-back is shorter the other way round the
    circle, so it reads as a turn; the first fly-back completes the first full turn (a
    mount, then), every later one crosses the cut at 180 and ends a sweep."""
    ang = np.tile(np.arange(-150.0, 150.0 + 1e-9, 0.5), 5)
    est = RollingPattern()
    _feed(est, ang, _pattern_db(ang))
    assert est.sweep_count == 3
    assert all(r.angle_min_deg == -150.0 and r.angle_max_deg == 150.0 for r in est.sweeps)
    # 0.5-deg samples in 1-deg bins: the binned pattern sits up to 0.25 deg off.
    assert all(r.peak_angle_deg == pytest.approx(0.0, abs=0.3) for r in est.sweeps)


def test_jitter_below_the_hysteresis_does_not_split_sweeps() -> None:
    rng = np.random.default_rng(5)
    ang = _back_and_forth(4, step=0.05)
    noisy = ang + rng.uniform(-0.2, 0.2, ang.size)  # +-0.2 deg: within half a 1-deg bin
    est = RollingPattern()
    _feed(est, noisy, _pattern_db(noisy))
    assert est.sweep_count == 3


def test_too_short_sweeps_are_ignored_and_their_samples_kept() -> None:
    """A reversal after only a few bins (< MIN_SWEEP_BINS) is not a sweep."""
    ang, _ = _legs([0.0, 3.0, 0.0, 3.0, -60.0, 60.0, 50.0], 1.0)
    est = RollingPattern()
    _feed(est, ang, _pattern_db(ang))
    assert MIN_SWEEP_BINS == 5
    assert est.sweep_count == 2
    assert est.sweeps[0].angle_min_deg == -60.0 and est.sweeps[0].angle_max_deg == 3.0


_SCENARIOS = ("back_and_forth", "sawtooth", "turning", "rear_sector", "random_walk")


def _scenario(name: str, seed: int) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    if name == "back_and_forth":
        ang = _back_and_forth(5, step=rng.uniform(0.2, 1.5))
    elif name == "sawtooth":
        ang = _sawtooth(4, step=rng.uniform(0.3, 1.5))
    elif name == "rear_sector":
        ang, _ = _legs([150.0, 210.0, 150.0, 210.0, 150.0], rng.uniform(0.2, 1.5))
        ang = (ang + 180.0) % 360.0 - 180.0
    elif name == "turning":
        ang = _turning(2.6, step=rng.uniform(0.5, 2.0), start=rng.uniform(-180, 180),
                       sign=rng.choice([-1.0, 1.0]))
    else:
        steps = rng.normal(0.0, 1.0, 1500) + rng.choice([-1.0, 1.0], 1500) * 0.3
        ang = np.cumsum(steps) * rng.uniform(0.5, 3.0)
    pw = _pattern_db(ang) + rng.normal(0.0, 0.3, ang.size)
    return ang, pw


def _records_equal(a: tuple[SweepRecord, ...], b: tuple[SweepRecord, ...]) -> None:
    assert len(a) == len(b)
    for ra, rb in zip(a, b, strict=True):
        for f in ("t", "peak_angle_deg", "hpbw_deg", "peak_power_db", "angle_min_deg",
                  "angle_max_deg"):
            va, vb = getattr(ra, f), getattr(rb, f)
            assert (va is None) == (vb is None), f
            if va is not None:
                assert va == pytest.approx(vb, abs=1e-7), f


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(name=st.sampled_from(_SCENARIOS), seed=st.integers(0, 2**32 - 1),
       cuts=st.lists(st.integers(0, 5000), max_size=40),
       averaging=st.sampled_from(["ema", "sweeps"]))
def test_batch_boundaries_do_not_change_the_result(name: str, seed: int, cuts: list[int],
                                                   averaging: str) -> None:
    """The same samples cut into batches anywhere give the same sweeps and pattern.
    Receive times: each sample has one; a batch is received at its last sample's time in
    sweeps mode, and all at one time for EMA (EMA weights depend on receive times)."""
    ang, pw = _scenario(name, seed)
    cfg = EstimatorConfig(bin_deg=1.0, averaging=averaging, stale_after_s=1e9)
    times = None if averaging == "ema" else np.arange(ang.size) * 1e-3
    whole = RollingPattern(cfg)
    _feed_split(whole, ang, pw, [], times)
    split = RollingPattern(cfg)
    _feed_split(split, ang, pw, cuts, times)
    assert split.samples == whole.samples == ang.size
    assert split.sweep_count == whole.sweep_count
    if averaging == "ema":
        _records_equal(split.sweeps, whole.sweeps)
    else:  # record times are the receive times of different batches; compare the rest
        assert len(split.sweeps) == len(whole.sweeps)
        for ra, rb in zip(split.sweeps, whole.sweeps, strict=True):
            assert ra.peak_angle_deg == pytest.approx(rb.peak_angle_deg, abs=1e-7)
            assert ra.hpbw_deg == pytest.approx(rb.hpbw_deg, abs=1e-7)
            assert ra.angle_min_deg == rb.angle_min_deg
            assert ra.angle_max_deg == rb.angle_max_deg
    s1, s2 = split.snapshot(10.0), whole.snapshot(10.0)
    np.testing.assert_array_equal(s1.angle_deg, s2.angle_deg)
    np.testing.assert_allclose(s1.power_db, s2.power_db, rtol=0, atol=1e-9)


# -- staleness, bounds, spread, reset --------------------------------------------------


def test_stale_bins_are_excluded() -> None:
    est = RollingPattern(EstimatorConfig(bin_deg=1.0, stale_after_s=30.0))
    est.update(SampleBatch.from_arrays([-10.0, -9.0], [-30.0, -31.0]), 0.0)
    est.update(SampleBatch.from_arrays([5.0], [-20.0]), 20.0)
    assert est.snapshot(30.0).angle_deg.tolist() == [-10.0, -9.0, 5.0]  # age 30: still valid
    assert est.snapshot(30.5).angle_deg.tolist() == [5.0]
    empty = est.snapshot(50.5)
    assert len(empty) == 0 and empty.power_db.dtype == np.float64
    est.update(SampleBatch.from_arrays([-10.0], [-30.0]), 60.0)  # refreshed again
    assert est.snapshot(60.0).angle_deg.tolist() == [-10.0]


def test_stale_bins_are_excluded_in_sweeps_mode() -> None:
    est = RollingPattern(EstimatorConfig(averaging="sweeps", stale_after_s=5.0))
    est.update(SampleBatch.from_arrays([1.0, 2.0], [-30.0, -31.0]), 0.0)
    est.update(SampleBatch.from_arrays([3.0], [-20.0]), 4.0)
    assert est.snapshot(6.0).angle_deg.tolist() == [3.0]


def test_state_is_bounded_whatever_the_session_length() -> None:
    est = RollingPattern(EstimatorConfig(bin_deg=1.0, averaging="sweeps", history=8))
    ang = _back_and_forth(10, step=1.0)
    pw = _pattern_db(ang)
    _feed(est, ang, pw)
    size = _state_nbytes(est)
    for _ in range(30):
        _feed(est, ang[1:], pw[1:])
    assert est.sweep_count > 250
    assert len(est.sweeps) == 8
    assert _state_nbytes(est) == size
    assert est.samples == ang.size + 30 * (ang.size - 1)


def _parabola_sweeps(peaks: list[float]) -> RollingPattern:
    """Back-and-forth sweeps over -40..40 of a dB parabola centred on each peak in turn
    (one sample per bin centre, so each sweep's measured peak is exact)."""
    est = RollingPattern(EstimatorConfig(bin_deg=1.0))
    turns = [-40.0 if i % 2 == 0 else 40.0 for i in range(len(peaks) + 1)]
    ang, leg = _legs(turns, 1.0)
    ang = np.concatenate((ang, [39.0 if len(peaks) % 2 else -39.0]))
    leg = np.concatenate((leg, [len(peaks)]))
    centre = np.array([*peaks, 0.0])[leg]
    _feed(est, ang, -0.02 * (ang - centre) ** 2)
    return est


def test_peak_spread_is_the_sample_std_of_recent_peaks() -> None:
    peaks = [0.0, 2.0, -3.0, 1.0, 4.0, -1.0, 0.0, 5.0, 3.0, -2.0]
    est = _parabola_sweeps(peaks)
    got = [r.peak_angle_deg for r in est.sweeps]
    np.testing.assert_allclose(got, peaks, atol=1e-9)
    assert est.peak_angle_spread_deg() == pytest.approx(np.std(peaks[-8:], ddof=1), abs=1e-9)
    assert est.peak_angle_spread_deg(4) == pytest.approx(np.std(peaks[-4:], ddof=1), abs=1e-9)
    assert _parabola_sweeps([3.0]).peak_angle_spread_deg() is None


def test_circular_std_across_the_seam_equals_the_linear_std_of_unwrapped_angles() -> None:
    unwrapped = np.array([178.0, 181.5, 179.0, 183.0, 176.5])
    wrapped = (unwrapped + 180.0) % 360.0 - 180.0  # 178, -178.5, 179, -177, 176.5
    assert circular_std_deg(wrapped) == pytest.approx(np.std(unwrapped, ddof=1), abs=1e-9)
    plain = [1.0, 2.5, -0.5]
    assert circular_std_deg(plain) == pytest.approx(np.std(plain, ddof=1), abs=1e-12)
    assert circular_std_deg([5.0]) is None


def test_reset_clears_everything() -> None:
    est = RollingPattern(EstimatorConfig(averaging="sweeps"))
    ang = _back_and_forth(4)
    _feed(est, ang, _pattern_db(ang))
    assert est.sweep_count and est.samples and len(est.snapshot(0.0))
    est.reset()
    assert est.sweep_count == 0 and est.samples == 0 and est.sweeps == ()
    assert len(est.snapshot(0.0)) == 0
    assert est.peak_angle_spread_deg() is None
    _feed(est, ang, _pattern_db(ang))
    assert est.sweep_count == 3  # detection starts afresh


def test_non_finite_samples_are_dropped() -> None:
    est = RollingPattern()
    est.update(SampleBatch.from_arrays([1.0, np.nan, 2.0, np.inf], [-30.0, -30.0, np.nan,
                                                                    -20.0]), 1.0)
    assert est.samples == 1
    snap = est.snapshot(1.0)
    assert snap.angle_deg.tolist() == [1.0] and np.isfinite(snap.power_db).all()


def test_angles_in_the_0_to_360_convention_land_in_wrapped_bins() -> None:
    est = RollingPattern()
    est.update(SampleBatch.from_arrays([359.6, 270.0, 180.0, 10.0], [-1.0, -2.0, -3.0, -4.0]),
               1.0)
    snap = est.snapshot(1.0)
    # Each bin reports its samples' mean angle: 359.6 deg is -0.4 deg.
    np.testing.assert_allclose(snap.angle_deg, [-180.0, -90.0, -0.4, 10.0], atol=1e-9)
    np.testing.assert_allclose(snap.power_db, [-3.0, -2.0, -1.0, -4.0], atol=1e-12)


def test_float32_input_gives_the_float64_result() -> None:
    """Binary wire batches may carry float32 arrays (decoded without a copy)."""
    ang = _back_and_forth(3, step=0.37)
    pw = _pattern_db(ang)
    a32, p32 = ang.astype(np.float32), pw.astype(np.float32)
    ref, est = RollingPattern(), RollingPattern()
    for i in range(0, ang.size, 100):
        ref.update(SampleBatch.from_arrays(a32[i:i + 100].astype(np.float64),
                                           p32[i:i + 100].astype(np.float64)), 1.0)
        est.update(SampleBatch(t=np.zeros(len(a32[i:i + 100])), angle_deg=a32[i:i + 100],
                               power_db=p32[i:i + 100]), 1.0)
    assert est.sweep_count == ref.sweep_count == 2
    s1, s2 = est.snapshot(1.0), ref.snapshot(1.0)
    np.testing.assert_array_equal(s1.angle_deg, s2.angle_deg)
    np.testing.assert_allclose(s1.power_db, s2.power_db, atol=1e-12)


def _streams() -> dict[str, list[SampleBatch]]:
    """Invented streams that exercise every path of the estimator: dense sweeps (the
    shared path), sweeps facing the +-180 seam, a turning mount, junk angles, NaN and
    out-of-range values, float32 arrays, uneven batch sizes."""
    rng = np.random.default_rng(11)
    model = ArrayModel(n_elements=6, spacing_wl=0.5, element_exp=1.0)

    def cut(ang: np.ndarray, sizes: tuple[int, ...] = (1000,)) -> list[SampleBatch]:
        pw = model.power_db(ang) - 40.0 + rng.normal(0.0, 0.3, ang.size)
        out, i, k = [], 0, 0
        while i < ang.size:
            n = sizes[k % len(sizes)]
            out.append(SampleBatch.from_arrays(ang[i:i + n], pw[i:i + n]))
            i += n
            k += 1
        return out

    tri = np.concatenate([np.linspace(-60, 60, 60_000), np.linspace(60, -60, 60_000)])
    seam = (np.concatenate([np.linspace(150, 210, 30_000),
                            np.linspace(210, 150, 30_000)]) + 180.0) % 360.0 - 180.0
    turn = (np.arange(200_000) * 0.004 + 180.0) % 360.0 - 180.0
    junk = rng.uniform(-200.0, 400.0, 20_000)
    dense = cut(np.tile(tri, 2))
    bad = cut(tri.copy())
    bad[7].power_db[3] = np.nan
    bad[9].angle_deg[5] = 250.0
    f32 = [SampleBatch(b.t, b.angle_deg.astype(np.float32), b.power_db.astype(np.float32))
           for b in cut(tri)]
    return {"dense": dense, "seam": cut(seam), "turning": cut(turn, (700, 1300, 1000)),
            "junk": cut(junk, (100, 1000)), "bad": bad, "float32": f32}


@pytest.mark.parametrize("cfg", [EstimatorConfig(), EstimatorConfig(bin_deg=0.25),
                                 EstimatorConfig(averaging="sweeps", sweeps_k=2)],
                         ids=["ema-1deg", "ema-0.25deg", "sweeps"])
def test_update_many_gives_the_bits_of_update_one_by_one(cfg) -> None:
    """The replay speed-up (``RollingPattern.update_many``) must not change one bit of
    the estimator's state: replay stays exactly equal to live (moved here from the
    benchmark's tests: it is the estimator's property)."""
    for name, batches in _streams().items():
        one, many = RollingPattern(cfg), RollingPattern(cfg)
        nows = [1.0e9 + 0.001 * i for i in range(len(batches))]
        nows[20:30] = [nows[20]] * 10  # several batches at one receive time
        i = 0
        for step in (13, 5, 31, 2, 64, 97, 256) * 100:  # compare after each call
            if i >= len(batches):
                break
            for b, now in zip(batches[i:i + step], nows[i:i + step], strict=True):
                one.update(b, now)
            many.update_many(batches[i:i + step], nows[i:i + step])
            i += step
            for attr, a in vars(one).items():
                b = vars(many)[attr]
                if isinstance(a, np.ndarray):
                    assert np.array_equal(a, b, equal_nan=True), (name, i, attr)
                elif isinstance(a, float | int):
                    assert a == b or (a != a and b != b), (name, i, attr)
        assert repr(one.sweeps) == repr(many.sweeps), name
        assert (one.samples, one.sweep_count) == (many.samples, many.sweep_count), name
        s1, s2 = one.snapshot(nows[-1]), many.snapshot(nows[-1])
        assert np.array_equal(s1.angle_deg, s2.angle_deg), name
        assert np.array_equal(s1.power_db, s2.power_db), name


def test_update_many_stops_trying_runs_on_a_stream_that_never_runs(monkeypatch) -> None:
    """Batches of 100 samples spanning ~10 bins never take the run path; a replay hands
    them over ten per call.  The back-off must carry over between calls (it restarted
    every call and tried three failing runs per ten batches), and the results stay
    those of update() one by one."""
    ang = np.tile(np.arange(-60.0, 60.0, 0.1), 10)  # 10 sawtooth sweeps, 120 batches
    pw = _pattern_db(ang)
    batches = [SampleBatch(np.full(100, 1.0e9), ang[i:i + 100], pw[i:i + 100])
               for i in range(0, ang.size, 100)]
    nows = [1.0e9 + 0.01 * k for k in range(len(batches))]
    tries = []
    fast, ref = RollingPattern(), RollingPattern()
    real = RollingPattern._fold_run
    monkeypatch.setattr(RollingPattern, "_fold_run",
                        lambda self, *a: tries.append(1) or real(self, *a))
    for i in range(0, len(batches), 10):
        fast.update_many(batches[i:i + 10], nows[i:i + 10])
        for b, now in zip(batches[i:i + 10], nows[i:i + 10], strict=True):
            ref.update(b, now)
    # waits of 1, 3, 7, 15, 31, 63 batches: 6 or 7 tries in 120 batches (36 when
    # every call started afresh)
    assert 0 < len(tries) <= 8, len(tries)
    assert np.array_equal(fast.snapshot(nows[-1]).power_db, ref.snapshot(nows[-1]).power_db)
    assert repr(fast.sweeps) == repr(ref.sweeps)


# -- fold paths: every one bit for bit equal to the plain reference ---------------------


def _same_state(ref: RollingPattern, other: RollingPattern, where: object,
                records: bool = True) -> None:
    """Every array, number and (with ``records``) sweep record of the two estimators and
    their sweep detectors equal, bit for bit (NaN equal to NaN)."""
    for attr, a in vars(ref).items():
        if attr == "_path":
            continue
        b = vars(other)[attr]
        if isinstance(a, np.ndarray):
            assert a.dtype == b.dtype and np.array_equal(a, b, equal_nan=True), (where, attr)
        elif isinstance(a, float | int):
            assert a == b or (a != a and b != b), (where, attr)
    for slot in SweepDetector.__slots__:
        a, b = getattr(ref._det, slot), getattr(other._det, slot)
        assert a == b or (a != a and b != b), (where, slot)
    assert ref.sweep_count == other.sweep_count, where
    if records:
        assert repr(ref.sweeps) == repr(other.sweeps), where


def _path_stream(kind: str, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """Invented angle streams that reach every branch: dense back-and-forth sweeps (the
    scalar and run paths), a sector facing the seam, a turning mount either way, junk
    and out-of-range angles, and NaN powers."""
    rng = np.random.default_rng(seed)
    step = float(rng.uniform(0.002, 0.05))
    if kind == "dense":
        half = np.arange(-40.0, 40.0, step)
        ang = np.concatenate([half, half[::-1], half])
    elif kind == "seam":
        half = np.arange(150.0, 210.0, 20 * step)
        ang = (np.concatenate([half, half[::-1]]) + 180.0) % 360.0 - 180.0
    elif kind == "turning":
        sign = 1.0 if rng.random() < 0.5 else -1.0
        ang = (rng.uniform(-180, 180) + sign * np.arange(0.0, 800.0, 40 * step)
               + 180.0) % 360.0 - 180.0
    else:
        ang = rng.uniform(-200.0, 400.0, 1500)
    ang = ang[:6000]
    pw = ArrayModel(n_elements=6, spacing_wl=0.5).power_db(ang) - 40.0
    pw = pw + rng.normal(0.0, 0.3, ang.size)
    if kind == "junk":
        pw[rng.integers(0, ang.size, 5)] = np.nan
    return ang, pw


@pytest.mark.timeout(900)  # per-sample reference; slow on a loaded machine
@pytest.mark.parametrize("path", ["vector", "scalar", "run"])
@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(kind=st.sampled_from(["dense", "seam", "turning", "junk"]),
       seed=st.integers(0, 2**32 - 1),
       sizes=st.lists(st.integers(1, 300), min_size=1, max_size=8),
       group=st.integers(1, 40), repeat_now=st.integers(0, 5),
       averaging=st.sampled_from(["ema", "sweeps"]),
       bin_deg=st.sampled_from([0.1, 0.25, 1.0]))
def test_every_fold_path_gives_the_bits_of_the_reference(
        path: str, kind: str, seed: int, sizes: list[int], group: int, repeat_now: int,
        averaging: str, bin_deg: float) -> None:
    """Random batch cuts (sizes cycled, so runs of equal batches occur), receive times
    that sometimes repeat or step back, and update_many calls of random length: the
    pinned fold path ends in exactly the state of the plain per-sample reference
    (``RollingPattern._fold_reference``), after every call."""
    ang, pw = _path_stream(kind, seed)
    cfg = EstimatorConfig(bin_deg=bin_deg, averaging=averaging, sweeps_k=2, tau_s=0.05)
    ref, fast = RollingPattern(cfg), RollingPattern(cfg)
    ref._path, fast._path = "reference", path
    batches: list[SampleBatch] = []
    nows: list[float] = []
    i = k = 0
    # sample times (2e-5 s apart: sweeps a few tens of ms long, so fast ones pool into
    # one record, stream.sweep_log.MIN_RECORD_S), stepping back now and then
    t = 1.0e9 + 2e-5 * np.arange(ang.size)
    if repeat_now:
        t[ang.size // 2:] -= 0.03 * repeat_now
    while i < ang.size:
        n = sizes[k % len(sizes)]
        batches.append(SampleBatch.from_arrays(ang[i:i + n], pw[i:i + n], t[i:i + n]))
        back = repeat_now and k % (repeat_now + 3) == 0
        nows.append(1.0e9 + 0.001 * (k // 2 if back else k))
        i += n
        k += 1
    for j in range(0, len(batches), group):
        ref.update_many(batches[j:j + group], nows[j:j + group])
        fast.update_many(batches[j:j + group], nows[j:j + group])
        _same_state(ref, fast, (path, j), records=not (j // group) % 16)
    _same_state(ref, fast, (path, "end"))
    assert ref.samples == int((np.isfinite(pw) & np.isfinite(ang)).sum())


def test_the_reference_reads_the_known_sweeps_like_the_fast_paths() -> None:
    """The reference is not vacuous: on three back-and-forth legs it counts two complete
    sweeps (the third is in progress) with the beam at broadside."""
    ang, _ = _legs([-40.0, 40.0, -40.0, 40.0], 0.05)
    pw = ArrayModel(n_elements=4, spacing_wl=0.5).power_db(ang)
    ref = RollingPattern()
    ref._path = "reference"
    _feed(ref, ang, pw, size=333)
    assert ref.sweep_count == 2
    assert ref.sweeps[0].peak_angle_deg == pytest.approx(0.0, abs=0.1)


def _feed_timed(est: RollingPattern, ang: np.ndarray, pw: np.ndarray, t: np.ndarray,
                cuts: list[int]) -> None:
    """Batches cut at ``cuts`` carrying their samples' times, each received at the time
    of its last sample."""
    edges = [0, *sorted(set(c for c in cuts if 0 < c < len(ang))), len(ang)]
    for lo, hi in zip(edges[:-1], edges[1:], strict=True):
        est.update(SampleBatch.from_arrays(ang[lo:hi], pw[lo:hi], t[lo:hi]), float(t[hi - 1]))


def _timed_legs(n_legs: int, leg_s: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Back-and-forth legs over -40..40 deg at 1-deg steps, each taking ``leg_s`` of
    sample time; a dB parabola peaking at +3 deg.  (angles, powers, sample times)"""
    turns = [-40.0 if i % 2 == 0 else 40.0 for i in range(n_legs + 1)]
    ang, _ = _legs(turns, 1.0)
    t = 100.0 + np.arange(ang.size) * (leg_s / 80.0)
    return ang, -0.02 * (ang - 3.0) ** 2, t


def test_sweeps_faster_than_min_record_s_are_pooled_and_measured_once() -> None:
    """10 ms sweeps (100 a second): records come every MIN_RECORD_S of sample time,
    each the pooled bins of the sweeps since the last one, measured like one sweep;
    every sweep is still counted, and at most MIN_RECORD_S worth waits in the pool."""
    from stream.sweep_log import MIN_RECORD_S
    ang, pw, t = _timed_legs(60, 0.010)
    est = RollingPattern(EstimatorConfig(bin_deg=1.0))
    _feed_timed(est, ang, pw, t, list(range(0, ang.size, 97)))
    recs = est.sweeps
    assert est.sweep_count >= 58
    assert len(recs) < est.sweep_count / 3
    pooled = sum(r.sweeps for r in recs)
    per_record = round(MIN_RECORD_S / 0.010)
    assert est.sweep_count - per_record <= pooled <= est.sweep_count
    assert recs[0].sweeps == 1  # the first sweep has no record before it to wait for
    assert all(per_record <= r.sweeps <= per_record + 1 for r in recs[1:])
    for r in recs:  # the parabola's vertex, from every pooled record
        assert r.peak_angle_deg == pytest.approx(3.0, abs=1e-6)
        assert (r.angle_min_deg, r.angle_max_deg) == (-40.0, 40.0)


def test_sweeps_slower_than_min_record_s_each_get_their_own_record() -> None:
    ang, pw, t = _timed_legs(12, 0.2)
    est = RollingPattern(EstimatorConfig(bin_deg=1.0))
    _feed_timed(est, ang, pw, t, list(range(0, ang.size, 97)))
    assert len(est.sweeps) == est.sweep_count >= 10
    assert all(r.sweeps == 1 for r in est.sweeps)


@pytest.mark.parametrize("cuts", [[], [5, 300, 301, 2000], list(range(0, 5000, 41))])
def test_pooling_follows_sample_times_so_batch_cuts_do_not_matter(cuts: list[int]) -> None:
    ang, pw, t = _timed_legs(60, 0.010)
    cfg = EstimatorConfig(bin_deg=1.0)
    whole, split = RollingPattern(cfg), RollingPattern(cfg)
    _feed_timed(whole, ang, pw, t, [])
    _feed_timed(split, ang, pw, t, cuts)
    assert split.sweep_count == whole.sweep_count
    assert [r.sweeps for r in split.sweeps] == [r.sweeps for r in whole.sweeps]
    for ra, rb in zip(split.sweeps, whole.sweeps, strict=True):
        assert ra.peak_angle_deg == pytest.approx(rb.peak_angle_deg, abs=1e-9)
        assert ra.hpbw_deg == pytest.approx(rb.hpbw_deg, abs=1e-9)
