"""``gapwatch plan``: events per group for a sequential comparison."""

from __future__ import annotations

import argparse
import json
import math

from ..errors import InvalidArgumentError
from ..stats._checks import ALTERNATIVES
from ..vocabulary import json_safe
from . import SUMMARIES

# The two numbers each metric is planned from, as option destinations.
_METRIC_OPTIONS = {"mean": ("difference", "sd"), "proportion": ("p1", "p2"),
                   "ratio": ("difference", "residual_sd", "mean_denominator")}


def _finite_number(text):
    """argparse type: a finite number (argparse reports the option and value)."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a number: {text!r}") from None
    if not math.isfinite(value):
        raise argparse.ArgumentTypeError(f"must be finite: {text!r}")
    return value


def _whole_number(text):
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a whole number: {text!r}") from None
    return value


def add_plan_arguments(parser) -> None:
    """The design options shared by ``plan`` and ``simulate``."""
    parser.add_argument("--metric", required=True, choices=("mean", "proportion", "ratio"),
                        help="compare two means (give --difference and --sd), two rates (give --p1 "
                             "and --p2) or two ratios of sums (give --difference, --residual-sd and "
                             "--mean-denominator)")
    parser.add_argument("--difference", type=_finite_number, metavar="D",
                        help="mean only: difference worth detecting, group 1 − group 2")
    parser.add_argument("--sd", type=_finite_number, metavar="S",
                        help="mean only: standard deviation of one event's value")
    parser.add_argument("--residual-sd", type=_finite_number, metavar="S",
                        help="ratio only: spread of one row's numerator about its group's ratio "
                             "times its denominator (y − R·x), e.g. defects per batch")
    parser.add_argument("--mean-denominator", type=_finite_number, metavar="M",
                        help="ratio only: the mean denominator per row (units per batch, hours per shift)")
    parser.add_argument("--p1", type=_finite_number, metavar="P",
                        help="proportion only: planned rate in group 1")
    parser.add_argument("--p2", type=_finite_number, metavar="P",
                        help="proportion only: planned rate in group 2")
    parser.add_argument("--alpha", type=_finite_number, default=0.05,
                        help="false-alarm rate, in (0, 1) (default 0.05)")
    parser.add_argument("--power", type=_finite_number, default=0.8,
                        help="chance of finding the planned difference, in (alpha, 1) (default 0.8)")
    parser.add_argument("--alternative", default="two-sided", choices=ALTERNATIVES,
                        help="greater: group 1 above group 2 (default two-sided)")
    parser.add_argument("--spending", default="obrien-fleming",
                        help="alpha-spending function: obrien-fleming, pocock, hsd:GAMMA, power:RHO "
                             "(default obrien-fleming)")
    parser.add_argument("--looks", type=_whole_number, default=5, metavar="K",
                        help="number of equally spaced looks the plan assumes (default 5)")
    parser.add_argument("--futility", action="store_true",
                        help="add a non-binding futility boundary (stop early when a difference "
                             "of the planned size has become unlikely); one-sided designs only")


def plan_from_args(args):
    """Build the :class:`monitor.stats.planning.Plan` the options describe."""
    # lazy: start-up time of the command line (planning loads scipy.stats and scipy.optimize).
    from ..stats import planning

    if args.futility and args.alternative == "two-sided":
        # As the configuration: the futility boundary is for one-sided designs only.
        raise InvalidArgumentError("--futility needs a one-sided --alternative (greater or less); "
                                   "got two-sided")
    common = dict(alpha=args.alpha, power=args.power, alternative=args.alternative,
                  spending=args.spending, looks=args.looks, futility=args.futility)
    chosen = _METRIC_OPTIONS[args.metric]
    for metric, names in _METRIC_OPTIONS.items():
        for name in names:
            value = getattr(args, name)
            if name not in chosen and value is not None:
                raise InvalidArgumentError(f"--{name.replace('_', '-')} is for --metric {metric}; got {value!r}")
    for name in chosen:
        if getattr(args, name) is None:
            raise InvalidArgumentError(f"--{name.replace('_', '-')} is required with --metric {args.metric}")
    if args.metric == "ratio":
        # lazy: start-up time of the command line (as the planning import above).
        from ..stats.ratio import ratio_planning_sd

        # A ratio over n rows varies as a mean of n values with sd residual_sd / mean_denominator.
        return planning.plan_mean(args.difference, ratio_planning_sd(args.residual_sd, args.mean_denominator),
                                  **common)
    build = planning.plan_mean if args.metric == "mean" else planning.plan_proportion
    return build(*(getattr(args, name) for name in chosen), **common)


def ratio_note(args) -> str:
    """For --metric ratio: how the ratio's planning sd came about (empty otherwise)."""
    if getattr(args, "metric", None) != "ratio":
        return ""
    sd = args.residual_sd / args.mean_denominator
    return (f"Ratio of sums planned as a mean per row: residual sd {args.residual_sd:g} over a mean "
            f"denominator of {args.mean_denominator:g} gives sd {sd:g} per row (events below are rows; "
            f"give the comparison difference = {args.difference:g} and sd = {sd:g}).")


