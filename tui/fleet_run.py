"""``lobewatch live`` with named streams, per-stream recordings or the metrics endpoint.

One process, one event loop: every stream is a :class:`~replay.fleet.Station` (own
ZeroMQ socket, monitor, alarms, recorder), all run by one :class:`~replay.fleet.Fleet`.
Headless, each JSON line carries ``"stream": NAME`` when several streams run (one
``summary`` line per stream at the end); with one stream the output is exactly the
single-stream output.  On screen, one stream opens its beam screen and several open
the overview (:mod:`tui.fleet_screen`).
"""

from __future__ import annotations

import argparse
import asyncio
import contextlib
import signal
import sys
import time
from typing import Any, TextIO

from replay.fleet import Fleet, Station
from tui.cli import UsageError, queue_bytes
from tui.fleet_options import (
    StreamSpec,
    monitor_for_spec,
    session_path,
    start_metrics_from_args,
    stream_specs_from_args,
)
from tui.headless import EXIT_ALARM, HeadlessPrinter


class StreamPrinter(HeadlessPrinter):
    """A headless printer whose every line names its stream (second key, after type)."""

    def __init__(self, name: str, out: TextIO, fail_on: str | None = None) -> None:
        super().__init__(out, fail_on)
        self.name = name

    def write(self, rec: dict[str, Any]) -> None:
        kind = rec.get("type")
        super().write({"type": kind, "stream": self.name,
                       **{k: v for k, v in rec.items() if k != "type"}})


def check_live_args(args: argparse.Namespace) -> float:
    """The checks ``live`` makes on its stream options; returns the tick interval."""
    interval = args.interval if args.interval is not None else (1.0 if args.headless else 0.1)
    if not interval > 0:
        raise UsageError(f"--interval must be positive, got {args.interval}")
    if not args.stale_after > 0:
        raise UsageError(f"--stale-after must be positive, got {args.stale_after}")
    if args.hwm < 1 or args.max_message_bytes < 64:
        raise UsageError("--hwm must be at least 1 and --max-message-bytes at least 64")
    if args.force and not (args.record or getattr(args, "record_dir", None)):
        raise UsageError("--force only applies with --record FILE or --record-dir DIR")
    return interval


def _metadata(spec: StreamSpec, args: argparse.Namespace, monitor: Any) -> dict[str, Any]:
    from tui.options import settings_record
    return {"source": {"kind": "live", "stream": spec.name, "endpoint": spec.endpoint,
                       "bind": bool(args.bind if spec.bind is None else spec.bind),
                       "topic": spec.topic, "format": spec.fmt or args.fmt},
            "created_t": time.time(), "settings": settings_record(args, monitor)}


def _curve(spec: StreamSpec, args: argparse.Namespace, bind: bool) -> Any:
    """CURVE keys of one stream: its table's curve_* keys, else the command line's; a
    bound stream then passes the listening rule (tui.curve_options)."""
    from stream.curve import curve_from_mapping
    from tui.curve_options import check_listen, curve_from_args
    if spec.extra:
        curve = curve_from_mapping(spec.extra, where=f"[streams.{spec.name}]",
                                   base_dir=spec.base_dir)
    else:
        curve = curve_from_args(args, bind=bind)
    if bind:
        check_listen(spec.endpoint, curve=curve, insecure=bool(args.insecure_listen),
                     what=f"send samples to stream {spec.name}")
    return curve


def build_station(spec: StreamSpec, args: argparse.Namespace, interval_s: float,
                  record_path: str | None = None) -> Station:
    """Source + monitor + recorder for one stream (closed again if a later step fails)."""
    from replay.recorder import Recorder
    from stream.zmq_source import ZmqSource
    bind = bool(args.bind if spec.bind is None else spec.bind)
    curve = _curve(spec, args, bind)
    monitor = monitor_for_spec(spec, args)
    recorder = None
    if record_path is not None:
        recorder = Recorder(record_path, _metadata(spec, args, monitor),
                            force=bool(args.force)).attach(monitor)
    try:
        source = ZmqSource(spec.endpoint, bind=bind, topic=spec.topic.encode(),
                           fmt=spec.fmt or args.fmt, hwm=args.hwm, queue_bytes=queue_bytes(args),
                           max_message_bytes=args.max_message_bytes,
                           stale_after_s=args.stale_after, curve=curve)
    except BaseException:
        if recorder is not None:
            recorder.close()
        raise
    return Station(spec.name, monitor, source, recorder=recorder, interval_s=interval_s,
                   endpoint=spec.endpoint, topic=spec.topic)


