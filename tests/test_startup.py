"""The command line loads only what the command run needs (start-up time; untimed).

The timing itself is a benchmark (``tests/benchmarks/bench_startup.py``); these tests check the
cause: which packages a whole ``gapwatch`` process imports, read from the interpreter's own
import log (``PYTHONPROFILEIMPORTTIME``, the environment form of ``-X importtime``).
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

from monitor import cli

ROOT = Path(__file__).resolve().parents[1]
SCRIPT = Path(sys.executable).with_name("gapwatch")
GAPWATCH = [str(SCRIPT)] if SCRIPT.exists() else [sys.executable, "-m", "monitor"]

HEAVY = {"sqlalchemy", "alembic", "scipy", "numpy", "pandas", "streamlit", "apscheduler", "requests"}
# The project's own parts that a start must not reach either.
UNNEEDED = {"demo_db", "dashboard", "monitor.config", "monitor.store", "monitor.look", "monitor.service"}
WELCH = ["test", "welch", "--group1", "40,12.5,3.1", "--group2", "38,11.2,2.7"]


def imported_by(argv, *, expect_code=0) -> set:
    """Every module a whole gapwatch process running ``argv`` imported (names, nested ones too)."""
    env = dict(os.environ, PYTHONPROFILEIMPORTTIME="1")
    proc = subprocess.run(GAPWATCH + list(argv), cwd=ROOT, env=env, capture_output=True, text=True,
                          timeout=120)
    assert proc.returncode == expect_code, proc.stderr[-2000:]
    names = set()
    for line in proc.stderr.splitlines():
        if line.startswith("import time:") and "|" in line:
            name = line.rsplit("|", 1)[1].strip()
            if name != "package":  # the log's own header line
                names.add(name)
    assert names, "no import log: the interpreter ignored PYTHONPROFILEIMPORTTIME"
    return names


def reached(names, packages) -> set:
    """The members of ``packages`` (top-level names or dotted prefixes) found among ``names``."""
    return {p for p in packages if any(n == p or n.startswith(p + ".") for n in names)}


def test_help_loads_no_scientific_database_or_ui_stack():
    names = imported_by(["--help"])
    assert "monitor.cli" in names
    assert reached(names, HEAVY | UNNEEDED) == set()
    # Not one command module: --help lists them by name and summary only.
    assert not {n for n in names if n.startswith("monitor.commands.") and n != "monitor.commands._common"}


def test_a_fixed_sample_test_loads_the_statistics_only():
    names = imported_by(WELCH)
    assert {"scipy", "monitor.stats.fixed"} <= names
    assert reached(names, {"sqlalchemy", "alembic", "pandas", "streamlit", "apscheduler", "requests"}
                   | UNNEEDED) == set()


def test_the_import_log_sees_a_heavy_stack_when_one_is_loaded():
    # The probe can fail: `db current` on an in-memory store must show SQLAlchemy and Alembic.
    names = imported_by(["db", "current", "--store", "sqlite://"])
    assert {"sqlalchemy", "alembic"} <= reached(names, HEAVY)


@pytest.mark.parametrize("name", cli.COMMAND_MODULES)
def test_command_module_registers_without_heavy_imports(name, request):
    probe = (
        "import argparse, importlib, json, sys\n"
        f"module = importlib.import_module('monitor.commands.{name}')\n"
        "module.register(argparse.ArgumentParser().add_subparsers())\n"
        "print(json.dumps(sorted(sys.modules)))\n"
    )
    proc = subprocess.run([sys.executable, "-c", probe], cwd=ROOT, capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    loaded = reached(json.loads(proc.stdout), HEAVY | UNNEEDED)
    assert loaded == set(), f"monitor.commands.{name} imports {sorted(loaded)} when it registers"


def test_help_lists_every_command_as_the_full_parser_does():
    # The summaries have one home; the quick parser and the full one must say the same.
    quick = cli.build_parser(["--help"]).format_help()
    full = cli.build_parser().format_help()
    assert quick == full
    for name in cli.COMMAND_MODULES:
        assert f"    {name}" in quick


def test_only_the_named_command_is_registered_in_full(capsys):
    parser = cli.build_parser(["bounds", "--fractions", "1"])
    args = parser.parse_args(["bounds", "--fractions", "1"])
    assert args.fractions == "1" and args.func.__module__ == "monitor.commands.bounds"
    with pytest.raises(SystemExit) as stop:
        cli.main(["tset"])
    assert stop.value.code == 2 and "invalid choice: 'tset'" in capsys.readouterr().err


def test_every_command_module_has_its_summary():
    # --help lists commands from the summaries alone: a command module without one would be
    # unreachable. Add a new command's one-line help to SUMMARIES in monitor/commands/__init__.py.
    on_disk = {p.stem for p in (ROOT / "monitor" / "commands").glob("*.py") if not p.stem.startswith("_")}
    assert on_disk == set(cli.COMMAND_MODULES)
