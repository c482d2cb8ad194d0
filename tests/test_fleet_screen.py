"""The overview screen: worst stream first, 12 streams fit 80 x 24, Enter / Esc.

Stations are fed from the simulator without sockets (invented scenarios); severities
are the ITU-T X.733 perceived severities used by stream.alarms.
"""

from __future__ import annotations

import pytest

from replay.fleet import Fleet, Station
from stream.alarms import AlarmConfig, AlarmEngine
from stream.estimator import EstimatorConfig, RollingPattern
from stream.monitor import Monitor
from stream.synth import SynthConfig, SynthSource
from stream.tick import SourceStats
from tui.fleet_screen import FleetApp, FleetScreen, StreamBeamScreen, overview_rows

T0 = 1_800_000_000.0


def station(name: str, *, target_deg: float | None = None, state: str = "receiving",
            seconds: float = 3.0, seed: int = 1) -> Station:
    cfg = AlarmConfig(target_deg=target_deg, tolerance_deg=2.0 if target_deg is not None
                      else None, raise_hold_s=0.0, drift_min_sweeps=1)
    mon = Monitor(RollingPattern(EstimatorConfig(tau_s=1.0)), AlarmEngine(cfg),
                  target_deg=target_deg, tolerance_deg=cfg.tolerance_deg)
    st = Station(name, mon)
    src = SynthSource(SynthConfig(seed=seed), start_t=T0)
    t = T0
    for b in src.batches(T0, seconds):
        mon.ingest(b)
        if b.rx_t - t >= 0.5:
            t = b.rx_t
            mon.tick(t, SourceStats(state=state))
    return st


def test_rows_sort_worst_first():
    ok = station("ok", target_deg=0.0)
    off = station("far-off", target_deg=20.0, seconds=5.0)  # drift, critical
    near = station("near", target_deg=1.0)  # inside tolerance, larger offset than ok
    stale = station("stale", state="stale")
    silent = Station("silent", Monitor(RollingPattern(EstimatorConfig()), None))
    rows = overview_rows([ok, near, stale, silent, off])
    assert rows[0].name == "far-off" and rows[0].severity == "critical"
    assert rows[0].rule == "drift"
    assert [r.name for r in rows[1:3]] == ["stale", "silent"]  # not receiving
    assert [r.name for r in rows[3:]] == ["near", "ok"]
    assert rows[0].offset_deg == pytest.approx(
        off.reading.tick.metrics.peak_angle_deg - 20.0)
    assert rows[2].bearing_deg is None and rows[2].rate_sps is None


async def test_twelve_streams_fit_80x24_and_enter_opens_the_stream_esc_returns():
    stations = [station(f"link-{i:02d}", target_deg=0.0 if i else 25.0, seed=i,
                        seconds=5.0 if not i else 2.0) for i in range(12)]
    app = FleetApp(Fleet(stations), refresh_hz=0, run_fleet=False)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause()
        screen = app.screen
        assert isinstance(screen, FleetScreen)
        table = screen.query_one("#fleet-table")
        assert table.region.right <= 80 and table.region.bottom <= 23
        # every row is within the visible table (header + 12 rows)
        assert table.virtual_size.height <= table.region.height
        assert table.virtual_size.width <= 80
        assert screen.rows[0].name == "link-00" and screen.rows[0].severity == "critical"
        await pilot.press("down")
        await pilot.press("enter")
        await pilot.pause()
        chosen = screen.rows[1].name
        assert isinstance(app.screen, StreamBeamScreen)
        assert app.screen.monitor is next(s for s in stations if s.name == chosen).monitor
        assert app.screen.status_info(None).mode == f"live · {chosen}"
        await pilot.press("escape")
        await pilot.pause()
        assert app.screen is screen


async def test_more_streams_than_rows_scroll_to_the_cursor():
    stations = [Station(f"s{i:02d}", Monitor(RollingPattern(EstimatorConfig()), None))
                for i in range(30)]
    app = FleetApp(Fleet(stations), refresh_hz=0, run_fleet=False)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause()
        table = app.screen.query_one("#fleet-table")
        assert table.virtual_size.height > table.region.height
        assert table.scroll_offset.y == 0
        await pilot.press(*["down"] * 29)
        await pilot.pause()
        assert table.cursor_row == 29 and table.scroll_offset.y > 0
        assert app.screen.selected() == "s29"


async def test_only_the_stream_on_show_pays_for_the_column_diagnosis():
    from stream.array_model import ArrayModel
    stations = [station(f"s{i}", seed=i) for i in range(3)]
    for st in stations:
        st.monitor.model = ArrayModel(4)
    app = FleetApp(Fleet(stations), refresh_hz=0, run_fleet=False)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause()
        overview = app.screen
        assert not any(st.monitor.diagnose_columns for st in stations)
        await pilot.press("enter")
        await pilot.pause()
        shown = app.screen.monitor
        assert shown.diagnose_columns
        assert [st.monitor.diagnose_columns for st in stations].count(True) == 1
        await pilot.press("escape")
        await pilot.pause()
        assert app.screen is overview and not shown.diagnose_columns
