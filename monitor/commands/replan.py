"""``gapwatch replan NAME``: change a running comparison's plan, keeping its looks and the alpha it spent."""

from __future__ import annotations

import sys
from datetime import datetime, timezone

from . import SUMMARIES
from ._common import add_config_option, as_typed, operator, print_json, whole_number_type


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "replan", help=SUMMARIES["replan"],
        description="Change the plan of a running comparison. Its looks, the alpha already spent and its "
                    "history stay; later boundaries spend the conditional error of the remaining original "
                    "design on the data after the change (conditional error principle, Proschan & "
                    "Hunsberger 1995; Müller & Schäfer 2001), so the overall false-alarm rate stays alpha "
                    "even when the change was prompted by the data. Refused after a stop, and when no "
                    "alpha is left.")
    p.add_argument("name", metavar="NAME", help="comparison name")
    p.add_argument("--planned-per-group", type=whole_number_type(2), metavar="N",
                   help="new planned events per group (pairs for paired comparisons)")
    p.add_argument("--difference", type=float, help="new difference worth detecting (means)")
    p.add_argument("--sd", type=float, help="new planning standard deviation (means)")
    p.add_argument("--power", type=float, help="new power")
    p.add_argument("--p1", type=float, help="new planned rate of the first group (proportions)")
    p.add_argument("--p2", type=float, help="new planned rate of the second group (proportions)")
    p.add_argument("--reason", required=True, help="why the plan changes (kept in the history)")
    p.add_argument("--by", default=None, help="who changes it (default: the operating-system user)")
    p.add_argument("--format", choices=("text", "json"), default="text")
    add_config_option(p)
    p.set_defaults(func=run)


def run(args) -> int:
    # lazy: start-up time of the command line (configuration, look and store stacks).
    from ..config import load_config
    from ..errors import InvalidArgumentError, UnknownComparisonError
    from ..look.plan import work_out_replan
    from ..stats.boundaries import FutilitySpec
    from ..store.engine import ensure_current, make_engine
    from ..store.plan_changes import record_replan, replan_inputs

    by_inputs = any(getattr(args, k) is not None for k in ("difference", "sd", "power", "p1", "p2"))
    if args.planned_per_group is None and not by_inputs:
        print("gapwatch replan: give --planned-per-group, or new planning inputs (--difference, --sd, "
              "--power; --p1, --p2 for proportions)", file=sys.stderr)
        return 2
    if args.planned_per_group is not None and by_inputs:
        print("gapwatch replan: give --planned-per-group or planning inputs, not both", file=sys.stderr)
        return 2
    if not args.reason.strip():
        print("gapwatch replan: --reason must say why the plan changes", file=sys.stderr)
        return 2
    config = load_config(args.config)
    engine = make_engine(config.store_url)
    try:
        ensure_current(engine)
        read = replan_inputs(engine, args.name)
        if read is None:
            raise UnknownComparisonError(
                f"no look of comparison {args.name!r} is recorded yet: change the plan in the configuration "
                f"instead (the design freezes at the first look)")
        comparison, design = read["comparison"], read["comparison"]["design"]
        if comparison["stopped_at"] is not None:
            print(f"gapwatch replan: {args.name} has stopped ({comparison['state'].replace('_', ' ')}); a stopped "
                  f"comparison cannot be replanned — start a new comparison instead", file=sys.stderr)
            return 2
        futility = None
        figures = (design.get("plan") or {}).get("figures") or {}
        power = ((design.get("plan") or {}).get("inputs") or {}).get("power")
        if design.get("futility") and figures.get("drift") is not None and power is not None:
            futility = FutilitySpec(design["spending"], 1.0 - power, figures["drift"])
        testing = [dict(r, bounds=(r["detail"] or {}).get("bounds")) for r in read["testing_looks"]]
        worked = work_out_replan(design, testing, read["replans"], futility,
                                 planned_per_group=args.planned_per_group, difference=args.difference,
                                 sd=args.sd, power=args.power, p1=args.p1, p2=args.p2)
        now = datetime.now(timezone.utc)
        who = operator(args.by)
        number = record_replan(
            engine, comparison_id=comparison["id"], looks_taken=comparison["looks_taken"], made_at=now,
            made_by=who, reason=args.reason.strip(), old_plan=worked.old_plan, new_plan=worked.new_plan,
            record=worked.change.to_dict())
    except InvalidArgumentError as exc:
        print(f"gapwatch replan: {args.name}: {as_typed(exc)}", file=sys.stderr)
        return 2
    finally:
        engine.dispose()
    change = worked.change
    out = {"name": args.name, "version": comparison["version"], "replan": number, "by": who,
           "at": now.isoformat(), "reason": args.reason.strip(), "old_plan": worked.old_plan,
           "new_plan": worked.new_plan, "conditional_error": change.conditional_error,
           "error_upper": change.error_upper, "error_lower": change.error_lower,
           "after_look": comparison["looks_taken"], "method": change.method,
           "power_if_planned_difference": worked.power_after}
    if args.format == "json":
        print_json(out)
        return 0
    old, new = worked.old_plan["planned_per_group"], worked.new_plan["planned_per_group"]
    print(f"{args.name} v{comparison['version']}: plan changed from {old:,} to {new:,} per group "
          f"after look {comparison['looks_taken']} (replan {number}, by {who}: {args.reason.strip()})")
    print(f"  alpha left for the rest of the plan, given the data so far: {change.conditional_error:.4g} "
          f"(spent on the data from now on; {change.method})")
    if worked.power_after is not None:
        print(f"  if the planned difference is real, the chance of finding it under the new plan: "
              f"{100 * worked.power_after:.0f} %")
    return 0
