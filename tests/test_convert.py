"""Import and export: every sample comes back bit for bit, inputs are never touched.

Exactness reference: Python's ``repr`` of a float is the shortest string that reads
back to the same IEEE 754 double (Python docs, "Floating Point Arithmetic: Issues and
Limitations"; the David Gay algorithm) -- so float(repr(x)) == x is the check.
"""

from __future__ import annotations

import csv
import hashlib
import io
import json
import os
from contextlib import redirect_stdout
from pathlib import Path

import numpy as np
import pytest

from replay.convert import (
    SYNTHETIC_RATE_SPS,
    chunk_bounds,
    export_events,
    export_samples,
    import_file,
)
from replay.readers import read_sweep
from replay.session import SessionReader
from replay.session_writer import SessionWriter
from stream.batch import SampleBatch
from stream.errors import UserError
from stream.tick import Event
from tui.cli import main

ROOT = Path(__file__).resolve().parent.parent


def digest(path) -> tuple[str, int]:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest(), os.stat(path).st_mtime_ns


def awkward_sweep(n: int = 2500, seed: int = 5):
    """Invented samples with full-precision floats, including values whose short
    decimal forms are not exact in binary (0.1, 1/3 ...)."""
    rng = np.random.default_rng(seed)
    a = rng.uniform(-180, 180, n)
    a[:4] = [0.1, -1 / 3, 179.99999999999997, -180.0]
    p = rng.normal(-45, 12, n)
    p[:3] = [-0.1, -1e-7, -33.300000000000004]
    t = 1_767_225_600.0 + np.cumsum(rng.uniform(0, 2e-4, n))
    return a, p, t


def write_csv(path: Path, a, p, t=None, power="power_dbm", sep=","):
    with open(path, "w", newline="") as fh:
        fh.write("# invented test sweep\n")
        fh.write(sep.join(["angle_deg", power] + (["t"] if t is not None else [])) + "\n")
        for i in range(len(a)):
            row = [repr(float(a[i])), repr(float(p[i]))]
            if t is not None:
                row.append(repr(float(t[i])))
            fh.write(sep.join(row) + "\n")


@pytest.mark.parametrize("with_t", [True, False])
@pytest.mark.parametrize("power", ["power_dbm", "power_db"])
def test_csv_import_export_round_trip_is_exact(tmp_path, with_t, power):
    a, p, t = awkward_sweep()
    src = tmp_path / "in.csv"
    write_csv(src, a, p, t if with_t else None, power)
    before = digest(src)
    s = tmp_path / "s.lwsession"
    summary = import_file(src, s)
    assert summary.samples == len(a) and summary.synthetic_t is (not with_t)
    out = tmp_path / "out.csv"
    assert export_samples(s, out) == len(a)
    assert digest(src) == before  # input only read
    header = out.read_text().splitlines()[0]
    assert header == ("angle_deg," + power + (",t" if with_t else ""))
    got = read_sweep(out)
    assert np.array_equal(got.angle_deg, a) and np.array_equal(got.power_db, p)
    assert got.calibrated is (power == "power_dbm")
    if with_t:
        assert np.array_equal(got.t, t)
    # and the text itself: every value is the shortest round-trip repr
    rows = list(csv.reader(io.StringIO(out.read_text())))[1:]
    assert rows[0][0] == "0.1" and rows[1][0] == repr(-1 / 3)
    assert all(float(r[0]) == x for r, x in zip(rows, a, strict=True))
    # import -> export of the export gives the same bytes again
    s2 = tmp_path / "s2.lwsession"
    import_file(out, s2)
    out2 = tmp_path / "out2.csv"
    export_samples(s2, out2)
    assert out2.read_bytes() == out.read_bytes()


def test_synthetic_times_and_batching(tmp_path):
    a, p, _ = awkward_sweep(2345)
    src = tmp_path / "in.csv"
    write_csv(src, a, p)
    s = tmp_path / "s.lwsession"
    import_file(src, s)
    with SessionReader(s) as r:
        bs = list(r.iter_batches())
        assert r.meta["synthetic_t"] is True
        assert r.meta["synthetic_rate_sps"] == SYNTHETIC_RATE_SPS
    t = np.concatenate([b.t for b in bs])
    assert np.array_equal(t, np.arange(len(a)) / SYNTHETIC_RATE_SPS)
    assert all(b.rx_t == b.t[-1] for b in bs)
    assert max(len(b) for b in bs) <= 1000 and sum(len(b) for b in bs) == len(a)


def test_chunk_bounds_split_on_count_and_time():
    rx = np.array([0.0, 0.05, 0.09, 0.1, 0.11, 0.35, 0.36, 0.37])
    assert chunk_bounds(rx, max_samples=2, max_span_s=0.1).tolist() == [0, 2, 3, 4, 5, 6, 8]
    assert chunk_bounds(rx, max_samples=100, max_span_s=0.1).tolist() == [0, 3, 5, 8]


