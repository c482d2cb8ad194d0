"""``lobewatch commission``: verdict, JSON, exit codes and the written record.

Outside references: the PNG files are opened with Pillow (a general-purpose image
library); the 1/N narrowing of the HPBW and the 11-13 dB side lobes of a 4-column
half-wave array are facts of the trade (common practice, no source).  The example
sweeps and sessions are invented.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from replay.record import write_record_from_tick
from stream.array_model import ArrayModel
from stream.batch import SampleBatch
from stream.estimator import EstimatorConfig, RollingPattern
from stream.monitor import Monitor
from tui.bench.commission import make_session
from tui.cli import main

ROOT = Path(__file__).resolve().parent.parent
EX = ROOT / "examples"
SWEEP4 = str(EX / "sweep_4col_5deg.csv")
MASK = str(EX / "mask_4col_invented.csv")


def _json_lines(capsys) -> list[dict]:
    return [json.loads(line) for line in capsys.readouterr().out.splitlines() if line]


def _not_blank(path: Path, size: tuple[int, int]) -> None:
    with Image.open(path) as im:
        assert im.size == size
        px = np.asarray(im.convert("L"), dtype=float)
    assert px.std() > 10.0                  # not one flat colour
    assert np.mean(px < 128) > 0.005        # some dark ink: lines and text were drawn


def test_done_means_command_writes_a_readable_record(tmp_path, capsys):
    out = tmp_path / "rec"
    rc = main(["commission", SWEEP4, "--elements", "4", "--target-deg", "0",
               "--tolerance-deg", "2", "--mask", MASK, "--out", str(out),
               "--site", "Invented Hill", "--operator", "A. Example"])
    text = capsys.readouterr().out
    assert rc == 0
    assert "PASS" in text and "pointing" in text and "mask" in text
    for name in ("record.md", "record.html", "record.json", "polar.png", "cartesian.png"):
        assert (out / name).is_file(), name
    _not_blank(out / "cartesian.png", (900, 560))   # CARTESIAN_IN x DPI
    _not_blank(out / "polar.png", (640, 640))       # POLAR_IN x DPI
    md = (out / "record.md").read_text()
    assert "| criterion | measured | limit | margin | result | note |" in md
    assert "Verdict: PASS" in md and "Invented Hill" in md
    # every headline number with its 1-sigma, and the 5-degree step's caveat beside it
    peak_row = next(ln for ln in md.splitlines() if ln.startswith("| peak direction"))
    cells = [c.strip() for c in peak_row.strip("|").split("|")]
    assert float(cells[2]) > 0 and "sampling step" in cells[3]
    assert "### Sign-off" in md and "accepted by (customer)" in md
    html = (out / "record.html").read_text()
    assert "<th>criterion</th><th>measured</th><th>limit</th><th>margin</th>" in html
    assert "PASS" in html
    # self-contained: no external reference of any kind
    assert not re.search(r"""(?:src|href)\s*=\s*["'](?!data:)""", html)
    assert "http://" not in html and "https://" not in html
    assert "<link" not in html and "<script" not in html and "@import" not in html
    rec = json.loads((out / "record.json").read_text())
    import hashlib
    assert rec["inputs"][0]["sha256"] == hashlib.sha256(Path(SWEEP4).read_bytes()).hexdigest()
    assert rec["meta"]["operator"] == "A. Example"
    assert rec["lobewatch_version"] and rec["date"]


def test_json_keys_and_values(capsys):
    rc = main(["commission", SWEEP4, "--elements", "4", "--target-deg", "0",
               "--tolerance-deg", "2", "--json"])
    (d,) = _json_lines(capsys)
    assert rc == 0 and d["verdict"] == "pass"
    assert {"name", "measured", "limit", "margin", "result"} <= set(d["criteria"][0])
    assert set(d["fit"]) >= {"steer_deg", "gain_db", "element_exp", "residual_rms_db",
                             "elements_effective"}
    assert len(d["columns"]) == 4 and d["suspects"] == []
    # the invented example was made with cos^1.2 elements (examples/README.md)
    assert d["fit"]["element_exp"] == pytest.approx(1.2, abs=0.25)


def test_fail_and_incomplete_exit_3(capsys):
    assert main(["commission", SWEEP4, "--target-deg", "10", "--tolerance-deg", "2",
                 "--json"]) == 3
    assert _json_lines(capsys)[0]["verdict"] == "fail"
    assert main(["commission", SWEEP4, "--min-fb-db", "15", "--json"]) == 3
    (d,) = _json_lines(capsys)
    assert d["verdict"] == "incomplete"
    assert d["criteria"][0]["result"] == "undetermined"
    assert "back direction" in d["criteria"][0]["reason"]


def test_spec_file_and_options_override(capsys):
    spec = str(EX / "spec_4col_invented.toml")
    assert main(["commission", SWEEP4, "--spec", spec, "--json"]) == 0
    (d,) = _json_lines(capsys)
    assert [c["name"] for c in d["criteria"]] == ["pointing", "hpbw", "sll", "mask"]
    assert main(["commission", SWEEP4, "--spec", spec, "--max-sll-db", "-20", "--json"]) == 3
    (d,) = _json_lines(capsys)
    assert [c["result"] for c in d["criteria"] if c["name"] == "sll"] == ["fail"]


def test_bad_input_exits_1_with_one_line(tmp_path, capsys):
    assert main(["commission", str(tmp_path / "missing.csv")]) == 1
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "missing.csv" in err
    bad = tmp_path / "bad_mask.csv"
    bad.write_text("offset_deg,limit_db\n10,0\n20,-3\n")
    assert main(["commission", SWEEP4, "--mask", str(bad)]) == 1
    assert "both sides" in capsys.readouterr().err


