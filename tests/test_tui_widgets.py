"""Widgets alone: the braille canvas, the polar sketch's geometry and markers, the
trace and trend plots, formatting helpers."""

from __future__ import annotations

import numpy as np
import pytest
from textual.app import App, ComposeResult

from stream.beam import BeamMetrics
from stream.tick import SourceStats, Tick
from tui.widgets.braille import BrailleCanvas, segment_points
from tui.widgets.polar import PEAK_GLYPH, TARGET_GLYPH, PolarPlot, polar_geometry
from tui.widgets.readout import fmt, fmt_rate, offset_deg
from tui.widgets.sample import sample_model, sample_tick
from tui.widgets.status import position_bar
from tui.widgets.trace import TracePlot, nice_step
from tui.widgets.trend import TrendPlot


def gaussian_tick(peak_deg: float, *, lo: float, hi: float, step: float = 1.0,
                  target: float | None = None, tol: float | None = None) -> Tick:
    """A single smooth lobe (Gaussian in linear power, 10 deg wide) peaking at
    ``peak_deg``, -30 dBm at the top, with the metrics stated directly."""
    a = np.arange(lo, hi + 1e-9, step)
    d = (a - peak_deg + 180.0) % 360.0 - 180.0
    p = -30.0 + 10.0 * np.log10(np.exp(-0.5 * (d / 6.0) ** 2) + 1e-4)
    m = BeamMetrics(peak_angle_deg=peak_deg, peak_power_db=-30.0, hpbw_deg=14.1,
                    hpbw_left_deg=peak_deg - 7.05, hpbw_right_deg=peak_deg + 7.05)
    return Tick(t=1.0, metrics=m, angle_deg=a, power_db=p, samples=10, sweeps=1,
                rate_sps=10.0, peak_angle_spread_deg=None, sweep_peaks_deg=np.array([]),
                sweep_peak_t=np.array([]), last_sample_t=1.0, source=SourceStats("receiving"),
                target_deg=target, tolerance_deg=tol)


class OneWidget(App):
    def __init__(self, widget) -> None:
        super().__init__()
        self.widget = widget

    def compose(self) -> ComposeResult:
        yield self.widget


def find(lines: list[str], glyph: str) -> list[tuple[int, int]]:
    return [(c, r) for r, line in enumerate(lines) for c, ch in enumerate(line) if ch == glyph]


# -- braille canvas -----------------------------------------------------------------------

def test_braille_dot_bits_follow_the_unicode_layout() -> None:
    """Unicode braille patterns (U+2800 block): dots 1,2,3,7 down the left column have
    bits 0x01, 0x02, 0x04, 0x40; dots 4,5,6,8 down the right 0x08, 0x10, 0x20, 0x80."""
    c = BrailleCanvas(1, 1)
    lay = c.layer("x")
    c.points(lay, np.array([0.0]), np.array([0.0]))
    assert c.to_text() == "\u2801"
    c = BrailleCanvas(1, 1)
    lay = c.layer("x")
    c.points(lay, np.array([1.0, 1.0]), np.array([3.0, 0.0]))
    assert c.to_text() == chr(0x2800 + 0x80 + 0x08)
    c = BrailleCanvas(2, 1)
    lay = c.layer("x")
    c.points(lay, np.full(4, 0.0), np.arange(4.0))
    assert c.to_text() == chr(0x2800 + 0x01 + 0x02 + 0x04 + 0x40) + " "


def test_lines_are_continuous_and_break_at_nan() -> None:
    x, y = segment_points(np.array([0.0, 10.0, np.nan, 20.0, 20.0]),
                          np.array([0.0, 5.0, np.nan, 0.0, 7.0]))
    pts = set(zip(np.rint(x).astype(int).tolist(), np.rint(y).astype(int).tolist(),
                  strict=True))
    assert (0, 0) in pts and (10, 5) in pts and (20, 0) in pts and (20, 7) in pts
    # no dot bridges the NaN gap between x=10 and x=20
    assert not any(10 < px < 20 for px, _ in pts)
    # the first run moves at most one dot per step along its major axis
    run = sorted(px for px, _ in pts if px <= 10)
    assert run == list(range(11))


def test_dashes_leave_gaps_and_text_wins_over_dots() -> None:
    c = BrailleCanvas(20, 1)
    lay = c.layer("x")
    c.line(lay, [0, 39], [0, 0], dash=(2, 2))
    assert lay[0].sum() == 20
    assert c.text(3, 0, "AB", "label")
    chars, style = c.cells()
    assert "".join(chars[0, 3:5]) == "AB" and style[0, 3] == c._style_names.index("label")
    assert not c.text(19, 0, "XY", "label")  # does not fit: nothing written