def describe_design(plan) -> str:
    """One line naming what is being compared and how."""
    if plan.metric == "mean":
        what = f"a difference in means of {plan.difference:g} (standard deviation {plan.sd:g})"
    else:
        what = f"rates of {plan.p1:g} against {plan.p2:g} (difference {plan.difference:+g})"
    direction = {"two-sided": "in either direction", "greater": "group 1 above group 2",
                 "less": "group 1 below group 2"}[plan.alternative]
    return (f"Design: {what}, {direction}; false-alarm rate {plan.alpha:g}, "
            f"power {plan.power:g}, {plan.looks} look(s), {plan.spending} spending"
            + (", with a non-binding futility boundary." if plan.futility else "."))


def _z_text(z):
    if z is None:
        return "-"
    if math.isinf(z):
        return "none"
    return f"{z:.3f}"


def human_text(plan) -> str:
    lines = [describe_design(plan), ""]
    lines.append(f"A single analysis at the end would need {plan.fixed_per_group} events per group.")
    if plan.looks > 1:
        lines.append(
            f"Looking {plan.looks} times costs {100 * (plan.inflation - 1):.1f}% more information "
            f"(inflation factor {plan.inflation:.4f}), so plan for {plan.max_per_group} events per group."
        )
    else:
        lines.append(f"Plan for {plan.max_per_group} events per group.")
    lines.append(
        f"If the groups do not differ, expect to decide after about {plan.expected_per_group_null} "
        f"events per group; if they differ by the planned amount, after about "
        f"{plan.expected_per_group_alternative}."
    )
    if plan.futility:
        lines.append("(Those expectations assume futility stops are followed; ignoring them never "
                     "raises the false-alarm rate.)")
    lines.append("")
    header = f"{'look':>4}  {'events/group':>12}  {'efficacy bound':>15}"
    if plan.futility:
        header += f"  {'futility z <':>12}"
    lines.append(header)
    futility = plan.futility_z or [None] * plan.looks
    for k, (t, z, f) in enumerate(zip(plan.fractions, plan.efficacy_z, futility), start=1):
        row = f"{k:>4}  {math.ceil(t * plan.max_per_group - 1e-9):>12}  {_z_text(z):>15}"
        if plan.futility:
            row += f"  {_z_text(f):>12}"
        lines.append(row)
    lines.append("")
    rule = {"two-sided": "|z| is at or above the efficacy bound",
            "greater": "z is at or above the efficacy bound",
            "less": "z is at or below minus the efficacy bound"}[plan.alternative]
    lines.append(f"A look finds a difference when {rule}. The bounds are wide early, so looking "
                 f"often does not raise the false-alarm rate; 'none' means that look cannot stop.")
    if plan.futility:
        lines.append("A look may stop for no material difference when z (in the planned direction) "
                     "is below the futility bound.")
    return "\n".join(lines)


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "plan",
        help=SUMMARIES["plan"],
        description="Work out how many events per group a sequential comparison needs to detect "
                    "a difference worth acting on, and how many it is expected to use.",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        epilog="examples:\n"
               "  %(prog)s --metric mean --difference 2.5 --sd 12 --looks 8\n"
               "  %(prog)s --metric proportion --p1 0.18 --p2 0.15 --alternative greater --futility --json\n"
               "  %(prog)s --metric ratio --difference 0.001 --residual-sd 4 --mean-denominator 800",
    )
    add_plan_arguments(p)
    p.add_argument("--json", action="store_true", help="print one JSON object instead of text")
    p.set_defaults(func=run)


def run(args) -> int:
    plan = plan_from_args(args)
    if args.json:
        out = plan.to_dict()
        if args.metric == "ratio":
            out.update(metric="ratio", residual_sd=args.residual_sd, mean_denominator=args.mean_denominator)
        print(json.dumps(json_safe(out), indent=2))
    else:
        note = ratio_note(args)
        print((note + "\n" if note else "") + human_text(plan))
    return 0
