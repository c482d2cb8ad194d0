"""``lobewatch synth``: publish a simulated swept array over ZeroMQ."""

from __future__ import annotations

import argparse
import signal
import sys
import threading
from typing import Any

from stream.array_model import TAPER_NAMES
from stream.errors import UserError
from stream.scenarios import SCENARIOS
from stream.synth import DEFAULT_ENDPOINT, SYNTH_FORMATS, SynthConfig, run_publisher
from tui.cli import UsageError
from tui.curve_options import add_curve_arguments, check_listen, curve_from_args, refuse_curve
from tui.fleet_synth import add_array_arguments, run_arrays
from tui.iq_options import add_iq_arguments, run_iq_synth
from tui.options import taper_help
from tui.speed_options import SimClock, add_speed_argument, speed_from_args

_D = SynthConfig()

DESCRIPTION = f"""\
Publish wire-format v1 samples of a simulated linear array on a ZeroMQ PUB socket, so
the monitor can be tried without hardware.  The simulated beam is swept (steered over
+/-SPAN degrees) or turned on a mount, with receiver noise and slow fading, and an
optional scripted scenario (all scenarios are invented for testing):

{chr(10).join(f"  {n:12s} {s.description}" for n, s in SCENARIOS.items())}

The publisher binds (127.0.0.1 by default); run the monitor with
  lobewatch live {DEFAULT_ENDPOINT} --headless --elements 4
Each start picks a random epoch and numbers messages from 0, so the monitor tells a
restart from a loss.  Output is deterministic for a given --seed.
"""


def register(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "synth", help="publish a simulated swept array (for trying the monitor)",
        description=DESCRIPTION, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--endpoint", default=DEFAULT_ENDPOINT, metavar="ADDR",
                   help=f"address to bind (default {DEFAULT_ENDPOINT}; tcp://127.0.0.1:* "
                        "picks a free port and prints it)")
    add_curve_arguments(p, role="publisher")  # --curve-secret/-allow (tui/curve_options.py)
    p.add_argument("--scenario", default=_D.scenario, choices=tuple(SCENARIOS),
                   help=f"scripted situation (default {_D.scenario}); see --list-scenarios")
    p.add_argument("--list-scenarios", action="store_true",
                   help="print the scenarios with their timelines and exit")
    p.add_argument("--format", dest="fmt", default=_D.fmt, choices=SYNTH_FORMATS,
                   help=f"message format (default {_D.fmt}); raw-f32 needs "
                        "`lobewatch live --format raw-f32`")
    p.add_argument("--topic", default="", metavar="TOPIC",
                   help="send TOPIC as a first frame of every message (default none)")
    p.add_argument("--rate-sps", type=float, default=_D.rate_sps, metavar="SPS",
                   help=f"samples per second (default {_D.rate_sps:g})")
    p.add_argument("--batch", type=int, default=_D.batch, metavar="N",
                   help=f"samples per batch message (default {_D.batch})")
    p.add_argument("--duration", type=float, default=None, metavar="S",
                   help="stop after S seconds (default: until Ctrl-C)")
    a = p.add_argument_group("simulated array")
    a.add_argument("--elements", type=int, default=_D.n_elements, metavar="N",
                   help=f"number of elements (columns) N (default {_D.n_elements})")
    a.add_argument("--spacing-wl", type=float, default=_D.spacing_wl, metavar="D",
                   help=f"element spacing in wavelengths (default {_D.spacing_wl:g})")
    a.add_argument("--element-exp", type=float, default=_D.element_exp, metavar="Q",
                   help=f"element power pattern cos^Q(theta) (default {_D.element_exp:g})")
    a.add_argument("--taper", default=_D.taper, choices=TAPER_NAMES, metavar="NAME",
                   help=taper_help(_D.taper))  # one wording everywhere (tui/options.py)
    a.add_argument("--mode", default=_D.mode, choices=("sweep", "mount"),
                   help="sweep: beam steered back and forth over +/-SPAN; mount: the array "
                        f"turns full circles (default {_D.mode})")
    a.add_argument("--span-deg", type=float, default=_D.span_deg, metavar="DEG",
                   help=f"sweep half-span, degrees (default {_D.span_deg:g})")
    a.add_argument("--step-deg", type=float, default=_D.step_deg, metavar="DEG",
                   help=f"steering step, degrees; 0 = continuous (default {_D.step_deg:g})")
    a.add_argument("--sweeps-per-s", type=float, default=_D.sweeps_per_s, metavar="R",
                   help=f"one-way sweeps per second (default {_D.sweeps_per_s:g})")
    a.add_argument("--mount-dps", type=float, default=_D.mount_dps, metavar="DPS",
                   help=f"mount turn rate, degrees per second (default {_D.mount_dps:g})")
    m = p.add_argument_group("simulated measurement")
    m.add_argument("--power-dbm", type=float, default=_D.power_offset_dbm, metavar="DBM",
                   help=f"received power at the beam peak, dBm (default "
                        f"{_D.power_offset_dbm:g})")
    m.add_argument("--noise-db", type=float, default=_D.noise_db, metavar="DB",
                   help=f"measurement jitter, standard deviation in dB (default "
                        f"{_D.noise_db:g})")
    m.add_argument("--noise-floor-dbm", type=float, default=_D.noise_floor_dbm, metavar="DBM",
                   help=f"receiver noise floor, dBm (default {_D.noise_floor_dbm:g})")
    m.add_argument("--fading-db", type=float, default=_D.fading_db, metavar="DB",
                   help=f"slow fading depth, dB (default {_D.fading_db:g})")
    m.add_argument("--back-lobe-db", type=float, default=_D.back_lobe_db, metavar="DB",
                   help=f"back lobe level relative to the peak (mount mode), dB (default "
                        f"{_D.back_lobe_db:g})")
    m.add_argument("--uncalibrated", action="store_true",
                   help="send power_db (relative) instead of power_dbm")
    m.add_argument("--seed", type=int, default=_D.seed, metavar="N",
                   help=f"random seed for noise and fading (default {_D.seed})")
    add_array_arguments(p)  # several arrays on several ports (tui/fleet_synth.py)
    add_iq_arguments(p, role="synth")  # --iq: simulated radio (tui/iq_options.py)
    add_speed_argument(p)  # --speed FACTOR: faster simulated time (tui/speed_options.py)
    p.set_defaults(func=run)


