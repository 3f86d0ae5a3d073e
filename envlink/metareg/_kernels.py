"""One-pass weighted sums over effect sizes, the hot loop of every tau² estimator.

For weights ``w_i = 1 / (v_i + tau2)`` and the design row ``x_i`` (an implicit
leading 1 when ``intercept`` is true, then the moderator columns) one pass returns

``A = Σ w x xᵀ``, ``B = Σ w² x xᵀ``, ``C = Σ w³ x xᵀ``, ``b1 = Σ w x y``,
``b2 = Σ w² x y`` and the scalars ``Σ w``, ``Σ w²``, ``Σ w y²``, ``Σ w² y²``,
``Σ log(v + tau2)``. With an intercept, ``x`` and ``y`` are first moved by the
constants of :mod:`envlink.metareg.shifts` (recorded in :class:`Sums`; exact, and
better conditioned).

One pass may evaluate these sums at several values of tau² at once (each with its
own :data:`NEED_LOG` / :data:`NEED_C` / :data:`BASE` needs), so that solvers that
run side by side (the tau² estimate, the two bounds of its interval, the model
without moderators) share the reading of the data.

Everything is accumulated in float64 whatever the storage type, in fixed blocks of
rows (results do not depend on the number of threads); no array of the length of
the data is allocated. A compiled kernel is used when numba is installed (cached in
:func:`cache_folder`, never beside the package; compiled in each process where that
folder cannot be written); otherwise a blocked NumPy loop gives the same sums.
"""

from __future__ import annotations

import functools
import math
import os
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from envlink.metareg.shifts import effect_shift, moderator_shift

__all__ = ["Sums", "weighted_sums", "weighted_sums_multi", "block_sums_multi", "HAVE_NUMBA",
           "BLOCK_ROWS", "cache_folder", "NEED_LOG", "NEED_C", "BASE", "ALL"]

#: rows per block (2**16): the unit of the fixed summation order (and of threads).
BLOCK_ROWS = 1 << 16
#: rows per sub-block inside a block: the block's columns and weights stay in cache.
_SUB = 1 << 10

#: what one evaluation needs beyond ``A, B, b1, b2`` and the scalars: ``Σ log(v + tau2)``
#: (the likelihood), ``C = Σ w³ x xᵀ`` (the expected information of REML), or only the
#: intercept's sums (``BASE``: the model without moderators). Unrequested sums are NaN.
NEED_LOG, NEED_C, BASE = 1, 2, 4
ALL = NEED_LOG | NEED_C

try:  # optional compiled kernel; ``numba`` is only used under ``if HAVE_NUMBA``
    import numba
except ImportError:  # pragma: no cover - exercised where numba is absent
    HAVE_NUMBA = False
else:
    HAVE_NUMBA = True


def cache_folder() -> Path:
    """Where numba caches the compiled kernels: ``$ENVLINK_CACHE/numba``, else the user cache.

    The user cache is ``$XDG_CACHE_HOME/envlink/numba``, else
    ``~/.cache/envlink/numba`` (``%LOCALAPPDATA%\\envlink\\numba`` on Windows).

    Examples
    --------
    >>> import os
    >>> cache_folder().name
    'numba'
    """
    env = os.environ.get("ENVLINK_CACHE")
    if env:
        return Path(env).expanduser() / "numba"
    base = os.environ.get("XDG_CACHE_HOME") or (os.environ.get("LOCALAPPDATA") if os.name == "nt"
                                                 else None)
    return (Path(base) if base else Path.home() / ".cache") / "envlink" / "numba"


def _writable(folder: Path) -> bool:
    from envlink.core.util import probe_writable

    try:
        folder.mkdir(parents=True, exist_ok=True)
        probe_writable(folder)
    except OSError:
        return False
    return True


def _jit(**options: Any) -> Callable[[Callable[..., Any]], Any]:
    """``numba.njit(**options)`` caching in :func:`cache_folder`, or not caching at all.

    numba places a cache beside the source file unless ``config.CACHE_DIR`` is set
    when the function is decorated (the cache locator is chosen then), so it is set
    for the decoration only; a folder that cannot be written means no cache.
    """

    def wrap(func: Callable[..., Any]) -> Any:
        folder = _CACHE_FOLDER
        if folder is None:
            return numba.njit(**options)(func)
        config: Any = numba.config  # CACHE_DIR is set from the environment at run time
        saved = config.CACHE_DIR
        config.CACHE_DIR = str(folder)
        try:
            return numba.njit(cache=True, **options)(func)
        except Exception:  # noqa: BLE001 - any caching trouble: compile without a cache
            return numba.njit(**options)(func)
        finally:
            config.CACHE_DIR = saved

    return wrap


