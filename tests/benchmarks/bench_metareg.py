"""Meta-regression at scale: envlink's REML fit against a tight NumPy reference and statsmodels.

Run as a script (it is not collected by pytest):

    python tests/benchmarks/bench_metareg.py --k 1000 100000 17000000 --json out.json

For each k it simulates Fisher's z effects (study sizes n uniform in 12..400, so
``v = 1 / (n - 3)``; tau² = 0.01; three coefficients: an intercept and two normal
moderators) and times, as medians of repeated runs with min-max:

- ``envlink``: ``MetaRegression(method="REML").fit(y=, v=, X=)`` (estimates and SEs);
- ``tight``: a blocked NumPy Fisher-scoring REML written below (one pass over the
  data per iteration, float64 sums, started from DerSimonian-Laird);
- ``statsmodels``: one ``WLS(...).fit(cov_type="fixed scale")`` at the fitted tau²
  (one weighted least-squares fit only, no tau² estimation).

It reports peak resident memory above the input during envlink's fit, the recovery
of tau² and the coefficients (|estimate - truth| / SE), and checks that float32
storage and Dask arrays give the same answer.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import threading
import time
from pathlib import Path

import numpy as np

TAU2 = 0.01
BETA = np.array([0.3, 0.1, -0.05])
BLOCK = 1 << 16


def simulate(k: int, seed: int = 2026) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Fisher's z effects with known truth, generated in blocks (little extra memory)."""
    rng = np.random.default_rng(seed)
    y = np.empty(k)
    v = np.empty(k)
    X = np.empty((k, 2))
    for lo in range(0, k, 1 << 20):
        hi = min(k, lo + (1 << 20))
        m = hi - lo
        n = rng.integers(12, 401, m)
        v[lo:hi] = 1.0 / (n - 3)
        X[lo:hi] = rng.normal(size=(m, 2))
        y[lo:hi] = (BETA[0] + X[lo:hi] @ BETA[1:] + rng.normal(0, np.sqrt(TAU2), m)
                    + rng.normal(0, np.sqrt(v[lo:hi])))
    return y, v, X


def _pass(y: np.ndarray, v: np.ndarray, X: np.ndarray, t2: float):
    """One blocked pass: the sums Fisher scoring needs, in float64."""
    p = X.shape[1] + 1
    A = np.zeros((p, p))
    B = np.zeros((p, p))
    C = np.zeros((p, p))
    b1 = np.zeros(p)
    b2 = np.zeros(p)
    s = np.zeros(4)  # Σw, Σw², Σw y², Σw² y²
    xb = np.empty((BLOCK, p))
    xb[:, 0] = 1.0
    for lo in range(0, y.shape[0], BLOCK):
        hi = min(y.shape[0], lo + BLOCK)
        m = hi - lo
        x = xb[:m]
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


def tight_reml(y: np.ndarray, v: np.ndarray, X: np.ndarray, tol: float = 1e-10,
               max_iter: int = 100) -> dict:
    """Fisher-scoring REML for tau² from a DerSimonian-Laird start; one pass per iteration."""
    k, p = y.shape[0], X.shape[1] + 1
    A, B, C, b1, b2, s = _pass(y, v, X, 0.0)
    Ai = np.linalg.inv(A)
    beta = Ai @ b1
    Q = s[2] - b1 @ beta
    t2 = max(0.0, (Q - (k - p)) / (s[0] - np.trace(Ai @ B)))
    n_iter = 0
    for it in range(1, max_iter + 1):
        n_iter = it
        A, B, C, b1, b2, s = _pass(y, v, X, t2)
        Ai = np.linalg.inv(A)
        beta = Ai @ b1
        AB = Ai @ B
        trP = s[0] - np.trace(AB)
        yPPy = s[3] - 2 * beta @ b2 + beta @ B @ beta
        trPP = s[1] - 2 * np.trace(Ai @ C) + np.trace(AB @ AB)
        new = max(0.0, t2 + (yPPy - trP) / trPP)
        done = abs(new - t2) <= tol * max(1.0, new)
        t2 = new
        if done:
            break
    A, B, C, b1, b2, s = _pass(y, v, X, t2)  # estimates and SEs at the converged tau²
    Ai = np.linalg.inv(A)
    AB = Ai @ B
    trPP = s[1] - 2 * np.trace(Ai @ C) + np.trace(AB @ AB)
    return {"tau2": t2, "coef": Ai @ b1, "se": np.sqrt(np.diag(Ai)), "iterations": n_iter,
            "tau2_se": float(np.sqrt(2.0 / trPP))}


class _PeakRSS:
    """Sample this process's resident memory every 2 ms (Linux /proc)."""

    def __enter__(self):
        self.base = self._rss()
        self.peak = self.base
        self._stop = threading.Event()
        self._t = threading.Thread(target=self._run, daemon=True)
        self._t.start()
        return self

    def _run(self):
        while not self._stop.is_set():
            self.peak = max(self.peak, self._rss())
            time.sleep(0.002)

    def __exit__(self, *exc):
        self._stop.set()
        self._t.join()
        self.peak = max(self.peak, self._rss())

    @staticmethod
    def _rss() -> int:
        with open("/proc/self/statm") as fh:
            return int(fh.read().split()[1]) * os.sysconf("SC_PAGE_SIZE")


def _time(fn, repeats: int):
    times, out = [], None
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return out, _stats(times)


