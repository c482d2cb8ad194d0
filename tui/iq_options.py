"""Radio options: ``live --iq ... --angle ...`` (IQ samples + positioner angle, joined into
samples) and ``synth --iq`` (a simulated radio and positioner), plus compass bearings.

``add_iq_arguments(parser, role)`` adds the options; ``run_iq_live`` / ``run_iq_synth``
run them; ``bearing_from_args`` is shared with the plain ``live`` path.  The physics is in
``stream/iq.py``, ``stream/angle_join.py``, ``stream/iq_source.py`` (docs/radio.md).
"""

from __future__ import annotations

import argparse
import contextlib
import math
import signal
import sys
import threading
import time
from typing import Any

import numpy as np

from stream.angle_join import JoinConfig, LagEstimate
from stream.array_model import ArrayModel
from stream.bearing import REFERENCES, SENSES, BearingConvention
from stream.errors import UserError
from stream.iq import IQ_FORMATS, Channel
from stream.synth_iq import DEFAULT_ANGLE_ENDPOINT, DEFAULT_IQ_ENDPOINT, IqSynthConfig
from stream.tick import Event
from tui.cli import UsageError, queue_bytes

_S = IqSynthConfig()


def add_iq_arguments(parser: argparse.ArgumentParser, role: str = "live") -> None:
    """Add the radio options for ``live`` (role "live") or ``synth`` (role "synth")."""
    if role == "synth":
        g = parser.add_argument_group(
            "simulated radio (--iq: publish IQ samples and angle telemetry instead of "
            "samples; the array options above shape the beam; all invented for testing)")
        g.add_argument("--iq", nargs="?", const=DEFAULT_IQ_ENDPOINT, metavar="ADDR",
                       help=f"publish raw IQ frames at ADDR (default {DEFAULT_IQ_ENDPOINT})")
        g.add_argument("--angle", default=DEFAULT_ANGLE_ENDPOINT, metavar="ADDR",
                       help=f"publish angle telemetry at ADDR (default "
                            f"{DEFAULT_ANGLE_ENDPOINT})")
        g.add_argument("--sample-rate", type=float, default=_S.sample_rate_hz, metavar="HZ",
                       help=f"IQ sample rate, Hz (default {_S.sample_rate_hz:g})")
        g.add_argument("--iq-format", choices=IQ_FORMATS, default=_S.fmt,
                       help="cf32: interleaved float32 I/Q; ci16: int16 I/Q, full scale "
                            "32768 (default cf32)")
        g.add_argument("--tone-offset-hz", type=float, default=_S.tone_offset_hz,
                       metavar="HZ", help=f"received tone's offset from the tuned "
                                          f"frequency, Hz (default {_S.tone_offset_hz:g})")
        g.add_argument("--peak-dbfs", type=float, default=_S.peak_dbfs, metavar="DBFS",
                       help=f"tone level at the beam peak, dBFS (default {_S.peak_dbfs:g})")
        g.add_argument("--noise-dbfs", type=float, default=_S.noise_dbfs, metavar="DBFS",
                       help=f"receiver noise over the whole band, dBFS (default "
                            f"{_S.noise_dbfs:g})")
        g.add_argument("--sweep-dps", type=float, default=_S.rate_dps, metavar="DPS",
                       help=f"positioner speed, degrees per second, over +/-SPAN "
                            f"(default {_S.rate_dps:g})")
        g.add_argument("--beam-deg", type=float, default=5.0, metavar="DEG",
                       help="direction of the simulated beam peak, degrees (default 5)")
        g.add_argument("--angle-rate-hz", type=float, default=_S.angle_rate_hz, metavar="HZ",
                       help=f"angle reports per second (default {_S.angle_rate_hz:g})")
        g.add_argument("--angle-lag-s", type=float, default=_S.angle_lag_s, metavar="S",
                       help=f"how late the angle reports are stamped, seconds (default "
                            f"{_S.angle_lag_s:g}); live --angle-lag-s auto should find it")
        return
    g = parser.add_argument_group(
        "radio (IQ samples + positioner angle instead of ENDPOINT; docs/radio.md)")
    g.add_argument("--iq", metavar="ENDPOINT",
                   help="subscribe to raw IQ frames at ENDPOINT (needs --angle and "
                        "--sample-rate)")
    g.add_argument("--angle", metavar="ENDPOINT",
                   help='subscribe to angle telemetry at ENDPOINT: {"t": T, "angle_deg": A} '
                        "JSON, single or batch (wire v1 shapes without power)")
    g.add_argument("--sample-rate", type=float, metavar="HZ",
                   help="IQ sample rate, Hz (the IQ stream's only clock)")
    g.add_argument("--iq-format", choices=IQ_FORMATS, default="cf32",
                   help="cf32: interleaved little-endian float32 I/Q; ci16: int16 I/Q, full "
                        "scale 32768 (default cf32)")
    g.add_argument("--block-s", type=float, default=0.01, metavar="S",
                   help="power is estimated per block of S seconds (default 0.01)")
    g.add_argument("--channel-offset-hz", type=float, default=None, metavar="HZ",
                   help="centre of the channel measured, Hz from the tuned frequency "
                        "(default 0 with --channel-bw-hz; without both, total power)")
    g.add_argument("--channel-bw-hz", type=float, default=None, metavar="HZ",
                   help="channel width, Hz: power from a Welch spectrum inside it, the noise "
                        "floor from outside it")
    g.add_argument("--welch-nperseg", type=int, default=256, metavar="N",
                   help="Welch segment length, samples (default 256; resolution = "
                        "sample rate / N)")
    g.add_argument("--cal-db", type=float, default=None, metavar="DB",
                   help="dBm at the receiver input minus the dBFS read (from a signal "
                        "generator); the readout then says dBm, else dB")
    g.add_argument("--angle-gap-s", type=float, default=0.5, metavar="S",
                   help="angle reports further apart than S seconds leave the blocks between "
                        "them without an angle: dropped and counted (default 0.5)")
    g.add_argument("--angle-lag-s", default="auto", metavar="auto|S",
                   help="angle clock minus IQ clock, seconds, or auto: estimated from "
                        "forward and reverse sweeps (default auto)")
    g.add_argument("--dwell", action="store_true",
                   help="the angle stream announces discrete beam positions: a block counts "
                        "only after --settle-s and before the next announcement")
    g.add_argument("--settle-s", type=float, default=0.2, metavar="S",
                   help="with --dwell, seconds after an announcement before blocks count "
                        "(default 0.2)")
    add_bearing_arguments(parser)


