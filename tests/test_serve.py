"""``lobewatch serve``: options, process ownership, and the page in a real headless browser.

The browser tests start ``lobewatch serve -- demo`` on a free loopback port and drive
Debian's Chromium with Playwright (``executable_path`` pointing at that browser).  They
skip only when no Chromium is installed and CI has not asked for it
(``LOBEWATCH_REQUIRE_CHROMIUM=1`` turns a missing browser into a failure).  Every wait
is bounded; no test asserts how long anything took.
"""

from __future__ import annotations

import asyncio
import os
import re
import shutil
import signal
import socket
import subprocess
import sys
import time
from collections.abc import Iterator
from pathlib import Path

import psutil
import pytest

from tui.cli import UsageError, main
from tui.commands.serve import is_loopback, parse_listen, screen_command
from tui.web.server import end_process_group

ROOT = Path(__file__).resolve().parent.parent
CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
CHROMIUM_FLAGS = ["--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                  "--disable-background-networking", "--disable-component-update",
                  "--disable-sync"]


# -- options -------------------------------------------------------------------------
def test_listen_parses_host_and_port() -> None:
    assert parse_listen("127.0.0.1:8000") == ("127.0.0.1", 8000)
    assert parse_listen("[::1]:9000") == ("::1", 9000)
    for bad in ("8000", "127.0.0.1:", "127.0.0.1:70000", "host:port"):
        with pytest.raises(UsageError):
            parse_listen(bad)


def test_loopback_is_told_apart_from_reachable_addresses() -> None:
    assert is_loopback("127.0.0.1") and is_loopback("127.8.0.1") and is_loopback("::1")
    assert is_loopback("localhost")
    assert not is_loopback("0.0.0.0") and not is_loopback("192.0.2.7")  # RFC 5737 address


def test_only_screen_commands_are_served() -> None:
    assert screen_command(["--", "demo", "--speed", "4"]) == ["demo", "--speed", "4"]
    with pytest.raises(UsageError, match="not a screen command"):
        screen_command(["--", "report", "x.csv"])
    with pytest.raises(UsageError, match="--headless"):
        screen_command(["live", "tcp://127.0.0.1:5557", "--headless"])
    with pytest.raises(UsageError, match="after `--`"):
        screen_command([])


def test_serve_options_after_the_command_are_refused_not_passed_on() -> None:
    # `lobewatch serve demo --listen H:P` would hand --listen to the demo screen
    with pytest.raises(UsageError, match="--listen is an option of serve"):
        screen_command(["demo", "--listen", "127.0.0.1:8765"])
    with pytest.raises(UsageError, match="--title is an option of serve"):
        screen_command(["--", "demo", "--title=x"])


def test_reachable_listen_needs_insecure_listen(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["serve", "--listen", "0.0.0.0:8000", "--", "demo"]) == 2
    err = capsys.readouterr().err
    assert "--insecure-listen" in err and "no login" in err and err.count("\n") == 1


# -- process ownership ---------------------------------------------------------------
def test_process_group_ends_even_when_the_leader_ignores_sigterm() -> None:
    """A leader that ignores SIGTERM and a child it started both end (SIGKILL escalation)."""
    code = ("import signal, subprocess, sys, time\n"
            "signal.signal(signal.SIGTERM, signal.SIG_IGN)\n"
            "c = subprocess.Popen([sys.executable, '-c', 'import time; time.sleep(60)'])\n"
            "print(c.pid, flush=True)\n"
            "time.sleep(60)\n")

    async def scenario() -> tuple[int | None, int]:
        proc = await asyncio.create_subprocess_exec(
            sys.executable, "-c", code, stdout=asyncio.subprocess.PIPE,
            start_new_session=True)
        assert proc.stdout is not None
        child_pid = int((await proc.stdout.readline()).decode())
        rc = await end_process_group(proc, quit_grace_s=0.1, term_grace_s=0.5)
        return rc, child_pid

    rc, child_pid = asyncio.run(scenario())
    assert rc == -signal.SIGKILL
    assert _gone([child_pid], within_s=10.0)