def _stats(times: list[float]) -> dict:
    return {"median_s": statistics.median(times), "min_s": min(times), "max_s": max(times),
            "runs": len(times)}


def run_case(k: int, repeats: int, statsmodels_fit: bool, extra_checks: bool) -> dict:
    from envlink.metareg import MetaRegression

    y, v, X = simulate(k)
    input_mb = (y.nbytes + v.nbytes + X.nbytes) / 2**20
    MetaRegression().fit(y=y[:1000], v=v[:1000], X=X[:1000])  # compile / warm up
    MetaRegression().fit(y=y[:1000].astype(np.float32), v=v[:1000].astype(np.float32),
                         X=X[:1000].astype(np.float32))
    with _PeakRSS() as mem:
        m = MetaRegression(method="REML").fit(y=y, v=v, X=X)
    fit_mem_mb = (mem.peak - mem.base) / 2**20
    # interleaved runs, so that load from other processes hits both alike
    env_t, tight_t = [], []
    for _ in range(repeats):
        m, t = _time(lambda: MetaRegression(method="REML").fit(y=y, v=v, X=X), 1)
        env_t.append(t["median_s"])
        ref, t = _time(lambda: tight_reml(y, v, X), 1)
        tight_t.append(t["median_s"])
    t_env, t_tight = _stats(env_t), _stats(tight_t)
    res = {
        "k": k, "input_mb": round(input_mb, 1), "envlink": t_env, "tight": t_tight,
        "ratio_envlink_over_tight": t_env["median_s"] / t_tight["median_s"],
        "envlink_peak_mb_above_input": round(fit_mem_mb, 1),
        "tau2": m.tau2_, "tau2_se": m.tau2_se_, "coef": m.coef_.tolist(), "se": m.se_.tolist(),
        "iterations": {"envlink": m.n_iter_, "tight": ref["iterations"]},
        "agree_with_tight": {
            "tau2_rel": abs(m.tau2_ - ref["tau2"]) / ref["tau2"],
            "coef_max_rel": float(np.max(np.abs(m.coef_ - ref["coef"]) / np.abs(ref["coef"]))),
            "se_max_rel": float(np.max(np.abs(m.se_ - ref["se"]) / ref["se"])),
        },
        "recovery_in_se": {
            "tau2": abs(m.tau2_ - TAU2) / m.tau2_se_,
            "coef": (np.abs(m.coef_ - BETA) / m.se_).tolist(),
        },
    }
    if statsmodels_fit:
        from statsmodels.regression.linear_model import WLS

        Xa = np.column_stack([np.ones(k), X])
        w = 1.0 / (v + m.tau2_)
        sm, t_sm = _time(lambda: WLS(y, Xa, weights=w).fit(cov_type="fixed scale"), 1)
        del Xa
        res["statsmodels_wls"] = t_sm
        res["ratio_statsmodels_over_tight"] = t_sm["median_s"] / t_tight["median_s"]
        res["statsmodels_se_max_rel"] = float(np.max(np.abs(sm.bse - m.se_) / m.se_))
    if extra_checks:
        m32, t32 = _time(lambda: MetaRegression().fit(
            y=y.astype(np.float32), v=v.astype(np.float32), X=X.astype(np.float32)), 1)
        res["float32"] = {"time": t32, "tau2_rel": abs(m32.tau2_ - m.tau2_) / m.tau2_,
                          "coef_diff_in_se": float(np.max(np.abs(m32.coef_ - m.coef_) / m.se_))}
        import dask.array as da

        chunks = max(1 << 16, k // 16)
        md, td = _time(lambda: MetaRegression().fit(
            y=da.from_array(y, chunks=chunks), v=da.from_array(v, chunks=chunks),
            X=da.from_array(X, chunks=(chunks, 2))), 1)
        res["dask"] = {"time": td, "chunks": chunks, "tau2_rel": abs(md.tau2_ - m.tau2_) / m.tau2_,
                       "coef_max_rel": float(np.max(np.abs(md.coef_ - m.coef_) / np.abs(m.coef_)))}
    return res


def main(argv: list[str] | None = None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--k", type=float, nargs="+", default=[1e3, 1e5])
    ap.add_argument("--repeats", type=int, default=5)
    ap.add_argument("--no-statsmodels", action="store_true")
    ap.add_argument("--no-extra", action="store_true", help="skip the float32 and Dask checks")
    ap.add_argument("--json", type=Path, default=None)
    args = ap.parse_args(argv)
    out = []
    for k in args.k:
        r = run_case(int(k), args.repeats, not args.no_statsmodels, not args.no_extra)
        out.append(r)
        e, t = r["envlink"], r["tight"]
        print(f"k={r['k']:>9}  envlink {e['median_s']:.4f}s [{e['min_s']:.4f}-{e['max_s']:.4f}]  "
              f"tight {t['median_s']:.4f}s [{t['min_s']:.4f}-{t['max_s']:.4f}]  "
              f"ratio {r['ratio_envlink_over_tight']:.3f}  "
              f"statsmodels {r.get('statsmodels_wls', {}).get('median_s', float('nan')):.4f}s  "
              f"mem +{r['envlink_peak_mb_above_input']} MB (input {r['input_mb']} MB)", flush=True)
    if args.json:
        args.json.write_text(json.dumps(out, indent=2))


if __name__ == "__main__":
    main()
