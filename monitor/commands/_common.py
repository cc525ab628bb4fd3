"""What several commands share: the ``--config`` option, the store it names, and output."""

from __future__ import annotations

import argparse
import json
import os
import shutil
import sys
from pathlib import Path

CONFIG_HELP = "configuration file (default $GAPWATCH_CONFIG, else ./gapwatch.toml)"


def add_config_option(parser, **kwargs) -> None:
    """``--config FILE``, worded the same on every command."""
    kwargs.setdefault("help", CONFIG_HELP)
    parser.add_argument("--config", metavar="FILE", default=None, **kwargs)


def readback():
    """``monitor.store.readback``, the store's read side, imported on first use."""
    # lazy: start-up time of the command line (the store stack is SQLAlchemy and Alembic).
    from ..store import readback as module

    return module


def open_store(config_path):
    """The history store engine named by the configuration at ``config_path`` (None: the default search).

    Checked to be at the schema this code expects (``StoreBehindError`` otherwise).
    """
    # Every command module is loaded to build the parser, and most commands never open the store.
    # lazy: so the command line does not pay for SQLAlchemy at start.
    from ..config import store_url_from_config
    from ..store.engine import open_store as open_checked

    return open_checked(store_url_from_config(config_path))


def counted(count, noun, plural=None) -> str:
    """``"1 comparison"``, ``"3 comparisons"``: a count with its noun in the right number."""
    return f"{count} {noun if count == 1 else (plural or noun + 's')}"


def print_json(value) -> None:
    """``value`` as indented JSON on standard output; a nan that slipped through fails loudly."""
    json.dump(value, sys.stdout, indent=2, allow_nan=False)
    sys.stdout.write("\n")


def aligned_lines(headers, body):
    """A header line and one line per row, columns padded to their widest cell."""
    widths = [max(len(h), *(len(row[i]) for row in body)) if body else len(h) for i, h in enumerate(headers)]
    return ["  ".join(cell.ljust(w) for cell, w in zip(line, widths)).rstrip() for line in [headers, *body]]


def whole_number_type(low, high=None):
    """An argparse ``type`` accepting a whole number in ``[low, high]`` (no upper limit when ``high`` is None)."""

    def parse(text):
        try:
            value = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"must be a whole number; got {text!r}") from None
        if high is None and value < low:
            raise argparse.ArgumentTypeError(f"must be {low} or more; got {text!r}")
        if high is not None and not low <= value <= high:
            raise argparse.ArgumentTypeError(f"must be between {low} and {high}; got {text!r}")
        return value

    return parse


def path_as_typed(path) -> str:
    """A path as the user would type it here: relative when inside the current folder."""
    absolute = os.path.abspath(path)
    relative = os.path.relpath(absolute)
    return relative if not relative.startswith(os.pardir) else absolute


def program() -> str:
    """How to run gapwatch again from here, written so it works when pasted as printed.

    ``gapwatch`` when that name on the PATH is this very program; otherwise the program's
    path as started (``.venv/bin/gapwatch`` after the README's set-up, which puts nothing
    on the PATH), relative to the current folder when it lies inside it; for
    ``python -m monitor``, the program installed beside that interpreter, else the
    interpreter with ``-m monitor``.
    """
    started = Path(sys.argv[0]) if sys.argv and sys.argv[0] else None
    if started is not None and started.name == "__main__.py" and started.parent.name == "monitor":
        beside = Path(sys.executable).with_name("gapwatch")
        return path_as_typed(beside) if beside.exists() else f"{path_as_typed(sys.executable)} -m monitor"
    if started is None or started.name != "gapwatch":
        return "gapwatch"  # called as a library (tests, an embedding program)
    on_path = shutil.which("gapwatch")
    try:
        if on_path and os.path.samefile(on_path, started):
            return "gapwatch"
    except OSError:
        pass
    return path_as_typed(started)


def as_typed(text) -> str:
    """``text`` with every quoted `gapwatch ...` command written as :func:`program` runs it."""
    text = str(text)
    return text.replace("`gapwatch ", f"`{program()} ") if "`gapwatch " in text else text


def operator(given=None) -> str:
    """Who runs a command that records a change: ``given`` (``--by``), else the operating-system user."""
    if given:
        return given
    # lazy: only the commands that record a change need it.
    import getpass

    try:
        return getpass.getuser()
    except (KeyError, OSError):  # no login name in this environment
        return "unknown"
