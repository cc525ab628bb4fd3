"""The demo folder: source databases, the gapwatch configuration and the history store.

Everything the demo writes lives in one folder. It holds a ``.gitignore`` of
``*`` so that a demo folder made inside a checkout is never committed.
"""

from __future__ import annotations

import shutil
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path

from monitor.config import toml_value
from monitor.store.engine import make_engine, upgrade
from monitor.store.readback import comparison_status

from .feed import create_databases, database_path, fed_until
from .scenario import COMPANY, DATABASES, DEFAULT_SEED, LIVE_START

__all__ = ["CONFIG_NAME", "STORE_NAME", "LOG_NAME", "DemoFolder", "comparisons", "config_text", "prepare_folder",
           "is_demo_folder", "folder_seed"]

CONFIG_NAME = "gapwatch.toml"
STORE_NAME = "gapwatch-store.sqlite"
LOG_NAME = "gapwatch-demo.log"
MARKER_NAME = ".gapwatch-demo"


# Real seconds between looks: short, so a newcomer sees the looks happen.
# The schedules run on real time; the data and every look's as_of run on the
# feed's simulated clock.
_COMPARISONS = [
    {
        "name": "pick-seconds",
        "description": "Seconds per order line picked, Hollin Cross minus Saltmarsh Lane, before and after "
                       "Hollin Cross's new pick path went live on Wednesday 06:00. Hollin Cross, an older "
                       "building, was slower long before; the two weeks before the change are the baseline.",
        "source": "warehouse", "table": "pick_tasks", "group_column": "site",
        "labels": ["Hollin Cross", "Saltmarsh Lane"], "unit": "s",
        "groups": ["hollin", "saltmarsh"], "value_column": "seconds", "time_column": "finished_at",
        "metric": "mean", "method": "welch", "alternative": "two-sided", "alpha": 0.05,
        "spending": "obrien-fleming", "start": "2026-03-04T06:00:00+00:00", "baseline": "14d",
        "difference": -8.0, "sd": 52.0, "power": 0.8, "day_sd": 3.0, "events_per_day": 1400,
        "min_clusters": 4, "valid_range": [1, 3600], "every": "2s",
    },
    {
        "name": "desk-first-contact",
        "description": "Share of contacts resolved on first contact, Desk Wren minus Desk Heron. "
                       "Wren trials a new knowledge base; does it resolve more?",
        "source": "service", "table": "contacts", "group_column": "desk",
        "labels": ["Desk Wren", "Desk Heron"],
        "groups": ["wren", "heron"], "value_column": "resolved", "time_column": "closed_at",
        "metric": "proportion", "method": "proportions", "alternative": "greater", "alpha": 0.05,
        "spending": "obrien-fleming", "p1": 0.78, "p2": 0.74, "power": 0.9, "looks": 10,
        "futility": True, "every": "3s",
    },
    {
        "name": "line-daily-output",
        "description": "Cases packed per hour, Line 5 minus Line 2, matched day by day "
                       "(both lines share each day's supply and crew).",
        "source": "plant", "table": "line_output", "group_column": "line",
        "labels": ["Line 5", "Line 2"], "unit": "cases/h",
        "groups": ["line-5", "line-2"], "value_column": "cases", "time_column": "hour_ending",
        "metric": "mean", "method": "paired", "pair_by": "day", "alternative": "two-sided",
        "alpha": 0.05, "spending": "obrien-fleming", "planned_per_group": 12,
        "valid_range": [0, 900], "every": "4s",
    },
    {
        "name": "fill-giveaway",
        "description": "Grams per 1 kg bag, filling head 1 minus head 2; the filler's sigma "
                       "(2.4 g per head) is known from its acceptance test. Does head 1 overfill?",
        "source": "plant", "table": "fill_checks", "group_column": "head",
        "labels": ["Head 1", "Head 2"], "unit": "g",
        "groups": ["head-1", "head-2"], "value_column": "grams", "time_column": "weighed_at",
        "metric": "mean", "method": "z", "sigmas": [2.4, 2.4], "alternative": "greater",
        "alpha": 0.05, "spending": "obrien-fleming", "planned_per_group": 2600,
        "valid_range": [950, 1050], "every": "3s",
    },
    {
        "name": "delivery-lateness",
        "description": "Minutes after the promised window opened, Hollin Cross vans minus "
                       "Saltmarsh Lane vans. Drops on one day share its weather and traffic, "
                       "so the day is the unit of evidence.",
        "source": "warehouse", "table": "deliveries", "group_column": "depot",
        "labels": ["Hollin Cross", "Saltmarsh Lane"], "unit": "min",
        "groups": ["hollin", "saltmarsh"], "value_column": "minutes_late", "time_column": "delivered_at",
        "metric": "mean", "method": "welch", "alternative": "two-sided", "alpha": 0.05,
        "spending": "obrien-fleming", "planned_per_group": 1100, "cluster_by": "day",
        "min_clusters": 4, "valid_range": [-240, 720], "every": "4s",
    },
    {
        "name": "returns-grading",
        "description": "Minutes to grade one returned item, bench 1 minus bench 2. "
                       "Bench 2 only opens on Thursday 09:00: until then there is nothing to compare.",
        "source": "warehouse", "table": "returns_grading", "group_column": "bench",
        "labels": ["Bench 1", "Bench 2"], "unit": "min",
        "groups": ["bench-1", "bench-2"], "value_column": "minutes", "time_column": "graded_at",
        "metric": "mean", "method": "welch", "alternative": "two-sided", "alpha": 0.05,
        "spending": "obrien-fleming", "planned_per_group": 1500,
        "valid_range": [0.1, 240], "every": "4s",
    },
    {
        "name": "qc-defect-rate",
        "description": "Defects per unit packed (a ratio of sums over batches), Line 5 minus Line 2. "
                       "Line 5's sealing jaws were refitted; does it pack cleaner?",
        "source": "plant", "table": "packing_qc", "group_column": "line",
        "groups": ["line-5", "line-2"], "labels": ["Line 5", "Line 2"], "unit": "defects per unit",
        "metric": "ratio", "numerator_column": "defects",
        "denominator_column": "units", "time_column": "packed_at", "alternative": "two-sided",
        "alpha": 0.05, "spending": "obrien-fleming", "planned_per_group": 1200,
        "valid_range": [0, 500], "every": "4s",
    },
]