# -- the real thing: server, browser, screen processes ---------------------------------
def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _describe(pids: list[int]) -> str:
    """What the processes are doing, for a failure message."""
    out = []
    for pid in pids:
        try:
            p = psutil.Process(pid)
            out.append(f"{pid}: {p.status()} ppid {p.ppid()} {_cmdline(p)[:80]!r}")
        except psutil.NoSuchProcess:
            out.append(f"{pid}: gone")
    return "; ".join(out)


def _gone(pids: list[int], within_s: float) -> bool:
    """Whether every pid has ended (or is a zombie) before a bounded wait runs out."""
    deadline = time.monotonic() + within_s
    while time.monotonic() < deadline:
        alive = []
        for pid in pids:
            try:
                if psutil.Process(pid).status() != psutil.STATUS_ZOMBIE:
                    alive.append(pid)
            except psutil.NoSuchProcess:
                pass
        if not alive:
            return True
        time.sleep(0.1)
    return False


def _cmdline(p: psutil.Process) -> str:
    """A child's command line, or "" once it has exited (a zombie has none)."""
    try:
        return " ".join(p.cmdline())
    except (psutil.NoSuchProcess, psutil.ZombieProcess, psutil.AccessDenied):
        return ""


def _screens(server_pid: int) -> list[psutil.Process]:
    return [p for p in psutil.Process(server_pid).children(recursive=True)
            if "tui.cli" in _cmdline(p)]


def _wait_screens(server_pid: int, count: int, within_s: float = 30.0) -> list[int]:
    deadline = time.monotonic() + within_s
    while time.monotonic() < deadline:
        pids = [p.pid for p in _screens(server_pid)]
        if len(pids) >= count:
            return pids
        time.sleep(0.1)
    raise AssertionError(f"expected {count} screen processes, saw {len(_screens(server_pid))}")


@pytest.fixture
def chromium() -> str:
    if CHROMIUM is None:
        if os.environ.get("LOBEWATCH_REQUIRE_CHROMIUM"):
            pytest.fail("Chromium is required here (LOBEWATCH_REQUIRE_CHROMIUM) but missing")
        pytest.skip("no Chromium installed (apt-get install chromium)")
    return CHROMIUM


