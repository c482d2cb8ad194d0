"""Peak-angle trend: the per-sweep peak bearings of the last minutes, so a slow drift
shows before it alarms.  Time runs left to right and ends at the tick's time; the
target band (target +/- tolerance) is stippled with its centre dashed.
"""

from __future__ import annotations

import numpy as np
from textual.reactive import reactive

from stream.tick import Tick
from tui.widgets.braille import BrailleCanvas, CanvasWidget
from tui.widgets.trace import nice_step

#: Longest time window, seconds; shorter when the sweep history covers less (the
#: estimator keeps a bounded number of sweeps), never under MIN_WINDOW_S.
WINDOW_S = 300.0
MIN_WINDOW_S = 60.0
#: Smallest angle span shown, degrees (so noise is not blown up to full height).
MIN_SPAN_DEG = 4.0


def trend_label(value_deg: float, step_deg: float) -> str:
    """Axis label: signed whole degrees (tenths under a 1-degree step), never "-0"."""
    digits = 0 if step_deg >= 1 else 1
    v = round(value_deg, digits) + 0.0  # -0.0 + 0.0 is +0.0
    return f"{v:+.{digits}f}°" if v else "0°"


class TrendPlot(CanvasWidget):
    """Sweep peak angle versus time.  Feed it with :meth:`show`."""

    COMPONENT_CLASSES = {"trend--grid", "trend--label", "trend--points", "trend--band",
                         "trend--empty"}

    DEFAULT_CSS = """
    TrendPlot { height: 1fr; width: 1fr; }
    """

    #: The readout drawn (a Tick holds arrays, so every assignment counts as a change).
    tick: reactive[Tick | None] = reactive(None, always_update=True, repaint=False)

    def __init__(self, window_s: float = WINDOW_S, *, name: str | None = None,
                 id: str | None = None, classes: str | None = None) -> None:
        super().__init__(name=name, id=id, classes=classes)
        self.window_s = float(window_s)
        self.shown_window_s = float(window_s)
        self._tick_key_drawn: object = None

    def watch_tick(self) -> None:
        """Invalidate only when the picture can change: a new sweep, another target,
        or time moved by one dot column (the trend scrolls slowly; at 10 Hz most ticks
        would redraw the same dots)."""
        key = self._tick_key()
        if key != self._tick_key_drawn:
            self._tick_key_drawn = key
            self.invalidate()

    def _tick_key(self) -> object:
        tick = self.tick
        if tick is None:
            return None
        n = len(tick.sweep_peak_t)
        last_t = float(tick.sweep_peak_t[-1]) if n else None
        column_s = self.shown_window_s / max(1, 2 * (self.size.width - 5))
        return (n, last_t, tick.target_deg, tick.tolerance_deg,
                int(tick.t // column_s) if column_s > 0 else tick.t)

    def draw(self, canvas: BrailleCanvas) -> None:
        tick = self.tick
        w, h = canvas.width, canvas.height
        lab = 5
        has_axis = h >= 4
        plot_rows = h - (1 if has_axis else 0)
        px0, px1 = 2 * lab, 2 * w - 1
        py0, py1 = 0, 4 * plot_rows - 1
        if px1 - px0 < 4 or plot_rows < 1:
            return
        if tick is None:
            if has_axis:
                canvas.text(w - 1, h - 1, "now", "trend--label", align="right")
            canvas.text((w + lab) // 2, plot_rows // 2, "no sweeps yet", "trend--empty",
                        align="center")
            return
        t_end = tick.t
        ts_all = np.asarray(tick.sweep_peak_t, dtype=np.float64)
        window = self.window_s
        if ts_all.size:
            covered = t_end - float(np.nanmin(ts_all))
            window = float(np.clip(np.ceil(covered / 30.0) * 30.0, MIN_WINDOW_S,
                                   self.window_s))
        self.shown_window_s = window
        if has_axis:
            span = f"-{window / 60:.0f} min" if window % 60 == 0 else f"-{window:.0f} s"
            canvas.text(lab, h - 1, span, "trend--label")
            canvas.text(w - 1, h - 1, "now", "trend--label", align="right")
        t0 = t_end - window
        ts = ts_all
        pk = np.asarray(tick.sweep_peaks_deg, dtype=np.float64)
        keep = (ts >= t0) & np.isfinite(pk)
        ts, pk = ts[keep], pk[keep]
        vals = [pk] if pk.size else []
        if tick.target_deg is not None:
            tol = tick.tolerance_deg or 0.0
            vals.append(np.array([tick.target_deg - tol, tick.target_deg + tol]))
        if not vals:
            canvas.text((w + lab) // 2, plot_rows // 2, "no sweeps yet", "trend--empty",
                        align="center")
            return
        allv = np.concatenate(vals)
        lo, hi = float(np.min(allv)), float(np.max(allv))
        if hi - lo < MIN_SPAN_DEG:
            mid = 0.5 * (lo + hi)
            lo, hi = mid - MIN_SPAN_DEG / 2, mid + MIN_SPAN_DEG / 2
        pad = 0.08 * (hi - lo)
        lo, hi = lo - pad, hi + pad

        def xd(t: np.ndarray) -> np.ndarray:
            return px0 + (np.asarray(t) - t0) / window * (px1 - px0)

        def yd(v: np.ndarray) -> np.ndarray:
            return py0 + (hi - np.asarray(v)) / (hi - lo) * (py1 - py0)

        grid = canvas.layer("trend--grid")
        step = nice_step(hi - lo, max(2, min(4, plot_rows // 2)))
        v = np.ceil(lo / step) * step
        free_rows: set[int] = set()
        while v <= hi + 1e-9:
            y = float(yd(np.array(v)))
            canvas.hline(grid, y, px0, px1, dash=(1, 5))
            row = int(np.rint(y)) // 4
            if row not in free_rows and row < plot_rows:
                canvas.text(lab - 1, row, trend_label(v, step), "trend--label",
                            align="right")
                free_rows.add(row)
            v += step
        if tick.target_deg is not None:
            band = canvas.layer("trend--band")
            tol = tick.tolerance_deg or 0.0
            ya, yb = float(yd(np.array(tick.target_deg + tol))), \
                float(yd(np.array(tick.target_deg - tol)))
            yy, xx = np.mgrid[int(max(py0, np.ceil(ya))):int(min(py1, np.floor(yb))) + 1,
                              px0:px1 + 1]
            sel = ((xx % 6) == 0) & ((yy % 4) == 1)
            band[yy[sel], xx[sel]] = True
            yt = float(yd(np.array(tick.target_deg)))
            canvas.hline(band, yt, px0, px1, dash=(3, 3))
        if ts.size:
            pts = canvas.layer("trend--points")
            canvas.line(pts, xd(ts), yd(pk))
