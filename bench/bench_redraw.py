"""Redraw cost of the beam screen (not a test; prints a table).

1. Polar widget alone and the whole screen at 120x40 in Textual's headless driver, on
   invented ticks that change every frame (so no cache hides the work).  "Whole
   screen" = push the tick into every widget + layout + compose every cell of the
   screen + serialise the frame to terminal escape codes (a full repaint, the worst
   case; a normal refresh repaints only what changed).
   "App refresh cycle" = what the running app spends per refresh: the timer pushes
   a new tick, Textual repaints what changed, the garbage collector runs between
   frames; this thread's CPU time over the cycle minus an idle cycle.
2. The same power trace drawn by plotext (the `bench` extra; used nowhere else)
   rebuilt from scratch per frame, next to our braille trace widget at the same size.
3. With ``--live S``: a paced publisher in another process at 1,000,000 samples/s
   (binary batches of 1000; see PACED_PUBLISHER), the real ZeroMQ source, estimator
   and screen at 10 Hz for S seconds: CPU used by this process with and without the
   screen, the redraw rate achieved and key-press-to-screen-change latency.

Usage: python bench/bench_redraw.py [--frames 300] [--live 10]
"""

from __future__ import annotations

import argparse
import asyncio
import os
import socket
import statistics
import subprocess
import sys
import time

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

from stream.estimator import EstimatorConfig, RollingPattern  # noqa: E402
from stream.monitor import Monitor  # noqa: E402
from tui.app import LobewatchApp  # noqa: E402
from tui.widgets.sample import sample_model, sample_tick  # noqa: E402

#: Per-frame timings use this thread's CPU time, so other processes on a busy machine
#: do not inflate them (wall time is reported too).
clock = time.thread_time


def stats_ms(samples: list[float]) -> tuple[float, float, float]:
    a = np.asarray(samples) * 1e3
    return float(np.median(a)), float(np.percentile(a, 99)), float(a.max())


def row(name: str, samples: list[float]) -> str:
    med, p99, mx = stats_ms(samples)
    return f"{name:<44} {med:8.2f} {p99:8.2f} {mx:8.2f}"


