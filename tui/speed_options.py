"""``--speed FACTOR`` for the simulator (``demo``, ``synth``): simulated time runs
FACTOR times faster than the wall clock, so a scenario's event (a dead column at
120 s, the mast passing its tolerance at 180 s) comes into view in seconds.

Every clock of the pipeline (publisher, receiver, readout ticks) is the same
:class:`SimClock`, so sample times, receive times and the readout stay consistent;
the screen says the factor in its status line.
"""

from __future__ import annotations

import argparse
import time
from collections.abc import Callable

from tui.cli import UsageError

#: Largest factor: the simulator publishes FACTOR times its sample rate.
MAX_SPEED = 100.0


class SimClock:
    """Unix seconds that run ``speed`` times as fast as ``base`` from the moment this
    clock is made: t = t0 + speed * (base() - t0)."""

    def __init__(self, speed: float = 1.0, base: Callable[[], float] = time.time) -> None:
        if not speed > 0:
            raise ValueError(f"speed must be positive, got {speed}")
        self.speed = float(speed)
        self.base = base
        self.t0 = base()

    def __call__(self) -> float:
        return self.t0 + self.speed * (self.base() - self.t0)


def add_speed_argument(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--speed", type=float, default=1.0, metavar="FACTOR",
                        help="simulated time runs FACTOR times faster than the wall clock "
                             f"(default 1, at most {MAX_SPEED:g}); the publisher sends "
                             "FACTOR times its samples per wall-clock second")


def speed_from_args(args: argparse.Namespace) -> float:
    speed = getattr(args, "speed", None)
    speed = 1.0 if speed is None else float(speed)
    if not 0 < speed <= MAX_SPEED:
        raise UsageError(f"--speed must be in (0, {MAX_SPEED:g}], got {speed:g}; e.g. "
                         "--speed 10 shows two simulated minutes in 12 seconds")
    return speed


def speed_note(speed: float) -> str | None:
    """What the screen says about the time scale, or None at real time."""
    return None if speed == 1.0 else f"sim time {speed:g}×"
