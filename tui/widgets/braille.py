"""A braille dot canvas rasterised with numpy, and a Line-API widget that shows one.

Each terminal cell holds a 2 x 4 grid of braille dots (Unicode block U+2800), so a
W x H cell area is a 2W x 4H dot raster.  Drawing happens on boolean dot layers (one
per kind of mark); turning the layers into rows of text is a handful of vectorised
numpy operations, so a full redraw costs well under a millisecond per thousand cells.
A cell's style is the style of the last-drawn layer that has a dot in it; text
overlays (labels, marker glyphs) replace whole cells.  Marks differ by their dot
pattern (solid, dashed, dotted, stippled) as well as by colour, so the picture still
reads when colour is off (``NO_COLOR``).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from rich.segment import Segment
from rich.style import Style
from textual.strip import Strip
from textual.widget import Widget

#: Bit of each dot in a braille cell, indexed [dot_row][dot_col] (Unicode braille order:
#: dots 1-2-3 down the left column, 4-5-6 down the right, 7 and 8 on the bottom row).
DOT_BITS: np.ndarray = np.array([[0x01, 0x08], [0x02, 0x10], [0x04, 0x20], [0x40, 0x80]],
                                dtype=np.uint8)

#: Character for every 8-bit dot mask; an empty cell is a plain space.
_GLYPHS: np.ndarray = np.array([" "] + [chr(0x2800 + i) for i in range(1, 256)], dtype="<U1")

#: Longest polyline segment rasterised, in dots (guards against absurd coordinates).
_MAX_SEG_DOTS = 4096


def segment_points(x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Dot positions along the polyline through (x, y), about one per dot step.

    A NaN vertex breaks the line.  Vectorised: every segment is split into
    ``ceil(max(|dx|, |dy|))`` steps at once (a DDA line in numpy).
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    if x.size == 0:
        return x, y
    if x.size == 1:
        return x.copy(), y.copy()
    dx = np.diff(x)
    dy = np.diff(y)
    ok = np.isfinite(dx) & np.isfinite(dy)
    steps = np.ceil(np.maximum(np.abs(np.where(ok, dx, 0.0)), np.abs(np.where(ok, dy, 0.0))))
    n = np.where(ok, np.clip(steps, 1, _MAX_SEG_DOTS), 0).astype(np.int64)
    total = int(n.sum())
    if total == 0:
        keep = np.isfinite(x) & np.isfinite(y)
        return x[keep], y[keep]
    seg = np.repeat(np.arange(n.size), n)
    start = np.cumsum(n) - n
    k = np.arange(total) - np.repeat(start, n)
    f = k / np.repeat(n, n)
    px = x[seg] + f * dx[seg]
    py = y[seg] + f * dy[seg]
    # close each run with its last vertex
    last = np.flatnonzero(ok & ~np.append(ok[1:], False)) + 1
    return np.concatenate((px, x[last])), np.concatenate((py, y[last]))


class BrailleCanvas:
    """A ``width`` x ``height`` cell canvas: dot layers plus a text overlay.

    Coordinates are in dots: x from 0 (left) to ``2*width - 1``, y from 0 (top) to
    ``4*height - 1``; floats are rounded to the nearest dot and anything outside is
    clipped.  ``style`` names are resolved to Rich styles by :meth:`to_strips`.
    """

    def __init__(self, width: int, height: int) -> None:
        self.width = max(0, int(width))
        self.height = max(0, int(height))
        self.dot_width = 2 * self.width
        self.dot_height = 4 * self.height
        self._layers: list[tuple[np.ndarray, str]] = []
        self._text = np.full((self.height, self.width), "", dtype="<U1")
        self._text_style = np.full((self.height, self.width), -1, dtype=np.int16)
        self._style_names: list[str] = []

    # -- layers ----------------------------------------------------------------------
    def _style_index(self, style: str) -> int:
        try:
            return self._style_names.index(style)
        except ValueError:
            self._style_names.append(style)
            return len(self._style_names) - 1

    def layer(self, style: str) -> np.ndarray:
        """A new empty dot layer drawn above the earlier ones, in ``style``."""
        dots = np.zeros((self.dot_height, self.dot_width), dtype=bool)
        self._style_index(style)
        self._layers.append((dots, style))
        return dots

    def points(self, dots: np.ndarray, x: np.ndarray, y: np.ndarray) -> None:
        """Set the dots nearest to (x, y); points off the canvas are dropped."""
        xi = np.rint(np.asarray(x, dtype=np.float64))
        yi = np.rint(np.asarray(y, dtype=np.float64))
        keep = (np.isfinite(xi) & np.isfinite(yi) & (xi >= 0) & (xi < self.dot_width)
                & (yi >= 0) & (yi < self.dot_height))
        dots[yi[keep].astype(np.intp), xi[keep].astype(np.intp)] = True

    def line(self, dots: np.ndarray, x: Sequence[float] | np.ndarray,
             y: Sequence[float] | np.ndarray, dash: tuple[int, int] | None = None) -> None:
        """Draw the polyline through (x, y); ``dash=(on, off)`` in dots along the line."""
        px, py = segment_points(np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64))
        if dash is not None and px.size:
            on, off = dash
            keep = (np.arange(px.size) % (on + off)) < on
            px, py = px[keep], py[keep]
        self.points(dots, px, py)

    def hline(self, dots: np.ndarray, y: float, x0: float, x1: float,
              dash: tuple[int, int] | None = None) -> None:
        """Horizontal line at dot row ``y`` from ``x0`` to ``x1`` (fast path)."""
        yi = int(np.rint(y))
        if not 0 <= yi < self.dot_height:
            return
        a = max(0, int(np.rint(min(x0, x1))))
        b = min(self.dot_width - 1, int(np.rint(max(x0, x1))))
        if b < a:
            return
        step = dash[0] + dash[1] if dash else 1
        if dash is None or dash[0] == 1:
            dots[yi, a:b + 1:step] = True
        else:
            idx = np.arange(a, b + 1)
            dots[yi, idx[((idx - a) % step) < dash[0]]] = True

    def vline(self, dots: np.ndarray, x: float, y0: float, y1: float,
              dash: tuple[int, int] | None = None) -> None:
        """Vertical line at dot column ``x`` from ``y0`` to ``y1`` (fast path)."""
        xi = int(np.rint(x))
        if not 0 <= xi < self.dot_width:
            return
        a = max(0, int(np.rint(min(y0, y1))))
        b = min(self.dot_height - 1, int(np.rint(max(y0, y1))))
        if b < a:
            return
        step = dash[0] + dash[1] if dash else 1
        if dash is None or dash[0] == 1:
            dots[a:b + 1:step, xi] = True
        else:
            idx = np.arange(a, b + 1)
            dots[idx[((idx - a) % step) < dash[0]], xi] = True

    def text(self, col: int, row: int, s: str, style: str, *, align: str = "left") -> bool:
        """Write ``s`` starting at cell (col, row) (``align`` "right" ends it there,
        "center" centres it).  Returns False, writing nothing, if it does not fit."""
        n = len(s)
        if align == "right":
            col = col - n + 1
        elif align == "center":
            col = col - n // 2
        if n == 0 or row < 0 or row >= self.height or col < 0 or col + n > self.width:
            return False
        idx = self._style_index(style)
        self._text[row, col:col + n] = list(s)
        self._text_style[row, col:col + n] = idx
        return True

    def text_free(self, col: int, row: int, n: int) -> bool:
        """True when the ``n`` cells from (col, row) hold no text yet."""
        if row < 0 or row >= self.height or col < 0 or col + n > self.width:
            return False
        return not bool(np.any(self._text[row, col:col + n] != ""))

    # -- output ----------------------------------------------------------------------
    def add_layer(self, dots: np.ndarray, style: str) -> None:
        """Add a ready-made dot layer (e.g. a cached grid); it is not copied."""
        if dots.shape != (self.dot_height, self.dot_width):
            raise ValueError(f"layer shape {dots.shape} does not match the canvas")
        self._style_index(style)
        self._layers.append((dots, style))

    def cells(self) -> tuple[np.ndarray, np.ndarray]:
        """The characters (H x W, '<U1') and style indices (-1 = base) of every cell."""
        h, w = self.height, self.width
        if self._layers:
            # which layer drew each dot last (0 = none), then per cell the latest layer
            # present: one reduction whatever the number of layers
            lay = np.zeros((self.dot_height, self.dot_width), dtype=np.int8)
            for k, (dots, _name) in enumerate(self._layers, start=1):
                lay[dots] = k
            layer_style = np.array(
                [-1] + [self._style_names.index(name) for _dots, name in self._layers],
                dtype=np.int16)
            cells4 = lay.reshape(h, 4, w, 2)
            style = layer_style[cells4.max(axis=(1, 3))]
            codes = np.einsum("iajb,ab->ij", (cells4 > 0).astype(np.uint8), DOT_BITS,
                              dtype=np.uint8)
            chars = _GLYPHS[codes]
        else:
            style = np.full((h, w), -1, dtype=np.int16)
            chars = np.full((h, w), " ", dtype="<U1")
        over = self._text != ""
        chars[over] = self._text[over]
        style[over] = self._text_style[over]
        return chars, style

    def to_strips(self, styles: dict[str, Style], base: Style) -> list[Strip]:
        """Rows of segments, one run per change of style."""
        chars, style = self.cells()
        h, w = self.height, self.width
        if h == 0 or w == 0:
            return [Strip([], w) for _ in range(h)]
        resolved = [base + styles.get(name, Style()) for name in self._style_names]
        rows = np.ascontiguousarray(chars).view(f"<U{w}").reshape(h).tolist()
        # A blank cell looks the same in any foreground style: let it join the run on
        # its left, so dotted grids do not split rows into hundreds of segments.
        fill = (chars == " ") & (style == -1)
        pos = np.where(fill, 0, np.arange(w, dtype=np.intp)[None, :])
        np.maximum.accumulate(pos, axis=1, out=pos)
        style = np.take_along_axis(style, pos, axis=1)
        starts = np.ones((h, w), dtype=bool)
        starts[:, 1:] = style[:, 1:] != style[:, :-1]
        run_row, run_col = np.nonzero(starts)
        run_end = np.append(run_col[1:], w)
        run_end[np.append(run_row[1:] != run_row[:-1], True)] = w
        run_style = style[run_row, run_col].tolist()
        rows_segs: list[list[Segment]] = [[] for _ in range(h)]
        for r, a, b, si in zip(run_row.tolist(), run_col.tolist(), run_end.tolist(),
                               run_style, strict=True):
            rows_segs[r].append(Segment(rows[r][a:b], resolved[si] if si >= 0 else base))
        return [Strip(segs, w) for segs in rows_segs]

    def to_text(self) -> str:
        """Plain text of the canvas (tests and debugging)."""
        chars, _ = self.cells()
        return "\n".join("".join(row) for row in chars)


class CanvasWidget(Widget):
    """Base for widgets that paint a :class:`BrailleCanvas` through the Line API.

    Subclasses implement :meth:`draw`.  One cache rule: the strips are rasterised
    lazily by ``render_line`` and reused while :meth:`picture_key` is unchanged (by
    default: the widget's size and a counter :meth:`invalidate` bumps, which every
    ``watch_*`` of a subclass calls).  Component class ``name`` styles are looked up for
    every style name a subclass uses (``--`` prefixed by the CSS name).
    """

    DEFAULT_CSS = """
    CanvasWidget { height: 1fr; width: 1fr; }
    """

    def __init__(self, *, name: str | None = None, id: str | None = None,
                 classes: str | None = None) -> None:
        super().__init__(name=name, id=id, classes=classes)
        self._strips: list[Strip] = []
        self._strips_key: object = None
        self._version = 0
        self._style_cache: dict[str, Style] = {}
        self._base: Style | None = None

    def draw(self, canvas: BrailleCanvas) -> None:  # pragma: no cover - abstract
        raise NotImplementedError

    def picture_key(self) -> object:
        """Everything the picture depends on; a new key means rasterise again."""
        return (self._version, self.size)

    def invalidate(self) -> None:
        """The picture changed: rasterise on the next repaint."""
        self._version += 1
        self.refresh()

    def _styles(self, canvas: BrailleCanvas) -> dict[str, Style]:
        """Rich styles of the component classes in use (cached until the CSS changes)."""
        cache = self._style_cache
        for name in canvas._style_names:
            if name not in cache:
                cache[name] = self.get_component_rich_style(name, partial=True,
                                                            default=Style())
        return cache

    def _base_style(self) -> Style:
        if self._base is None:
            self._base = self.rich_style
        return self._base

    def make_canvas(self) -> BrailleCanvas:
        size = self.size
        canvas = BrailleCanvas(size.width, size.height)
        if size.width >= 4 and size.height >= 2:
            self.draw(canvas)
        return canvas

    def rasterise(self) -> list[Strip]:
        """The strips for the current picture (drawn only when its key changed)."""
        key = self.picture_key()
        if key != self._strips_key or not self._strips:
            canvas = self.make_canvas()
            self._strips = canvas.to_strips(self._styles(canvas), self._base_style())
            self._strips_key = key
        return self._strips

    def show(self, tick: object) -> None:
        """Set ``tick`` and rasterise at once (the redraw benchmark times this)."""
        self.tick = tick  # the subclass's reactive
        self.rasterise()

    def notify_style_update(self) -> None:
        super().notify_style_update()
        self._style_cache = {}
        self._base = None
        self._strips_key = None

    def render_line(self, y: int) -> Strip:
        strips = self.rasterise()
        if 0 <= y < len(strips):
            return strips[y]
        return Strip.blank(self.size.width, self._base_style())
