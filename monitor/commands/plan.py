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
               "  %(prog)s --metric ratio --difference 0.001 --residual-sd 4 --mean-denominator 800\n"
               "  %(prog)s --metric mean --difference -6 --sd 50 --baseline-days 28 --day-sd 4 "
               "--events-per-day 400",
    )
    add_plan_arguments(p)
    add_cluster_arguments(p)
    add_before_after_arguments(p)
    p.add_argument("--json", action="store_true", help="print one JSON object instead of text")
    p.set_defaults(func=run)


def run(args) -> int:
    if args.baseline_days is not None:
        return _run_before_after(args)
    for name in ("day_sd", "events_per_day", "daily_from"):
        if getattr(args, name) is not None:
            raise InvalidArgumentError(f"--{name.replace('_', '-')} plans a before/after comparison: "
                                       f"give --baseline-days too; got --{name.replace('_', '-')} "
                                       f"{getattr(args, name)!r}")
    plan = plan_from_args(args)
    clusters = clusters_from_args(args, plan)
    if args.json:
        out = plan.to_dict()
        if args.metric == "ratio":
            out.update(metric="ratio", residual_sd=args.residual_sd, mean_denominator=args.mean_denominator)
        if clusters is not None:
            out["clustering"] = clusters.to_dict()
        print(json.dumps(json_safe(out), indent=2))
    else:
        note = ratio_note(args)
        print((note + "\n" if note else "") + human_text(plan))
        if clusters is not None:
            print()
            print(cluster_text(plan, clusters))
    return 0


# ----------------------------------------------------------------------------- before and after


def add_before_after_arguments(parser) -> None:
    """Options of a before/after comparison (a start, a baseline before it)."""
    group = parser.add_argument_group(
        "before and after", "plan a comparison that starts at a change and subtracts the gap the groups "
                            "already had in a baseline before it (difference in differences)")
    group.add_argument("--baseline-days", type=_finite_number, metavar="B",
                       help="length of the baseline before the start, in days")
    group.add_argument("--day-sd", type=_finite_number, metavar="S",
                       help="each group's own day-to-day spread of its daily mean, in the value's unit "
                            "(default 0)")
    group.add_argument("--events-per-day", type=_finite_number, metavar="M",
                       help="events per group per day, before and after the start")
    group.add_argument("--daily-from", type=_whole_number, metavar="K",
                       help="plan one look a day from day K after the start (instead of --looks equally "
                            "spaced looks)")


def _before_after_plan(args):
    # lazy: start-up time of the command line (planning loads scipy.stats and scipy.optimize).
    from ..stats.before_after import plan_before_after

    if args.metric == "ratio":
        raise InvalidArgumentError("--baseline-days plans a before/after comparison of a mean or a rate, "
                                   "not --metric ratio")
    if args.events_per_day is None:
        raise InvalidArgumentError("--events-per-day is required with --baseline-days")
    if args.futility:
        raise InvalidArgumentError("--futility is not planned for before/after comparisons; drop it")
    common = dict(day_sd=0.0 if args.day_sd is None else args.day_sd, events_per_day=args.events_per_day,
                  baseline_days=args.baseline_days, alpha=args.alpha, power=args.power,
                  alternative=args.alternative, spending=args.spending, looks=args.looks,
                  first_look_day=args.daily_from)
    if args.metric == "mean":
        for name in ("p1", "p2"):
            if getattr(args, name) is not None:
                raise InvalidArgumentError(f"--{name} is for --metric proportion; got {getattr(args, name)!r}")
        for name in ("difference", "sd"):
            if getattr(args, name) is None:
                raise InvalidArgumentError(f"--{name} is required with --metric mean")
        return plan_before_after(args.difference, args.sd, **common)
    for name in ("difference", "sd"):
        if getattr(args, name) is not None:
            raise InvalidArgumentError(f"--{name} is for --metric mean; got {getattr(args, name)!r}")
    for name in ("p1", "p2"):
        if getattr(args, name) is None:
            raise InvalidArgumentError(f"--{name} is required with --metric proportion")
    # The change is p1 − p2 (group 1's rate with the change against without it); the
    # event spread is taken at the rate nearer one half, the larger variance.
    rate = min((args.p1, args.p2), key=lambda p: abs(p - 0.5))
    return plan_before_after(args.p1 - args.p2, rate=rate, **common)


