"""Clusters nested in groups (crews of one site): CR2 with Bell–McCaffrey df, per-group counts.

The reference here is an explicit matrix computation from raw rows, written
from the published formulas, not from the module's closed forms:

* CR2: Bell & McCaffrey (2002), Survey Methodology 28(2):169–181, eq. (3.1)
  (from memory): V = (X'X)^{-1} Σ_c X_c' A_c e_c e_c' A_c X_c (X'X)^{-1},
  A_c = (I − H_cc)^{-1/2}.
* Bell–McCaffrey degrees of freedom: Imbens & Kolesár (2016), Review of
  Economics and Statistics 98(4):701–712, section on the "BM" df (from
  memory): G_c = (I − H)_{·,c} A_c X_c (X'X)^{-1} ℓ, df = (Σλ)² / Σλ² over the
  eigenvalues λ of G'G (working model σ² I).
"""

import math

import numpy as np
import pytest

from monitor.errors import InvalidArgumentError
from monitor.stats import clustered

from test_clustered import cells_from_rows, statsmodels_fit


def _inverse_sqrt(matrix):
    values, vectors = np.linalg.eigh(matrix)
    return vectors @ np.diag(values ** -0.5) @ vectors.T


def cr2_by_matrices(group, key, value):
    """CR2 standard error and Bell–McCaffrey df of the group-1 coefficient, from raw rows."""
    group, key, value = np.asarray(group), np.asarray(key), np.asarray(value, float)
    X = np.column_stack([np.ones(value.size), (group == 0).astype(float)])
    bread = np.linalg.inv(X.T @ X)
    H = X @ bread @ X.T
    e = value - H @ value
    ell = np.array([0.0, 1.0])
    meat = np.zeros((2, 2))
    columns = []
    eye = np.eye(value.size)
    for c in np.unique(key):
        idx = np.flatnonzero(key == c)
        A = _inverse_sqrt(np.eye(idx.size) - H[np.ix_(idx, idx)])
        score = X[idx].T @ A @ e[idx]
        meat += np.outer(score, score)
        columns.append((eye - H)[:, idx] @ A @ X[idx] @ bread @ ell)
    V = bread @ meat @ bread
    G = np.column_stack(columns)
    lam = np.linalg.eigvalsh(G.T @ G)
    return math.sqrt(V[1, 1]), float(lam.sum() ** 2 / np.sum(lam ** 2))


def crew_rows(rng, crews1, crews2, per_crew=(3, 30), crew_sd=1.0, shift=0.0):
    rows_g, rows_k, rows_v = [], [], []
    for g, crews in ((0, crews1), (1, crews2)):
        for c in range(crews):
            m = int(rng.integers(*per_crew))
            effect = rng.normal(0.0, crew_sd)
            rows_g += [g] * m
            rows_k += [f"site{g}-crew{c}"] * m
            rows_v += list(shift + effect + rng.normal(0.0, rng.uniform(0.5, 2.0), m))
    return np.array(rows_g), np.array(rows_k), np.array(rows_v)


def call(cells, **kw):
    return clustered.cluster_robust_difference(cells["groups"], cells["keys"], cells["n"], cells["sum_dev"],
                                               cells["shift"], sum_dev2=cells["sum_dev2"], **kw)


@pytest.mark.parametrize("crews", [(2, 2), (3, 7), (5, 5), (2, 9), (12, 4)], ids=lambda c: f"{c[0]}v{c[1]}")
def test_cr2_and_bell_mccaffrey_df_match_the_matrix_formulas(crews):
    rng = np.random.default_rng(sum(crews) * 7 + crews[0])
    for _ in range(5):
        g, k, v = crew_rows(rng, *crews, shift=float(rng.choice([0.0, 500.0])))
        cells = cells_from_rows(g, k, v, shift=float(v[0]), split_cells=True)
        r = call(cells, variance="cr2")
        se, df = cr2_by_matrices(g, k, v)
        assert r.variance_method == "cr2"
        assert r.standard_error == pytest.approx(se, rel=1e-8)
        assert r.df == pytest.approx(df, rel=1e-8)
        assert r.clusters_group1 == crews[0] and r.clusters_group2 == crews[1] and r.shared_clusters == 0
        # The estimate is the same difference of means whatever the variance.
        assert r.estimate == pytest.approx(v[g == 0].mean() - v[g == 1].mean(), rel=1e-9, abs=1e-9)


