"""The source: read-only SQL aggregates over an operational events table.

``spec``        what to read and what a read returns (SourceSpec, Watermark, SlotCell, Batch)
``times``       how a time column stores events; cutoffs written the same way
``binding``     configured values bound as SQL parameters
``columns``     the table as the database declares it
``statements``  the SQLAlchemy Core statements of a read
``checking``    what ``Source.check`` reports about times, indexes and sessions
``dialects/``   what differs between databases, one small variant each
``reader``      ``Source``: one read-only connection and its reads
"""

from .reader import Source
from .spec import EXCLUSION_REASONS, FILTER_OPERATORS, SLOT_SECONDS, VALUE_LIMIT, Batch, SlotCell, SourceSpec, Watermark

__all__ = [
    "SLOT_SECONDS",
    "EXCLUSION_REASONS",
    "FILTER_OPERATORS",
    "VALUE_LIMIT",
    "SourceSpec",
    "Watermark",
    "SlotCell",
    "Batch",
    "Source",
]
