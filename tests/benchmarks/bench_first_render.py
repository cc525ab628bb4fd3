"""Time the dashboard's first render after start, on the demo's store, in headless Chromium.

Builds the demo in a temporary folder and rehearses it (``--hours`` of simulated time, one look
per comparison every ``--step`` hours: a real store written by the real look), starts Chromium
once, then, ``--repeat`` times, starts a fresh ``gapwatch dashboard`` on it and measures:

* **answering**: seconds from the command's start until the server answers its health check;
* **board**: seconds from then (the browser opens ``/board`` at once) until its table is drawn;
* **start to board**: the two together, what a lead waits after starting the dashboard;
* **comparison**: a first comparison page (headline, reading and a drawn chart) after that.

and, alternating with it, the same steps for a **bare** Streamlit page (one small HTML table,
nothing imported, nothing read): what Streamlit and the browser cost on this machine before
gapwatch does anything. The target is start to board within 3 s (the median of the starts).
The browser is already running when the command starts and asks for the page as soon as the
server answers, so the server gets no idle time the measurement does not count (its
background loading of the board's modules is timed in full). The machine's load average is
printed before and after: on a shared machine every figure moves with it, the bare page's too.
Chromium is ``--chromium`` (default ``$GAPWATCH_CHROMIUM``, else the ``chromium`` on the PATH);
nothing is downloaded. Run from the project root:

    python tests/benchmarks/bench_first_render.py [--hours 48] [--repeat 5]
"""

from __future__ import annotations

import argparse
import os
import shutil
import socket
import statistics
import subprocess
import sys
import tempfile
import time
import urllib.request
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path[:0] = [str(ROOT)]

from demo_db.rehearsal import rehearse  # noqa: E402

# The first complete render after the command starts (the target, seconds; median).
TARGET = 3.0
CHROMIUM_ARGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync", "--no-first-run"]


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _wait_answering(base, proc, seconds=120):
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            raise RuntimeError(f"the dashboard exited with {proc.returncode}")
        try:
            with urllib.request.urlopen(f"{base}/_stcore/health", timeout=2):
                return
        except OSError:
            time.sleep(0.05)
    raise TimeoutError(f"no answer from {base} in {seconds} s")


_BARE_PAGE = ('import streamlit as st\n'
              'st.html(\'<table class="gw-board"><tr class="gw-row"><td>bare</td></tr></table>\')\n')


def one_start(config: Path, folder: Path, browser, name: str | None) -> dict:
    """A fresh server on the store (``name`` None: the bare page): the seconds of each step."""
    port = _free_port()
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    env.pop("GAPWATCH_DASHBOARD_PASSWORD", None)
    if name is None:
        page_file = folder / "bare_page.py"
        page_file.write_text(_BARE_PAGE)
        command = [sys.executable, "-m", "streamlit", "run", str(page_file), "--server.headless", "true",
                   "--server.port", str(port), "--server.address", "127.0.0.1",
                   "--browser.gatherUsageStats", "false"]
    else:
        command = [sys.executable, "-m", "monitor", "dashboard", "--config", str(config), "--port", str(port)]
    page = browser.new_page(viewport={"width": 1440, "height": 1000})
    started = time.perf_counter()
    proc = subprocess.Popen(command, cwd=folder, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    base = f"http://127.0.0.1:{port}"
    try:
        _wait_answering(base, proc)
        answering = time.perf_counter() - started
        page.goto(base + ("/board" if name is not None else "/"))
        page.wait_for_selector("table.gw-board tr.gw-row", timeout=120_000)
        board = time.perf_counter() - started - answering
        measured = {"answering": answering, "board": board, "start to board": answering + board}
        if name is not None:
            opened = time.perf_counter()
            page.goto(f"{base}/comparison?name={name}")
            page.wait_for_selector(".gw-reading", timeout=120_000)
            page.wait_for_selector("[data-testid=stVegaLiteChart] canvas, [data-testid=stVegaLiteChart] svg",
                                   state="attached", timeout=120_000)
            measured["comparison"] = time.perf_counter() - opened
    finally:
        page.close()
        proc.terminate()
        try:
            proc.wait(timeout=20)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()
    return measured


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--hours", type=float, default=48.0, help="simulated hours the demo runs (default 48)")
    parser.add_argument("--step", type=float, default=2.0, help="simulated hours between looks (default 2)")
    parser.add_argument("--repeat", type=int, default=5, help="fresh starts measured (default 5)")
    parser.add_argument("--chromium", default=os.environ.get("GAPWATCH_CHROMIUM") or shutil.which("chromium"),
                        help="the Chromium to drive (default: $GAPWATCH_CHROMIUM, else chromium on the PATH)")
    args = parser.parse_args(argv)
    # lazy: only the benchmark itself needs the browser driver.
    from playwright.sync_api import sync_playwright

    with tempfile.TemporaryDirectory(prefix="gapwatch-first-render-") as folder:
        folder = Path(folder)
        start = time.perf_counter()
        rehearsal = rehearse(folder, hours=args.hours, step_hours=args.step)
        looks = sum(len(v) for v in rehearsal.looks.values())
        print(f"demo store: {len(rehearsal.looks)} comparisons, {looks} looks "
              f"({args.hours:g} simulated hours) built in {time.perf_counter() - start:.1f} s")
        name = next(iter(rehearsal.looks))
        load_before = os.getloadavg()
        runs, bare = [], []
        with sync_playwright() as p:
            browser = p.chromium.launch(executable_path=args.chromium, args=CHROMIUM_ARGS)
            try:
                for _ in range(args.repeat):  # alternating, so the machine's load touches both alike
                    runs.append(one_start(folder / "gapwatch.toml", folder, browser, name))
                    bare.append(one_start(folder / "gapwatch.toml", folder, browser, None))
            finally:
                browser.close()
        load_after = os.getloadavg()
    print(f"load average (1, 5, 15 min) on {os.cpu_count()} cores: before "
          f"{', '.join(f'{x:.1f}' for x in load_before)}; after {', '.join(f'{x:.1f}' for x in load_after)}")
    for label, measured in (("gapwatch", runs), ("bare page", bare)):
        for key in ("answering", "board", "start to board", "comparison"):
            values = [r[key] for r in measured if key in r]
            if values:
                print(f"{label:<10} {key:<16} median {statistics.median(values):6.2f} s   "
                      f"max {max(values):6.2f} s   each {' '.join(f'{v:.2f}' for v in values)}")
    total = statistics.median(r["start to board"] for r in runs)
    floor = statistics.median(r["start to board"] for r in bare)
    print(f"start to board: {total:.2f} s = {total / TARGET:.2f} x the {TARGET:g} s target; a bare Streamlit "
          f"page takes {floor:.2f} s from start to drawn here (gapwatch adds {total - floor:+.2f} s)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
