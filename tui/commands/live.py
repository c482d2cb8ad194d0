"""``lobewatch live ENDPOINT``: watch a live ZeroMQ stream (screen or JSON Lines)."""

from __future__ import annotations

import argparse
import contextlib
import sys
import time
from typing import Any

from stream.errors import UserError
from stream.monitor import Monitor
from stream.rx_queue import DEFAULT_QUEUE_BYTES
from stream.wire_format import DEFAULT_MAX_MESSAGE_BYTES, FORMATS
from stream.zmq_source import DEFAULT_HWM, check_endpoint
from tui.cli import UsageError, queue_bytes
from tui.curve_options import add_curve_arguments, check_listen, curve_from_args, refuse_curve
from tui.fleet_options import add_fleet_arguments, fleet_requested
from tui.iq_options import add_iq_arguments, bearing_from_args, run_iq_live
from tui.options import add_pipeline_arguments, add_screen_arguments, build_monitor

DESCRIPTION = """\
Subscribe to a ZeroMQ PUB endpoint carrying (angle, power) samples in wire format v1
(docs/wire-format.md) and keep the beam readout up to date: peak direction, half-power
beamwidth, side lobes, front-to-back, model fit and alarms.

By default the screen opens.  With --headless one JSON object per line goes to stdout:
"metrics" every --interval seconds, "status" when the stream starts, goes stale or
resumes, "alarm" on alarm changes and a final "summary" on Ctrl-C / SIGTERM (exit 0;
exit 3 when --fail-on fired).

Example: `lobewatch synth` in one terminal, then
  lobewatch live tcp://127.0.0.1:5557 --headless --elements 4
"""

EPILOG = """\
Safety: stay out of the main beam of energised antennas and follow local RF exposure
limits; work at height only as your training and local rules allow.
"""


