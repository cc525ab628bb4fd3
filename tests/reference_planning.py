"""Outside reference values for planning and sequential inference, each with its source.

Values marked "from memory" were recalled from the named table, not re-read from
it; the tests check each one against an independent computation as well
(Monte Carlo or numerical integration) so that a misremembered digit shows.
"""

# Classical constant-boundary designs, two-sided alpha = 0.05, K equally spaced looks.
# Pocock (1977) constants C_P(K, 0.05): reject at look k when |Z_k| >= C_P.
# Source: Jennison & Turnbull (2000), Group Sequential Methods with Applications to
# Clinical Trials, Table 2.1 (from memory).
POCOCK_CONSTANT = {2: 2.178, 3: 2.289, 4: 2.361, 5: 2.413}

# O'Brien & Fleming (1979) constants C_B(K, 0.05): reject at look k when
# |Z_k| >= C_B * sqrt(K / k). Source: Jennison & Turnbull (2000), Table 2.3 (from memory).
OBRIEN_FLEMING_CONSTANT = {2: 1.977, 3: 2.004, 4: 2.024, 5: 2.040}

# Inflation factors R(K, alpha=0.05, beta=0.2) of those designs: maximum information
# over fixed-sample information for power 0.8.
# Source: Jennison & Turnbull (2000), Table 2.2 (Pocock) and Table 2.4 (O'Brien-Fleming)
# (from memory).
POCOCK_INFLATION = {2: 1.110, 3: 1.166, 4: 1.202, 5: 1.229}
OBRIEN_FLEMING_INFLATION = {2: 1.008, 3: 1.017, 4: 1.024, 5: 1.028}

# Lan-DeMets O'Brien-Fleming-type spending, 5 equally spaced looks, two-sided 0.05,
# power 0.8: inflation about 1.026 (from memory, no table named; the test accepts
# +-0.005 and checks the resulting power by Monte Carlo).
LAN_DEMETS_OBF_INFLATION_5 = 1.026

# Lan-DeMets O'Brien-Fleming-type boundaries, 5 equally spaced looks, two-sided 0.05.
# Source: Jennison & Turnbull (2000), ch. 7 examples (from memory).
LAN_DEMETS_OBF_BOUNDARIES_5 = (4.877, 3.357, 2.680, 2.290, 2.031)

# Fixed-sample sizes per group, two-sample comparison of proportions.
# Zar, J. H. (1999), Biostatistical Analysis, 4th ed., Example 24.26, p. 561:
# p1 = 0.45, p2 = 0.25, two-sided alpha = 0.05, power 0.90 -> n = 127.2343 per group.
# That figure includes the Fleiss, Tytun & Ury (1980) continuity correction
# n_cc = n/4 * (1 + sqrt(1 + 4 / (n |p1 - p2|)))^2 applied to the uncorrected
# pooled/unpooled normal-approximation size n (value taken from a secondary
# reproduction of the example, not checked against the printed book).
ZAR_24_26 = {"p1": 0.45, "p2": 0.25, "alpha": 0.05, "power": 0.90, "n_corrected": 127.2343}

# Armitage, McPherson & Rowe (1969), J. R. Statist. Soc. A 132, 235-244, Table 2:
# five equally spaced looks each tested at nominal two-sided 0.05 (|Z| >= 1.96) give an
# overall false-alarm rate of about 0.142 (from memory).
ARMITAGE_5_LOOKS = 0.142
