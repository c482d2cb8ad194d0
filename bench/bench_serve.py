"""What each browser viewer of ``lobewatch serve`` costs: CPU and memory per screen process.

Starts ``lobewatch serve -- demo`` on a free loopback port, opens 1 and then 3 tabs in
headless Chromium (Debian's, driven by Playwright), lets the screens settle, then samples
every screen process's CPU time and resident memory over a fixed window.  Prints a small
table (medians over the screens) and the server's own figures.

    python bench/bench_serve.py [--window-s 10] [--viewers 1 3]
"""

from __future__ import annotations

import argparse
import shutil
import socket
import subprocess
import sys
import time

import psutil


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _cmdline(p: psutil.Process) -> str:
    try:
        return " ".join(p.cmdline())
    except (psutil.NoSuchProcess, psutil.ZombieProcess, psutil.AccessDenied):
        return ""  # exited while being listed


def _screens(server: psutil.Process) -> list[psutil.Process]:
    return [p for p in server.children(recursive=True) if "tui.cli" in _cmdline(p)]


def measure(viewers: int, window_s: float, chromium: str) -> dict[str, float]:
    from playwright.sync_api import sync_playwright

    port = _free_port()
    proc = subprocess.Popen([sys.executable, "-m", "tui.cli", "serve", "--listen",
                             f"127.0.0.1:{port}", "--", "demo"],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        time.sleep(2.0)
        server = psutil.Process(proc.pid)
        with sync_playwright() as pw:
            browser = pw.chromium.launch(executable_path=chromium,
                                         args=["--no-sandbox", "--disable-gpu",
                                               "--disable-background-networking"])
            pages = [browser.new_page(viewport={"width": 1100, "height": 720})
                     for _ in range(viewers)]
            for page in pages:
                page.goto(f"http://127.0.0.1:{port}/")
            time.sleep(6.0)  # screens start and fill their history
            screens = _screens(server)
            cpu0 = {p.pid: sum(p.cpu_times()[:2]) for p in screens}
            srv0 = sum(server.cpu_times()[:2])
            t0 = time.monotonic()
            time.sleep(window_s)
            dt = time.monotonic() - t0
            cpu = sorted(100 * (sum(p.cpu_times()[:2]) - cpu0[p.pid]) / dt for p in screens)
            rss = sorted(p.memory_info().rss / 2**20 for p in screens)
            srv_cpu = 100 * (sum(server.cpu_times()[:2]) - srv0) / dt
            srv_rss = server.memory_info().rss / 2**20
            browser.close()
    finally:
        proc.terminate()
        proc.wait(timeout=20)
    return {"viewers": viewers, "screens": len(cpu), "cpu_pct_median": cpu[len(cpu) // 2],
            "rss_mb_median": rss[len(rss) // 2], "server_cpu_pct": srv_cpu,
            "server_rss_mb": srv_rss}


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--window-s", type=float, default=10.0)
    ap.add_argument("--viewers", type=int, nargs="+", default=[1, 3])
    args = ap.parse_args()
    chromium = shutil.which("chromium")
    if chromium is None:
        print("no chromium: apt-get install chromium", file=sys.stderr)
        return 1
    print("viewers  screens  CPU %/screen  RSS MB/screen  server CPU %  server RSS MB")
    for n in args.viewers:
        r = measure(n, args.window_s, chromium)
        print(f"{r['viewers']:7d}  {r['screens']:7d}  {r['cpu_pct_median']:12.1f}  "
              f"{r['rss_mb_median']:13.1f}  {r['server_cpu_pct']:12.1f}  "
              f"{r['server_rss_mb']:13.1f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
