"""Reference values for effect sizes, each block with its source.

Book values below are recalled from memory (marked so); every test that uses them
also recomputes them by hand from the formula with the ``math`` module, so a wrong
recollection fails loudly rather than hiding.
"""

from __future__ import annotations

# Borenstein, Hedges, Higgins & Rothstein (2009), Introduction to Meta-Analysis,
# chapter 4, worked example of d and g from means (from memory): treated mean 103,
# SD 5.5, n 50; control mean 100, SD 4.5, n 50. Pooled within-group SD 5.0249,
# d = 0.5970, V_d = 0.0418, J = 0.9923 (the approximation 1 - 3/(4 df - 1)),
# g = 0.5924, V_g = 0.0411 (values printed to 4 decimals).
# Note: a recollection of d ≈ 0.6294, V_d ≈ 0.0410, g ≈ 0.6246, V_g ≈ 0.0403 for the
# same inputs does not survive hand computation (3 / 5.0249 = 0.5970) and is not used.
BORENSTEIN_CH4_SMD = {
    "inputs": {"mean1": 103.0, "sd1": 5.5, "n1": 50, "mean2": 100.0, "sd2": 4.5, "n2": 50},
    "s_within": 5.0249,
    "d": 0.5970,
    "var_d": 0.0418,
    "j_approx": 0.9923,
    "g": 0.5924,
    "var_g": 0.0411,
    "decimals": 4,
}

# Borenstein et al. (2009), chapter 5, binary data (from memory): treated 5 events of
# 100, control 10 events of 100. Risk ratio 0.5000, ln RR = -0.6931, V = 0.2800;
# odds ratio 0.4737, ln OR = -0.7472, V = 0.3216.
BORENSTEIN_CH5_BINARY = {
    "inputs": {"events1": 5, "total1": 100, "events2": 10, "total2": 100},
    "log_rr": -0.6931,
    "var_log_rr": 0.2800,
    "log_or": -0.7472,
    "var_log_or": 0.3216,
    "decimals": 4,
}

# Borenstein et al. (2009), chapter 6, correlation (from memory): r = 0.50, n = 100,
# z = 0.5493, V_z = 1/97 = 0.0103.
BORENSTEIN_CH6_CORRELATION = {
    "inputs": {"r": 0.5, "n": 100},
    "z": 0.5493,
    "var_z": 0.0103,
    "decimals": 4,
}

# Hedges (1981), J. Educational Statistics 6:107, table of the exact bias factor c(m)
# (from memory): c(2) = 0.5642, c(10) = 0.9227; c(m) = Γ(m/2) / (sqrt(m/2) Γ((m-1)/2)).
HEDGES_1981_J = {2: 0.5642, 10: 0.9227}

# Worked inputs for hand computation (invented numbers; the expected values are
# computed in the tests from the published formulas):
# - Lajeunesse (2015), Ecology 96:2056, eqs. for the bias-corrected ln RR and its
#   variance;
# - Nakagawa et al. (2015), Methods in Ecology and Evolution 6:143, lnVR and lnCVR;
# - Freeman & Tukey (1950), Ann. Math. Statist. 21:607, double arcsine; Miller (1978),
#   The American Statistician 32:138, its inverse.
CONTINUOUS_CASES = [
    {"mean1": 12.0, "sd1": 3.0, "n1": 20, "mean2": 10.0, "sd2": 2.0, "n2": 20},
    {"mean1": 0.8, "sd1": 0.9, "n1": 6, "mean2": 1.7, "sd2": 0.4, "n2": 9},
    {"mean1": 250.0, "sd1": 40.0, "n1": 120, "mean2": 310.0, "sd2": 95.0, "n2": 80},
]
PROPORTION_CASES = [(0, 10), (1, 10), (5, 10), (9, 10), (10, 10), (3, 50), (17, 240)]