# -- polar geometry and markers -------------------------------------------------------------

def test_polar_geometry_by_hand() -> None:
    # 40 x 20 cells = 80 x 80 dots.  Half plane: cx = 40, cy = 4*(20-1)-1 = 75,
    # radius = min(40-8, 80-1-40-8, 75-4) = 31.
    g = polar_geometry(40, 20, half=True)
    assert (g.cx, g.cy, g.radius) == (40.0, 75.0, 31.0)
    # Full circle: cy = 2*20 = 40, radius = min(31, 40-4, 80-1-40-4) = 31.
    g = polar_geometry(40, 20, half=False)
    assert (g.cx, g.cy, g.radius) == (40.0, 40.0, 31.0)


@pytest.mark.parametrize(
    "peak, lo, hi, expected",
    [
        # Half plane, 40x20: tip at x = 40 + 31 sin 20deg = 50.603 -> dot 51 -> column
        # 51 // 2 = 25; y = 75 - 31 cos 20deg = 45.870 -> dot 46 -> row 46 // 4 = 11.
        (20.0, -90.0, 90.0, (25, 11)),
        # Half plane, peak -45: x = 40 - 31 sin 45 = 18.080 -> dot 18 -> col 9;
        # y = 75 - 31 cos 45 = 53.080 -> dot 53 -> row 13.
        (-45.0, -90.0, 90.0, (9, 13)),
        # Full circle (data over 360 deg), peak at -90: x = 40 - 31 = 9 -> col 4;
        # y = 40 -> row 10.
        (-90.0, -180.0, 179.0, (4, 10)),
        # Full circle, peak behind (+180): x = 40 -> col 20; y = 40 + 31 = 71 -> row 17.
        (180.0, -180.0, 179.0, (20, 17)),
    ],
)
async def test_polar_peak_marker_lands_in_the_hand_computed_cell(peak, lo, hi,
                                                                  expected) -> None:
    polar = PolarPlot()
    app = OneWidget(polar)
    async with app.run_test(size=(40, 20)) as pilot:
        polar.tick = gaussian_tick(peak, lo=lo, hi=hi)
        await pilot.pause()
        lines = [polar.render_line(y).text for y in range(20)]
        assert find(lines, PEAK_GLYPH) == [expected]
        assert polar.geometry is not None and polar.geometry.half == (hi <= 90.0)
        assert polar.geometry.cell_of(peak, 1.0) == expected


async def test_polar_target_marker_and_wedge_are_drawn() -> None:
    polar = PolarPlot()
    app = OneWidget(polar)
    async with app.run_test(size=(40, 20)) as pilot:
        polar.tick = gaussian_tick(20.0, lo=-90, hi=90, target=-40.0, tol=5.0)
        await pilot.pause()
        lines = [polar.render_line(y).text for y in range(20)]
        # target glyph on the rim at -40: x = 40 - 31 sin 40 = 20.074 -> dot 20 -> col 10;
        # y = 75 - 31 cos 40 = 51.253 -> dot 51 -> row 12.
        assert find(lines, TARGET_GLYPH) == [(10, 12)]
        assert find(lines, PEAK_GLYPH) == [(25, 11)]
        # the target layer (its own style) has dots along the -30 ray
        c = polar.make_canvas()
        _, st = c.cells()
        target_idx = c._style_names.index("polar--target")
        assert int((st == target_idx).sum()) > 10


async def test_polar_scale_toggle_moves_the_half_power_ring() -> None:
    """Linear scale: half power (-3.01 dB) is at half the radius; dB scale with a
    -40 dB floor: at (40-3.01)/40 = 0.925 of the radius."""
    from tui.widgets.polar import radial_fraction
    assert radial_fraction(np.array([-3.0103]), "linear", -40.0)[0] == pytest.approx(0.5, 1e-4)
    assert radial_fraction(np.array([-3.0103]), "db", -40.0)[0] == pytest.approx(0.92474, 1e-4)
    polar = PolarPlot()
    app = OneWidget(polar)
    async with app.run_test(size=(40, 20)) as pilot:
        polar.tick = gaussian_tick(0.0, lo=-90, hi=90)
        await pilot.pause()
        db_text = "\n".join(polar.render_line(y).text for y in range(20))
        polar.scale = "linear"
        await pilot.pause()
        lin_text = "\n".join(polar.render_line(y).text for y in range(20))
        assert db_text != lin_text and "polar · linear" in lin_text and "½" in lin_text


def test_polar_shows_waiting_without_data() -> None:
    polar = PolarPlot()
    c = BrailleCanvas(40, 20)
    polar.draw(c)
    assert "waiting for a beam" in c.to_text()


# -- trace and trend ------------------------------------------------------------------------