def add_bearing_arguments(parser: argparse.ArgumentParser) -> None:
    b = parser.add_argument_group("compass bearing (optional)")
    b.add_argument("--bearing-offset-deg", type=float, default=None, metavar="DEG",
                   help="compass bearing of array angle 0, degrees; the readout and JSON "
                        "lines then give the peak's bearing too")
    b.add_argument("--bearing-sense", choices=SENSES, default="cw",
                   help="cw: a growing array angle turns clockwise seen from above "
                        "(default cw); ccw: the other way")
    b.add_argument("--bearing-reference", choices=REFERENCES, default="true",
                   help="north the offset was measured from (default true)")


def bearing_from_args(args: argparse.Namespace) -> BearingConvention | None:
    off = getattr(args, "bearing_offset_deg", None)
    if off is None:
        return None
    try:
        return BearingConvention(off, args.bearing_sense, args.bearing_reference)
    except ValueError as exc:
        raise UsageError(f"--bearing-offset-deg: {exc}") from None


def _lag(text: str) -> float | None:
    if str(text).strip().lower() == "auto":
        return None
    try:
        v = float(text)
    except ValueError:
        raise UsageError(f"--angle-lag-s takes 'auto' or seconds, got {text!r}") from None
    if not math.isfinite(v):
        raise UsageError("--angle-lag-s must be a finite number of seconds")
    return v


def iq_source_from_args(args: argparse.Namespace, on_lag: Any = None) -> Any:
    """The :class:`stream.iq_source.IqSource` for ``live --iq`` options."""
    from stream.iq_source import IqSource

    if not args.angle:
        raise UsageError("--iq needs --angle ENDPOINT (where the positioner's angle comes "
                         "from)")
    if args.sample_rate is None or not args.sample_rate > 0:
        raise UsageError("--iq needs --sample-rate HZ (the radio's sample rate, positive)")
    if not args.block_s > 0:
        raise UsageError(f"--block-s must be positive, got {args.block_s}")
    channel = None
    if args.channel_bw_hz is not None:
        channel = Channel(args.channel_offset_hz or 0.0, args.channel_bw_hz,
                          args.welch_nperseg)
    elif args.channel_offset_hz is not None:
        raise UsageError("--channel-offset-hz needs --channel-bw-hz (the channel's width)")
    try:
        join = JoinConfig(gap_s=args.angle_gap_s, lag_s=_lag(args.angle_lag_s),
                          dwell=args.dwell, settle_s=args.settle_s).validate()
    except ValueError as exc:
        raise UsageError(f"angle options: {exc}") from None
    try:
        return IqSource(args.iq, args.angle, sample_rate_hz=args.sample_rate,
                        fmt=args.iq_format, block_s=args.block_s, channel=channel,
                        cal_db=args.cal_db, join=join, bind=args.bind,
                        queue_bytes=queue_bytes(args), stale_after_s=args.stale_after,
                        on_lag=on_lag)
    except ValueError as exc:
        raise UsageError(str(exc)) from None