_CACHE_FOLDER: Path | None = None
if HAVE_NUMBA:
    _CACHE_FOLDER = cache_folder() if _writable(cache_folder()) else None


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
    #: the constants subtracted from the moderator columns before summing (with an
    #: intercept), or None; :func:`~envlink.metareg.estimators.gls` maps back
    shift: np.ndarray | None = None
    #: the constant subtracted from the effects before summing (with an intercept; 0
    #: otherwise): ``Q`` and the likelihood are unchanged, the intercept maps back
    yshift: float = 0.0

    def __add__(self, other: Sums) -> Sums:
        return Sums(
            self.A + other.A, self.B + other.B, self.C + other.C, self.b1 + other.b1,
            self.b2 + other.b2, self.sw + other.sw, self.sw2 + other.sw2,
            self.syy1 + other.syy1, self.syy2 + other.syy2, self.slog + other.slog, self.shift,
            self.yshift,
        )

    def head(self, n: int) -> Sums:
        """The sums of the model with the first ``n`` coefficients only (the intercept: 1)."""
        return Sums(self.A[:n, :n].copy(), self.B[:n, :n].copy(), self.C[:n, :n].copy(),
                    self.b1[:n].copy(), self.b2[:n].copy(), self.sw, self.sw2, self.syy1,
                    self.syy2, self.slog, None if self.shift is None else self.shift[:max(n - 1, 0)],
                    self.yshift)


def _n_stats(p: int) -> int:
    return 3 * p * p + 2 * p + 5


@functools.lru_cache(maxsize=32)
def _lower(p: int) -> tuple[np.ndarray, np.ndarray]:
    return np.tril_indices(p, -1)


def _unpack(vec: np.ndarray, p: int, shift: np.ndarray | None = None, yshift: float = 0.0) -> Sums:
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
                float(s[3]), float(s[4]), shift, yshift)


