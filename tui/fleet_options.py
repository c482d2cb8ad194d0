"""Options for several streams in one process and for the metrics endpoint.

``--stream NAME=ENDPOINT`` (repeatable) and ``[streams.NAME]`` tables in the ``--config``
TOML file name the streams; ``--record-dir DIR`` records each into
``DIR/NAME.lwsession``; ``--metrics-listen HOST:PORT`` serves Prometheus metrics
(loopback unless ``--insecure-listen``).  Settings of one stream, most specific last:
built-in defaults < the file's ``[alarms]`` < command-line flags < the stream's own
table.  The table layout is in docs/fleet.md; an unknown key is an error naming it,
except keys beginning with ``curve`` (secure-feed settings), which are passed through
in :attr:`StreamSpec.extra` for the code that reads them.
"""

from __future__ import annotations

import argparse
import dataclasses
import ipaddress
import math
import sys
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, TextIO

from stream.array_model import TAPER_NAMES, ArrayModel
from stream.errors import InputFileError, UserError
from stream.wire_format import FORMATS
from tui.cli import UsageError

#: Name of the stream given by the positional ENDPOINT when other streams are named.
DEFAULT_STREAM_NAME: str = "default"
#: Host used when --metrics-listen gives only a port.
DEFAULT_METRICS_HOST: str = "127.0.0.1"
#: Keys of a ``[streams.NAME]`` table (besides the ``model`` and ``alarms`` sub-tables).
STREAM_KEYS: tuple[str, ...] = ("endpoint", "topic", "format", "bind", "target_deg",
                                "tolerance_deg", "model", "alarms")
#: Keys of ``[streams.NAME.model]`` -> ArrayModel argument.
MODEL_KEYS: dict[str, str] = {"elements": "n_elements", "spacing_wl": "spacing_wl",
                              "element_exp": "element_exp", "steer_deg": "steer_deg",
                              "taper": "taper"}
#: Stream-table keys with this prefix are passed through untouched (secure feeds).
PASS_THROUGH_PREFIX: str = "curve"


@dataclass(frozen=True, slots=True)
class StreamSpec:
    """One stream as the user asked for it.  ``model`` holds ArrayModel arguments
    (``None``: the command line's model), ``alarms`` AlarmConfig overrides."""

    name: str
    endpoint: str
    topic: str = ""
    fmt: str | None = None
    bind: bool | None = None
    model: dict[str, Any] | None = None
    alarms: dict[str, Any] = field(default_factory=dict)
    extra: dict[str, Any] = field(default_factory=dict)
    base_dir: str | None = None  # the config file's folder (relative key paths)


# -- arguments -----------------------------------------------------------------------------

def add_metrics_arguments(parser: argparse.ArgumentParser) -> None:
    """``--metrics-listen`` and ``--insecure-listen`` (live and replay)."""
    g = parser.add_argument_group("metrics export (Prometheus / OpenMetrics)")
    g.add_argument("--metrics-listen", metavar="HOST:PORT",
                   help="serve the readings of every stream at http://HOST:PORT/metrics "
                        f"for Prometheus; HOST defaults to {DEFAULT_METRICS_HOST} (':9108' "
                        "or '9108' is enough); port 0 picks a free one (see docs/fleet.md)")
    g.add_argument("--insecure-listen", action="store_true",
                   help="allow --metrics-listen (no authentication), or --bind without "
                        "CURVE, on an address other than loopback (trusted networks only)")


def add_fleet_arguments(parser: argparse.ArgumentParser) -> None:
    """Several streams (``--stream``), per-stream recordings and the metrics endpoint.
    The ``--config`` file (alarm options) may also hold ``[streams.NAME]`` tables."""
    g = parser.add_argument_group(
        "several streams",
        "Watch several streams in one process; each has its own pattern, alarms and "
        "recording. [streams.NAME] tables in --config give per-stream endpoint, topic, "
        "format, model, target and alarm settings (docs/fleet.md).")
    g.add_argument("--stream", action="append", metavar="NAME=ENDPOINT", dest="streams",
                   help="watch ENDPOINT as stream NAME; repeat for more streams (the "
                        "positional ENDPOINT becomes optional)")
    g.add_argument("--record-dir", metavar="DIR",
                   help="record every stream to DIR/NAME.lwsession (DIR is created)")
    add_metrics_arguments(parser)


def fleet_requested(args: argparse.Namespace) -> bool:
    """True when the run needs the fleet path: named streams, a [streams] table,
    per-stream recordings or the metrics endpoint."""
    if getattr(args, "streams", None) or getattr(args, "record_dir", None):
        return True
    if getattr(args, "metrics_listen", None):
        return True
    path = getattr(args, "config", None)
    return bool(path) and bool(_stream_tables(path))


# -- --metrics-listen -----------------------------------------------------------------------

def is_loopback(host: str) -> bool:
    """True for 127.0.0.0/8, ::1 and ``localhost``; a name that is not an address is
    not assumed to be loopback."""
    if host.lower() == "localhost":
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


