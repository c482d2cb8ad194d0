"""The command line's conventions: --version, shell completion, export to standard
output, file permissions from the umask, ISO 8601 UTC times in event exports, one
wording of --taper, `lobewatch info`, and the sessions folder for unnamed recordings.

Outside references: ISO 8601 / RFC 3339 for the time text, POSIX for the epoch and
for umask semantics (new file mode = 0o666 & ~umask), argcomplete's documented bash
protocol (COMP_LINE/COMP_POINT in, candidates separated by \\v on fd 8), the XDG Base
Directory specification for $XDG_DATA_HOME -- all from memory.
"""

from __future__ import annotations

import csv
import io
import json
import os
import stat
import subprocess
import sys
from importlib.metadata import version
from pathlib import Path

import numpy as np
import pytest

from replay.session import SUFFIX
from replay.session_writer import SessionWriter, default_sessions_dir, new_session_path
from stream.batch import SampleBatch
from stream.tick import Event, SourceStats
from tui.cli import build_parser, main

ROOT = Path(__file__).resolve().parent.parent
T0 = 1_767_225_600.0  # invented: 2026-01-01T00:00:00Z


def _env() -> dict[str, str]:
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    return env


def small_session(path: Path, notes: str = "mast 3, invented") -> Path:
    with SessionWriter(path, {"notes": notes, "source": {"kind": "live",
                                                          "endpoint": "tcp://127.0.0.1:1"}}) as w:
        for k in range(20):
            t = T0 + k * 0.1 + np.arange(50) * 2e-3
            w.write_batch(SampleBatch(t, np.linspace(-30, 30, 50), np.full(50, -40.0),
                                      rx_t=float(t[-1]), seq=k))
            w.write_tick(float(t[-1]) + 0.001, SourceStats("receiving", k))
        w.write_event(Event(T0 + 0.55, "marker", {"text": "bolt torqued"}))
        w.write_event(Event(T0 + 1.25, "alarm", {"rule": "drift", "state": "raised"}))
        w.write_event(Event(T0 + 1.5, "marker", {"text": "second"}))
    return path


def test_version_comes_from_package_metadata(capsys):
    with pytest.raises(SystemExit) as ei:
        main(["--version"])
    assert ei.value.code == 0
    assert capsys.readouterr().out.strip() == f"lobewatch {version('lobewatch')}"


def _complete(line: str) -> list[str]:
    """Ask the real command for completions the way argcomplete's bash hook does."""
    r, w = os.pipe()
    env = _env()
    env.update(_ARGCOMPLETE="1", COMP_LINE=line, COMP_POINT=str(len(line)), COMP_TYPE="9",
               _ARGCOMPLETE_COMP_WORDBREAKS=" \t\n\"'><=;|&(:", IFS="\013")
    try:
        p = subprocess.run([sys.executable, "-m", "tui.cli"], env=env, cwd=ROOT,
                           pass_fds=(w, 8), preexec_fn=lambda: os.dup2(w, 8),
                           capture_output=True, timeout=120)
    finally:
        os.close(w)
    with os.fdopen(r, "rb") as fh:
        out = fh.read().decode()
    assert p.returncode == 0, p.stderr.decode()[-500:]
    return [x.strip() for x in out.split("\013") if x.strip()]


def test_shell_completion_offers_commands_and_options():
    assert _complete("lobewatch rep") == ["replay", "report"]
    assert "info" in _complete("lobewatch i")
    assert _complete("lobewatch export a.lwsession --ev") == ["--events"]


def test_export_to_standard_output(tmp_path, capfd):
    s = small_session(tmp_path / "s.lwsession")
    assert main(["export", str(s), "-o", "-"]) == 0
    out, err = capfd.readouterr()
    rows = list(csv.reader(io.StringIO(out)))
    assert rows[0] == ["angle_deg", "power_dbm", "t"] and len(rows) == 1 + 20 * 50
    assert "standard output" in err
    assert not (Path.cwd() / "-").exists() and not (tmp_path / "-").exists()
    assert main(["export", str(s), "-o", "-", "--events"]) == 0
    ev = list(csv.DictReader(io.StringIO(capfd.readouterr().out)))
    assert [e["kind"] for e in ev] == ["marker", "alarm", "marker"]


def test_exported_files_follow_the_umask(tmp_path):
    s = small_session(tmp_path / "s.lwsession")
    old = os.umask(0o027)
    try:
        assert main(["export", str(s), "-o", str(tmp_path / "a.csv")]) == 0
        assert main(["export", str(s), "-o", str(tmp_path / "e.csv"), "--events"]) == 0
        made = small_session(tmp_path / "new.lwsession")
    finally:
        os.umask(old)
    for p in (tmp_path / "a.csv", tmp_path / "e.csv", made):
        assert stat.S_IMODE(p.stat().st_mode) == 0o640, p.name  # 0o666 & ~0o027


def test_event_export_has_iso_utc_beside_unix_seconds(tmp_path):
    s = small_session(tmp_path / "s.lwsession")
    out = tmp_path / "e.csv"
    assert main(["export", str(s), "-o", str(out), "--events"]) == 0
    rows = list(csv.DictReader(out.open()))
    assert list(rows[0])[:3] == ["t", "time_utc", "kind"]
    assert rows[0]["time_utc"] == "2026-01-01T00:00:00.550Z"  # T0 + 0.55 s
    assert float(rows[0]["t"]) == T0 + 0.55
    assert rows[2]["time_utc"] == "2026-01-01T00:00:01.500Z"


