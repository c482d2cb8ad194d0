"""Prometheus / OpenMetrics exposition of every station's latest reading.

A custom ``prometheus_client`` collector (prometheus_client writes the exposition
format; nothing here formats text) reads each station's
:class:`~replay.fleet.StationReading` -- the tick and raised alarms the event loop
left there -- so a scrape measures nothing and costs a few dictionary look-ups per
stream.  The HTTP server is prometheus_client's own (a daemon thread).

Families (every sample has a ``stream`` label; names follow the Prometheus "Metric and
label naming" rules: base units in the name, ``_total`` for counters):

===========================================  =======  ==================================
family                                       type     value
===========================================  =======  ==================================
``lobewatch_peak_angle_degrees``             gauge    main-lobe direction
``lobewatch_pointing_error_degrees``         gauge    peak - target, wrapped to +-180
``lobewatch_pointing_tolerance_degrees``     gauge    allowed offset (when one is set)
``lobewatch_hpbw_degrees``                   gauge    half-power beamwidth
``lobewatch_side_lobe_level_db``             gauge    highest side lobe re the peak
``lobewatch_peak_power_dbm``                 gauge    peak power (calibrated input only)
``lobewatch_samples_total``                  counter  samples folded into the pattern
``lobewatch_lost_messages_total``            counter  messages missing from the numbering
``lobewatch_rejected_messages_total``        counter  refused messages, label ``reason``
``lobewatch_publisher_restarts_total``       counter  publisher restarts (new epoch)
``lobewatch_stream_up``                      gauge    1 while receiving, else 0
``lobewatch_alarm_active``                   gauge    1 per raised (rule, severity)
``lobewatch_reading_timestamp_seconds``      gauge    Unix time of the reading
===========================================  =======  ==================================

An undetermined value is left out, never replaced by a made-up number: before the
first complete pattern, with no target, with uncalibrated power, or when the pattern
does not fall 3 dB either side of the peak, that stream's sample of the family is
simply absent (a PromQL query returns no series for it; ``absent()`` or
``lobewatch_stream_up`` tell "not measured" from "not running").  A cleared alarm has
no sample; dB values are never averaged across streams here.
"""

from __future__ import annotations

import math
import threading
from collections.abc import Callable, Iterable, Iterator
from typing import Any

from prometheus_client.core import CounterMetricFamily, GaugeMetricFamily, Metric
from prometheus_client.registry import Collector, CollectorRegistry

from replay.fleet import Station, StationReading
from stream.errors import UserError

#: Gauge families taken from BeamMetrics: (family, metric attribute, help text).
BEAM_GAUGES: tuple[tuple[str, str, str], ...] = (
    ("lobewatch_peak_angle_degrees", "peak_angle_deg",
     "Direction of the main lobe's peak, degrees"),
    ("lobewatch_hpbw_degrees", "hpbw_deg", "Half-power (-3 dB) beamwidth, degrees"),
    ("lobewatch_side_lobe_level_db", "sll_db",
     "Highest side lobe relative to the main-lobe peak, dB (negative)"),
)


def _finite(v: Any) -> float | None:
    if v is None:
        return None
    f = float(v)
    return f if math.isfinite(f) else None


def pointing_error_deg(reading: StationReading) -> float | None:
    """Peak angle minus target, wrapped to [-180, 180) degrees; ``None`` without both."""
    tick = reading.tick
    peak = _finite(tick.metrics.peak_angle_deg)
    target = _finite(tick.target_deg)
    if peak is None or target is None:
        return None
    err = peak - target
    return err if -180.0 <= err < 180.0 else (err + 180.0) % 360.0 - 180.0


