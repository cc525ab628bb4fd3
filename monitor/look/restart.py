"""Restarting a comparison: archive its active version so the next look starts a new one."""

from __future__ import annotations

from ..store.engine import ensure_current
from ..store.looks import archive_active

__all__ = ["restart_comparison"]


def restart_comparison(engine, name: str) -> dict:
    """Archive the active version of a comparison; the next look starts version + 1.

    History is never rewritten: the archived version keeps its looks, cells and alerts.
    Returns ``{"name", "archived_version", "next_version"}``.
    """
    ensure_current(engine)
    version = archive_active(engine, name)
    return {"name": name, "archived_version": version, "next_version": version + 1}
