"""What the demo's terminal tells a new user: times, bad rows, a taken port, the end of the story."""

from __future__ import annotations

import os
import re
import socket
import subprocess
import sys
from datetime import datetime
from pathlib import Path

import pytest
import sqlalchemy as sa

from demo_db.folder import CONFIG_NAME, STORE_NAME

ROOT = Path(__file__).resolve().parents[1]
LINE = re.compile(r"^  \[(?P<when>\w{3} \d\d \w{3} \d\d:\d\d) UTC, simulated\] (?P<name>[\w-]+): .*?, "
                  r"look (?P<look>\d+)(?P<rest>.*)$")


def _demo(folder, *args, cwd, timeout=240):
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
    return subprocess.run([sys.executable, "-m", "monitor", "demo", "--dir", str(folder), *args],
                          cwd=cwd, env=env, capture_output=True, text=True, timeout=timeout)


def _history(folder):
    from monitor.store.engine import make_engine
    from monitor.store.readback import comparison_status, look_history

    engine = make_engine(f"sqlite:///{folder / STORE_NAME}")
    try:
        return {row["name"]: look_history(engine, row["name"]) for row in comparison_status(engine)}
    finally:
        engine.dispose()


@pytest.mark.slow
def test_state_lines_carry_the_recorded_look_time_and_the_bad_rows(tmp_path):
    done = _demo(tmp_path / "demo", "--no-dashboard", "--duration", "20", cwd=tmp_path)
    assert done.returncode == 0, done.stdout[-3000:] + done.stderr[-3000:]
    history = _history(tmp_path / "demo")
    lines = [m for m in map(LINE.match, done.stdout.splitlines()) if m]
    assert lines, done.stdout
    for m in lines:
        look = history[m["name"]][int(m["look"]) - 1]
        recorded = datetime.fromisoformat(look["as_of"])
        # The stamp is the as_of the look recorded, to the minute shown.
        assert m["when"] == recorded.strftime("%a %d %b %H:%M"), (m.group(0), look["as_of"])
        if look["excluded_total"]:
            assert f"bad rows {look['excluded_total']} (" in m["rest"], m.group(0)
    # The backlog holds bad rows for every comparison, so the terminal shows them.
    assert "bad rows " in done.stdout


def _listening_port():
    server = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
    server.bind(("127.0.0.1", 0))
    server.listen()
    return server, server.getsockname()[1]


@pytest.mark.slow
def test_a_taken_dashboard_port_is_replaced_and_said(tmp_path):
    server, port = _listening_port()
    try:
        done = _demo(tmp_path / "demo", "--duration", "12", "--port", str(port), cwd=tmp_path)
    finally:
        server.close()
    assert done.returncode == 0, done.stdout[-3000:] + done.stderr[-3000:]
    moved = re.search(rf"port {port} is in use; the dashboard takes port (\d+) instead", done.stdout)
    assert moved, done.stdout[:2000]
    assert f"dashboard: http://127.0.0.1:{moved.group(1)}/" in done.stdout
    assert "the dashboard exited" not in done.stdout


def test_the_dashboard_command_refuses_a_taken_port(tmp_path, capsys):
    from live_helpers import migrated_store
    from monitor.cli import main

    store = f"sqlite:///{tmp_path / 'store.sqlite'}"
    migrated_store(store).dispose()
    config = tmp_path / "gapwatch.toml"
    config.write_text(f'[store]\nurl = "{store}"\n')
    server, port = _listening_port()
    try:
        code = main(["dashboard", "--config", str(config), "--port", str(port)])
    finally:
        server.close()
    err = capsys.readouterr().err
    assert code == 2 and f"--port {port}" in err and "in use" in err and len(err.strip().splitlines()) == 1


@pytest.mark.slow
def test_the_demo_says_when_every_comparison_has_stopped(tmp_path):
    folder = tmp_path / "demo"
    first = _demo(folder, "--no-dashboard", "--duration", "8", cwd=tmp_path)
    assert first.returncode == 0, first.stdout[-3000:] + first.stderr[-3000:]
    assert "every comparison has stopped" not in first.stdout
    from monitor.store.models import Comparison

    engine = sa.create_engine(f"sqlite:///{folder / STORE_NAME}")
    with engine.begin() as conn:  # as if each had reached its decision
        conn.execute(sa.update(Comparison).values(state="plan_complete"))
    engine.dispose()
    again = _demo(folder, "--no-dashboard", "--duration", "8", cwd=tmp_path)
    assert again.returncode == 0, again.stdout[-3000:] + again.stderr[-3000:]
    said = again.stdout.split("every comparison has stopped", 1)
    assert len(said) == 2, again.stdout[-3000:]
    assert "Ctrl-C" in said[1] and f"GAPWATCH_CONFIG=demo/{CONFIG_NAME} " in said[1] and " restart NAME" in said[1]
    assert f"demo --dir {folder} --reset" in said[1]
