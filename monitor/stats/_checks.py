"""Argument checks shared by the public edges of the statistics modules.

Each check converts a caller's value or raises :class:`InvalidArgumentError`
with a message that names the argument and echoes the value as given, so one
wording reaches the library caller and the CLI user alike. Arguments come
value first, name second, as at the call sites (``finite(mean1, "mean1")``).

Pure module: imports only ``monitor.errors``.
"""

from __future__ import annotations

import math
import numbers

from ..errors import InvalidArgumentError

ALTERNATIVES = ("two-sided", "greater", "less")
# Intervals for a difference of two rates (here, beside ALTERNATIVES, so the command line can
# offer both as choices without loading scipy).
INTERVALS = ("newcombe", "wald")


def check_alternative(alternative):
    """``alternative`` itself, if it is one of :data:`ALTERNATIVES`."""
    if alternative not in ALTERNATIVES:
        raise InvalidArgumentError(
            f"alternative must be one of {', '.join(ALTERNATIVES)}; got {alternative!r}"
        )
    return alternative


def _float(value, name, expected):
    # A bool is refused although float(True) works: a flag where a number belongs is a
    # caller's mistake, not the number 1.
    if isinstance(value, bool):
        raise InvalidArgumentError(f"{name} must be {expected}; got {value!r}")
    try:
        return float(value)
    except (TypeError, ValueError):
        raise InvalidArgumentError(f"{name} must be {expected}; got {value!r}") from None


def finite(value, name):
    """``value`` as a finite float."""
    number = _float(value, name, "a number")
    if not math.isfinite(number):
        raise InvalidArgumentError(f"{name} must be finite; got {value!r}")
    return number


def open_unit(value, name):
    """``value`` as a float strictly between 0 and 1 (a level, a power, a rate)."""
    number = _float(value, name, "a number in (0, 1)")
    if not 0.0 < number < 1.0:
        raise InvalidArgumentError(f"{name} must be in (0, 1); got {value!r}")
    return number


def whole(value, name, minimum):
    """``value`` as an int of at least ``minimum``; only integer types pass (no 3.0, no True)."""
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < minimum:
        raise InvalidArgumentError(f"{name} must be a whole number of at least {minimum}; got {value!r}")
    return int(value)
