"""Polar sketch of the live pattern: where the beam points, at a glance.

Bearing convention: 0 degrees (broadside / the mount's zero) points up, positive
angles turn clockwise (to the right), as on a compass card.  The radius shows
power relative to the peak: on the dB scale the rim is 0 dB and the centre the
scale floor (-40 dB, or -30 dB when the sketch is small), rings every 10 dB; on
the linear scale the radius is relative power, so the half-power ring sits at
half the radius.  When every sample lies within +/-95 degrees the sketch shows
the front half-plane only (twice the radius in the same space); a turning mount's
360-degree data gets the full circle.

Marks (each has its own dot pattern, so they read without colour):
  * live pattern: solid line;           * reference trace: dashed line;
  * peak: solid ray and a diamond at the rim;
  * half-power sector: stippled, edges dashed;
  * target: dash-dot ray, tolerance wedge edges dotted, its rim arc solid, a ring
    glyph at the rim (the peak diamond covers it when both fall in one cell).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from textual.reactive import reactive

from stream.beam import HALF_POWER_DB
from stream.tick import Tick
from tui.widgets.braille import BrailleCanvas, CanvasWidget

#: Columns kept free either side for angle labels, rows above/below for labels.
LABEL_COLS = 4
#: Glyphs of the peak and target markers (shape, not colour, tells them apart).
PEAK_GLYPH = "◆"
TARGET_GLYPH = "◎"
#: Half-plane view when the data stays within this many degrees of 0.
HALF_PLANE_LIMIT_DEG = 95.0


@dataclass(frozen=True, slots=True)
class PolarGeometry:
    """Where the sketch sits on a canvas, in dot coordinates."""

    width: int
    height: int
    half: bool
    cx: float
    cy: float
    radius: float

    def to_dots(self, angle_deg: np.ndarray | float, r_frac: np.ndarray | float
                ) -> tuple[np.ndarray, np.ndarray]:
        """Dot (x, y) of a bearing and a radius fraction (0 centre, 1 rim)."""
        a = np.deg2rad(np.asarray(angle_deg, dtype=np.float64))
        r = np.asarray(r_frac, dtype=np.float64) * self.radius
        return self.cx + r * np.sin(a), self.cy - r * np.cos(a)

    def cell_of(self, angle_deg: float, r_frac: float) -> tuple[int, int]:
        """(column, row) of the cell holding that point."""
        x, y = self.to_dots(angle_deg, r_frac)
        return int(np.rint(x)) // 2, int(np.rint(y)) // 4


def polar_geometry(width: int, height: int, half: bool) -> PolarGeometry:
    """Place the sketch in a ``width`` x ``height`` cell area.

    Centre x at dot ``width`` (the middle of the 2*width dots).  Half-plane: centre y
    on the last dot row of the second-to-last cell row (the last row carries the ring
    labels), radius limited by the label columns and the top label row.  Full circle:
    centre y at dot ``2*height``, one label row kept above and below.
    """
    dw = 2 * width
    cx = float(width)
    rx = min(cx - 2 * LABEL_COLS, dw - 1 - cx - 2 * LABEL_COLS)
    if half:
        cy = float(4 * (height - 1) - 1)
        ry = cy - 4
    else:
        cy = float(2 * height)
        ry = min(cy - 4, 4 * height - 1 - cy - 4)
    return PolarGeometry(width, height, half, cx, cy, float(max(0.0, min(rx, ry))))


def radial_fraction(rel_db: np.ndarray, scale: str, floor_db: float) -> np.ndarray:
    """Radius fraction for power ``rel_db`` relative to the peak.

    dB scale: (rel - floor) / -floor clipped to [0, 1].  Linear: 10**(rel/10), relative
    power (so -3.01 dB, half power, is at one half).
    """
    rel = np.asarray(rel_db, dtype=np.float64)
    if scale == "linear":
        return np.clip(10.0 ** (rel / 10.0), 0.0, 1.0)
    return np.clip((rel - floor_db) / -floor_db, 0.0, 1.0)


def _signed(angle: float) -> str:
    return "0°" if angle == 0 else (f"{angle:+.0f}" if abs(angle) < 180 else "±180")


def break_gaps(angle_deg: np.ndarray, values: np.ndarray, closed: bool
               ) -> tuple[np.ndarray, np.ndarray]:
    """Insert NaN where consecutive angles are far apart (missing bins), so lines
    do not bridge gaps; close the loop for full-circle data."""
    a = np.asarray(angle_deg, dtype=np.float64)
    v = np.asarray(values, dtype=np.float64)
    if a.size < 2:
        return a, v
    step = np.diff(a)
    typical = float(np.median(step)) if step.size else 1.0
    limit = max(3.0 * typical, 2.0)
    if closed and (a[0] + 360.0 - a[-1]) <= limit:
        a = np.append(a, a[0] + 360.0)
        v = np.append(v, v[0])
        step = np.diff(a)
    gaps = np.flatnonzero(step > limit) + 1
    if gaps.size:
        a = np.insert(a, gaps, np.nan)
        v = np.insert(v, gaps, np.nan)
    return a, v


class PolarPlot(CanvasWidget):
    """The polar sketch.  Feed it with :meth:`show` (a :class:`Tick`)."""

    COMPONENT_CLASSES = {
        "polar--grid", "polar--label", "polar--pattern", "polar--reference", "polar--peak",
        "polar--target", "polar--halfpower", "polar--title", "polar--empty",
    }

    DEFAULT_CSS = """
    PolarPlot { height: 1fr; width: 1fr; }
    """

    #: The readout drawn (a Tick holds arrays, so every assignment counts as a change).
    tick: reactive[Tick | None] = reactive(None, always_update=True, repaint=False)
    #: Radius scale: "db" (rings every 10 dB) or "linear" (power relative to the peak).
    scale: reactive[str] = reactive("db", repaint=False)

    def __init__(self, *, name: str | None = None, id: str | None = None,
                 classes: str | None = None) -> None:
        super().__init__(name=name, id=id, classes=classes)
        self.geometry: PolarGeometry | None = None
        # Grid layer + labels and the per-dot polar coordinates depend only on the
        # geometry and scale: computed once per size, reused every frame.
        self._grid_cache: dict[tuple, tuple[np.ndarray, list[tuple]]] = {}
        self._coord_cache: dict[tuple, tuple] = {}

    def watch_tick(self) -> None:
        self.invalidate()

    def watch_scale(self) -> None:
        self.invalidate()

    # -- drawing ---------------------------------------------------------------------
    def draw(self, canvas: BrailleCanvas) -> None:
        tick = self.tick
        half = True
        if tick is not None and tick.angle_deg.size:
            a = tick.angle_deg
            half = bool(np.nanmin(a) >= -HALF_PLANE_LIMIT_DEG
                        and np.nanmax(a) <= HALF_PLANE_LIMIT_DEG)
        geo = polar_geometry(canvas.width, canvas.height, half)
        self.geometry = geo
        floor_db = -40.0 if geo.radius >= 24 else -30.0
        self._draw_grid(canvas, geo, floor_db)
        self._draw_title(canvas)
        if tick is None or tick.angle_deg.size < 2 or tick.metrics.peak_angle_deg is None:
            msg = "waiting for a beam…"
            canvas.text(canvas.width // 2, int(geo.cy // 4) - max(1, int(geo.radius // 8)),
                        msg, "polar--empty", align="center")
            return
        peak_db = tick.metrics.peak_power_db
        if peak_db is None:
            peak_db = float(np.nanmax(tick.power_db))
        m = tick.metrics
        # half-power sector (stipple inside the pattern, between the -3 dB angles)
        if m.hpbw_left_deg is not None and m.hpbw_right_deg is not None:
            self._draw_halfpower(canvas, geo, tick, peak_db, floor_db,
                                 m.hpbw_left_deg, m.hpbw_right_deg)
        if tick.reference is not None and tick.reference.angle_deg.size > 1:
            ref = tick.reference
            ref_peak = ref.metrics.peak_power_db
            if ref_peak is None:
                ref_peak = float(np.nanmax(ref.power_db))
            ra, rp = break_gaps(ref.angle_deg, ref.power_db - ref_peak, not geo.half)
            x, y = geo.to_dots(ra, self._trace_radius(rp, floor_db))
            canvas.line(canvas.layer("polar--reference"), x, y, dash=(3, 3))
        if tick.target_deg is not None:
            self._draw_target(canvas, geo, tick.target_deg, tick.tolerance_deg)
        la, lp = break_gaps(tick.angle_deg, tick.power_db - peak_db, not geo.half)
        x, y = geo.to_dots(la, self._trace_radius(lp, floor_db))
        canvas.line(canvas.layer("polar--pattern"), x, y)
        peak = m.peak_angle_deg
        pl = canvas.layer("polar--peak")
        px, py = geo.to_dots(np.array([0.0, peak]), np.array([0.0, 1.0]))
        canvas.line(pl, px, py)
        col, row = geo.cell_of(peak, 1.0)
        canvas.text(col, row, PEAK_GLYPH, "polar--peak")

    def _draw_title(self, canvas: BrailleCanvas) -> None:
        """Top-left title, in the longest form that leaves a gap before any label."""
        name = "dB" if self.scale == "db" else "linear"
        for title in (f"polar · {name}", name):
            if canvas.text_free(0, 0, len(title) + 1):
                canvas.text(0, 0, title, "polar--title")
                return

    def _trace_radius(self, rel_db: np.ndarray, floor_db: float) -> np.ndarray:
        """Radius fractions of a trace; on the dB scale, points under the floor break
        the line instead of all piling into the centre (noise there is unreadable)."""
        r = radial_fraction(rel_db, self.scale, floor_db)
        if self.scale == "db":
            r = np.where(np.asarray(rel_db) < floor_db, np.nan, r)
        return r

    def _draw_grid(self, canvas: BrailleCanvas, geo: PolarGeometry, floor_db: float) -> None:
        key = (geo, self.scale, floor_db)
        cached = self._grid_cache.get(key)
        if cached is not None:
            canvas.add_layer(cached[0], "polar--grid")
            for col, row, text, style, align in cached[1]:
                canvas.text(col, row, text, style, align=align)
            return
        if len(self._grid_cache) > 8:
            self._grid_cache.clear()
        ops: list[tuple] = []

        def put(col: int, row: int, text: str, style: str, align: str = "left") -> bool:
            # as a left-aligned start column, moved inside the canvas when it overhangs
            n = len(text)
            col = col - n + 1 if align == "right" else (col - n // 2 if align == "center"
                                                         else col)
            col = min(max(col, 0), canvas.width - n)
            row = min(max(row, 0), canvas.height - 1)
            ok = canvas.text_free(col, row, n) and canvas.text(col, row, text, style)
            if ok:
                ops.append((col, row, text, style, "left"))
            return ok

        grid = canvas.layer("polar--grid")
        self._grid_cache[key] = (grid, ops)
        if geo.radius < 4:
            return
        if geo.half:
            theta = np.linspace(-90.0, 90.0, 181)
            spokes = (-90, -60, -30, 0, 30, 60, 90)
        else:
            theta = np.linspace(-180.0, 180.0, 361)
            spokes = (-150, -120, -90, -60, -30, 0, 30, 60, 90, 120, 150, 180)
        if self.scale == "db":
            ring_db = np.arange(0.0, floor_db, -10.0)
            fracs = radial_fraction(ring_db, "db", floor_db)
            labels = ["0" if v == 0 else f"{v:.0f}" for v in ring_db]
        else:
            fracs = np.array([1.0, 0.75, 0.5, 0.25])
            labels = ["1", "¾", "½", "¼"]
        for f in fracs:
            x, y = geo.to_dots(theta, np.full(theta.shape, f))
            canvas.line(grid, x, y, dash=(1, 2) if f < 1.0 else None)
        for s in spokes:
            x, y = geo.to_dots(np.array([s, s]), np.array([0.0, 1.0]))
            canvas.line(grid, x, y, dash=(1, 4))
        # angle labels just outside the rim
        for s in spokes:
            lx, ly = geo.to_dots(float(s), 1.0 + 5.0 / max(geo.radius, 1.0))
            col, row = int(np.rint(lx)) // 2, int(np.rint(ly)) // 4
            text = _signed(float(s))
            if s == 0 or abs(s) == 180:
                put(col, row, text, "polar--label", align="center")
            elif s < 0:
                put(col, row, text, "polar--label", align="right")
            else:
                put(col, row, text, "polar--label")
        unit = "dB" if self.scale == "db" else "lin"
        if not geo.half:
            # full circle: the trace fills the inside, so the rings are named in a
            # legend on the bottom-left corner instead of on the axis
            ring = "10 dB/ring" if self.scale == "db" else "¼/ring"
            put(0, canvas.height - 1, f"○ {ring}", "polar--label")
            return
        # ring labels: below the left half of the horizontal axis
        row = int(geo.cy) // 4 + 1
        free_from = 0
        placed = False
        for f, text in zip(fracs, labels, strict=False):
            x, _ = geo.to_dots(-90.0, float(f))
            col = int(np.rint(x)) // 2
            if col >= free_from and canvas.text_free(col, row, len(text)) \
                    and put(col, row, text, "polar--label"):
                free_from = col + len(text) + 1
                placed = True
        if placed:
            x, _ = geo.to_dots(90.0, 0.5)
            put(int(x) // 2, row, unit, "polar--label", align="center")

    def _draw_halfpower(self, canvas: BrailleCanvas, geo: PolarGeometry, tick: Tick,
                        peak_db: float, floor_db: float, left: float, right: float) -> None:
        """Stipple the dots inside the pattern between the half-power angles; dashed
        edges from the centre to the -3 dB points."""
        layer = canvas.layer("polar--halfpower")
        r = geo.radius
        if r < 3:
            return
        coords = self._coord_cache.get((geo,))
        if coords is None:
            if len(self._coord_cache) > 8:
                self._coord_cache.clear()
            x0, x1 = int(max(0, geo.cx - r)), int(min(canvas.dot_width, geo.cx + r + 1))
            y0, y1 = int(max(0, geo.cy - r)), int(min(canvas.dot_height, geo.cy + r + 1))
            yy, xx = np.mgrid[y0:y1, x0:x1]
            sparse = ((xx % 2) == 0) & ((yy % 2) == 0) & (((xx // 2 + yy // 2) % 2) == 0)
            sy, sx = np.nonzero(sparse)
            dx = sx + x0 - geo.cx
            dy = geo.cy - (sy + y0)
            ang = np.rad2deg(np.arctan2(dx, dy))
            rad = np.hypot(dx, dy) / r
            coords = (sy + y0, sx + x0, ang, rad)
            self._coord_cache[(geo,)] = coords
        py, px, ang, rad = coords
        lo, hi = left, right
        span = (hi - lo) % 360.0
        inside = (((ang - lo) % 360.0) <= span) & (rad > 0.04)
        order = np.argsort(tick.angle_deg)
        pat = radial_fraction(tick.power_db[order] - peak_db, self.scale, floor_db)
        sel = np.flatnonzero(inside)
        limit = np.interp(ang[sel], tick.angle_deg[order], pat,
                          period=None if geo.half else 360.0)
        keep = sel[rad[sel] <= limit]
        layer[py[keep], px[keep]] = True
        edge_frac = radial_fraction(np.array([HALF_POWER_DB]), self.scale, floor_db)[0]
        for a in (left, right):
            ex, ey = geo.to_dots(np.array([a, a]), np.array([0.0, edge_frac]))
            canvas.line(layer, ex, ey, dash=(2, 2))

    def _draw_target(self, canvas: BrailleCanvas, geo: PolarGeometry, target: float,
                     tol: float | None) -> None:
        layer = canvas.layer("polar--target")
        if tol:
            for a in (target - tol, target + tol):
                ex, ey = geo.to_dots(np.array([a, a]), np.array([0.0, 1.0]))
                canvas.line(layer, ex, ey, dash=(1, 2))
            arc = np.linspace(target - tol, target + tol, max(3, int(2 * tol) + 2))
            ax, ay = geo.to_dots(arc, np.ones_like(arc))
            canvas.line(layer, ax, ay)
        tx, ty = geo.to_dots(np.array([target, target]), np.array([0.0, 1.0]))
        canvas.line(layer, tx, ty, dash=(4, 2))
        col, row = geo.cell_of(target, 1.0)
        canvas.text(col, row, TARGET_GLYPH, "polar--target")


def bearing_text(angle_deg: float | None) -> str:
    """Signed bearing with one decimal, or a dash."""
    if angle_deg is None or not math.isfinite(angle_deg):
        return "—"
    return f"{angle_deg:+.1f}°"
