"""Exceptions raised by gapwatch.

Each one refines the builtin it is closest to, so callers that only know the
builtin still catch it. The CLI turns them into one-line messages and a
non-zero exit status.
"""

__all__ = [
    "GapwatchError",
    "InvalidArgumentError",
    "ConfigError",
    "DesignChangedError",
    "SourceUnavailableError",
    "SourceSchemaError",
    "StoreBehindError",
    "StoreUnavailableError",
    "LookAlreadyRecordedError",
    "ClaimHeldError",
    "UnknownComparisonError",
    "UnknownSpendingError",
    "ReplanRefusedError",
    "AlertDeliveryError",
]


class GapwatchError(Exception):
    """Base class of every error gapwatch raises on purpose."""


class InvalidArgumentError(GapwatchError, ValueError):
    """A caller passed a value outside what a function accepts."""


class UnknownSpendingError(InvalidArgumentError):
    """A spending-function specification names no known family."""


class ReplanRefusedError(InvalidArgumentError):
    """A change of plan cannot keep the false-alarm rate (plan ended, stopped, or no alpha left)."""


class ConfigError(GapwatchError, ValueError):
    """The configuration file is invalid; ``problems`` lists every problem found."""

    def __init__(self, problems, path=None):
        self.problems = list(problems)
        self.path = path
        where = f"{path}: " if path else ""
        super().__init__("\n".join(f"{where}{p}" for p in self.problems))


class DesignChangedError(GapwatchError, ValueError):
    """The configured design of a comparison differs from the one frozen at its first look."""


class SourceUnavailableError(GapwatchError, ConnectionError):
    """The source database could not be reached or refused the query."""


class SourceSchemaError(GapwatchError, LookupError):
    """A table or column named in the configuration is missing or of an unusable type."""


class StoreBehindError(GapwatchError, RuntimeError):
    """The history store's schema is older (or newer) than this version of gapwatch expects."""


class StoreUnavailableError(GapwatchError, ConnectionError):
    """The history store could not be reached."""


class AsOfBeforeLastLookError(InvalidArgumentError):
    """A look's as-of is earlier than the comparison's last look: history never goes back."""


class LookAlreadyRecordedError(GapwatchError, RuntimeError):
    """Another process recorded this look number first; nothing was written."""


class ClaimHeldError(GapwatchError, RuntimeError):
    """Another worker holds the claim on this comparison."""


class UnknownComparisonError(GapwatchError, KeyError):
    """No comparison of that name exists in the configuration or the store."""

    def __str__(self):
        return str(self.args[0]) if self.args else "unknown comparison"


class AlertDeliveryError(GapwatchError, RuntimeError):
    """An alert channel failed to deliver (the delivery is retried later)."""
