"""Time the dashboard board on a large store: 200 comparisons sharing 5,000 looks.

Prints, in seconds:

* ``comparison_status`` alone (the read the board and ``gapwatch status`` make);
* the board page under Streamlit's AppTest: first run (cold caches: engine,
  config, query) and later runs (the query cached for about 5 s);
* the comparison page for one comparison (history of 25 looks, four charts).

The target is the board's data load + render in under 2 s. Run from the
project root:

    python tests/benchmarks/bench_dashboard.py [--comparisons 200] [--looks 5000] [--postgres URL]
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import tempfile
import time
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


if __name__ == "__main__":
    main()
