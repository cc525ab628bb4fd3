"""A SQLite source shared by many look threads, disposed while they read, must never crash.

The service and the demo read one ``Source`` from several scheduler threads and dispose it on a
configuration reload. With SQLAlchemy's SingletonThreadPool (its choice for a creator-built
``sqlite://`` engine) that closed connections other threads were still reading — a
segmentation fault inside libsqlite3. Run in a fresh interpreter with faulthandler on, so a
crash fails the test with its traceback instead of killing the suite.
"""

import subprocess
import sys
import textwrap
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]

STRESS = textwrap.dedent("""
    import faulthandler, sqlite3, sys, threading, time
    from datetime import datetime, timedelta, timezone
    faulthandler.enable()
    from monitor.source import Source, SourceSpec

    path = sys.argv[1]
    con = sqlite3.connect(path)
    con.execute("create table events (site text, seconds real, done_at text)")
    start = datetime(2026, 3, 1, tzinfo=timezone.utc)
    con.executemany("insert into events values (?, ?, ?)",
                    [("east" if i % 2 else "west", 100.0 + i % 17,
                      (start + timedelta(minutes=i)).isoformat()) for i in range(3000)])
    con.commit()
    con.close()
    source = Source(f"sqlite:///{path}")
    spec = SourceSpec(table="events", group_column="site", groups=("east", "west"),
                      value_column="seconds", time_column="done_at")
    cutoff = start + timedelta(days=3)
    stop, failures, reads = threading.Event(), [], [0]

    def reader():
        while not stop.is_set():
            try:
                source.read_cells(spec, None, cutoff)
                reads[0] += 1
            except Exception as error:  # a refused read is not a crash; count it
                failures.append(type(error).__name__)

    threads = [threading.Thread(target=reader) for _ in range(12)]
    for t in threads:
        t.start()
    end = time.monotonic() + float(sys.argv[2])
    while time.monotonic() < end:
        source.dispose()
        time.sleep(0.002)
    stop.set()
    for t in threads:
        t.join()
    print("reads", reads[0], "failures", len(failures))
""")


def test_many_threads_and_dispose_do_not_crash_a_sqlite_source(tmp_path):
    proc = subprocess.run([sys.executable, "-c", STRESS, str(tmp_path / "events.sqlite"), "4"],
                          cwd=ROOT, capture_output=True, text=True, timeout=180)
    assert proc.returncode == 0, proc.stderr[-3000:]
    words = proc.stdout.split()
    assert int(words[1]) > 0 and int(words[3]) == 0, proc.stdout
