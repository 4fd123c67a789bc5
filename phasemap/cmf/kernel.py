"""Compiled (numba) per-row loop of the batched cluster mean field, for small dense clusters.

Same iteration as :func:`phasemap.cmf.batch.solve_rows` with dense ground states: fields from
the decoupled bonds, ``H = sum_k coef_k B_k + diag`` from the precomputed dense term matrices,
the ground state from the lowest eigenpairs (LAPACK ``dsyevr``, called from the compiled loop
through SciPy's LAPACK; about 3x faster than the full ``eigh`` at 64 states) with the
deterministic choice in a degenerate ground space (:func:`phasemap.cmf.batch.pick_ground`),
Anderson mixing (the compiled step :func:`phasemap.mf_kernel.anderson_step`), clipping,
convergence and stall tests. Each row runs to its own end inside one compiled loop (no
interpreter work per iteration, no waiting for the slowest row). Returns the end iterates; the
final states and energies are evaluated in NumPy by the caller.

Up to :data:`WARM_MAX_DIM` states, from a row's second iteration on, the previous iteration's
ground state is first refined by inverse iteration (:func:`_ground_warm`) and kept only if two
Cholesky factorisations certify it (every level above the shift; the second level above the
degeneracy threshold): the certified state is the ground state to the accuracy of a dense solver,
about 5x cheaper than ``dsyevr`` at 8 states. Refused (a sector change, a degenerate level, a
poor start): the full solve as before. Converged rows agree with the full solve to the stopping
tolerance; rows that wander for many iterations are chaotic and may end elsewhere (docs/cmf.md).
"""

from __future__ import annotations

import numba
import numpy as np
from numba import njit, prange

import llvmlite.binding as _llvm
from numba import types
from numba.core import cgutils
from numba.extending import get_cython_function_address, intrinsic

from ..mf_kernel import anderson_step

__all__ = ["iterate_dense_rows", "lowest_eigenpairs"]

# LAPACK dsyevr (selected eigenpairs of a real symmetric matrix) from SciPy, bound by symbol name
# so that the compiled functions can be cached on disk (a ctypes pointer would disable caching)
_llvm.add_symbol("phasemap_dsyevr", get_cython_function_address("scipy.linalg.cython_lapack", "dsyevr"))
_dsyevr = types.ExternalFunction("phasemap_dsyevr", types.void(*([types.voidptr] * 21)))


@intrinsic
def _ptr(typingctx, arr):
    """Data pointer of an array (for the LAPACK call)."""
    def codegen(context, builder, signature, args):
        ary = context.make_array(arr)(context, builder, args[0])
        return builder.bitcast(ary.data, cgutils.voidptr_t)
    return types.voidptr(arr), codegen


@njit(cache=True)
def _syevr(H, k, w, Z, work, iwork, isuppz, ints, dbl, chars):
    """The ``k`` lowest eigenpairs of the symmetric ``H`` (destroyed): ``w[:k]``, vectors ``Z[j, :]``."""
    n = H.shape[0]
    ints[0] = n
    ints[1] = n
    ints[2] = 1
    ints[3] = k
    ints[4] = 0
    ints[5] = n
    ints[6] = work.shape[0]
    ints[7] = iwork.shape[0]
    ints[8] = 0
    dbl[0] = 0.0
    dbl[1] = 0.0
    dbl[2] = 0.0
    _dsyevr(_ptr(chars[0:]), _ptr(chars[1:]), _ptr(chars[2:]), _ptr(ints[0:]), _ptr(H), _ptr(ints[1:]),
            _ptr(dbl[0:]), _ptr(dbl[1:]), _ptr(ints[2:]), _ptr(ints[3:]), _ptr(dbl[2:]), _ptr(ints[4:]),
            _ptr(w), _ptr(Z), _ptr(ints[5:]), _ptr(isuppz), _ptr(work), _ptr(ints[6:]), _ptr(iwork),
            _ptr(ints[7:]), _ptr(ints[8:]))
    return ints[8]


@njit(cache=True)
def _workspace(dim):
    return (np.empty(dim), np.empty((dim, dim)), np.empty(26 * dim), np.empty(10 * dim, np.int32),
            np.empty(2 * dim, np.int32), np.zeros(9, np.int32), np.zeros(3),
            np.array([ord("V"), ord("I"), ord("L")], np.uint8), np.empty((dim, dim)))