# Shared by every comparison: the integer primary key grows with each insert,
# and ten simulated minutes of grace before a look's cutoff.
_COMMON = {"arrival_column": "id", "lateness": "10m"}




def comparisons() -> list[dict]:
    """The demo comparisons as configuration dicts (a copy)."""
    return [dict(c, **_COMMON) for c in _COMPARISONS]


def config_text() -> str:
    """The demo's ``gapwatch.toml``: every path relative to the folder it is written in."""
    lines = [
        f"# gapwatch demo: {COMPANY}, an invented grocery distributor. Written by `gapwatch demo`;",
        "# every file named here lives in this folder (relative paths are read against it).",
        "",
        "[store]",
        f'url = "sqlite:///{STORE_NAME}"',
        "",
    ]
    for database in DATABASES:
        lines += [f"[sources.{database}]", f'url = "sqlite:///{database}.sqlite"', ""]
    lines += [
        "[service]",
        # Claims run on real time; the source-health alert on the simulated clock.
        "lease_seconds = 60",
        'unreachable_alert_after = "6h"',
        'config_poll = "5s"',
        "",
        "[channels.ops-log]",
        'type = "log"',
        "",
    ]
    for comparison in comparisons():
        lines.append("[[comparison]]")
        for key, value in comparison.items():
            lines.append(f"{key} = {toml_value(value)}")
        lines.append("")
    return "\n".join(lines)


@dataclass(frozen=True)
class DemoFolder:
    path: Path
    config_path: Path
    store_url: str
    start: datetime          # where the simulated clock starts this run
    created: bool            # True when the databases were made now, False when resumed
    rows: dict               # rows inserted by creation ({} when resumed)


