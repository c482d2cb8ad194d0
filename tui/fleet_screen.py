"""The overview screen: one row per stream, worst first; Enter opens its beam screen.

Columns: stream name, state, peak bearing, offset from target, HPBW, the worst raised
alarm with its X.733 severity, and the sample rate.  Rows are sorted worst first
(alarm severity, then a stream that is not receiving, then the larger pointing
offset), and the cursor follows its stream when the order changes.  With 12 streams
the whole table fits an 80 x 24 terminal; more streams scroll.

The fleet (every station's driver) runs in one worker of this app for as long as the
app is open, so a stream keeps being watched, recorded and exported while the user
looks at another stream's beam screen (pushed with ``run_driver=False``).
"""

from __future__ import annotations

import argparse
import asyncio
import dataclasses
import math
from dataclasses import dataclass
from typing import Any

from rich.text import Text
from textual.app import App, ComposeResult
from textual.binding import Binding
from textual.screen import Screen
from textual.widgets import DataTable, Footer, Static

from replay.fleet import FAILED, Fleet, Station
from stream.alarm_config import SEVERITY_RANK
from tui.beam_screen import BeamOptions, BeamScreen
from tui.exporter import pointing_error_deg

#: How bad a state is for the sort (higher sorts first).
STATE_RANK: dict[str, int] = {FAILED: 5, "ended": 4, "stale": 3, "waiting": 2,
                              "restarted": 1, "receiving": 0}
#: Rich styles per X.733 severity and per state.
SEVERITY_STYLE: dict[str, str] = {"critical": "bold red", "major": "red",
                                  "minor": "yellow", "warning": "yellow",
                                  "indeterminate": "dim"}
STATE_STYLE: dict[str, str] = {FAILED: "bold red", "ended": "dim", "stale": "yellow",
                               "waiting": "dim", "restarted": "yellow", "receiving": "green"}
#: Column keys, labels and widths (sum + padding fits 80 columns).
COLUMNS: tuple[tuple[str, str, int], ...] = (
    ("name", "stream", 12), ("state", "state", 9), ("bearing", "peak°", 6),
    ("offset", "off°", 6), ("hpbw", "HPBW°", 5), ("alarm", "worst alarm", 17),
    ("rate", "rate/s", 6))


@dataclass(frozen=True, slots=True)
class OverviewRow:
    """One stream's line; ``None`` where the reading cannot say."""

    name: str
    state: str
    bearing_deg: float | None
    offset_deg: float | None
    hpbw_deg: float | None
    severity: str | None
    rule: str | None
    rate_sps: float | None

    def sort_key(self) -> tuple:
        sev = SEVERITY_RANK.get(self.severity or "", 0)
        off = abs(self.offset_deg) if self.offset_deg is not None else -1.0
        return (-sev, -STATE_RANK.get(self.state, 0), -off, self.name)


def overview_row(st: Station) -> OverviewRow:
    """The overview line of one station, from its latest reading only."""
    reading = st.reading
    if reading is None:
        return OverviewRow(st.name, st.state, None, None, None, None, None, None)
    tick = reading.tick
    peak = tick.metrics.peak_angle_deg
    bearing = peak
    convention = getattr(st.monitor, "bearing", None)
    if peak is not None and convention is not None:
        bearing = float(convention.bearing_deg(peak))
    offset = None
    if peak is not None and tick.target_deg is not None:
        offset = pointing_error_deg(reading)
    worst = reading.worst_alarm
    return OverviewRow(st.name, st.state, bearing, offset, tick.metrics.hpbw_deg,
                       worst.severity if worst else None, worst.rule if worst else None,
                       tick.rate_sps)


def overview_rows(stations: list[Station]) -> list[OverviewRow]:
    """Every station's line, worst first."""
    return sorted((overview_row(s) for s in stations), key=OverviewRow.sort_key)


def _num(v: float | None, fmt: str = "{:+.1f}") -> Text:
    if v is None or not math.isfinite(v):
        return Text("—", style="dim", justify="right")
    if round(v, 1) == 0:
        v = 0.0  # no "-0.0" for a centred beam
    return Text(fmt.format(v), justify="right")


def _rate(v: float | None) -> Text:
    if v is None:
        return Text("—", style="dim", justify="right")
    text = f"{v / 1000:.1f}k" if v >= 1000 else f"{v:.0f}"
    return Text(text, justify="right")


def row_cells(row: OverviewRow, tolerance_deg: float | None = None) -> list[Text]:
    """The table cells of one row (styled by state and severity)."""
    alarm = (Text(f"{row.severity} {row.rule}", style=SEVERITY_STYLE.get(row.severity, ""))
             if row.severity else Text("—", style="dim"))
    offset = _num(row.offset_deg)
    if row.offset_deg is not None and tolerance_deg is not None \
            and abs(row.offset_deg) > tolerance_deg:
        offset.stylize("red")
    return [Text(row.name), Text(row.state, style=STATE_STYLE.get(row.state, "")),
            _num(row.bearing_deg, "{:.1f}"), offset, _num(row.hpbw_deg, "{:.1f}"), alarm,
            _rate(row.rate_sps)]


