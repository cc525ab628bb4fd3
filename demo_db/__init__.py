"""The gapwatch demo: an invented operations scenario, its source databases and a live feed.

``gapwatch demo`` builds everything in one folder (see ``monitor/commands/demo.py``).
"""

from .feed import LiveFeed, SimulatedClock, create_databases, database_url, fed_until
from .scenario import COMPANY, DEFAULT_SEED, EPOCH, LIVE_START, TABLES, day_events, events_between, table_spec

__all__ = [
    "COMPANY", "DEFAULT_SEED", "EPOCH", "LIVE_START", "TABLES",
    "day_events", "events_between", "table_spec",
    "LiveFeed", "SimulatedClock", "create_databases", "database_url", "fed_until",
]