def register(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "live", help="watch a live ZeroMQ stream of samples",
        description=DESCRIPTION, epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("endpoint", metavar="ENDPOINT", nargs="?",
                   help="ZeroMQ address, e.g. tcp://127.0.0.1:5557 or ipc:///run/beam.sock "
                        "(optional with --stream or [streams.NAME] in --config)")
    src = p.add_argument_group("stream")
    src.add_argument("--bind", action="store_true",
                     help="bind ENDPOINT and let publishers connect (default: connect to a "
                          "publisher that binds)")
    src.add_argument("--topic", default="", metavar="TOPIC",
                     help="subscribe only to messages whose first frame starts with TOPIC "
                          "(default: everything)")
    src.add_argument("--format", dest="fmt", choices=FORMATS, default="auto",
                     help="auto: JSON single, JSON batch and binary batch messages; raw-f32: "
                          "frames of interleaved float32 (angle_deg, power_db) pairs "
                          "(default auto)")
    src.add_argument("--stale-after", type=float, default=3.0, metavar="S",
                     help="no samples for S seconds marks the stream stale and raises the "
                          "stale alarm: the one staleness setting (--stale-s is its old "
                          "name; default 3)")
    src.add_argument("--hwm", type=int, default=DEFAULT_HWM, metavar="N",
                     help=f"receive queue limit, messages (default {DEFAULT_HWM}); beyond it "
                          "messages are dropped and counted as lost")
    src.add_argument("--queue-mb", type=float, default=DEFAULT_QUEUE_BYTES / 2**20, metavar="MB",
                     help="memory the receive queue may hold, MiB (default "
                          f"{DEFAULT_QUEUE_BYTES // 2**20}): once large messages are seen the "
                          "queue takes fewer of them, and the rest wait in the publisher; "
                          "0 leaves only --hwm")
    src.add_argument("--max-message-bytes", type=int, default=DEFAULT_MAX_MESSAGE_BYTES,
                     metavar="B", help="largest accepted message, bytes (default "
                                      f"{DEFAULT_MAX_MESSAGE_BYTES}); larger ones are refused")
    out = p.add_argument_group("output")
    out.add_argument("--headless", action="store_true",
                     help="print JSON Lines to stdout instead of opening the screen")
    out.add_argument("--interval", type=float, default=None, metavar="S",
                     help="seconds between readouts (default 1 headless, 0.1 on screen)")
    out.add_argument("--record", metavar="FILE", nargs="?", const="",
                     help="also record the session for replay: to FILE (.lwsession), or "
                          "without FILE to a new dated file in the sessions folder "
                          "(--record-dir, else the user data folder; the path is printed)")
    out.add_argument("--force", action="store_true",
                     help="overwrite FILE given to --record")
    add_screen_arguments(p)
    add_pipeline_arguments(p)
    add_fleet_arguments(p)  # --stream, --record-dir, --metrics-listen (tui/fleet_options.py)
    add_curve_arguments(p)  # --curve-secret/-server/-allow (tui/curve_options.py)
    add_iq_arguments(p)  # --iq/--angle radio source, bearings (tui/iq_options.py)
    p.set_defaults(func=run)


def build_pipeline(args: argparse.Namespace) -> Monitor:
    """The monitor for these options."""
    return build_monitor(args)


def _metadata(args: argparse.Namespace, monitor: Monitor) -> dict[str, Any]:
    meta: dict[str, Any] = {
        "source": {"kind": "live", "endpoint": args.endpoint, "bind": bool(args.bind),
                   "topic": args.topic, "format": args.fmt},
        "created_t": time.time(),
    }
    with contextlib.suppress(ModuleNotFoundError, AttributeError):
        from tui.options import settings_record
        meta["settings"] = settings_record(args, monitor)
    if monitor.bearing is not None:  # replay and records give bearings again
        meta["bearing"] = monitor.bearing.to_dict()
    return meta


def _recorder(path: str, meta: dict[str, Any], force: bool, monitor: Monitor) -> Any:
    try:
        from replay.recorder import Recorder
    except ModuleNotFoundError as exc:
        if exc.name not in ("replay.recorder", "replay"):
            raise
        raise UserError("recording is not available in this build; run without "
                        "--record") from None
    return Recorder(path, meta, force=force).attach(monitor)


def _fail_on(args: argparse.Namespace) -> str | None:
    try:
        from tui.alarm_options import notify_settings_from_args
    except ModuleNotFoundError:
        return getattr(args, "fail_on", None)
    return notify_settings_from_args(args).fail_on


def _hook(args: argparse.Namespace) -> Any:
    try:
        from tui.alarm_options import alarm_hook_from_args
    except ModuleNotFoundError:
        return None
    return alarm_hook_from_args(args)


def run(args: argparse.Namespace) -> int:
    from replay.fleet import TopicGuard  # one topic per stream, never two merged
    from stream.live import LiveDriver
    from stream.zmq_source import ZmqSource

    if args.iq:  # IQ samples + positioner angle instead of ENDPOINT (tui/iq_options.py)
        refuse_curve(args, "--iq")  # no CURVE on the IQ sockets yet
        return run_iq_live(args)
    if not args.endpoint or fleet_requested(args):  # several streams / metrics endpoint
        from tui.fleet_run import run_fleet
        return run_fleet(args)
    check_endpoint(args.endpoint)
    curve = curve_from_args(args, bind=args.bind)  # CURVE keys; the listening rule below
    if args.bind:
        check_listen(args.endpoint, curve=curve, insecure=args.insecure_listen,
                     what="send samples to this monitor")
    interval = args.interval if args.interval is not None else (1.0 if args.headless else 0.1)
    if not interval > 0:
        raise UsageError(f"--interval must be positive, got {args.interval}")
    if not args.stale_after > 0:
        raise UsageError(f"--stale-after must be positive, got {args.stale_after}")
    if args.hwm < 1 or args.max_message_bytes < 64:
        raise UsageError("--hwm must be at least 1 and --max-message-bytes at least 64")
    if not args.queue_mb >= 0:
        raise UsageError(f"--queue-mb must be 0 or more, got {args.queue_mb}")
    if args.force and not args.record:
        raise UsageError("--force only applies with --record FILE")
    if args.record == "":  # --record without FILE: a new file in the sessions folder
        from replay.session_writer import new_session_path
        args.record = str(new_session_path(getattr(args, "record_dir", None)))
        print(f"lobewatch live: recording to {args.record}", file=sys.stderr)
    monitor = build_pipeline(args)
    monitor.bearing = bearing_from_args(args)
    fail_on = _fail_on(args)
    hook = _hook(args)
    if hook is not None:
        monitor.event_sinks.append(hook)
    meta = _metadata(args, monitor)
    recorder = _recorder(args.record, meta, args.force, monitor) if args.record else None
    source = None
    try:
        source = ZmqSource(args.endpoint, bind=args.bind, topic=args.topic.encode(),
                           fmt=args.fmt, hwm=args.hwm, queue_bytes=queue_bytes(args),
                           max_message_bytes=args.max_message_bytes,
                           stale_after_s=args.stale_after, curve=curve)
        driver = LiveDriver(TopicGuard(source, args.endpoint), monitor, interval_s=interval)
        if args.headless:
            from tui.headless import run_headless
            return run_headless(driver, monitor, out=sys.stdout, fail_on=fail_on)
        from tui.options import beam_options_from_args, run_app

        def new_recording() -> Any:
            from replay.session_writer import new_session_path  # the sessions folder, not the cwd
            path = str(new_session_path(getattr(args, "record_dir", None)))
            return _recorder(path, _metadata(args, monitor), False, monitor)

        return run_app(monitor, driver, beam_options_from_args(
            args, "live", recorder_factory=new_recording, recorder=recorder))
    finally:
        if source is not None:
            source.close()
        if hook is not None:
            with contextlib.suppress(Exception):
                hook.close()
        if recorder is not None:
            recorder.close()