@pytest.fixture
def served_demo(tmp_path: Path) -> Iterator[tuple[subprocess.Popen[str], str]]:
    port = _free_port()
    env = dict(os.environ, XDG_DATA_HOME=str(tmp_path))
    proc = subprocess.Popen(
        [sys.executable, "-m", "tui.cli", "serve", "--listen", f"127.0.0.1:{port}", "--",
         "demo"],
        cwd=tmp_path, env=env, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
    assert proc.stdout is not None
    first = proc.stdout.readline()
    assert f"http://127.0.0.1:{port}/" in first, first
    assert "ssh -L" in proc.stdout.readline()
    deadline = time.monotonic() + 20
    while time.monotonic() < deadline:  # bounded wait for the listening socket
        with socket.socket() as s:
            if s.connect_ex(("127.0.0.1", port)) == 0:
                break
        time.sleep(0.1)
    try:
        yield proc, f"http://127.0.0.1:{port}/"
    finally:
        if proc.poll() is None:
            proc.kill()
        proc.wait(timeout=10)


def _launch(playwright, executable: str):  # noqa: ANN001, ANN202 - Playwright types
    return playwright.chromium.launch(executable_path=executable, args=CHROMIUM_FLAGS,
                                      timeout=60_000)


def _text(frames: list[bytes | str]) -> str:
    return "".join(f.decode("utf-8", "replace") if isinstance(f, bytes) else f
                   for f in frames)


@pytest.mark.timeout(180)
def test_browser_shows_the_live_beam_and_takes_keys(
        chromium: str, served_demo: tuple[subprocess.Popen[str], str], tmp_path: Path) -> None:
    from PIL import Image, ImageStat
    from playwright.sync_api import sync_playwright

    proc, url = served_demo
    frames: list[bytes | str] = []
    requests: list[str] = []
    with sync_playwright() as pw:
        browser = _launch(pw, chromium)
        page = browser.new_page(viewport={"width": 1100, "height": 720})
        page.on("request", lambda r: requests.append(r.url))
        page.on("websocket", lambda ws: ws.on("framereceived", lambda f: frames.append(f)))
        page.goto(url)
        page.wait_for_function("document.body.classList.contains('-first-byte')",
                               timeout=60_000)

        def seen(pred, what: str) -> None:  # noqa: ANN001
            deadline = time.monotonic() + 60
            while time.monotonic() < deadline and not pred(_text(frames)):
                page.wait_for_timeout(200)
            assert pred(_text(frames)), what

        # braille beam cells (U+2800..U+28FF) and a degree reading reach the terminal
        seen(lambda t: sum(0x2800 < ord(c) <= 0x28FF for c in t) > 200, "braille cells")
        seen(lambda t: re.search(r"[+-]?\d+\.\d°", t) is not None, "a bearing in degrees")
        shot = tmp_path / "browser.png"
        page.screenshot(path=str(shot))

        before = len(frames)
        page.click("#terminal")
        page.keyboard.press("p")
        deadline = time.monotonic() + 30
        while time.monotonic() < deadline and "paused" not in _text(frames[before:]).lower():
            page.wait_for_timeout(200)
        assert "paused" in _text(frames[before:]).lower(), "the p key paused the display"
        browser.close()

    with Image.open(shot) as img:
        assert img.size == (1100, 720)
        spread = ImageStat.Stat(img.convert("L")).stddev[0]
        assert spread > 10, f"screenshot looks blank (grey-level spread {spread:.1f})"
    outside = [u for u in requests if not u.startswith(url) and not u.startswith("data:")]
    assert requests and not outside, f"the page fetched from elsewhere: {outside}"


@pytest.mark.timeout(180)
def test_closing_a_tab_ends_its_screen_and_sigterm_ends_the_rest(
        chromium: str, served_demo: tuple[subprocess.Popen[str], str]) -> None:
    from playwright.sync_api import sync_playwright

    proc, url = served_demo
    with sync_playwright() as pw:
        browser = _launch(pw, chromium)
        first, second = browser.new_page(), browser.new_page()
        first.goto(url)
        second.goto(url)
        pids = _wait_screens(proc.pid, 2)
        assert len(pids) == 2, "each tab runs a screen process of its own"
        first.close()
        closed = [p for p in pids if p not in [q.pid for q in _screens(proc.pid)]]
        deadline = time.monotonic() + 30
        while not closed and time.monotonic() < deadline:
            time.sleep(0.1)
            closed = [p for p in pids if p not in [q.pid for q in _screens(proc.pid)]]
        assert len(closed) == 1 and _gone(closed, within_s=30), _describe(closed)
        left = [p for p in pids if p not in closed]
        proc.send_signal(signal.SIGTERM)
        assert proc.wait(timeout=30) == 0
        assert _gone(left, within_s=30), "SIGTERM to the server ended the remaining screen"
        browser.close()


@pytest.mark.timeout(180)
def test_a_killed_server_takes_its_screens_along(
        chromium: str, served_demo: tuple[subprocess.Popen[str], str]) -> None:
    from playwright.sync_api import sync_playwright

    proc, url = served_demo
    with sync_playwright() as pw:
        browser = _launch(pw, chromium)
        page = browser.new_page()
        page.goto(url)
        pids = _wait_screens(proc.pid, 1)
        proc.kill()  # a crash: no chance to clean up
        proc.wait(timeout=10)
        assert _gone(pids, within_s=30), "the screen process outlived its server"
        browser.close()
