"""Outside reference values for the fixed-sample tests, each with its source.

Values marked "from memory" were recalled rather than re-read from the source;
the tests check them against our code *and* against scipy/statsmodels where
those can compute the same thing, so a misremembered digit shows up twice.
"""

# Student's (1908) sleep data as shipped with R (``datasets::sleep``): extra
# hours of sleep for ten patients under two drugs.
SLEEP_GROUP1 = [0.7, -1.6, -0.2, -1.2, -0.1, 3.4, 3.7, 0.8, 0.0, 2.0]
SLEEP_GROUP2 = [1.9, 0.8, 1.1, 0.1, -0.1, 4.4, 5.5, 1.6, 4.6, 3.4]

# Printed output of the examples in R's ``?t.test`` / ``?sleep`` help pages
# (from memory): group 1 − group 2.
SLEEP_EXAMPLES = [
    # (method, statistic, df, p_value, ci_low, ci_high, source)
    ("paired", -4.0621, 9.0, 0.002833, -2.4598858, -0.7001142,
     "R t.test(extra ~ group, data = sleep, paired = TRUE) output, from memory"),
    ("welch", -1.8608, 17.776, 0.07939, -3.3654832, 0.2054832,
     "R t.test(extra ~ group, data = sleep) output, from memory"),
    ("pooled", -1.8608, 18.0, 0.07919, -3.363874, 0.203874,
     "R t.test(extra ~ group, data = sleep, var.equal = TRUE) output, from memory"),
]

# Newcombe, R. G. (1998). Interval estimation for the difference between
# independent proportions: comparison of eleven methods. Statistics in
# Medicine 17, 873-890. Worked examples, method 10 (hybrid score, no
# continuity correction), from memory.
NEWCOMBE_EXAMPLES = [
    # (successes1, n1, successes2, n2, low, high)
    (56, 70, 48, 80, 0.0524, 0.3339),
    (9, 10, 3, 10, 0.1705, 0.8090),
    (5, 56, 0, 29, -0.0381, 0.1926),
]

# Standard normal and Student t quantiles as printed in any statistics table
# (e.g. the appendix tables of Moore, McCabe & Craig, "Introduction to the
# Practice of Statistics"), from memory.
QUANTILES = [
    # (distribution, df, probability, value)
    ("normal", None, 0.95, 1.645),
    ("normal", None, 0.975, 1.960),
    ("t", 16, 0.975, 2.120),
    ("t", 9, 0.975, 2.262),
    ("t", 20, 0.95, 1.725),
]
