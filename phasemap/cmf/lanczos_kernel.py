"""Compiled (numba) per-point rows of cluster mean field for clusters solved by Lanczos.

The per-point path (:func:`phasemap.cmf.selfconsistency._solve_row`) above ``dense_max``
states spends most of its time in the interpreter: per self-consistency iteration it builds
a SciPy CSR matrix, runs a restarted Lanczos whose every step is a handful of NumPy calls,
and evaluates the expectation values with fancy indexing (tri12 hard-core, 4,096 states:
~4 ms per iteration idle, ~14 sparse products). This module runs the same row — the same
boundary fields, the same inexact-then-confirmed Lanczos warm-started from the previous
iterate's ground state (:func:`lanczos`), the same Anderson mixing
(:func:`phasemap.cmf.kernel.mix_and_clip`), clipping, convergence and stall tests — inside one
compiled function, and the rows of one parameter point (its seeds, each continuing from its
own state at the previous point of a scan) in parallel over the cores (numba ``prange``).

What stays in the caller: the choice of every row's start (seed, continuation, secant
predictor) and the final expectation values and variational energy, evaluated with the
NumPy code of the per-point path from the returned ground states.

The matrix of a row is stored once per iteration as ``data = coef[term] * base`` on the
cluster's fixed CSR pattern (:class:`phasemap.cmf.hamiltonian.ClusterOperators`), diagonal
included; only the coefficients (``-t_f``, ``-Phi_a``) and the diagonal (``eps_a``) change.
"""

from __future__ import annotations

import numba
import numpy as np
from numba import njit, prange

from .kernel import anderson_workspace, boundary_fields, mix_and_clip

__all__ = ["lanczos_dense_check", "solve_point_rows"]

#: Krylov vectors per restart cycle and restart cycles (as ``lanczos_ground_state``)
KRYLOV = 40
MAX_RESTARTS = 200


@njit(cache=True)
def _matvec(indptr, indices, data, x, y):
    for i in range(indptr.shape[0] - 1):
        s = 0.0
        for j in range(indptr[i], indptr[i + 1]):
            s += data[j] * x[indices[j]]
        y[i] = s


@njit(cache=True)
def _dot(a, b):
    s = 0.0
    for i in range(a.shape[0]):
        s += a[i] * b[i]
    return s


@njit(cache=True)
def _tri_lowest(alpha, beta, k):
    """Lowest eigenpair of the k x k symmetric tridiagonal matrix (diagonal alpha, off-diagonal beta)."""
    T = np.zeros((k, k))
    for i in range(k):
        T[i, i] = alpha[i]
        if i + 1 < k:
            T[i, i + 1] = beta[i]
            T[i + 1, i] = beta[i]
    w, V = np.linalg.eigh(T)
    return w[0], V[:, 0].copy()


@njit(cache=True)
def _combine(Q, y, k, v):
    """``v = sum_j y[j] Q[j]`` normalised."""
    dim = v.shape[0]
    for i in range(dim):
        v[i] = 0.0
    for j in range(k):
        c = y[j]
        for i in range(dim):
            v[i] += c * Q[j, i]
    nrm = np.sqrt(_dot(v, v))
    for i in range(dim):
        v[i] /= nrm


@njit(cache=True)
def lanczos(indptr, indices, data, v, tol, Q, w, cnt):
    """Lowest eigenpair of the CSR matrix by restarted Lanczos from ``v`` (overwritten with the result).

    The algorithm of :func:`phasemap.cmf.selfconsistency.lanczos_ground_state` (full
    re-orthogonalisation twice, early exit on the Ritz residual every 4 steps, a closed
    Krylov space ends the cycle): converged when ``||H v - E v|| < tol * max(1, |E|)``.
    ``Q`` is (m, dim) workspace, ``w`` (dim,); ``cnt[0]`` counts the sparse products. Returns E.
    """
    dim = v.shape[0]
    m = Q.shape[0]
    nrm = np.sqrt(_dot(v, v))
    for i in range(dim):
        v[i] /= nrm
    alpha = np.zeros(m)
    beta = np.zeros(m)
    E = np.inf
    for _ in range(MAX_RESTARTS):
        for i in range(dim):
            Q[0, i] = v[i]
        for j in range(m):
            alpha[j] = 0.0
            beta[j] = 0.0
        k_used = m
        _matvec(indptr, indices, data, v, w)
        cnt[0] += 1
        for j in range(m):
            alpha[j] = _dot(Q[j], w)
            if j == 0:
                E0 = alpha[0]
                r2 = 0.0
                for i in range(dim):
                    d = w[i] - E0 * v[i]
                    r2 += d * d
                if np.sqrt(r2) < tol * max(1.0, abs(E0)):
                    return E0
            # full re-orthogonalisation (BLAS products); a second pass only when the first
            # removed most of w ("twice is enough", Kahan-Parlett criterion)
            n_before = np.sqrt(_dot(w, w))
            for _r in range(2):
                c = np.dot(Q[: j + 1], w)
                w -= np.dot(c, Q[: j + 1])
                n_after = np.sqrt(_dot(w, w))
                if n_after > 0.7071 * n_before:
                    break
                n_before = n_after
            b = np.sqrt(_dot(w, w))
            if j == m - 1:
                beta[j] = b
                break
            if b < 1e-14 * max(1.0, abs(alpha[j])):
                k_used = j + 1
                beta[j] = 0.0
                break
            beta[j] = b
            if j >= 4 and j % 4 == 0:
                ev, y = _tri_lowest(alpha, beta, j + 1)
                if abs(b * y[j]) < tol * max(1.0, abs(ev)):
                    _combine(Q, y, j + 1, v)
                    return ev
            for i in range(dim):
                Q[j + 1, i] = w[i] / b
            _matvec(indptr, indices, data, Q[j + 1], w)
            cnt[0] += 1
        E, y = _tri_lowest(alpha, beta, k_used)
        _combine(Q, y, k_used, v)
        res = abs(beta[k_used - 1] * y[k_used - 1]) if k_used == m else 0.0
        if res < tol * max(1.0, abs(E)):
            return E
    return E


