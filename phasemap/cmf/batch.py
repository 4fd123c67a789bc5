r"""Batched cluster mean field: every (point, seed) row of a batch iterated together.

The per-point path (:func:`phasemap.cmf.selfconsistency._solve_row`) runs one Python loop
per row. Here all rows advance together, one NumPy call per step for the whole batch:

* the cluster Hamiltonian of row ``r`` is ``H_r = sum_k coef[r, k] B_k + diag_r`` with the
  parameter-independent term matrices ``B_k`` (hopping families and site fields, built once
  per cluster by :class:`phasemap.cmf.hamiltonian.ClusterOperators`) and per-row
  coefficients (``-t_f``, ``-Phi_a``) and diagonal (interactions, ``-mu``, ``eps_a``);
* ground states by batched dense ``eigh`` for small dimensions (``batch_dense_max``), or by a
  batched restarted Lanczos (:func:`lanczos_batch`) warm-started from the previous iterate's
  ground states, with one sparse product per term and step for all rows at once;
* batched Anderson mixing (:class:`phasemap.mixing.Anderson`, the same mixer as the
  per-point path and site-decoupled mean field); rows that converged or stalled are written
  out and dropped.

The iteration (mixing, clipping, convergence and stall tests, the final state computed from
the final fields, the variational energy) is the per-point one, so converged rows agree with
:func:`~phasemap.cmf.selfconsistency._solve_row` started from the same point
(``tests/test_cmf_batch.py``). Unlike the per-point path there is no continuation along the
batch: every row starts from its seed (or from ``init``).
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor

import numpy as np

from ..mixing import Anderson, StallWatch

__all__ = ["BatchProblem", "solve_rows", "lanczos_batch", "pick_ground"]

#: condensate fields below this count as zero for the warm start (sector-trap escape)
ZERO_FIELD = 1e-6


class BatchProblem:
    """Cluster Hamiltonians of R rows as functions of their mean fields.

    Parameters
    ----------
    cluster : Cluster
    ops : ClusterOperators
    t, V : (R, F) arrays
    U, V2, mu : (R,) arrays
    hardcore : bool
    """

    def __init__(self, cluster, ops, t, V, U, V2, mu, hardcore: bool):
        self.cluster, self.ops = cluster, ops
        self.hardcore = bool(hardcore)
        self.t, self.V = np.asarray(t, float), np.asarray(V, float)
        self.U = np.zeros(len(self.t)) if hardcore else np.asarray(U, float)
        self.V2, self.mu = np.asarray(V2, float), np.asarray(mu, float)
        self.M, self.M2 = cluster.inter_matrices()
        inter = cluster.inter
        self._ia, self._ib, self._if = inter[:, 0], inter[:, 1], inter[:, 2]
        self._i2a, self._i2b = cluster.inter2[:, 0], cluster.inter2[:, 1]

    def take(self, idx) -> "BatchProblem":
        new = object.__new__(BatchProblem)
        new.__dict__.update(self.__dict__)
        for k in ("t", "V", "U", "V2", "mu"):
            setattr(new, k, getattr(self, k)[idx])
        return new

    def fields(self, n, phi):
        """Boundary fields ``Phi`` and ``eps`` (R, S)."""
        Phi = np.einsum("rf,fab,rb->ra", self.t, self.M, phi)
        eps = np.einsum("rf,fab,rb->ra", self.V, self.M, n) + self.V2[:, None] * (n @ self.M2.T)
        return Phi, eps

    def coefficients(self, Phi):
        return np.concatenate([-self.t, -Phi], axis=1)  # (R, K)

    def diagonal(self, eps):
        ops = self.ops
        d = (-self.mu[:, None] * ops.diag_N[None, :] + self.V @ ops.diag_V + self.V2[:, None] * ops.diag_V2[None, :]
             + eps @ ops.occ)
        if ops.n_max > 1:
            d = d + self.U[:, None] * ops.diag_U[None, :]
        return d  # (R, dim)

    def energy(self, n, phi, hop, eU, eV, eV2):
        """Variational energy per site (R,) of the cluster-product states."""
        e = (-(self.t * hop).sum(1) + self.U * eU + (self.V * eV).sum(1) + self.V2 * eV2 - self.mu * n.sum(1))
        it, iv = self.t[:, self._if], self.V[:, self._if]
        e = e + np.sum(-2.0 * it * phi[:, self._ia] * phi[:, self._ib] + iv * n[:, self._ia] * n[:, self._ib], axis=1)
        e = e + self.V2 * np.sum(n[:, self._i2a] * n[:, self._i2b], axis=1)
        return e / self.cluster.n_sites


# -- ground states ------------------------------------------------------------------------
#: cluster levels closer than this (relative) to the lowest one count as degenerate
DEGENERATE = 1e-10


def pick_ground(w, v):
    """Ground state(s) from full eigen-decompositions ``w (..., d)``, ``v (..., d, d)``.

    In a degenerate ground space (levels within :data:`DEGENERATE`) the solver's choice of
    basis is arbitrary and sensitive to rounding; the state returned is the projection of a
    fixed reference vector onto that space, so every engine picks the same state. Gauge:
    sum of the entries >= 0. Returns ``(..., d)``.
    """
    d = w.shape[-1]
    u = _reference_vector(d)
    deg = (w - w[..., :1]) <= DEGENERATE * np.maximum(1.0, np.abs(w[..., :1]))
    c = np.einsum("...ij,i->...j", v, u) * deg
    g = np.einsum("...ij,...j->...i", v, c)
    nrm = np.linalg.norm(g, axis=-1, keepdims=True)
    g = np.where(nrm > 1e-8, g / np.where(nrm > 0, nrm, 1.0), v[..., :, 0])
    return g * np.where(g.sum(-1, keepdims=True) < 0, -1.0, 1.0)


_REF: dict = {}


def _reference_vector(d: int) -> np.ndarray:
    u = _REF.get(d)
    if u is None:
        u = _REF[d] = np.random.default_rng(12345).uniform(0.5, 1.5, d)
    return u


def _matvec(mats, coef, diag, X):
    """``H_r x_r`` for every column r of ``X`` (dim, R)."""
    Y = diag.T * X
    for k, B in enumerate(mats):
        c = coef[:, k]
        if np.any(c != 0.0):
            Y += c[None, :] * (B @ X)
    return Y


def lanczos_batch(matvec, V0, tol, krylov: int = 14, max_cycles: int = 200, rng=None):
    """Lowest eigenpairs of R symmetric operators by restarted Lanczos, all columns together.

    Parameters
    ----------
    matvec : callable ``(X (dim, R'), idx) -> (dim, R')``
        Applies the operators of rows ``idx`` to the columns of ``X``.
    V0 : (dim, R) array
        Start vectors (warm starts).
    tol : (R,) array
        Residual tolerance ``||H v - E v|| < tol * max(1, |E|)`` per column.
    krylov : int
        Krylov vectors per cycle (full re-orthogonalisation); a cycle restarts from the Ritz vector.

    Returns
    -------
    E : (R,), V : (dim, R), ok : (R,) bool

    Notes
    -----
    A Krylov space that closes (``beta ~ 0``: the start vector lies in an invariant subspace,
    e.g. a particle-number sector when all condensate fields vanish) is continued with a
    random vector orthogonal to it, so that the lowest state of the whole space is found.
    """
    g = np.random.default_rng(0) if rng is None else rng
    dim, R = V0.shape
    E = np.full(R, np.nan)
    out = np.array(V0, float, copy=True)
    ok = np.zeros(R, bool)
    v = out / np.linalg.norm(out, axis=0)
    idx = np.arange(R)
    m = min(krylov, dim)
    tol = np.asarray(tol, float)
    for _ in range(max_cycles):
        if len(idx) == 0:
            break
        n = len(idx)
        Q = np.empty((m, dim, n))
        alpha = np.zeros((n, m))
        beta = np.zeros((n, m))
        Q[0] = v
        w = matvec(v, idx)
        k = m
        for j in range(m):
            alpha[:, j] = np.einsum("dr,dr->r", Q[j], w)
            if j == 0:
                res0 = np.linalg.norm(w - alpha[:, 0] * Q[0], axis=0)
                d0 = res0 < tol[idx] * np.maximum(1.0, np.abs(alpha[:, 0]))
                if d0.any():
                    gi = idx[d0]
                    E[gi], out[:, gi], ok[gi] = alpha[d0, 0], Q[0][:, d0], True
                    keep = ~d0
                    idx, Q, alpha, beta, w = idx[keep], Q[:, :, keep], alpha[keep], beta[keep], w[:, keep]
                    if len(idx) == 0:
                        break
            for _r in range(2):  # full re-orthogonalisation (twice is enough)
                c = np.einsum("jdr,dr->jr", Q[: j + 1], w)
                w = w - np.einsum("jdr,jr->dr", Q[: j + 1], c)
            b = np.linalg.norm(w, axis=0)
            if j == m - 1:
                beta[:, j] = b
                break
            small = b < 1e-12 * np.maximum(1.0, np.abs(alpha[:, j]))
            if small.any():
                z = g.standard_normal((dim, int(small.sum())))
                for _r in range(2):
                    c = np.einsum("jdr,dr->jr", Q[: j + 1][:, :, small], z)
                    z = z - np.einsum("jdr,jr->dr", Q[: j + 1][:, :, small], c)
                w[:, small] = z
                b = np.where(small, np.linalg.norm(w, axis=0), b)
            beta[:, j] = np.where(small, 0.0, b)
            Q[j + 1] = w / b
            w = matvec(Q[j + 1], idx)
        if len(idx) == 0:
            break
        T = np.zeros((len(idx), k, k))
        ar = np.arange(k)
        T[:, ar, ar] = alpha[:, :k]
        T[:, ar[1:], ar[:-1]] = beta[:, : k - 1]
        T[:, ar[:-1], ar[1:]] = beta[:, : k - 1]
        ev, vec = np.linalg.eigh(T)
        y = vec[:, :, 0]
        Er = ev[:, 0]
        vn = np.einsum("jdr,rj->dr", Q[:k], y)
        vn /= np.linalg.norm(vn, axis=0)
        res = np.zeros(len(idx)) if k == dim else np.abs(beta[:, k - 1] * y[:, k - 1])
        done = res < tol[idx] * np.maximum(1.0, np.abs(Er))
        E[idx], out[:, idx] = Er, vn
        ok[idx[done]] = True
        idx, v = idx[~done], vn[:, ~done]
    return E, out, ok


class _GroundStates:
    """Ground-state expectation values of the rows of a :class:`BatchProblem`."""

    def __init__(self, ops, dense: bool):
        self.ops, self.dense = ops, dense
        if dense:
            self.B = ops.dense_terms()
        else:
            self.mats = ops.term_matrices()
        self.top = ops.top.astype(float)

    def solve(self, coef, diag, V0=None, tol=None, rng=None):
        """Ground vectors (dim, R) of ``H_r = coef[r] . B + diag[r]`` (gauge: sum of entries >= 0)."""
        ops = self.ops
        if self.dense:
            H = np.einsum("rk,kij->rij", coef, self.B)
            ar = np.arange(ops.dim)
            H[:, ar, ar] += diag
            w, v = np.linalg.eigh(H)
            return pick_ground(w, v).T.copy(), np.ones(len(w), bool)
        else:
            R = coef.shape[0]
            if V0 is None:
                V0 = (rng or np.random.default_rng(0)).standard_normal((ops.dim, R))
            mats = self.mats
            _, G, ok = lanczos_batch(lambda X, idx: _matvec(mats, coef[idx], diag[idx], X), V0, tol, rng=rng)
        G *= np.where(G.sum(0) < 0, -1.0, 1.0)[None, :]
        return G, ok

    def expectations(self, G):
        """n, phi (R, S); hop (R, F); U, V2 (R,); V (R, F); top (R, S) of the columns of ``G``."""
        ops = self.ops
        p = (G * G).T  # (R, dim)
        F = ops.F
        if self.dense:
            per = np.einsum("ir,kij,jr->rk", G, self.B, G)
        else:
            per = np.stack([np.einsum("dr,dr->r", G, B @ G) for B in self.mats], axis=1)
        return dict(n=p @ ops.occ.T, phi=0.5 * per[:, F:], hop=per[:, :F], U=p @ ops.diag_U, V=p @ ops.diag_V.T,
                    V2=p @ ops.diag_V2, top=p @ self.top.T)


#: below this many rows the final states are evaluated in one call, above in two threads
THREADS_MIN_ROWS = 4096


def _in_threads(fn, R: int) -> dict:
    """``fn(rows)`` (a dict of per-row arrays) over all ``R`` rows, in two halves on two threads
    when ``R >= THREADS_MIN_ROWS`` and this process may use two threads (numba's thread count, which
    the executor limits per worker); NumPy's LAPACK and einsum calls release the GIL."""
    import numba

    if R < THREADS_MIN_ROWS or numba.get_num_threads() < 2:
        return fn(np.arange(R))
    with ThreadPoolExecutor(2) as pool:
        parts = list(pool.map(fn, np.array_split(np.arange(R), 2)))
    return {k: np.concatenate([p[k] for p in parts]) for k in parts[0]}


def solve_rows(prob: BatchProblem, x0, opt, n_max: int, dense: bool, rng=0):
    """Self-consistency of every row of ``prob`` from ``x0`` (R, 2S) (densities, condensates).

    Returns a dict of (R,) / (R, S) arrays: energy, converged, iterations, residual, n, phi, top.
    """
    ops = prob.ops
    S = prob.cluster.n_sites
    R = len(x0)
    gs = _GroundStates(ops, dense)
    g = np.random.default_rng(rng)
    x_out = np.array(x0, float, copy=True)
    iters = np.zeros(R, int)
    resid = np.full(R, np.inf)
    conv = np.zeros(R, bool)
    V_out = None if dense else np.empty((ops.dim, R))
    idx = np.arange(R)
    x = x_out.copy()
    live = np.ones(R, bool)
    watch = StallWatch(R, opt.tol, opt.patience, opt.stall_drop)
    r_prev = np.full(R, np.inf)
    mix = Anderson(R, 2 * S, opt.anderson, opt.mixing)
    sub = prob
    V = None

    def G_of(sub, x, V, tol):
        Phi, eps = sub.fields(x[:, :S], x[:, S:])
        coef, diag = sub.coefficients(Phi), sub.diagonal(eps)
        if V is not None:
            # (nearly) number-conserving rows: a warm start from the previous ground state can
            # stay in its particle-number sector; a random admixture lets Lanczos leave it
            zero = np.abs(Phi).max(1) < ZERO_FIELD
            if zero.any():
                V = V.copy()
                V[:, zero] += 1e-2 * g.standard_normal((ops.dim, int(zero.sum())))
        Gv, _ = gs.solve(coef, diag, V, tol, g)
        ex = gs.expectations(Gv)
        return np.concatenate([ex["n"], ex["phi"]], axis=1), Gv, ex

    if dense and getattr(opt, "compiled", False):
        from .kernel import iterate_dense_rows

        x_out, iters, resid, conv, _ = iterate_dense_rows(prob, x0, opt, n_max, _reference_vector(ops.dim))
        ex = _in_threads(lambda i: G_of(prob.take(i), x_out[i], None, None)[2], R)
        E = prob.energy(ex["n"], ex["phi"], ex["hop"], ex["U"], ex["V"], ex["V2"])
        return dict(energy=E, converged=conv, iterations=iters.astype(int), residual=resid, n=ex["n"],
                    phi=ex["phi"], top=ex["top"].max(1))
    it = 0
    for it in range(1, opt.max_iter + 1):
        r_inner = np.full(len(x), opt.eig_tol)
        gx, V, _ = G_of(sub, x, V, r_inner)
        f = gx - x
        r = np.abs(f).max(axis=1)
        if not dense:  # confirm apparently converged rows with a tight eigen-solve
            chk = (r < opt.tol) & (r_inner > opt.eig_tol)
            if chk.any():
                gx2, V2, _ = G_of(sub.take(chk), x[chk], V[:, chk], np.full(int(chk.sum()), opt.eig_tol))
                gx[chk], V[:, chk] = gx2, V2
                f = gx - x
                r = np.abs(f).max(axis=1)
        r_prev = r
        done, stalled = watch.update(r, it, live)
        fin = done | stalled
        if fin.any():
            gi = idx[fin]
            x_out[gi] = np.where(done[fin, None], gx[fin], x[fin])
            resid[gi], iters[gi], conv[gi] = r[fin], it, done[fin]
            if V_out is not None:
                V_out[:, gi] = V[:, fin]
            live &= ~fin
        if not live.any():
            break
        xnew = mix.step(x, f)
        xnew[:, :S] = np.clip(xnew[:, :S], 0.0, n_max)
        xnew[:, S:] = np.clip(xnew[:, S:], 0.0, None)
        x = xnew
        if (~live).sum() > 0.1 * len(live):  # drop finished rows
            keep = live
            idx, x, sub = idx[keep], x[keep], sub.take(keep)
            mix.keep(keep)
            watch.keep(keep)
            live, r_prev = live[keep], r_prev[keep]
            if V is not None:
                V = V[:, keep]
    else:
        gi = idx[live]
        x_out[gi], iters[gi], resid[gi] = x[live], opt.max_iter, r[live]
        if V_out is not None:
            V_out[:, gi] = V[:, live]
    # final state from the final fields (tight eigen-solve), variational energy
    _, _, ex = G_of(prob, x_out, V_out, np.full(R, opt.eig_tol))
    E = prob.energy(ex["n"], ex["phi"], ex["hop"], ex["U"], ex["V"], ex["V2"])
    return dict(energy=E, converged=conv, iterations=iters, residual=resid, n=ex["n"], phi=ex["phi"],
                top=ex["top"].max(1))
