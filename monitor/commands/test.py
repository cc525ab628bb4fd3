"""``gapwatch test METHOD``: one fixed-sample two-group test from summary numbers."""

from __future__ import annotations

import argparse
import json
import math
import sys

from ..errors import InvalidArgumentError
from ..stats._checks import ALTERNATIVES, INTERVALS
from ..vocabulary import json_safe
from . import SUMMARIES

METHOD_HELP = {
    "z": "two-sample z with known population standard deviations",
    "pooled": "two-sample t with a pooled variance",
    "welch": "two-sample t allowing unequal variances (Welch)",
    "paired": "paired t on per-pair differences",
    "proportions": "difference between two rates (two-proportion z)",
}

METHOD_TITLE = {
    "z": "Two-sample z test (known standard deviations)",
    "pooled": "Two-sample t test, pooled variance",
    "welch": "Welch two-sample t test",
    "paired": "Paired t test on differences",
    "proportions": "Two-proportion z test",
}


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "test",
        help=SUMMARIES["test"],
        description="Run one fixed-sample two-group test (group 1 − group 2) from counts, means "
                    "and standard deviations, or counts and successes for rates.",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        epilog="examples:\n"
               "  %(prog)s welch --group1 40,12.5,3.1 --group2 38,11.2,2.7\n"
               "  %(prog)s z --group1 50,105,15 --group2 50,100,15   (third number = known sigma)\n"
               "  %(prog)s paired --differences 20,0.8,1.9\n"
               "  %(prog)s proportions --group1 400,52 --group2 380,31 --json",
    )
    p.add_argument("method", choices=list(METHOD_HELP), metavar="METHOD",
                   help="; ".join(f"{k}: {v}" for k, v in METHOD_HELP.items()))
    p.add_argument("--group1", metavar="N,MEAN,SD",
                   help="group 1 as N,MEAN,SD (z: N,MEAN,SIGMA; proportions: N,SUCCESSES)")
    p.add_argument("--group2", metavar="N,MEAN,SD", help="group 2, same form as --group1")
    p.add_argument("--differences", metavar="N,MEAN,SD",
                   help="paired only: number of pairs, mean and SD of the differences")
    p.add_argument("--alternative", default="two-sided", choices=list(ALTERNATIVES),
                   help="greater: group 1 − group 2 > null difference (default two-sided)")
    p.add_argument("--alpha", default="0.05", help="significance level in (0, 1) (default 0.05)")
    p.add_argument("--null-difference", default="0", help="hypothesised difference (default 0)")
    p.add_argument("--interval", default="newcombe", choices=list(INTERVALS),
                   help="proportions only: interval for the difference (default newcombe)")
    p.add_argument("--json", action="store_true", help="print one JSON object instead of text")
    p.set_defaults(func=run)


# ---------------------------------------------------------------------------
# parsing


def _number(text, option, raw):
    try:
        value = float(text)
    except ValueError:
        raise InvalidArgumentError(f"{option} has a value that is not a number: {raw!r}") from None
    if not math.isfinite(value):
        raise InvalidArgumentError(f"{option} must hold finite numbers; got {raw!r}")
    return value


def _count(text, option, raw, what):
    value = _number(text, option, raw)
    if value != math.floor(value):
        raise InvalidArgumentError(f"{option}: {what} must be a whole number; got {raw!r}")
    return int(value)


def _parse_group(raw, option, form):
    if raw is None:
        raise InvalidArgumentError(f"{option} is required, as {form}")
    parts = [x.strip() for x in raw.split(",")]
    if len(parts) != form.count(",") + 1 or any(not x for x in parts):
        raise InvalidArgumentError(f"{option} must be {form}; got {raw!r}")
    n = _count(parts[0], option, raw, "N")
    return [n] + [_number(x, option, raw) for x in parts[1:]]


def _parse_scalar(raw, option):
    try:
        value = float(raw)
    except (TypeError, ValueError):
        raise InvalidArgumentError(f"{option} must be a number; got {raw!r}") from None
    return value


# Library argument names → the option the user typed, so messages name what they wrote.
_OPTION_OF = {
    "n1": "--group1", "mean1": "--group1", "sd1": "--group1", "sigma1": "--group1",
    "successes1": "--group1",
    "n2": "--group2", "mean2": "--group2", "sd2": "--group2", "sigma2": "--group2",
    "successes2": "--group2",
    "n": "--differences", "mean_difference": "--differences", "sd_difference": "--differences",
    "alpha": "--alpha", "null_difference": "--null-difference", "alternative": "--alternative",
}


