"""Optional compiled kernel of the stacked multilevel fits: one design at a time, in loops.

The same Newton iterations as :mod:`envlink.metareg.stacked_nested` (exact gradient,
observed information ``2 AI - F``, halving on a decrease, the same stopping rule),
written as loops over the rows and studies of one design so that no temporary array
of the stack's size is made; designs run in parallel threads. Used by the window scan,
where hundreds of thousands of refits are needed, when numba is installed and
``ENVLINK_NUMBA`` is not ``0``; compiled once and cached in the user's cache folder
(:func:`envlink.metareg._kernels.cache_folder`). Its results equal the NumPy path's
(tests/metareg/test_scan.py).
"""

from __future__ import annotations

import math
import os

import numpy as np

from envlink.metareg._kernels import HAVE_NUMBA, _jit

__all__ = ["HAVE_KERNEL", "use_kernel", "fit_many"]

HAVE_KERNEL = HAVE_NUMBA


def use_kernel() -> bool:
    """Whether the compiled kernel is available and allowed (``ENVLINK_NUMBA`` is not ``0``)."""
    return HAVE_KERNEL and os.environ.get("ENVLINK_NUMBA", "1") != "0"


if HAVE_NUMBA:
    import numba

    @_jit(nogil=True)
    def _chol_inv(A, Ainv):  # pragma: no cover - compiled
        """Inverse of a symmetric matrix via the Cholesky factor of its scaled form."""
        p = A.shape[0]
        D = np.empty(p)
        for a in range(p):
            if A[a, a] <= 0.0:
                return 0.0, True
            D[a] = 1.0 / math.sqrt(A[a, a])
        L = np.zeros((p, p))
        logdet = 0.0
        for a in range(p):
            for b in range(a + 1):
                acc = A[a, b] * D[a] * D[b]
                for j in range(b):
                    acc -= L[a, j] * L[b, j]
                if a == b:
                    if acc < 1e-10:
                        return 0.0, True
                    L[a, a] = math.sqrt(acc)
                    logdet += 2.0 * math.log(L[a, a]) - 2.0 * math.log(D[a])
                else:
                    L[a, b] = acc / L[b, b]
        Li = np.zeros((p, p))
        for a in range(p):
            Li[a, a] = 1.0 / L[a, a]
            for b in range(a):
                acc = 0.0
                for j in range(b, a):
                    acc -= L[a, j] * Li[j, b]
                Li[a, b] = acc / L[a, a]
        for a in range(p):
            for b in range(p):
                acc = 0.0
                for j in range(max(a, b), p):
                    acc += Li[j, a] * Li[j, b]
                Ainv[a, b] = acc * D[a] * D[b]
        return logdet, False

    @_jit(nogil=True)
    def _quad(Ainv, u, w):  # pragma: no cover - compiled
        p = u.shape[0]
        acc = 0.0
        for a in range(p):
            for b in range(p):
                acc += u[a] * Ainv[a, b] * w[b]
        return acc

    @_jit(nogil=True)
    def _evaluate(y, v, codes, S, X, m, t0, t1, restricted, out, beta, Ainv):  # pragma: no cover
        """One design at (t0, t1): fills ``beta``, ``Ainv``; returns ll, yPy, grad, Hobs, AI."""
        k, p = X.shape
        d = np.empty(k)
        s = np.zeros(S)
        T = np.zeros((S, p))
        ty = np.zeros(S)
        r2 = np.zeros(S)
        r3 = np.zeros(S)
        A = np.zeros((p, p))
        b = np.zeros(p)
        yVy = 0.0
        slog = 0.0
        kk = 0.0
        for i in range(k):
            q = codes[i]
            vt = v[i] + t1
            di = m[i] / vt
            d[i] = di
            s[q] += di
            ty[q] += di * y[i]
            r2[q] += di * di
            r3[q] += di * di * di
            yVy += di * y[i] * y[i]
            if m[i] > 0:
                slog += math.log(vt)
                kk += 1.0
            for a in range(p):
                T[q, a] += di * X[i, a]
                b[a] += di * X[i, a] * y[i]
                for c_ in range(a + 1):
                    A[a, c_] += di * X[i, a] * X[i, c_]
        den = np.empty(S)
        c = np.empty(S)
        for q in range(S):
            den[q] = 1.0 + t0 * s[q]
            c[q] = t0 / den[q]
            slog += math.log(den[q])
            yVy -= c[q] * ty[q] * ty[q]
            for a in range(p):
                b[a] -= c[q] * T[q, a] * ty[q]
                for c_ in range(a + 1):
                    A[a, c_] -= c[q] * T[q, a] * T[q, c_]
        for a in range(p):
            for c_ in range(a):
                A[c_, a] = A[a, c_]
        logdetA, bad = _chol_inv(A, Ainv)
        if bad:
            out[0] = 1.0
            return
        for a in range(p):
            acc = 0.0
            for c_ in range(p):
                acc += Ainv[a, c_] * b[c_]
            beta[a] = acc
        yPy = max(yVy - np.dot(b, beta), 0.0)
        if restricted:
            ll = -0.5 * ((kk - p) * math.log(2.0 * math.pi) + slog + logdetA + yPy)
        else:
            ll = -0.5 * (kk * math.log(2.0 * math.pi) + slog + yPy)
        _derivatives(y, codes, S, X, m, d, s, den, c, T, r2, r3, Ainv, beta, restricted, out)
        out[0] = 0.0
        out[1] = ll
        out[2] = yPy

    @_jit(nogil=True)
    def _derivatives(y, codes, S, X, m, d, s, den, c, T, r2, r3, Ai, beta, restricted,
                     out):  # pragma: no cover - compiled
        """Gradient (out[3:5]), observed information (out[5:8]) and AI (out[8:11])."""
        k, p = X.shape
        de = np.zeros(S)
        e = np.empty(k)
        for i in range(k):
            acc = y[i]
            for a in range(p):
                acc -= X[i, a] * beta[a]
            e[i] = acc
            de[codes[i]] += d[i] * acc
        Py = np.empty(k)
        q2 = 0.0
        for i in range(k):
            Py[i] = d[i] * e[i] - d[i] * c[codes[i]] * de[codes[i]]
            q2 += Py[i] * Py[i]
        sPy = np.zeros(S)
        for i in range(k):
            sPy[codes[i]] += Py[i]
        q1 = 0.0
        tVV = 0.0
        tVZ = 0.0
        tZZ = 0.0
        tr_b = 0.0
        tr_w = 0.0
        for q in range(S):
            q1 += sPy[q] * sPy[q]
            sd = s[q] / den[q]
            tVV += r2[q] - 2.0 * c[q] * r3[q] + c[q] * c[q] * r2[q] * r2[q]
            tVZ += r2[q] / (den[q] * den[q])
            tZZ += sd * sd
            tr_b += sd
            tr_w += s[q] - c[q] * r2[q]
        if restricted:
            tVV, tVZ, tZZ, tr_b, tr_w = _restricted_traces(codes, S, X, d, s, den, c, T, Ai, tVV,
                                                           tVZ, tZZ, tr_b, tr_w)
        out[3] = 0.5 * q1 - 0.5 * tr_b
        out[4] = 0.5 * q2 - 0.5 * tr_w
        ai = _average_information(codes, S, X, m, d, c, Py, sPy, Ai)
        out[5] = 2.0 * ai[0] - 0.5 * tZZ
        out[6] = 2.0 * ai[1] - 0.5 * tVZ
        out[7] = 2.0 * ai[2] - 0.5 * tVV
        out[8] = ai[0]
        out[9] = ai[1]
        out[10] = ai[2]

    @_jit(nogil=True)
    def _restricted_traces(codes, S, X, d, s, den, c, T, Ai, tVV, tVZ, tZZ, tr_b,
                           tr_w):  # pragma: no cover - compiled
        k, p = X.shape
        Zx = np.empty((k, p))
        R = np.zeros((S, p))
        ZZ = np.zeros((p, p))
        ZVZ = np.zeros((p, p))
        for i in range(k):
            q = codes[i]
            for a in range(p):
                Zx[i, a] = d[i] * X[i, a] - d[i] * c[q] * T[q, a]
                R[q, a] += d[i] * Zx[i, a]
            for a in range(p):
                for b in range(p):
                    ZZ[a, b] += Zx[i, a] * Zx[i, b]
                    ZVZ[a, b] += d[i] * Zx[i, a] * Zx[i, b]
        GG = np.zeros((p, p))
        G = np.empty(p)
        Rq = np.empty(p)
        cross_vz = 0.0
        cross_zz = 0.0
        for q in range(S):
            for a in range(p):
                G[a] = T[q, a] / den[q]
                Rq[a] = R[q, a] / den[q]
            for a in range(p):
                for b in range(p):
                    GG[a, b] += G[a] * G[b]
                    ZVZ[a, b] -= c[q] * R[q, a] * R[q, b]
            cross_vz += _quad(Ai, Rq, G)
            cross_zz += (s[q] / den[q]) * _quad(Ai, G, G)
        AG = Ai @ GG
        AZ = Ai @ ZZ
        tVV += -2.0 * np.trace(Ai @ ZVZ) + np.trace(AZ @ AZ)
        tVZ += -2.0 * cross_vz + np.trace(AZ @ AG)
        tZZ += -2.0 * cross_zz + np.trace(AG @ AG)
        return tVV, tVZ, tZZ, tr_b - np.trace(AG), tr_w - np.trace(AZ)

    @_jit(nogil=True)
    def _average_information(codes, S, X, m, d, c, Py, sPy, Ai):  # pragma: no cover - compiled
        k, p = X.shape
        dub = np.zeros(S)
        duw = np.zeros(S)
        for i in range(k):
            dub[codes[i]] += d[i] * m[i] * sPy[codes[i]]
            duw[codes[i]] += d[i] * Py[i]
        xb = np.zeros(p)
        xw = np.zeros(p)
        h00 = 0.0
        h01 = 0.0
        h11 = 0.0
        for i in range(k):
            q = codes[i]
            ub = m[i] * sPy[q]
            vb = d[i] * ub - d[i] * c[q] * dub[q]
            vw = d[i] * Py[i] - d[i] * c[q] * duw[q]
            h00 += vb * ub
            h01 += vb * Py[i]
            h11 += vw * Py[i]
            for a in range(p):
                xb[a] += X[i, a] * vb
                xw[a] += X[i, a] * vw
        return (0.5 * (h00 - _quad(Ai, xb, xb)), 0.5 * (h01 - _quad(Ai, xb, xw)),
                0.5 * (h11 - _quad(Ai, xw, xw)))

    @_jit(nogil=True)
    def _step(out, th):  # pragma: no cover - compiled
        """The projected Newton step of :func:`envlink.metareg.stacked_nested._newton_step`."""
        g0, g1 = out[3], out[4]
        h00, h01, h11 = out[5], out[6], out[7]
        if not (h00 > 0.0 and h11 > 0.0 and h00 * h11 - h01 * h01 > 0.0):
            h00, h01, h11 = out[8], out[9], out[10]
        f0 = th[0] <= 0.0 and g0 <= 0.0
        f1 = th[1] <= 0.0 and g1 <= 0.0
        s0 = 0.0
        s1 = 0.0
        det = h00 * h11 - h01 * h01
        if not f0 and not f1 and det > 1e-300 * max(1.0, abs(h00 * h11)):
            s0 = (h11 * g0 - h01 * g1) / det
            s1 = (h00 * g1 - h01 * g0) / det
        else:
            if not f0 and h00 > 0.0:
                s0 = g0 / h00
            if not f1 and h11 > 0.0:
                s1 = g1 / h11
        return s0, s1, f0 and f1

    @_jit(nogil=True)
    def _fit_one(y, v, codes, S, X, m, th, restricted, tol, max_iter, floor, beta, Ainv,
                 out):  # pragma: no cover - compiled
        """Newton iterations of one design from ``th`` (updated); returns whether it converged."""
        p = X.shape[1]
        _evaluate(y, v, codes, S, X, m, th[0], th[1], restricted, out, beta, Ainv)
        if out[0] > 0.0:
            return False
        b2 = np.empty(p)
        A2 = np.empty((p, p))
        o2 = np.empty(out.shape[0])
        for _ in range(max_iter):
            s0, s1, optimum = _step(out, th)
            n0 = max(th[0] + s0, 0.0)
            n1 = max(th[1] + s1, 0.0)
            size = max(max(n0, n1), floor)
            if optimum or max(abs(n0 - th[0]), abs(n1 - th[1])) <= tol * size:
                return True
            ll = out[1]
            for _h in range(31):
                _evaluate(y, v, codes, S, X, m, n0, n1, restricted, o2, b2, A2)
                if o2[0] > 0.0 or o2[1] >= ll - 1e-12 * max(1.0, abs(ll)) or _h == 30:
                    break
                n0 = max((th[0] + n0) / 2.0, 0.0)
                n1 = max((th[1] + n1) / 2.0, 0.0)
            th[0] = n0
            th[1] = n1
            out[:] = o2
            beta[:] = b2
            Ainv[:, :] = A2
            if out[0] > 0.0:
                return False
        return False

    @_jit(nogil=True, parallel=True)
    def _fit_many(y, v, codes, S, X, m, start, restricted, tol, max_iter,
                  floor):  # pragma: no cover - compiled
        N, k, p = X.shape
        theta = start.copy()
        beta = np.full((N, p), np.nan)
        Ainv = np.full((N, p, p), np.nan)
        res = np.full((N, 11), np.nan)
        conv = np.zeros(N, dtype=np.bool_)
        for n in numba.prange(N):
            out = np.zeros(11)
            b = np.empty(p)
            A = np.empty((p, p))
            th = theta[n].copy()
            conv[n] = _fit_one(y, v, codes, S, X[n], m[n], th, restricted, tol, max_iter, floor,
                               b, A, out)
            theta[n] = th
            res[n] = out
            if out[0] == 0.0:
                beta[n] = b
                Ainv[n] = A
        return theta, beta, Ainv, res, conv


def fit_many(y: np.ndarray, v: np.ndarray, codes: np.ndarray, X: np.ndarray, m: np.ndarray,
             start: np.ndarray, *, restricted: bool, tol: float,
             max_iter: int) -> tuple[np.ndarray, ...]:
    """The compiled stacked multilevel fits: ``(theta, beta, Ainv, yPy, ll, converged, singular)``."""
    S = int(codes.max()) + 1
    floor = 1e-3 * max(float(np.var(y)), 1e-8)
    theta, beta, Ainv, res, conv = _fit_many(
        np.ascontiguousarray(y, dtype=np.float64), np.ascontiguousarray(v, dtype=np.float64),
        np.ascontiguousarray(codes, dtype=np.int64), S, np.ascontiguousarray(X, dtype=np.float64),
        np.ascontiguousarray(m, dtype=np.float64), np.ascontiguousarray(start, dtype=np.float64),
        bool(restricted), float(tol), int(max_iter), floor)
    singular = res[:, 0] > 0
    return theta, beta, Ainv, res[:, 2], res[:, 1], conv & ~singular, singular