if HAVE_NUMBA:
    # reassociation lets LLVM vectorise the reductions; the order is still fixed by the code
    _FM = {"reassoc", "contract"}

    @_jit(nogil=True, fastmath=_FM)
    def _nb_sub(yb, vb, xb, n, p, t, mode, acc, w, wy):  # pragma: no cover - compiled
        """Add one sub-block's sums at ``t`` to ``acc`` (the packed layout of ``_unpack``)."""
        pp = p * p
        o = 3 * pp + 2 * p
        s0 = s1 = s2 = s3 = 0.0
        for i in range(n):
            wi = 1.0 / (vb[i] + t)
            w[i] = wi
            q = wi * yb[i]
            wy[i] = q
            s0 += wi
            s1 += wi * wi
            s2 += q * yb[i]
            s3 += q * q
        acc[o] += s0
        acc[o + 1] += s1
        acc[o + 2] += s2
        acc[o + 3] += s3
        if mode & 1:
            sl = 0.0
            for i in range(n):
                sl += math.log(vb[i] + t)
            acc[o + 4] += sl
        pe = 1 if mode & 4 else p
        for a in range(pe):
            sa1 = sa2 = 0.0
            for i in range(n):
                q = wy[i] * xb[a, i]
                sa1 += q
                sa2 += q * w[i]
            acc[3 * pp + a] += sa1
            acc[3 * pp + p + a] += sa2
            for c in range(a + 1):
                sA = sB = sC = 0.0
                if mode & 2:
                    for i in range(n):
                        q = w[i] * xb[a, i] * xb[c, i]
                        sA += q
                        q *= w[i]
                        sB += q
                        sC += q * w[i]
                else:
                    for i in range(n):
                        q = w[i] * xb[a, i] * xb[c, i]
                        sA += q
                        sB += q * w[i]
                acc[a * p + c] += sA
                acc[pp + a * p + c] += sB
                acc[2 * pp + a * p + c] += sC

    @_jit(nogil=True)
    def _nb_block(y, v, X, shift, ysh, intercept, ts, modes, lo, hi, acc):  # pragma: no cover
        """Sums over rows ``lo:hi`` at every ``ts[j]`` into ``acc[j]``, sub-block by sub-block."""
        m = X.shape[1]
        j0 = 1 if intercept else 0
        p = m + j0
        xb = np.empty((max(p, 1), _SUB))
        yb = np.empty(_SUB)
        vb = np.empty(_SUB)
        w = np.empty(_SUB)
        wy = np.empty(_SUB)
        if intercept:
            xb[0, :] = 1.0
        for s in range(lo, hi, _SUB):
            n = min(hi, s + _SUB) - s
            for i in range(n):
                yb[i] = np.float64(y[s + i]) - ysh
                vb[i] = np.float64(v[s + i])
            for j in range(m):
                for i in range(n):
                    xb[j0 + j, i] = np.float64(X[s + i, j]) - shift[j]
            for k in range(ts.shape[0]):
                _nb_sub(yb, vb, xb, n, p, ts[k], modes[k], acc[k], w, wy)

    @_jit(nogil=True)
    def _nb_serial(y, v, X, shift, ysh, intercept, ts, modes, block):  # pragma: no cover
        k = y.shape[0]
        p = X.shape[1] + (1 if intercept else 0)
        out = np.zeros((ts.shape[0], 3 * p * p + 2 * p + 5))
        acc = np.zeros_like(out)
        for lo in range(0, k, block):
            acc[:] = 0.0
            _nb_block(y, v, X, shift, ysh, intercept, ts, modes, lo, min(k, lo + block), acc)
            out += acc
        return out

    @_jit(nogil=True, parallel=True)
    def _nb_parallel(y, v, X, shift, ysh, intercept, ts, modes, block):  # pragma: no cover
        k = y.shape[0]
        p = X.shape[1] + (1 if intercept else 0)
        nstat = 3 * p * p + 2 * p + 5
        nt = ts.shape[0]
        nblk = (k + block - 1) // block
        part = np.zeros((nblk, nt, nstat))
        for bi in numba.prange(nblk):
            lo = bi * block
            _nb_block(y, v, X, shift, ysh, intercept, ts, modes, lo, min(k, lo + block), part[bi])
        out = np.zeros((nt, nstat))
        for bi in range(nblk):  # fixed order: the same sums whatever the thread count
            out += part[bi]
        return out


def _np_block(y: np.ndarray, v: np.ndarray, X: np.ndarray, intercept: bool,
              tau2: float) -> np.ndarray:
    """Sums over one block at one tau² with NumPy (float64 temporaries of block size only)."""
    xb = np.asarray(X, dtype=np.float64)
    if intercept:
        xb = np.column_stack([np.ones(y.shape[0]), xb])
    vt = np.asarray(v, dtype=np.float64) + tau2
    w = 1.0 / vt
    yf = np.asarray(y, dtype=np.float64)
    xw = xb * w[:, None]
    wy = w * yf
    return np.concatenate([(xb.T @ xw).ravel(), (xw.T @ xw).ravel(),
                           ((xw * w[:, None]).T @ xw).ravel(), xb.T @ wy, xw.T @ wy,
                           [w.sum(), w @ w, wy @ yf, wy @ wy, np.log(vt).sum()]])


def _mask(out: np.ndarray, p: int, modes: np.ndarray) -> np.ndarray:
    """NaN for the sums a mode did not ask for (so that none is used by mistake)."""
    pp = p * p
    o = 3 * pp + 2 * p
    for j, mode in enumerate(modes):
        if not mode & NEED_LOG:
            out[j, o + 4] = np.nan
        if not mode & NEED_C:
            out[j, 2 * pp:3 * pp] = np.nan
    return out


