"""Simulated data-driven changes of plan, and events- against information-based fractions.

The promises: the conditional error principle keeps the overall false-alarm
rate at alpha whatever the rule (up to Monte Carlo error, judged with the
reported standard errors); restarting with a fresh alpha does not; an
information-based fraction keeps the planned power when the planning sd was
wrong, an events-based one does not. The full-size run is
tests/benchmarks/replan.py.
"""

from __future__ import annotations

import math

import pytest

from monitor.errors import InvalidArgumentError
from monitor.stats.replan_simulate import RULES, simulate_fraction_choice, simulate_replanning


def test_without_a_change_both_methods_are_the_original_design():
    rows = simulate_replanning(rule="none", streams=20_000, seed=11, drift_ratios=(0.0, 1.0))
    null = [r for r in rows if r.drift == 0]
    alt = [r for r in rows if r.drift > 0]
    assert null[0].rejection == null[1].rejection and null[0].changed == 0.0
    assert abs(null[0].rejection - 0.05) < 4 * null[0].rejection_se
    assert abs(alt[0].rejection - 0.8) < 4 * alt[0].rejection_se


@pytest.mark.slow
@pytest.mark.parametrize("rule", [r for r in RULES if r != "none"])
def test_conditional_error_keeps_alpha_under_data_driven_rules(rule):
    rows = simulate_replanning(rule=rule, streams=60_000, seed=12, drift_ratios=(0.0,))
    cep = rows[0]
    assert cep.method == "conditional error" and cep.changed > 0.2
    assert cep.rejection < 0.05 + 3 * cep.rejection_se


def test_restarting_when_ahead_inflates_the_false_alarm_rate():
    rows = simulate_replanning(rule="double-or-halve", streams=30_000, seed=13, drift_ratios=(0.0,))
    cep, restart = rows
    assert restart.method == "restart and spend again"
    assert restart.rejection > 0.05 + 5 * restart.rejection_se
    assert cep.rejection < 0.05 + 3 * cep.rejection_se
    assert restart.rejection > cep.rejection


def test_doubling_when_promising_raises_power_and_information():
    base = simulate_replanning(rule="none", streams=20_000, seed=14, drift_ratios=(0.75,))[0]
    doubled = simulate_replanning(rule="promising-doubles", streams=20_000, seed=14, drift_ratios=(0.75,))[0]
    assert doubled.rejection > base.rejection + 4 * math.hypot(base.rejection_se, doubled.rejection_se)
    assert doubled.information > base.information


def test_rule_and_interim_are_checked():
    with pytest.raises(InvalidArgumentError, match="rule must be one of"):
        simulate_replanning(rule="sometimes", streams=10)
    with pytest.raises(InvalidArgumentError, match="interim must be below 0.5"):
        simulate_replanning(rule="none", streams=10, interim=0.6)
    with pytest.raises(InvalidArgumentError, match="fraction must be"):
        simulate_fraction_choice(fraction="days", sd_ratio=1.0)


def test_events_fraction_loses_power_when_the_sd_was_guessed_too_small():
    row = simulate_fraction_choice(fraction="events", sd_ratio=0.7, streams=20_000, seed=15)
    # The plan's events carry 0.49 of the information: drift 0.7 θ, power near 0.5, not 0.8.
    assert row.rejection < 0.6 and row.planned_events < 0.55 * simulate_fraction_choice(
        fraction="events", sd_ratio=1.0, streams=100, seed=1).planned_events


@pytest.mark.parametrize("sd_ratio", [0.7, 1.3])
def test_information_fraction_keeps_the_planned_power(sd_ratio):
    row = simulate_fraction_choice(fraction="information", sd_ratio=sd_ratio, streams=3000, seed=16)
    assert abs(row.rejection - 0.8) < 4 * row.rejection_se
    assert row.planned_events == simulate_fraction_choice(
        fraction="information", sd_ratio=1.0, streams=2, seed=1).planned_events


def test_information_fraction_false_alarm_rate():
    row = simulate_fraction_choice(fraction="information", sd_ratio=1.3, drift_ratio=0.0, streams=4000, seed=17)
    assert row.rejection < 0.05 + 3 * row.rejection_se
