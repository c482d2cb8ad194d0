"""Redraw: time to render the beam screen at 120x40 in Textual's headless driver.

The app (:class:`tui.app.LobewatchApp`) runs under ``App.run_test``; each frame pushes a
different invented tick into every widget, lays out if needed, composes every cell of
the screen and serialises the frame to terminal escape codes -- a full repaint, the
worst case (a normal refresh repaints only what changed).  Timed in this thread's CPU
time so other processes on a busy machine do not inflate it; the garbage collector's
pass that the app runs after each frame in a real terminal is timed with the frame.
``bench/bench_redraw.py`` has the per-widget and live measurements.  Target (issue 7):
p99 <= 20 ms.
"""

from __future__ import annotations

import asyncio
import time

import numpy as np

TARGET_P99_MS = 20.0
SIZE = (120, 40)


async def _frames(frames: int, size: tuple[int, int], warmup: int) -> dict[str, list[float]]:
    from stream.estimator import EstimatorConfig, RollingPattern
    from stream.monitor import Monitor
    from tui.app import LobewatchApp
    from tui.widgets.sample import sample_model, sample_tick

    ticks = [sample_tick(steer_deg=float(s), seed=i)
             for i, s in enumerate(np.linspace(4.0, 16.0, 24))]
    mon = Monitor(RollingPattern(EstimatorConfig()), None, sample_model())
    mon.last_tick = ticks[0]
    app = LobewatchApp(mon, None, refresh_hz=0)
    cpu: list[float] = []
    wall: list[float] = []
    async with app.run_test(size=size) as pilot:
        await pilot.pause()
        pace = getattr(app, "pace_gc", None)
        if pace is not None:
            pace()  # what the app does in a real terminal
        between = getattr(app, "collect_between_frames", None)
        screen = app.screen
        console = app.console
        trend = app.beam.w_trend
        for i in range(frames + warmup):
            tick = ticks[(i + 7) % len(ticks)]
            mon.last_tick = tick
            w0 = time.perf_counter()
            t0 = time.thread_time()
            trend.invalidate()  # worst case: every widget redraws every frame
            app.show_tick(tick)
            app.refresh_view()
            if getattr(screen, "_layout_required", False):  # as Textual's own update does
                screen._refresh_layout()
                screen._layout_required = False
            update = screen._compositor.render_full_update()
            update.render_segments(console)
            if between is not None:
                between()  # the collector's pass after the frame: the frame pays for it
            if i >= warmup:
                cpu.append(time.thread_time() - t0)
                wall.append(time.perf_counter() - w0)
            await asyncio.sleep(0)
    return {"cpu": cpu, "wall": wall}


def run_redraw(frames: int = 200, size: tuple[int, int] = SIZE,
               warmup: int = 10) -> dict[str, float]:
    """Median, p99 and max of the full repaint, ms of CPU (and wall-clock median/p99)."""
    r = asyncio.run(_frames(frames, size, warmup))
    cpu = np.asarray(r["cpu"]) * 1e3
    wall = np.asarray(r["wall"]) * 1e3
    return {"median_ms": float(np.median(cpu)), "p99_ms": float(np.percentile(cpu, 99)),
            "max_ms": float(cpu.max()), "wall_median_ms": float(np.median(wall)),
            "wall_p99_ms": float(np.percentile(wall, 99)), "frames": float(frames)}