def build_fleet(args: argparse.Namespace, interval_s: float) -> Fleet:
    """Every stream of the command line and the --config file."""
    specs = stream_specs_from_args(args)
    record_dir = getattr(args, "record_dir", None)
    if args.record and len(specs) > 1:
        raise UsageError("--record FILE records one stream; with several streams use "
                         "--record-dir DIR (one DIR/NAME.lwsession each)")
    stations: list[Station] = []
    try:
        for spec in specs:
            path = None
            if record_dir:
                path = str(session_path(record_dir, spec.name))
            elif args.record:
                path = args.record
            stations.append(build_station(spec, args, interval_s, path))
        return Fleet(stations)
    except BaseException:
        for s in stations:
            with contextlib.suppress(Exception):
                s.close()
        raise


def run_fleet_headless(fleet: Fleet, out: TextIO, fail_on: str | None = None) -> int:
    """Every station's JSON Lines (with ``stream``) until SIGINT/SIGTERM, ``fail_on``
    firing, or every source ending; then one summary line per stream."""
    printers: list[tuple[Station, StreamPrinter]] = []
    for st in fleet:
        pr = StreamPrinter(st.name, out, fail_on)
        st.monitor.tick_sinks.append(pr.on_tick)
        st.monitor.event_sinks.append(pr.on_event)
        printers.append((st, pr))
    reason = "end"

    async def main() -> None:
        nonlocal reason
        stop = asyncio.Event()
        loop = asyncio.get_running_loop()

        def on_signal(name: str) -> None:
            nonlocal reason
            reason = name
            stop.set()

        def on_fail() -> None:
            nonlocal reason
            failed = any(p.failed for _, p in printers)
            reason = "fail_on" if failed else "output_closed"
            stop.set()

        for _, pr in printers:
            pr.on_fail = on_fail
        installed = []
        for sig in (signal.SIGINT, signal.SIGTERM):
            with contextlib.suppress(NotImplementedError, RuntimeError, ValueError):
                loop.add_signal_handler(sig, on_signal, sig.name)
                installed.append(sig)
        try:
            await fleet.run(stop)
        finally:
            for sig in installed:
                loop.remove_signal_handler(sig)

    try:
        asyncio.run(main())
    except KeyboardInterrupt:
        reason = "SIGINT"
    finally:
        for st, pr in printers:
            with contextlib.suppress(ValueError):
                st.monitor.tick_sinks.remove(pr.on_tick)
            with contextlib.suppress(ValueError):
                st.monitor.event_sinks.remove(pr.on_event)
    failed = False
    for st, pr in printers:
        rec = pr.summary(reason)
        if st.error is not None:
            rec["error"] = st.error
        pr.write(rec)
        failed = failed or pr.failed
    return EXIT_ALARM if failed else 0


def run_fleet(args: argparse.Namespace) -> int:
    """``lobewatch live`` for named streams / --config streams / --metrics-listen."""
    interval = check_live_args(args)
    from tui.alarm_options import alarm_hook_from_args, notify_settings_from_args
    fail_on = notify_settings_from_args(args).fail_on
    fleet = build_fleet(args, interval)
    hook = None
    metrics = None
    try:
        hook = alarm_hook_from_args(args)
        if hook is not None:
            for st in fleet:
                st.monitor.event_sinks.append(hook)
        metrics = start_metrics_from_args(args, lambda: fleet.stations)
        if args.headless:
            if len(fleet) == 1:
                from tui.headless import run_headless
                st = fleet.stations[0]
                assert st.driver is not None
                return run_headless(st.driver, st.monitor, out=sys.stdout, fail_on=fail_on)
            return run_fleet_headless(fleet, sys.stdout, fail_on)
        if len(fleet) == 1:
            from tui.options import beam_options_from_args, run_app
            st = fleet.stations[0]
            spec = stream_specs_from_args(args)[0]

            def new_recording() -> Any:  # the screen's record key
                from replay.recorder import Recorder
                path = time.strftime("lobewatch-%Y%m%d-%H%M%S.lwsession")
                return Recorder(path, _metadata(spec, args, st.monitor)).attach(st.monitor)

            return run_app(st.monitor, st.driver, beam_options_from_args(
                args, "live", recorder_factory=new_recording, recorder=st.recorder))
        from tui.fleet_screen import run_fleet_screen
        return run_fleet_screen(fleet, args)
    finally:
        if metrics is not None:
            metrics.close()
        if hook is not None:
            with contextlib.suppress(Exception):
                hook.close()
        fleet.close()
