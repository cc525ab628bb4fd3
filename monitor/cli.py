"""The ``gapwatch`` command line: one module per command under ``monitor/commands``.

Start-up time matters here (``gapwatch --help`` should answer in a blink), so only the
command being run is imported and registered in full; every other command appears in
the parser by its name and one-line summary alone. ``build_parser()`` without an
argument list registers every command (for the documentation tests).
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys

from .commands import SUMMARIES
from .commands._common import as_typed, program
from .errors import GapwatchError

__all__ = ["main", "build_parser", "COMMAND_MODULES"]

COMMAND_MODULES = list(SUMMARIES)

DESCRIPTION = "Watch a live two-group comparison on operational data without false alarms from repeated looks."


def _command_named(argv) -> str | None:
    """The command ``argv`` asks for: its first word that is not an option (None: none named)."""
    for word in argv:
        if word == "--":
            return None
        if not word.startswith("-"):
            return word if word in SUMMARIES else None
    return None


def build_parser(argv=None) -> argparse.ArgumentParser:
    """The parser; with ``argv``, only the command it names is registered in full."""
    # prog: usage lines and examples show the command as this user can type it.
    parser = argparse.ArgumentParser(prog=program(), description=DESCRIPTION)
    subparsers = parser.add_subparsers(dest="command", metavar="COMMAND")
    wanted = set(SUMMARIES) if argv is None else {_command_named(argv)}
    for name, summary in SUMMARIES.items():
        if name in wanted:
            importlib.import_module(f"monitor.commands.{name}").register(subparsers)
        else:
            subparsers.add_parser(name, help=summary, add_help=False)
    return parser


def main(argv=None) -> int:
    argv = sys.argv[1:] if argv is None else list(argv)
    parser = build_parser(argv)
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return 2
    try:
        code = int(args.func(args) or 0)
        sys.stdout.flush()  # inside the try: a reader that went away is met here, not at exit
        return code
    except GapwatchError as exc:
        print(f"gapwatch {args.command}: {as_typed(exc)}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        return 130
    except BrokenPipeError:
        # The reader went away (`gapwatch history … | head`): stop quietly, the way a shell tool does.
        # Later writes, including the interpreter's final flush, go to the null device.
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return 141


if __name__ == "__main__":
    sys.exit(main())
