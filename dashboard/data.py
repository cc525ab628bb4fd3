"""The dashboard's reads of the store: one engine per store, short-lived caches of each read.

Every number comes from ``monitor.store.readback``, the functions the command line prints
from. Reads are cached for a few seconds (``st.cache_data``) so a page and its refreshing
fragments share one query; a write clears them (``forget_cached_reads``).
"""

from __future__ import annotations

import os
from datetime import datetime, timezone

import streamlit as st

from monitor.config import store_url_from_config
from monitor.store import readback

__all__ = [
    "REFRESH_SECONDS",
    "config_path",
    "store_url",
    "engine",
    "clock_note",
    "now",
    "status_rows",
    "filtered_rows",
    "comparison",
    "history",
    "versions",
    "cells",
    "alerts",
    "forget_cached_reads",
    "acknowledge",
]

# How often the pages that show changing data read the store again.
REFRESH_SECONDS = 10
# How long one read is shared between page runs: shorter than the refresh, so each refresh is fresh.
_READ_TTL = 5


def config_path():
    return os.environ.get("GAPWATCH_CONFIG") or "gapwatch.toml"


@st.cache_resource(show_spinner=False)
def _engine(url):
    return readback.open_store(url)


@st.cache_data(ttl=60, show_spinner=False)
def _store_url(path):
    return store_url_from_config(path)


def store_url():
    return _store_url(config_path())


def engine():
    return _engine(store_url())


@st.cache_data(ttl=_READ_TTL, show_spinner=False)
def _reference(url):
    moment, note = readback.reference_time(_engine(url), datetime.now(timezone.utc))
    return moment.isoformat(), note


@st.cache_data(ttl=_READ_TTL, show_spinner=False)
def _liveness(url):
    return readback.monitor_liveness(_engine(url), now=datetime.now(timezone.utc))


def monitor_notice():
    """One sentence when no worker has looked for several intervals (a dead monitor), else None."""
    return _liveness(store_url())["message"]


def clock_note():
    """Why times are read against the newest look instead of this machine's clock, or None."""
    return _reference(store_url())[1]


def now():
    """The "now" of relative times: this machine's clock, unless the store's looks say otherwise."""
    moment, note = _reference(store_url())
    return datetime.fromisoformat(moment) if note else datetime.now(timezone.utc)


@st.cache_data(ttl=_READ_TTL, show_spinner=False)
def status_rows(url, include_archived=False):
    return readback.comparison_status(_engine(url), include_archived=include_archived)


@st.cache_data(ttl=_READ_TTL, show_spinner=False)
def filtered_rows(url, name_contains, states, since, until, archived):
    return readback.list_comparisons(
        _engine(url), name_contains=name_contains or None, states=list(states) or None,
        since=since, until=until, archived=archived,
    )


@st.cache_data(ttl=_READ_TTL, show_spinner=False)
def comparison(url, name, version=None):
    return readback.get_comparison(_engine(url), name, version)


@st.cache_data(ttl=_READ_TTL, show_spinner=False)
def history(url, name, version=None):
    return readback.look_history(_engine(url), name, version)


@st.cache_data(ttl=_READ_TTL, show_spinner=False)
def versions(url, name):
    return readback.list_versions(_engine(url), name)


@st.cache_data(ttl=_READ_TTL, show_spinner=False)
def cells(url, name, version=None):
    return readback.cells_by_kind(_engine(url), name, version)


@st.cache_data(ttl=_READ_TTL, show_spinner=False)
def alerts(url, states=()):
    return readback.list_alerts(_engine(url), list(states) or None)


def forget_cached_reads():
    """After a write, so the next read shows it."""
    for fn in (status_rows, filtered_rows, comparison, history, versions, cells, alerts, _reference, _liveness):
        fn.clear()


def acknowledge(alert_id, *, by, now):
    """Acknowledge one alert in the store and forget the cached reads; returns the alert as stored."""
    done = readback.acknowledge_alert(engine(), alert_id, by=by, now=now)
    forget_cached_reads()
    return done
