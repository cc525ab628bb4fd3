"""``gapwatch run [--config FILE] [--once]``: the always-on service."""

from __future__ import annotations

import logging
import sys
import time

from . import SUMMARIES
from ._common import add_config_option

__all__ = ["register", "run", "configure_logging"]


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "run",
        help=SUMMARIES["run"],
        description="Run until stopped (SIGINT/SIGTERM): each comparison is looked at on its "
                    "'every' schedule under a claim in the store, so several workers can share "
                    "one PostgreSQL store; pending alerts are delivered with retries. SIGHUP, or "
                    "a change to the file, reloads the configuration. --once takes one look at "
                    "every comparison, delivers pending alerts and exits (for cron).",
    )
    add_config_option(p)
    p.add_argument("--once", action="store_true",
                   help="one look at every comparison and one alert-delivery pass, then exit "
                        "(exit status 1 if any look failed)")
    p.add_argument("--log-level", default="INFO", choices=["DEBUG", "INFO", "WARNING", "ERROR"],
                   help="log verbosity (default INFO); logs go to standard error")
    p.set_defaults(func=run)


def configure_logging(level: str = "INFO") -> None:
    """One line per event on standard error, UTC timestamps."""
    handler = logging.StreamHandler(sys.stderr)
    formatter = logging.Formatter("%(asctime)s %(levelname)s %(name)s %(message)s", "%Y-%m-%dT%H:%M:%SZ")
    formatter.converter = time.gmtime
    handler.setFormatter(formatter)
    root = logging.getLogger()
    root.handlers[:] = [handler]
    root.setLevel(getattr(logging, level))
    # The scheduler's own per-job chatter adds nothing to our one line per look.
    logging.getLogger("apscheduler").setLevel(logging.WARNING)
    logging.getLogger("alembic").setLevel(logging.WARNING)


def run(args) -> int:
    # lazy: start-up time of the command line (the service loads the whole live stack).
    from ..service.scheduler import run_once, run_service

    configure_logging(args.log_level)
    if args.once:
        return run_once(args.config)
    return run_service(args.config)
