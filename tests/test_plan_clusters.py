"""``gapwatch plan`` for a clustered comparison: clusters per group, the few-clusters t, refusals."""

from __future__ import annotations

import json
import re
import shlex
from pathlib import Path

import pytest

from monitor import cli
from monitor.stats.clustered import plan_clusters
from monitor.stats.planning import plan_mean, plan_proportion

MEAN = ["plan", "--metric", "mean", "--difference", "2", "--sd", "10"]


def _run(capsys, *argv):
    code = cli.main(list(argv))
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def test_days_shared_by_both_groups_from_an_icc(capsys):
    code, out, err = _run(capsys, *MEAN, "--cluster-size", "40", "--icc", "0.05")
    assert code == 0 and err == ""
    expected = plan_clusters(plan_mean(2, 10).max_per_group, 40, icc=0.05, minimum_clusters=10)
    assert f"design effect {expected.design_effect:.3g}" in out
    assert f"plan for {expected.clusters_per_group} clusters per group, " \
           f"{expected.events_per_group} events per group" in out
    assert f"planned_per_group = {expected.events_per_group}" in out
    assert f"t with {expected.df:.0f} degrees of freedom" in out
    assert "Caution:" in out
    # The independent-events plan is still printed as before, above the clustered answer.
    assert out.index("efficacy bound") < out.index("Clustered:")
    assert not {"None", "nan", "inf"} & set(out.replace(".", " ").replace(",", " ").split())


def test_nested_clusters_from_a_design_effect_in_json(capsys):
    code, out, _ = _run(capsys, "plan", "--metric", "proportion", "--p1", "0.3", "--p2", "0.25",
                        "--looks", "3", "--cluster-size", "12", "--design-effect", "1.8",
                        "--nested-clusters", "--min-clusters", "12", "--json")
    assert code == 0
    data = json.loads(out)
    base = plan_proportion(0.3, 0.25, looks=3)
    assert data["max_per_group"] == base.max_per_group
    expected = plan_clusters(base.max_per_group, 12, design_effect=1.8, shared=False, minimum_clusters=6)
    assert data["clustering"] == pytest.approx(expected.to_dict())
    assert data["clustering"]["df"] == 2 * (expected.clusters_per_group - 1)


def test_few_clusters_raise_the_plan_to_the_looks_minimum(capsys):
    code, out, _ = _run(capsys, "plan", "--metric", "mean", "--difference", "5", "--sd", "10",
                        "--cluster-size", "40", "--icc", "0.05", "--json")
    assert code == 0
    c = json.loads(out)["clustering"]
    assert c["raised_to_minimum"] and c["clusters_per_group"] == 10 and c["events_per_group"] == 400


def test_without_cluster_options_the_json_is_unchanged(capsys):
    code, out, _ = _run(capsys, *MEAN, "--json")
    assert code == 0 and "clustering" not in json.loads(out)


@pytest.mark.parametrize("argv, words", [
    (["--cluster-size", "20", "--icc", "1"], ["--icc", "[0, 1)", "1"]),
    (["--cluster-size", "20", "--icc", "-0.1"], ["--icc", "-0.1"]),
    (["--cluster-size", "0.5", "--icc", "0.1"], ["--cluster-size", "0.5"]),
    (["--cluster-size", "20", "--icc", "0.1", "--design-effect", "2"], ["--icc", "--design-effect", "not both"]),
    (["--cluster-size", "20", "--design-effect", "0.8"], ["--design-effect", "0.8"]),
    (["--icc", "0.1"], ["--cluster-size"]),
    (["--design-effect", "2"], ["--cluster-size"]),
    (["--cluster-size", "20"], ["--icc", "--design-effect"]),
    (["--nested-clusters"], ["--cluster-size"]),
    (["--cluster-size", "20", "--icc", "0.1", "--min-clusters", "2"], ["--min-clusters", "2"]),
], ids=["icc one", "icc negative", "cluster below one", "icc and design effect", "design effect below one",
        "icc without size", "design effect without size", "size alone", "nested alone", "min clusters"])
def test_nonsense_is_refused_in_one_line_with_exit_2(capsys, argv, words):
    code, out, err = _run(capsys, *MEAN, *argv)
    assert code == 2 and out == ""
    assert len(err.strip().splitlines()) == 1
    assert err.startswith("gapwatch plan: ")
    for word in words:
        assert word in err


def test_a_cluster_size_that_is_not_a_number_is_refused_by_the_parser(capsys):
    with pytest.raises(SystemExit) as exc:
        cli.main([*MEAN, "--cluster-size", "many", "--icc", "0.1"])
    assert exc.value.code == 2
    assert "--cluster-size" in capsys.readouterr().err


def test_the_readme_example_prints_exactly_what_the_readme_shows(capsys):
    readme = (Path(__file__).resolve().parents[1] / "README.md").read_text(encoding="utf-8")
    section = readme.split("## Planning a clustered comparison", 1)[1].split("\n## ", 1)[0]
    command = re.search(r"```\n(\.venv/bin/gapwatch plan .+?)\n```", section).group(1)
    shown = re.search(r"```text\n(.+?)\n```", section, re.S).group(1)
    code, out, err = _run(capsys, *shlex.split(command)[1:])
    assert code == 0 and err == ""
    assert out.rstrip("\n") == shown
    # The figures the prose around it quotes.
    c = json.loads(_run(capsys, *shlex.split(command)[1:], "--json")[1])["clustering"]
    assert round(100 * (c["t_inflation"] - 1)) == 17 and c["clusters_per_group"] == 14 and c["df"] == 13
    assert "here 17 % more, because 14 days give 13 degrees of freedom" in " ".join(section.split())
