"""Prometheus exporter: exposition parsed by prometheus_client's own parser, names
checked against the Prometheus naming rules, gauges equal to the monitor's readout.

References:
  [1] Prometheus documentation, "Metric and label naming" (prometheus.io/docs/practices/
      naming): metric names match ``[a-zA-Z_:][a-zA-Z0-9_:]*``, label names
      ``[a-zA-Z_][a-zA-Z0-9_]*`` with ``__`` reserved, units in the name, an
      accumulating count ends in ``_total``.
  [2] Prometheus documentation, "Data model" (same regular expressions).
  [3] ITU-T Rec. X.733 perceived severities (critical, major, minor, warning,
      indeterminate), as used by stream.alarms.
"""

from __future__ import annotations

import io
import re
import urllib.request

import pytest
from prometheus_client import generate_latest
from prometheus_client.parser import text_string_to_metric_families

from replay.fleet import Station
from stream.alarms import AlarmConfig, AlarmEngine
from stream.estimator import EstimatorConfig, RollingPattern
from stream.monitor import Monitor
from stream.synth import SynthConfig, SynthSource
from stream.tick import SourceStats
from tui.cli import UsageError
from tui.exporter import make_registry, pointing_error_deg, serve_metrics
from tui.fleet_options import is_loopback, parse_listen

T0 = 1_800_000_000.0
METRIC_NAME = re.compile(r"^[a-zA-Z_:][a-zA-Z0-9_:]*$")  # [1], [2]
LABEL_NAME = re.compile(r"^[a-zA-Z_][a-zA-Z0-9_]*$")  # [1], [2]
FAMILIES = ("lobewatch_peak_angle_degrees", "lobewatch_pointing_error_degrees",
            "lobewatch_hpbw_degrees", "lobewatch_side_lobe_level_db",
            "lobewatch_peak_power_dbm", "lobewatch_samples", "lobewatch_lost_messages",
            "lobewatch_rejected_messages", "lobewatch_publisher_restarts",
            "lobewatch_stream_up", "lobewatch_alarm_active")


def fed_station(name: str, *, seconds: float = 4.0, target_deg: float | None = None,
                tolerance_deg: float | None = None, stats: SourceStats | None = None,
                scenario: str = "steady", seed: int = 1) -> Station:
    """A station whose monitor has seen ``seconds`` of a simulated array (no sockets)."""
    cfg = AlarmConfig(target_deg=target_deg, tolerance_deg=tolerance_deg, raise_hold_s=0.0,
                      drift_min_sweeps=1)
    mon = Monitor(RollingPattern(EstimatorConfig(tau_s=1.0)), AlarmEngine(cfg),
                  target_deg=target_deg, tolerance_deg=tolerance_deg)
    st = Station(name, mon)
    src = SynthSource(SynthConfig(scenario=scenario, seed=seed), start_t=T0)
    stats = stats or SourceStats(state="receiving", messages=100)
    t = T0
    for b in src.batches(T0, seconds):
        mon.ingest(b)
        if b.rx_t - t >= 0.5:
            t = b.rx_t
            mon.tick(t, stats)
    mon.tick(T0 + seconds, stats)
    return st


def scrape(stations: list[Station]) -> dict:
    text = generate_latest(make_registry(lambda: stations)).decode()
    return {f.name: f for f in text_string_to_metric_families(text)}


def value(fams: dict, family: str, sample: str | None = None, **labels: str) -> float | None:
    for s in fams[family].samples:
        if s.name == (sample or family) and all(s.labels.get(k) == v for k, v in labels.items()):
            return s.value
    return None


def test_exposition_parses_and_names_follow_the_rules():
    a = fed_station("sector-a", target_deg=0.0, tolerance_deg=2.0)
    fams = scrape([a])
    for name in FAMILIES:
        assert name in fams, name
    for fam in fams.values():
        assert METRIC_NAME.match(fam.name)
        for s in fam.samples:
            assert METRIC_NAME.match(s.name)
            assert "stream" in s.labels
            for label in s.labels:
                assert LABEL_NAME.match(label) and not label.startswith("__")
            if fam.type == "counter":
                assert s.name.endswith("_total")  # [1]
    assert fams["lobewatch_samples"].type == "counter"
    assert fams["lobewatch_peak_angle_degrees"].type == "gauge"


