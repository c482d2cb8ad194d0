"""Plain settings of a beam screen and the rules of thumb its keys use.

Kept apart from :mod:`tui.beam_screen` so the command line (:mod:`tui.options`) and a
fleet can build :class:`BeamOptions` without the screen's widgets.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

MODES: tuple[str, ...] = ("live", "replay", "demo")
#: Seconds without a new tick (live/demo, driver running) before the status line
#: says the pipeline itself has stopped updating.
STALL_S = 3.0
#: Replay speeds the faster/slower keys step through.
SPEEDS: tuple[float, ...] = (0.25, 0.5, 1.0, 2.0, 4.0, 8.0, 16.0, 32.0, 64.0)
#: Tolerance given to a target set from the current peak when none was configured:
#: a quarter of the measured HPBW (a rule of thumb), at least this many degrees.
MIN_TOLERANCE_DEG = 0.5
#: Seconds between reads of the recording's file size for the status line.
REC_SIZE_EVERY_S = 1.0


def default_tolerance_deg(hpbw_deg: float | None) -> float:
    """Rule of thumb: a quarter of the half-power beamwidth, not below 0.5 degrees."""
    if hpbw_deg is None:
        return 2.0
    return round(max(MIN_TOLERANCE_DEG, hpbw_deg / 4.0), 1)


@dataclass(frozen=True)
class BeamOptions:
    """Plain settings of one beam screen (the command line builds them, see
    :func:`tui.options.run_app`).

    Attributes:
        mode: "live", "replay" or "demo" (replay offers the playback keys, not recording).
        refresh_hz: screen redraws per second; 0 = only on demand (tests, benchmarks).
        bell: ring the terminal bell on alarms the notify settings select.
        recorder_factory: opens a new recording (called in a thread worker), or None.
        recorder: a recording already running (``--record``), stopped by the record key.
        clock: monotonic seconds, for stall detection and throttling (tests inject one).
        wall_clock: Unix seconds, for user events before the first tick.
        record_dir: folder for commissioning records (``k``); None: the sessions folder.
        run_driver: run the driver in this screen's worker; False when the caller runs
            it (a fleet screen keeps its streams running while this screen is closed).
        on_frame: called after each repaint (the app's garbage-collector pacing).
        mode_note: said after the mode in the status line (e.g. "sim time 10×").
        exits_app: ``q`` quits the app (the single-stream app); otherwise it stops this
            screen's driver and closes the screen (a fleet's per-stream screen).
    """

    mode: str = "live"
    refresh_hz: float = 10.0
    bell: bool = False
    recorder_factory: Callable[[], Any] | None = None
    recorder: Any | None = None
    clock: Callable[[], float] = time.monotonic
    wall_clock: Callable[[], float] = time.time
    run_driver: bool = True
    record_dir: str | None = None
    on_frame: Callable[[], None] | None = None
    mode_note: str | None = None
    exits_app: bool = False

    def __post_init__(self) -> None:
        if self.mode not in MODES:
            raise ValueError(f"mode must be one of {MODES}, got {self.mode!r}")
        if self.refresh_hz < 0:
            raise ValueError(f"refresh_hz must not be negative, got {self.refresh_hz}")