def parse_listen(text: str, insecure: bool = False,
                 warn: TextIO | None = None) -> tuple[str, int]:
    """``HOST:PORT``, ``[V6]:PORT``, ``:PORT`` or ``PORT`` -> (host, port).

    A non-loopback host needs ``insecure`` and prints one warning line to ``warn``."""
    s = text.strip()
    host, sep, port_text = s.rpartition(":")
    if not sep:
        host, port_text = "", s
    host = host.strip("[]") or DEFAULT_METRICS_HOST
    try:
        port = int(port_text)
    except ValueError:
        raise UsageError(f"--metrics-listen {text!r}: expected HOST:PORT or PORT, e.g. "
                         "127.0.0.1:9108") from None
    if not 0 <= port <= 65535:
        raise UsageError(f"--metrics-listen {text!r}: port must be 0 to 65535")
    if not is_loopback(host):
        if not insecure:
            raise UsageError(f"--metrics-listen {text!r}: {host} is not a loopback address; "
                             "the endpoint has no authentication, so add --insecure-listen "
                             "to serve it on a trusted network (or use 127.0.0.1)")
        print(f"lobewatch: warning: metrics served without authentication on {host}:{port}; "
              "anyone who can reach it can read every stream's readings",
              file=warn if warn is not None else sys.stderr, flush=True)
    return host, port


def start_metrics_from_args(args: argparse.Namespace, stations: Any) -> Any:
    """Serve ``stations()`` when ``--metrics-listen`` was given (else ``None``); prints
    the URL on stderr so a user (or a test) knows the port picked for ``:0``."""
    text = getattr(args, "metrics_listen", None)
    if not text:
        if getattr(args, "insecure_listen", False) and not getattr(args, "bind", False):
            raise UsageError("--insecure-listen only applies with --metrics-listen or --bind")
        return None
    host, port = parse_listen(text, getattr(args, "insecure_listen", False))
    from tui.exporter import serve_metrics
    server = serve_metrics(stations, host, port)
    print(f"lobewatch: metrics at {server.url}", file=sys.stderr, flush=True)
    return server


# -- streams ---------------------------------------------------------------------------------

def parse_stream_arg(text: str) -> tuple[str, str]:
    """``NAME=ENDPOINT`` -> (name, endpoint)."""
    from replay.fleet import check_stream_name
    from stream.zmq_source import check_endpoint
    name, sep, endpoint = text.partition("=")
    if not sep or not endpoint:
        raise UsageError(f"--stream {text!r}: expected NAME=ENDPOINT, e.g. "
                         "sector-a=tcp://10.0.0.5:5557")
    check_stream_name(name.strip(), "--stream")
    check_endpoint(endpoint.strip())
    return name.strip(), endpoint.strip()


def _stream_tables(path: str) -> dict[str, Any]:
    from tui.alarm_options import load_config_file
    doc = load_config_file(path)
    streams = doc.get("streams", {})
    if not isinstance(streams, dict):
        raise InputFileError(path, "'streams' must hold tables: write [streams.NAME]")
    return streams


def _number(p: str, where: str, key: str, v: Any) -> float:
    if isinstance(v, bool) or not isinstance(v, int | float) or not math.isfinite(v):
        raise InputFileError(p, f"[{where}] {key} = {v!r}: expected a finite number")
    return float(v)


def spec_from_table(name: str, table: Any, p: str) -> StreamSpec:
    """One ``[streams.NAME]`` table -> :class:`StreamSpec` (one-line errors)."""
    from replay.fleet import check_stream_name
    from stream.zmq_source import check_endpoint
    from tui.alarm_options import alarm_overrides_from_table
    where = f"streams.{name}"
    if not isinstance(table, dict):
        raise InputFileError(p, f"'{where}' must be a table: write [{where}]")
    try:
        check_stream_name(name, f"[{where}]")
    except UserError as exc:
        raise InputFileError(p, str(exc)) from None
    extra = {k: v for k, v in table.items() if k.startswith(PASS_THROUGH_PREFIX)}
    for k in table:
        if k not in STREAM_KEYS and k not in extra:
            raise InputFileError(p, f"unknown key {k!r} in [{where}]; known keys: "
                                    f"{', '.join(STREAM_KEYS)}")
    endpoint = table.get("endpoint")
    if not isinstance(endpoint, str):
        raise InputFileError(p, f"[{where}] needs endpoint = \"tcp://HOST:PORT\"")
    try:
        check_endpoint(endpoint)
    except UserError as exc:
        raise InputFileError(p, f"[{where}] {exc}") from None
    topic = table.get("topic", "")
    if not isinstance(topic, str):
        raise InputFileError(p, f"[{where}] topic = {topic!r}: expected a string")
    fmt = table.get("format")
    if fmt is not None and fmt not in FORMATS:
        raise InputFileError(p, f"[{where}] format = {fmt!r}: expected one of "
                                f"{', '.join(FORMATS)}")
    bind = table.get("bind")
    if bind is not None and not isinstance(bind, bool):
        raise InputFileError(p, f"[{where}] bind = {bind!r}: expected true or false")
    alarms = alarm_overrides_from_table(table.get("alarms", {}), p, f"{where}.alarms")
    for key in ("target_deg", "tolerance_deg"):
        if key in table:
            alarms[key] = _number(p, where, key, table[key])
    model = None
    if "model" in table:
        mt = table["model"]
        if not isinstance(mt, dict):
            raise InputFileError(p, f"'{where}.model' must be a table: write [{where}.model]")
        model = {}
        for k, v in mt.items():
            if k not in MODEL_KEYS:
                raise InputFileError(p, f"unknown key {k!r} in [{where}.model]; known keys: "
                                        f"{', '.join(MODEL_KEYS)}")
            if k == "taper":
                if v not in TAPER_NAMES:
                    raise InputFileError(p, f"[{where}.model] taper = {v!r}: expected one "
                                            f"of {', '.join(TAPER_NAMES)}")
            elif k == "elements":
                if isinstance(v, bool) or not isinstance(v, int) or v < 1:
                    raise InputFileError(p, f"[{where}.model] elements = {v!r}: expected a "
                                            "whole number of at least 1")
            else:
                v = _number(p, f"{where}.model", k, v)
            model[MODEL_KEYS[k]] = v
    return StreamSpec(name=name, endpoint=endpoint, topic=topic, fmt=fmt, bind=bind,
                      model=model, alarms=alarms, extra=extra,
                      base_dir=str(Path(p).resolve().parent))