class StreamBeamScreen(BeamScreen):
    """A stream's beam screen opened from the overview: Esc (or q) returns."""

    BINDINGS = [Binding("escape", "back", "overview", tooltip="back to the overview"),
                *BeamScreen.BINDINGS]

    def __init__(self, stream: str, *args: Any, **kw: Any) -> None:
        super().__init__(*args, **kw)
        self.stream = stream

    def status_info(self, tick: Any, now: float | None = None) -> Any:
        """The beam screen's status, with the stream's name beside the mode."""
        info = super().status_info(tick, now)
        return dataclasses.replace(info, mode=f"{info.mode} · {self.stream}")

    def action_back(self) -> None:
        self.dismiss(None)


class FleetScreen(Screen[None]):
    """The overview table; a timer at ``refresh_hz`` re-reads every station."""

    BINDINGS = [Binding("enter", "open", "open", tooltip="open the stream's beam screen",
                        show=True, priority=False),
                Binding("q", "quit_app", "quit", tooltip="quit")]
    DEFAULT_CSS = """
    FleetScreen #fleet-summary { height: 1; padding: 0 1; }
    FleetScreen DataTable { height: 1fr; }
    """

    def __init__(self, fleet: Fleet, refresh_hz: float = 2.0,
                 beam_options: BeamOptions | None = None) -> None:
        super().__init__()
        self.fleet = fleet
        self.refresh_hz = float(refresh_hz)
        self.beam_options = beam_options or BeamOptions(run_driver=False)
        self.rows: list[OverviewRow] = []

    def compose(self) -> ComposeResult:
        yield Static(id="fleet-summary")
        table: DataTable[Any] = DataTable(cursor_type="row", zebra_stripes=True,
                                          id="fleet-table")
        for key, label, width in COLUMNS:
            table.add_column(label, key=key, width=width)
        yield table
        yield Footer(compact=True)

    def on_mount(self) -> None:
        self.refresh_rows()
        if self.refresh_hz > 0:
            self.set_interval(1.0 / self.refresh_hz, self.refresh_rows, name="fleet-refresh")
        self.query_one(DataTable).focus()

    def selected(self) -> str | None:
        table = self.query_one(DataTable)
        if not self.rows or table.cursor_row < 0 or table.cursor_row >= len(self.rows):
            return None
        return self.rows[table.cursor_row].name

    def refresh_rows(self) -> None:
        """Rebuild the table from the stations' latest readings, keeping the cursor
        on the same stream."""
        table = self.query_one(DataTable)
        keep = self.selected()
        self.rows = overview_rows(self.fleet.stations)
        table.clear()
        for row in self.rows:
            st = self.fleet.get(row.name)
            tick = st.reading.tick if st.reading is not None else None
            table.add_row(*row_cells(row, tick.tolerance_deg if tick else None), key=row.name)
        if keep is not None:
            names = [r.name for r in self.rows]
            if keep in names:
                table.move_cursor(row=names.index(keep), animate=False)
        up = sum(r.state == "receiving" for r in self.rows)
        alarms = sum(r.severity is not None for r in self.rows)
        self.query_one("#fleet-summary", Static).update(
            f"{len(self.rows)} streams · {up} receiving · {alarms} with alarms · "
            "Enter opens a stream, Esc returns")

    def on_data_table_row_selected(self, event: DataTable.RowSelected) -> None:
        event.stop()
        self.open_stream(str(event.row_key.value))

    def action_open(self) -> None:
        name = self.selected()
        if name is not None:
            self.open_stream(name)

    def open_stream(self, name: str) -> None:
        """Push the beam screen of stream ``name`` (its driver keeps running here)."""
        st = self.fleet.get(name)
        screen = StreamBeamScreen(name, st.monitor, None, self.beam_options)
        self.app.push_screen(screen)

    def action_quit_app(self) -> None:
        self.app.exit(0)


class FleetApp(App[int]):
    """The overview of a fleet; runs the fleet in a worker until the app closes."""

    CSS_PATH = "lobewatch.tcss"
    ENABLE_COMMAND_PALETTE = False
    TITLE = "lobewatch fleet"

    def __init__(self, fleet: Fleet, *, refresh_hz: float = 2.0, run_fleet: bool = True,
                 beam_options: BeamOptions | None = None) -> None:
        super().__init__()
        self.fleet = fleet
        self.stop_event = asyncio.Event()
        self.run_fleet = run_fleet
        self.overview = FleetScreen(fleet, refresh_hz, beam_options)

    def on_mount(self) -> None:
        self.push_screen(self.overview)
        if self.run_fleet:
            self.run_worker(self.fleet.run(self.stop_event), name="fleet", group="fleet",
                            exit_on_error=False)

    def on_unmount(self) -> None:
        self.stop_event.set()


def run_fleet_screen(fleet: Fleet, args: argparse.Namespace) -> int:
    """Open the overview until the user quits; returns the exit status."""
    from tui.options import beam_options_from_args
    base = beam_options_from_args(args, "live")
    refresh_hz = min(base.refresh_hz, 2.0)  # a table of numbers: 2 redraws/s suffice
    options = BeamOptions(mode="live", refresh_hz=base.refresh_hz, bell=base.bell,
                          run_driver=False)
    app = FleetApp(fleet, refresh_hz=refresh_hz, beam_options=options)
    return int(app.run() or 0)
