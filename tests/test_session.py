"""Session files: exact storage, read-only opening, validation, corruption, indexed seek.

Reference for the on-disk facts checked here: the SQLite file format documentation
("Database File Format", sqlite.org: 100-byte header, magic string, page size at
offset 16, user_version at 60, application_id at 68) -- from memory.
"""

from __future__ import annotations

import hashlib
import os
import shutil
import sqlite3
import subprocess
import sys

import numpy as np
import pytest

from replay.session import APPLICATION_ID, FORMAT_VERSION, SessionReader, read_all_samples
from replay.session_writer import SessionWriter
from stream.batch import SampleBatch
from stream.errors import InputFileError, UserError
from stream.tick import Event, SourceStats
from tui.cli import main

T0 = 1_767_225_600.0  # invented


def batch(k: int, n: int = 50, rng=None) -> SampleBatch:
    rng = rng or np.random.default_rng(k)
    t = T0 + k * 0.1 + np.arange(n) * 1e-3
    return SampleBatch(t, rng.uniform(-180, 180, n), rng.normal(-40, 5, n), rx_t=float(t[-1]),
                       seq=k, epoch="e1", stream="s", calibrated=bool(k % 2))


def write_session(path, n_batches=40, force=False):
    with SessionWriter(path, {"notes": "invented", "endpoint": "tcp://127.0.0.1:1"},
                       force=force) as w:
        for k in range(n_batches):
            w.write_batch(batch(k))
            w.write_tick(T0 + k * 0.1 + 0.05, SourceStats("receiving", k, {"bad_json": k}, 1))
            if k % 10 == 0:
                w.write_event(Event(T0 + k * 0.1 + 0.06, "marker", {"text": f"mark {k}"}))
        w.commit()
    return path


def digest(path) -> tuple[str, int]:
    with open(path, "rb") as fh:
        return hashlib.sha256(fh.read()).hexdigest(), os.stat(path).st_mtime_ns


def test_round_trip_is_exact_and_in_recorded_order(tmp_path):
    p = write_session(tmp_path / "a.lwsession")
    with SessionReader(p) as r:
        assert r.meta["format_version"] == FORMAT_VERSION and r.meta["notes"] == "invented"
        items = list(r.iter_items())
        assert [it.id for it in items] == sorted(it.id for it in items)
        assert [it.kind for it in items[:3]] == ["batch", "tick", "event"]
        bs = [it.value for it in items if it.kind == "batch"]
        for k, b in enumerate(bs):
            want = batch(k)
            for name in ("t", "angle_deg", "power_db"):
                assert np.array_equal(getattr(b, name), getattr(want, name))
            assert (b.rx_t, b.seq, b.epoch, b.stream, b.calibrated) == (
                want.rx_t, want.seq, want.epoch, want.stream, want.calibrated)
        ticks = [it for it in items if it.kind == "tick"]
        assert ticks[3].value == SourceStats("receiving", 3, {"bad_json": 3}, 1)
        assert r.counts() == {"batches": 40, "samples": 2000, "ticks": 40, "events": 4}
    allb = read_all_samples(p)
    assert len(allb) == 2000 and not allb.calibrated


def _docs_reader_code() -> str:
    from pathlib import Path
    text = (Path(__file__).resolve().parent.parent / "docs" / "session-format.md").read_text()
    part = text.split("## Reading samples yourself", 1)[1]
    return part.split("```python", 1)[1].split("```", 1)[0]