@njit(cache=True)
def _lowest(H, thr_rel, ws):
    """Lowest eigenpairs of ``H`` (kept) covering its ground space: levels within
    ``thr_rel * max(1, |E0|)`` of the lowest. Returns ``(k, w, Z)`` with ``Z[j, :]`` the vectors;
    ``k`` exceeds the ground-space dimension by one unless every level is degenerate."""
    w, Z, work, iwork, isuppz, ints, dbl, chars, A = ws
    dim = H.shape[0]
    k = min(2, dim)
    while True:
        A[:, :] = H
        info = _syevr(A, k, w, Z, work, iwork, isuppz, ints, dbl, chars)
        if info != 0:  # pragma: no cover - LAPACK failure: the full decomposition
            ww, vv = np.linalg.eigh(H)
            for j in range(dim):
                w[j] = ww[j]
                for i in range(dim):
                    Z[j, i] = vv[i, j]
            return dim, w, Z
        if k == dim or w[k - 1] - w[0] > thr_rel * max(1.0, abs(w[0])):
            return k, w, Z
        k = min(dim, 2 * k)


def lowest_eigenpairs(H, thr_rel=1e-10):
    """Python access to the compiled partial eigensolver (tests): ``(w[:k], V (dim, k))``."""
    H = np.ascontiguousarray(H, float)
    k, w, Z = _lowest(H, thr_rel, _workspace(H.shape[0]))
    return w[:k].copy(), Z[:k].T.copy()


@njit(cache=True)
def warm_workspace(dim):
    """Work arrays of :func:`_ground_warm` ``(A, L, y, hv)`` and of :func:`_ground` (the last two
    states; NaN: none yet)."""
    return (np.empty((dim, dim)), np.zeros((dim, dim)), np.empty(dim), np.empty(dim), np.empty(dim),
            np.full(dim, np.nan))


@njit(cache=True)
def _cholesky(A, L):
    """Lower Cholesky factor of the symmetric ``A`` into ``L``; False if ``A`` is not positive
    definite (a pivot <= 0: by Sylvester's law of inertia, ``A`` has an eigenvalue <= 0)."""
    n = A.shape[0]
    for j in range(n):
        s = A[j, j]
        for k in range(j):
            s -= L[j, k] * L[j, k]
        if not s > 0.0:
            return False
        d = np.sqrt(s)
        L[j, j] = d
        for i in range(j + 1, n):
            s = A[i, j]
            for k in range(j):
                s -= L[i, k] * L[j, k]
            L[i, j] = s / d
    return True


@njit(cache=True)
def _cholesky_solve(L, b, y):
    n = L.shape[0]
    for i in range(n):
        s = b[i]
        for k in range(i):
            s -= L[i, k] * y[k]
        y[i] = s / L[i, i]
    for i in range(n - 1, -1, -1):
        s = y[i]
        for k in range(i + 1, n):
            s -= L[k, i] * y[k]
        y[i] = s / L[i, i]


@njit(cache=True)
def _rayleigh(H, v, hv):
    """Rayleigh quotient of the unit ``v`` and the norm of its residual ``H v - rho v``."""
    n = H.shape[0]
    for i in range(n):
        s = 0.0
        for j in range(n):
            s += H[i, j] * v[j]
        hv[i] = s
    rho = 0.0
    for i in range(n):
        rho += v[i] * hv[i]
    r2 = 0.0
    for i in range(n):
        d = hv[i] - rho * v[i]
        r2 += d * d
    return rho, np.sqrt(r2)


#: inverse-iteration steps of the warm ground state before it gives up
WARM_STEPS = 6
#: largest cluster dimension refined warm (CPU per map, idle machine: 8 states 2.3x and 27 states
#: 1.6x faster than ``dsyevr`` alone, 64 states 7 % slower: the Cholesky factorisations are O(dim^3))
WARM_MAX_DIM = 32


