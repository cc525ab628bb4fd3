"""The plan a look measures against: replans, events or information, conditional power, projection."""

from __future__ import annotations

import math
from datetime import datetime, timedelta, timezone

import pytest

from monitor.look.plan import (conditional_powers, original_fraction, plan_state, projection, recent_rates,
                                 resume_boundary, work_out_replan, z_of)
from monitor.errors import InvalidArgumentError, ReplanRefusedError
from monitor.stats.adaptive import AdaptiveBoundary
from monitor.stats.information import plan_information
from monitor.stats.planning import plan_mean
from scipy import special, stats


def _design(kind="events", planned=None, difference=0.5, sd=2.0, looks=4):
    plan = plan_mean(difference, sd, looks=looks)
    out = {"alpha": 0.05, "spending": "obrien-fleming", "alternative": "two-sided", "null_difference": 0.0,
           "metric": "mean", "pairing": None,
           "plan": {"planned_per_group": plan.max_per_group, "inputs": {"power": 0.8, "looks": looks,
                                                                       "difference": difference, "sd": sd},
                    "figures": plan.to_dict()}}
    if planned is not None:
        out["plan"] = {"planned_per_group": planned}
    if kind == "information":
        out["fraction"] = "information"
    return out


def test_plan_state_without_replans_is_the_frozen_plan():
    design = _design()
    state = plan_state(design)
    assert state.end == 1.0 and state.planned_now == design["plan"]["planned_per_group"]
    assert state.drift == pytest.approx(design["plan"]["figures"]["drift"]) and state.looks == 4
    assert plan_state(_design(planned=300)).drift is None
    assert original_fraction(state, events=state.planned // 2) == pytest.approx(0.5, abs=0.01)


def test_information_state_uses_the_plan_maximum():
    design = _design("information")
    state = plan_state(design)
    plan = plan_mean(0.5, 2.0, looks=4)
    assert state.maximum == pytest.approx(plan_information(plan))
    assert original_fraction(state, events=10, standard_error=1 / math.sqrt(state.maximum / 2)) == pytest.approx(0.5)
    with pytest.raises(InvalidArgumentError, match="difference and an sd"):
        plan_state(_design("information", planned=300))


def test_a_negative_planned_difference_gives_a_negative_drift():
    state = plan_state(_design(difference=-0.5))
    assert state.drift < 0


def test_worked_replan_and_state_after_it():
    design = _design()
    planned = design["plan"]["planned_per_group"]
    live = AdaptiveBoundary(0.05, "obrien-fleming", "two-sided")
    first = live.add_look(0.3)
    looks = [{"fraction": 0.3, "boundary_z": first.upper_z, "futility_z": None, "statistic": 1.4, "df": None}]
    worked = work_out_replan(design, looks, [], None, planned_per_group=2 * planned)
    assert worked.new_plan == {"planned_per_group": 2 * planned, "end": 2.0}
    assert worked.change.anchor_z == 1.4 and worked.change.end_fraction == 2.0
    rows = [{"record": worked.change.to_dict(), "new_plan": worked.new_plan}]
    state = plan_state(design, rows)
    assert state.end == 2.0 and state.planned_now == 2 * planned
    assert state.drift == pytest.approx(design["plan"]["figures"]["drift"])  # same difference, same drift
    # A new difference changes the drift on the original scale: θ_new / √end.
    second = work_out_replan(design, looks, [], None, difference=0.4)
    new = plan_mean(0.4, 2.0, looks=4)
    assert second.new_plan["planned_per_group"] == new.max_per_group
    after = plan_state(design, [{"record": second.change.to_dict(), "new_plan": second.new_plan}])
    assert after.drift == pytest.approx(new.drift / math.sqrt(new.max_per_group / planned))
    # Expected z at the original plan's end under 0.4 is 0.4/0.5 of the original drift.
    assert after.drift == pytest.approx(0.8 * design["plan"]["figures"]["drift"], rel=2e-3)
    with pytest.raises(ReplanRefusedError, match="current one"):
        work_out_replan(design, looks, [], None, planned_per_group=planned)


def test_resume_boundary_replays_looks_across_a_replan():
    design = _design()
    state0 = plan_state(design)
    live = AdaptiveBoundary(0.05, "obrien-fleming", "two-sided")
    a = live.add_look(0.3)
    change = live.replan(1.1, 1.5)
    b = live.add_look(0.7)
    rows = [{"record": change.to_dict(), "new_plan": {"planned_per_group": 1, "end": 1.5}}]
    state = plan_state(design, rows)
    looks = [{"fraction": 0.3, "boundary_z": a.upper_z, "futility_z": None},
             {"fraction": 0.7, "boundary_z": b.bound_upper, "futility_z": None, "bounds": b.to_dict()}]
    again = resume_boundary(design, state, None, looks)
    assert again.add_look(1.0).upper_z == pytest.approx(live.add_look(1.0).upper_z, abs=1e-12)
    assert state0.end == 1.0


def test_conditional_powers_match_a_single_remaining_look_by_hand():
    design = _design(looks=2)
    state = plan_state(design)
    b = AdaptiveBoundary(0.05, "obrien-fleming", "two-sided")
    first = b.add_look(0.5)
    final = AdaptiveBoundary.resume(0.05, "obrien-fleming", "two-sided", [first.to_dict()]).add_look(1.0).upper_z
    z = 1.2
    out = conditional_powers(state, b, z, 0.5)
    s = z * math.sqrt(0.5)
    by_hand = stats.norm.sf((final - s - state.drift * 0.5) / math.sqrt(0.5))
    assert out["planned_difference"] == pytest.approx(by_hand, abs=1e-7)
    theta_hat = z / math.sqrt(0.5)
    assert out["current_estimate"] == pytest.approx(stats.norm.sf((final - s - theta_hat * 0.5) / math.sqrt(0.5)),
                                                    abs=1e-7)


def test_z_of_t_statistics_keeps_the_tail():
    assert z_of(2.0, None) == 2.0
    z = z_of(2.0, 12.0)
    assert special.ndtr(-z) == pytest.approx(stats.t.sf(2.0, 12), rel=1e-10)
    assert z_of(200.0, 3.0) == pytest.approx(-special.ndtri(stats.t.sf(200.0, 3)), rel=1e-9)


def test_recent_rates_and_projection():
    zone = timezone(timedelta(hours=1))
    cutoff = datetime(2026, 3, 10, 12, 0, tzinfo=zone)
    days = {0: {f"2026-03-{d:02d}": 100 for d in range(1, 11)}, 1: {f"2026-03-{d:02d}": 50 for d in range(1, 11)}}
    rates, span = recent_rates(days, cutoff)
    # Window: 4 March 00:00 to 10 March 12:00 local, 6.5 days holding 7 days' cells.
    assert span == pytest.approx(6.5)
    assert rates == pytest.approx((700 / 6.5, 350 / 6.5))
    state = plan_state(_design(planned=1000))
    p = projection(state, events=(1000, 500), pairs=None, share=0.5, rates=(rates, span), cutoff_local=cutoff)
    assert p["days_left"] == pytest.approx(500 / (350 / 6.5))
    assert p["completes_on"] == (cutoff + timedelta(days=p["days_left"])).date().isoformat()
    assert recent_rates({0: {}, 1: {}}, cutoff) is None
    stalled = projection(state, events=(1000, 500), pairs=None, share=0.5, rates=((1.0, 0.0), 3.0),
                         cutoff_local=cutoff)
    assert stalled["days_left"] is None and "completes_on" not in stalled


def test_outlook_words():
    from monitor.vocabulary import outlook_words

    assert outlook_words({"completes_on": "2026-03-12", "days_left": 9.2, "planned_difference": 0.83,
                          "current_estimate": 0.4}) == (
        "at the current rate the plan completes around Thu 12 Mar; if the planned difference is real, "
        "the chance of finding it by then is 83 %")
    assert outlook_words({"days_left": None, "current_estimate": 0.004}) == (
        "at the current rate the plan does not complete (a group has no recent events); if the difference "
        "seen so far is real, the chance of finding it by the plan's end is under 1 %")
    assert outlook_words({"planned_difference": 0.999}).endswith("by the plan's end is over 99 %")
    assert outlook_words({}) is None and outlook_words(None) is None


def test_alert_payload_and_email_carry_the_outlook():
    from datetime import datetime, timezone

    from monitor.alerts.wording import decision_payload, email_text

    values = {"decision": "data_problem", "look_number": 4, "estimate": 1.0, "ci_low": None, "ci_high": None,
              "p_value": 0.2, "fraction": 0.9, "n1": 90, "n2": 91, "warnings": ["zero variance"],
              "detail": {"plan": {"share": 0.45, "end": 2.0},
                         "outlook": {"completes_on": "2026-03-12", "planned_difference": 0.83}}}
    from types import SimpleNamespace

    design = SimpleNamespace(groups=("east", "west"), alpha=0.05)
    payload = decision_payload("pick-rate", 1, "data_problem", values, design,
                               datetime(2026, 3, 3, tzinfo=timezone.utc))
    assert payload["fraction"] == 0.45
    assert payload["outlook"].startswith("at the current rate the plan completes around Thu 12 Mar")
    _, body = email_text("a1", payload)
    assert "Outlook: At the current rate the plan completes around Thu 12 Mar; if the planned difference is " \
           "real, the chance of finding it by then is 83 %." in body