def test_jsonl_import_matches_reader(tmp_path):
    src = tmp_path / "in.jsonl"
    lines = [
        {"angle_deg": [-10.5, -10.0, -9.5], "power_dbm": [-40.1, -39.9, -39.7],
         "t0": 1767225600.0, "dt": 0.001, "seq": 1},
        {"angle_deg": 12.25, "power_dbm": -31.2, "t": 1767225600.125, "seq": 2},
    ]
    src.write_text("".join(json.dumps(x) + "\n" for x in lines))
    s = tmp_path / "s.lwsession"
    import_file(src, s)
    out = tmp_path / "out.csv"
    export_samples(s, out)
    want, got = read_sweep(src), read_sweep(out)
    for name in ("angle_deg", "power_db", "t"):
        assert np.array_equal(getattr(got, name), getattr(want, name))


def test_report_and_replay_read_imported_sessions(tmp_path, capsys):
    src = ROOT / "examples" / "sweep_4col_5deg.csv"
    s = tmp_path / "four.lwsession"
    assert main(["import", str(src), "-o", str(s)]) == 0
    capsys.readouterr()
    assert main(["report", str(src), "--json"]) == 0
    from_csv = json.loads(capsys.readouterr().out)
    assert main(["report", str(s), "--json"]) == 0
    from_session = json.loads(capsys.readouterr().out)

    def metrics(doc):  # the report's per-file objects, without the file name
        items = doc if isinstance(doc, list) else doc.get("files", [doc])
        return [{k: v for k, v in d.items() if k not in ("file", "path", "name", "source")}
                for d in items]

    assert metrics(from_session) == metrics(from_csv)
    buf = io.StringIO()
    with redirect_stdout(buf):
        assert main(["replay", str(s), "--headless", "--interval", "0.01"]) == 0
    recs = [json.loads(line) for line in buf.getvalue().splitlines()]
    ticks = [r for r in recs if r["type"] == "metrics"]
    n = len(read_sweep(src))
    assert ticks[-1]["samples"] == n
    assert [r["t"] for r in ticks[:3]] == [0.01, 0.02, 0.03]
    assert recs[-1]["type"] == "summary"


def test_export_events(tmp_path):
    s = tmp_path / "e.lwsession"
    evs = [Event(10.0, "marker", {"text": "bolt, torqued \"ok\""}),
           Event(10.5, "alarm", {"rule": "drift", "state": "raised", "severity": "major",
                                 "value": 0.30000000000000004, "threshold": 1.0,
                                 "watch_deg": None}),
           Event(11.0, "target", {"target_deg": 2.5, "tolerance_deg": [1, 2]})]
    with SessionWriter(s, {}) as w:
        w.write_batch(SampleBatch.from_arrays([0.0, 1.0], [-3.0, -4.0], rx_t=9.0))
        for ev in evs:
            w.write_event(ev)
    out = tmp_path / "ev.csv"
    assert export_events(s, out) == 3
    rows = list(csv.DictReader(out.open()))
    assert list(rows[0])[:4] == ["t", "time_utc", "kind", "text"]
    assert rows[0]["text"] == "bolt, torqued \"ok\"" and float(rows[0]["t"]) == 10.0
    # Unix time 10.5 s is 1970-01-01 00:00:10.5 UTC (POSIX definition of the epoch)
    assert rows[1]["time_utc"] == "1970-01-01T00:00:10.500Z"
    assert float(rows[1]["value"]) == 0.30000000000000004 and rows[1]["watch_deg"] == ""
    assert json.loads(rows[2]["tolerance_deg"]) == [1, 2]


def test_outputs_are_never_clobbered_and_inputs_never_written(tmp_path, capsys):
    a, p, t = awkward_sweep(50)
    src = tmp_path / "in.csv"
    write_csv(src, a, p, t)
    s = tmp_path / "s.lwsession"
    import_file(src, s)
    ds, dsrc = digest(s), digest(src)
    with pytest.raises(UserError, match="exists"):
        import_file(src, s)
    with pytest.raises(UserError, match="output is the input"):
        import_file(src, src, force=True)
    with pytest.raises(UserError, match="exists"):
        export_samples(s, src)
    with pytest.raises(UserError, match="session file itself"):
        export_samples(s, s, force=True)
    assert digest(s) == ds and digest(src) == dsrc
    # bad input through the CLI: one line, exit 1, no session left behind
    bad = tmp_path / "bad.csv"
    bad.write_text("angle_deg,power_dbm\n0,-30\n5,oops\n")
    out = tmp_path / "bad.lwsession"
    assert main(["import", str(bad), "-o", str(out)]) == 1
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "bad.csv:3" in err and "Traceback" not in err
    assert not out.exists()
    assert [f for f in os.listdir(tmp_path) if f.startswith(".lobewatch")] == []
    assert main(["export", str(s), "-o", str(tmp_path / "x.lwsession")]) == 1