def block_sums_multi(y: Any, v: Any, X: Any, intercept: bool, taus: Any, modes: Any = None, *,
                     shift: Any = None, yshift: float = 0.0, use_numba: bool = True,
                     threads: bool = True, block: int = BLOCK_ROWS) -> np.ndarray:
    """Packed sums at every tau² of ``taus`` (rows: one per tau²) over NumPy arrays, block by block.

    ``modes`` holds one int per tau² (a sum of :data:`NEED_LOG`, :data:`NEED_C`,
    :data:`BASE`; default :data:`ALL`); ``shift`` the constants subtracted from the
    moderator columns (default none) and ``yshift`` the one subtracted from the effects
    (see :func:`moderator_shift`). Also the function run on each chunk of a Dask
    array (``threads=False``: Dask runs the chunks in parallel, the kernel does not).
    """
    y = np.asarray(y)
    v = np.asarray(v)
    X = np.asarray(X)
    sh = np.zeros(X.shape[1]) if shift is None else np.asarray(shift, dtype=np.float64)
    ts = np.ascontiguousarray(np.atleast_1d(np.asarray(taus, dtype=np.float64)))
    md = (np.full(ts.shape[0], ALL, dtype=np.int64) if modes is None
          else np.ascontiguousarray(np.atleast_1d(np.asarray(modes, dtype=np.int64))))
    p = X.shape[1] + (1 if intercept else 0)
    if use_numba and HAVE_NUMBA and y.shape[0] > 0:
        kern = _nb_parallel if threads and y.shape[0] > 8 * block else _nb_serial
        out = kern(y, v, X, sh, float(yshift), bool(intercept), ts, md, int(block))
    else:
        out = np.zeros((ts.shape[0], _n_stats(p)))
        for lo in range(0, y.shape[0], block):
            hi = lo + block
            for j, t in enumerate(ts):
                out[j] += _np_block(y[lo:hi] - yshift, v[lo:hi], X[lo:hi] - sh, intercept, float(t))
        for j, mode in enumerate(md):
            if mode & BASE:  # only the intercept's sums, as the compiled kernel gives them
                keep = np.zeros(out.shape[1], dtype=bool)
                pp = p * p
                keep[[0, pp, 2 * pp, 3 * pp, 3 * pp + p]] = True
                keep[3 * pp + 2 * p:] = True
                out[j, ~keep] = 0.0
    return _mask(out, p, md)


def weighted_sums_multi(y: Any, v: Any, X: Any, intercept: bool, taus: Any, modes: Any = None, *,
                        use_numba: bool = True) -> list[Sums]:
    """Weighted sums at several tau² values in one pass over NumPy or Dask arrays.

    Dask arrays are reduced chunk by chunk with :func:`block_sums_multi` on whatever
    scheduler is active (a ``dask.distributed`` client when one is set up), and the
    chunk results are added on the caller's side in chunk order.

    Examples
    --------
    >>> import numpy as np
    >>> s0, s1 = weighted_sums_multi(np.array([1.0, 3.0]), np.array([1.0, 1.0]),
    ...                              np.zeros((2, 0)), True, [0.0, 1.0])
    >>> float(s0.sw), float(s1.sw)
    (2.0, 1.0)
    """
    p = X.shape[1] + (1 if intercept else 0)
    shift = moderator_shift(X, intercept)
    ysh = effect_shift(y, intercept)
    if _is_dask(y):
        import dask

        if len(X.chunks[1]) > 1:  # one chunk across the columns, rows chunked as y
            X = X.rechunk({0: y.chunks[0], 1: -1})
        yb = y.to_delayed().ravel()
        vb = v.to_delayed().ravel()
        xb = X.to_delayed()
        xb = xb.reshape(xb.shape[0], -1)[:, 0]
        parts = [dask.delayed(block_sums_multi)(a, b, c, intercept, taus, modes, shift=shift,
                                                yshift=ysh, use_numba=use_numba, threads=False)
                 for a, b, c in zip(yb, vb, xb, strict=True)]
        out = np.sum(np.stack(dask.compute(*parts)), axis=0)
    else:
        out = block_sums_multi(y, v, X, intercept, taus, modes, shift=shift, yshift=ysh,
                               use_numba=use_numba)
    return [_unpack(row, p, shift, ysh) for row in out]


def weighted_sums(y: Any, v: Any, X: Any, intercept: bool, tau2: float, *,
                  use_numba: bool = True) -> Sums:
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
    >>> float(s.A[0, 0]), s.yshift, float(s.b1[0]), float(s.syy1)  # sums of y - 2
    (2.0, 2.0, 0.0, 2.0)
    >>> s = weighted_sums(np.array([1.0, 3.0]), np.array([1.0, 1.0]), np.ones((2, 1)), False, 0.0)
    >>> s.yshift, float(s.b1[0]), float(s.syy1)  # no intercept: no shift
    (0.0, 4.0, 10.0)
    """
    return weighted_sums_multi(y, v, X, intercept, [tau2], None, use_numba=use_numba)[0]


def _is_dask(a: object) -> bool:
    return type(a).__module__.startswith("dask")
