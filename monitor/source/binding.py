"""Bound values: configured groups, filter values, cutoffs and arrivals as SQL parameters.

Nothing a user configures is ever written into SQL text; it is bound, coerced to
the column's Python type where that is unambiguous.
"""

from __future__ import annotations

import re
from datetime import date, datetime
from decimal import Decimal

import sqlalchemy as sa

__all__ = ["literal", "literals", "bind_type", "bind_like", "is_numeric_type"]


def literal(value):
    """A bound value; integers bind as BIGINT so large ids and epochs survive a typed bind cast."""
    if isinstance(value, int) and not isinstance(value, bool):
        return sa.literal(value, sa.BigInteger())
    return sa.literal(value)


def literals(values):
    """Bound values rendered one by one: an "expanding" IN list would be re-rendered on every execution."""
    return [literal(v) for v in values]


def bind_type(value):
    """The SQL type of a bound cutoff or arrival value (decides the driver's bind cast)."""
    if isinstance(value, bool):
        return sa.Boolean()
    if isinstance(value, int):
        return sa.BigInteger()
    if isinstance(value, float):
        return sa.Float()
    if isinstance(value, Decimal):
        return sa.Numeric()
    if isinstance(value, datetime):
        return sa.DateTime(timezone=value.tzinfo is not None)
    if isinstance(value, date):
        return sa.Date()
    return sa.String()


def bind_like(column_type, value):
    """Coerce a configured value to the column's Python type where that is unambiguous."""
    if value is None:
        return None
    try:
        python_type = column_type.python_type
    except NotImplementedError:
        return value
    if python_type is int and isinstance(value, str) and re.fullmatch(r"[+-]?\d+", value.strip()):
        return int(value)
    if python_type is str and isinstance(value, (int, float)) and not isinstance(value, bool):
        return str(value)
    if python_type is Decimal and isinstance(value, float):
        return Decimal(repr(value))
    return value


def is_numeric_type(column_type) -> bool:
    return isinstance(column_type, (sa.Integer, sa.Numeric, sa.Float)) and not isinstance(column_type, sa.Boolean)
