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

At a temperature :math:`T > 0` (option ``T``, or a scanned ``T`` axis) every site is in the
thermal state :math:`\rho_s = e^{-h_s/T}/Z_s` of its local problem (all levels with Boltzmann
weights; hard-core: :math:`\langle n\rangle = \tfrac12 - \tfrac{\epsilon}{2r}\tanh\tfrac{r}{2T}`,
:math:`\langle b\rangle = \tfrac{\Phi}{r}\tanh\tfrac{r}{2T}`, :math:`r = \sqrt{\epsilon^2+4\Phi^2}`),
and solutions are compared by the variational grand potential per site of the product state,
:math:`\Omega/N = \langle H\rangle/N - T\,\overline{S_s}` (same decoupling constants; an
upper bound on the true one by the Gibbs-Bogoliubov inequality). ``energy`` then holds
:math:`\Omega/N`. T = 0 runs the ground-state arithmetic unchanged. See docs/thermal.md.

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
from .mixing import Anderson, StallWatch
from .params import ParamBatch
from .seeds import Seed, make_seeds

__all__ = ["MFOptions", "MFBatchResult", "solve_batch", "max_points", "MEMORY_BUDGET", "insulator_instability", "unstable_insulators", "CellOps"]


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
    T : float, default 0
        Temperature in the model's energy unit (0: ground state). A scanned ``T`` axis
        (:class:`~phasemap.params.ParamBatch` ``T``) takes precedence.
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
    T: float = 0.0

    def __post_init__(self):
        from .model import ConfigError

        try:
            T = float(self.T)
        except (TypeError, ValueError):
            raise ConfigError(f"T: temperature must be a number >= 0, got {self.T!r}") from None
        if not (np.isfinite(T) and T >= 0):
            raise ConfigError(f"T: temperature must be a finite number >= 0 (energy unit of the model), got {self.T!r}")
        object.__setattr__(self, "T", T)


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
def _hot(T, shape):
    """(hot mask, safe temperatures) broadcast to ``shape``; ``T`` None means T = 0 everywhere."""
    if T is None:
        return None, None
    T = np.broadcast_to(np.asarray(T, float), shape)
    hot = T > 0
    return (hot, np.where(hot, T, 1.0)) if hot.any() else (None, None)


def _local_hardcore(Phi, eps, n_in, T=None):
    """Local ground state (T = 0) or thermal state of the 2x2 problem; returns
    (n, phi, <n(n-1)> = 0, top weight = 0, entropy)."""
    r = np.sqrt(eps * eps + 4.0 * Phi * Phi)
    safe = np.where(r > 0, r, 1.0)
    n = np.where(r > 0, 0.5 * (1.0 - eps / safe), n_in)  # zero field: keep the occupation
    phi = np.where(r > 0, Phi / safe, 0.0)
    ent = np.zeros_like(n)
    hot, Ts = _hot(T, r.shape)
    if hot is not None:  # levels -r/2, +r/2: <sigma> weighted by tanh(y), y = r / 2T
        y = 0.5 * r / Ts
        w = np.where(y > 1e-8, np.tanh(y) / safe, 0.5 / Ts)
        n = np.where(hot, 0.5 - 0.5 * eps * w, n)
        phi = np.where(hot, Phi * w, phi)
        e2 = np.exp(-2.0 * y)  # S = ln(2 cosh y) - y tanh y, written without overflow
        ent = np.where(hot, 2.0 * y * e2 / (1.0 + e2) + np.log1p(e2), 0.0)
    return n, phi, np.zeros_like(n), np.zeros_like(n), ent


