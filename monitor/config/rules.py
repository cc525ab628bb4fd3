"""What the validators of the configuration share: problems, value rules, the context.

A problem is raised inside a pydantic validator as :func:`keyed` (written after the key it
concerns: ``'alpha' must be …``) or :func:`whole` (a sentence naming its keys itself), and
written out by :func:`validate` as one line naming where it is and the key. Values echoed
in a message are shown as written in the file: a value taken from ``${NAME}`` appears as
``'${NAME}'``, never as the secret itself (:class:`FromEnvironment`).
"""

from __future__ import annotations

import difflib
import math
import re
from dataclasses import dataclass
from pathlib import Path
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from pydantic import BaseModel, ConfigDict, Field, ValidationError, ValidationInfo
from pydantic_core import PydanticCustomError

from ..vocabulary import parse_duration
from . import urls
from .urls import FromEnvironment  # noqa: F401 - the validators' modules take it from here

# Table, schema and column names: plain identifiers only. The source quotes them
# anyway; refusing anything else here stops a typo (or an injection attempt)
# before it reaches a database.
IDENTIFIER = re.compile(r"^[A-Za-z_][A-Za-z0-9_$]{0,127}$")


def plain(value):
    """The value with every :class:`FromEnvironment` turned back into ordinary text."""
    if isinstance(value, str):
        return str.__str__(value)
    if isinstance(value, dict):
        return {k: plain(v) for k, v in value.items()}
    if isinstance(value, list):
        return [plain(v) for v in value]
    if isinstance(value, tuple):
        return tuple(plain(v) for v in value)
    return value



# ---------------------------------------------------------------- problems


def keyed(text: str) -> PydanticCustomError:
    """A problem written after the key it concerns: ``'alpha' must be …``."""
    return PydanticCustomError("keyed", "{text}", {"text": text})


def whole(text: str) -> PydanticCustomError:
    """A problem that names its keys itself."""
    return PydanticCustomError("whole", "{text}", {"text": text})


def closest(key, allowed):
    match = difflib.get_close_matches(key, sorted(allowed), n=1, cutoff=0.75)
    return match[0] if match else None


def unknown_keys(where, table, allowed) -> list[str]:
    """``where: unknown key 'x' (did you mean 'y'?)`` for each key not in ``allowed``."""
    out = []
    for key in table:
        if key not in allowed:
            hint = closest(key, allowed)
            extra = f" (did you mean {hint!r}?)" if hint else ""
            out.append(f"{where}: unknown key {key!r}{extra}")
    return out


def messages(error: ValidationError, where: str, model, *, missing="is required") -> list[str]:
    out = []
    for e in error.errors(include_url=False, include_input=False):
        names = [part for part in e["loc"] if isinstance(part, str)]
        key = names[-1] if names else ""
        kind = e["type"]
        if kind == "whole":
            out.append(f"{where}: {e['ctx']['text']}")
        elif kind == "keyed":
            out.append(f"{where}: '{key}' {e['ctx']['text']}")
        elif kind == "missing":
            out.append(f"{where}: '{key}' {missing}")
        elif kind == "extra_forbidden":
            out.extend(unknown_keys(where, [key], model.model_fields))
        else:  # pragma: no cover - every field has its own validator; kept so nothing is lost
            out.append(f"{where}: '{key}' {e['msg']}")
    return out


def validate(model, data, where, context, **kwargs):
    """(model instance or None, problems) for one table."""
    try:
        return model.model_validate(data, context=context), []
    except ValidationError as exc:
        return None, messages(exc, where, model, **kwargs)


# ---------------------------------------------------------------- shared value rules


def is_number(value) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)


def is_whole(value) -> bool:
    return isinstance(value, int) and not isinstance(value, bool)


def float_or_none(value):
    return float(value) if is_number(value) else None


def identifier(value):
    if value is not None and (not isinstance(value, str) or not IDENTIFIER.match(value)):
        raise keyed(f"must be a plain identifier (letters, digits, '_'); got {value!r}")
    return value


def one_of(value, allowed):
    if value not in allowed:
        raise keyed(f"{value!r} is not one of {', '.join(allowed)}")
    return value


def duration(value, *, key=None):
    """``value`` if it is a duration; the problem names ``key`` followed by a colon when given."""
    try:
        parse_duration(value)
    except ValueError as exc:
        raise (whole(f"'{key}': {exc}") if key else keyed(f"{exc}")) from None
    return value


def database_url(value, folder: Path):
    try:
        return urls.database_url(value, folder)
    except ValueError as problem:
        raise keyed(str(problem)) from None


@dataclass(frozen=True)
class Context:
    """What the validators of one file share: where it is, what it names, the raw comparison."""

    folder: Path
    sources: tuple = ()
    channels: tuple = ()
    table: dict | None = None

    def raw(self, key, default=None):
        return (self.table or {}).get(key, default)

    @property
    def metric(self):
        return self.raw("metric", "mean")

    @property
    def method(self):
        return self.raw("method", "proportions" if self.metric == "proportion" else "welch")

    @property
    def alternative(self):
        return self.raw("alternative", "two-sided")

    @property
    def clustered(self):
        return self.raw("cluster_by") is not None or self.raw("cluster_column") is not None


def ctx(info: ValidationInfo) -> Context:
    """The :class:`Context` a validator runs in."""
    return info.context


class Part(BaseModel):
    """A section of the file, or a part of a comparison: frozen, unknown keys refused.

    Every key has a ``mode="before"`` validator, so our rule (and our wording) sees the
    value as written before pydantic's own conversion does.
    """

    model_config = ConfigDict(frozen=True, extra="forbid")


def checked(default=None):
    """A key with a default whose rule runs even when the key is absent (rules across keys)."""
    return Field(default=default, validate_default=True)


def zone_or_none(name):
    """The time zone of that name, or None when there is none."""
    try:
        if not isinstance(name, str) or not name:
            raise ValueError
        return ZoneInfo(name)
    except (ZoneInfoNotFoundError, ValueError, OSError):
        return None
