"""The ``gapwatch`` command line: one module per command under ``monitor/commands``."""

from __future__ import annotations

import argparse
import importlib
import sys

from .errors import GapwatchError

__all__ = ["main", "build_parser"]

# Order is the order of ``gapwatch --help``.
COMMAND_MODULES = [
    "test", "bounds", "plan", "simulate",
    "check", "db", "look", "status", "history", "verify", "restart",
    "run", "alerts", "report", "dashboard", "demo",
]


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="gapwatch",
        description="Watch a live two-group comparison on operational data without false alarms from repeated looks.",
    )
    subparsers = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name in COMMAND_MODULES:
        try:
            module = importlib.import_module(f"monitor.commands.{name}")
        except ModuleNotFoundError as exc:
            if exc.name != f"monitor.commands.{name}":
                raise
            continue
        module.register(subparsers)
    return parser


def main(argv=None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return 2
    try:
        return int(args.func(args) or 0)
    except GapwatchError as exc:
        print(f"gapwatch {args.command}: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        return 130


if __name__ == "__main__":
    sys.exit(main())