def _local_softcore(Phi, eps, U, n_max, T=None):
    """Local ground state (T = 0) or thermal state (all levels with Boltzmann weights) of the
    soft-core problem; returns (n, phi, <n(n-1)>, weight of n_max, entropy)."""
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
    top = p[..., -1]
    ent = np.zeros_like(n)
    hot, Ts = _hot(T, n.shape)
    if hot is not None:
        x = (w - w[..., :1]) / Ts[..., None]
        pk = np.exp(-x)
        pk /= pk.sum(-1, keepdims=True)  # (..., k) level weights
        occ = np.einsum("...k,...ak->...a", pk, v * v)  # occupation distribution
        ph_k = (v[..., 1:, :] * v[..., :-1, :] * np.sqrt(m[1:])[:, None]).sum(-2)  # <k|b|k>
        n = np.where(hot, (occ * m).sum(-1), n)
        phi = np.where(hot, (pk * ph_k).sum(-1), phi)
        nn1 = np.where(hot, (occ * m * (m - 1)).sum(-1), nn1)
        top = np.where(hot, occ[..., -1], top)
        with np.errstate(divide="ignore", invalid="ignore"):
            ent = np.where(hot, -np.where(pk > 0, pk * np.log(pk), 0.0).sum(-1), 0.0)
    return n, phi, nn1, top, ent


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
    #: (P,) temperature of each point (None: T = 0); at T > 0 ``energy`` is the grand potential
    #: per site <H>/N - T S/N and ``entropy`` (P, K) the entropy per site of each seed's end state
    T: np.ndarray | None = None
    entropy: np.ndarray | None = None

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
    """Self-consistency for all (P, K) rows of one supercell group (at each point's temperature).

    Works on a compact set of live rows: finished rows (converged, or stalled = no fixed point
    reachable from this seed) are written out and dropped once they make up a tenth of the set.
    """
    P, K, S = n0.shape
    hard = batch.hardcore
    rows = P * K
    rep = lambda a: np.repeat(a, K, axis=0)  # noqa: E731
    t, V, V2, mu, U = rep(batch.t), rep(batch.V), rep(batch.V2), rep(batch.mu), rep(batch.U)
    T = rep(batch.temperatures(opt.T))
    hot = bool(np.any(T > 0))
    x_out = np.concatenate([n0.reshape(rows, S), phi0.reshape(rows, S)], axis=1)
    iters = np.zeros(rows, int)
    resid = np.full(rows, np.inf)
    conv = np.zeros(rows, bool)
    m = opt.anderson

    def G(xa, sel, with_entropy=False):
        Phi, eps = ops.fields(t[sel], V[sel], V2[sel], mu[sel], xa[:, :S], xa[:, S:])
        Ts = T[sel][:, None] if hot else None
        if hard:
            n, ph, nn1, top, ent = _local_hardcore(Phi, eps, xa[:, :S], Ts)
        else:
            n, ph, nn1, top, ent = _local_softcore(Phi, eps, U[sel][:, None], batch.n_max, Ts)
        x = np.concatenate([n, ph], axis=1)
        return (x, nn1, top, ent) if with_entropy else (x, nn1, top)

    if opt.engine in ("auto", "numba"):
        from .mf_kernel import iterate_rows

        x_out, iters, resid, conv = iterate_rows(
            t, V, V2, mu, np.where(np.isfinite(U), U, 0.0), T, batch.n_max, ops.plus, ops.minus, ops.nnn_plus,
            ops.nnn_minus, x_out, opt.tol, opt.max_iter, opt.mixing, max(opt.anderson, 0), opt.patience)
        return _finish(ops, batch, x_out, conv, iters, resid, G, t, V, V2, mu, U, T, P, K, S,
                       mapped=hard and not hot)
    # compact state
    idx = np.arange(rows)
    x = x_out.copy()
    live = np.ones(rows, bool)
    watch = StallWatch(rows, opt.tol, opt.patience)
    mix = Anderson(rows, 2 * S, m, opt.mixing)
    for it in range(1, opt.max_iter + 1):
        gx, _, _ = G(x, idx)
        f = gx - x
        r = np.abs(f).max(axis=1)
        done, stalled = watch.update(r, it, live)
        fin = done | stalled
        if fin.any():
            g = idx[fin]
            x_out[g] = np.where(done[fin, None], gx[fin], x[fin])
            resid[g], iters[g], conv[g] = r[fin], it, done[fin]
            live &= ~fin
        if not live.any():
            break
        xnew = mix.step(x, f)
        xnew[:, :S] = np.clip(xnew[:, :S], 0.0, batch.n_max)  # keep the iterate physical
        xnew[:, S:] = np.where(xnew[:, S:] < 0, 0.5 * x[:, S:], xnew[:, S:])  # phi = 0 would be a trap
        x = xnew
        if (~live).sum() > 0.1 * len(live):  # compact
            keep = live
            idx, x = idx[keep], x[keep]
            mix.keep(keep)
            watch.keep(keep)
            live = live[keep]
    else:
        g = idx[live]
        x_out[g], iters[g], resid[g] = x[live], opt.max_iter, np.abs(f[live]).max(axis=1)
    return _finish(ops, batch, x_out, conv, iters, resid, G, t, V, V2, mu, U, T, P, K, S)


