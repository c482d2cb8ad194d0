"""Command-line options shared by ``live``, ``replay`` and ``demo``: the array model,
the estimator and the alarm rules, so a recorded session can be re-judged with other
settings.  ``build_monitor`` turns them into the one pipeline."""

from __future__ import annotations

import argparse
import dataclasses
from collections.abc import Callable
from typing import TYPE_CHECKING, Any

from stream.array_model import TAPER_NAMES, ArrayModel
from stream.errors import UserError
from stream.estimator import EstimatorConfig, RollingPattern
from stream.monitor import Monitor
from tui.cli import UsageError

if TYPE_CHECKING:
    from stream.live import Driver
    from tui.beam_screen import BeamOptions


def taper_help(default: str = "none") -> str:
    """The one wording of ``--taper`` in every command's help (with ``metavar="NAME"``)."""
    return (f"amplitude taper across the elements: {', '.join(TAPER_NAMES)} (chebNN = "
            f"Dolph-Chebyshev with NN dB side lobes; default {default})")


def add_pipeline_arguments(parser: argparse.ArgumentParser) -> None:
    """Add model, estimator and alarm options to a sub-command's parser."""
    model = parser.add_argument_group(
        "array model (optional; enables the model overlay and the expected HPBW)")
    model.add_argument("--elements", type=int, metavar="N",
                       help="number of array elements (columns) N; no model when omitted")
    model.add_argument("--spacing-wl", type=float, default=0.5, metavar="D",
                       help="element spacing d in wavelengths (default 0.5)")
    model.add_argument("--element-exp", type=float, default=0.0, metavar="Q",
                       help="element power pattern cos^Q(theta); 0 = isotropic (default 0)")
    model.add_argument("--steer-deg", type=float, default=0.0, metavar="A",
                       help="steering angle from broadside, degrees (default 0)")
    model.add_argument("--taper", default="none", choices=TAPER_NAMES, metavar="NAME",
                       help=taper_help("none"))

    est = parser.add_argument_group("estimator")
    est.add_argument("--bin-deg", type=float, default=1.0, metavar="DEG",
                     help="angle bin width, degrees, 0.1 to 10 (default 1.0)")
    est.add_argument("--averaging", choices=("ema", "sweeps"), default="ema",
                     help="per-bin averaging: exponential in time, or mean of the last K "
                          "complete sweeps (default ema)")
    est.add_argument("--tau-s", type=float, default=3.0, metavar="S",
                     help="time constant of the exponential average, seconds (default 3)")
    est.add_argument("--sweeps-k", type=int, default=3, metavar="K",
                     help="sweeps averaged with --averaging sweeps (default 3)")
    est.add_argument("--bin-max-age-s", type=float, default=30.0, metavar="S",
                     help="a bin not refreshed for this long is left out, seconds (default 30)")
    try:
        from tui.alarm_options import add_alarm_arguments
    except ModuleNotFoundError as exc:  # alarms not built yet
        if exc.name != "tui.alarm_options":
            raise
    else:
        add_alarm_arguments(parser)


def add_screen_arguments(parser: argparse.ArgumentParser) -> None:
    """Options of the beam screen (ignored with --headless)."""
    parser.add_argument("--refresh-hz", type=float, default=10.0, metavar="HZ",
                        help="screen redraws per second (default 10); the pipeline's "
                             "readouts keep their own --interval")


def model_from_args(args: argparse.Namespace) -> ArrayModel | None:
    n = getattr(args, "elements", None)
    if n is None:
        return None
    if n < 1:
        raise UsageError(f"--elements must be at least 1, got {n}")
    if not args.spacing_wl > 0:
        raise UsageError(f"--spacing-wl must be positive, got {args.spacing_wl}")
    return ArrayModel(n_elements=n, spacing_wl=args.spacing_wl, element_exp=args.element_exp,
                      steer_deg=args.steer_deg, taper=args.taper)


def estimator_config_from_args(args: argparse.Namespace) -> EstimatorConfig:
    try:
        return EstimatorConfig(bin_deg=args.bin_deg, averaging=args.averaging, tau_s=args.tau_s,
                               sweeps_k=args.sweeps_k, stale_after_s=args.bin_max_age_s)
    except ValueError as exc:
        raise UsageError(str(exc)) from None


def build_monitor(args: argparse.Namespace, model: ArrayModel | None = None) -> Monitor:
    """The pipeline for these options; ``model`` overrides the model options (demo)."""
    model = model if model is not None else model_from_args(args)
    alarms = None
    target = tolerance = None
    try:
        from stream.alarms import AlarmEngine
        from tui.alarm_options import alarm_config_from_args
    except ModuleNotFoundError as exc:
        if exc.name not in ("stream.alarms", "tui.alarm_options"):
            raise
    else:
        config = alarm_config_from_args(args)
        alarms = AlarmEngine(config)
        target = getattr(config, "target_deg", None)
        tolerance = getattr(config, "tolerance_deg", None)
    return Monitor(RollingPattern(estimator_config_from_args(args)), alarms, model,
                   target_deg=target, tolerance_deg=tolerance)


def settings_record(args: argparse.Namespace, monitor: Monitor) -> dict:
    """The settings in force, for a session file's metadata."""
    est = monitor.estimator.config
    rec: dict = {
        "model": monitor.model.to_dict() if monitor.model is not None else None,
        "estimator": {k: getattr(est, k) for k in est.__dataclass_fields__},
    }
    if monitor.alarms is not None:
        cfg = monitor.alarms.config
        rec["alarms"] = {k: getattr(cfg, k) for k in getattr(cfg, "__dataclass_fields__", {})}
    return rec


def beam_options_from_args(args: argparse.Namespace, mode: str, *,
                           recorder_factory: Callable[[], Any] | None = None,
                           recorder: Any | None = None) -> BeamOptions:
    """The beam screen's plain settings from the screen and notify options."""
    from tui.beam_screen import BeamOptions
    refresh_hz = float(getattr(args, "refresh_hz", None) or 10.0)
    if not refresh_hz > 0:
        raise UsageError(f"--refresh-hz must be positive, got {refresh_hz}")
    from tui.alarm_options import notify_settings_from_args
    bell = bool(notify_settings_from_args(args).bell)
    return BeamOptions(mode=mode, refresh_hz=refresh_hz, bell=bell,
                       recorder_factory=recorder_factory, recorder=recorder)


def run_app(monitor: Monitor, driver: Driver | None, options: BeamOptions,
            title: str | None = None) -> int:
    """Open the beam screen until the user quits; returns the exit status.  A driver
    that failed is reported as a :class:`~stream.errors.UserError` after the screen
    closed (it was shown on screen while it was open)."""
    from tui.app import LobewatchApp
    app = LobewatchApp(monitor, driver, title=title, **_fields(options))
    result = app.run()
    if app.driver_error:
        raise UserError(app.driver_error)
    return int(result or 0)


def _fields(options: BeamOptions) -> dict[str, Any]:
    return {f.name: getattr(options, f.name) for f in dataclasses.fields(options)
            if f.name not in ("on_frame", "exits_app")}
