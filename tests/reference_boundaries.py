"""Outside reference values for the group-sequential boundary tests, each with its source.

Values marked "from memory" were recalled rather than re-read from the source.
The tests check each against our integration engine *and*, where it can be
done independently, against scipy's multivariate normal integration or Monte
Carlo, so a misremembered digit shows up as a disagreement between references.
"""

# Jennison, C. & Turnbull, B. W. (2000). Group Sequential Methods with
# Applications to Clinical Trials. Chapman & Hall/CRC. Table 2.1: Pocock
# constants C_P(K, alpha) for K equally spaced looks, two-sided alpha = 0.05,
# reject at look k when |Z_k| >= C_P. From memory.
POCOCK_CONSTANTS_TWO_SIDED_05 = {
    1: 1.960,
    2: 2.178,
    3: 2.289,
    4: 2.361,
    5: 2.413,
}
POCOCK_SOURCE = "Jennison & Turnbull (2000), Table 2.1, alpha = 0.05 two-sided (from memory)"

# Jennison & Turnbull (2000), Table 2.3: O'Brien & Fleming (1979) constants
# C_B(K, alpha), two-sided alpha = 0.05; reject at look k when
# |Z_k| >= C_B * sqrt(K / k). From memory.
OBRIEN_FLEMING_CONSTANTS_TWO_SIDED_05 = {
    1: 1.960,
    2: 1.977,
    3: 2.004,
    4: 2.024,
    5: 2.040,
}
OBRIEN_FLEMING_SOURCE = "Jennison & Turnbull (2000), Table 2.3, alpha = 0.05 two-sided (from memory)"

# Lan & DeMets (1983) spending-function boundaries, five equally spaced looks
# (t = 0.2, 0.4, ..., 1.0), two-sided alpha = 0.05 with alpha/2 per side, as
# reproduced in the group-sequential literature (e.g. DeMets & Lan 1994,
# Statistics in Medicine 13, 1341-1352). From memory; 3 decimals.
LAN_DEMETS_FIVE_LOOKS = {
    "obrien-fleming": (4.877, 3.357, 2.680, 2.290, 2.031),
    "pocock": (2.438, 2.427, 2.410, 2.397, 2.386),
}
LAN_DEMETS_SOURCE = "Lan-DeMets five equally spaced looks, two-sided 0.05 (from memory)"

# Hwang, Shih & DeCani (1990) spending with gamma = -4, three equally spaced
# looks, one-sided alpha = 0.025: the textbook example of this family as
# commonly reproduced. From memory; 4 decimals.
HWANG_SHIH_DECANI_MINUS4_THREE_LOOKS = (3.0107, 2.5465, 1.9992)
HWANG_SHIH_DECANI_SOURCE = "HSD(-4), 3 equally spaced looks, one-sided 0.025 (from memory)"

# A single look at the full information is a fixed-sample test:
# z_{0.975} = 1.959964 (any normal table; scipy.stats.norm.isf(0.025)).
FIXED_SAMPLE_TWO_SIDED_05 = 1.959964
