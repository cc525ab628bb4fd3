"""``gapwatch report NAME``: a printable review of one comparison, as HTML or PDF."""

from __future__ import annotations

import sys
from datetime import datetime, timezone
from pathlib import Path

from ..errors import InvalidArgumentError
from ._common import add_config_option, open_store, whole_number_type

__all__ = ["register", "run"]


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "report",
        help="write a printable review of one comparison (HTML or PDF)",
        description="Write one self-contained document a reviewer can file: the question, the "
                    "design as frozen, every look with its boundary, interval and decision, the "
                    "chart, data quality, alerts and acknowledgements, the adjusted result after a "
                    "stop, and the caution. It fits A4 and Letter portrait.",
    )
    p.add_argument("name", metavar="NAME", help="comparison name")
    add_config_option(p)
    p.add_argument("--version", type=whole_number_type(1), default=None, metavar="V",
                   help="a stored version (default: the live one)")
    p.add_argument("--format", choices=["html", "pdf"], default="html",
                   help="html (default; any browser prints it) or pdf (needs Chromium or Chrome)")
    p.add_argument("--output", metavar="FILE", default=None,
                   help="where to write it (default NAME-vV.html or .pdf in this folder; - for standard output)")
    p.set_defaults(func=run)


def run(args) -> int:
    # lazy: the report pulls in the store stack, which start-up of other commands does not need
    from ..report import build_review, html_to_pdf, render_html

    engine = open_store(args.config)
    try:
        review = build_review(engine, args.name, args.version, now=datetime.now(timezone.utc))
    finally:
        engine.dispose()
    text = render_html(review)
    body = text.encode("utf-8") if args.format == "html" else html_to_pdf(text)
    target = args.output or f"{review.name}-v{review.version}.{args.format}"
    if target == "-":
        sys.stdout.buffer.write(body)
        sys.stdout.flush()
        return 0
    path = Path(target)
    if not path.parent.exists():
        raise InvalidArgumentError(f"--output {target}: folder {path.parent} does not exist")
    path.write_bytes(body)
    print(f"wrote {path} ({len(body):,} bytes): review of {review.name} version {review.version}, "
          f"{len(review.looks)} looks, {review.state_words}")
    return 0
