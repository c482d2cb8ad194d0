"""The numeric readout: a big peak-bearing figure and the beam metrics.

Every label carries a tooltip naming the metric key used in the JSON output,
session files and reports; a value the data cannot determine shows a dash and its
tooltip gives the reason.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, replace

from rich.segment import Segment
from rich.style import Style
from textual import events
from textual.app import ComposeResult
from textual.containers import Horizontal, Vertical
from textual.reactive import reactive
from textual.strip import Strip
from textual.widget import Widget
from textual.widgets import Digits, Static

from stream.tick import Tick
from tui.widgets.sidelobe import SideLobeChoice

DASH = "—"
#: Characters of the big bearing figure ("+123.4"), padded so its width never changes.
BIG_CHARS = 6


@dataclass(frozen=True, slots=True)
class Field:
    """One label/value pair: ``key`` names the metric (tooltip), ``label`` is shown,
    ``text`` formats the value from a tick (a dash when undetermined)."""

    id: str
    label: str
    key: str
    help: str
    text: Callable[[Tick], str]


def _sigma(tick: Tick, key: str) -> float | None:
    """The metric's one-sigma uncertainty when the pipeline gave one."""
    u = getattr(tick.metrics, "uncertainty", None) or {}
    v = u.get(key)
    return float(v) if isinstance(v, (int, float)) and math.isfinite(v) else None


def fmt_sigma(value: float | None, sigma: float | None, unit: str, digits: int = 1,
              signed: bool = False) -> str:
    """``value±sigma unit`` (one sigma), or :func:`fmt` without a sigma."""
    text = fmt(value, "", digits, signed)
    if text == DASH:
        return DASH
    if sigma is not None:
        # a sigma below the last digit shown reads "<0.1", never "±0.0" (which looks
        # like certainty)
        least = 10.0 ** -digits
        text += f"±{sigma:.{digits}f}" if sigma >= 0.5 * least else f"±<{least:.{digits}f}"
    return text + unit


def fit_value(text: str, width: int) -> str:
    """``text`` cut to ``width``; a ``±sigma`` part goes first so the value stays whole."""
    if len(text) <= width:
        return text
    if "±" in text:
        head, _, rest = text.partition("±")
        unit = rest.lstrip("<0123456789.")
        text = head + unit
    return text[:width]


def _unit_db(tick: Tick) -> str:
    return " dBm" if tick.calibrated else " dB"


#: The label/value pairs of the grid, in reading order (two pairs per row).
FIELDS: tuple[Field, ...] = (
    Field("hpbw", "HPBW", "hpbw_deg", "half-power (-3 dB) beamwidth",
          lambda t: fmt_sigma(t.metrics.hpbw_deg, _sigma(t, "hpbw_deg"), "°")),
    Field("bw10", "−10dB", "bw10_deg", "beamwidth between the -10 dB points",
          lambda t: fmt(t.metrics.bw10_deg, "°")),
    Field("fnbw", "FNBW", "fnbw_deg", "width between the first nulls either side of the peak",
          lambda t: fmt(t.metrics.fnbw_deg, "°")),
    Field("fb", "F/B", "front_to_back_db", "front-to-back ratio (needs data behind the beam)",
          lambda t: fmt(t.metrics.front_to_back_db, " dB")),
    Field("sll", "SLL", "sll_db", "highest side lobe relative to the peak",
          lambda t: fmt_sigma(t.metrics.sll_db, _sigma(t, "sll_db"), " dB")),
    Field("slla", "at", "sll_angle_deg", "bearing of the highest side lobe",
          lambda t: fmt(t.metrics.sll_angle_deg, "°", signed=True)),
    Field("pwr", "peak", "peak_power_db", "power at the peak (dBm if calibrated, else dB)",
          lambda t: fmt(t.metrics.peak_power_db, _unit_db(t))),
    Field("exp", "model", "expected_hpbw_deg", "HPBW the array model expects",
          lambda t: fmt(t.expected_hpbw_deg, "°")),
    Field("rate", "rate", "rate_sps", "samples per second taken in",
          lambda t: fmt_rate(t.rate_sps)),
    Field("sweeps", "sweeps", "sweeps", "complete sweeps seen since the start or reset",
          lambda t: fmt_count(t.sweeps)),
    Field("lost", "lost", "lost", "messages missing from the sequence numbering",
          lambda t: fmt_count(t.source.lost)),
    Field("rej", "rej", "rejected", "messages rejected by the decoder (all reasons)",
          lambda t: fmt_count(t.source.rejected_total)),
)