def test_gauges_equal_the_monitor_readout_at_the_same_tick():
    a = fed_station("a", target_deg=1.5, tolerance_deg=2.0, seed=3)
    b = fed_station("b", scenario="dead-column", seconds=3.0, seed=4)
    fams = scrape([a, b])
    for st in (a, b):
        tick = st.monitor.last_tick
        m = tick.metrics
        assert m.peak_angle_deg is not None
        assert value(fams, "lobewatch_peak_angle_degrees", stream=st.name) == m.peak_angle_deg
        assert value(fams, "lobewatch_hpbw_degrees", stream=st.name) == m.hpbw_deg
        assert value(fams, "lobewatch_side_lobe_level_db", stream=st.name) == m.sll_db
        assert value(fams, "lobewatch_peak_power_dbm", stream=st.name) == m.peak_power_db
        assert value(fams, "lobewatch_samples", "lobewatch_samples_total",
                     stream=st.name) == tick.samples
        assert value(fams, "lobewatch_stream_up", stream=st.name) == 1.0
    err = value(fams, "lobewatch_pointing_error_degrees", stream="a")
    assert err == a.monitor.last_tick.metrics.peak_angle_deg - 1.5
    assert value(fams, "lobewatch_pointing_tolerance_degrees", stream="a") == 2.0
    assert value(fams, "lobewatch_pointing_tolerance_degrees", stream="b") is None
    # no target on b: its pointing error is absent, not zero
    assert value(fams, "lobewatch_pointing_error_degrees", stream="b") is None


def test_undetermined_values_are_absent_and_a_silent_stream_is_down():
    mon = Monitor(RollingPattern(EstimatorConfig()), None)
    quiet = Station("quiet", mon)
    mon.tick(T0, SourceStats(state="waiting"))
    never = Station("never", Monitor(RollingPattern(EstimatorConfig()), None))
    fams = scrape([quiet, never])
    for fam in ("lobewatch_peak_angle_degrees", "lobewatch_hpbw_degrees",
                "lobewatch_side_lobe_level_db", "lobewatch_peak_power_dbm"):
        assert fams.get(fam) is None or not fams[fam].samples, fam
    assert value(fams, "lobewatch_stream_up", stream="quiet") == 0.0
    assert value(fams, "lobewatch_stream_up", stream="never") == 0.0
    assert value(fams, "lobewatch_samples", "lobewatch_samples_total", stream="quiet") == 0.0
    assert value(fams, "lobewatch_samples", "lobewatch_samples_total", stream="never") is None


def test_uncalibrated_power_is_not_exported_as_dbm():
    st = fed_station("rel")
    tick = st.monitor.last_tick
    from dataclasses import replace
    st.monitor.last_tick = None
    st._on_tick(replace(tick, calibrated=False))
    fams = scrape([st])
    assert value(fams, "lobewatch_peak_power_dbm", stream="rel") is None
    assert value(fams, "lobewatch_peak_angle_degrees", stream="rel") is not None


def test_source_counters_and_rejections_by_reason():
    stats = SourceStats(state="stale", messages=50, rejected={"bad_json": 3, "non_finite": 1},
                        lost=7, restarts=2)
    st = fed_station("s", stats=stats, seconds=2.0)
    fams = scrape([st])
    total = "lobewatch_rejected_messages_total"
    assert value(fams, "lobewatch_rejected_messages", total, stream="s", reason="bad_json") == 3
    assert value(fams, "lobewatch_rejected_messages", total, stream="s", reason="non_finite") == 1
    assert value(fams, "lobewatch_lost_messages", "lobewatch_lost_messages_total",
                 stream="s") == 7
    assert value(fams, "lobewatch_publisher_restarts", "lobewatch_publisher_restarts_total",
                 stream="s") == 2
    assert value(fams, "lobewatch_stream_up", stream="s") == 0.0  # stale is not up