def test_taper_help_is_worded_once_for_every_command(capsys):
    texts = {}
    for cmd in ("live", "replay", "demo", "synth", "report"):
        with pytest.raises(SystemExit):
            main([cmd, "--help"])
        help_text = " ".join(capsys.readouterr().out.split())
        i = help_text.index("--taper NAME amplitude")
        texts[cmd] = help_text[i:help_text.index(")", help_text.index("Chebyshev", i)) + 1]
    defaults = {cmd: t.rsplit("default ", 1)[1] for cmd, t in texts.items()}
    assert len({t.rsplit("default ", 1)[0] for t in texts.values()}) == 1, texts
    assert all(d.endswith(")") for d in defaults.values())


def test_info_shows_notes_duration_rates_sizes_and_events(tmp_path, capsys):
    s = small_session(tmp_path / "s.lwsession", notes="north mast, invented")
    assert main(["info", str(s)]) == 0
    text = capsys.readouterr().out
    assert "north mast, invented" in text and "2026-01-01T00:00:00" in text
    assert "1,000 in 20 batches" in text and "marker 2" in text and "alarm 1" in text
    assert main(["info", "--json", str(s)]) == 0
    info = json.loads(capsys.readouterr().out)
    assert info["notes"] == "north mast, invented"
    assert info["samples"] == 1000 and info["events"] == 3 and info["readouts"] == 20
    assert info["events_by_kind"] == {"alarm": 1, "marker": 2}
    assert info["size_bytes"] == s.stat().st_size  # no -wal left after a clean close
    # duration from the first batch's receive time to the last readout
    first_rx, last_tick = T0 + 49 * 2e-3, T0 + 1.9 + 49 * 2e-3 + 0.001
    assert info["duration_s"] == pytest.approx(last_tick - first_rx)
    assert info["sample_rate_sps"] == pytest.approx(1000 / (last_tick - first_rx))
    assert info["readout_interval_s"] == pytest.approx(0.1)
    assert not [p for p in tmp_path.iterdir() if p.name != "s.lwsession"]  # nothing created


def test_info_of_an_imported_file_shows_its_import_notes(tmp_path, capsys):
    src = tmp_path / "sweep.csv"
    src.write_text("angle_deg,power_dbm\n-10,-50\n0,-40\n10,-50\n")
    out = tmp_path / "sweep.lwsession"
    assert main(["import", str(src), "-o", str(out), "--notes", "hand sweep, invented"]) == 0
    capsys.readouterr()
    assert main(["info", "--json", str(out)]) == 0
    info = json.loads(capsys.readouterr().out)
    assert info["notes"] == "hand sweep, invented" and info["kind"] == "import"
    assert info["samples"] == 3


def test_info_of_a_missing_file_is_one_line(tmp_path, capsys):
    assert main(["info", str(tmp_path / "nope.lwsession")]) == 1
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "no such file" in err


def test_unnamed_recordings_go_to_the_sessions_folder(tmp_path, monkeypatch):
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "data"))
    if sys.platform.startswith("linux"):
        assert default_sessions_dir() == tmp_path / "data" / "lobewatch" / "sessions"
    a = new_session_path(t=T0)
    b_ = a.with_name(a.name)  # taken once created: the next one gets a suffix
    b_.touch()
    b = new_session_path(t=T0)
    assert a.parent == default_sessions_dir() and a.parent.is_dir()
    assert a.name.startswith("lobewatch-") and a.suffix == SUFFIX and b != a
    assert b.name.endswith(f"-2{SUFFIX}")
    own = new_session_path(tmp_path / "mine", "site-a", t=T0)
    assert own.parent == tmp_path / "mine" and own.name.startswith("site-a-")
    args = build_parser().parse_args(["live", "tcp://127.0.0.1:1", "--record"])
    assert args.record == ""  # --record without FILE: a new file in the sessions folder
    args = build_parser().parse_args(["live", "tcp://127.0.0.1:1", "--record", "x" + SUFFIX])
    assert args.record == "x" + SUFFIX


def test_replay_uses_recorded_alarm_settings_unless_an_alarm_option_is_given():
    """An option without a default (argparse.SUPPRESS, e.g. the old --stale-s name) must
    not count as given: otherwise a replay silently drops the recorded thresholds."""
    from tui.commands.replay import _given
    args = build_parser().parse_args(["replay", "x" + SUFFIX, "--headless"])
    dests = [d for d in args._defaults if d not in ("file", "headless", "func", "_defaults")]
    assert not _given(args, dests)
    args = build_parser().parse_args(["replay", "x" + SUFFIX, "--stale-s", "7"])
    assert _given(args, ["stale_after"])
    args = build_parser().parse_args(["replay", "x" + SUFFIX, "--sll-limit-db", "-20"])
    assert _given(args, ["sll_limit_db"])


def test_the_command_line_loads_without_scipy_or_matplotlib() -> None:
    """`lobewatch --help` on a laptop over SSH should answer at once: scipy and
    matplotlib (most of a second each to import) load only where they are used."""
    import subprocess
    import sys
    code = ("import sys; from tui.cli import build_parser; build_parser(); "
            "print(sorted(m for m in ('scipy', 'matplotlib', 'textual') if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True, timeout=120)
    assert out.stdout.strip() == "[]"


def test_queue_mb_is_checked_and_converted_to_bytes(capsys):
    import argparse

    from tui.cli import queue_bytes
    assert main(["live", "tcp://127.0.0.1:9", "--queue-mb", "-1"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "--queue-mb must be 0 or more" in err
    assert queue_bytes(argparse.Namespace(queue_mb=0.5)) == 512 * 1024
    assert queue_bytes(argparse.Namespace(queue_mb=0)) == 0  # only --hwm then
    assert queue_bytes(argparse.Namespace()) == 64 * 2**20  # commands without the option