@njit(cache=True)
def _ground_warm(H, v, thr_rel, wws):
    """Ground state of ``H`` by inverse iteration from the unit vector ``v`` (the previous
    iteration's ground state; overwritten by the result), certified or refused.

    Each step shifts below the Rayleigh quotient ``rho`` by the residual norm ``r`` (an
    eigenvalue lies within ``r`` of ``rho``): the Cholesky factorisation of ``H - s`` exists
    only if every level lies above ``s``, so a start near an excited state (the ground state
    moved to another particle-number sector) is refused instead of followed. Converged when
    ``r <= 1e-15 ||H||_inf`` (about the accuracy of a dense solver). The ground level must be
    non-degenerate: ``H + a v v^T - (rho + c)`` with ``c = thr_rel max(1, |rho|) + 2 r`` must be
    positive definite (second level above the degeneracy threshold of :func:`_lowest`).
    Returns False when not certified: the caller solves ``H`` from scratch.
    """
    A, L, y, hv = wws[0], wws[1], wws[2], wws[3]
    n = H.shape[0]
    hs = 0.0
    for i in range(n):
        rs = 0.0
        for j in range(n):
            rs += abs(H[i, j])
        hs = max(hs, rs)
    tol = 1e-15 * hs
    rho, r = _rayleigh(H, v, hv)
    for _ in range(WARM_STEPS):
        if r <= tol:
            break
        s = rho - r - 1e-13 * hs
        for i in range(n):
            for j in range(n):
                A[i, j] = H[i, j]
            A[i, i] -= s
        if not _cholesky(A, L):
            return False
        _cholesky_solve(L, v, y)
        nrm = 0.0
        for i in range(n):
            nrm += y[i] * y[i]
        nrm = np.sqrt(nrm)
        for i in range(n):
            v[i] = y[i] / nrm
        rho, r = _rayleigh(H, v, hv)
    if not r <= tol:
        return False
    c = thr_rel * max(1.0, abs(rho)) + 2.0 * r
    a = 2.0 * hs + 1.0
    for i in range(n):
        for j in range(n):
            A[i, j] = H[i, j] + a * v[i] * v[j]
        A[i, i] -= rho + c
    return _cholesky(A, L)


def warm_ground_state(H, v0, thr_rel=1e-10):
    """Python access to the certified warm ground state (tests): ``(ok, v)``."""
    H = np.ascontiguousarray(H, float)
    v = np.array(v0, float)
    v /= np.linalg.norm(v)
    ok = _ground_warm(H, v, thr_rel, warm_workspace(H.shape[0]))
    return bool(ok), v


@njit(cache=True)
def boundary_fields(x, t, V, V2, M, M2, Phi, eps):
    """Boundary fields of the iterate ``x = (n, phi)``: ``Phi_a = sum_f t_f (M_f phi)_a`` and
    ``eps_a = sum_f V_f (M_f n)_a + V2 (M2 n)_a`` (decoupled bonds, ``Cluster.inter_matrices``)."""
    S = Phi.shape[0]
    F = t.shape[0]
    for a in range(S):
        p = 0.0
        e = 0.0
        for f in range(F):
            sp = 0.0
            sn = 0.0
            for b in range(S):
                sp += M[f, a, b] * x[S + b]
                sn += M[f, a, b] * x[b]
            p += t[f] * sp
            e += V[f] * sn
        s2 = 0.0
        for b in range(S):
            s2 += M2[a, b] * x[b]
        Phi[a] = p
        eps[a] = e + V2 * s2


@njit(cache=True)
def anderson_workspace(D, m):
    """Per-row state of :func:`mix_and_clip`: ``(px, pf, hx, hf, G, A, bb, step)``."""
    mm = max(m, 1)
    return (np.zeros(D), np.zeros(D), np.zeros((mm, D)), np.zeros((mm, D)), np.zeros((mm, mm)), np.zeros((mm, mm)),
            np.zeros(mm), np.empty(D))


@njit(cache=True)
def mix_and_clip(x, f, ws, it, m, mixing, nmax):
    """Anderson step of iteration ``it`` (:func:`phasemap.mf_kernel.anderson_step`) written into
    ``x = (n, phi)``, densities clipped to [0, nmax] and condensates to >= 0."""
    px, pf, hx, hf, G, A, bb, step = ws
    anderson_step(x, f, px, pf, hx, hf, G, A, bb, it, m, mixing, step)
    S = x.shape[0] // 2
    for d in range(x.shape[0]):
        st = step[d]
        if d < S:
            st = min(max(st, 0.0), float(nmax))
        elif st < 0.0:
            st = 0.0
        x[d] = st


