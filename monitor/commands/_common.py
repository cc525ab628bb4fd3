"""What several commands share: the ``--config`` option, the store it names, and output."""

from __future__ import annotations

import argparse
import json
import sys

CONFIG_HELP = "configuration file (default $GAPWATCH_CONFIG, else ./gapwatch.toml)"


def add_config_option(parser, **kwargs) -> None:
    """``--config FILE``, worded the same on every command."""
    kwargs.setdefault("help", CONFIG_HELP)
    parser.add_argument("--config", metavar="FILE", default=None, **kwargs)


def open_store(config_path):
    """The history store engine named by the configuration at ``config_path`` (None: the default search).

    Checked to be at the schema this code expects (``StoreBehindError`` otherwise).
    """
    # Imported here: every command module is loaded to build the parser, and most commands
    # never open the store, so the command line does not pay for SQLAlchemy at start.
    from ..config import store_url_from_config
    from ..store.engine import open_store as open_checked

    return open_checked(store_url_from_config(config_path))


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
