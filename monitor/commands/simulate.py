"""``gapwatch simulate``: check a design's false-alarm rate, power and events by simulation."""

from __future__ import annotations

import argparse
import json
import sys

from ..errors import InvalidArgumentError
from ..vocabulary import json_safe
from . import SUMMARIES
from ._common import whole_number_type
from .plan import _whole_number, add_plan_arguments, describe_design, plan_from_args

# The simulation's own arguments, as the options that give them.
_OPTION_OF = {"looks": "--actual-looks", "streams": "--streams", "seed": "--seed"}


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "simulate",
        help=SUMMARIES["simulate"],
        description="Simulate many comparisons under the design, with no real difference and with "
                    "the planned difference, and report how often each crosses a boundary and how "
                    "many events it uses.",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        epilog="examples:\n"
               "  %(prog)s --metric mean --difference 2.5 --sd 12 --looks 8 --seed 1\n"
               "  %(prog)s --metric proportion --p1 0.18 --p2 0.15 --schedule irregular "
               "--actual-looks 20 --json",
    )
    add_plan_arguments(p)
    p.add_argument("--streams", type=_whole_number, default=20000, metavar="N",
                   help="simulated comparisons per scenario (default 20000)")
    p.add_argument("--actual-looks", type=_whole_number, default=None, metavar="K",
                   help="looks actually taken in the simulation (default: --looks)")
    p.add_argument("--schedule", default="regular", choices=("regular", "irregular"),
                   help="regular: equally spaced looks; irregular: random look times per comparison")
    p.add_argument("--seed", type=whole_number_type(0), default=None, metavar="S",
                   help="random seed, for a repeatable run")
    p.add_argument("--json", action="store_true", help="print one JSON object instead of text")
    p.set_defaults(func=run)


def _percent(p, se):
    return f"{100 * p:.2f}% (± {100 * se:.2f}%)"


def human_text(plan, oc) -> str:
    lines = [describe_design(plan)]
    lines.append(
        f"Simulated {oc.streams} comparisons per scenario, {oc.looks} {oc.schedule} looks"
        + (f" ({oc.schedules} random schedules)" if oc.schedule == "irregular" else "")
        + f", plan of {oc.max_per_group} events per group. (± is one Monte Carlo standard error.)"
    )
    lines.append("")
    lines.append(
        f"No real difference: {_percent(oc.false_alarm_rate, oc.false_alarm_rate_se)} of comparisons "
        f"wrongly reported a difference; the design allows {100 * plan.alpha:g}%."
    )
    if plan.futility:
        lines.append(
            f"  Ignoring the futility boundary that would be {100 * oc.false_alarm_rate_ignoring_futility:.2f}%; "
            f"{100 * oc.futility_stop_null:.1f}% stopped early for no material difference."
        )
    lines.append(
        f"Planned difference: {_percent(oc.power, oc.power_se)} of comparisons found it; "
        f"the design aims for {100 * plan.power:g}%."
    )
    if plan.futility:
        lines.append(f"  {100 * oc.futility_stop_alternative:.1f}% were stopped for no material "
                     f"difference although the difference was there.")
    lines.append("")
    lines.append("Events per group when the decision came:")
    for label, events in (("no real difference", oc.events_null),
                          ("planned difference", oc.events_alternative)):
        q = events.quantiles
        lines.append(
            f"  {label}: mean {events.mean:.1f} (± {events.mean_se:.1f}); a quarter decided by "
            f"{q[25]:.0f}, half by {q[50]:.0f}, three quarters by {q[75]:.0f}, 90% by {q[90]:.0f}."
        )
    return "\n".join(lines)


def _in_option_words(exc) -> InvalidArgumentError:
    """The library's message about one of its arguments, naming the option the user typed."""
    name, _, rest = str(exc).partition(" ")
    option = _OPTION_OF.get(name)
    return InvalidArgumentError(f"{option} {rest}" if option else str(exc))


def run(args) -> int:
    # lazy: start-up time of the command line (the simulation loads scipy through planning).
    from ..stats import simulate

    plan = plan_from_args(args)
    try:
        oc = simulate.simulate_design(
            plan,
            streams=args.streams,
            looks=args.actual_looks,
            schedule=args.schedule,
            seed=args.seed,
            progress=sys.stderr.isatty() and not args.json,
        )
    except InvalidArgumentError as exc:
        raise _in_option_words(exc) from None
    if args.json:
        out = {"plan": plan.to_dict(), **oc.to_dict()}
        print(json.dumps(json_safe(out), indent=2))
    else:
        print(human_text(plan, oc))
    return 0
