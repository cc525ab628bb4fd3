"""One module per ``gapwatch`` subcommand.

``SUMMARIES`` is the one home of each command's one-line help: ``gapwatch --help``
lists it without importing any command module (see ``monitor/cli.py``), and each
module's ``register`` passes the same text to argparse.
"""

# Order is the order of ``gapwatch --help``.
SUMMARIES = {
    "test": "run one fixed-sample two-group test from summary numbers",
    "bounds": "show alpha-spending boundaries for given information fractions",
    "plan": "events per group needed to detect a difference with repeated looks",
    "simulate": "simulate a design: false-alarm rate, power and events at decision",
    "check": "validate the configuration, the sources' tables and columns, and the store",
    "db": "migrate the history store (upgrade, downgrade REV, current)",
    "look": "take one look at comparisons now and record it",
    "status": "show every comparison's state, looks, estimate and progress",
    "history": "list every look of one comparison",
    "verify": "recompute every recorded look from raw source rows and report mismatches",
    "restart": "archive a comparison's current version so its next look starts a new one",
    "replan": "change a running comparison's plan, keeping its looks and the alpha it spent",
    "run": "run the service: look at every comparison on its schedule and deliver alerts",
    "alerts": "list alerts and their deliveries, or acknowledge one (alerts ack ID)",
    "report": "write a printable review of one comparison (HTML or PDF)",
    "dashboard": "open the dashboard on the history store",
    "demo": "run the invented live demo (feed, monitor and dashboard) in one folder",
}