def before_after_text(plan) -> str:
    """What a before/after plan says, in words and a table of its looks."""
    if plan.metric == "mean":
        what = f"a change of {plan.difference:g} (event standard deviation {plan.sd:g})"
    else:
        what = f"a change in rate of {plan.difference:+g} (event spread at rate {plan.rate:g})"
    looks = (f"one look a day from day {plan.first_look_day}" if plan.looks is None
             else f"{plan.looks} equally spaced look(s)")
    lines = [
        f"Design: before/after, {what}; baseline {plan.baseline_days:g} days, {plan.events_per_day:g} "
        f"events per group per day, day-to-day spread {plan.day_sd:g}; false-alarm rate {plan.alpha:g}, "
        f"power {plan.power:g}, {looks}, {plan.spending} spending.",
        "",
        f"The change is estimated as (group 1 − group 2 after the start) − (group 1 − group 2 in the "
        f"baseline); one day's gap between the groups varies with standard deviation "
        f"{math.sqrt(plan.day_variance):.4g}.",
        f"A single analysis at the end would need {plan.fixed_after_days:.1f} days after the start.",
        f"With repeated looks and a t reference ({plan.planned_df:.1f} degrees of freedom) it needs "
        f"{100 * (plan.inflation - 1):.1f}% more information: plan for {plan.after_days_exact:.1f} days "
        f"after the start (looks until day {plan.after_days}), about {plan.planned_per_group} events "
        f"per group.",
        f"If nothing changed, expect to decide after about {plan.expected_days_null:.1f} days; if the "
        f"change is as planned, after about {plan.expected_days_alternative:.1f}.",
        f"The baseline must be longer than {plan.minimum_baseline_days:.1f} days for this change to be "
        f"detectable at all (the old gap is only known as well as the baseline measures it).",
        "",
        f"{'look':>4}  {'fraction':>8}  {'efficacy bound':>15}",
    ]
    for k, (t, z) in enumerate(zip(plan.fractions, plan.efficacy_z), start=1):
        lines.append(f"{k:>4}  {t:>8.3f}  {_z_text(z):>15}")
    return "\n".join(lines)


def _run_before_after(args) -> int:
    plan = _before_after_plan(args)
    if args.json:
        print(json.dumps(json_safe(plan.to_dict()), indent=2))
    else:
        print(before_after_text(plan))
    return 0
# ------------------------------------------------------------------ clustered comparisons


def add_cluster_arguments(parser) -> None:
    """Options that plan a clustered comparison (events sharing days, crews or batches)."""
    group = parser.add_argument_group(
        "clustered comparison",
        "events that share a day, a shift or a crew are not independent; give --cluster-size with "
        "--icc or --design-effect to plan in clusters")
    group.add_argument("--cluster-size", type=_finite_number, metavar="M",
                       help="events of one group in one cluster (one day's events per group, "
                            "or one crew's events)")
    group.add_argument("--icc", type=_finite_number, metavar="RHO",
                       help="intra-cluster correlation in [0, 1); the design effect is then "
                            "1 + (M − 1)·RHO")
    group.add_argument("--design-effect", type=_finite_number, metavar="D",
                       help="variance inflation from clustering, at least 1 (e.g. the design "
                            "effect a comparison's looks measured); instead of --icc")
    group.add_argument("--nested-clusters", action="store_true",
                       help="each cluster belongs to one group (crews, batches: cluster_column); "
                            "by default clusters are calendar buckets both groups share (cluster_by)")
    group.add_argument("--min-clusters", type=_whole_number, metavar="N", default=None,
                       help="the comparison's min_clusters (default 10, as in the configuration)")


