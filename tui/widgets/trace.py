"""Cartesian trace: received power (dB) versus angle.

Marks, each with its own dot pattern so they read without colour: live pattern
solid; the -3 dB line (half power below the measured peak) dashed; the array model
(when the monitor has one) dotted, its maximum shifted to the measured peak power;
the captured reference trace long-dashed; the target band as dotted verticals.
A legend on the top row spells the patterns out.
"""

from __future__ import annotations

import math

import numpy as np
from textual.reactive import reactive

from stream.array_model import ArrayModel
from stream.beam import HALF_POWER_DB
from stream.tick import Tick
from tui.widgets.braille import BrailleCanvas, CanvasWidget
from tui.widgets.polar import PEAK_GLYPH, break_gaps

#: Columns for the power labels on the left.
Y_LABEL_COLS = 5
#: Power span shown below the top of the scale, dB.
SPAN_DB = 40.0


def nice_step(span: float, target_ticks: int) -> float:
    """A 1/2/5 x 10^n step giving about ``target_ticks`` intervals over ``span``."""
    if span <= 0 or target_ticks <= 0:
        return 1.0
    raw = span / target_ticks
    mag = 10.0 ** math.floor(math.log10(raw))
    for m in (1.0, 2.0, 5.0, 10.0):
        if raw <= m * mag:
            return m * mag
    return 10.0 * mag