def test_auto_picks_cr2_for_nested_and_keeps_cr1_for_shared_clusters():
    rng = np.random.default_rng(3)
    g, k, v = crew_rows(rng, 4, 6)
    nested = call(cells_from_rows(g, k, v), variance="auto")
    assert nested.variance_method == "cr2"
    # Calendar days shared by both groups keep CR1 exactly as statsmodels' clustered OLS.
    days = np.array([f"day{i % 6}" for i in range(v.size)])
    shared = call(cells_from_rows(g, days, v), variance="auto")
    fit = statsmodels_fit(g, days, v)
    assert shared.variance_method == "cr1"
    assert shared.standard_error == pytest.approx(fit.bse[1], rel=1e-6)
    assert shared.df == len(np.unique(days)) - 1
    with pytest.raises(InvalidArgumentError, match="belong to one group"):
        call(cells_from_rows(g, days, v), variance="cr2")
    with pytest.raises(InvalidArgumentError, match="variance must be one of"):
        call(cells_from_rows(g, days, v), variance="cr3")


@pytest.mark.parametrize("variance", ["cr1", "cr2", "auto"])
def test_one_cluster_in_a_group_is_degenerate_not_a_huge_statistic(variance):
    # One crew per site: the CR1 variance is rounding noise (t near 1e13 before); no test exists.
    rng = np.random.default_rng(11)
    g, k, v = crew_rows(rng, 1, 1, shift=1000.0)
    r = call(cells_from_rows(g, k, v, shift=1000.0), variance=variance)
    assert r.degenerate and clustered.ONE_CLUSTER_NOTE in r.notes
    assert math.isnan(r.statistic) and math.isnan(r.p_value) and not r.reject
    g, k, v = crew_rows(rng, 1, 6)
    r = call(cells_from_rows(g, k, v), variance=variance)
    assert r.degenerate and not r.reject


def test_cluster_counts_per_group_when_nested_and_in_total_when_shared():
    c = clustered.cluster_counts([0, 0, 0, 1, 1, 1], ["a", "b", "c", "d", "e", "f"], [4, 5, 0, 3, 2, 2],
                                 min_clusters=4)
    # The empty cell of crew c does not count.
    assert (c.group1, c.group2, c.shared, c.total, c.nested) == (2, 3, 0, 5, True)
    assert c.minimum == clustered.MIN_CLUSTERS_PER_GROUP and not c.enough
    assert "group 1 has 2" in c.reason and "each group needs 3" in c.reason
    c = clustered.cluster_counts([0, 1] * 5, [f"d{i // 2}" for i in range(10)], [3] * 10, min_clusters=5)
    assert (c.group1, c.group2, c.shared, c.total, c.nested, c.enough) == (5, 5, 5, 5, False, True)
    # A large configured minimum is split between the groups when clusters are nested.
    c = clustered.cluster_counts([0] * 6 + [1] * 6, list("abcdefghijkl"), [1] * 12, min_clusters=10)
    assert c.minimum == 5 and c.enough
    c = clustered.cluster_counts([0] * 4 + [1] * 8, list("abcdefghijkl"), [1] * 12, min_clusters=10)
    assert not c.enough


def test_effective_n_never_exceeds_n():
    # Negative within-day correlation gives a design effect below 1.
    rng = np.random.default_rng(5)
    days = np.repeat(np.arange(12), 20)
    g = np.tile(np.repeat([0, 1], 10), 12)
    v = rng.normal(size=days.size)
    v -= np.array([v[(days == d) & (g == gg)].mean() for d, gg in zip(days, g)]) * 0.95
    r = call(cells_from_rows(g, days, v))
    assert r.design_effect < 1.0
    assert r.effective_n[0] <= (g == 0).sum() and r.effective_n[1] <= (g == 1).sum()


def test_design_effect_is_measurable_only_from_enough_days():
    rng = np.random.default_rng(9)
    for days, expected in ((2, False), (clustered.MIN_CLUSTERS_FOR_DESIGN_EFFECT - 1, False),
                           (clustered.MIN_CLUSTERS_FOR_DESIGN_EFFECT, True)):
        key = np.repeat(np.arange(days), 30)
        g = np.tile(np.repeat([0, 1], 15), days)
        v = rng.normal(size=key.size) + np.repeat(rng.normal(size=days), 30)
        de = clustered.design_effect(cells_from_rows(g, key, v))
        assert de.measurable is expected and de.clusters == days
