"""``lobewatch demo``: the beam screen on the built-in simulated array, no hardware.

The simulated publisher (``stream.synth``) runs in a background thread bound to a
private ``ipc://`` socket in a fresh temporary directory; a normal ZeroMQ source and
live driver subscribe to it, exactly as ``lobewatch live`` would, so everything on
screen went through the real wire format, decoder, estimator, metrics and alarms.
The array model of the simulated array is given to the monitor, so the model
overlay and the expected HPBW show.  The publisher stops when the screen closes.
"""

from __future__ import annotations

import argparse
import contextlib
import dataclasses
import os
import shutil
import tempfile
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

from stream.array_model import ArrayModel
from stream.errors import UserError
from stream.monitor import Monitor
from stream.scenarios import SCENARIOS
from stream.synth import SynthConfig, run_publisher
from tui.cli import UsageError
from tui.options import add_pipeline_arguments, add_screen_arguments
from tui.speed_options import SimClock, add_speed_argument, speed_from_args, speed_note

_D = SynthConfig()

DESCRIPTION = """\
Open the live beam screen on a simulated swept array (invented data, no hardware).
A publisher thread sends the simulation over a private ipc:// socket and the screen
subscribes to it like `lobewatch live` would.

Scenarios (all invented): """ + ", ".join(SCENARIOS) + """.
`lobewatch synth --list-scenarios` prints their timelines.

Unless --target-deg is given, the target is set to 0 degrees, where the simulated beam
is aligned, with a 2-degree tolerance, so the drift scenario raises its alarm; the
gain-loss limit is 2 dB (one dead column of four costs 2.5 dB), and the pattern is
kept as the installation reference after the first 6 sweeps, as an installer would
at commissioning; the reflector scenario's direction is watched unless --watch-deg is
given.  A --config file replaces these demo limits.  Array options (--elements,
--spacing-wl, --element-exp, --taper) describe the simulated array and its model.
"""

EPILOG = """\
Safety: with real antennas, stay out of the main beam of energised antennas and follow
local RF exposure limits; local codes and licensed practice come first.
"""

#: Demo pace: the simulator's own defaults (two half-second sweeps a second at 5,000
#: samples/s) put the first beam on screen in about 0.5 s after start-up here, sooner
#: than faster sweeps did (measured: 0.46-0.6 s against 0.86-0.9 s at 4 sweeps/s).
DEMO_SWEEPS_PER_S = _D.sweeps_per_s
DEMO_RATE_SPS = _D.rate_sps

#: How long the publisher may take to bind before the demo gives up, seconds.
READY_TIMEOUT_S = 10.0


def register(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "demo", help="open the beam screen on the built-in simulated array",
        description=DESCRIPTION, epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--scenario", default="steady", choices=tuple(SCENARIOS),
                   help="scripted situation of the simulated array (default steady)")
    p.add_argument("--seed", type=int, default=_D.seed, metavar="N",
                   help=f"random seed of the simulation's noise and fading (default "
                        f"{_D.seed})")
    p.add_argument("--rate-sps", type=float, default=DEMO_RATE_SPS, metavar="SPS",
                   help=f"simulated samples per second (default {DEMO_RATE_SPS:g})")
    p.add_argument("--sweeps-per-s", type=float, default=DEMO_SWEEPS_PER_S, metavar="R",
                   help=f"one-way sweeps per second (default {DEMO_SWEEPS_PER_S:g})")
    p.add_argument("--span-deg", type=float, default=_D.span_deg, metavar="DEG",
                   help=f"sweep half-span, degrees (default {_D.span_deg:g})")
    p.add_argument("--noise-db", type=float, default=_D.noise_db, metavar="DB",
                   help=f"measurement jitter, standard deviation in dB (default "
                        f"{_D.noise_db:g})")
    add_screen_arguments(p)
    add_speed_argument(p)
    p.add_argument("--interval", type=float, default=0.1, metavar="S",
                   help="seconds between readouts of the pipeline (default 0.1)")
    add_pipeline_arguments(p)
    defaults = {a.dest: a.default for a in p._actions if a.dest != "help"}
    p.set_defaults(func=run, _defaults=defaults)