@njit(cache=True)
def _hamiltonian(x, t, V, V2, d0, M, M2, occ, base, term, diag_pos, S, F, coef, data, dg):
    """``data`` of the row's CSR matrix at iterate ``x`` (boundary fields from the decoupled bonds)."""
    Phi = np.empty(S)
    eps = np.empty(S)
    boundary_fields(x, t, V, V2, M, M2, Phi, eps)
    for f in range(F):
        coef[f] = -t[f]
    for a in range(S):
        coef[F + a] = -Phi[a]
    coef[F + S] = 0.0
    for j in range(base.shape[0]):
        data[j] = coef[term[j]] * base[j]
    dim = d0.shape[0]
    for i in range(dim):
        dg[i] = d0[i]
    for a in range(S):
        e = eps[a]
        if e != 0.0:
            for i in range(dim):
                dg[i] += e * occ[a, i]
    for i in range(dim):
        data[diag_pos[i]] = dg[i]


@njit(cache=True)
def _ground(indptr, indices, data, v, tol, Q, w, cnt, rows, base, term, occ, S, F, gx):
    """Ground state (gauge: entries sum >= 0) into ``v`` and its (n, phi) into ``gx``."""
    lanczos(indptr, indices, data, v, tol, Q, w, cnt)
    s = 0.0
    for i in range(v.shape[0]):
        s += v[i]
    if s < 0:
        for i in range(v.shape[0]):
            v[i] = -v[i]
    for a in range(S):
        nn = 0.0
        for i in range(v.shape[0]):
            nn += occ[a, i] * v[i] * v[i]
        gx[a] = nn
        gx[S + a] = 0.0
    for j in range(base.shape[0]):
        k = term[j]
        if k >= F and k < F + S:
            gx[S + k - F] += 0.5 * v[rows[j]] * base[j] * v[indices[j]]


@njit(cache=True)
def _row(r, t, V, V2, d0, M, M2, occ, indptr, indices, rows, base, term, diag_pos, x0, v0, nmax, tol, eig_tol,
         max_iter, mixing, m, patience, drop, xout, vout, iters, resid, conv, products, r0):
    D = x0.shape[1]
    S = D // 2
    F = t.shape[1]
    dim = occ.shape[1]
    x = x0[r].copy()
    v = v0[r].copy()
    gx = np.empty(D)
    f = np.empty(D)
    mws = anderson_workspace(D, m)
    coef = np.empty(F + S + 1)
    data = np.empty(base.shape[0])
    Q = np.empty((min(KRYLOV, dim), dim))
    cnt = products[r:r + 1]
    w = np.empty(dim)
    dg = np.empty(dim)
    best = np.inf
    last = 0
    res = r0[r]  # residual assumed at the start (inf: cold), sets the first inner tolerance
    it = 0
    done = False
    tr, Vr, V2r, d0r = t[r], V[r], V2[r], d0[r]
    while it < max_iter:
        it += 1
        _hamiltonian(x, tr, Vr, V2r, d0r, M, M2, occ, base, term, diag_pos, S, F, coef, data, dg)
        # inexact inner solves, tightened to eig_tol as the residual falls (as the per-point path)
        r_inner = max(eig_tol, 1e-3 * min(res, 1.0))
        _ground(indptr, indices, data, v, r_inner, Q, w, cnt, rows, base, term, occ, S, F, gx)
        res = 0.0
        for d in range(D):
            f[d] = gx[d] - x[d]
            res = max(res, abs(f[d]))
        if res < tol:
            if r_inner > eig_tol:  # confirm with a tight eigen-solve
                _ground(indptr, indices, data, v, eig_tol, Q, w, cnt, rows, base, term, occ, S, F, gx)
                res = 0.0
                for d in range(D):
                    res = max(res, abs(gx[d] - x[d]))
            if res < tol:
                for d in range(D):
                    x[d] = gx[d]
                conv[r] = True
                done = True
                break
        if res < drop * best:
            best = res
            last = it
        elif it - last > patience:
            break
        mix_and_clip(x, f, mws, it, m, mixing, nmax)
    # final state from the final fields, tight eigen-solve
    _hamiltonian(x, tr, Vr, V2r, d0r, M, M2, occ, base, term, diag_pos, S, F, coef, data, dg)
    _ground(indptr, indices, data, v, eig_tol, Q, w, cnt, rows, base, term, occ, S, F, gx)
    for d in range(D):
        xout[r, d] = x[d]
    for i in range(dim):
        vout[r, i] = v[i]
    iters[r] = it
    resid[r] = res
    return done