def test_trace_draws_peak_legend_and_model() -> None:
    tr = TracePlot(model=sample_model())
    tr.tick = sample_tick()
    c = BrailleCanvas(60, 14)
    tr.draw(c)
    text = c.to_text()
    assert "dBm" in text and "━ live" in text and "┈ model" in text and "╍ ref" in text
    assert PEAK_GLYPH in text
    for name in ("trace--model", "trace--reference", "trace--halfpower", "trace--pattern"):
        assert name in c._style_names
    # the -3 dB line: a dashed horizontal run in its own layer, 3.01 dB under the peak
    chars, style = c.cells()
    hp = c._style_names.index("trace--halfpower")
    rows = np.flatnonzero((style == hp).sum(axis=1) > 10)
    assert rows.size >= 1


def test_trend_band_and_points() -> None:
    tr = TrendPlot()
    tr.tick = sample_tick()
    c = BrailleCanvas(34, 6)
    tr.draw(c)
    text = c.to_text()
    assert "-5 min" in text and "now" in text
    assert "trend--band" in c._style_names and "trend--points" in c._style_names
    # a shorter sweep history (the estimator keeps a bounded number of sweeps) shrinks
    # the window to what is covered, in 30 s steps: 80 s of sweeps -> 90 s shown
    from dataclasses import replace
    t = sample_tick()
    short = replace(t, sweep_peak_t=t.sweep_peak_t[-41:], sweep_peaks_deg=t.sweep_peaks_deg[-41:])
    tr.tick = short
    c = BrailleCanvas(34, 6)
    tr.draw(c)
    assert tr.shown_window_s == 90.0 and "-90 s" in c.to_text()


# -- helpers ------------------------------------------------------------------------------

def test_formatting_helpers() -> None:
    assert fmt(None) == "—" and fmt(float("nan")) == "—"
    assert fmt(12.345, "°") == "12.3°" and fmt(1.0, "°", signed=True) == "+1.0°"
    assert fmt_rate(1_000_000) == "1.00 MS/s" and fmt_rate(2500) == "2.50 kS/s"
    assert offset_deg(179.0, -179.0) == pytest.approx(-2.0)
    assert offset_deg(None, 1.0) is None
    assert nice_step(40, 4) == 10 and nice_step(7, 3) == 5
    assert position_bar(50, 0, 100, 10) == "━━━━━╸────"
    assert position_bar(100, 0, 100, 10) == "━" * 10


# -- screen defects found in use (issue: the screen as a field engineer uses it) ----------

def test_trend_axis_never_reads_minus_zero() -> None:
    from tui.widgets.trend import trend_label
    assert trend_label(-0.0001, 5.0) == "0°" and trend_label(-1e-12, 0.5) == "0°"
    assert trend_label(-2.0, 2.0) == "-2°" and trend_label(0.5, 0.5) == "+0.5°"


def test_trend_labels_the_top_and_bottom_of_a_rescaled_axis() -> None:
    """Peaks drifting from -0.5 to +4.5 deg with a +/-2 deg band: labels at 2-degree
    steps cover the span, the topmost included, and none reads -0."""
    from dataclasses import replace
    t = sample_tick(target_deg=0.0)
    peaks = np.linspace(-0.5, 4.5, t.sweep_peak_t.size)
    tr = TrendPlot()
    tr.tick = replace(t, sweep_peaks_deg=peaks, tolerance_deg=2.0)
    c = BrailleCanvas(34, 9)
    tr.draw(c)
    labels = [line[:5].strip() for line in c.to_text().splitlines()[:-1]]
    labels = [x for x in labels if x]
    assert labels == ["+4°", "+2°", "0°", "-2°"]


@pytest.mark.parametrize("scale", ["db", "linear"])
async def test_half_circle_labels_both_sides_in_either_scale(scale) -> None:
    polar = PolarPlot()
    app = OneWidget(polar)
    async with app.run_test(size=(44, 14)) as pilot:
        polar.tick = gaussian_tick(0.0, lo=-90, hi=90)
        polar.scale = scale
        await pilot.pause()
        text = "\n".join(polar.render_line(y).text for y in range(14))
        assert "-90" in text and "+90" in text


async def test_full_circle_names_180_and_keeps_ring_labels_off_the_trace() -> None:
    polar = PolarPlot()
    app = OneWidget(polar)
    async with app.run_test(size=(60, 24)) as pilot:
        polar.tick = gaussian_tick(0.0, lo=-180, hi=178, step=2.0)
        await pilot.pause()
        lines = [polar.render_line(y).text for y in range(24)]
        assert any("±180" in line for line in lines)
        # the rings are named in a corner legend, not on the axis inside the circle
        assert lines[-1].startswith("○ 10 dB/ring")
        assert not any("-10" in line for line in lines[:-1])