def clusters_from_args(args, plan):
    """The :class:`monitor.stats.clustered.ClusterPlan` the cluster options describe, or None."""
    given = {name: getattr(args, name.replace("-", "_"))
             for name in ("cluster-size", "icc", "design-effect", "min-clusters")}
    if all(value is None for value in given.values()) and not args.nested_clusters:
        return None
    # lazy: start-up time of the command line (the clustered module loads scipy.stats).
    from ..config.model import DEFAULT_MIN_CLUSTERS, MIN_CLUSTERS_FLOOR
    from ..stats.clustered import MIN_CLUSTERS_PER_GROUP, plan_clusters

    size, icc, deff, minimum = (given[k] for k in ("cluster-size", "icc", "design-effect", "min-clusters"))
    if icc is not None and deff is not None:
        raise InvalidArgumentError(f"give --icc or --design-effect, not both; got --icc {icc:g} "
                                   f"and --design-effect {deff:g}")
    if size is None:
        raise InvalidArgumentError("--cluster-size is required to plan a clustered comparison "
                                   "(events of one group in one cluster)")
    if size < 1:
        raise InvalidArgumentError(f"--cluster-size must be at least 1 event; got {size:g}")
    if icc is None and deff is None:
        raise InvalidArgumentError("a clustered plan needs --icc or --design-effect; got neither")
    if icc is not None and not 0 <= icc < 1:
        raise InvalidArgumentError(f"--icc must be in [0, 1); got {icc:g}")
    if deff is not None and deff < 1:
        raise InvalidArgumentError(f"--design-effect must be at least 1; got {deff:g}")
    minimum = DEFAULT_MIN_CLUSTERS if minimum is None else minimum
    if minimum < MIN_CLUSTERS_FLOOR:
        raise InvalidArgumentError(f"--min-clusters must be at least {MIN_CLUSTERS_FLOOR}; got {minimum}")
    # As the look: calendar buckets need min_clusters in total (each holds both groups), clusters
    # of one group need max(3, ceil(min_clusters / 2)) in each group.
    per_group = (max(MIN_CLUSTERS_PER_GROUP, math.ceil(minimum / 2)) if args.nested_clusters
                 else minimum)
    return plan_clusters(plan.max_per_group, size, design_effect=deff, icc=icc,
                         shared=not args.nested_clusters, alpha=plan.alpha, power=plan.power,
                         alternative=plan.alternative, minimum_clusters=per_group)


def cluster_text(plan, c) -> str:
    """The clustered answer, in clusters per group as well as events."""
    kind = ("clusters of one group each (crews, batches)" if not c.shared
            else "calendar clusters both groups share (days)")
    lines = [f"Clustered: {c.events_per_cluster:g} events of each group per cluster, {kind}; "
             f"design effect {c.design_effect:.3g}."]
    lines.append(f"Clustering multiplies the {plan.max_per_group} events per group by "
                 f"{c.design_effect:.3g}: {c.clustered_per_group} events per group.")
    df_words = f"{c.df:.0f} degrees of freedom"
    if c.raised_to_minimum:
        lines.append(f"The look waits for {c.minimum_clusters} clusters "
                     f"{'per group' if not c.shared else 'in all'} before it decides (min_clusters), "
                     f"which sets the plan: {c.clusters_per_group} clusters per group, "
                     f"{c.events_per_group} events per group (t on {df_words}).")
    else:
        lines.append(f"Deciding on a t with {df_words} instead of z needs "
                     f"{100 * (c.t_inflation - 1):.1f}% more: plan for {c.clusters_per_group} "
                     f"clusters per group, {c.events_per_group} events per group.")
    where = "days" if c.shared else "clusters in each group"
    lines.append(f"Set planned_per_group = {c.events_per_group} in the comparison and expect about "
                 f"{c.clusters_per_group} {where} before the plan completes.")
    lines.append("Caution: the design effect is an assumption; every look measures the real one "
                 "(status shows it), and if it is larger the plan is short: replan with the measured "
                 "value. The t allowance is that of a single analysis at the plan's final degrees of "
                 "freedom; with few clusters the early looks' exact sequential t bounds are wider "
                 "still.")
    return "\n".join(lines)
