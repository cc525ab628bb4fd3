"""``gapwatch bounds``: alpha-spending boundaries for a sequence of information fractions."""

from __future__ import annotations

import argparse
import json
import math

from ..errors import InvalidArgumentError, UnknownSpendingError
from ..stats._checks import ALTERNATIVES, finite, open_unit
from ..vocabulary import json_safe
from . import SUMMARIES

ALTERNATIVE_RULE = {
    "two-sided": "|z| at or beyond the boundary",
    "greater": "z at or above the boundary (group 1 − group 2 larger)",
    "less": "z at or below minus the boundary (group 1 − group 2 smaller)",
}


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "bounds",
        help=SUMMARIES["bounds"],
        description="Compute group-sequential efficacy boundaries (Lan–DeMets alpha spending, "
                    "recursive numerical integration) at the information fractions given. "
                    "A fraction of 1 or more is the final look and spends all remaining alpha.",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        epilog="spending: obrien-fleming, pocock, hsd:GAMMA (e.g. hsd:-4), power:RHO (e.g. power:3)\n"
               "examples:\n"
               "  gapwatch bounds --fractions 0.2,0.4,0.6,0.8,1\n"
               "  gapwatch bounds --spending hsd:-4 --alpha 0.025 --alternative greater "
               "--fractions 0.15,0.5,1 --json\n"
               "  gapwatch bounds --fractions 0.3,0.7,1 --futility hsd:-2 --beta 0.1 --drift 2.9\n"
               "In --json output an infinite boundary (a look that may spend nothing) is null.",
    )
    p.add_argument("--spending", default="obrien-fleming", metavar="SPEC",
                   help="alpha-spending function (default obrien-fleming)")
    p.add_argument("--alpha", default="0.05", help="overall false-alarm rate in (0, 1) (default 0.05)")
    p.add_argument("--alternative", default="two-sided", choices=list(ALTERNATIVES),
                   help="direction tested (default two-sided)")
    p.add_argument("--fractions", required=True, metavar="F1,F2,...",
                   help="information fractions of the looks, increasing, each > 0")
    p.add_argument("--futility", metavar="SPEC",
                   help="add non-binding futility bounds by beta spending with this function")
    p.add_argument("--beta", default="0.2", help="with --futility: type II error to spend (default 0.2)")
    p.add_argument("--drift", help="with --futility: expected z at fraction 1 under the planned difference")
    p.add_argument("--json", action="store_true", help="print one JSON object instead of a table")
    p.set_defaults(func=run)


# ---------------------------------------------------------------------------
# parsing


def _fractions(text, min_increment):
    parts = [part.strip() for part in str(text).split(",")]
    if not parts or any(part == "" for part in parts):
        raise InvalidArgumentError(f"--fractions must be numbers separated by commas; got {text!r}")
    values = [finite(part, "--fractions") for part in parts]
    for k, value in enumerate(values):
        if value <= 0:
            raise InvalidArgumentError(f"--fractions must each be > 0; got {parts[k]!r}")
        if k and value <= values[k - 1]:
            raise InvalidArgumentError(
                f"--fractions must strictly increase; got {parts[k]!r} after {parts[k - 1]!r}"
            )
        if k and value - values[k - 1] < min_increment:
            raise InvalidArgumentError(
                f"--fractions must rise by at least {min_increment:g} a look; "
                f"got {parts[k]!r} after {parts[k - 1]!r}"
            )
        if k < len(values) - 1 and value >= 1:
            raise InvalidArgumentError(
                f"--fractions may not go on after a final look (>= 1); got {parts[k]!r} before the end"
            )
    return values


def _spending(text, option):
    # lazy: start-up time of the command line (spending functions load scipy).
    from ..stats.spending import parse_spending

    try:
        return parse_spending(text)
    except UnknownSpendingError as exc:
        raise UnknownSpendingError(str(exc).replace("spending:", f"{option}:", 1)) from None
    except InvalidArgumentError as exc:
        raise InvalidArgumentError(str(exc).replace("spending:", f"{option}:", 1)) from None


