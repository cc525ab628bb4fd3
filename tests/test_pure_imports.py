"""Pure statistics modules must not pull in the database, scheduler or dashboard stacks."""

import json
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
# Every module of the statistics sub-package, found on disk so a new one is covered too.
PURE = sorted(p.stem for p in (ROOT / "monitor" / "stats").glob("*.py") if p.stem != "__init__")
FORBIDDEN = ["sqlalchemy", "apscheduler", "streamlit"]

PROBE = """
import importlib, json, sys
importlib.import_module(sys.argv[1])
print(json.dumps(sorted(m for m in sys.modules if m.split('.')[0] in {forbidden!r})))
"""


def test_statistics_package_is_found():
    assert {"fixed", "boundaries", "summaries"} <= set(PURE)


@pytest.mark.parametrize("name", PURE)
def test_pure_module_imports_no_io_stack(name):
    module = f"monitor.stats.{name}"
    # A fresh interpreter: this test process may already hold sqlalchemy from other tests.
    proc = subprocess.run([sys.executable, "-c", PROBE.format(forbidden=set(FORBIDDEN)), module],
                          cwd=ROOT, capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    leaked = json.loads(proc.stdout.strip().splitlines()[-1])
    assert leaked == [], f"{module} imports {leaked}"


def test_probe_detects_a_leak():
    # The probe itself must be able to fail: importing the store schema loads sqlalchemy.
    proc = subprocess.run([sys.executable, "-c", PROBE.format(forbidden=set(FORBIDDEN)), "monitor.store.models"],
                          cwd=ROOT, capture_output=True, text=True, timeout=120)
    assert "sqlalchemy" in json.loads(proc.stdout.strip().splitlines()[-1])