def list_scenarios() -> str:
    lines = []
    for name, s in SCENARIOS.items():
        lines.append(f"{name}: {s.description}")
        lines += [f"    {step}" for step in s.timeline]
    lines.append("(all scenarios are invented for testing the monitor)")
    return "\n".join(lines)


def config_from_args(args: argparse.Namespace) -> SynthConfig:
    try:
        return SynthConfig(
            n_elements=args.elements, spacing_wl=args.spacing_wl,
            element_exp=args.element_exp, taper=args.taper, mode=args.mode,
            span_deg=args.span_deg, step_deg=args.step_deg, sweeps_per_s=args.sweeps_per_s,
            mount_dps=args.mount_dps, rate_sps=args.rate_sps, batch=args.batch, fmt=args.fmt,
            noise_db=args.noise_db, noise_floor_dbm=args.noise_floor_dbm,
            fading_db=args.fading_db, back_lobe_db=args.back_lobe_db,
            power_offset_dbm=args.power_dbm, calibrated=not args.uncalibrated,
            scenario=args.scenario, seed=args.seed, topic=args.topic.encode(),
        ).validate()
    except ValueError as exc:
        raise UsageError(str(exc)) from None


def run(args: argparse.Namespace) -> int:
    if args.list_scenarios:
        print(list_scenarios())
        return 0
    if args.iq:  # simulated IQ + angle telemetry (tui/iq_options.py)
        refuse_curve(args, "--iq")  # no CURVE on the IQ sockets yet
        return run_iq_synth(args)
    config = config_from_args(args)
    curve = curve_from_args(args, bind=True)  # the publisher binds: a CURVE server
    check_listen(args.endpoint, curve=curve, insecure=args.insecure_listen,
                 what="read the samples")
    if args.duration is not None and not args.duration > 0:
        raise UsageError(f"--duration must be positive, got {args.duration}")
    if args.fmt == "json-single" and args.rate_sps > 200_000:
        raise UsageError("json-single above 200000 samples/s is more than one process "
                         "can encode; use --format json-batch or binary")
    stop = threading.Event()

    def on_signal(signum: int, frame: object) -> None:
        stop.set()

    old = {s: signal.signal(s, on_signal) for s in (signal.SIGINT, signal.SIGTERM)}

    def ready(addr: str) -> None:
        print(f"lobewatch synth: publishing {config.fmt} at {config.rate_sps:g} samples/s "
              f"on {addr} (scenario {config.scenario}, seed {config.seed}); Ctrl-C stops",
              file=sys.stderr, flush=True)

    try:
        sent = run_arrays(args, config, stop, curve=curve) if args.arrays else run_publisher(
            args.endpoint, config, stop, duration_s=args.duration, on_ready=ready,
            curve=curve, clock=SimClock(speed_from_args(args)))
    except UserError:
        raise
    finally:
        for s, h in old.items():
            signal.signal(s, h)
    print(f"lobewatch synth: sent {sent} messages", file=sys.stderr)
    return 0