@njit(parallel=True, cache=True)
def _rows(t, V, V2, d0, M, M2, occ, indptr, indices, rows, base, term, diag_pos, x0, v0, nmax, tol, eig_tol,
          max_iter, mixing, m, patience, drop, xout, vout, iters, resid, conv, products, r0):
    for r in prange(x0.shape[0]):
        _row(r, t, V, V2, d0, M, M2, occ, indptr, indices, rows, base, term, diag_pos, x0, v0, nmax, tol, eig_tol,
             max_iter, mixing, m, patience, drop, xout, vout, iters, resid, conv, products, r0)


def solve_point_rows(ops, M, M2, t, V, V2, d0, x0, v0, opt, n_max: int, r0=None):
    """Self-consistency of R independent rows (T = 0, Lanczos), in parallel over the cores.

    Parameters
    ----------
    ops : ClusterOperators
    M, M2 : coupling matrices of the decoupled bonds (:meth:`Cluster.inter_matrices`)
    t, V : (R, F) arrays; V2 : (R,) array
    d0 : (R, dim) array
        Parameter part of every row's diagonal (chemical potential, intra-cluster interactions).
    x0 : (R, 2S) start iterates; v0 : (R, dim) start vectors of the first Lanczos solve
    opt : CMFOptions
    r0 : (R,) array, optional
        Self-consistency residual assumed at each start (default inf): the first inner Lanczos
        tolerance is ``max(eig_tol, 1e-3 min(r0, 1))``, as for every later iteration.

    Returns
    -------
    x_end (R, 2S), v_end (R, dim) ground state of the final fields, iterations, residual, converged,
    sparse products
    """
    R = len(x0)
    xout = np.empty_like(np.asarray(x0, float))
    vout = np.empty((R, ops.dim))
    iters = np.zeros(R, np.int64)
    resid = np.full(R, np.inf)
    conv = np.zeros(R, np.bool_)
    products = np.zeros(R, np.int64)
    r0 = np.full(R, np.inf) if r0 is None else np.asarray(r0, float)
    with numba.parallel_chunksize(1):
        _rows(np.ascontiguousarray(t, float), np.ascontiguousarray(V, float), np.ascontiguousarray(V2, float),
              np.ascontiguousarray(d0, float), np.ascontiguousarray(M, float), np.ascontiguousarray(M2, float),
              np.ascontiguousarray(ops.occ), *_pattern(ops), np.ascontiguousarray(x0, float), np.ascontiguousarray(v0, float),
              int(n_max), float(opt.tol), float(opt.eig_tol), int(opt.max_iter), float(opt.mixing),
              max(int(opt.anderson), 0), int(opt.patience), float(opt.stall_drop), xout, vout, iters, resid, conv,
              products, r0)
    return xout, vout, iters, resid, conv, products


def _pattern(ops):
    """CSR pattern of the cluster operators with unsigned indices (no negative-index wraparound
    in the compiled loops: ~2x faster sparse products than int32/int64 indices, measured)."""
    pat = getattr(ops, "_unsigned_pattern", None)
    if pat is None:
        u = np.uint32
        pat = ops._unsigned_pattern = (ops.indptr.astype(u), ops.indices.astype(u), ops.rows.astype(u), ops.base,
                                       ops.term.astype(u), ops.diag_pos.astype(u))
    return pat


def lanczos_dense_check(H, v0, tol):
    """Python access to the compiled :func:`lanczos` on a dense symmetric ``H`` (tests)."""
    import scipy.sparse as sp

    A = sp.csr_matrix(np.asarray(H, float))
    A.sort_indices()
    v = np.array(v0, float)
    m = min(KRYLOV, A.shape[0])
    E = lanczos(A.indptr.astype(np.uint32), A.indices.astype(np.uint32), A.data.astype(float), v, float(tol),
                np.empty((m, A.shape[0])), np.empty(A.shape[0]), np.zeros(1, np.int64))
    return float(E), v