#: Width of a label cell in the metric grid, columns.
LABEL_W = 7


class MetricGrid(Widget):
    """The label/value pairs, two per row, drawn through the Line API as one widget
    (a widget per cell made the whole-screen repaint several ms dearer).

    The tooltip follows the mouse: over a label or its value it names the metric key
    and says what it means, plus the reason when the value is undetermined.
    """

    COMPONENT_CLASSES = {"metric-grid--label", "metric-grid--value"}

    DEFAULT_CSS = """
    MetricGrid { height: 6; width: 1fr; }
    MetricGrid > .metric-grid--label { color: $text-muted; }
    """

    def __init__(self, fields: tuple[Field, ...] = FIELDS, *, name: str | None = None,
                 id: str | None = None, classes: str | None = None) -> None:
        super().__init__(name=name, id=id, classes=classes)
        self.fields = fields
        self.texts: dict[str, str] = {f.id: DASH for f in fields}
        self.reasons: dict[str, str] = {}
        self._lines: dict[int, Strip] = {}

    def set_value(self, fid: str, text: str, reason: str | None = None) -> None:
        if reason:
            self.reasons[fid] = reason
        else:
            self.reasons.pop(fid, None)
        if self.texts.get(fid) != text:
            self.texts[fid] = text
            self._lines.clear()
            self.refresh()

    def pair_width(self) -> int:
        return max(LABEL_W + 2, (self.size.width - 1) // 2)

    def field_at(self, x: int, y: int) -> Field | None:
        """The field whose label or value is at (x, y) in the widget."""
        pw = self.pair_width()
        col = 0 if x < pw else (1 if x > pw else None)
        if col is None:
            return None
        i = 2 * y + col
        return self.fields[i] if 0 <= y and i < len(self.fields) else None

    def tooltip_for(self, fid: str) -> str:
        f = next(f for f in self.fields if f.id == fid)
        tip = f"{f.key}: {f.help}"
        if fid in self.reasons:
            tip += f" — undetermined: {self.reasons[fid]}"
        return tip

    def on_mouse_move(self, event: events.MouseMove) -> None:
        f = self.field_at(event.x, event.y)
        tip = self.tooltip_for(f.id) if f is not None else None
        if tip != self.tooltip:
            self.tooltip = tip

    def notify_style_update(self) -> None:
        super().notify_style_update()
        self._lines.clear()

    def render_line(self, y: int) -> Strip:
        cached = self._lines.get(y)
        if cached is not None and cached.cell_length == self.size.width:
            return cached
        width = self.size.width
        base = self.rich_style
        lab = base + self.get_component_rich_style("metric-grid--label", partial=True,
                                                    default=Style())
        val = base + self.get_component_rich_style("metric-grid--value", partial=True,
                                                    default=Style())
        pw = self.pair_width()
        segs: list[Segment] = []
        for col in (0, 1):
            i = 2 * y + col
            if i >= len(self.fields):
                break
            f = self.fields[i]
            vw = pw - LABEL_W
            segs.append(Segment(f.label[:LABEL_W - 1].ljust(LABEL_W), lab))
            segs.append(Segment(fit_value(self.texts[f.id], vw).ljust(vw), val))
            if col == 0:
                segs.append(Segment(" ", base))
        strip = Strip(segs).adjust_cell_length(width, base)
        self._lines[y] = strip
        return strip


def fmt(value: float | None, unit: str = "", digits: int = 1, signed: bool = False) -> str:
    """A number with its unit, or a dash when it is undetermined."""
    if value is None or not math.isfinite(value):
        return DASH
    value = round(value, digits) + 0.0  # no "-0.0": -0.0 + 0.0 is +0.0
    s = f"{value:+.{digits}f}" if signed else f"{value:.{digits}f}"
    return f"{s}{unit}"


def fmt_rate(rate_sps: float) -> str:
    """Samples per second with an SI prefix (S/s, kS/s, MS/s)."""
    if not math.isfinite(rate_sps) or rate_sps <= 0:
        return "0 S/s"
    for div, pre in ((1e6, "M"), (1e3, "k")):
        if rate_sps >= div:
            return f"{rate_sps / div:.2f} {pre}S/s"
    return f"{rate_sps:.0f} S/s"


def fmt_count(n: int) -> str:
    if n >= 10_000_000:
        return f"{n / 1e6:.0f}M"
    if n >= 100_000:
        return f"{n / 1e3:.0f}k"
    return str(n)


def offset_deg(peak: float | None, target: float | None) -> float | None:
    """Signed peak - target, wrapped to [-180, 180)."""
    if peak is None or target is None:
        return None
    return (peak - target + 180.0) % 360.0 - 180.0


class Readout(Widget):
    """Big peak bearing, its spread and target offset, and the metric grid."""

    DEFAULT_CSS = """
    Readout { height: auto; }
    Readout #rd-head { height: 1; }
    Readout #rd-big { height: 3; }
    Readout Digits { width: auto; }
    Readout #rd-side { width: 1fr; padding-left: 1; }
    Readout Static { height: 1; text-wrap: nowrap; text-overflow: ellipsis; }
    Readout #rd-why, Readout #rd-extra { color: $text-muted; display: none; }
    """

    #: The readout shown (a Tick holds arrays, so every assignment counts as a change).
    tick: reactive[Tick | None] = reactive(None, always_update=True, repaint=False)

    def __init__(self, *, name: str | None = None, id: str | None = None,
                 classes: str | None = None) -> None:
        super().__init__(name=name, id=id, classes=classes)
        self._last: dict[str, str] = {}
        self._side_lobe = SideLobeChoice()

    def compose(self) -> ComposeResult:
        with Horizontal(id="rd-head"):
            yield Static("PEAK BEARING", id="rd-peak-label", classes="rd-label").with_tooltip(
                "peak_angle_deg: bearing of the main-lobe maximum (0° = broadside/zero, "
                "+ clockwise)")
            yield Static(DASH, id="rd-spread", classes="rd-value").with_tooltip(
                "peak_angle_spread_deg: spread of the peak bearing over recent sweeps")
        with Horizontal(id="rd-big"):
            yield Digits("", id="rd-digits")
            with Vertical(id="rd-side"):
                yield Static("°", id="rd-deg")
                yield Static(DASH, id="rd-target", classes="rd-value").with_tooltip(
                    "target_deg ± tolerance_deg: the bearing the beam should hold")
                yield Static(DASH, id="rd-offset", classes="rd-value").with_tooltip(
                    "offset = peak_angle_deg - target_deg")
        yield MetricGrid(FIELDS, id="rd-grid")
        yield Static("", id="rd-why", classes="rd-value").with_tooltip(
            "why a value shows a dash (press e for every reason)")
        yield Static(DASH, id="rd-source", classes="rd-value").with_tooltip(
            "state: source state (waiting, receiving, stale, ended)")
        yield Static("", id="rd-extra", classes="rd-value").with_tooltip(
            "compass bearing of the peak (when set), the column diagnosis (with a model) and "
            "the radio's clock lag (IQ input)")

    # -- updates -----------------------------------------------------------------------
    def _set(self, wid: str, text: str, tooltip: str | None = None) -> None:
        if self._last.get(wid) == text:
            return
        self._last[wid] = text
        w = self.query_one(f"#{wid}")
        if isinstance(w, Digits):
            w.update(text)  # asks for a layout only when its width changes
        else:
            assert isinstance(w, Static)
            # every value cell has a fixed size: no layout pass for a new value
            w.update(text, layout=False)
        if tooltip is not None:
            w.tooltip = tooltip

    def values(self) -> dict[str, str]:
        """The texts currently shown, by widget id (tests)."""
        return dict(self._last)

    def watch_tick(self, tick: Tick | None) -> None:
        if tick is None or not self.is_mounted:
            return
        sll, sll_at = self._side_lobe.choose(tick)
        if (sll, sll_at) != (tick.metrics.sll_db, tick.metrics.sll_angle_deg):
            tick = replace(tick, metrics=replace(tick.metrics, sll_db=sll,
                                                 sll_angle_deg=sll_at))
        m = tick.metrics
        peak = m.peak_angle_deg
        # fixed width (sign, three digits, one decimal): a bearing that gains or loses a
        # digit must not make the whole screen lay out again
        big = fmt(peak, "", 1, signed=True) if peak is not None else "--"
        self._set("rd-digits", big.rjust(BIG_CHARS))
        spread = tick.peak_angle_spread_deg
        stale = tick.source.state == "stale"
        sigma = _sigma(tick, "peak_angle_deg")
        if stale:
            age = tick.age_s if tick.age_s is not None else (
                tick.t - tick.last_sample_t if tick.last_sample_t is not None else None)
            head = "STALE" + (f" · {age:.0f} s old" if age is not None else "")
        elif tick.provisional:
            head = "provisional · no full sweep yet"
        elif spread is not None:
            head = f"±{spread:.2f}° over sweeps" + (f" σ{sigma:.2f}°" if sigma else "")
        else:
            head = "± — over sweeps"
        self._set("rd-spread", head)
        self.query_one("#rd-digits").set_class(stale, "-stale")
        self.query_one("#rd-digits").set_class(tick.provisional and not stale,
                                               "-provisional")
        if tick.target_deg is not None:
            tol = tick.tolerance_deg
            self._set("rd-target", f"tgt {fmt(tick.target_deg, '°', 1, signed=True)}"
                      + (f"±{tol:.1f}°" if tol else ""))
            off = offset_deg(peak, tick.target_deg)
            if off is None:
                self._set("rd-offset", f"off {DASH}")
            else:
                verdict = ""
                if tol:
                    verdict = " ok" if abs(off) <= tol else " OUT"
                self._set("rd-offset", f"off {fmt(off, '°', 1, signed=True)}{verdict}")
        else:
            self._set("rd-target", "no target")
            self._set("rd-offset", "")
        grid = self.query_one(MetricGrid)
        for f in grid.fields:
            text = f.text(tick)
            self._last[f"rd-v-{f.id}"] = text
            grid.set_value(f.id, text, m.reasons.get(f.key) if text == DASH else None)
        for wid, text in (("rd-why", why_line(tick, grid.fields)),
                          ("rd-extra", extra_line(tick))):
            self._set(wid, text)
            w = self.query_one(f"#{wid}")
            if w.display != bool(text):
                w.display = bool(text)  # a row only when there is something to say
        self._set("rd-source", f"source {tick.source.state}"
                  + (f" · {fmt_count(tick.samples)} samples" if tick.samples else ""))
        src = self.query_one("#rd-source")
        src.set_class(tick.source.state == "stale", "-stale")
        off_w = self.query_one("#rd-offset")
        off_w.set_class(self._last.get("rd-offset", "").endswith("OUT"), "-out")


def undetermined(tick: Tick, fields: tuple[Field, ...] = FIELDS) -> list[tuple[str, str]]:
    """(label, reason) of every grid value the data cannot determine, in grid order."""
    out = []
    for f in fields:
        reason = tick.metrics.reasons.get(f.key)
        if reason and f.text(tick) == DASH:
            out.append((f.label, reason))
    return out


def why_line(tick: Tick, fields: tuple[Field, ...] = FIELDS) -> str:
    """One line under the grid naming the dashes and the first reason (no mouse
    needed; ``e`` lists them all)."""
    missing = undetermined(tick, fields)
    if not missing:
        return ""
    label, reason = missing[0]
    more = f" (+{len(missing) - 1}, e)" if len(missing) > 1 else ""
    return f"— {label}: {reason}{more}"


def extra_line(tick: Tick) -> str:
    """Compass bearing of the peak (when a convention is set), the column diagnosis
    (when a model is set) and the radio's clock lag (IQ input), or nothing."""
    parts = []
    conv, peak = tick.bearing, tick.metrics.peak_angle_deg
    if conv is not None and peak is not None:
        ref = "T" if getattr(conv, "reference", "true") == "true" else "M"
        parts.append(f"brg {conv.bearing_deg(peak):05.1f}°{ref}")
    cols = tick.columns
    if cols is not None:
        parts.append(cols.summary() if hasattr(cols, "summary") else str(cols))
    if tick.radio:  # IQ + positioner: the clock lag between the two, with its sigma
        parts.append(tick.radio.replace("+/-", "±"))
    return " · ".join(parts)