@pytest.mark.parametrize("compress", [True, False])
def test_plain_sqlite_and_numpy_read_samples(tmp_path, compress):
    """The reading code in docs/session-format.md, run as printed (sqlite3, zlib and
    numpy only), gives back every stored value bit for bit."""
    p = tmp_path / "site-a.lwsession"
    rng = np.random.default_rng(5)
    want = []
    with SessionWriter(p, {}, compress=compress) as w:
        for k in range(30):
            b = batch(k)
            if k % 3 == 1:  # float32-exact values (a source sending float32)
                b = SampleBatch(b.t, b.angle_deg.astype(np.float32).astype(float),
                                b.power_db.astype(np.float32).astype(float), rx_t=b.rx_t)
            if k % 3 == 2:  # raw pairs carry no times: every sample at its receive time
                b = SampleBatch(np.full(50, b.rx_t), b.angle_deg, b.power_db, rx_t=b.rx_t)
            if k == 7:  # irregular times
                b = SampleBatch(T0 + np.sort(rng.uniform(0, 1, 50)), b.angle_deg,
                                b.power_db, rx_t=b.rx_t)
            want.append(b)
            w.write_batch(b)
            w.write_tick(b.rx_t, SourceStats("receiving", k))
            if k % 3 == 2 or k == 7:
                w.commit()  # one block per kind of data, each with its own encoding
    cwd = os.getcwd()
    os.chdir(tmp_path)
    try:
        ns: dict = {}
        exec(_docs_reader_code(), ns)  # noqa: S102 - the documented snippet itself
    finally:
        os.chdir(cwd)
    for name in ("t", "angle_deg", "power_db"):
        got = ns[name]
        assert got.dtype == np.float64
        assert np.array_equal(got, np.concatenate([getattr(b, name) for b in want]))
    con = sqlite3.connect(f"file:{p}?mode=ro", uri=True)
    encs = {e for (e,) in con.execute("SELECT enc FROM blocks")}
    z = "+z" if compress else ""
    assert {f"tq{z},f8{z},f8{z}", f"tq{z},f4{z},f4{z}", f"base,f8{z},f8{z}"} <= encs
    assert con.execute("PRAGMA application_id").fetchone()[0] == APPLICATION_ID
    assert con.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    con.close()


def test_refuses_to_overwrite_unless_forced(tmp_path):
    p = write_session(tmp_path / "a.lwsession")
    before = digest(p)
    with pytest.raises(UserError, match="exists.*--force"):
        SessionWriter(p, {})
    assert digest(p) == before
    write_session(p, n_batches=3, force=True)
    with SessionReader(p) as r:
        assert r.counts()["batches"] == 3


def test_reading_never_modifies_the_file(tmp_path):
    p = write_session(tmp_path / "a.lwsession")
    before = digest(p)
    names = sorted(os.listdir(tmp_path))
    with SessionReader(p) as r:
        list(r.iter_items())
    read_all_samples(p)
    assert digest(p) == before
    assert sorted(os.listdir(tmp_path)) == names  # not even SQLite side files


def test_killed_writer_leaves_a_readable_file_and_reader_keeps_it_intact(tmp_path):
    """A writer killed after a commit: the rows sit in the -wal file; the reader sees
    them without touching the session file."""
    p = tmp_path / "k.lwsession"
    code = (
        "import os, numpy as np;"
        "from replay.session_writer import SessionWriter;"
        "from stream.batch import SampleBatch;"
        f"w = SessionWriter({str(p)!r}, {{}});"
        "[w.write_batch(SampleBatch.from_arrays(np.arange(5.0), np.zeros(5), rx_t=k))"
        " for k in range(7)];"
        "w.commit();"
        "w.write_batch(SampleBatch.from_arrays(np.arange(5.0), np.zeros(5), rx_t=99));"
        "os._exit(0)"  # dies without closing: the 8th batch was never committed
    )
    subprocess.run([sys.executable, "-c", code], check=True, cwd=os.getcwd())
    assert os.path.exists(f"{p}-wal")
    before = digest(p)
    names = sorted(os.listdir(tmp_path))
    with SessionReader(p) as r:
        assert r.counts()["batches"] == 7
    assert digest(p) == before
    assert sorted(os.listdir(tmp_path)) == names  # nothing created beside it
    # the same files copied elsewhere without the -shm index (a user saving the session
    # with its -wal after a crash): read-only uses still create nothing beside them
    other = tmp_path / "copy"
    other.mkdir()
    shutil.copy(p, other / p.name)
    shutil.copy(f"{p}-wal", other / f"{p.name}-wal")
    q = other / p.name
    for argv in (["info", str(q)], ["replay", str(q), "--headless"],
                 ["export", str(q), "-o", "-"], ["report", str(q)]):
        # report reads all 35 samples, then refuses the flat test data (exit 1)
        assert main(argv) == (1 if argv[0] == "report" else 0), argv
        assert sorted(os.listdir(other)) == sorted([p.name, f"{p.name}-wal"]), argv
    with SessionReader(q) as r:
        assert r.counts()["batches"] == 7  # the tail in the -wal file is read
        assert r._snapshot_dir is not None and os.path.isdir(r._snapshot_dir)
        snap = r._snapshot_dir
    assert not os.path.exists(snap)  # the private copy is removed on close


