"""Restarting a comparison: archive its active version so the next look starts a new one."""

from __future__ import annotations

from datetime import datetime

from ..store.engine import ensure_current
from ..store.plan_changes import restart_version

__all__ = ["restart_comparison"]


def restart_comparison(engine, name: str, *, made_at: datetime, made_by: str, reason: str = "",
                       from_start: bool = False) -> dict:
    """Archive the active version of a comparison; the next look starts version + 1.

    History is never rewritten: the archived version keeps its looks, cells and alerts.
    The next version reads only the data after the archived version's watermark, unless
    ``from_start`` (then the data already tested are tested again, and its first look says so).
    Returns ``{"name", "archived_version", "next_version", "from_start", "watermark"}``.
    """
    ensure_current(engine)
    return restart_version(engine, name, made_at=made_at, made_by=made_by, reason=reason, from_start=from_start)