def test_several_files_side_by_side_with_difference_against_the_first(capsys):
    files = [str(EX / f"sweep_{n}col_5deg.csv") for n in (1, 2, 4)]
    main(["commission", *files])
    text = capsys.readouterr().out
    assert text.count("- first") == 2
    assert "half-power beamwidth" in text


def test_common_practice_hpbw_narrows_as_1_over_n_and_4_column_side_lobes(capsys):
    # Common practice (no source): with 1, 2 and 4 columns of a half-wave-spaced array
    # active the HPBW narrows roughly in proportion to 1/N, and the 4-column pattern
    # shows side lobes about 11-13 dB down.  Checked on the invented example sweeps.
    files = [str(EX / f"sweep_{n}col_5deg.csv") for n in (1, 2, 4)]
    main(["commission", *files, "--elements", "4", "--json"])
    d1, d2, d4 = _json_lines(capsys)
    h1, h2, h4 = (d["metrics"]["hpbw_deg"] for d in (d1, d2, d4))
    assert h1 / h2 == pytest.approx(2.0, rel=0.3)
    assert h2 / h4 == pytest.approx(2.0, rel=0.3)
    assert 11.0 <= -d4["metrics"]["sll_db"] <= 13.0
    # and the diagnosis reads them as about 1, 2 and 4 active columns of 4
    effective = [d["fit"]["elements_effective"] for d in (d1, d2, d4)]
    assert effective == pytest.approx([1.0, 2.0, 4.0], abs=0.3)


def test_reference_record_adds_differences(tmp_path, capsys):
    base = tmp_path / "base"
    main(["commission", SWEEP4, "--elements", "4", "--out", str(base), "--json"])
    capsys.readouterr()
    other = str(EX / "sweep_2col_5deg.csv")
    main(["commission", other, "--reference", str(base / "record.json"), "--json",
          "--out", str(tmp_path / "next")])
    (d,) = _json_lines(capsys)
    diff = d["reference"]["differences"]
    assert diff["hpbw_deg"] == pytest.approx(53.14 - 22.73, abs=0.1)
    _not_blank(tmp_path / "next" / "cartesian.png", (900, 560))
    assert "meas. - ref." in (tmp_path / "next" / "record.md").read_text()


def test_session_input_gives_timeline_events_and_its_metadata(tmp_path, capsys):
    session = make_session(tmp_path / "s.lwsession", duration_s=120.0, rate_sps=500.0,
                           dead_column=1)
    out = tmp_path / "rec"
    rc = main(["commission", str(session), "--target-deg", "0", "--tolerance-deg", "2",
               "--out", str(out), "--json"])
    (d,) = _json_lines(capsys)
    assert rc == 0, d["verdict_reason"]
    assert d["model"]["n_elements"] == 4          # from the session's metadata
    assert d["meta"]["site"] == "Invented Hill"
    assert d["suspects"] == [[1, 4]]
    rec = json.loads((out / "record.json").read_text())
    assert len(rec["timeline"]["t"]) >= 15       # 120 s of 6-s sweeps
    assert rec["timeline"]["peak_angle_deg"][-1] == pytest.approx(0.4, abs=1.0)
    assert [e["kind"] for e in rec["events"]] == ["alarm"]     # one per 60 s, at 60 s
    assert "invented test alarm" in (out / "record.md").read_text()
    _not_blank(out / "timeline.png", (900, 320))
    assert "Peak direction per sweep" in (out / "record.html").read_text()


def test_write_record_from_tick_uses_the_same_path(tmp_path):
    from stream.bearing import BearingConvention
    model = ArrayModel(4, element_exp=1.0)
    mon = Monitor(RollingPattern(EstimatorConfig(bin_deg=1.0)), None, model,
                  target_deg=0.0, tolerance_deg=3.0)
    mon.bearing = BearingConvention(offset_deg=200.0)
    t = 100.0
    for sweep in range(3):
        a = np.arange(-90.0, 90.5, 1.0)
        a = a if sweep % 2 == 0 else a[::-1]
        p = model.power_db(a) - 30.0
        for i in range(0, a.size, 30):
            t += 0.1
            mon.ingest(SampleBatch.from_arrays(a[i:i + 30], p[i:i + 30], t, rx_t=t))
            tick = mon.tick(t)
    path = write_record_from_tick(tick, model, tmp_path / "screen", {"site": "Invented"})
    assert path == tmp_path / "screen" / "record.html"
    rec = json.loads((tmp_path / "screen" / "record.json").read_text())
    assert rec["verdict"] == "pass" and rec["criteria"][0]["name"] == "pointing"
    # the compass bearing of the peak, with the convention it came from
    pk = tick.metrics.peak_angle_deg
    md = (tmp_path / "screen" / "record.md").read_text()
    assert f"**Peak bearing:** {(200.0 + pk) % 360.0:05.1f}° true" in md
    assert "broadside at 200°" in md
    assert rec["meta"]["site"] == "Invented"
    _not_blank(tmp_path / "screen" / "polar.png", (640, 640))


def test_session_reading_reports_progress(tmp_path):
    from replay.pattern_input import read_pattern

    session = make_session(tmp_path / "p.lwsession", duration_s=30.0, rate_sps=1000.0)
    calls: list[tuple[int, int]] = []
    inp = read_pattern(session, progress=lambda done, total: calls.append((done, total)))
    assert len(calls) >= 5                                  # ~4,096 samples per call
    assert calls[-1] == (30_000, 30_000) == (inp.samples, inp.samples)
    assert all(a[0] <= b[0] for a, b in zip(calls, calls[1:], strict=False))