@pytest.mark.parametrize("case", ["missing", "empty", "text", "other_sqlite", "newer",
                                  "truncated", "flipped_blob", "header_garbage"])
def test_bad_files_give_one_line_errors(tmp_path, case, capsys):
    good = write_session(tmp_path / "good.lwsession")
    p = tmp_path / "bad.lwsession"
    if case == "empty":
        p.write_bytes(b"")
    elif case == "text":
        p.write_text("angle_deg,power_dbm\n0,-30\n")
    elif case == "other_sqlite":
        con = sqlite3.connect(p)
        con.execute("CREATE TABLE x (a)")
        con.commit()
        con.close()
    elif case == "newer":
        shutil.copy(good, p)
        con = sqlite3.connect(p)
        con.execute(f"PRAGMA user_version = {FORMAT_VERSION + 1}")
        con.commit()
        con.close()
    elif case == "truncated":
        data = good.read_bytes()
        p.write_bytes(data[: len(data) // 2 + 100])
    elif case == "flipped_blob":
        data = bytearray(good.read_bytes())
        con = sqlite3.connect(f"file:{good}?mode=ro&immutable=1", uri=True)
        needle = con.execute("SELECT power_db FROM blocks ORDER BY id LIMIT 1 OFFSET 20"
                             ).fetchone()[0][:16]
        con.close()
        i = bytes(data).find(needle)
        assert i > 0
        data[i + 3] ^= 0x40
        p.write_bytes(bytes(data))
    elif case == "header_garbage":
        data = bytearray(good.read_bytes())
        data[16:18] = b"\x00\x03"  # impossible page size
        p.write_bytes(bytes(data))
    before = digest(p) if p.exists() else None
    with pytest.raises(InputFileError) as ei:
        with SessionReader(p) as r:
            list(r.iter_items())
    msg = str(ei.value)
    assert "\n" not in msg and str(p) in msg
    expect = {"missing": "no such file", "empty": "empty", "text": "not a lobewatch session",
              "other_sqlite": "not a lobewatch session", "newer": "newer",
              "truncated": "truncated", "flipped_blob": "checksum",
              "header_garbage": "page size"}[case]
    assert expect in msg
    if before is not None:
        assert digest(p) == before
    # and through the command line: exit 1, one line, no traceback
    out = tmp_path / "out.csv"
    assert main(["export", str(p), "-o", str(out)]) == 1
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "Traceback" not in err and expect in err
    assert not out.exists()


def test_random_byte_flips_never_escape_as_tracebacks(tmp_path, capsys):
    """Flip bytes anywhere past the header: the export either succeeds with the exact
    data (the flip hit unused space) or fails with one line."""
    good = write_session(tmp_path / "good.lwsession", n_batches=60)
    ref = tmp_path / "ref.csv"
    assert main(["export", str(good), "-o", str(ref)]) == 0
    data = good.read_bytes()
    rng = np.random.default_rng(7)
    failed = 0
    for trial in range(60):
        bad = bytearray(data)
        for pos in rng.integers(100, len(data), 4):
            bad[pos] ^= int(rng.integers(1, 256))
        p = tmp_path / f"f{trial}.lwsession"
        p.write_bytes(bytes(bad))
        out = tmp_path / f"f{trial}.csv"
        capsys.readouterr()
        rc = main(["export", str(p), "-o", str(out)])
        err = capsys.readouterr().err
        assert "Traceback" not in err
        if rc == 0:
            assert out.read_bytes() == ref.read_bytes()
        else:
            failed += 1
            assert rc == 1 and err.count("\n") == 1 and not out.exists()
    assert failed > 0


def test_seek_into_one_hour_session_reads_few_rows(tmp_path):
    """One hour at 10 readouts/s (36,000 ticks and batches): starting in the middle
    reads a handful of rows, by the time indexes."""
    p = tmp_path / "hour.lwsession"
    n = 36_000
    a = np.linspace(-60, 60, 8)
    with SessionWriter(p, {}, synchronous="OFF") as w:
        for k in range(n):
            w.write_batch(SampleBatch(np.full(8, T0 + k * 0.1), a, -a * a / 100, rx_t=T0 + k * 0.1))
            w.write_tick(T0 + k * 0.1 + 0.05, SourceStats("receiving", k))
            if k % 600 == 0:
                w.write_event(Event(T0 + k * 0.1 + 0.07, "marker", {"text": str(k)}))
        w.commit()
    with SessionReader(p) as r:
        span = r.time_span()
        assert span.duration_s == pytest.approx(3599.95)
        mid = T0 + 1800.0
        it = r.iter_items(mid)
        first = [next(it) for _ in range(20)]
        assert first[0].kind == "batch" and first[0].t == pytest.approx(mid, abs=0.1)
        assert r.rows_read <= 30  # of 72,060 rows
        ev = r.neighbour_event(mid, forward=True)
        assert ev is not None and ev.t > mid and r.rows_read <= 31
    # the player's seek: 15 s of warm-up replayed, read through the indexes
    from replay.player import Player
    from stream.estimator import RollingPattern
    from stream.monitor import Monitor
    mon = Monitor(RollingPattern())
    with Player(p, mon, speed=float("inf"), warmup_s=15.0, prefetch=False) as player:
        player.seek_to(mid)
        assert mon.last_tick is not None and mid - 0.1 < mon.last_tick.t <= mid
        assert mon.estimator.samples == 151 * 8  # 15 s of 8-sample batches at 10/s, both ends
        assert player.reader.rows_read < 400  # of 72,060


def _write_v1(path, batches, ticks) -> None:
    """A format version 1 file as the previous lobewatch wrote it (one row per batch,
    float64 blobs), built here with plain sqlite3 so the old layout stays pinned."""
    from replay import session as s
    con = sqlite3.connect(path, isolation_level=None)
    con.execute(f"PRAGMA application_id = {APPLICATION_ID}")
    con.execute("PRAGMA user_version = 1")
    shared = [x for x in s.SCHEMA.split(";") if "blocks" not in x and x.strip()]
    for stmt in shared + [x for x in s._SCHEMA_V1_BATCHES.split(";") if x.strip()]:
        con.execute(stmt)
    con.execute("INSERT INTO meta VALUES ('format_version', '1')")
    i = 0
    for b, tick_t in zip(batches, ticks, strict=True):
        i += 1
        tb, ab, pb = (np.ascontiguousarray(x, "<f8").tobytes()
                      for x in (b.t, b.angle_deg, b.power_db))
        con.execute("INSERT INTO batches VALUES (?,?,?,?,?,?,?,?,?,?,?,?,?)",
                    (i, b.rx_t, b.t[0], b.t[-1], len(b), b.seq, b.epoch, b.stream,
                     int(b.calibrated), tb, ab, pb,
                     s.batch_crc(b.rx_t, len(b), b.seq, b.calibrated, b.epoch, b.stream,
                                 tb, ab, pb)))
        i += 1
        text = s.dumps(SourceStats("receiving", i).to_dict())
        con.execute("INSERT INTO ticks VALUES (?,?,?,?)", (i, tick_t, text,
                                                            s.text_crc(tick_t, text)))
    con.close()


def test_version_1_files_are_still_read_and_replayed(tmp_path, capsys):
    old = tmp_path / "old.lwsession"
    bs = [batch(k) for k in range(12)]
    _write_v1(old, bs, [b.rx_t + 0.01 for b in bs])
    with SessionReader(old) as r:
        assert r.format_version == 1
        got = list(r.iter_batches())
        assert r.counts() == {"batches": 12, "samples": 600, "ticks": 12, "events": 0}
        assert r.start_id(bs[5].rx_t + 0.02) == 12  # the tick after batch 6
    assert all(np.array_equal(g.power_db, w.power_db) and g.seq == w.seq
               for g, w in zip(got, bs, strict=True))
    # the same data written now (version 2) replays to the same readouts
    new = tmp_path / "new.lwsession"
    with SessionWriter(new, {}) as w:
        for b in bs:
            w.write_batch(b)
            w.write_tick(b.rx_t + 0.01, SourceStats("receiving", 0))
    outs = []
    for p in (old, new):
        assert main(["replay", str(p), "--headless"]) == 0
        outs.append([ln for ln in capsys.readouterr().out.splitlines()
                     if ln.startswith('{"type":"metrics"')])
    assert outs[0] and outs[0] == outs[1]