def lag_event(t: float, est: LagEstimate, noise_floor_db: float | None = None) -> Event:
    """The ``radio`` event that carries a new lag estimate (headless, records), with the
    channel's noise floor at that moment when a channel is set."""
    from stream.iq_source import lag_text
    return Event(t, "radio", {**est.to_dict(), "noise_floor_db": noise_floor_db,
                              "text": lag_text(est)})


def run_iq_live(args: argparse.Namespace) -> int:
    """``live --iq``: the same road as ``live ENDPOINT`` with the radio source."""
    from stream.live import LiveDriver
    from tui.commands import live

    interval = args.interval if args.interval is not None else (1.0 if args.headless else 0.1)
    if not interval > 0:
        raise UsageError(f"--interval must be positive, got {args.interval}")
    if args.force and not args.record:
        raise UsageError("--force only applies with --record FILE")
    monitor = live.build_pipeline(args)
    monitor.bearing = bearing_from_args(args)
    source = iq_source_from_args(
        args, on_lag=lambda t, est: monitor.emit(lag_event(t, est, source.noise_floor_db)))
    fail_on = live._fail_on(args)
    hook = live._hook(args)
    if hook is not None:
        monitor.event_sinks.append(hook)

    def metadata() -> dict[str, Any]:
        meta = live._metadata(args, monitor)
        meta["source"] = source.info()  # calibration, lag mode and value in force
        return meta

    recorder = None
    try:
        recorder = live._recorder(args.record, metadata(), args.force, monitor) \
            if args.record else None
        driver = LiveDriver(source, monitor, interval_s=interval)
        if args.headless:
            from tui.headless import run_headless
            return run_headless(driver, monitor, out=sys.stdout, fail_on=fail_on)
        from tui.options import beam_options_from_args, run_app

        def new_recording() -> Any:
            path = time.strftime("lobewatch-%Y%m%d-%H%M%S.lwsession")
            return live._recorder(path, metadata(), False, monitor)

        return run_app(monitor, driver, beam_options_from_args(
            args, "live", recorder_factory=new_recording, recorder=recorder))
    finally:
        source.close()
        if hook is not None:
            with contextlib.suppress(Exception):
                hook.close()
        if recorder is not None:
            recorder.close()


def run_iq_synth(args: argparse.Namespace) -> int:
    """``synth --iq``: publish simulated IQ and angle telemetry until Ctrl-C/--duration."""
    from stream.synth_iq import run_iq_publisher

    try:
        cfg = IqSynthConfig(sample_rate_hz=args.sample_rate, fmt=args.iq_format,
                            tone_offset_hz=args.tone_offset_hz, peak_dbfs=args.peak_dbfs,
                            noise_dbfs=args.noise_dbfs, span_deg=args.span_deg,
                            rate_dps=args.sweep_dps, angle_rate_hz=args.angle_rate_hz,
                            angle_lag_s=args.angle_lag_s, seed=args.seed,
                            frame_samples=max(256, int(args.sample_rate / 100))).validate()
        model = ArrayModel(args.elements, args.spacing_wl, args.element_exp,
                           steer_deg=args.beam_deg, taper=args.taper)
        model.weights()
    except ValueError as exc:
        raise UsageError(str(exc)) from None
    if args.duration is not None and not args.duration > 0:
        raise UsageError(f"--duration must be positive, got {args.duration}")

    grid_deg = np.arange(-180.0, 180.0 + 1e-9, 0.01)  # tabulated once, interpolated per frame
    table_lin = 10.0 ** (model.power_db(grid_deg) / 10.0)

    def pattern_lin(angle_deg: np.ndarray) -> np.ndarray:
        return np.interp(angle_deg, grid_deg, table_lin)

    stop = threading.Event()
    old = {s: signal.signal(s, lambda *_: stop.set()) for s in (signal.SIGINT, signal.SIGTERM)}

    def ready(iq: str, ang: str) -> None:
        print(f"lobewatch synth: IQ {cfg.fmt} at {cfg.sample_rate_hz:g} Hz on {iq}, angles "
              f"on {ang} ({cfg.angle_lag_s * 1e3:g} ms late); beam at {args.beam_deg:g} deg "
              f"(invented); Ctrl-C stops.  Watch with\n  lobewatch live --iq {iq} --angle "
              f"{ang} --sample-rate {cfg.sample_rate_hz:g}", file=sys.stderr, flush=True)

    try:
        sent = run_iq_publisher(args.iq, args.angle, cfg, pattern_lin, stop,
                                duration_s=args.duration, on_ready=ready)
    except UserError:
        raise
    finally:
        for s, h in old.items():
            signal.signal(s, h)
    print(f"lobewatch synth: sent {sent} IQ frames", file=sys.stderr)
    return 0