def _compute(args):
    # lazy: start-up time of the command line (the tests load scipy.special).
    from ..stats import fixed

    alpha = _parse_scalar(args.alpha, "--alpha")
    delta0 = _parse_scalar(args.null_difference, "--null-difference")
    common = {"null_difference": delta0, "alternative": args.alternative, "alpha": alpha}
    method = args.method
    given = {"--group1": args.group1, "--group2": args.group2, "--differences": args.differences}
    if method == "paired":
        for option in ("--group1", "--group2"):
            if given[option] is not None:
                raise InvalidArgumentError(f"{option} is not used by paired (give --differences); "
                                           f"got {given[option]!r}")
        n, mean, sd = _parse_group(args.differences, "--differences", "N,MEAN,SD")
        return fixed.paired_t(n, mean, sd, **common)
    if args.differences is not None:
        raise InvalidArgumentError(f"--differences is only for paired; got {args.differences!r}")
    if method == "proportions":
        n1, x1 = _parse_group(args.group1, "--group1", "N,SUCCESSES")
        n2, x2 = _parse_group(args.group2, "--group2", "N,SUCCESSES")
        for option, x, raw in (("--group1", x1, args.group1), ("--group2", x2, args.group2)):
            if x != math.floor(x):
                raise InvalidArgumentError(f"{option}: SUCCESSES must be a whole number; got {raw!r}")
        return fixed.two_proportions(n1, int(x1), n2, int(x2), interval=args.interval, **common)
    form = "N,MEAN,SIGMA" if method == "z" else "N,MEAN,SD"
    g1 = _parse_group(args.group1, "--group1", form)
    g2 = _parse_group(args.group2, "--group2", form)
    test = {"z": fixed.z_test, "pooled": fixed.pooled_t, "welch": fixed.welch_t}[method]
    return test(*g1, *g2, **common)


def _explain(exc, args, given):
    """Re-word a library message so it names the option and the value typed."""
    message = str(exc)
    name = message.split(" ", 1)[0]
    option = _OPTION_OF.get(name)
    if option is None:
        return message
    typed = given[option] if option in given else getattr(args, option[2:].replace("-", "_"))
    return f"{option} {typed!r}: {message}"


# ---------------------------------------------------------------------------
# output


def _fmt(x, digits=4):
    if x is None:
        return "open"
    if isinstance(x, float):
        if math.isnan(x):
            return "undefined"
        if math.isinf(x):
            return "+infinity" if x > 0 else "-infinity"
        return f"{x:.{digits}g}" if abs(x) >= 1e-3 or x == 0 else f"{x:.3e}"
    return str(x)


def _p_text(p):
    if math.isnan(p):
        return "undefined"
    return "< 0.0001" if p < 1e-4 else f"{p:.4f}"


def _hypothesis_words(result):
    d0 = _fmt(result.null_difference)
    what = "rate 1 − rate 2" if result.method == "proportions" else (
        "mean difference" if result.method == "paired" else "group 1 − group 2")
    relation = {"two-sided": "differs from", "greater": "is greater than", "less": "is less than"}
    return what, d0, relation[result.alternative]


def conclusion(result) -> str:
    """One plain sentence: what the result shows, and what it does not."""
    what, d0, relation = _hypothesis_words(result)
    level = f"{result.alpha:.3g}"
    if result.degenerate:
        return ("No conclusion: both groups have zero variance, so the test cannot weigh the "
                "difference against noise; check the data.")
    if result.reject:
        return (f"At level {level} the data indicate that {what} {relation} {d0} "
                f"(p = {_p_text(result.p_value)}); this says a difference is unlikely to be chance "
                f"alone, not that it is large enough to matter or what causes it.")
    return (f"At level {level} the data do not show that {what} {relation} {d0} "
            f"(p = {_p_text(result.p_value)}); this is not evidence that there is no difference, "
            f"only that this sample cannot tell.")


def render(result) -> str:
    what, d0, relation = _hypothesis_words(result)
    level = 1.0 - result.alpha
    asked = {"two-sided": "different from", "greater": "greater than", "less": "less than"}
    lines = [METHOD_TITLE[result.method],
             f"  question        : is {what} {asked[result.alternative]} {d0}?  (level {result.alpha:g})",
             f"  estimate        : {_fmt(result.estimate)}   (standard error {_fmt(result.standard_error)})",
             f"  statistic       : {_fmt(result.statistic)}"
             + (f" on {_fmt(result.df)} degrees of freedom" if result.df is not None else " (normal)"),
             f"  p-value         : {_p_text(result.p_value)}",
             "  critical values : " + ", ".join(_fmt(c) for c in result.critical_values),
             f"  {level:.0%} interval    : from {_fmt(result.ci[0])} to {_fmt(result.ci[1])}"]
    effects = ", ".join(f"{k.replace('_', ' ')} {_fmt(v, 3)}" for k, v in result.effect_size.items())
    lines.append(f"  effect size     : {effects}")
    if result.variance_ratio is not None:
        lines.append(f"  variance ratio  : {_fmt(result.variance_ratio)} "
                     f"(equal-variance F test p = {_p_text(result.variance_ratio_p)})")
    for note in result.notes:
        lines.append(f"  note            : {note}")
    lines.append("")
    lines.append(conclusion(result))
    return "\n".join(lines)


def run(args) -> int:
    given = {"--group1": args.group1, "--group2": args.group2, "--differences": args.differences}
    try:
        result = _compute(args)
    except InvalidArgumentError as exc:
        print(f"gapwatch test: {_explain(exc, args, given)}", file=sys.stderr)
        return 2
    if args.json:
        out = result.to_dict()
        out["conclusion"] = conclusion(result)
        print(json.dumps(json_safe(out), allow_nan=False, indent=2))
    else:
        print(render(result))
    return 0
