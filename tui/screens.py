"""Modal screens: the help page (every reading explained, keys, safety cautions)."""

from __future__ import annotations

from collections.abc import Iterable

from rich.table import Table
from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import Static

READINGS = """\
[b]Reading the screen[/b]

[b]PEAK BEARING[/b] (peak_angle_deg) — where the main lobe points, degrees; 0° is
broadside (or the mount's zero), positive is clockwise.  The spread beside it
(peak_angle_spread_deg) is how much the per-sweep peak moved over recent sweeps:
read it as the uncertainty of the bearing.
[b]tgt / off[/b] — the target bearing ± tolerance and the peak's offset
from it: [b]ok[/b] inside the tolerance, [b]OUT[/b] outside.
[b]HPBW[/b] (hpbw_deg) — half-power beamwidth: the angle between the two points
3 dB (half power) below the peak.
[b]−10dB[/b] (bw10_deg) — width between the points 10 dB below the peak.
[b]FNBW[/b] (fnbw_deg) — first-null beamwidth: between the first minima either
side of the main lobe.
[b]SLL[/b] (sll_db) and [b]at[/b] (sll_angle_deg) — highest side lobe relative to the
peak (negative; closer to 0 is worse) and its bearing.
[b]F/B[/b] (front_to_back_db) — front-to-back ratio; needs data behind the beam.
[b]peak[/b] (peak_power_db) — power at the peak: dBm when the source is
calibrated, otherwise dB on the radio's own scale.
[b]model[/b] (expected_hpbw_deg) — the HPBW the array model expects, when array
parameters were given.
[b]rate, sweeps, lost, rej[/b] — samples per second taken in, complete sweeps
seen, messages missing from the sequence numbering, messages rejected by the
decoder.  [b]source[/b]: waiting, receiving, STALE (no samples for a while),
ended.
A dash means the data cannot determine the value; hover over it for the reason.

[b]Polar sketch[/b] — 0° up, clockwise positive.  Radius is power relative to the
peak: dB rings every 10 dB (rim 0 dB), or linear power (half-power ring at ½).
Solid line: live pattern.  ◆ and solid ray: peak.  Stipple with dashed edges:
half-power sector.  Dashed line: captured reference.  ◎, dash-dot ray, dotted
wedge: target and tolerance.

[b]Trace[/b] — power versus bearing: solid live pattern, dashed −3 dB line under
the peak, dotted array model (shifted to the measured peak power), long-dashed
reference, dotted verticals at the target band.

[b]Peak trend[/b] — the per-sweep peak bearing over the last minutes, with the
target band stippled: a slow drift shows here before it alarms.

[b]Alarms[/b] — active alarms first: severity (ITU-T X.733: CRIT critical, MAJR
major, MINR minor, WARN warning, INDT indeterminate), since when, measured value
vs threshold; ✓ marks an acknowledged alarm (acknowledged is not cleared).

[b]Status line[/b] — mode, source state, the pipeline clock (receive time live,
recorded time in replay), DISPLAY PAUSED, ● REC file and size, replay position.
"""

SAFETY = """\
[b]Safety[/b]
• RF exposure: stay out of the main beam of energised antennas and keep the
  distances your local RF exposure limits require; switch the transmitter off
  before working on or in front of the antenna.
• Work at height: only with the training, equipment and permits your site and
  local rules require.
• Spectrum: transmit only on frequencies and at powers you are licensed for.
• Local codes and licensed practice take precedence over anything this tool
  shows or suggests.
"""


def reflow(text: str) -> str:
    """Join hard-wrapped source lines into paragraphs so the screen wraps them to its
    own width; a line opening with bold markup or a bullet starts a new paragraph."""
    out: list[str] = []
    for line in text.splitlines():
        starts_new = not line.strip() or line.startswith(("[b]", "•")) or not out \
            or not out[-1].strip()
        if starts_new:
            out.append(line)
        else:
            out[-1] = out[-1].rstrip() + " " + line.strip()
    return "\n".join(out)


def hanging(text: str) -> Table:
    """The heading and the bullet paragraphs of ``text`` (after :func:`reflow`) as a
    grid, so a bullet's continuation lines wrap under its text, not under the bullet."""
    grid = Table.grid(padding=(0, 1))
    grid.add_column(no_wrap=True)
    grid.add_column()
    for para in reflow(text).splitlines():
        if para.startswith("•"):
            grid.add_row("•", Text.from_markup(para[1:].strip()))
        elif para.strip():
            grid.add_row("", Text.from_markup(para))
    grid.add_row("", "")
    return grid


class HelpScreen(ModalScreen[None]):
    """Explains every reading and key, with the safety cautions."""

    BINDINGS = [
        Binding("escape", "dismiss_help", "close"),
        Binding("question_mark", "dismiss_help", "close", show=False),
        Binding("q", "dismiss_help", "close", show=False),
    ]

    DEFAULT_CSS = """
    HelpScreen { align: center middle; }
    HelpScreen > VerticalScroll {
        width: 90%; max-width: 84; height: 90%;
        border: round $accent; padding: 0 1; background: $surface;
    }
    """

    def __init__(self, keys: Iterable[tuple[str, str]] = ()) -> None:
        super().__init__()
        self._keys = list(keys)

    def compose(self) -> ComposeResult:
        with VerticalScroll(id="help-body"):
            yield Static(hanging(SAFETY), id="help-safety")
            yield Static(reflow(READINGS), id="help-readings")
            if self._keys:
                yield Static("\n[b]Keys[/b]", id="help-keys-title")
                keys = Table.grid(padding=(0, 2))
                keys.add_column(justify="right", style="bold", no_wrap=True)
                keys.add_column()  # wraps under itself, not under the key
                for k, d in self._keys:
                    keys.add_row(k, d)
                yield Static(keys, id="help-keys")
            yield Static("[i]Esc closes this page.  Demo data is invented.[/i]")

    def action_dismiss_help(self) -> None:
        self.dismiss(None)
