"""Outside reference values for the cluster-robust difference, each with its source."""

# A small invented data set (operations: task minutes at two depots over five
# days; day d4 has group-1 events only and d5 group-2 events only).
# Reference numbers: statsmodels 0.15.0,
#   OLS(minutes, add_constant(is_group1)).fit(cov_type="cluster",
#       cov_kwds={"groups": day_codes}, use_t=True)
# run once and pasted here (the tests also recompute them live when
# statsmodels is installed).
SMALL_ROWS = [
    # (group index 0 = group 1 / 1 = group 2, day, minutes)
    (0, "d1", 4.1), (0, "d1", 5.0), (0, "d2", 3.8), (0, "d2", 6.2), (0, "d3", 5.5),
    (0, "d3", 4.9), (0, "d4", 7.1),
    (1, "d1", 6.0), (1, "d1", 5.2), (1, "d2", 4.4), (1, "d3", 6.8), (1, "d3", 5.9),
    (1, "d5", 5.1), (1, "d5", 4.7),
]
SMALL_ESTIMATE = -0.2142857142857122
SMALL_CR1_SE = 0.5593211385728439
SMALL_P_TWO_SIDED = 0.721122646959003   # t on G - 1 = 4 df
SMALL_CLUSTERS = 5

# CR1 small-sample factor G/(G-1) * (N-1)/(N-K): Cameron & Miller (2015),
# "A practitioner's guide to cluster-robust inference", J. Human Resources
# 50(2), section on finite-cluster corrections (from memory); it is the
# statsmodels default (use_correction=True, df_correction=True).

# Kish (1965), "Survey Sampling": design effect of equal clusters of m with
# intra-cluster correlation rho is 1 + (m - 1) * rho (from memory).
KISH = [
    # (rho, m, design effect)
    (0.0, 50, 1.0),
    (0.05, 21, 2.0),
    (0.1, 101, 11.0),
    (1.0, 30, 30.0),
]

# Donner & Klar (2000), "Design and Analysis of Cluster Randomization Trials in Health
# Research", ch. 5: the variance inflation ("design effect") of a two-group comparison of
# equal clusters of m with intra-cluster correlation rho is 1 + (m - 1) * rho (from memory;
# the same formula as Kish's above). Values worked by hand from the formula.
DONNER_KLAR = [
    # (rho, m, design effect)
    (0.01, 10, 1.09),
    (0.05, 20, 1.95),
    (0.02, 100, 2.98),
    (0.5, 2, 1.5),
]

# Cohen (1988), "Statistical Power Analysis for the Behavioral Sciences", 2nd ed.,
# Table 2.4.1: events per group of a two-sample t test at two-sided alpha 0.05 and
# power 0.80 for a standardised difference d (from memory). The clustered planner with
# clusters of one event, no design effect and clusters nested in groups (df 2(k - 1),
# the pooled t) must give the same numbers.
COHEN_T_PER_GROUP = [
    # (d, events per group)
    (0.5, 64),
    (0.8, 26),
    (1.0, 17),
]
