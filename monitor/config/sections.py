"""Validation of the file's sections: ``[store]``, ``[sources]``, ``[service]``, ``[channels]``, the whole.

One typed model per section (pydantic), one validator per key; the comparisons are
checked part by part in :mod:`monitor.config.comparison`.
"""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

from pydantic import field_validator

from ..vocabulary import parse_duration
from .comparison import ComparisonTable, check_comparison
from .model import CHANNEL_TYPES, DEFAULT_STORE_URL, ChannelConfig, Config, ServiceConfig, SourceConfig
from .rules import (Context, Part, checked, ctx, database_url, duration, is_whole, keyed, plain, unknown_keys,
                    validate)

__all__ = ["check_config", "config_keys"]

_TOP_KEYS = ("store", "sources", "service", "channels", "comparison")


class StoreTable(Part):
    """``[store]``: where the history lives."""

    url: str = checked(DEFAULT_STORE_URL)

    @field_validator("url", mode="before")
    @classmethod
    def _url(cls, value, info):
        return database_url(value, ctx(info).folder)


class SourceTable(Part):
    """``[sources.NAME]``: a source database, read only."""

    url: str

    @field_validator("url", mode="before")
    @classmethod
    def _url(cls, value, info):
        return database_url(value, ctx(info).folder)


class ServiceTable(Part):
    """``[service]``: settings of ``gapwatch run``."""

    lease_seconds: int = 120
    alert_max_attempts: int = 8
    unreachable_alert_after: float = checked("15m")
    retry_max_backoff: float = checked("10m")
    config_poll: float = checked("30s")

    @field_validator("lease_seconds", "alert_max_attempts", mode="before")
    @classmethod
    def _positive(cls, value):
        if not is_whole(value) or value < 1:
            raise keyed(f"must be a positive integer; got {value!r}")
        return value

    @field_validator("unreachable_alert_after", "retry_max_backoff", "config_poll", mode="before")
    @classmethod
    def _seconds(cls, value, info):
        return parse_duration(duration(value, key=info.field_name))


# ---------------------------------------------------------------- channels


class _Channel(Part):
    timeout: float | None = None

    @field_validator("timeout", mode="before")
    @classmethod
    def _timeout(cls, value):
        return parse_duration(duration(value, key="timeout"))


class LogChannel(_Channel):
    """``type = "log"``: a log file or the service's log."""

    path: Any = None
    level: Any = None


class WebhookChannel(_Channel):
    """``type = "webhook"``: an HTTP POST, optionally signed."""

    url: str
    secret: Any = None
    headers: Any = None

    @field_validator("url", mode="before")
    @classmethod
    def _url(cls, value):
        if not isinstance(value, str) or not re.match(r"^https?://", value):
            raise keyed(f"must be an http(s) URL; got {value!r}")
        return value


class EmailChannel(_Channel):
    """``type = "email"``: SMTP."""

    host: Any
    port: int
    sender: Any
    recipients: list
    user: Any = None
    password: Any = None
    starttls: bool | None = None
    ssl: bool | None = None

    @field_validator("port", mode="before")
    @classmethod
    def _port(cls, value):
        if not is_whole(value) or not 0 < value < 65536:
            raise keyed(f"must be an integer in 1..65535; got {value!r}")
        return value

    @field_validator("recipients", mode="before")
    @classmethod
    def _recipients(cls, value):
        if not isinstance(value, list) or not value or not all(isinstance(r, str) and "@" in r for r in value):
            raise keyed(f"must be a non-empty list of addresses; got {value!r}")
        return value

    @field_validator("starttls", "ssl", mode="before")
    @classmethod
    def _flag(cls, value):
        if not isinstance(value, bool):
            raise keyed(f"must be true or false; got {value!r}")
        return value


_CHANNEL_MODELS = {"log": LogChannel, "webhook": WebhookChannel, "email": EmailChannel}


def check_channel(name, table, context) -> tuple[ChannelConfig | None, list[str]]:
    where = f"channel {name!r}"
    if not isinstance(table, dict):
        return None, [f"{where}: must be a table with a 'type'"]
    kind = table.get("type")
    if kind not in CHANNEL_TYPES:
        return None, [f"{where}: 'type' {kind!r} is not one of {', '.join(CHANNEL_TYPES)}"]
    options = {k: v for k, v in table.items() if k != "type"}
    model, problems = validate(_CHANNEL_MODELS[kind], options, where, context,
                                missing=f"is required for a {kind} channel")
    if "timeout" in options and model is not None:
        options["timeout"] = model.timeout
    return ChannelConfig(name, kind, plain(options)), problems




# ---------------------------------------------------------------- the whole file


def _section(data, key, where, problems) -> dict:
    value = data.get(key, {})
    if not isinstance(value, dict):
        problems.append(f"{where}: {key!r} must be a table; got {value!r}")
        return {}
    return value


def config_keys() -> set[str]:
    """Every key a ``[[comparison]]``, a channel or ``[service]`` may hold (the README names each)."""
    keys = set(ComparisonTable.keys()) | set(ServiceTable.model_fields)
    for model in _CHANNEL_MODELS.values():
        keys |= set(model.model_fields)
    return keys


def _sources(tables: dict, context, problems) -> dict:
    sources = {}
    for name, table in tables.items():
        where = f"source {name!r}"
        if not isinstance(table, dict):
            problems.append(f"{where}: must be a table with a 'url'")
            continue
        source, found = validate(SourceTable, table, where, context)
        problems += found
        if source is not None:
            sources[name] = SourceConfig(name, plain(source.url))
        elif "url" in table:
            sources[name] = SourceConfig(name, "")  # named, so comparisons naming it are not told otherwise
    return sources


def _channels(tables: dict, context, problems) -> dict:
    channels = {}
    for name, table in tables.items():
        channel, found = check_channel(name, table, context)
        problems += found
        if channel is not None:
            channels[name] = channel
    return channels


def _comparisons(raw, context, problems) -> tuple:
    if not isinstance(raw, list):
        problems.append("top level: 'comparison' must be an array of tables ([[comparison]])")
        return ()
    comparisons, seen = [], set()
    for index, table in enumerate(raw):
        name, comparison, found = check_comparison(index, table, context)
        problems += found
        if name is None:
            continue
        if name in seen:
            problems.append(f"comparison {name!r}: 'name' is used by another comparison")
            continue
        seen.add(name)
        if comparison is not None:
            comparisons.append(comparison)
    return tuple(comparisons)


def check_config(data: dict, path: Path, problems: list) -> Config:
    """The file's :class:`Config`; every problem found is appended to ``problems``."""
    folder = path.resolve().parent
    context = Context(folder=folder)
    problems += unknown_keys("top level", data, _TOP_KEYS)
    store, found = validate(StoreTable, _section(data, "store", "[store]", problems), "[store]", context)
    problems += found
    sources = _sources(_section(data, "sources", "[sources]", problems), context, problems)
    channels = _channels(_section(data, "channels", "[channels]", problems), context, problems)
    service, found = validate(ServiceTable, _section(data, "service", "[service]", problems), "[service]",
                              context)
    problems += found
    context = Context(folder=folder, sources=tuple(sources), channels=tuple(channels))
    comparisons = _comparisons(data.get("comparison", []), context, problems)
    return Config(path=path, store_url=plain(store.url) if store else "", sources=sources,
                  comparisons=comparisons, channels=channels,
                  service=ServiceConfig(**service.model_dump()) if service else ServiceConfig())
