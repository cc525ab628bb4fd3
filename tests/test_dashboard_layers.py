"""The dashboard sits on the read side: it imports the store's read functions, never a command."""

from __future__ import annotations

import ast
import importlib.util
from pathlib import Path

DASHBOARD = Path(__file__).resolve().parent.parent / "dashboard"
# What the dashboard may use of the monitor package: the read side, the shared vocabulary, and
# the configuration only to find the store.
ALLOWED = {"monitor.store.readback", "monitor.store.export", "monitor.vocabulary", "monitor.errors",
           "monitor.config"}


def _module(package, name):
    """``package.name`` when that is a module, else ``package`` (the name is an attribute of it)."""
    try:
        return f"{package}.{name}" if importlib.util.find_spec(f"{package}.{name}") else package
    except ModuleNotFoundError:  # package is a module, not a package
        return package


def _imports(path):
    tree = ast.parse(path.read_text(), filename=str(path))
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            yield from (alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            # "from monitor.store import readback" uses the module monitor.store.readback
            yield from (_module(node.module, alias.name) for alias in node.names)


def test_the_dashboard_reads_the_store_only_through_the_read_side():
    used = {(path.relative_to(DASHBOARD).as_posix(), name)
            for path in DASHBOARD.rglob("*.py") for name in _imports(path) if name.split(".")[0] == "monitor"}
    assert used  # the walk found the pages and modules
    assert {(path, name) for path, name in used if name not in ALLOWED} == set()
