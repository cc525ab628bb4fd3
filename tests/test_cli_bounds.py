"""``gapwatch bounds``: JSON and table output, and one-line errors with exit status 2."""

from __future__ import annotations

import json

import pytest

from monitor.stats.boundaries import FutilitySpec, SequentialBoundary, efficacy_boundaries
from monitor.cli import main
from tests import reference_boundaries as ref


def run_cli(capsys, *argv):
    code = main(["bounds", *argv])
    out, err = capsys.readouterr()
    return code, out, err


def test_json_matches_the_engine_and_published_values(capsys):
    code, out, err = run_cli(capsys, "--fractions", "0.2,0.4,0.6,0.8,1", "--json")
    assert code == 0 and err == ""
    data = json.loads(out)
    assert data["spending"] == "obrien-fleming" and data["alpha"] == 0.05 and data["alternative"] == "two-sided"
    expected = efficacy_boundaries([0.2, 0.4, 0.6, 0.8, 1.0], 0.05, "obrien-fleming", "two-sided")
    assert [row["look"] for row in data["looks"]] == [1, 2, 3, 4, 5]
    for row, b in zip(data["looks"], expected):
        assert set(row) == {"look", "fraction", "z", "nominal_p", "cumulative_alpha", "alpha_spent"}
        assert row["z"] == pytest.approx(b.z, abs=1e-12)
        assert row["nominal_p"] == pytest.approx(b.nominal_p)
        assert row["cumulative_alpha"] == pytest.approx(b.cumulative_alpha)
        assert row["alpha_spent"] == pytest.approx(b.alpha_spent)
    # Source: ref.LAN_DEMETS_SOURCE.
    assert [row["z"] for row in data["looks"]] == pytest.approx(ref.LAN_DEMETS_FIVE_LOOKS["obrien-fleming"], abs=6e-4)


def test_json_one_sided_and_infinite_boundary_is_null(capsys):
    code, out, _ = run_cli(capsys, "--spending", "obrien-fleming", "--alpha", "0.025", "--alternative", "less",
                           "--fractions", "0.01,0.5,1.1", "--json")
    assert code == 0
    looks = json.loads(out)["looks"]
    assert looks[0]["z"] is None and looks[0]["nominal_p"] == 0.0
    assert looks[-1]["cumulative_alpha"] == 0.025
    assert looks[1]["z"] > 0  # a magnitude even for "less"


def test_json_with_futility(capsys):
    code, out, _ = run_cli(capsys, "--fractions", "0.3,0.7,1", "--alternative", "greater", "--alpha", "0.025",
                           "--futility", "hsd:-2", "--beta", "0.1", "--drift", "2.9", "--json")
    assert code == 0
    data = json.loads(out)
    live = SequentialBoundary(0.025, "obrien-fleming", "greater", futility=FutilitySpec("hsd:-2", 0.1, 2.9))
    for row, t in zip(data["looks"], (0.3, 0.7, 1.0)):
        assert row["futility_z"] == pytest.approx(live.add_look(t).futility_z, abs=1e-12)
    assert data["futility"] == {"spending": "hsd:-2", "beta": 0.1, "drift": 2.9}


def test_table_explains_the_boundary(capsys):
    code, out, _ = run_cli(capsys, "--spending", "pocock", "--fractions", "0.5,1")
    assert code == 0
    assert "pocock" in out and "final" in out
    assert "±2.1570" in out  # two-sided boundaries shown with both signs
    assert "false alarm" in out and "nominal p" in out


@pytest.mark.parametrize(
    "argv, fragment",
    [
        (["--fractions", "0.5,0.4"], "'0.4' after '0.5'"),
        (["--fractions", "0.5,0.5"], "strictly increase"),
        (["--fractions=-0.1,1"], "'-0.1'"),
        (["--fractions", "0,1"], "'0'"),
        (["--fractions", "0.5,x"], "'x'"),
        (["--fractions", "0.5,,1"], "--fractions"),
        (["--fractions", "1,1.5"], "final look"),
        (["--fractions", "0.5,0.50000001,1"], "'0.50000001'"),
        (["--fractions", "0.5,1", "--alpha", "1.5"], "'1.5'"),
        (["--fractions", "0.5,1", "--alpha", "0"], "--alpha"),
        (["--fractions", "0.5,1", "--alpha", "abc"], "'abc'"),
        (["--fractions", "0.5,1", "--spending", "haybittle"], "'haybittle'"),
        (["--fractions", "0.5,1", "--spending", "power:-2"], "--spending"),
        (["--fractions", "0.5,1", "--futility", "pocock"], "--drift"),
        (["--fractions", "0.5,1", "--futility", "pocock", "--drift", "2", "--beta", "2"], "--beta"),
    ],
)
def test_bad_input_exits_2_with_one_line_naming_the_value(capsys, argv, fragment):
    code, out, err = run_cli(capsys, *argv)
    assert code == 2
    assert out == ""
    assert fragment in err
    assert len(err.strip().splitlines()) == 1


def test_unknown_spending_lists_valid_names(capsys):
    _, _, err = run_cli(capsys, "--fractions", "1", "--spending", "nope")
    for name in ("obrien-fleming", "pocock", "hsd:GAMMA", "power:RHO"):
        assert name in err