def test_raised_alarms_are_exported_with_rule_and_x733_severity():
    # target 20 deg away from a broadside beam: drift beyond 2 x tolerance -> critical [3]
    st = fed_station("far", target_deg=20.0, tolerance_deg=2.0, seconds=6.0)
    active = st.monitor.alarms.active()
    assert any(a.rule == "drift" for a in active)
    fams = scrape([st])
    exported = {(s.labels["rule"], s.labels["severity"]): s.value
                for s in fams["lobewatch_alarm_active"].samples}
    assert exported == {(a.rule, a.severity): 1.0 for a in active}
    assert exported[("drift", "critical")] == 1.0


def test_pointing_error_wraps_across_180_degrees():
    st = fed_station("w", target_deg=0.0, tolerance_deg=2.0, seconds=2.0)
    from dataclasses import replace
    tick = st.monitor.last_tick
    r = replace(st.reading, tick=replace(tick, target_deg=179.0,
                                         metrics=replace(tick.metrics, peak_angle_deg=-179.0)))
    assert pointing_error_deg(r) == pytest.approx(2.0)


def test_http_endpoint_serves_the_same_exposition_and_frees_its_port():
    st = fed_station("h", seconds=2.0)
    server = serve_metrics(lambda: [st], "127.0.0.1", 0)
    try:
        with urllib.request.urlopen(server.url, timeout=5) as resp:
            body = resp.read().decode()
            ctype = resp.headers["Content-Type"]
    finally:
        server.close()
    assert ctype.startswith("text/plain")
    fams = {f.name: f for f in text_string_to_metric_families(body)}
    assert value(fams, "lobewatch_peak_angle_degrees", stream="h") == \
        st.monitor.last_tick.metrics.peak_angle_deg
    with pytest.raises(OSError):
        urllib.request.urlopen(server.url, timeout=2)


def test_listen_address_defaults_to_loopback_and_refuses_others_without_the_flag():
    assert parse_listen("9108") == ("127.0.0.1", 9108)
    assert parse_listen(":9108") == ("127.0.0.1", 9108)
    assert parse_listen("[::1]:9108") == ("::1", 9108)
    assert is_loopback("127.0.0.2") and is_loopback("localhost") and not is_loopback("10.0.0.1")
    with pytest.raises(UsageError, match="--insecure-listen"):
        parse_listen("0.0.0.0:9108")
    with pytest.raises(UsageError, match="HOST:PORT"):
        parse_listen("host:port")
    warn = io.StringIO()
    assert parse_listen("0.0.0.0:9108", insecure=True, warn=warn) == ("0.0.0.0", 9108)
    assert warn.getvalue().count("\n") == 1 and "without authentication" in warn.getvalue()


def test_replay_serves_its_monitor_under_the_recorded_stream_name():
    from tui.cli import build_parser
    from tui.fleet_options import start_session_metrics
    st = fed_station("x", seconds=2.0)
    args = build_parser().parse_args(["replay", "s.lwsession", "--metrics-listen",
                                      "127.0.0.1:0"])
    names = []
    for meta, path in (({"source": {"stream": "north"}}, "a/b.lwsession"),
                       ({}, "site 3/roof west.lwsession")):
        server = start_session_metrics(args, meta, path, st.monitor)
        try:
            st.monitor.tick(T0 + 10.0, SourceStats(state="receiving"))
            with urllib.request.urlopen(server.url, timeout=5) as resp:
                fams = {f.name: f for f in text_string_to_metric_families(resp.read().decode())}
        finally:
            server.close()
        names.append({s.labels["stream"] for s in fams["lobewatch_stream_up"].samples})
        assert value(fams, "lobewatch_peak_angle_degrees", stream=next(iter(names[-1]))) == \
            st.monitor.last_tick.metrics.peak_angle_deg
    assert names == [{"north"}, {"roof-west"}]
    no_listen = build_parser().parse_args(["replay", "s.lwsession"])
    assert start_session_metrics(no_listen, {}, "s.lwsession", st.monitor) is None
