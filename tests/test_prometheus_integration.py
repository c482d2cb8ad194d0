"""The real Prometheus server scrapes a running `lobewatch live --metrics-listen`.

`lobewatch synth` publishes two simulated arrays (invented scenarios) on two ports;
`lobewatch live --headless` watches both as two streams and serves metrics; Debian's
`prometheus` scrapes it every second on loopback with a temporary config and storage;
its HTTP API (`/api/v1/query`, Prometheus documentation "HTTP API") must return a
peak-angle series per stream whose value is one that the JSON Lines readout printed.
The shipped alert rules are checked with `promtool check rules` and their unit tests
(`promtool test rules`, a synthetic series making the pointing alert fire) must pass.

Without the binaries the tests skip, unless LOBEWATCH_REQUIRE_PROMETHEUS=1 (set by
.ci/run), where a missing binary fails.  Every process is killed at the end; the whole
file is bounded to about 40 s.
"""

from __future__ import annotations

import json
import os
import shutil
import socket
import subprocess
import sys
import threading
import time
import urllib.parse
import urllib.request
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
EXAMPLES = ROOT / "examples" / "prometheus"
REQUIRED = os.environ.get("LOBEWATCH_REQUIRE_PROMETHEUS") == "1"


def need(binary: str) -> str:
    path = shutil.which(binary)
    if path is None:
        if REQUIRED:
            pytest.fail(f"{binary} not found but LOBEWATCH_REQUIRE_PROMETHEUS=1 "
                        "(install the Debian package prometheus)")
        pytest.skip(f"{binary} not installed (Debian package prometheus)")
    return path


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def lobewatch(*args: str, **kw) -> subprocess.Popen:
    return subprocess.Popen([sys.executable, "-m", "tui.cli", *args], cwd=ROOT,
                            env={**os.environ, "PYTHONPATH": str(ROOT)}, text=True, **kw)


def get_json(url: str) -> dict:
    with urllib.request.urlopen(url, timeout=3) as resp:
        return json.loads(resp.read().decode())


def stop(proc: subprocess.Popen) -> None:
    if proc.poll() is None:
        proc.terminate()
        try:
            proc.wait(timeout=5)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()


def test_promtool_checks_and_unit_tests_the_shipped_rules():
    promtool = need("promtool")
    rules = EXAMPLES / "lobewatch.rules.yml"
    check = subprocess.run([promtool, "check", "rules", str(rules)], capture_output=True,
                           text=True, timeout=30)
    assert check.returncode == 0, check.stdout + check.stderr
    # the unit tests include the pointing alert firing after 5 min off target
    test = subprocess.run([promtool, "test", "rules", "lobewatch.rules.test.yml"],
                          cwd=EXAMPLES, capture_output=True, text=True, timeout=30)
    assert test.returncode == 0, test.stdout + test.stderr
    assert "SUCCESS" in test.stdout
    config = subprocess.run([promtool, "check", "config", "prometheus.yml"], cwd=EXAMPLES,
                            capture_output=True, text=True, timeout=30)
    assert config.returncode == 0, config.stdout + config.stderr


def test_prometheus_scrapes_two_streams_that_agree_with_the_json_readout(tmp_path):
    prometheus = need("prometheus")
    p1, p2, metrics_port, prom_port = (free_port() for _ in range(4))
    procs: list[subprocess.Popen] = []
    lines: list[dict] = []
    reader: threading.Thread | None = None
    try:
        procs.append(lobewatch(
            "synth", "--array", f"tcp://127.0.0.1:{p1},scenario=steady",
            "--array", f"tcp://127.0.0.1:{p2},scenario=dead-column", "--duration", "40",
            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL))
        live = lobewatch(
            "live", "--headless", "--interval", "0.5", "--elements", "4",
            "--stream", f"north=tcp://127.0.0.1:{p1}", "--stream", f"south=tcp://127.0.0.1:{p2}",
            "--target-deg", "0", "--tolerance-deg", "2",
            "--metrics-listen", f"127.0.0.1:{metrics_port}",
            stdout=subprocess.PIPE, stderr=subprocess.DEVNULL)
        procs.append(live)

        def read() -> None:
            assert live.stdout is not None
            for line in live.stdout:
                lines.append(json.loads(line))

        reader = threading.Thread(target=read, daemon=True)
        reader.start()
        (tmp_path / "prometheus.yml").write_text(
            "global:\n  scrape_interval: 1s\n  scrape_timeout: 1s\n"
            "scrape_configs:\n  - job_name: lobewatch\n    static_configs:\n"
            f"      - targets: ['127.0.0.1:{metrics_port}']\n")
        procs.append(subprocess.Popen(
            [prometheus, f"--config.file={tmp_path / 'prometheus.yml'}",
             f"--storage.tsdb.path={tmp_path / 'data'}",
             f"--web.listen-address=127.0.0.1:{prom_port}", "--log.level=error"],
            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL))
        query = urllib.parse.urlencode({"query": "lobewatch_peak_angle_degrees"})
        url = f"http://127.0.0.1:{prom_port}/api/v1/query?{query}"
        deadline = time.monotonic() + 30
        result: list[dict] = []
        while time.monotonic() < deadline:
            try:
                body = get_json(url)
                result = body["data"]["result"]
                if {r["metric"].get("stream") for r in result} >= {"north", "south"}:
                    break
            except (OSError, ValueError, KeyError):
                pass
            time.sleep(0.5)
        assert {r["metric"].get("stream") for r in result} >= {"north", "south"}, result
        up = get_json(f"http://127.0.0.1:{prom_port}/api/v1/query?"
                      + urllib.parse.urlencode({"query": "lobewatch_stream_up"}))
        ups = {r["metric"]["stream"]: float(r["value"][1]) for r in up["data"]["result"]}
        assert ups.get("north") == 1.0 and ups.get("south") == 1.0
    finally:
        for p in reversed(procs):
            stop(p)
    assert reader is not None
    reader.join(timeout=5)  # the rest of the output, up to the summaries
    assert any(rec.get("type") == "summary" for rec in lines)
    printed: dict[str, set[float]] = {}
    for rec in lines:
        if rec.get("type") == "metrics" and rec.get("peak_angle_deg") is not None:
            printed.setdefault(rec["stream"], set()).add(rec["peak_angle_deg"])
    for r in result:
        stream = r["metric"]["stream"]
        assert r["metric"]["job"] == "lobewatch"
        scraped = round(float(r["value"][1]), 4)  # JSON Lines keep 4 decimals
        assert scraped in printed[stream], (stream, scraped, sorted(printed[stream])[-5:])