@njit(cache=True)
def _pick(H, u, g, ws):
    """Ground state of ``H`` (destroyed) from its lowest eigenpairs into ``g``: in a degenerate
    ground space the projection of the reference vector ``u`` (:func:`phasemap.cmf.batch.pick_ground`)."""
    dim = H.shape[0]
    k, w, v = _lowest(H, 1e-10, ws)
    thr = 1e-10 * max(1.0, abs(w[0]))
    for i in range(dim):
        g[i] = 0.0
    for j in range(k):
        if w[j] - w[0] > thr:
            break
        cj = 0.0
        for i in range(dim):
            cj += v[j, i] * u[i]
        for i in range(dim):
            g[i] += cj * v[j, i]
    nrm = 0.0
    for i in range(dim):
        nrm += g[i] * g[i]
    nrm = np.sqrt(nrm)
    if nrm > 1e-8:
        for i in range(dim):
            g[i] /= nrm
    else:
        for i in range(dim):
            g[i] = v[0, i]


@njit(cache=True)
def _ground(x, t, V, U, V2, mu, nmax, M, M2, B, occ, dN, dV, dV2, dU, u, S, F, H, g, out, ws, warm, wws):
    """Map one iterate ``x`` (2S) to the ground state's (n, phi) in ``out``; ``g`` receives the state.

    With ``warm``, ``g`` holds the previous iteration's state and is first refined by
    :func:`_ground_warm`, if refused the state of the iteration before (kept in ``wws``: rows
    whose ground state alternates between two particle-number sectors); only if both are
    refused are the lowest eigenpairs solved (``_lowest``) and the state picked as in
    :func:`phasemap.cmf.batch.pick_ground`. Returns True if the warm path was refused or not
    tried (a full eigensolve)."""
    dim = B.shape[1]
    K = B.shape[0]
    for i in range(dim):
        for j in range(dim):
            H[i, j] = 0.0
    Phi = np.empty(S)
    eps = np.empty(S)
    boundary_fields(x, t, V, V2, M, M2, Phi, eps)
    for k in range(K):
        c = -t[k] if k < F else -Phi[k - F]
        if c != 0.0:
            for i in range(dim):
                for j in range(dim):
                    H[i, j] += c * B[k, i, j]
    for i in range(dim):
        d = -mu * dN[i] + V2 * dV2[i]
        for f in range(F):
            d += V[f] * dV[f, i]
        if nmax > 1:
            d += U * dU[i]
        H[i, i] += d
    for a in range(S):
        for i in range(dim):
            H[i, i] += eps[a] * occ[a, i]
    full = True
    if warm:  # the previous state, else the one before it (rows hopping between two sectors)
        g1, g2 = wws[4], wws[5]
        for i in range(dim):
            g1[i] = g[i]
        full = not _ground_warm(H, g, 1e-10, wws)
        if full and g2[0] == g2[0]:
            for i in range(dim):
                g[i] = g2[i]
            full = not _ground_warm(H, g, 1e-10, wws)
        for i in range(dim):
            g2[i] = g1[i]
    if full:
        _pick(H, u, g, ws)
    sg = 0.0
    for i in range(dim):
        sg += g[i]
    if sg < 0:
        for i in range(dim):
            g[i] = -g[i]
    for a in range(S):
        nn = 0.0
        for i in range(dim):
            nn += occ[a, i] * g[i] * g[i]
        out[a] = nn
        ph = 0.0
        for i in range(dim):
            if g[i] != 0.0:
                s = 0.0
                for j in range(dim):
                    s += B[F + a, i, j] * g[j]
                ph += g[i] * s
        out[S + a] = 0.5 * ph
    return full


@njit(cache=True)
def _row(r, t, V, U, V2, mu, nmax, M, M2, B, occ, dN, dV, dV2, dU, u, x0, tol, max_iter, mixing, m, patience,
         drop, xout, iters, resid, conv, nfull, hres):
    D = x0.shape[1]
    S = D // 2
    F = t.shape[1]
    dim = B.shape[1]
    x = x0[r].copy()
    gx = np.empty(D)
    f = np.empty(D)
    mws = anderson_workspace(D, m)
    H = np.empty((dim, dim))
    g = np.empty(dim)
    ws = _workspace(dim)
    wws = warm_workspace(dim)
    best = np.inf
    last = 0
    res = np.inf
    it = 0
    done = False
    while it < max_iter:
        it += 1
        if _ground(x, t[r], V[r], U[r], V2[r], mu[r], nmax, M, M2, B, occ, dN, dV, dV2, dU, u, S, F, H, g, gx, ws,
                   it > 1 and dim <= WARM_MAX_DIM, wws):
            nfull[r] += 1
        res = 0.0
        for d in range(D):
            f[d] = gx[d] - x[d]
            if abs(f[d]) > res:
                res = abs(f[d])
        if it <= hres.shape[1]:
            hres[r, it - 1] = res
        if res < best * drop:
            best = res
            last = it
        if res < tol:
            for d in range(D):
                xout[r, d] = gx[d]
            conv[r] = True
            done = True
            break
        if it - last > patience:
            for d in range(D):
                xout[r, d] = x[d]
            done = True
            break
        mix_and_clip(x, f, mws, it, m, mixing, nmax)
    if not done:
        for d in range(D):
            xout[r, d] = x[d]
    iters[r] = it
    resid[r] = res