class FleetCollector(Collector):
    """Yields the families above from ``stations()`` at scrape time."""

    def __init__(self, stations: Callable[[], Iterable[Station]]) -> None:
        self._stations = stations

    def describe(self) -> list[Metric]:
        return []  # families vary with the streams; no collision checks needed

    def collect(self) -> Iterator[Metric]:
        gauges = {name: GaugeMetricFamily(name, text, labels=["stream"])
                  for name, _, text in BEAM_GAUGES}
        pointing = GaugeMetricFamily(
            "lobewatch_pointing_error_degrees",
            "Main-lobe peak minus the target direction, degrees (present with a target)",
            labels=["stream"])
        tolerance = GaugeMetricFamily(
            "lobewatch_pointing_tolerance_degrees",
            "Allowed offset of the peak from the target, degrees (present when set)",
            labels=["stream"])
        power = GaugeMetricFamily("lobewatch_peak_power_dbm",
                                  "Received power at the main-lobe peak, dBm (calibrated "
                                  "input only)", labels=["stream"])
        samples = CounterMetricFamily("lobewatch_samples",
                                      "Samples folded into the stream's pattern",
                                      labels=["stream"])
        lost = CounterMetricFamily("lobewatch_lost_messages",
                                   "Messages missing from the publisher's numbering",
                                   labels=["stream"])
        rejected = CounterMetricFamily("lobewatch_rejected_messages",
                                       "Messages refused by the decoder, by reason",
                                       labels=["stream", "reason"])
        restarts = CounterMetricFamily("lobewatch_publisher_restarts",
                                       "Publisher restarts seen (a new epoch)",
                                       labels=["stream"])
        up = GaugeMetricFamily("lobewatch_stream_up",
                               "1 while the stream is receiving samples, else 0",
                               labels=["stream"])
        alarm = GaugeMetricFamily("lobewatch_alarm_active",
                                  "1 while an alarm of this rule and X.733 severity is "
                                  "raised", labels=["stream", "rule", "severity"])
        stamp = GaugeMetricFamily("lobewatch_reading_timestamp_seconds",
                                  "Unix time of the stream's latest reading",
                                  labels=["stream"])
        for st in self._stations():
            name = st.name
            reading = st.reading
            up.add_metric([name], 1.0 if st.state in ("receiving", "restarted") else 0.0)
            if reading is None:
                continue
            tick = reading.tick
            m = tick.metrics
            stamp.add_metric([name], float(tick.t))
            for fam, attr, _ in BEAM_GAUGES:
                v = _finite(getattr(m, attr))
                if v is not None:
                    gauges[fam].add_metric([name], v)
            err = pointing_error_deg(reading)
            if err is not None:
                pointing.add_metric([name], err)
            tol = _finite(tick.tolerance_deg)
            if tol is not None:
                tolerance.add_metric([name], tol)
            p = _finite(m.peak_power_db)
            if p is not None and tick.calibrated:
                power.add_metric([name], p)
            src = tick.source
            samples.add_metric([name], float(tick.samples))
            lost.add_metric([name], float(src.lost))
            restarts.add_metric([name], float(src.restarts))
            for reason, n in sorted(src.rejected.items()):
                rejected.add_metric([name, str(reason)], float(n))
            seen: set[tuple[str, str]] = set()
            for a in reading.alarms:
                key = (a.rule, a.severity)
                if a.active and key not in seen:
                    seen.add(key)
                    alarm.add_metric([name, a.rule, a.severity], 1.0)
        yield from gauges.values()
        yield from (pointing, tolerance, power, samples, lost, rejected, restarts, up, alarm, stamp)


def make_registry(stations: Callable[[], Iterable[Station]]) -> CollectorRegistry:
    """A registry holding only the fleet collector (no process metrics of ours)."""
    registry = CollectorRegistry(auto_describe=False)
    registry.register(FleetCollector(stations))
    return registry


class MetricsServer:
    """prometheus_client's HTTP server for one registry, on a daemon thread."""

    def __init__(self, registry: CollectorRegistry, host: str, port: int) -> None:
        from prometheus_client import start_http_server
        try:
            self._httpd, self._thread = start_http_server(port, addr=host, registry=registry)
        except OSError as exc:
            raise UserError(f"--metrics-listen {host}:{port}: cannot listen "
                            f"({exc.strerror or exc}); pick a free port") from None
        self.host = host
        self.port = int(self._httpd.server_address[1])
        self._closed = threading.Event()

    @property
    def url(self) -> str:
        host = f"[{self.host}]" if ":" in self.host else self.host
        return f"http://{host}:{self.port}/metrics"

    def close(self) -> None:
        """Stop serving and free the port; idempotent."""
        if self._closed.is_set():
            return
        self._closed.set()
        self._httpd.shutdown()
        self._httpd.server_close()
        self._thread.join(timeout=2.0)


def serve_metrics(stations: Callable[[], Iterable[Station]], host: str,
                  port: int) -> MetricsServer:
    """Start exporting ``stations()`` at http://HOST:PORT/metrics."""
    return MetricsServer(make_registry(stations), host, port)
