"""One-pass weighted sums over effect sizes, the hot loop of every tau² estimator.

For weights ``w_i = 1 / (v_i + tau2)`` and the design row ``x_i`` (an implicit
leading 1 when ``intercept`` is true, then the moderator columns) one pass returns

``A = Σ w x xᵀ``, ``B = Σ w² x xᵀ``, ``C = Σ w³ x xᵀ``, ``b1 = Σ w x y``,
``b2 = Σ w² x y`` and the scalars ``Σ w``, ``Σ w²``, ``Σ w y²``, ``Σ w² y²``,
``Σ log(v + tau2)``.

Everything is accumulated in float64 whatever the storage type, in fixed blocks of
rows (so results do not depend on the number of threads), and no array of the
length of the data is ever allocated. A compiled kernel is used when numba is
installed; otherwise a blocked NumPy loop gives the same sums.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np

__all__ = ["Sums", "weighted_sums", "HAVE_NUMBA", "BLOCK_ROWS"]

#: rows per block (2**16): small enough for cache-sized temporaries, large enough
#: that per-block overhead is negligible.
BLOCK_ROWS = 1 << 16

try:  # optional compiled kernel; ``numba`` is only used under ``if HAVE_NUMBA``
    import numba
except ImportError:  # pragma: no cover - exercised where numba is absent
    HAVE_NUMBA = False
else:
    HAVE_NUMBA = True


@dataclass
class Sums:
    """Weighted sums from one pass (see the module docstring for their meaning)."""

    A: np.ndarray
    B: np.ndarray
    C: np.ndarray
    b1: np.ndarray
    b2: np.ndarray
    sw: float
    sw2: float
    syy1: float
    syy2: float
    slog: float

    def __add__(self, other: Sums) -> Sums:
        return Sums(
            self.A + other.A, self.B + other.B, self.C + other.C, self.b1 + other.b1,
            self.b2 + other.b2, self.sw + other.sw, self.sw2 + other.sw2,
            self.syy1 + other.syy1, self.syy2 + other.syy2, self.slog + other.slog,
        )


def _n_stats(p: int) -> int:
    return 3 * p * p + 2 * p + 5


@functools.lru_cache(maxsize=32)
def _lower(p: int) -> tuple[np.ndarray, np.ndarray]:
    return np.tril_indices(p, -1)


def _unpack(vec: np.ndarray, p: int) -> Sums:
    pp = p * p
    lo_r, lo_c = _lower(p)
    mats = []
    for j in range(3):
        m = vec[j * pp:(j + 1) * pp].reshape(p, p).copy()
        m[lo_c, lo_r] = m[lo_r, lo_c]  # kernels fill the lower triangle
        mats.append(m)
    o = 3 * pp
    b1 = vec[o:o + p].copy()
    b2 = vec[o + p:o + 2 * p].copy()
    s = vec[o + 2 * p:]
    return Sums(mats[0], mats[1], mats[2], b1, b2, float(s[0]), float(s[1]), float(s[2]),
                float(s[3]), float(s[4]))


if HAVE_NUMBA:

    @numba.njit(cache=True, nogil=True)
    def _nb_block(y, v, X, intercept, tau2, lo, hi, acc):  # pragma: no cover - compiled
        m = X.shape[1]
        p = m + (1 if intercept else 0)
        pp = p * p
        x = np.empty(p)
        o = 3 * pp + 2 * p
        for i in range(lo, hi):
            vt = np.float64(v[i]) + tau2
            w = 1.0 / vt
            yi = np.float64(y[i])
            if intercept:
                x[0] = 1.0
                for j in range(m):
                    x[j + 1] = X[i, j]
            else:
                for j in range(m):
                    x[j] = X[i, j]
            w2 = w * w
            w3 = w2 * w
            wy = w * yi
            w2y = w2 * yi
            for a in range(p):
                xa = x[a]
                acc[3 * pp + a] += wy * xa
                acc[3 * pp + p + a] += w2y * xa
                for c in range(a + 1):
                    xx = xa * x[c]
                    acc[a * p + c] += w * xx
                    acc[pp + a * p + c] += w2 * xx
                    acc[2 * pp + a * p + c] += w3 * xx
            acc[o] += w
            acc[o + 1] += w2
            acc[o + 2] += wy * yi
            acc[o + 3] += w2y * yi
            acc[o + 4] += math.log(vt)

    @numba.njit(cache=True, nogil=True)
    def _nb_serial(y, v, X, intercept, tau2, block):  # pragma: no cover - compiled
        k = y.shape[0]
        p = X.shape[1] + (1 if intercept else 0)
        nstat = 3 * p * p + 2 * p + 5
        out = np.zeros(nstat)
        acc = np.zeros(nstat)
        for lo in range(0, k, block):
            acc[:] = 0.0
            _nb_block(y, v, X, intercept, tau2, lo, min(k, lo + block), acc)
            out += acc
        return out

    @numba.njit(cache=True, nogil=True, parallel=True)
    def _nb_parallel(y, v, X, intercept, tau2, block):  # pragma: no cover - compiled
        k = y.shape[0]
        p = X.shape[1] + (1 if intercept else 0)
        nstat = 3 * p * p + 2 * p + 5
        nblk = (k + block - 1) // block
        part = np.zeros((nblk, nstat))
        for bi in numba.prange(nblk):
            acc = np.zeros(nstat)
            lo = bi * block
            _nb_block(y, v, X, intercept, tau2, lo, min(k, lo + block), acc)
            part[bi, :] = acc
        out = np.zeros(nstat)
        for bi in range(nblk):  # fixed order: the same sums whatever the thread count
            out += part[bi, :]
        return out


def _np_block(y: np.ndarray, v: np.ndarray, X: np.ndarray, intercept: bool,
              tau2: float) -> np.ndarray:
    """Sums over one block with NumPy (float64 temporaries of block size only)."""
    n = y.shape[0]
    if intercept:
        xb = np.empty((n, X.shape[1] + 1))
        xb[:, 0] = 1.0
        xb[:, 1:] = X
    else:
        xb = np.asarray(X, dtype=np.float64)
    p = xb.shape[1]
    vt = np.asarray(v, dtype=np.float64) + tau2
    w = 1.0 / vt
    yf = np.asarray(y, dtype=np.float64)
    xw = xb * w[:, None]
    xw2 = xw * w[:, None]
    A = xb.T @ xw
    B = xw.T @ xw
    C = xw2.T @ xw
    wy = w * yf
    out = np.empty(_n_stats(p))
    pp = p * p
    out[:pp] = A.ravel()
    out[pp:2 * pp] = B.ravel()
    out[2 * pp:3 * pp] = C.ravel()
    out[3 * pp:3 * pp + p] = xb.T @ wy
    out[3 * pp + p:3 * pp + 2 * p] = xw.T @ wy
    o = 3 * pp + 2 * p
    out[o] = w.sum()
    out[o + 1] = w @ w
    out[o + 2] = wy @ yf
    out[o + 3] = wy @ wy
    out[o + 4] = np.log(vt).sum()
    return out


def block_sums_vector(y, v, X, intercept: bool, tau2: float, *, use_numba: bool = True,
                      block: int = BLOCK_ROWS) -> np.ndarray:
    """Packed sums over NumPy arrays, block by block (a helper for Dask chunks too)."""
    y = np.asarray(y)
    v = np.asarray(v)
    X = np.asarray(X)
    if use_numba and HAVE_NUMBA and y.shape[0] > 0:
        kern = _nb_parallel if y.shape[0] > 8 * block else _nb_serial
        return kern(y, v, X, bool(intercept), float(tau2), int(block))
    p = X.shape[1] + (1 if intercept else 0)
    out = np.zeros(_n_stats(p))
    for lo in range(0, y.shape[0], block):
        hi = lo + block
        out += _np_block(y[lo:hi], v[lo:hi], X[lo:hi], intercept, tau2)
    return out


def weighted_sums(y, v, X, intercept: bool, tau2: float, *, use_numba: bool = True) -> Sums:
    """Weighted sums for ``w = 1 / (v + tau2)`` over NumPy or Dask arrays.

    Parameters
    ----------
    y, v : array (k,)
        Effects and sampling variances (any float dtype; summed in float64).
    X : array (k, m)
        Moderator columns (``m`` may be 0).
    intercept : bool
        Whether a leading column of ones is implied.
    tau2 : float
        Residual heterogeneity added to every variance.
    use_numba : bool, default True
        Use the compiled kernel when numba is installed.

    Returns
    -------
    Sums

    Examples
    --------
    >>> import numpy as np
    >>> s = weighted_sums(np.array([1.0, 3.0]), np.array([1.0, 1.0]), np.zeros((2, 0)), True, 0.0)
    >>> float(s.A[0, 0]), float(s.b1[0]), float(s.syy1)
    (2.0, 4.0, 10.0)
    """
    p = X.shape[1] + (1 if intercept else 0)
    if _is_dask(y):
        import dask

        yb = y.to_delayed().ravel()
        vb = v.to_delayed().ravel()
        xb = X.to_delayed()
        xb = xb.reshape(xb.shape[0], -1)[:, 0]
        parts = [dask.delayed(block_sums_vector)(a, b, c, intercept, tau2, use_numba=use_numba)
                 for a, b, c in zip(yb, vb, xb, strict=True)]
        vec = np.sum(np.stack(dask.compute(*parts)), axis=0)
    else:
        vec = block_sums_vector(y, v, X, intercept, tau2, use_numba=use_numba)
    return _unpack(vec, p)


def _is_dask(a: object) -> bool:
    return type(a).__module__.startswith("dask")