async def test_polar_title_shortens_rather_than_run_into_a_label() -> None:
    polar = PolarPlot()
    app = OneWidget(polar)
    async with app.run_test(size=(44, 7)) as pilot:  # short: the -30 label on row 0
        polar.tick = gaussian_tick(0.0, lo=-90, hi=90)
        polar.scale = "linear"
        await pilot.pause()
        top = polar.render_line(0).text
        assert top.startswith("linear ") and "linear-" not in top


def test_trace_angle_labels_carry_the_degree_unit() -> None:
    tp = TracePlot(model=None)
    tp.tick = gaussian_tick(0.0, lo=-90, hi=90)
    c = BrailleCanvas(60, 12)
    tp.draw(c)
    bottom = c.to_text().splitlines()[-1].split()
    assert bottom and all(label.endswith("°") for label in bottom)


def _two_sided_tick(left_db: float, right_db: float, report_right: bool) -> Tick:
    """A main lobe at 0 deg and first side lobes at -47.4 and +47.4 deg (levels given,
    relative to the peak); the metrics name the side ``report_right`` says."""
    a = np.arange(-90.0, 90.5, 0.5)
    p = -30.0 + np.maximum(-40.0, -0.02 * a ** 2)
    for at, lvl in ((-47.4, left_db), (47.4, right_db)):
        p = np.maximum(p, -30.0 + lvl - 0.05 * (a - at) ** 2)
    at = 47.4 if report_right else -47.4
    m = BeamMetrics(peak_angle_deg=0.0, peak_power_db=-30.0,
                    sll_db=right_db if report_right else left_db, sll_angle_deg=at)
    return Tick(t=1.0, metrics=m, angle_deg=a, power_db=p, samples=10, sweeps=1,
                rate_sps=10.0, peak_angle_spread_deg=None, sweep_peaks_deg=np.array([]),
                sweep_peak_t=np.array([]), last_sample_t=1.0, source=SourceStats("receiving"))


def test_side_lobe_direction_holds_on_a_symmetric_pattern() -> None:
    """Equal side lobes (within the noise) either side: the estimator may name either
    one frame to frame; the readout keeps naming the side it named first."""
    from tui.widgets.sidelobe import SideLobeChoice
    choice = SideLobeChoice()
    shown = [choice.choose(_two_sided_tick(-13.3, -13.2, report_right=k % 2 == 0))[1]
             for k in range(6)]
    assert all(at is not None and at > 0 for at in shown), shown


def test_side_lobe_direction_switches_when_the_other_side_is_clearly_higher() -> None:
    from tui.widgets.sidelobe import SLL_HYSTERESIS_DB, SideLobeChoice
    choice = SideLobeChoice()
    choice.choose(_two_sided_tick(-13.3, -13.3, report_right=True))
    sll, at = choice.choose(_two_sided_tick(-13.3 + 2 * SLL_HYSTERESIS_DB, -13.3,
                                            report_right=False))
    assert at == -47.4 and sll == pytest.approx(-13.3 + 2 * SLL_HYSTERESIS_DB)


def test_key_bar_keeps_the_first_keys_and_the_help_key_when_short() -> None:
    from tui.widgets.keybar import KeyItem, fit_items
    items = [KeyItem(k, d, p) for k, d, p in
             (("p", "pause", 5), ("r", "ref", 6), ("?", "help", 1), ("␣", "play", 0))]
    assert fit_items(items, 80, items[2]) == items
    kept = fit_items(items, len("? help ␣ play") + 1, items[2])
    assert kept == [items[2], items[3]]  # priority kept, shown in binding order


def test_sim_clock_runs_faster_by_its_factor() -> None:
    from tui.speed_options import SimClock
    wall = [100.0]
    clock = SimClock(10.0, base=lambda: wall[0])
    wall[0] = 102.5
    assert clock() == pytest.approx(100.0 + 25.0)


def test_a_sigma_below_the_last_digit_reads_less_than_never_zero() -> None:
    from tui.widgets.readout import fmt_sigma
    assert fmt_sigma(-11.3, 0.004, " dB") == "-11.3±<0.1 dB"
    assert fmt_sigma(26.3, 0.12, "°") == "26.3±0.1°"
    assert fmt_sigma(26.3, None, "°") == "26.3°"


def test_a_narrow_cell_drops_the_sigma_and_keeps_value_and_unit() -> None:
    from tui.widgets.readout import fit_value
    assert fit_value("-12.7±<0.1 dB", 9) == "-12.7 dB"
    assert fit_value("-12.7±0.3 dB", 9) == "-12.7 dB"
    assert fit_value("26.3±0.1°", 9) == "26.3±0.1°"
