"""Time the dashboard board on a large store: 200 comparisons sharing 5,000 looks.

Prints, in seconds:

* ``comparison_status`` alone (the read the board and ``gapwatch status`` make);
* the board page under Streamlit's AppTest: first run (cold caches: engine,
  config, query) and later runs (the query cached for about 5 s);
* the comparison page for one comparison (history of 25 looks, four charts);
* with ``--browser`` (Chromium from ``$GAPWATCH_CHROMIUM``): a fresh ``gapwatch dashboard``
  server, and how long the first page takes to be drawn in the browser after the server
  answers (and after the command starts), then the first comparison page.

The targets are the board's data load + render in under 2 s, and the first page drawn
within 3 s of the server answering; each figure is printed with its ratio to the target.
Run from the project root:

    python tests/benchmarks/bench_dashboard.py [--comparisons 200] [--looks 5000] [--url URL] [--browser]
"""

from __future__ import annotations

import argparse
import os
import socket
import statistics
import subprocess
import sys
import tempfile
import time
import urllib.request
from datetime import datetime, timezone
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path[:0] = [str(ROOT), str(ROOT / "tests")]

import sqlalchemy as sa  # noqa: E402

import store_seed  # noqa: E402
from monitor.store import readback  # noqa: E402


def _timed(fn, repeat):
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return times


def _report(label, times):
    print(f"{label:<46} median {statistics.median(times):7.3f} s   max {max(times):7.3f} s   (n={len(times)})")


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--comparisons", type=int, default=200)
    parser.add_argument("--looks", type=int, default=5000)
    parser.add_argument("--repeat", type=int, default=6)
    parser.add_argument("--url", help="an empty store to fill instead of a temporary SQLite file")
    parser.add_argument("--browser", action="store_true",
                        help="also time a fresh server's first pages in Chromium ($GAPWATCH_CHROMIUM)")
    args = parser.parse_args(argv)

    with tempfile.TemporaryDirectory() as folder:
        url = args.url or f"sqlite:///{Path(folder) / 'store.sqlite'}"
        config = Path(folder) / "gapwatch.toml"
        config.write_text(f'[store]\nurl = "{url}"\n')
        os.environ["GAPWATCH_CONFIG"] = str(config)

        start = time.perf_counter()
        store_seed.migrate(url)
        store_seed.seed_many(url, comparisons=args.comparisons, looks=args.looks,
                             now=datetime.now(timezone.utc))
        print(f"seeded {args.comparisons} comparisons / {args.looks} looks in {time.perf_counter() - start:.1f} s")

        engine = readback.open_store(url)
        with engine.connect() as conn:
            from monitor.store.models import Comparison, Look

            counted = (conn.execute(sa.select(sa.func.count()).select_from(Comparison)).scalar_one(),
                       conn.execute(sa.select(sa.func.count()).select_from(Look)).scalar_one())
        print(f"store holds {counted[0]} comparisons and {counted[1]} looks")
        rows = readback.comparison_status(engine)
        _report("comparison_status (readback alone)", _timed(lambda: readback.comparison_status(engine), args.repeat))
        name = rows[0]["name"]
        _report("look_history of one comparison", _timed(lambda: readback.look_history(engine, name), args.repeat))

        import logging

        from streamlit.testing.v1 import AppTest

        logging.getLogger("streamlit").setLevel(logging.ERROR)

        app = str(ROOT / "dashboard" / "app.py")
        import streamlit as st

        cold = []
        for _ in range(args.repeat):
            at = AppTest.from_file(app, default_timeout=120)
            st.cache_data.clear()
            st.cache_resource.clear()
            start = time.perf_counter()
            at.run()
            cold.append(time.perf_counter() - start)
            assert not at.exception, at.exception
        print(f"board page, first AppTest run in this process (imports Streamlit's page modules): {cold[0]:.3f} s")
        _report("board page, AppTest run, cold caches", cold[1:] or cold)
        warm_at = AppTest.from_file(app, default_timeout=120).run()
        _report("board page, AppTest rerun, cached query", _timed(warm_at.run, args.repeat))
        table = "".join(h.value for h in warm_at.get("html"))
        shown = table.count('<tr class="gw-row">')
        print(f"board table rows shown: {shown}")

        def comparison_page():
            st.cache_data.clear()
            at = AppTest.from_file(app, default_timeout=120)
            at.run()
            at.switch_page("views/comparison.py")
            at.query_params["name"] = name
            start = time.perf_counter()
            at.run()
            assert not at.exception, at.exception
            return time.perf_counter() - start

        _report("comparison page, AppTest run, cold query", [comparison_page() for _ in range(args.repeat)])
        engine.dispose()
        if args.browser:
            for _ in range(min(args.repeat, 3)):
                _first_render(config, Path(folder), name)


# How soon the first page must be drawn after the server answers (issue target).
FIRST_RENDER_TARGET = 3.0


def _first_render(config, folder, name):
    """A fresh server: seconds until Chromium shows the board, then a comparison page."""
    from playwright.sync_api import sync_playwright

    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    started = time.perf_counter()
    proc = subprocess.Popen([sys.executable, "-m", "monitor", "dashboard", "--config", str(config),
                             "--port", str(port)], cwd=folder, env=env,
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    base = f"http://127.0.0.1:{port}"
    try:
        while True:
            try:
                with urllib.request.urlopen(f"{base}/_stcore/health", timeout=2):
                    break
            except OSError:
                time.sleep(0.05)
        healthy = time.perf_counter()
        with sync_playwright() as p:
            browser = p.chromium.launch(executable_path=os.environ["GAPWATCH_CHROMIUM"],
                                        args=["--no-sandbox", "--disable-gpu"])
            page = browser.new_page(viewport={"width": 1440, "height": 1000})
            opened = time.perf_counter()
            page.goto(base + "/board")
            page.wait_for_selector("table.gw-board", timeout=120_000)
            board = time.perf_counter() - opened
            opened = time.perf_counter()
            page.goto(f"{base}/comparison?name={name}")
            page.wait_for_selector(".gw-reading", timeout=120_000)
            page.wait_for_selector("[data-testid=stVegaLiteChart] canvas, [data-testid=stVegaLiteChart] svg",
                                   state="attached", timeout=120_000)
            comparison = time.perf_counter() - opened
            browser.close()
    finally:
        proc.terminate()
        proc.wait(timeout=20)
    print(f"fresh server: answering {healthy - started:5.2f} s after the command; board drawn "
          f"{board:5.2f} s later ({board / FIRST_RENDER_TARGET:.2f} x the {FIRST_RENDER_TARGET:g} s target); "
          f"first comparison page {comparison:5.2f} s")


if __name__ == "__main__":
    main()