class TracePlot(CanvasWidget):
    """Power versus angle.  Feed it with :meth:`show`; set :attr:`model` once."""

    COMPONENT_CLASSES = {
        "trace--grid", "trace--label", "trace--pattern", "trace--reference", "trace--model",
        "trace--halfpower", "trace--peak", "trace--target", "trace--title", "trace--empty",
    }

    DEFAULT_CSS = """
    TracePlot { height: 1fr; width: 1fr; }
    """

    #: The readout drawn (a Tick holds arrays, so every assignment counts as a change).
    tick: reactive[Tick | None] = reactive(None, always_update=True, repaint=False)

    def __init__(self, model: ArrayModel | None = None, *, name: str | None = None,
                 id: str | None = None, classes: str | None = None) -> None:
        super().__init__(name=name, id=id, classes=classes)
        self.model = model
        self._model_cache: tuple[float, float, int, np.ndarray, np.ndarray] | None = None

    def watch_tick(self) -> None:
        self.invalidate()

    def _model_curve(self, lo: float, hi: float, n: int) -> tuple[np.ndarray, np.ndarray]:
        key = (lo, hi, n)
        if self._model_cache is None or self._model_cache[:3] != key:
            a = np.linspace(lo, hi, n)
            self._model_cache = (lo, hi, n, a, self.model.power_db(a))  # type: ignore[union-attr]
        return self._model_cache[3], self._model_cache[4]

    def draw(self, canvas: BrailleCanvas) -> None:
        tick = self.tick
        w, h = canvas.width, canvas.height
        x0_col = Y_LABEL_COLS
        top_row = 1          # legend row above
        bottom_row = h - 2   # angle labels on the last row
        if bottom_row <= top_row or w - x0_col < 6:
            return
        px0, px1 = 2 * x0_col, 2 * w - 1
        py0, py1 = 4 * top_row, 4 * (bottom_row + 1) - 1
        have = tick is not None and tick.angle_deg.size >= 2
        if have:
            a_lo = float(np.floor(np.nanmin(tick.angle_deg) / 10.0) * 10.0)
            a_hi = float(np.ceil(np.nanmax(tick.angle_deg) / 10.0) * 10.0)
            if a_hi - a_lo < 20.0:
                mid = 0.5 * (a_lo + a_hi)
                a_lo, a_hi = mid - 10.0, mid + 10.0
        else:
            a_lo, a_hi = -90.0, 90.0
        peak_db = None
        if have:
            peak_db = tick.metrics.peak_power_db
            if peak_db is None:
                peak_db = float(np.nanmax(tick.power_db))
        p_hi = math.ceil(((peak_db if peak_db is not None else 0.0) + 2.0) / 5.0) * 5.0
        p_lo = p_hi - (SPAN_DB if bottom_row - top_row >= 5 else 30.0)

        def xd(a: np.ndarray) -> np.ndarray:
            return px0 + (np.asarray(a) - a_lo) / (a_hi - a_lo) * (px1 - px0)

        def yd(p: np.ndarray) -> np.ndarray:
            return py0 + (p_hi - np.clip(np.asarray(p), p_lo, p_hi)) / (p_hi - p_lo) \
                * (py1 - py0)

        grid = canvas.layer("trace--grid")
        # horizontal grid + power labels
        rows_avail = bottom_row - top_row + 1
        step = nice_step(p_hi - p_lo, max(1, min(4, rows_avail // 2)))
        v = p_hi
        while v >= p_lo - 1e-9:
            y = float(yd(np.array(v)))
            canvas.hline(grid, y, px0, px1, dash=(1, 5))
            canvas.text(x0_col - 1, int(np.rint(y)) // 4, f"{v:.0f}", "trace--label",
                        align="right")
            v -= step
        # vertical grid + angle labels
        astep = nice_step(a_hi - a_lo, max(2, (w - x0_col) // 8))
        a = math.ceil(a_lo / astep) * astep
        free = 0
        while a <= a_hi + 1e-9:
            x = float(xd(np.array(a)))
            canvas.vline(grid, x, py0, py1, dash=(1, 7))
            text = (f"{a:+.0f}" if a else "0") + "°"  # the axis unit on every label
            col = int(np.rint(x)) // 2 - len(text) // 2
            col = min(max(col, x0_col), w - len(text))
            if col >= free and canvas.text(col, h - 1, text, "trace--label"):
                free = col + len(text) + 1
            a += astep
        unit = "dBm" if (tick is None or tick.calibrated) else "dB"
        canvas.text(0, 0, unit, "trace--title")
        if not have:
            canvas.text((w + x0_col) // 2, (top_row + bottom_row) // 2, "waiting for a beam…",
                        "trace--empty", align="center")
            return
        assert tick is not None and peak_db is not None
        # target band
        if tick.target_deg is not None:
            tl = canvas.layer("trace--target")
            tol = tick.tolerance_deg or 0.0
            for ta in {tick.target_deg - tol, tick.target_deg + tol}:
                x = float(xd(np.array(ta)))
                canvas.vline(tl, x, py0, py1, dash=(1, 2))
        # model overlay
        if self.model is not None:
            ma, mp = self._model_curve(a_lo, a_hi, max(64, (px1 - px0)))
            canvas.line(canvas.layer("trace--model"), xd(ma), yd(mp + peak_db), dash=(1, 2))
        # reference
        if tick.reference is not None and tick.reference.angle_deg.size > 1:
            ra, rp = break_gaps(tick.reference.angle_deg, tick.reference.power_db, False)
            canvas.line(canvas.layer("trace--reference"), xd(ra), yd(rp), dash=(4, 3))
        # -3 dB line
        hp = canvas.layer("trace--halfpower")
        y3 = float(yd(np.array(peak_db + HALF_POWER_DB)))
        canvas.hline(hp, y3, px0, px1, dash=(2, 2))
        la, lp = break_gaps(tick.angle_deg, tick.power_db, False)
        canvas.line(canvas.layer("trace--pattern"), xd(la), yd(lp))
        pk = tick.metrics.peak_angle_deg
        if pk is not None:
            col = int(np.rint(float(xd(np.array(pk))))) // 2
            row = int(np.rint(float(yd(np.array(peak_db))))) // 4
            canvas.text(col, row, PEAK_GLYPH, "trace--peak")
        # legend: line patterns spelt out
        legend = [("━ live", "trace--pattern"), ("╌ −3dB", "trace--halfpower")]
        if tick.reference is not None:
            legend.append(("╍ ref", "trace--reference"))
        if self.model is not None:
            legend.append(("┈ model", "trace--model"))
        if tick.target_deg is not None:
            legend.append(("┊ target", "trace--target"))
        col = len(unit) + 2
        for text, style in legend:
            if canvas.text(col, 0, text, style):
                col += len(text) + 2
