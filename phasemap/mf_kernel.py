"""Compiled mean-field self-consistency (numba), one row = one point x seed.

Same algorithm as the NumPy path of :mod:`phasemap.mf` (closed-form 2x2 local problem for
hard-core bosons, LAPACK eigh of the (n_max+1)-dimensional one for soft-core; at a temperature
T > 0 every local level enters with its Boltzmann weight,
linear mixing + Anderson type-II acceleration, stall detection), but each row iterates
independently inside a parallel loop, so the per-iteration interpreter overhead vanishes.
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange


@njit(cache=True)
def _solve_small(A, b, k):
    """Gaussian elimination with partial pivoting on the leading k x k block (in place)."""
    for c in range(k):
        p = c
        for r in range(c + 1, k):
            if abs(A[r, c]) > abs(A[p, c]):
                p = r
        if p != c:
            for j in range(k):
                A[c, j], A[p, j] = A[p, j], A[c, j]
            b[c], b[p] = b[p], b[c]
        if A[c, c] == 0.0:
            return False
        for r in range(c + 1, k):
            fac = A[r, c] / A[c, c]
            for j in range(c, k):
                A[r, j] -= fac * A[c, j]
            b[r] -= fac * b[c]
    for c in range(k - 1, -1, -1):
        s = b[c]
        for j in range(c + 1, k):
            s -= A[c, j] * b[j]
        b[c] = s / A[c, c]
    return True


@njit(cache=True)
def anderson_step(x, f, px, pf, hx, hf, G, A, bb, it, m, mixing, out):
    """Compiled Anderson (type II) step of one row, the per-row copy of :mod:`phasemap.mixing`.

    ``it`` is the 1-based iteration; histories ``hx, hf`` (m, D) are a ring buffer, ``G`` the
    Gram matrix of ``hf`` kept up to date (only the new slot changes), ``A, bb`` workspace.
    Writes the proposed next iterate (unclipped) to ``out`` and records ``(x, f)`` in ``px, pf``.
    Kept compiled because a numba ``prange`` loop cannot call the NumPy mixer;
    ``tests/test_mixing.py`` checks that both give the same iterates.
    """
    D = x.shape[0]
    k = min(it - 1, m)
    ok = False
    if k > 0:
        slot = (it - 2) % m
        for d in range(D):
            hx[slot, d] = x[d] - px[d]
            hf[slot, d] = f[d] - pf[d]
        for a in range(k):  # Gram matrix: only the new slot's row/column changes
            s3 = 0.0
            for d in range(D):
                s3 += hf[a, d] * hf[slot, d]
            G[a, slot] = s3
            G[slot, a] = s3
        tr = 0.0
        for a in range(k):
            s2 = 0.0
            for d in range(D):
                s2 += hf[a, d] * f[d]
            bb[a] = s2
            tr += G[a, a]
        reg = 1e-10 * max(tr, 1e-30)
        for a in range(k):
            for c in range(k):
                A[a, c] = G[a, c]
            A[a, a] += reg
        ok = _solve_small(A, bb, k)
    for d in range(D):
        px[d] = x[d]
        pf[d] = f[d]
        st = x[d] + mixing * f[d]
        if ok:
            for a in range(k):
                st -= bb[a] * (hx[a, d] + mixing * hf[a, d])
        if not np.isfinite(st):
            st = x[d] + mixing * f[d]
        out[d] = st


@njit(cache=True)
def _map(x, g, t, V, V2, mu, U, T, nmax, plus, minus, nplus, nminus, S, H):
    """One self-consistency map: local ground states (T = 0) or local thermal states (T > 0)
    in the fields of the current iterate."""
    F = plus.shape[0]
    K2 = nplus.shape[0]
    d = nmax + 1
    for s in range(S):
        Phi = 0.0
        eps = 0.0
        for f in range(F):
            Phi += t[f] * (x[S + plus[f, s]] + x[S + minus[f, s]])
            eps += V[f] * (x[plus[f, s]] + x[minus[f, s]])
        if V2 != 0.0:
            for k in range(K2):
                eps += V2 * (x[nplus[k, s]] + x[nminus[k, s]])
        eps -= mu
        if nmax == 1:  # hard-core: closed-form 2x2
            r = np.sqrt(eps * eps + 4.0 * Phi * Phi)
            if T > 0.0:  # <sigma> of the two levels -r/2, +r/2 weighted by tanh(r / 2T)
                y = 0.5 * r / T
                wt = np.tanh(y) / r if y > 1e-8 else 0.5 / T
                g[s] = 0.5 - 0.5 * eps * wt
                g[S + s] = Phi * wt
            elif r > 0.0:
                g[s] = 0.5 * (1.0 - eps / r)
                g[S + s] = Phi / r
            else:  # zero field (t = 0 at a degenerate point): keep the occupation
                g[s] = x[s]
                g[S + s] = 0.0
            continue
        for a in range(d):
            for b in range(d):
                H[a, b] = 0.0
            H[a, a] = 0.5 * U * a * (a - 1) + eps * a
        for a in range(1, d):
            H[a, a - 1] = -Phi * np.sqrt(a)
            H[a - 1, a] = -Phi * np.sqrt(a)
        w, v = np.linalg.eigh(H)
        nn = 0.0  # <n> and <b> = sum sqrt(a) v_a v_(a-1): both independent of the sign of v
        ph = 0.0
        if T > 0.0:  # Boltzmann weights of every level
            z = 0.0
            for k in range(d):
                pk = np.exp(-(w[k] - w[0]) / T)
                z += pk
                for a in range(d):
                    nn += pk * a * v[a, k] * v[a, k]
                    if a > 0:
                        ph += pk * np.sqrt(a) * v[a, k] * v[a - 1, k]
            g[s] = nn / z
            g[S + s] = ph / z
            continue
        for a in range(d):
            nn += a * v[a, 0] * v[a, 0]
            if a > 0:
                ph += np.sqrt(a) * v[a, 0] * v[a - 1, 0]
        g[s] = nn
        g[S + s] = ph


@njit(cache=True)
def _one_row(r, t, V, V2, mu, U, T, nmax, plus, minus, nplus, nminus, x0, tol, max_iter, mixing, m, patience,
             out, iters, resid, conv):
    """Iterate row ``r`` of ``x0`` to self-consistency, writing into out/iters/resid/conv."""
    D = x0.shape[1]
    S = D // 2
    mm = max(m, 1)
    x = x0[r].copy()
    g = np.empty(D)
    f = np.empty(D)
    px = np.zeros(D)
    pf = np.zeros(D)
    hx = np.zeros((mm, D))
    hf = np.zeros((mm, D))
    A = np.zeros((mm, mm))
    G = np.zeros((mm, mm))
    H = np.zeros((nmax + 1, nmax + 1))
    bb = np.zeros(mm)
    step = np.empty(D)
    best = np.inf
    last = 0
    it = 0
    res = np.inf
    while it < max_iter:
        it += 1
        _map(x, g, t[r], V[r], V2[r], mu[r], U[r], T[r], nmax, plus, minus, nplus, nminus, S, H)
        res = 0.0
        for d in range(D):
            f[d] = g[d] - x[d]
            if abs(f[d]) > res:
                res = abs(f[d])
        if res < tol:
            out[r] = g
            conv[r] = True
            break
        if res < 0.999 * best:
            best = res
            last = it
        insulating = T[r] == 0.0  # at T = 0 a seed with no condensate anywhere can only flip occupations
        for d in range(S, D):
            if x[d] != 0.0 or g[d] != 0.0:
                insulating = False
                break
        if it - last > (3 if insulating else patience):
            out[r] = g  # the map of the last iterate: a consistent product state
            break
        anderson_step(x, f, px, pf, hx, hf, G, A, bb, it, m, mixing, step)
        for d in range(D):
            st = step[d]
            if d < S:
                st = min(max(st, 0.0), float(nmax))
            elif st < 0.0:  # halve instead of clipping: phi = 0 would be a trap
                st = 0.5 * x[d]
            x[d] = st
    else:
        _map(x, g, t[r], V[r], V2[r], mu[r], U[r], T[r], nmax, plus, minus, nplus, nminus, S, H)
        out[r] = g
    iters[r] = it
    resid[r] = res


@njit(cache=True)
def _rows_serial(t, V, V2, mu, U, T, nmax, plus, minus, nplus, nminus, x0, tol, max_iter, mixing, m, patience,
                 out, iters, resid, conv):
    for r in range(x0.shape[0]):
        _one_row(r, t, V, V2, mu, U, T, nmax, plus, minus, nplus, nminus, x0, tol, max_iter, mixing, m, patience,
                 out, iters, resid, conv)


@njit(parallel=True, cache=True)
def _rows_parallel(t, V, V2, mu, U, T, nmax, plus, minus, nplus, nminus, x0, tol, max_iter, mixing, m, patience,
                   out, iters, resid, conv):
    for r in prange(x0.shape[0]):
        _one_row(r, t, V, V2, mu, U, T, nmax, plus, minus, nplus, nminus, x0, tol, max_iter, mixing, m, patience,
                 out, iters, resid, conv)


#: below this many rows the threads' start-up costs more than they save
PARALLEL_MIN_ROWS = 20000


def iterate_rows(t, V, V2, mu, U, T, nmax, plus, minus, nplus, nminus, x0, tol, max_iter, mixing, m, patience):
    """Iterate every row of ``x0`` (rows, 2S: densities then condensates) to self-consistency.

    ``T`` (rows,): temperature of each row (0: ground state, the T = 0 arithmetic unchanged).
    Returns (g, iterations, residual, converged), ``g`` the densities and condensates of the
    local ground (thermal) states in the fields of each row's last iterate. Large batches run
    on all cores.
    """
    rows = x0.shape[0]
    out = x0.copy()
    iters = np.zeros(rows, np.int64)
    resid = np.full(rows, np.inf)
    conv = np.zeros(rows, np.bool_)
    run = _rows_parallel if rows >= PARALLEL_MIN_ROWS else _rows_serial
    run(t, V, V2, mu, U, np.ascontiguousarray(T, dtype=np.float64), nmax, plus, minus, nplus, nminus, x0, tol, max_iter, mixing, m, patience,
        out, iters, resid, conv)
    return out, iters, resid, conv