@dataclass
class DemoPublisher:
    """The simulated publisher in a thread, on a private ipc endpoint."""

    config: SynthConfig
    clock: Callable[[], float] = time.time
    tmpdir: str = ""
    endpoint: str = ""
    stop: threading.Event = field(default_factory=threading.Event)
    ready: threading.Event = field(default_factory=threading.Event)
    error: BaseException | None = None
    thread: threading.Thread | None = None

    def start(self) -> str:
        self.tmpdir = tempfile.mkdtemp(prefix="lobewatch-demo-")
        os.chmod(self.tmpdir, 0o700)
        self.endpoint = f"ipc://{self.tmpdir}/beam.sock"

        def main() -> None:
            try:
                run_publisher(self.endpoint, self.config, self.stop, clock=self.clock,
                              on_ready=lambda _addr: self.ready.set())
            except BaseException as exc:  # reported by start()/close()
                self.error = exc
                self.ready.set()

        self.thread = threading.Thread(target=main, name="lobewatch-demo-publisher",
                                       daemon=True)
        self.thread.start()
        if not self.ready.wait(READY_TIMEOUT_S):
            self.close()
            raise UserError("the simulated publisher did not start within "
                            f"{READY_TIMEOUT_S:g} s; try again")
        if self.error is not None:
            err = self.error
            self.close()
            if isinstance(err, UserError):
                raise err
            raise UserError(f"the simulated publisher failed: {err}")
        return self.endpoint

    def close(self) -> None:
        self.stop.set()
        if self.thread is not None:
            self.thread.join(timeout=5.0)
        if self.tmpdir:
            shutil.rmtree(self.tmpdir, ignore_errors=True)


def synth_config(args: argparse.Namespace) -> SynthConfig:
    """The simulated array for these options (array options shared with the model)."""
    kw: dict[str, Any] = {
        "scenario": args.scenario, "seed": args.seed, "rate_sps": args.rate_sps,
        "sweeps_per_s": args.sweeps_per_s, "span_deg": args.span_deg,
        "noise_db": args.noise_db,
    }
    if getattr(args, "elements", None) is not None:
        kw["n_elements"] = args.elements
    defaults = getattr(args, "_defaults", {})
    for dest, name in (("spacing_wl", "spacing_wl"), ("element_exp", "element_exp"),
                       ("taper", "taper")):
        v = getattr(args, dest, None)
        if v is not None and v != defaults.get(dest):
            kw[name] = v
    if SCENARIOS[args.scenario].mode == "mount":
        kw["mode"] = "mount"
    try:
        return SynthConfig(**kw).validate()
    except ValueError as exc:
        raise UsageError(str(exc)) from None


def demo_model(config: SynthConfig) -> ArrayModel:
    """The model the measurement should match.  In sweep mode the received power versus
    steering angle is the isotropic array pattern (the element factor is constant over
    a sweep, see ``stream.synth``); a turning mount sees the element pattern too."""
    exp = config.element_exp if config.mode == "mount" else 0.0
    return ArrayModel(n_elements=config.n_elements, spacing_wl=config.spacing_wl,
                      element_exp=exp, steer_deg=0.0, taper=config.taper)


def build_demo_monitor(args: argparse.Namespace, config: SynthConfig) -> Monitor:
    """The pipeline with the simulated array's model; the target at 0 deg (sweep mode)
    and, for a scenario with a reflector, its direction watched, unless given."""
    from tui.options import build_monitor
    scenario = SCENARIOS[config.scenario]
    if scenario.reflector_deg is not None and not getattr(args, "watch_deg", None):
        args.watch_deg = [float(scenario.reflector_deg)]
    if not getattr(args, "config", None):
        # The scenarios' timelines are written for these limits (see --help).
        if config.mode == "sweep" and getattr(args, "tolerance_deg", None) is None:
            args.tolerance_deg = DEMO_TOLERANCE_DEG
        if getattr(args, "gain_loss_db", None) is None:
            args.gain_loss_db = DEMO_GAIN_LOSS_DB
    monitor = build_monitor(args, model=demo_model(config))
    if monitor.target_deg is None and config.mode == "sweep":
        monitor.target_deg = 0.0  # where the simulated beam is aligned
    if monitor.tolerance_deg is None and config.mode == "sweep":
        monitor.tolerance_deg = getattr(args, "tolerance_deg", None)
    monitor.tick_sinks.append(_CommissioningReference(monitor))
    return monitor


