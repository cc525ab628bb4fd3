"""``gapwatch test``: output, JSON shape, exit codes and messages."""

import json
import math
import subprocess
import sys
from pathlib import Path

import pytest
from scipy import stats

from monitor.cli import main

ROOT = Path(__file__).resolve().parents[1]


def run_json(capsys, *argv):
    code = main(["test", *argv, "--json"])
    out = capsys.readouterr().out
    assert code == 0
    return json.loads(out)


def test_welch_json_matches_scipy(capsys):
    d = run_json(capsys, "welch", "--group1", "40,12.5,3.1", "--group2", "38,11.2,2.7")
    ref = stats.ttest_ind_from_stats(12.5, 3.1, 40, 11.2, 2.7, 38, equal_var=False)
    assert d["method"] == "welch" and d["alternative"] == "two-sided" and d["alpha"] == 0.05
    assert d["statistic"] == pytest.approx(ref.statistic) and d["p_value"] == pytest.approx(ref.pvalue)
    assert d["estimate"] == pytest.approx(1.3)
    assert isinstance(d["critical_values"], list) and len(d["critical_values"]) == 2
    assert isinstance(d["reject"], bool) and d["reject"] is False
    for key in ("df", "ci", "standard_error", "effect_size", "notes"):
        assert key in d


def test_z_json_has_null_df_and_one_sided_bound(capsys):
    d = run_json(capsys, "z", "--group1", "50,105,15", "--group2", "50,100,15", "--alternative", "greater")
    assert d["df"] is None
    assert d["statistic"] == pytest.approx(5 / 3)
    assert d["critical_values"] == [pytest.approx(1.6448536)]
    assert d["ci"][1] is None and d["ci"][0] == pytest.approx(5 - stats.norm.ppf(0.95) * 3)
    assert d["reject"] is True


def test_paired_and_null_difference_and_alpha(capsys):
    d = run_json(capsys, "paired", "--differences", "20,0.8,1.9", "--null-difference", "0.2",
                 "--alpha", "0.1", "--alternative", "less")
    t = (0.8 - 0.2) / (1.9 / math.sqrt(20))
    assert d["statistic"] == pytest.approx(t) and d["df"] == 19
    assert d["p_value"] == pytest.approx(stats.t.cdf(t, 19))
    assert d["ci"][0] is None and d["alpha"] == 0.1 and d["null_difference"] == 0.2


def test_proportions_json(capsys):
    d = run_json(capsys, "proportions", "--group1", "400,52", "--group2", "380,31")
    assert d["estimate"] == pytest.approx(52 / 400 - 31 / 380)
    assert d["effect_size"]["risk_ratio"] == pytest.approx((52 / 400) / (31 / 380))
    wald = run_json(capsys, "proportions", "--group1", "400,52", "--group2", "380,31", "--interval", "wald")
    assert wald["ci"] != d["ci"]


def test_pooled_human_output_has_conclusion(capsys):
    assert main(["test", "pooled", "--group1", "12,5.2,1.1", "--group2", "10,4.1,1.0"]) == 0
    out = capsys.readouterr().out
    assert "Two-sample t test, pooled variance" in out
    assert "p-value" in out and "20 degrees of freedom" in out
    last = out.strip().splitlines()[-1]
    assert last.startswith("At level 0.05 the data indicate") and "not that it is large enough" in last


def test_not_rejected_conclusion_says_what_it_does_not_mean(capsys):
    main(["test", "welch", "--group1", "10,5.0,2", "--group2", "10,4.9,2"])
    last = capsys.readouterr().out.strip().splitlines()[-1]
    assert "do not show" in last and "not evidence that there is no difference" in last


def test_degenerate_zero_variance_is_reported(capsys):
    assert main(["test", "pooled", "--group1", "5,2,0", "--group2", "4,3,0"]) == 0
    out = capsys.readouterr().out
    assert "degenerate: both groups have zero variance" in out and "No conclusion" in out
    d = run_json(capsys, "welch", "--group1", "5,2,0", "--group2", "4,3,0")
    assert d["reject"] is False and d["statistic"] is None
    assert "degenerate: both groups have zero variance" in d["notes"]


@pytest.mark.parametrize("argv,option,value", [
    (["welch", "--group1", "1,2,3", "--group2", "4,5,6"], "--group1", "1,2,3"),
    (["welch", "--group1", "5,2,3", "--group2", "4,5,-6"], "--group2", "4,5,-6"),
    (["proportions", "--group1", "10,11", "--group2", "4,2"], "--group1", "10,11"),
    (["proportions", "--group1", "10,1", "--group2", "4,-2"], "--group2", "4,-2"),
    (["welch", "--group1", "5,2", "--group2", "4,5,6"], "--group1", "5,2"),
    (["welch", "--group1", "5,2,x", "--group2", "4,5,6"], "--group1", "5,2,x"),
    (["welch", "--group1", "5.5,2,1", "--group2", "4,5,6"], "--group1", "5.5,2,1"),
    (["welch", "--group1", "5,2,1", "--group2", "4,5,6", "--alpha", "1.5"], "--alpha", "1.5"),
    (["welch", "--group1", "5,2,1", "--group2", "4,5,6", "--alpha", "0"], "--alpha", "0"),
    (["welch", "--group1", "5,2,1"], "--group2", "N,MEAN,SD"),
    (["paired", "--differences", "1,0.5,1"], "--differences", "1,0.5,1"),
    (["paired", "--group1", "5,1,1"], "--group1", "5,1,1"),
])
def test_bad_input_exits_2_naming_argument_and_value(capsys, argv, option, value):
    assert main(["test", *argv]) == 2
    err = capsys.readouterr().err
    assert option in err and value in err
    assert len(err.strip().splitlines()) == 1


def test_unknown_method_is_rejected_by_argparse(capsys):
    with pytest.raises(SystemExit) as exc:
        main(["test", "anova"])
    assert exc.value.code == 2


def test_real_subprocess():
    proc = subprocess.run(
        [sys.executable, "-m", "monitor", "test", "welch", "--group1", "30,10,2",
         "--group2", "25,9,3", "--json"],
        cwd=ROOT, capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    d = json.loads(proc.stdout)
    assert d["df"] == pytest.approx(40.475, abs=1e-3)
    bad = subprocess.run([sys.executable, "-m", "monitor", "test", "welch", "--group1", "30,10,-2",
                          "--group2", "25,9,3"], cwd=ROOT, capture_output=True, text=True, timeout=120)
    assert bad.returncode == 2 and "--group1" in bad.stderr and "30,10,-2" in bad.stderr
