"""The source: read-only SQL aggregates over the events table.

``from monitor.source import Source`` keeps working; the reader lives in ``reader.py``.
"""

from .reader import *  # noqa: F401,F403
from .reader import __all__  # noqa: F401
