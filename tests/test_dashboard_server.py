"""The dashboard's server entry (``python -m dashboard``): the store check beside the server's start."""

from __future__ import annotations

import os
import socket
import subprocess
import sys
from pathlib import Path

import pytest

from dashboard import __main__ as server_entry
from live_helpers import migrated_store
from monitor.commands import dashboard as dashboard_command

ROOT = Path(__file__).resolve().parent.parent
BOARD_MODULES = ("dashboard.data", "dashboard.style", "dashboard.tables", "dashboard.formats")


def _free_port():
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


def test_the_check_announces_a_good_store_and_loads_the_board_modules(tmp_path):
    store = f"sqlite:///{tmp_path / 'store.sqlite'}"
    migrated_store(store).dispose()
    config = tmp_path / "gapwatch.toml"
    config.write_text(f'[store]\nurl = "{store}"\n')
    said, waited = [], []
    usual = sys.getswitchinterval()
    server_entry.check_store_and_warm(str(config), lambda: said.append("announced"),
                                      listening=lambda: waited.append("listening"))
    assert waited == ["listening"] and said == ["announced"]
    assert sys.getswitchinterval() == usual  # the quicker hand-over lasts only while loading
    assert all(name in sys.modules for name in BOARD_MODULES)


def test_the_streamlit_options_are_read_from_the_server_command():
    command = dashboard_command.streamlit_command(port=8123, address="0.0.0.0")
    arguments = command[3:]
    assert server_entry._option(arguments, "--server.port", "8501") == "8123"
    assert server_entry._option(arguments, "--server.address", "127.0.0.1") == "0.0.0.0"
    assert server_entry._option(["run", "app.py"], "--server.port", "8501") == "8501"


@pytest.mark.parametrize("store_text, words", [
    ('url = "sqlite:///missing/store.sqlite"', "does not exist"),
    (None, "no gapwatch schema yet"),
], ids=["folder missing", "store not migrated"])
def test_a_store_that_cannot_be_read_ends_the_dashboard_with_one_line(tmp_path, store_text, words):
    config = tmp_path / "gapwatch.toml"
    if store_text is None:  # an empty SQLite file: a store without the schema
        (tmp_path / "empty.sqlite").touch()
        store_text = f'url = "sqlite:///{tmp_path / "empty.sqlite"}"'
    config.write_text(f"[store]\n{store_text}\n")
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    done = subprocess.run(
        [sys.executable, "-m", "monitor", "dashboard", "--config", str(config), "--port", str(_free_port())],
        capture_output=True, text=True, env=env, cwd=tmp_path, timeout=120,
    )
    assert done.returncode == 2, done.stderr
    # One line of ours (beside Streamlit's own start-up log), worded as every command words a
    # problem; the address was never announced.
    ours = [line for line in done.stderr.splitlines() if line.startswith("gapwatch")]
    assert len(ours) == 1 and ours[0].startswith("gapwatch dashboard: ") and words in ours[0], done.stderr
    assert "on http://" not in done.stderr and "Traceback" not in done.stderr
