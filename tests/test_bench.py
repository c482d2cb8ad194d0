"""``lobewatch bench``: the runner's structure (figure keys and shape, table, --only,
failure handling) and that the benchmark's baselines do the job they stand in for.

No timed assertions: only the cheap groups run here (``--only metrics,naive``); the full
run is a measurement, not a test (CI runs ``lobewatch bench --quick`` as a smoke test).

References:
- The first-order low-pass recurrence the naive estimator and the real one both follow:
  P <- P + (1 - exp(-dt/tau)) (x - P) (A. Eckner, "Algorithms for unevenly spaced time
  series", 2012 working paper -- from memory).
- Half-power beamwidth of a uniform 8-element, half-wavelength array at broadside:
  about 12.7 deg (C. A. Balanis, *Antenna Theory*, 3rd ed., ch. 6, HPBW of a uniform
  broadside array ~ 0.886 lambda / (N d) rad = 0.2215 rad -- from memory).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from stream.array_model import ArrayModel
from stream.batch import SampleBatch
from stream.estimator import EstimatorConfig, RollingPattern
from stream.pattern import measure
from tui import cli
from tui.bench import runner
from tui.bench.baselines import HandEma, hand_metrics, hand_replay
from tui.bench.figures import figure
from tui.bench.ingest import _triangle, rss_mb
from tui.bench.metrics import naive_measure
from tui.bench.naive import NaiveRollingPattern

CHEAP = ("metrics", "naive")


def _run_json(capsys: pytest.CaptureFixture[str], *args: str) -> tuple[int, dict]:
    rc = cli.main(["bench", "--quick", "--json", *args])
    out, err = capsys.readouterr()
    return rc, (json.loads(out) if out.strip() else {}), err  # type: ignore[return-value]


def test_json_has_the_cheap_figures_each_with_value_unit_target_pass(capsys) -> None:
    rc, figs, err = _run_json(capsys, "--only", ",".join(CHEAP))
    assert rc == 0
    expected = {name for g in CHEAP for name in runner.GROUP_FIGURES[g]}
    assert set(figs) == expected
    assert {"metrics_3600_ms", "naive_speedup"} <= set(figs)
    for name, f in figs.items():
        assert {"value", "unit", "target", "pass"} <= set(f), name
        assert isinstance(f["value"], float) and f["value"] > 0, name
        assert f["pass"] in (True, False, None), name
        if f["target"] is None:
            assert f["pass"] is None, name
        else:
            assert isinstance(f["pass"], bool), name
    assert figs["metrics_3600_ms"]["unit"] == "ms"
    assert figs["metrics_3600_ms"]["target"] == runner.TARGET_METRICS_MS
    # The pure-Python baseline is a strawman: a footnote with no target or verdict.
    assert figs["naive_speedup"]["target"] is None and figs["naive_speedup"]["pass"] is None
    assert "metrics" in err and "naive" in err  # progress goes to stderr


def test_every_issue_figure_belongs_to_a_group() -> None:
    names = {n for g in runner.GROUPS for n in runner.GROUP_FIGURES[g]}
    issue = {"ingest_binary_sps", "ingest_paced_cpu_pct", "ingest_json_msgs",
             "ingest_json_ratio", "latency_p99_ms", "metrics_3600_ms", "redraw_p99_ms",
             "replay_sps", "replay_ratio", "rss_mb", "naive_speedup"}
    assert issue <= names
    # The side-by-side keys (each {value, target, pass}) come from one group.
    side = {"ingest_binary_ratio", "ingest_json_ratio", "metrics_clean_ms",
            "metrics_noisy_ms", "metrics_ratio", "replay_10k_hour_s", "replay_ratio",
            "redraw_p99_ms", "readout_gap_max_intervals", "latency_readout_p99_ms"}
    assert side - {"redraw_p99_ms"} <= set(runner.GROUP_FIGURES["side"])
    assert len(names) == sum(len(runner.GROUP_FIGURES[g]) for g in runner.GROUPS)
    assert set(runner.GROUP_FIGURES) == set(runner.GROUPS)


def test_table_lists_figures_with_target_and_verdict(capsys) -> None:
    rc = cli.main(["bench", "--quick", "--only", "metrics"])
    out = capsys.readouterr().out
    assert rc == 0
    lines = out.splitlines()
    assert lines[1].split()[:5] == ["figure", "value", "unit", "target", "result"]
    row = next(line for line in lines if line.startswith("metrics_3600_ms"))
    assert "<= 1.00" in row and ("pass" in row or "short" in row)


def test_verdicts_follow_the_direction_of_the_target() -> None:
    assert figure(12e6, "samples/s", 10e6)["pass"] is True
    assert figure(9e6, "samples/s", 10e6)["pass"] is False
    assert figure(0.8, "ms", 1.0, higher_is_better=False)["pass"] is True
    assert figure(1.2, "ms", 1.0, higher_is_better=False)["pass"] is False
    assert figure(5.0, "x")["pass"] is None
    text = runner.table({"a_ms": figure(1.2, "ms", 1.0, higher_is_better=False),
                         "b_sps": figure(2e7, "samples/s", 1e7),
                         "c": figure(None, "", error="RuntimeError: boom")})
    rows = {line.split()[0]: line for line in text.splitlines()[2:]}
    assert "short" in rows["a_ms"] and "<= 1.00" in rows["a_ms"]
    assert "pass" in rows["b_sps"] and ">= 10,000,000" in rows["b_sps"]
    assert "error" in rows["c"] and "boom" in rows["c"]


def test_unknown_group_is_a_usage_error(capsys) -> None:
    rc = cli.main(["bench", "--only", "metrics,warp"])
    err = capsys.readouterr().err
    assert rc == 2
    assert "warp" in err and "metrics" in err
    assert len(err.strip().splitlines()) == 1


def test_a_failing_group_is_reported_and_the_others_still_run(monkeypatch, capsys) -> None:
    def boom(*_a: object, **_k: object) -> dict:
        raise RuntimeError("publisher exploded")

    monkeypatch.setattr(runner, "_metrics", boom)
    rc, figs, err = _run_json(capsys, "--only", "metrics,naive")
    assert rc == 1  # a crash is not a shortfall
    assert figs["metrics_3600_ms"]["value"] is None
    assert "publisher exploded" in figs["metrics_3600_ms"]["error"]
    assert figs["naive_speedup"]["value"] > 0
    assert "metrics" in err


def test_naive_estimator_does_the_same_job_as_the_real_one() -> None:
    """Same EMA recurrence and bins: the per-bin powers agree (so the speed-up compares
    like with like)."""
    model = ArrayModel(n_elements=8, spacing_wl=0.5)
    rng = np.random.default_rng(5)
    ang = np.tile(np.concatenate([np.linspace(-60, 60, 2400), np.linspace(60, -60, 2400)]), 3)
    pw = model.power_db(ang) - 30.0 + rng.normal(0.0, 0.5, ang.size)
    naive = NaiveRollingPattern(bin_deg=1.0, tau_s=3.0)
    real = RollingPattern(EstimatorConfig(bin_deg=1.0, tau_s=3.0))
    now = 1.0e9
    for i in range(0, ang.size, 400):
        now += 0.05
        naive.update(ang[i:i + 400], pw[i:i + 400], now)
        real.update(SampleBatch.from_arrays(ang[i:i + 400], pw[i:i + 400]), now)
    snap = real.snapshot(now)
    got = {int(round(a + 180.0)): (a, p) for a, p in zip(snap.angle_deg, snap.power_db,
                                                           strict=True)}
    want = {b: (naive.angle_deg(b), 10 * math.log10(v[0])) for b, v in naive.bins.items()}
    assert set(got) == set(want)
    for b in want:
        assert got[b][0] == pytest.approx(want[b][0], abs=1e-9)  # mean angle in the bin
        assert got[b][1] == pytest.approx(want[b][1], abs=1e-9)
    assert naive.sweeps == real.sweep_count


def test_naive_measure_agrees_with_measure_on_a_textbook_array() -> None:
    g = np.linspace(-180.0, 180.0, 3600, endpoint=False)
    # cos elements: no back lobe equal to the main one
    p = ArrayModel(n_elements=8, spacing_wl=0.5, element_exp=1.0).power_db(g)
    slow = naive_measure(g.tolist(), p.tolist())
    fast = measure(g, p)
    assert slow["peak_angle_deg"] == pytest.approx(0.0, abs=0.05)
    assert slow["hpbw_deg"] == pytest.approx(12.7, abs=0.3)  # Balanis, see module doc
    assert slow["hpbw_deg"] == pytest.approx(fast.hpbw_deg, abs=0.05)


def test_helpers_measure_something() -> None:
    assert rss_mb() > 1.0
    tri = _triangle(1000)
    assert tri.min() == -60.0 and tri.max() == pytest.approx(60.0, abs=0.2)
    assert np.argmax(tri) == pytest.approx(500, abs=1)


# -- the hand-written baselines compute what lobewatch computes ---------------------------


def _by_bin(angle: np.ndarray, power: np.ndarray, bin_deg: float = 1.0) -> dict[int, float]:
    nb = int(round(360.0 / bin_deg))
    idx = np.floor((angle + 180.0) / bin_deg + 0.5).astype(int) % nb
    return dict(zip(idx.tolist(), power.tolist(), strict=True))


def test_hand_ema_gives_the_estimators_bin_powers() -> None:
    """Same recurrence (Eckner, module doc), same bins: the hand EMA's per-bin power is
    the estimator's to rounding (10**(p/10) against exp(p ln10/10))."""
    rng = np.random.default_rng(5)
    ang = np.tile(np.concatenate([np.arange(-60, 60, 0.37), np.arange(60, -60, -0.37)]), 3)
    pw = ArrayModel(n_elements=8, spacing_wl=0.5).power_db(ang) - 40 + rng.normal(0, .3,
                                                                                   ang.size)
    hand, real = HandEma(), RollingPattern(EstimatorConfig())
    for k, i in enumerate(range(0, ang.size, 200)):
        now = 1.0e9 + 0.05 * k
        hand.fold(ang[i:i + 200], pw[i:i + 200], now)
        real.update(SampleBatch.from_arrays(ang[i:i + 200], pw[i:i + 200]), now)
    h = _by_bin(*hand.readout())
    snap = real.snapshot(now)
    r = _by_bin(snap.angle_deg, snap.power_db)
    assert h.keys() == r.keys() and len(h) > 100
    for b, v in h.items():
        assert v == pytest.approx(r[b], abs=1e-9), b


