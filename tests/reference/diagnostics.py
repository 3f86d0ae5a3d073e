"""Reference data for the small-study diagnostics, each block with its source.

The trim-and-fill sets are invented so that the rank computation of Duval & Tweedie
(2000, Biometrics 56:455) can be followed by hand; the steps are written out below and
re-derived in tests/metareg/test_diagnostics.py with plain Python.
"""

from __future__ import annotations

# --- L0 by hand (Duval & Tweedie 2000, eqs. for T_n and L0), all variances 1 -------------
# With equal variances every random-effects weight is equal, so each pooled estimate is
# the plain mean, whatever tau².
# iteration 1: k0 = 0, mu = mean of all 7 = 9.3 / 7 = 1.328571
#   deviations -1.2286 -0.2286 -0.0286 0.1714 0.2714 0.4714 0.5714
#   ranks of |dev|  7 3 1 2 4 5 6 -> T_n = 2+4+5+6 = 17, L0 = (4*17 - 56) / 13 = 0.923 -> 1
# iteration 2: trim 1.9; mu = mean of 6 = 7.4 / 6 = 1.233333
#   deviations -1.1333 -0.1333 0.0667 0.2667 0.3667 0.5667 0.6667
#   ranks 7 2 1 3 4 5 6 -> T_n = 1+3+4+5+6 = 19, L0 = (76 - 56) / 13 = 1.538 -> 2
# iteration 3: trim 1.8 and 1.9; mu = mean of 5 = 5.6 / 5 = 1.12
#   deviations -1.02 -0.02 0.18 0.38 0.48 0.68 0.78
#   ranks 7 1 2 3 4 5 6 -> T_n = 2+3+4+5+6 = 20, L0 = (80 - 56) / 13 = 1.846 -> 2: settled
# fill: 2 * 1.12 - 1.8 = 0.44, 2 * 1.12 - 1.9 = 0.34; the 9 effects average 10.08 / 9 = 1.12;
# DL: Q = sum((y - 1.12)^2) = 3.5896 < k - 1 = 8, so tau² = 0 and se = sqrt(1 / 9) = 1/3.
TRIMFILL_L0_HAND = {
    "y": [0.1, 1.1, 1.3, 1.5, 1.6, 1.8, 1.9],
    "v": [1.0] * 7,
    "side": "left",
    "k0": 2,
    "iterations": 3,
    "l0_path": [12 / 13, 20 / 13, 24 / 13],
    "center": 1.12,
    "filled": [0.44, 0.34],
    "estimate": 1.12,
    "se": 1 / 3,
    "q_filled": 3.5896,
}

# --- R0 by hand (Duval & Tweedie 2000: R0 = γ* - 1, γ* the run of top ranks on the right)
# iteration 1: mu = 4.7 / 6 = 0.783333; deviations -0.78 -0.58 -0.38 -0.28 0.82 1.22;
#   largest |dev| first: 1.22 (+), 0.82 (+), 0.78 (-) -> γ* = 2, R0 = 1
# iteration 2: trim 2.0; mu = 2.7 / 5 = 0.54; deviations -0.54 -0.34 -0.14 -0.04 1.06 1.46
#   -> γ* = 2, R0 = 1: settled; fill 2 * 0.54 - 2.0 = -0.92
TRIMFILL_R0_HAND = {
    "y": [0.0, 0.2, 0.4, 0.5, 1.6, 2.0],
    "v": [1.0] * 6,
    "side": "left",
    "k0": 1,
    "center": 0.54,
    "filled": [-0.92],
}

# --- a funnel with small-study asymmetry (invented): larger variance, larger effect ------
ASYMMETRIC_FUNNEL = {
    "y": [0.05, 0.12, 0.10, 0.22, 0.30, 0.28, 0.45, 0.52, 0.61, 0.75],
    "v": [0.004, 0.006, 0.010, 0.015, 0.022, 0.030, 0.045, 0.060, 0.080, 0.110],
}

# --- the one-tailed 5 % normal critical value (common practice: 1.6449) ------------------
Z_ONE_TAILED_05 = 1.6448536269514722  # scipy.stats.norm.isf(0.05), scipy 1.x