def stream_specs_from_args(args: argparse.Namespace) -> list[StreamSpec]:
    """Every stream of this run: the positional ENDPOINT, the --stream options, then the
    [streams.NAME] tables, in that order; names must be unique."""
    specs: list[StreamSpec] = []
    endpoint = getattr(args, "endpoint", None)
    topic = getattr(args, "topic", "") or ""
    if endpoint:
        specs.append(StreamSpec(DEFAULT_STREAM_NAME, endpoint, topic=topic))
    for text in getattr(args, "streams", None) or ():
        name, ep = parse_stream_arg(text)
        specs.append(StreamSpec(name, ep, topic=topic))
    path = getattr(args, "config", None)
    if path:
        specs += [spec_from_table(n, t, str(path)) for n, t in _stream_tables(path).items()]
    if not specs:
        raise UsageError("give an ENDPOINT, --stream NAME=ENDPOINT or a --config file with "
                         "[streams.NAME] tables")
    seen: set[str] = set()
    for s in specs:
        if s.name in seen:
            raise UsageError(f"stream name {s.name!r} is given twice; names must be unique")
        seen.add(s.name)
    return specs


def monitor_for_spec(spec: StreamSpec, args: argparse.Namespace) -> Any:
    """A new Monitor for one stream: the command line's settings with the stream's
    own model and alarm overrides applied."""
    from stream.alarms import AlarmConfig, AlarmEngine
    from stream.estimator import RollingPattern
    from stream.monitor import Monitor
    from tui.alarm_options import alarm_config_from_args
    from tui.options import estimator_config_from_args, model_from_args
    if spec.model is not None:
        kw = {"n_elements": getattr(args, "elements", None) or 4,
              "spacing_wl": args.spacing_wl, "element_exp": args.element_exp,
              "steer_deg": args.steer_deg, "taper": args.taper, **spec.model}
        try:
            model: ArrayModel | None = ArrayModel(**kw)
        except (TypeError, ValueError) as exc:
            raise UserError(f"stream {spec.name}: array model unusable ({exc})") from None
    else:
        model = model_from_args(args)
    config: AlarmConfig = alarm_config_from_args(args)
    if spec.alarms:
        try:
            config = dataclasses.replace(config, **spec.alarms)
        except UserError as exc:
            raise UserError(f"stream {spec.name}: {exc}") from None
    return Monitor(RollingPattern(estimator_config_from_args(args)), AlarmEngine(config),
                   model, target_deg=config.target_deg, tolerance_deg=config.tolerance_deg)


def session_path(record_dir: str, name: str) -> Path:
    """``DIR/NAME.lwsession`` (DIR created)."""
    from replay.session import SUFFIX
    d = Path(record_dir)
    try:
        d.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise UserError(f"--record-dir {record_dir}: cannot create ({exc.strerror}); pick "
                        "a writable folder") from None
    return d / f"{name}{SUFFIX}"


def start_session_metrics(args: argparse.Namespace, meta: dict[str, Any], path: str,
                          monitor: Any) -> Any:
    """``--metrics-listen`` for a replay: one stream named as recorded (``--record-dir``
    recordings keep their stream name), else after the file; ``None`` without it."""
    if not getattr(args, "metrics_listen", None):
        return start_metrics_from_args(args, list)  # refuses a lone --insecure-listen
    import re

    from replay.fleet import NAME_PATTERN, Station
    source = meta.get("source") if isinstance(meta.get("source"), dict) else {}
    name = str(source.get("stream") or "")
    if not NAME_PATTERN.match(name):
        name = re.sub(r"[^A-Za-z0-9_.-]", "-", Path(path).stem).strip("-._")[:64] or "replay"
    station = Station(name, monitor)
    return start_metrics_from_args(args, lambda: [station])