#: Demo limits: a 2-degree pointing tolerance (about 0.08 HPBW of the 4-element beam)
#: and a 2 dB gain-loss limit, so one dead column of four (-2.5 dB) is reported.
DEMO_TOLERANCE_DEG: float = 2.0
DEMO_GAIN_LOSS_DB: float = 2.0
#: Sweeps seen before the demo keeps the pattern as its installation reference.
DEMO_REFERENCE_SWEEPS: int = 6


class _CommissioningReference:
    """Capture the reference once the first few sweeps are in, as an installer would at
    commissioning, so the gain-loss rule has something to compare with."""

    def __init__(self, monitor: Monitor) -> None:
        self.monitor = monitor
        self.done = False

    def __call__(self, tick: Any) -> None:
        m = self.monitor
        if self.done or tick.sweeps < DEMO_REFERENCE_SWEEPS:
            return
        self.done = True  # once: clearing the reference by hand stays cleared
        if m.reference is None:
            m.capture_reference(tick.t)


def _recorder_factory(args: argparse.Namespace, monitor: Monitor,
                      config: SynthConfig) -> Any:
    def new_recording() -> Any:
        try:
            from replay.recorder import Recorder
        except ModuleNotFoundError as exc:
            raise UserError("recording is not available in this build") from exc
        meta: dict[str, Any] = {
            "source": {"kind": "demo", "scenario": config.scenario, "seed": config.seed,
                       "note": "simulated array, invented data"},
            "created_t": time.time(),
        }
        with contextlib.suppress(ImportError, AttributeError):
            from tui.options import settings_record
            meta["settings"] = settings_record(args, monitor)
        from replay.session_writer import new_session_path  # the sessions folder, not the cwd
        path = str(new_session_path(stem="lobewatch-demo"))
        return Recorder(path, meta).attach(monitor)

    return new_recording


def run(args: argparse.Namespace) -> int:
    from stream.live import LiveDriver
    from stream.zmq_source import ZmqSource
    from tui.options import beam_options_from_args, run_app

    if not args.interval > 0:
        raise UsageError(f"--interval must be positive, got {args.interval}")
    config = synth_config(args)
    speed = speed_from_args(args)
    clock = SimClock(speed)  # one clock for publisher, receiver and readout
    monitor = build_demo_monitor(args, config)
    hook = None
    with contextlib.suppress(ImportError):
        from tui.alarm_options import alarm_hook_from_args
        hook = alarm_hook_from_args(args)
    if hook is not None:
        monitor.event_sinks.append(hook)
    publisher = DemoPublisher(config, clock=clock)
    endpoint = publisher.start()
    source = None
    try:
        # 3 wall-clock seconds without samples, whatever the speed
        source = ZmqSource(endpoint, stale_after_s=3.0 * speed, clock=clock)
        driver = LiveDriver(source, monitor, interval_s=args.interval, clock=clock)
        options = dataclasses.replace(beam_options_from_args(
            args, "demo", recorder_factory=_recorder_factory(args, monitor, config)),
            wall_clock=clock, mode_note=speed_note(speed))
        return run_app(monitor, driver, options, title=f"lobewatch demo · {config.scenario}")
    finally:
        if source is not None:
            with contextlib.suppress(Exception):
                source.close()
        publisher.close()
        if hook is not None:
            with contextlib.suppress(Exception):
                hook.close()
