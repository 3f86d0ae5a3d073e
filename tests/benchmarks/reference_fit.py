"""The tight reference process of bench_fit_cli.py: a REML meta-regression written by hand.

Run: ``python reference_fit.py TABLE.parquet EFFECT VARIANCE MOD1,MOD2,... OUT.json``.

What it computes, as a skilled analyst would write it with NumPy alone:

1. reads the named columns of the Parquet file with ``pyarrow.parquet.read_table``
   (threaded) and turns them into float64 NumPy arrays;
2. one blocked pass (2^16 rows, float64 sums) gives ``X'WX``, ``X'W²X``, ``X'W³X``,
   ``X'Wy``, ``X'W²y``, ``Σw``, ``Σw²``, ``Σwy²``, ``Σw²y²`` at a tau²;
3. at tau² = 0: Q_E with its df and p, and the DerSimonian-Laird start;
4. REML tau² by Fisher scoring from DL (one pass per iteration, stop when the change
   is <= 1e-10 · max(1, tau²)), then coefficients, their SEs, z, p and 95 % CIs,
   Q_M (Wald chi² of the moderators) and its p, I², H² (Higgins & Thompson 2002,
   typical variance ``(k - p) / tr P0``) and the SE of tau² (restricted information);
5. the Q-profile 95 % interval of tau² (Viechtbauer 2007): for each bound, Newton
   steps on ``Q(tau²) - chi²_q`` with the derivative ``-y'PPy`` from the same pass,
   started at the REML estimate, to a relative step of 1e-12 (0 when Q(0) is below
   the quantile);
6. R² (Raudenbush 2009): REML tau² of the model without moderators by the same
   Fisher scoring (passes over y and v only), ``100 max(0, (τ₀² − τ²) / τ₀²)``;
7. writes these values as JSON.
"""

from __future__ import annotations

import json
import sys

import numpy as np
import pyarrow.parquet as pq
from scipy import special, stats

BLOCK = 1 << 16
PASSES = [0]  # passes over the data, reported in the output


def sums(y, v, X, t2):
    PASSES[0] += 1
    k, p = y.shape[0], X.shape[1] + 1
    A = np.zeros((p, p))
    B = np.zeros((p, p))
    C = np.zeros((p, p))
    b1 = np.zeros(p)
    b2 = np.zeros(p)
    s = np.zeros(4)  # Σw, Σw², Σwy², Σw²y²
    xb = np.empty((BLOCK, p))
    xb[:, 0] = 1.0
    for lo in range(0, k, BLOCK):
        hi = min(k, lo + BLOCK)
        x = xb[:hi - lo]
        x[:, 1:] = X[lo:hi]
        w = 1.0 / (v[lo:hi] + t2)
        yy = y[lo:hi]
        xw = x * w[:, None]
        A += x.T @ xw
        B += xw.T @ xw
        C += (xw * w[:, None]).T @ xw
        wy = w * yy
        b1 += x.T @ wy
        b2 += xw.T @ wy
        s += (w.sum(), w @ w, wy @ yy, wy @ wy)
    return A, B, C, b1, b2, s


def solve(t2, S):
    """Coefficients, (X'WX)^-1, Q = y'Py, tr P, y'PPy and tr PP at tau² from one pass."""
    A, B, C, b1, b2, s = S
    Ai = np.linalg.inv(A)
    beta = Ai @ b1
    AB = Ai @ B
    return {"beta": beta, "Ai": Ai, "Q": s[2] - b1 @ beta, "trP": s[0] - np.trace(AB),
            "yPPy": s[3] - 2 * beta @ b2 + beta @ B @ beta,
            "trPP": s[1] - 2 * np.trace(Ai @ C) + np.trace(AB @ AB)}


def reml(y, v, X, tol=1e-10, max_iter=100):
    k, p = y.shape[0], X.shape[1] + 1
    g0 = solve(0.0, sums(y, v, X, 0.0))
    t2 = max(0.0, (g0["Q"] - (k - p)) / g0["trP"])
    for _ in range(max_iter):
        g = solve(t2, sums(y, v, X, t2))
        new = max(0.0, t2 + (g["yPPy"] - g["trP"]) / g["trPP"])
        done = abs(new - t2) <= tol * max(1.0, new)
        t2 = new
        if done:
            break
    return t2, g0, solve(t2, sums(y, v, X, t2))


def q_root(y, v, X, target, start, q0):
    if q0 <= target:
        return 0.0
    t = start
    for _ in range(200):
        g = solve(t, sums(y, v, X, t))
        step = (g["Q"] - target) / g["yPPy"]
        t = max(t + step, 0.0)
        if abs(step) <= 1e-12 * t:
            break
    return t


def main(path, effect, variance, mods, out):
    cols = [effect, variance, *mods]
    table = pq.read_table(path, columns=cols)
    y = table.column(effect).to_numpy()
    v = table.column(variance).to_numpy()
    X = np.column_stack([table.column(c).to_numpy() for c in mods])
    del table
    k, p = y.shape[0], X.shape[1] + 1
    t2, g0, g = reml(y, v, X)
    se = np.sqrt(np.diag(g["Ai"]))
    z = g["beta"] / se
    crit = stats.norm.ppf(0.975)
    m = p - 1
    QM = float(g["beta"][1:] @ np.linalg.solve(g["Ai"][1:, 1:], g["beta"][1:]))
    s2 = (k - p) / g0["trP"]
    df = k - p
    lo = q_root(y, v, X, stats.chi2.ppf(0.975, df), t2, g0["Q"])
    hi = q_root(y, v, X, stats.chi2.ppf(0.025, df), t2, g0["Q"])
    t0, _, _ = reml(y, v, X[:, :0])
    res = {
        "k": k, "p": p, "tau2": t2, "tau2_se": float(np.sqrt(2.0 / g["trPP"])),
        "tau2_ci": [lo, hi], "I2": 100 * t2 / (t2 + s2), "H2": (t2 + s2) / s2,
        "R2": max(0.0, 100 * (t0 - t2) / t0) if t0 > 0 else None,
        "Q_E": float(g0["Q"]), "Q_E_df": df, "Q_E_p": float(special.chdtrc(df, g0["Q"])),
        "Q_M": QM, "Q_M_df": m, "Q_M_p": float(special.chdtrc(m, QM)),
        "coefficients": [
            {"estimate": float(b), "se": float(s), "statistic": float(zz),
             "p": float(2 * special.ndtr(-abs(zz))), "ci_low": float(b - crit * s),
             "ci_high": float(b + crit * s)}
            for b, s, zz in zip(g["beta"], se, z, strict=True)],
        "passes": PASSES[0],
    }
    with open(out, "w") as fh:
        json.dump(res, fh, indent=2)


if __name__ == "__main__":
    main(sys.argv[1], sys.argv[2], sys.argv[3], sys.argv[4].split(","), sys.argv[5])
