"""Outside reference values for the dashboard's decision scale (``dashboard.scale``).

A t value with upper tail 0.025 has the same one-sided p-value as z = 1.959964, so its
z-equivalent must be 1.96 whatever the degrees of freedom. The t values are the 0.975
quantiles printed in every table of Student's t distribution (e.g. Fisher & Yates,
Statistical Tables, Table III; from memory), to the three decimals tables print.
"""

Z_0975 = 1.959964  # standard normal 0.975 quantile (printed normal tables, from memory)

T_0975 = [
    # (df, t with upper tail 0.025, source)
    (1, 12.706, "t table, df 1, two-sided 0.05 (from memory)"),
    (2, 4.303, "t table, df 2, two-sided 0.05 (from memory)"),
    (4, 2.776, "t table, df 4, two-sided 0.05 (from memory)"),
    (10, 2.228, "t table, df 10, two-sided 0.05 (from memory)"),
    (30, 2.042, "t table, df 30, two-sided 0.05 (from memory)"),
]