def _design(args):
    # lazy: start-up time of the command line (the boundary integration loads scipy).
    from ..stats import boundaries

    spending = _spending(args.spending, "--spending")
    alpha = open_unit(args.alpha, "--alpha")
    fractions = _fractions(args.fractions, boundaries.MIN_INCREMENT)
    futility = None
    if args.futility is not None:
        beta = open_unit(args.beta, "--beta")
        if args.drift is None:
            raise InvalidArgumentError("--drift is required with --futility (expected z at fraction 1)")
        drift = finite(args.drift, "--drift")
        if drift == 0:
            raise InvalidArgumentError(f"--drift must not be zero; got {args.drift!r}")
        futility = boundaries.FutilitySpec(_spending(args.futility, "--futility"), beta, drift)
    return spending, alpha, fractions, futility


# ---------------------------------------------------------------------------
# output


def _as_json(spending, alpha, alternative, looks, futility):
    rows = []
    for b in looks:
        row = {
            "look": b.look,
            "fraction": b.fraction,
            "z": b.z,
            "nominal_p": b.nominal_p,
            "cumulative_alpha": b.cumulative_alpha,
            "alpha_spent": b.alpha_spent,
        }
        if futility is not None:
            row["futility_z"] = b.futility_z
        rows.append(row)
    out = {"spending": spending.spec, "alpha": alpha, "alternative": alternative, "looks": rows}
    if futility is not None:
        out["futility"] = {"spending": futility.spending.spec, "beta": futility.beta, "drift": futility.drift}
    return json_safe(out)


def _z_text(z, alternative):
    if not math.isfinite(z):
        return "none"
    if alternative == "two-sided":
        return f"±{z:.4f}"
    if alternative == "less":
        return f"{-z:.4f}"
    return f"{z:.4f}"


def _table(spending, alpha, alternative, looks, futility, direction):
    header = ["look", "fraction", "boundary z", "nominal p", "alpha this look", "alpha so far"]
    if futility is not None:
        header.append("futility z")
    rows = []
    for b in looks:
        row = [
            f"{b.look}{' (final)' if b.final else ''}",
            f"{b.fraction:.4g}",
            _z_text(b.z, alternative),
            f"{b.nominal_p:.3g}",
            f"{b.alpha_spent:.3g}",
            f"{b.cumulative_alpha:.4g}",
        ]
        if futility is not None:
            f = b.futility_z
            if f is None or f == -math.inf:
                row.append("none")
            else:
                row.append(f"{direction * f:.4f}")
        rows.append(row)
    widths = [max(len(h), *(len(r[i]) for r in rows)) for i, h in enumerate(header)]
    lines = [
        f"Boundaries: {spending.spec} spending, alpha {alpha:g}, {alternative}",
        "",
        "  ".join(h.rjust(w) for h, w in zip(header, widths)),
        "  ".join("-" * w for w in widths),
    ]
    lines += ["  ".join(c.rjust(w) for c, w in zip(r, widths)) for r in rows]
    lines += [
        "",
        f"At a look, a difference is declared when the z statistic is {ALTERNATIVE_RULE[alternative]} —",
        "for t-based tests, when the one-sided p-value is at or below the nominal p. Checking at every",
        f"look this way keeps the chance of any false alarm at {alpha:g}. 'none': nothing can be declared at that look.",
    ]
    if futility is not None:
        sense = "below" if direction == 1 else "above"
        lines.append(
            f"Futility (non-binding): the comparison may stop for no material difference when z is {sense} "
            "the futility z."
        )
    return "\n".join(lines)


def run(args) -> int:
    # lazy: start-up time of the command line (the boundary integration loads scipy).
    from ..stats import boundaries

    spending, alpha, fractions, futility = _design(args)
    boundary = boundaries.SequentialBoundary(alpha, spending, args.alternative, futility=futility)
    looks = [boundary.add_look(t) for t in fractions]
    if args.json:
        print(json.dumps(_as_json(spending, alpha, args.alternative, looks, futility), indent=2))
    else:
        print(_table(spending, alpha, args.alternative, looks, futility, boundary.futility_direction))
    return 0