async def bench_frames(frames: int, size: tuple[int, int],
                       gc_tuned: bool = True) -> dict[str, list[float]]:
    ticks = [sample_tick(steer_deg=float(s), seed=i)
             for i, s in enumerate(np.linspace(4.0, 16.0, 24))]
    mon = Monitor(RollingPattern(EstimatorConfig()), None, sample_model())
    mon.last_tick = ticks[0]
    app = LobewatchApp(mon, None, refresh_hz=0)
    out: dict[str, list[float]] = {"polar": [], "trace": [], "trend": [], "screen": [],
                                   "plotext": [], "trace_same": []}
    async with app.run_test(size=size) as pilot:
        await pilot.pause()
        if gc_tuned:
            app.pace_gc()  # what the app does in a real terminal
        polar, trace, trend = app.beam.w_polar, app.beam.w_trace, app.beam.w_trend
        screen = app.screen
        console = app.console
        for i in range(frames):
            tick = ticks[i % len(ticks)]
            t0 = clock()
            polar.show(tick)
            t1 = clock()
            trace.show(tick)
            t2 = clock()
            trend.invalidate()  # force: the trend skips frames that would not change it
            trend.show(tick)
            t3 = clock()
            out["polar"].append(t1 - t0)
            out["trace"].append(t2 - t1)
            out["trend"].append(t3 - t2)
            await asyncio.sleep(0)
        out["screen_wall"] = []
        for i in range(frames):
            tick = ticks[(i + 7) % len(ticks)]
            mon.last_tick = tick
            w0 = time.perf_counter()
            t0 = clock()
            trend.invalidate()  # worst case: every widget redraws every frame
            app.show_tick(tick)
            app.refresh_view()
            if screen._layout_required:  # as Textual's own update does
                screen._refresh_layout()
                screen._layout_required = False
            update = screen._compositor.render_full_update()
            update.render_segments(console)
            out["screen"].append(clock() - t0)
            out["screen_wall"].append(time.perf_counter() - w0)
            if gc_tuned:
                t0 = clock()
                app.collect_between_frames()  # the app does this after each repaint
                out.setdefault("gc", []).append(clock() - t0)
            await asyncio.sleep(0)
        # the refresh as the running app does it: push the tick, then let Textual lay
        # out (if needed), repaint the changed regions and write the frame; CPU of this
        # thread over the whole cycle, minus the same wait with nothing to draw
        idle = []
        for _ in range(40):
            t0 = clock()
            await pilot.pause(0.02)
            idle.append(clock() - t0)
        base = statistics.median(idle)
        out["refresh"] = []
        for i in range(frames):
            mon.last_tick = ticks[(i + 3) % len(ticks)]
            trend.invalidate()
            t0 = clock()
            app.refresh_view()
            await pilot.pause(0.02)
            out["refresh"].append(max(0.0, clock() - t0 - base))
        # plotext versus our trace at the trace widget's size
        w, h = trace.size.width, trace.size.height
        model = sample_model()
        import plotext as plt
        fig = plt.figure
        for i in range(max(30, frames // 3)):
            tick = ticks[i % len(ticks)]
            peak = tick.metrics.peak_power_db
            t0 = clock()
            fig.clear()
            fig.plot_size(w, h)
            s = fig.signal(tick.angle_deg, tick.power_db, marker="braille")
            s.lines()
            fig.draw(s)
            mp = np.maximum(model.power_db(tick.angle_deg) + peak, peak - 40.0)
            s2 = fig.signal(tick.angle_deg, mp, marker="braille")
            s2.lines()
            fig.draw(s2)
            ref = tick.reference
            s3 = fig.signal(ref.angle_deg, ref.power_db, marker="braille")
            s3.lines()
            fig.draw(s3)
            a0, a1 = float(tick.angle_deg[0]), float(tick.angle_deg[-1])
            s4 = fig.signal([a0, a1], [peak - 3.0103, peak - 3.0103], marker="braille")
            s4.lines()
            fig.draw(s4)
            fig.build().string()
            out["plotext"].append(clock() - t0)
            t0 = clock()
            trace.show(tick)
            out["trace_same"].append(clock() - t0)
    out["_size"] = [float(w), float(h)]  # type: ignore[list-item]
    return out


#: The paced 1 M samples/s publisher of ``lobewatch bench``'s ``app_cpu_pct``.
from tui.bench.app_cpu import PACED_PUBLISHER  # noqa: E402


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


async def bench_live(seconds: float, size: tuple[int, int]) -> dict[str, float]:
    import psutil

    from stream.live import LiveDriver
    from stream.zmq_source import ZmqSource

    port = free_port()
    endpoint = f"tcp://127.0.0.1:{port}"
    root = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    pub = subprocess.Popen([sys.executable, "-c", PACED_PUBLISHER, endpoint,
                            str(3 * seconds + 30)], cwd=root,
                           stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    proc = psutil.Process()
    res: dict[str, float] = {}
    try:
        await asyncio.sleep(1.0)

        def cpu() -> float:
            c = proc.cpu_times()
            return c.user + c.system

        # (a) pipeline alone
        mon = Monitor(RollingPattern(EstimatorConfig()), None, sample_model(0.0))
        src = ZmqSource(endpoint, stale_after_s=3.0)
        drv = LiveDriver(src, mon, interval_s=0.1)
        stop = asyncio.Event()
        task = asyncio.create_task(drv.run(stop))
        await asyncio.sleep(2.0)
        s0, c0, w0 = mon.estimator.samples, cpu(), time.perf_counter()
        await asyncio.sleep(seconds)
        s1, c1, w1 = mon.estimator.samples, cpu(), time.perf_counter()
        stop.set()
        await task
        res["alone_cpu"] = (c1 - c0) / (w1 - w0)
        res["alone_rate"] = (s1 - s0) / (w1 - w0)
        res["alone_lost"] = float(src.stats(time.time()).lost)

        # (b) pipeline + screen at 10 Hz
        mon = Monitor(RollingPattern(EstimatorConfig()), None, sample_model(0.0))
        src = ZmqSource(endpoint, stale_after_s=3.0)
        drv = LiveDriver(src, mon, interval_s=0.1)
        app = LobewatchApp(mon, drv, mode="live", refresh_hz=10.0)
        async with app.run_test(size=size) as pilot:
            app.pace_gc()  # as in a real terminal; its pacer counts the frames
            frames = app.gc_pacer
            await pilot.pause(2.0)
            s0, c0, w0, k0 = mon.estimator.samples, cpu(), time.perf_counter(), frames.frames
            await asyncio.sleep(seconds)
            s1, c1, w1, k1 = mon.estimator.samples, cpu(), time.perf_counter(), frames.frames
            res["ui_cpu"] = (c1 - c0) / (w1 - w0)
            res["ui_rate"] = (s1 - s0) / (w1 - w0)
            res["refresh_hz"] = (k1 - k0) / (w1 - w0)
            lat = []
            from textual import events
            for _ in range(10):
                before = app.beam.w_polar.scale
                strips_before = app.beam.w_polar._strips
                t0 = time.perf_counter()
                # the key as the terminal driver would deliver it, then poll the screen
                app.post_message(events.Key("d", "d"))
                while app.beam.w_polar.scale == before or app.beam.w_polar._strips is strips_before:
                    await asyncio.sleep(0.001)
                    if time.perf_counter() - t0 > 2.0:
                        break
                lat.append(time.perf_counter() - t0)
                await asyncio.sleep(0.15)
            res["key_ms_median"] = statistics.median(lat) * 1e3
            res["key_ms_max"] = max(lat) * 1e3
            res["ui_lost"] = float(src.stats(time.time()).lost)
            await pilot.press("q")
    finally:
        pub.terminate()
        pub.wait(10)
    return res


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__,
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--frames", type=int, default=300)
    ap.add_argument("--live", type=float, default=0.0, metavar="S",
                    help="also run the 1 MS/s live measurement for S seconds")
    args = ap.parse_args()
    size = (120, 40)
    r = asyncio.run(bench_frames(args.frames, size))
    w, h = (int(v) for v in r.pop("_size"))
    load = os.getloadavg()[0]
    print(f"redraw at {size[0]}x{size[1]} (headless), {args.frames} frames; ms of CPU "
          f"(thread time); load average {load:.1f} on {os.cpu_count()} cores")
    print(f"{'':<44} {'median':>8} {'p99':>8} {'max':>8}")
    print(row("polar widget (rasterise + strips)", r["polar"]))
    print(row("trace widget", r["trace"]))
    print(row("trend widget", r["trend"]))
    print(row("whole screen, full repaint + escape codes", r["screen"]))
    print(row("  same, wall clock", r["screen_wall"]))
    if "gc" in r:
        print(row("  garbage collection after each frame", r["gc"]))
    print(row("app refresh cycle (partial repaint, real loop)", r["refresh"]))
    print(row(f"plotext trace rebuilt per frame ({w}x{h})", r["plotext"]))
    print(row(f"braille trace widget, same data ({w}x{h})", r["trace_same"]))
    ratio = statistics.median(r["plotext"]) / statistics.median(r["trace_same"])
    print(f"plotext / braille trace, median: {ratio:.1f}x")
    if args.live > 0:
        res = asyncio.run(bench_live(args.live, size))
        print(f"\nlive, 1,000,000 samples/s binary batches of 1000, {args.live:g} s each:")
        print(f"  pipeline alone:   {100 * res['alone_cpu']:5.1f} % of one core, "
              f"{res['alone_rate'] / 1e6:.2f} MS/s taken in, lost {res['alone_lost']:.0f}")
        print(f"  pipeline + screen:{100 * res['ui_cpu']:5.1f} % of one core, "
              f"{res['ui_rate'] / 1e6:.2f} MS/s taken in, lost {res['ui_lost']:.0f}")
        print(f"  screen share:     {100 * (res['ui_cpu'] - res['alone_cpu']):5.1f} % of one "
              f"core; refresh {res['refresh_hz']:.1f} Hz (asked 10)")
        print(f"  key press -> polar redrawn: median {res['key_ms_median']:.1f} ms, "
              f"max {res['key_ms_max']:.1f} ms")
    return 0


if __name__ == "__main__":
    sys.exit(main())