# From the top of a checkout the default folder `demo_db/` is this package's own source folder:
# the demo then writes its databases beside the generator's code, and leaves the code alone.
# The checkout may not be where gapwatch is installed from (an installed copy, another clone),
# so the source folder is recognised by its files, not by being this very package.
PACKAGE_FOLDER = Path(__file__).resolve().parent
PACKAGE_FILES = {p.name for p in PACKAGE_FOLDER.iterdir() if p.suffix == ".py" or p.name == "__pycache__"}


def _is_scenario_source(path: Path) -> bool:
    """Whether ``path`` holds this package's source (the ``demo_db/`` of a checkout)."""
    return path == PACKAGE_FOLDER or all(
        (path / name).is_file() for name in ("__init__.py", "scenario.py", "feed.py", "folder.py"))


def is_demo_folder(path: Path) -> bool:
    return (Path(path) / MARKER_NAME).exists()


def _clear(path: Path) -> None:
    """Remove what a previous demo wrote, and nothing else."""
    names = [CONFIG_NAME, STORE_NAME, LOG_NAME, MARKER_NAME, ".gitignore", "dashboard.log"]
    for database in DATABASES:
        names += [f"{database}.sqlite", f"{database}.sqlite-wal", f"{database}.sqlite-shm"]
    names += [f"{STORE_NAME}-wal", f"{STORE_NAME}-shm", f"{STORE_NAME}-journal"]
    for name in names:
        target = path / name
        if target.is_dir():
            shutil.rmtree(target)
        elif target.exists():
            target.unlink()


def prepare_folder(folder, *, reset: bool = False, seed: int = DEFAULT_SEED) -> DemoFolder:
    """Create (or, with ``reset``, re-create) the demo in ``folder``; resume it when it exists.

    A folder that holds files but no earlier demo is refused (``FileExistsError``)
    so the demo never writes over somebody's files. A resumed clock starts at
    the later of where the feed stopped and the store's latest look, so no
    look is ever taken at an earlier ``as_of`` than one already recorded.
    """
    path = Path(folder).resolve()
    if path.exists() and not path.is_dir():
        raise NotADirectoryError(f"{path} is not a folder")
    inside_package = _is_scenario_source(path)
    existing = path.exists() and any(p.name not in PACKAGE_FILES or not inside_package for p in path.iterdir())
    if existing and not is_demo_folder(path):
        raise FileExistsError(f"{path} holds files that are not a gapwatch demo; choose an empty or new folder")
    if existing and reset:
        _clear(path)
    path.mkdir(parents=True, exist_ok=True)

    created = not all(database_path(path, db).exists() for db in DATABASES)
    rows = {}
    if created:
        _clear(path)
        (path / MARKER_NAME).write_text(f"seed = {seed}\n")
        if not inside_package:
            # In the scenario's own source folder the repository's .gitignore covers these files.
            (path / ".gitignore").write_text("# written by gapwatch demo: nothing here belongs in version control\n*\n")
        rows = create_databases(path, seed=seed)
        start = LIVE_START
    else:
        start = fed_until(path)
        if start is None:
            raise FileExistsError(f"{path} holds an unfinished demo; run again with --reset")
    config_path = path / CONFIG_NAME
    config_path.write_text(config_text())
    store_url = f"sqlite:///{path / STORE_NAME}"
    upgrade(store_url)
    if not created:
        latest = _latest_look(store_url)
        if latest is not None and latest > start:
            start = latest
    return DemoFolder(path, config_path, store_url, start, created, rows)


def _latest_look(store_url):
    engine = make_engine(store_url)
    try:
        times = [row["last_look_at"] for row in comparison_status(engine, include_archived=True)]
    finally:
        engine.dispose()
    times = [datetime.fromisoformat(t) if isinstance(t, str) else t for t in times if t]
    return max(times) if times else None


def folder_seed(folder) -> int:
    """The seed a demo folder was made with (the default when unreadable)."""
    try:
        text = (Path(folder) / MARKER_NAME).read_text()
        return int(text.split("=", 1)[1])
    except (OSError, ValueError, IndexError):
        return DEFAULT_SEED