@njit(cache=True)
def _rows_serial(t, V, U, V2, mu, nmax, M, M2, B, occ, dN, dV, dV2, dU, u, x0, tol, max_iter, mixing, m, patience,
                 drop, xout, iters, resid, conv, nfull, hres):
    for r in range(x0.shape[0]):
        _row(r, t, V, U, V2, mu, nmax, M, M2, B, occ, dN, dV, dV2, dU, u, x0, tol, max_iter, mixing, m, patience,
             drop, xout, iters, resid, conv, nfull, hres)


@njit(parallel=True, cache=True)
def _rows_parallel(t, V, U, V2, mu, nmax, M, M2, B, occ, dN, dV, dV2, dU, u, x0, tol, max_iter, mixing, m,
                   patience, drop, xout, iters, resid, conv, nfull, hres):
    for r in prange(x0.shape[0]):
        _row(r, t, V, U, V2, mu, nmax, M, M2, B, occ, dN, dV, dV2, dU, u, x0, tol, max_iter, mixing, m, patience,
             drop, xout, iters, resid, conv, nfull, hres)


#: below this many rows the threads' hand-off costs more than it saves (a row costs ~0.1-2 ms)
PARALLEL_MIN_ROWS = 64
#: rows handed to a thread at a time (rows differ 100-fold in cost: hopeless rows run to the
#: stall limit, so a static split in halves leaves one core idle)
CHUNK_ROWS = 4


def iterate_dense_rows(prob, x0, opt, n_max: int, u, history=None):
    """Iterate every row of ``x0`` (R, 2S) of :class:`~phasemap.cmf.batch.BatchProblem` ``prob``.

    Returns ``(x_end, iterations, residual, converged, full_solves)``: converged rows end on
    the map of their last iterate, stalled or capped rows on their last iterate (as in
    ``solve_rows``); ``full_solves`` counts each row's iterations whose ground state needed the
    full eigensolve (the first one, and those where the warm refinement was refused).
    ``history``, an optional (R, K) float array, receives each row's residual of its first K
    iterations (``benchmarks/cmf_map_rows.py`` replays stop rules on it).
    """
    ops = prob.ops
    R = len(x0)
    xout = np.array(x0, float, copy=True)
    iters = np.zeros(R, np.int64)
    resid = np.full(R, np.inf)
    conv = np.zeros(R, np.bool_)
    nfull = np.zeros(R, np.int64)
    hres = np.zeros((R, 0)) if history is None else history
    parallel = R >= PARALLEL_MIN_ROWS and numba.get_num_threads() > 1
    run = _rows_parallel if parallel else _rows_serial
    with numba.parallel_chunksize(CHUNK_ROWS if parallel else 0):
        _call(run, prob, ops, x0, opt, n_max, u, xout, iters, resid, conv, nfull, hres)
    return xout, iters, resid, conv, nfull


def _call(run, prob, ops, x0, opt, n_max, u, xout, iters, resid, conv, nfull, hres):
    run(np.ascontiguousarray(prob.t), np.ascontiguousarray(prob.V), np.ascontiguousarray(prob.U, float),
        np.ascontiguousarray(prob.V2, float), np.ascontiguousarray(prob.mu, float), int(n_max),
        np.ascontiguousarray(prob.M), np.ascontiguousarray(prob.M2), ops.dense_terms(), np.ascontiguousarray(ops.occ),
        ops.diag_N.astype(float), np.ascontiguousarray(ops.diag_V), ops.diag_V2.astype(float),
        ops.diag_U.astype(float), np.asarray(u, float), np.ascontiguousarray(x0, dtype=float), float(opt.tol),
        int(opt.max_iter), float(opt.mixing), max(int(opt.anderson), 0), int(opt.patience), float(opt.stall_drop),
        xout, iters, resid, conv, nfull, hres)
