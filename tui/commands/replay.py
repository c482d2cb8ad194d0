"""``lobewatch replay FILE``: play a recorded session through the same pipeline.

By default the pipeline settings recorded in the session (array model, estimator,
alarm thresholds) are used, so the replay computes what the live run computed; any
pipeline option given on the command line replaces the recorded group it belongs to
(e.g. ``--sll-limit-db`` re-judges the session with another threshold).
"""

from __future__ import annotations

import argparse
import math
import sys
from typing import Any

from replay.player import DEFAULT_INTERVAL_S, Player
from replay.session import SessionReader
from stream.errors import UserError
from stream.monitor import Monitor
from tui.cli import UsageError
from tui.fleet_options import add_metrics_arguments, start_session_metrics
from tui.options import add_pipeline_arguments, add_screen_arguments, build_monitor

_MODEL_DESTS = ("elements", "spacing_wl", "element_exp", "steer_deg", "taper")
_ESTIMATOR_DESTS = ("bin_deg", "averaging", "tau_s", "sweeps_k", "bin_max_age_s")
_OWN_DESTS = ("file", "speed", "headless", "interval", "warmup", "start", "func", "command",
              "_defaults", "bell", "on_alarm", "fail_on", "on_alarm_timeout_s",
              "metrics_listen", "insecure_listen")


def register(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "replay", help="play a recorded session (.lwsession) through the monitor",
        description="Play a session file through the same estimator, metrics and alarms as "
                    "the live monitor: in the TUI at real time (or --speed X), or with "
                    "--headless as fast as possible, printing the same JSON Lines as "
                    "`lobewatch live --headless` with the recorded times.")
    p.add_argument("file", metavar="FILE", help="session file (.lwsession)")
    p.add_argument("--speed", type=float, default=None, metavar="X",
                   help="recorded seconds per wall-clock second (TUI default 1; headless "
                        "default: as fast as possible)")
    p.add_argument("--headless", action="store_true",
                   help="no screen: print JSON Lines (metrics, alarm, status, summary)")
    p.add_argument("--interval", type=float, default=DEFAULT_INTERVAL_S, metavar="S",
                   help="readout spacing for sessions recorded without readouts (imported "
                        f"files), seconds of recorded time (default {DEFAULT_INTERVAL_S})")
    p.add_argument("--warmup", type=float, default=None, metavar="S",
                   help="make seeks quicker but approximate: replay only S seconds before "
                        "a seek target (e.g. 5 x --tau-s).  Default: exact seeks, the "
                        "readouts after a seek equal a straight-through replay (a seek back "
                        "replays from the start of the session)")
    p.add_argument("--start", type=float, default=None, metavar="S",
                   help="begin S seconds into the session")
    add_screen_arguments(p)
    add_pipeline_arguments(p)
    add_metrics_arguments(p)  # --metrics-listen (tui/fleet_options.py)
    defaults = {a.dest: a.default for a in p._actions if a.dest != "help"}
    p.set_defaults(func=run, _defaults=defaults)


def _given(args: argparse.Namespace, dests: tuple[str, ...] | list[str]) -> bool:
    defaults = getattr(args, "_defaults", {})

    def given(d: str) -> bool:
        if d not in defaults:
            return False
        if defaults[d] is argparse.SUPPRESS:  # an option without a default: given if set
            return hasattr(args, d)
        return getattr(args, d, defaults[d]) != defaults[d]

    return any(given(d) for d in dests)


def monitor_for_session(args: argparse.Namespace, meta: dict[str, Any]) -> Monitor:
    """The pipeline for a replay: recorded settings unless overridden on the command line."""
    monitor = build_monitor(args)
    settings = meta.get("settings") if isinstance(meta.get("settings"), dict) else meta
    defaults = getattr(args, "_defaults", {})
    alarm_dests = [d for d in defaults if d not in _MODEL_DESTS + _ESTIMATOR_DESTS + _OWN_DESTS]
    est = settings.get("estimator")
    if isinstance(est, dict) and not _given(args, _ESTIMATOR_DESTS):
        from stream.estimator import EstimatorConfig, RollingPattern
        try:
            monitor.estimator = RollingPattern(EstimatorConfig(**est))
        except (TypeError, ValueError) as exc:
            raise UserError(f"{args.file}: recorded estimator settings unusable ({exc}); "
                            "give the estimator options on the command line") from None
    model = settings.get("model")
    if isinstance(model, dict) and not _given(args, _MODEL_DESTS):
        from stream.array_model import ArrayModel
        try:
            monitor = Monitor(monitor.estimator, monitor.alarms, ArrayModel(**model),
                              target_deg=monitor.target_deg, tolerance_deg=monitor.tolerance_deg)
        except (TypeError, ValueError) as exc:
            raise UserError(f"{args.file}: recorded array model unusable ({exc}); give "
                            "--elements and the other model options") from None
    alarms = settings.get("alarms")
    if isinstance(alarms, dict) and monitor.alarms is not None and not _given(args, alarm_dests):
        from stream.alarms import AlarmConfig, AlarmEngine
        try:
            cfg = AlarmConfig(**{k: (tuple(v) if isinstance(v, list) else v)
                                 for k, v in alarms.items()})
        except (TypeError, ValueError) as exc:
            raise UserError(f"{args.file}: recorded alarm settings unusable ({exc}); give "
                            "the alarm options on the command line") from None
        monitor.alarms = AlarmEngine(cfg)
        monitor.target_deg = getattr(cfg, "target_deg", None)
        monitor.tolerance_deg = getattr(cfg, "tolerance_deg", None)
    bearing = meta.get("bearing")
    if isinstance(bearing, dict):  # the compass convention the live run used
        from stream.bearing import BearingConvention
        try:
            monitor.bearing = BearingConvention(**bearing)
        except (TypeError, ValueError) as exc:
            raise UserError(f"{args.file}: recorded bearing convention unusable ({exc})"
                            ) from None
    return monitor


def run(args: argparse.Namespace) -> int:
    if args.speed is not None and not (args.speed > 0):
        raise UsageError(f"--speed must be positive, got {args.speed}")
    if not (args.interval > 0):
        raise UsageError(f"--interval must be positive, got {args.interval}")
    if args.warmup is not None and args.warmup < 0:
        raise UsageError(f"--warmup must not be negative, got {args.warmup}")
    with SessionReader(args.file) as reader:
        meta = dict(reader.meta)
    monitor = monitor_for_session(args, meta)
    speed = args.speed if args.speed is not None else (math.inf if args.headless else 1.0)
    player = Player(args.file, monitor, speed=speed, interval_s=args.interval,
                    warmup_s=args.warmup, hold_at_end=not args.headless)
    metrics = None
    try:
        metrics = start_session_metrics(args, meta, args.file, monitor)  # Prometheus
        if args.start:
            player.seek_to(player.t_start + args.start)
        if args.headless:
            from tui.headless import run_headless
            return int(run_headless(player, monitor, out=sys.stdout,
                                    fail_on=getattr(args, "fail_on", None)) or 0)
        from tui.options import beam_options_from_args, run_app
        return run_app(monitor, player, beam_options_from_args(args, "replay"))
    finally:
        if metrics is not None:
            metrics.close()
        player.close()