def _finish(ops, batch, x_out, conv, iters, resid, G, t, V, V2, mu, U, T, P, K, S, mapped=False):
    """Energies (grand potentials at T > 0) from the local states built from the final fields.

    ``mapped``: ``x_out`` already holds the local states' values (hard-core kernel at T = 0),
    so the map need not be applied again (hard-core states carry no <n(n-1)> and no cut-off
    weight). At T > 0 the map is applied once more, so densities, condensates and entropy all
    belong to one product of local thermal states (the variational state whose grand
    potential is reported).
    """
    hard = batch.hardcore
    if mapped:
        gx, nn1, top, ent = x_out, None, np.zeros((P * K, S)), np.zeros((P * K, S))
    else:
        gx, nn1, top, ent = G(x_out, np.arange(P * K), with_entropy=True)
    n, ph = gx[:, :S], gx[:, S:]
    onsite = (0.0 if hard else 0.5 * U * nn1.mean(1)) - mu * n.mean(1)
    E = ops.bond_energy(t, V, V2, n, ph) + onsite
    Sbar = ent.mean(1)
    if np.any(T > 0):
        E = E - T * Sbar
    sh = (P, K)
    return (E.reshape(sh), conv.reshape(sh), iters.reshape(sh), resid.reshape(sh),
            n.reshape(P, K, S), ph.reshape(P, K, S), top.max(axis=1).reshape(sh), Sbar.reshape(sh))


#: Memory (bytes) the batched soft-core eigen-solves of one call may take.
MEMORY_BUDGET = 2 * 1024**3


