"""The demo's threads (live feed + service over every comparison) under load, faulthandler on.

A SQLite connection shared across threads or closed under another thread's read crashes inside
libsqlite3 (seen as a segmentation fault of the demo's monitor process on a loaded machine).
This runs the real demo in a fresh interpreter with ``-X faulthandler`` for a bounded time while
busy processes compete for the cores, and asks for a clean exit and consistent looks: a crash
fails the test with the C-level traceback faulthandler prints.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest
import sqlalchemy as sa

ROOT = Path(__file__).resolve().parents[1]
BUSY = "import time\nend = time.monotonic() + float(__import__('sys').argv[1])\nwhile time.monotonic() < end: pass\n"


@pytest.mark.slow
def test_demo_threads_under_load_exit_cleanly_with_consistent_looks(tmp_path):
    from demo_db.folder import STORE_NAME
    from monitor.store.models import Comparison, Look

    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    seconds = 20
    load = [subprocess.Popen(["nice", "-n", "15", sys.executable, "-c", BUSY, str(seconds + 5)]) for _ in range(2)]
    try:
        done = subprocess.run(
            [sys.executable, "-X", "faulthandler", "-m", "monitor", "demo", "--dir", str(tmp_path / "demo"),
             "--no-dashboard", "--duration", str(seconds), "--speed", "7200"],
            cwd=tmp_path, env=env, capture_output=True, text=True, timeout=240)
    finally:
        for p in load:
            p.kill()
            p.wait()
    output = done.stdout[-3000:] + done.stderr[-3000:]
    assert "Fatal Python error" not in done.stderr and "Segmentation fault" not in done.stderr, output
    assert done.returncode == 0, output

    engine = sa.create_engine(f"sqlite:///{tmp_path / 'demo' / STORE_NAME}")
    try:
        with engine.connect() as conn:
            rows = conn.execute(sa.select(Comparison.name, Comparison.version, Look.look_number, Look.as_of,
                                          Look.n1, Look.n2)
                                .join(Look, Look.comparison_id == Comparison.id)
                                .order_by(Comparison.id, Look.look_number)).all()
    finally:
        engine.dispose()
    by_version: dict = {}
    for name, version, number, as_of, n1, n2 in rows:
        by_version.setdefault((name, version), []).append((number, as_of, n1, n2))
    assert len(by_version) >= 5, sorted(by_version)
    for key, looks in by_version.items():
        assert [lk[0] for lk in looks] == list(range(1, len(looks) + 1)), key
        assert all(a[1] <= b[1] and a[2] <= b[2] and a[3] <= b[3] for a, b in zip(looks, looks[1:])), key