@pytest.mark.parametrize("noise_db, smooth, tol_deg", [(0.0, 0, 0.02), (0.3, 81, 0.4)])
def test_hand_metrics_give_the_numbers_of_measure(noise_db: float, smooth: int,
                                                  tol_deg: float) -> None:
    """On a uniform 8-element, half-wavelength array (HPBW about 12.7 deg, Balanis, module
    doc) sampled every 0.05 deg: the scipy find_peaks + np.interp baseline (with
    Savitzky-Golay when noisy) agrees with measure() on peak, HPBW and side lobe level."""
    ang = np.arange(-90.0, 90.0, 0.05)
    pw = ArrayModel(n_elements=8, spacing_wl=0.5).power_db(ang)
    pw = pw + np.random.default_rng(2).normal(0.0, noise_db, ang.size)
    hand = hand_metrics(ang, pw, smooth)
    real = measure(ang, pw)
    assert hand["peak_angle_deg"] == pytest.approx(real.peak_angle_deg, abs=tol_deg)
    assert hand["hpbw_deg"] == pytest.approx(real.hpbw_deg, abs=tol_deg)
    assert hand["hpbw_deg"] == pytest.approx(12.7, abs=0.3)
    assert hand["sll_db"] == pytest.approx(real.sll_db, abs=0.1 + noise_db)


def test_hand_replay_reads_every_sample_and_folds_them_like_the_estimator(tmp_path) -> None:
    """The sqlite3 + numpy replay takes every recorded sample at its receive time: its
    bins equal the estimator's fed from the session reader."""
    from replay.session import SessionReader
    from tui.bench.replay import generate
    path = str(tmp_path / "s.lwsession")
    generate(path, 20_000, rate_sps=10_000.0, per_batch=100)
    got = hand_replay(path)
    real = RollingPattern(EstimatorConfig())
    with SessionReader(path) as reader:
        for item in reader.iter_items():
            if item.kind == "batch":
                real.update(item.value, item.value.rx_t)
                last = item.value.rx_t
    assert got["samples"] == real.samples == 20_000
    assert got["readouts"] > 0
    snap = real.snapshot(last)
    h, r = _by_bin(*got["ema"].readout()), _by_bin(snap.angle_deg, snap.power_db)
    assert h.keys() == r.keys()
    assert max(abs(h[b] - r[b]) for b in h) < 1e-9
