r"""Site-decoupled (Gutzwiller product-state) mean field, vectorized over parameter points.

Every site of a periodic supercell carries its own state; the bonds are decoupled,

.. math:: b_i^\dagger b_j \to \phi_i b_j + b_i^\dagger \phi_j - \phi_i\phi_j,\qquad
          n_i n_j \to \langle n_i\rangle n_j + n_i \langle n_j\rangle - \langle n_i\rangle\langle n_j\rangle,

with real :math:`\phi = \langle b\rangle` (enough for t >= 0). The local problem of site s is

.. math:: h_s = \frac{U}{2} n(n-1) + (\epsilon_s - \mu) n - \Phi_s (b + b^\dagger),\quad
          \Phi_s = \sum_{j\in\partial s} t_{sj}\phi_j,\quad
          \epsilon_s = \sum_{j\in\partial s} V_{sj}\langle n_j\rangle + V_2\sum_{j\in\partial_2 s}\langle n_j\rangle,

solved in closed form for hard-core bosons (2x2) and by batched ``numpy.linalg.eigh`` for
soft-core bosons, for all points x seeds x sites at once. Solutions are compared by the
variational energy per site :math:`\langle H\rangle/N` of the product state (not the sum
of local eigenvalues, which double-counts bonds).

Caution: site-decoupled mean field overestimates ordered phases, badly so on the frustrated
triangular lattice; use cluster mean field or exact diagonalization to judge boundaries.

References
----------
M. P. A. Fisher, P. B. Weichman, G. Grinstein, D. S. Fisher, PRB 40, 546 (1989).
D. van Oosten, P. van der Straten, H. T. C. Stoof, PRA 63, 053601 (2001).
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from .lattice import Supercell, search_cell
from .params import ParamBatch
from .seeds import Seed, make_seeds

__all__ = ["MFOptions", "MFBatchResult", "solve_batch", "insulator_instability", "unstable_insulators", "CellOps"]


@dataclass(frozen=True)
class MFOptions:
    """Self-consistency options.

    tol : float, default 1e-10
        Convergence when max |change| of every site's <n> and <b> is below tol.
    max_iter : int, default 3000
        Points still moving after max_iter iterations are flagged unconverged.
    mixing : float, default 0.6
        Linear mixing x <- x + mixing (G(x) - x) between Anderson steps.
    anderson : int, default 5
        Anderson (type II) acceleration memory; 0 disables.
    n_random : int, default 1
        Random seeds on the search cell.
    rng : int, default 0
        Seed of the random seeds (results are reproducible).
    weight_warn : float, default 1e-3
        Soft-core: flag when the top occupation n_max carries more weight.
    patience : int, default 25
        A row whose best residual has not improved for this many iterations (an oscillating
        seed, or a branch with no fixed point) is stopped and flagged unconverged.
    engine : {"auto", "numba", "numpy"}
        "auto"/"numba": compiled per-row loop (default); "numpy": batched array path (same
        algorithm, kept as an independent cross-check).
    """

    tol: float = 1e-10
    max_iter: int = 3000
    mixing: float = 0.6
    anderson: int = 5
    n_random: int = 1
    rng: int = 0
    weight_warn: float = 1e-3
    patience: int = 25
    engine: str = "auto"


class CellOps:
    """Neighbour tables of a supercell for the mean-field fields."""

    def __init__(self, cell: Supercell):
        self.cell = cell
        lat = cell.lattice
        self.plus = cell.neighbors  # (F, S)
        self.minus = np.stack([cell.index(cell.sites - np.array(d)) for d in lat.nn])
        self.nnn_plus = cell.nnn_neighbors
        self.nnn_minus = np.stack([cell.index(cell.sites - np.array(d)) for d in lat.nnn])

    def fields(self, t, V, V2, mu, n, phi):
        """Phi (..., S) and eps - mu (..., S); t, V (..., F); V2, mu (...)."""
        Phi = np.zeros_like(phi)
        eps = np.zeros_like(n)
        for f in range(self.plus.shape[0]):
            Phi += t[..., f, None] * (phi[..., self.plus[f]] + phi[..., self.minus[f]])
            eps += V[..., f, None] * (n[..., self.plus[f]] + n[..., self.minus[f]])
        if np.any(V2 != 0):
            nn2 = np.zeros_like(n)
            for k in range(self.nnn_plus.shape[0]):
                nn2 += n[..., self.nnn_plus[k]] + n[..., self.nnn_minus[k]]
            eps += V2[..., None] * nn2
        eps -= mu[..., None]
        return Phi, eps

    def bond_energy(self, t, V, V2, n, phi):
        """Per-site bond energy of the product state (each bond once)."""
        e = np.zeros(n.shape[:-1])
        for f in range(self.plus.shape[0]):
            e += (-2.0 * t[..., f] * (phi * phi[..., self.plus[f]]).mean(-1)
                  + V[..., f] * (n * n[..., self.plus[f]]).mean(-1))
        for k in range(self.nnn_plus.shape[0]):
            e += V2 * (n * n[..., self.nnn_plus[k]]).mean(-1)
        return e

    def hopping_matrix(self, t):
        """(..., S, S) symmetric hopping matrix of the periodic cell (t >= 0)."""
        S = self.cell.n_sites
        T = np.zeros(t.shape[:-1] + (S, S))
        s = np.arange(S)
        for f in range(self.plus.shape[0]):
            np.add.at(T, (..., s, self.plus[f]), t[..., f, None])
            np.add.at(T, (..., s, self.minus[f]), t[..., f, None])
        return T


# -- local problems -----------------------------------------------------------------------
def _local_hardcore(Phi, eps, n_in):
    r = np.sqrt(eps * eps + 4.0 * Phi * Phi)
    safe = np.where(r > 0, r, 1.0)
    n = np.where(r > 0, 0.5 * (1.0 - eps / safe), n_in)  # zero field: keep the occupation
    phi = np.where(r > 0, Phi / safe, 0.0)
    return n, phi, np.zeros_like(n), np.zeros_like(n)


def _local_softcore(Phi, eps, U, n_max):
    d = n_max + 1
    m = np.arange(d, dtype=float)
    H = np.zeros(Phi.shape + (d, d))
    diag = 0.5 * U[..., None] * m * (m - 1) + eps[..., None] * m
    idx = np.arange(d)
    H[..., idx, idx] = diag
    off = -Phi[..., None] * np.sqrt(m[1:])
    H[..., idx[1:], idx[:-1]] = off
    H[..., idx[:-1], idx[1:]] = off
    w, v = np.linalg.eigh(H)
    g = v[..., :, 0]
    g = g * np.where(g.sum(-1, keepdims=True) < 0, -1.0, 1.0)  # gauge: <b> >= 0 for Phi >= 0
    p = g * g
    n = (p * m).sum(-1)
    phi = (g[..., 1:] * g[..., :-1] * np.sqrt(m[1:])).sum(-1)
    nn1 = (p * m * (m - 1)).sum(-1)
    return n, phi, nn1, p[..., -1]


@dataclass
class MFBatchResult:
    """All seeds' end states for P points; arrays on the common search cell.

    Shapes: energy, converged, iterations, residual, top_weight: (P, K);
    n, phi: (P, K, S) with S the search cell's sites.
    """

    batch: ParamBatch
    cell: Supercell
    seeds: list
    energy: np.ndarray
    converged: np.ndarray
    iterations: np.ndarray
    residual: np.ndarray
    n: np.ndarray
    phi: np.ndarray
    top_weight: np.ndarray
    options: MFOptions = field(default_factory=MFOptions)
    method: str = "mf"  # cluster mean field sets "cmf"

    @property
    def seed_names(self) -> list[str]:
        return [s.name for s in self.seeds]

    def best(self, etol: float = 1e-10) -> np.ndarray:
        """Index of the lowest-energy converged seed per point (-1 if none converged).

        Ties within ``etol * scale`` go to the earliest (simplest) seed.
        """
        E = np.where(self.converged, self.energy, np.inf)
        Emin = E.min(axis=1, keepdims=True)
        scale = np.maximum(1.0, np.abs(Emin))
        cand = E <= Emin + etol * scale
        best = np.argmax(cand, axis=1)
        return np.where(np.isfinite(Emin[:, 0]), best, -1)


def _iterate(ops: CellOps, batch: ParamBatch, n0, phi0, opt: MFOptions):
    """Self-consistency for all (P, K) rows of one supercell group.

    Works on a compact set of live rows: finished rows (converged, or stalled = no fixed point
    reachable from this seed) are written out and dropped once they make up a tenth of the set.
    """
    P, K, S = n0.shape
    hard = batch.hardcore
    rows = P * K
    rep = lambda a: np.repeat(a, K, axis=0)  # noqa: E731
    t, V, V2, mu, U = rep(batch.t), rep(batch.V), rep(batch.V2), rep(batch.mu), rep(batch.U)
    x_out = np.concatenate([n0.reshape(rows, S), phi0.reshape(rows, S)], axis=1)
    iters = np.zeros(rows, int)
    resid = np.full(rows, np.inf)
    conv = np.zeros(rows, bool)
    m = opt.anderson

    def G(xa, sel):
        Phi, eps = ops.fields(t[sel], V[sel], V2[sel], mu[sel], xa[:, :S], xa[:, S:])
        if hard:
            n, ph, nn1, top = _local_hardcore(Phi, eps, xa[:, :S])
        else:
            n, ph, nn1, top = _local_softcore(Phi, eps, U[sel][:, None], batch.n_max)
        return np.concatenate([n, ph], axis=1), nn1, top

    if opt.engine in ("auto", "numba"):
        from .mf_kernel import iterate_rows

        x_out, iters, resid, conv = iterate_rows(
            t, V, V2, mu, np.where(np.isfinite(U), U, 0.0), batch.n_max, ops.plus, ops.minus, ops.nnn_plus,
            ops.nnn_minus, x_out, opt.tol, opt.max_iter, opt.mixing, max(opt.anderson, 0), opt.patience)
        return _finish(ops, batch, x_out, conv, iters, resid, G, t, V, V2, mu, U, P, K, S, mapped=hard)
    # compact state
    idx = np.arange(rows)
    x = x_out.copy()
    live = np.ones(rows, bool)
    best_r = np.full(rows, np.inf)
    last_gain = np.zeros(rows, int)
    hx = np.zeros((m, rows, 2 * S))
    hf = np.zeros((m, rows, 2 * S))
    px = pf = None
    for it in range(1, opt.max_iter + 1):
        gx, _, _ = G(x, idx)
        f = gx - x
        r = np.abs(f).max(axis=1)
        gain = r < 0.999 * best_r
        best_r = np.where(gain, r, best_r)
        last_gain = np.where(gain, it, last_gain)
        done = live & (r < opt.tol)
        stalled = live & ~done & ((it - last_gain) > opt.patience)
        fin = done | stalled
        if fin.any():
            g = idx[fin]
            x_out[g] = np.where(done[fin, None], gx[fin], x[fin])
            resid[g], iters[g], conv[g] = r[fin], it, done[fin]
            live &= ~fin
        if not live.any():
            break
        xnew = x + opt.mixing * f
        k = min(it - 1, m)
        if k > 0:
            slot = (it - 2) % m
            hx[slot] = x - px
            hf[slot] = f - pf
            dX = hx[:k].transpose(1, 2, 0)  # (R, D, k)
            dF = hf[:k].transpose(1, 2, 0)
            A = np.einsum("rdk,rdl->rkl", dF, dF)
            b = np.einsum("rdk,rd->rk", dF, f)
            reg = 1e-10 * np.maximum(np.trace(A, axis1=1, axis2=2), 1e-30)[:, None, None]
            gam = np.linalg.solve(A + reg * np.eye(k), b[..., None])[..., 0]
            step = xnew - np.einsum("rdk,rk->rd", dX + opt.mixing * dF, gam)
            ok = np.all(np.isfinite(step), axis=1)
            xnew = np.where(ok[:, None], step, xnew)
        px, pf = x, f
        xnew[:, :S] = np.clip(xnew[:, :S], 0.0, batch.n_max)  # keep the iterate physical
        xnew[:, S:] = np.where(xnew[:, S:] < 0, 0.5 * x[:, S:], xnew[:, S:])  # phi = 0 would be a trap
        x = xnew
        if (~live).sum() > 0.1 * len(live):  # compact
            keep = live
            idx, x, px, pf = idx[keep], x[keep], px[keep], pf[keep]
            hx, hf = hx[:, keep], hf[:, keep]
            best_r, last_gain, live = best_r[keep], last_gain[keep], live[keep]
    else:
        g = idx[live]
        x_out[g], iters[g], resid[g] = x[live], opt.max_iter, np.abs(f[live]).max(axis=1)
    return _finish(ops, batch, x_out, conv, iters, resid, G, t, V, V2, mu, U, P, K, S)


def _finish(ops, batch, x_out, conv, iters, resid, G, t, V, V2, mu, U, P, K, S, mapped=False):
    """Energies from the local states built from the final fields.

    ``mapped``: ``x_out`` already holds the local states' values (hard-core kernel), so the
    map need not be applied again (hard-core states carry no <n(n-1)> and no cut-off weight).
    """
    hard = batch.hardcore
    if mapped:
        gx, nn1, top = x_out, None, np.zeros((P * K, S))
    else:
        gx, nn1, top = G(x_out, np.arange(P * K))
    n, ph = gx[:, :S], gx[:, S:]
    onsite = (0.0 if hard else 0.5 * U * nn1.mean(1)) - mu * n.mean(1)
    E = ops.bond_energy(t, V, V2, n, ph) + onsite
    sh = (P, K)
    return (E.reshape(sh), conv.reshape(sh), iters.reshape(sh), resid.reshape(sh),
            n.reshape(P, K, S), ph.reshape(P, K, S), top.max(axis=1).reshape(sh))


_OPS_CACHE: dict = {}


def cell_ops(cell: Supercell) -> CellOps:
    key = (cell.lattice.name, tuple(map(tuple, cell.vectors)))
    ops = _OPS_CACHE.get(key)
    if ops is None:
        ops = _OPS_CACHE[key] = CellOps(cell)
    return ops


def solve_batch(batch: ParamBatch, options: MFOptions = MFOptions(), seeds: list[Seed] | None = None,
                init: MFBatchResult | None = None) -> MFBatchResult:
    """Run every seed at every point of ``batch``.

    ``init``: warm start — a previous result on the same seeds whose end states are used as
    starting points (e.g. the bracketing points of a bisection).
    """
    if seeds is None:
        seeds = make_seeds(batch.base, n_random=options.n_random, rng=options.rng)
    big = search_cell(batch.base.lattice)
    P, K = batch.size, len(seeds)
    out = dict(
        energy=np.empty((P, K)), converged=np.empty((P, K), bool), iterations=np.empty((P, K), int),
        residual=np.empty((P, K)), n=np.empty((P, K, big.n_sites)), phi=np.empty((P, K, big.n_sites)),
        top_weight=np.empty((P, K)),
    )
    groups: dict = {}
    for k, s in enumerate(seeds):
        groups.setdefault(tuple(map(tuple, s.cell.vectors)), []).append(k)
    for key, ks in groups.items():
        cell = seeds[ks[0]].cell
        ops = cell_ops(cell)
        unfold = cell.index(big.sites)  # search-cell site -> seed-cell site
        if init is not None:
            fold = big.index(cell.sites)  # seed-cell site -> a search-cell representative
            n0 = init.n[:, ks][:, :, fold]
            phi0 = init.phi[:, ks][:, :, fold]
        else:
            n0 = np.broadcast_to(np.stack([seeds[k].n0 for k in ks]), (P, len(ks), cell.n_sites)).copy()
            phi0 = np.broadcast_to(np.stack([seeds[k].phi0 for k in ks]), (P, len(ks), cell.n_sites)).copy()
        E, conv, it, res, n, ph, top = _iterate(ops, batch, n0, phi0, options)
        _retry_unstable(ops, batch, n0, phi0, options, (E, conv, it, res, n, ph, top))
        out["energy"][:, ks] = E
        out["converged"][:, ks] = conv
        out["iterations"][:, ks] = it
        out["residual"][:, ks] = res
        out["n"][:, ks] = n[:, :, unfold]
        out["phi"][:, ks] = ph[:, :, unfold]
        out["top_weight"][:, ks] = top
    return MFBatchResult(batch=batch, cell=big, seeds=seeds, options=options, **out)


def _retry_unstable(ops, batch, n0, phi0, options, out):
    """Re-run, without Anderson steps, seeds that started condensed but converged onto a
    linearly unstable insulator (Anderson is a root finder and can land on unstable fixed
    points; plain mixing follows the instability to the condensed state)."""
    E, conv, it, res, n, ph, top = out
    cand = conv & (ph.max(-1) < 1e-8) & (phi0.max(-1) > 0) & np.any(batch.t > 0, axis=1)[:, None]
    if not cand.any():
        return
    p, k = np.nonzero(cand)
    sub = batch.take(p)
    lam = insulator_instability(sub, n[p, k], ops.cell)
    bad = lam > 1.0 + 1e-9
    if not bad.any():
        return
    p, k = p[bad], k[bad]
    plain = replace(options, anderson=0, max_iter=10 * options.max_iter,
                    mixing=1.0 if batch.hardcore else 0.7)
    r = _iterate(ops, batch.take(p), n0[p, k][:, None], phi0[p, k][:, None], plain)
    for arr, new in zip(out, r):
        arr[p, k] = new[:, 0]


def insulator_instability(batch: ParamBatch, n: np.ndarray, cell: Supercell | None = None) -> np.ndarray:
    r"""Largest eigenvalue of :math:`\chi^{1/2} T \chi^{1/2}` for the insulator with densities ``n``.

    For a state without condensate (Fock state :math:`|m_s\rangle` on each site) the linear
    response of :math:`\phi_s` to the field :math:`\Phi_s` is
    :math:`\chi_s = (m+1)/(e_{m+1}-e_m) + m/(e_{m-1}-e_m)` with the local energies
    :math:`e_m = U m(m-1)/2 + (\epsilon_s-\mu) m`; the insulator is unstable towards a
    condensate when the returned value exceeds 1 (for the Mott state this reproduces
    :math:`zt\,[(n+1)/(Un-\mu) + n/(\mu-U(n-1))] = 1`, Fisher et al. 1989; van Oosten et al. 2001).

    ``n`` has shape (P, S) on ``cell`` (default: the search cell); values are rounded to
    the nearest integer occupation.
    """
    cell = cell or search_cell(batch.base.lattice)
    ops = cell_ops(cell)
    m = np.rint(np.asarray(n, float))
    _, eps = ops.fields(batch.t, batch.V, batch.V2, batch.mu, m, np.zeros_like(m))
    up = eps + (0.0 if batch.hardcore else batch.U[:, None] * m)  # e_{m+1} - e_m
    down = -(eps + (0.0 if batch.hardcore else batch.U[:, None] * (m - 1)))  # e_{m-1} - e_m
    with np.errstate(divide="ignore", invalid="ignore"):
        can_up = m < batch.n_max
        chi = np.where(can_up, (m + 1) / up, 0.0) + np.where(m > 0, m / down, 0.0)
        gap = np.minimum(np.where(can_up, up, np.inf), np.where(m > 0, down, np.inf))
    chi = np.where(gap > 0, chi, np.inf)  # not a local ground state: unstable by construction
    T = ops.hopping_matrix(batch.t)
    finite = np.all(np.isfinite(chi), axis=1)
    out = np.full(len(m), np.inf)
    if finite.any():
        sq = np.sqrt(chi[finite])
        M = sq[:, :, None] * T[finite] * sq[:, None, :]
        out[finite] = np.linalg.eigvalsh(M)[:, -1]
    return out


INSULATING = ("empty", "full", "mott", "solid")


def unstable_insulators(result, phase, k) -> np.ndarray:
    """Points whose winning state is an insulator that is linearly unstable (chi T > 1).

    Such a point has a lower-energy condensed state that no seed reached (typically right
    next to a continuous transition, where the self-consistency slows down); it must be
    flagged, not classified as the insulator. Only meaningful for site-decoupled results
    (``result.cell`` is the search cell).
    """
    phase = np.asarray(phase)
    ins = np.isin(phase, INSULATING) & np.any(result.batch.t > 0, axis=1)
    out = np.zeros(len(phase), bool)
    if ins.any():
        p = np.nonzero(ins)[0]
        lam = insulator_instability(result.batch.take(p), result.n[p, k[p]], result.cell)
        out[p] = lam > 1.0 + 1e-9
    return out