def max_points(model, options: MFOptions = MFOptions()) -> int | None:
    """Most points one soft-core :func:`solve_batch` call may take within :data:`MEMORY_BUDGET`.

    Estimate: every point x seed x site holds a few (n_max+1)^2 float64 matrices (Hamiltonian,
    eigenvectors, LAPACK work). Hard-core: None (no limit). Raises ConfigError naming ``n_max``
    and its allowed range when not even one point fits.
    """
    if model.hardcore:
        return None
    from .model import ConfigError

    K = len(make_seeds(model.replace(n_max=1) if model.n_max > 64 else model, n_random=options.n_random,
                       rng=options.rng))
    S = search_cell(model.lattice).n_sites
    per_point = K * S * 8 * 4 * (model.n_max + 1) ** 2
    if per_point > MEMORY_BUDGET:
        top = int((MEMORY_BUDGET / (K * S * 32)) ** 0.5) - 1
        raise ConfigError(f"n_max: {model.n_max} needs about {per_point / 2**30:.3g} GiB per point for the "
                          f"mean-field eigen-solves (budget {MEMORY_BUDGET / 2**30:g} GiB); must be >= 1 and "
                          f"<= {top} on the {model.lattice} lattice")
    return int(MEMORY_BUDGET // per_point)


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
        top_weight=np.empty((P, K)), entropy=np.zeros((P, K)),
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
        E, conv, it, res, n, ph, top, ent = _iterate(ops, batch, n0, phi0, options)
        _retry_unstable(ops, batch, n0, phi0, options, (E, conv, it, res, n, ph, top, ent))
        out["energy"][:, ks] = E
        out["converged"][:, ks] = conv
        out["iterations"][:, ks] = it
        out["residual"][:, ks] = res
        out["n"][:, ks] = n[:, :, unfold]
        out["phi"][:, ks] = ph[:, :, unfold]
        out["top_weight"][:, ks] = top
        out["entropy"][:, ks] = ent
    T = batch.temperatures(options.T)
    return MFBatchResult(batch=batch, cell=big, seeds=seeds, options=options, T=T if np.any(T > 0) else None,
                         **out)


def _retry_unstable(ops, batch, n0, phi0, options, out):
    """Re-run, without Anderson steps, seeds that started condensed but converged onto a
    linearly unstable insulator (Anderson is a root finder and can land on unstable fixed
    points; plain mixing follows the instability to the condensed state)."""
    E, conv, it, res, n, ph, top, ent = out
    cand = conv & (ph.max(-1) < 1e-8) & (phi0.max(-1) > 0) & np.any(batch.t > 0, axis=1)[:, None]
    if not cand.any():
        return
    p, k = np.nonzero(cand)
    sub = batch.take(p)
    lam = insulator_instability(sub, n[p, k], ops.cell, T=sub.temperatures(options.T))
    bad = lam > 1.0 + 1e-9
    if not bad.any():
        return
    p, k = p[bad], k[bad]
    plain = replace(options, anderson=0, max_iter=10 * options.max_iter,
                    mixing=1.0 if batch.hardcore else 0.7)
    r = _iterate(ops, batch.take(p), n0[p, k][:, None], phi0[p, k][:, None], plain)
    for arr, new in zip(out, r):
        arr[p, k] = new[:, 0]


def insulator_instability(batch: ParamBatch, n: np.ndarray, cell: Supercell | None = None,
                          T: np.ndarray | None = None) -> np.ndarray:
    r"""Largest eigenvalue of :math:`\chi^{1/2} T \chi^{1/2}` for the insulator with densities ``n``.

    For a state without condensate (Fock state :math:`|m_s\rangle` on each site) the linear
    response of :math:`\phi_s` to the field :math:`\Phi_s` is
    :math:`\chi_s = (m+1)/(e_{m+1}-e_m) + m/(e_{m-1}-e_m)` with the local energies
    :math:`e_m = U m(m-1)/2 + (\epsilon_s-\mu) m`; the insulator is unstable towards a
    condensate when the returned value exceeds 1 (for the Mott state this reproduces
    :math:`zt\,[(n+1)/(Un-\mu) + n/(\mu-U(n-1))] = 1`, Fisher et al. 1989; van Oosten et al. 2001).

    ``n`` has shape (P, S) on ``cell`` (default: the search cell); values are rounded to
    the nearest integer occupation.

    At a temperature ``T`` > 0 (array (P,), default all 0) the non-condensed state is the
    product of local thermal states in the fields of the densities ``n`` (not rounded), and
    :math:`\chi_s = \sum_m (p_m - p_{m+1})(m+1)/(e_{m+1}-e_m)` with the Boltzmann weights
    :math:`p_m`; the normal state is unstable towards a condensate when the value exceeds 1
    (hard-core: :math:`\chi = \tanh(\epsilon/2T)/\epsilon`, :math:`1/2T` at :math:`\epsilon = 0`).
    """
    cell = cell or search_cell(batch.base.lattice)
    ops = cell_ops(cell)
    if T is not None and np.any(np.asarray(T) > 0):
        T = np.asarray(T, float)
        out = np.empty(batch.size)
        hot = T > 0
        if (~hot).any():
            out[~hot] = insulator_instability(batch.take(np.nonzero(~hot)[0]), np.asarray(n)[~hot], cell)
        idx = np.nonzero(hot)[0]
        sub = batch.take(idx)
        nn = np.asarray(n, float)[idx]
        _, eps = ops.fields(sub.t, sub.V, sub.V2, sub.mu, nn, np.zeros_like(nn))
        m = np.arange(batch.n_max + 1, dtype=float)
        U = 0.0 if batch.hardcore else sub.U[:, None, None]
        e = 0.5 * U * m * (m - 1) + eps[..., None] * m  # (P, S, levels)
        Tm = T[idx][:, None, None]
        x = -(e - e.min(-1, keepdims=True)) / Tm
        p = np.exp(x)
        p /= p.sum(-1, keepdims=True)
        gap = e[..., 1:] - e[..., :-1]
        small = np.abs(gap / Tm) < 1e-6  # degenerate pair: (p_m - p_{m+1})/gap -> p_m/T
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = np.where(small, 0.5 * (p[..., :-1] + p[..., 1:]) / Tm,
                             (p[..., :-1] - p[..., 1:]) / np.where(small, 1.0, gap))
        chi = (ratio * m[1:]).sum(-1)
        sq = np.sqrt(chi)
        M = sq[:, :, None] * ops.hopping_matrix(sub.t) * sq[:, None, :]
        out[idx] = np.linalg.eigvalsh(M)[:, -1]
        return out
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


INSULATING = ("empty", "full", "mott", "solid", "normal")


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
        sub = result.batch.take(p)
        T = getattr(result, "T", None)
        lam = insulator_instability(sub, result.n[p, k[p]], result.cell, T=None if T is None else T[p])
        out[p] = lam > 1.0 + 1e-9
    return out
