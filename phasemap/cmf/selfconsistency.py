r"""Cluster mean-field self-consistency over many parameter points and seeds.

The lattice is tiled by copies of one cluster, all in the same state :math:`|\psi\rangle`
(cluster-product state). Bonds inside the cluster are kept exactly; a bond
:math:`(a, b')` leaving it, whose outside end :math:`b'` is equivalent to cluster site
:math:`b`, is decoupled with the expectation values of the cluster itself (DESIGN.md §2):

.. math::

    b_a^\dagger b_{b'} + h.c. &\to \phi_b (b_a + b_a^\dagger) + \phi_a (b_b + b_b^\dagger)
        - 2\phi_a\phi_b,\\
    n_a n_{b'} &\to \langle n_b\rangle n_a + \langle n_a\rangle n_b - \langle n_a\rangle\langle n_b\rangle,

with real :math:`\phi = \langle b\rangle \ge 0` (t >= 0). The boundary fields are
:math:`\Phi_a = \sum_{b} t_f M^f_{ab}\phi_b` and
:math:`\epsilon_a = \sum_b V_f M^f_{ab}\langle n_b\rangle + V_2 M^{(2)}_{ab}\langle n_b\rangle`
(:meth:`phasemap.cmf.clusters.Cluster.inter_matrices`). The energy per site reported is the
*variational* energy of the cluster-product state built from the final ground state,

.. math::

    E/N = \frac{1}{N_C}\Big[\langle H_{\rm intra}\rangle
          + \sum_{\rm decoupled\ (a,b,f)} \big(-2 t_f \phi_a\phi_b + V_f n_a n_b\big)
          + V_2 \sum_{\rm decoupled\ nnn} n_a n_b\Big],

which counts every lattice bond exactly once (not the sum of cluster eigenvalues, which
double-counts the decoupled bonds). With every bond decoupled (one-site cluster, or any
cluster without intra bonds) this is the site-decoupled mean field of :mod:`phasemap.mf`.

Iteration: the map :math:`x=(n,\phi) \to G(x)` (ground-state expectation values) is
solved by linear mixing plus Anderson (type II) acceleration; the ground state is found
with dense ``eigh`` for small dimensions and with restarted Lanczos
(:func:`lanczos_ground_state`) warm-started from the previous iteration's ground state otherwise.

References
----------
D. Yamamoto, I. Danshita, C. A. R. Sá de Melo, PRA 85, 021601(R) (2012); D. Yamamoto,
G. Marmorini, I. Danshita, PRL 114, 027201 (2015) (cluster mean field; attribution from memory).
D. G. Anderson, J. ACM 12, 547 (1965) (Anderson mixing).
"""

from __future__ import annotations

import time
from dataclasses import dataclass, fields

import numpy as np
import scipy.linalg as sla

from ..mf import MFBatchResult
from ..mixing import Anderson
from .batch import BatchProblem, pick_ground, solve_rows
from ..model import ConfigError, check_keys
from ..params import ParamBatch
from ..seeds import Seed, make_seeds
from .clusters import Cluster, get_cluster
from .guard import check_budget
from .hamiltonian import cluster_operators
from .threads import blas_threads

__all__ = ["CMFOptions", "CMFBatchResult", "solve_cmf_batch", "cluster_seeds", "ClusterProblem"]


@dataclass(frozen=True)
class CMFOptions:
    """Options of the cluster mean-field solver.

    tol : float, default 1e-9
        Converged when max |G(x) - x| over every site's <n> and <b> is below tol.
    max_iter : int, default 2000
        Rows still moving after max_iter iterations are flagged unconverged.
    mixing : float, default 0.6
        Linear mixing x <- x + mixing (G(x) - x) inside the Anderson step.
    anderson : int, default 10
        Anderson acceleration memory (0: plain damped mixing).
    patience : int, default 80
        Give up (unconverged) when the residual has not improved for this many iterations.
    stall_drop : float, default 0.999
        What counts as an improvement for ``patience``: the residual falls below ``stall_drop``
        times the best so far (0.999: any 0.1 % gain; 0.5: the best residual must halve at
        least every ``patience`` iterations, which stops rows hopping between cluster
        particle-number sectors much earlier).
    n_random : int, default 1
        Random seeds on the cluster.
    rng : int, default 0
        Seed of the random seeds.
    patterns : tuple of str or None, default None
        Restrict density-wave seeds to these named patterns (None: all commensurate ones).
    weight_warn : float, default 1e-3
        Soft-core: flag when the top occupation n_max carries more weight.
    continuation : bool, default True
        Start each seed at point p from its converged end state at point p-1 when that
        state kept the seed's character (density wave / condensate); else from the seed.
    dense_max : int, default 128
        Largest Hilbert dimension solved with dense ``eigh``; above it Lanczos.
    eig_tol : float, default 1e-11
        Lanczos residual tolerance (relative to max(1, |E|)).
    memory_mb : float, default 4096
        Memory budget; a larger cluster problem is refused (ConfigError with the estimate).
    max_dim : int, default 2**22
        Largest allowed cluster Hilbert dimension.
    blas_threads : int or None, default 1
        BLAS threads while solving (small products are faster single-threaded); None: unchanged.
    T : float, default 0
        Temperature (model's energy unit). At T > 0 the cluster is in its thermal state (full
        diagonalisation, every level with its Boltzmann weight) and solutions are compared by
        the grand potential per site <H - mu N>/N - T S/N of the cluster-product state.
        A scanned ``T`` (``ParamBatch.T``) takes precedence.
    thermal_max_dim : int, default 1024
        Largest cluster Hilbert dimension diagonalised in full at T > 0 (larger: ConfigError).
    engine : {"auto", "batch", "point"}, default "auto"
        "batch": all rows together (:mod:`phasemap.cmf.batch`; no continuation, every row
        starts from its seed or ``init``); "point": the per-point loop with continuation
        (the reference path); "auto": batch up to Hilbert dimension ``batch_max``, else point.
    batch_max : int, default 128
        Largest Hilbert dimension solved by the batched engine under "auto" (the batched
        Lanczos above ``batch_dense_max`` is opt-in: raise this or pass ``engine="batch"``).
    batch_dense_max : int, default 128
        Batched engine: dense ``eigh`` up to this dimension, batched Lanczos above.
    batch_memory_mb : float, default 64
        Batched engine: rows are processed in chunks whose Lanczos workspace stays below this.
    branch_every : int, default 0
        Per-point engine with continuation, T = 0: 0 solves every seed at every point (the
        reference); K > 0 tracks the distinct branches along scan lines
        (:mod:`phasemap.cmf.branches`): the full seed set at the first point of a line, every K
        points, when a branch is lost or the lowest branch changes, and again over the points
        since the last full point when a seed not tracked there reaches a lower state; in
        between one row per branch. Seeds not solved at a point have ``iterations == 0``.
    symmetry : bool, default True
        Per-point engine with continuation, T = 0, no ``init``: a seed that is the image of an
        earlier seed under a symmetry of the cluster equations at every point of the batch
        (site permutation with bond families relabelled where t and V allow, and hard-core
        particle-hole at the half-filling chemical potential; :mod:`phasemap.cmf.symmetry`) is
        not solved: its rows are the images of the earlier seed's rows.
    compiled : bool, default True
        Batched engine, dense clusters: compiled per-row loop (:mod:`phasemap.cmf.kernel`);
        False: the NumPy loop over all rows in lock-step (same iteration). Per-point engine
        above ``dense_max`` (Lanczos clusters, T = 0): the seeds of a point run in parallel in
        the compiled loop of :mod:`phasemap.cmf.lanczos_kernel` (all rows at once without
        continuation); False: the Python per-row loop (same iteration, the reference).
    """

    tol: float = 1e-9
    max_iter: int = 2000
    mixing: float = 0.6
    anderson: int = 10
    patience: int = 80
    stall_drop: float = 0.999
    n_random: int = 1
    rng: int = 0
    patterns: tuple | None = None
    weight_warn: float = 1e-3
    continuation: bool = True
    dense_max: int = 128
    eig_tol: float = 1e-11
    memory_mb: float = 4096.0
    max_dim: int = 2**22
    blas_threads: int | None = 1
    T: float = 0.0
    thermal_max_dim: int = 1024

    engine: str = "auto"
    batch_max: int = 128
    batch_dense_max: int = 128
    batch_memory_mb: float = 64.0
    compiled: bool = True
    branch_every: int = 0
    symmetry: bool = True

    def __post_init__(self):
        from ..mf import MFOptions

        object.__setattr__(self, "T", MFOptions(T=self.T).T)  # same validation as mf
        if not (0.0 < float(self.stall_drop) < 1.0):
            raise ConfigError(f"cmf options: stall_drop must be > 0 and < 1, got {self.stall_drop!r}")
        if isinstance(self.branch_every, bool) or not isinstance(self.branch_every, (int, np.integer)) \
                or not 0 <= self.branch_every <= 10**6:
            raise ConfigError(f"cmf options: branch_every must be an integer 0 ... 1000000 (0: off), "
                              f"got {self.branch_every!r}")
        if not isinstance(self.symmetry, (bool, np.bool_)):
            raise ConfigError(f"cmf options: symmetry must be true or false, got {self.symmetry!r}")


@dataclass
class CMFBatchResult(MFBatchResult):
    """:class:`phasemap.mf.MFBatchResult` on the cluster's cell, plus the cluster and timings."""

    cluster: Cluster | None = None
    seconds: float = 0.0
    method: str = "cmf"
    #: ``branch_every > 0``: points solved with the full seed set / with branch rows only,
    #: rewinds and the reasons for unscheduled full points (:mod:`phasemap.cmf.branches`)
    branch_stats: dict | None = None
    #: option ``symmetry``: per seed, the earlier seed whose rows it received as symmetry images
    #: (-1: solved itself); None when no seed was an image (:mod:`phasemap.cmf.symmetry`)
    seed_images: np.ndarray | None = None


def cluster_seeds(model, cluster: Cluster, n_random: int = 1, rng=0, patterns=None) -> list[Seed]:
    """Seeds of :func:`phasemap.seeds.make_seeds` folded onto the cluster, plus random ones.

    A seed is kept when its pattern's supercell is periodic in the cluster's supercell
    (:meth:`Cluster.commensurate`); its site values are then copied to the cluster's
    equivalent sites. Seeds whose pattern does not fit the cluster are skipped.
    """
    out = []
    for s in make_seeds(model, n_random=0, rng=rng, patterns=patterns):
        if cluster.commensurate(s.cell):
            out.append(Seed(s.name, cluster.cell, cluster.fold(s.cell, s.n0).astype(float),
                            cluster.fold(s.cell, s.phi0).astype(float)))
    g = np.random.default_rng(rng)
    nm = model.n_max
    amp = 0.3 if model.hardcore else 0.5
    S = cluster.n_sites
    for r in range(n_random):
        out.append(Seed(f"random {r}", cluster.cell, g.uniform(0, nm, S), g.uniform(0, amp, S)))
    return out


class ClusterProblem:
    """The cluster Hamiltonian of one parameter point as a function of the mean fields."""

    def __init__(self, cluster: Cluster, ops, t, V, U, V2, mu, hardcore: bool):
        self.cluster, self.ops = cluster, ops
        self.t, self.V = np.asarray(t, float), np.asarray(V, float)
        self.U = 0.0 if hardcore else float(U)
        self.V2, self.mu = float(V2), float(mu)
        M, M2 = cluster.inter_matrices()
        self.T_in = np.tensordot(self.t, M, axes=1)  # (S, S)
        self.V_in = np.tensordot(self.V, M, axes=1) + self.V2 * M2
        inter = cluster.inter
        self._ia, self._ib = inter[:, 0], inter[:, 1]
        self._it, self._iv = self.t[inter[:, 2]], self.V[inter[:, 2]]
        self._i2a, self._i2b = cluster.inter2[:, 0], cluster.inter2[:, 1]

    def fields(self, n, phi):
        return self.T_in @ phi, self.V_in @ n

    def hamiltonian(self, n, phi, dense: bool):
        Phi, eps = self.fields(n, phi)
        coef = self.ops.coefficients(self.t, Phi)
        diag = self.ops.diagonal(self.U, self.V, self.V2, self.mu, eps)
        return self.ops.dense(coef, diag) if dense else self.ops.matrix(coef, diag)

    def energy(self, ex) -> float:
        """Variational energy per site of the cluster-product state with expectations ``ex``."""
        n, phi = ex["n"], ex["phi"]
        e = -self.t @ ex["hop"] + self.U * ex["U"] + self.V @ ex["V"] + self.V2 * ex["V2"] - self.mu * n.sum()
        e += np.sum(-2.0 * self._it * phi[self._ia] * phi[self._ib] + self._iv * n[self._ia] * n[self._ib])
        e += self.V2 * np.sum(n[self._i2a] * n[self._i2b])
        return float(e) / self.cluster.n_sites


def lanczos_ground_state(H, v0=None, tol: float = 1e-12, krylov: int = 40, max_restarts: int = 200,
                         rng=None):
    """Lowest eigenpair of the sparse symmetric ``H`` by restarted Lanczos from ``v0``.

    Each cycle builds a Krylov basis of ``krylov`` vectors with full re-orthogonalisation,
    takes the lowest Ritz vector and restarts from it, until the residual
    ``||H v - E v||`` is below ``tol * max(1, |E|)``. A good ``v0`` (the previous iteration's
    ground state) converges in one or two cycles.

    References
    ----------
    C. Lanczos, J. Res. Natl. Bur. Stand. 45, 255 (1950).
    """
    dim = H.shape[0]
    if v0 is None:
        v0 = np.random.default_rng(0 if rng is None else rng).standard_normal(dim)
    v = np.asarray(v0, float) / np.linalg.norm(v0)
    m = min(krylov, dim)
    Q = np.empty((m, dim))
    E = np.inf
    for _ in range(max_restarts):
        Q[0] = v
        alpha, beta = np.zeros(m), np.zeros(m)
        k_used = m
        w = H @ v
        for j in range(m):
            alpha[j] = Q[j] @ w
            if j == 0:
                E0 = alpha[0]
                if np.linalg.norm(w - E0 * v) < tol * max(1.0, abs(E0)):
                    return float(E0), v
            w = w - Q[: j + 1].T @ (Q[: j + 1] @ w)
            w = w - Q[: j + 1].T @ (Q[: j + 1] @ w)
            b = np.linalg.norm(w)
            if j == m - 1:
                beta[j] = b
                break
            if b < 1e-14 * max(1.0, abs(alpha[j])):
                k_used = j + 1
                beta[j] = 0.0
                break
            beta[j] = b
            if j >= 4 and j % 4 == 0:  # early exit on the Ritz residual of the current basis
                ev, vec = sla.eigh_tridiagonal(alpha[: j + 1], beta[:j], select="i", select_range=(0, 0))
                if abs(b * vec[-1, 0]) < tol * max(1.0, abs(ev[0])):
                    k_used = j + 1
                    v = vec[:, 0] @ Q[:k_used]
                    return float(ev[0]), v / np.linalg.norm(v)
            Q[j + 1] = w / b
            w = H @ Q[j + 1]
        a = alpha[:k_used]
        e = beta[: k_used - 1]
        ev, vec = sla.eigh_tridiagonal(a, e, select="i", select_range=(0, 0))
        E, y = float(ev[0]), vec[:, 0]
        v = y @ Q[:k_used]
        v /= np.linalg.norm(v)
        res = abs(beta[k_used - 1] * y[-1]) if k_used == m else 0.0
        if res < tol * max(1.0, abs(E)):
            return E, v
    return E, v


#: self-consistency residual assumed for a start continued from the previous point's converged row
#: (with its ground state as the first Lanczos vector): the first inner solve then runs to
#: ``1e-3 * WARM_RESIDUAL`` instead of 1e-3, so the first iterate is not the previous point's
#: state evaluated with a barely moved vector (tri12 line: ~20 % fewer iterations, same end states)
WARM_RESIDUAL = 1e-5


def _ground_state(H, dense: bool, v0, tol):
    if dense:
        w, v = np.linalg.eigh(H)
        return float(w[0]), pick_ground(w, v)
    E, g = lanczos_ground_state(H, v0, tol)
    if g.sum() < 0:
        g = -g
    return E, g


def _thermal_state(prob: ClusterProblem, x, T: float):
    """Thermal expectations, grand potential per site and a representative vector at fields ``x``."""
    S = prob.cluster.n_sites
    H = prob.hamiltonian(x[:S], x[S:], True)
    ex, ent = prob.ops.thermal_expectations(H, T)
    return ex, prob.energy(ex) - T * ent / S, ent / S


def _solve_row(prob: ClusterProblem, x0, v0, opt: CMFOptions, n_max: int, T: float = 0.0):
    """Self-consistency of one (point, seed) row. Returns dict of the end state."""
    S = prob.cluster.n_sites
    dense = prob.ops.dim <= opt.dense_max
    x = np.array(x0, float)
    mix = Anderson(1, 2 * S, opt.anderson, opt.mixing)
    v = v0
    best_r, last_gain = np.inf, 0
    conv = False
    r = WARM_RESIDUAL if v0 is not None else np.inf  # sets the first inner tolerance
    it = 0
    for it in range(1, opt.max_iter + 1):
        if T > 0:
            ex = _thermal_state(prob, x, T)[0]
        else:
            H = prob.hamiltonian(x[:S], x[S:], dense)
            # inexact inner solves: the eigenvector only needs to be accurate relative to the
            # current self-consistency residual (tightened to eig_tol as the iteration converges)
            r_inner = max(opt.eig_tol, 1e-3 * min(r, 1.0))
            _, v = _ground_state(H, dense, v, r_inner)
            ex = prob.ops.expectations(v)
        gx = np.concatenate([ex["n"], ex["phi"]])
        f = gx - x
        r = float(np.abs(f).max())
        if r < opt.tol:
            if T == 0 and not dense and r_inner > opt.eig_tol:  # confirm with a tight eigen-solve
                r_inner = opt.eig_tol
                _, v = _ground_state(H, dense, v, opt.eig_tol)
                ex = prob.ops.expectations(v)
                gx = np.concatenate([ex["n"], ex["phi"]])
                r = float(np.abs(gx - x).max())
            if r < opt.tol:
                x = gx
                conv = True
                break
        if r < opt.stall_drop * best_r:
            best_r, last_gain = r, it
        elif it - last_gain > opt.patience:
            break
        xnew = mix.step(x[None], f[None])[0]
        xnew[:S] = np.clip(xnew[:S], 0.0, n_max)
        xnew[S:] = np.clip(xnew[S:], 0.0, None)
        x = xnew
    # final state from the final fields
    if T > 0:
        ex, omega, ent = _thermal_state(prob, x, T)
        return dict(energy=omega, converged=conv, iterations=it, residual=r, n=ex["n"], phi=ex["phi"],
                    top=float(ex["top"].max()), v=None, entropy=ent)
    H = prob.hamiltonian(x[:S], x[S:], dense)
    _, v = _ground_state(H, dense, v, opt.eig_tol)
    ex = prob.ops.expectations(v)
    return dict(energy=prob.energy(ex), converged=conv, iterations=it, residual=r, n=ex["n"],
                phi=ex["phi"], top=float(ex["top"].max()), v=v)


def _param_step(batch, p, q) -> np.ndarray:
    d = np.concatenate([batch.t[p] - batch.t[q], batch.V[p] - batch.V[q],
                        [batch.V2[p] - batch.V2[q], batch.mu[p] - batch.mu[q]]])
    if not batch.hardcore:
        d = np.append(d, batch.U[p] - batch.U[q])
    return d


def _keeps_character(seed: Seed, n, phi) -> bool:
    if np.ptp(seed.n0) > 1e-9 and np.ptp(n) < 1e-4:
        return False
    if np.max(seed.phi0) > 0 and np.max(phi) < 1e-6:
        return False
    return True


def solve_cmf_batch(batch: ParamBatch, cluster="tri12", seeds: list[Seed] | None = None,
                    init: MFBatchResult | None = None, **options) -> CMFBatchResult:
    """Cluster mean field at every point of ``batch`` from every seed.

    Parameters
    ----------
    batch : ParamBatch
        Parameter points (one lattice and occupation cut-off).
    cluster : str, dict, Supercell or Cluster, default "tri12"
        Library name (:data:`phasemap.cmf.clusters.LIBRARY`) or user cluster
        ``{"vectors": [[i1, j1], [i2, j2]], "sites": [[i, j], ...]}``.
    seeds : list of Seed, optional
        Seeds on the cluster's cell (default: :func:`cluster_seeds`).
    init : MFBatchResult, optional
        Warm start: end states of a previous result on the same seeds and cluster.
    **options
        Fields of :class:`CMFOptions` (an unknown key raises ConfigError), or
        ``options=CMFOptions(...)``.

    Returns
    -------
    CMFBatchResult
        Same attributes as :class:`phasemap.mf.MFBatchResult` (``cell`` is the cluster's
        supercell), accepted by :func:`phasemap.api.solutions_from_batch`.

    Raises
    ------
    ConfigError
        Unknown option, bad cluster, frustrated hopping, or a cluster above the memory budget.
    """
    t0 = time.perf_counter()
    opt = options.pop("options", None)
    check_keys("cmf options", options, [f.name for f in fields(CMFOptions)])
    if opt is None:
        if "patterns" in options and options["patterns"] is not None:
            options["patterns"] = tuple(options["patterns"])
        opt = CMFOptions(**options)
    elif options:
        opt = CMFOptions(**{**opt.__dict__, **options})
    if opt.engine not in ENGINES:
        raise ConfigError(f"cmf options: engine must be one of {', '.join(ENGINES)}, got {opt.engine!r}")
    model = batch.base
    cl = get_cluster(cluster, model.lattice)
    if np.any(batch.t < 0):
        raise ConfigError("cmf: frustrated hopping t < 0 is not supported")
    if seeds is None:
        seeds = cluster_seeds(model, cl, n_random=opt.n_random, rng=opt.rng, patterns=opt.patterns)
    K = len(seeds)
    check_budget(cl, batch.n_max, opt.memory_mb, opt.max_dim, n_rows=K)
    T = batch.temperatures(opt.T)
    hot = bool(np.any(T > 0))
    if hot:
        dim = (batch.n_max + 1) ** cl.n_sites
        if dim > opt.thermal_max_dim:
            raise ConfigError(
                f"T: cluster mean field at T > 0 diagonalises the whole cluster; cluster {cl.name!r} has Hilbert "
                f"dimension {dim:,} > thermal_max_dim = {opt.thermal_max_dim:,} (allowed: clusters of dimension "
                f"(n_max+1)^sites <= thermal_max_dim, e.g. tri3, tri6, tri9 hard-core; raise the option "
                "'thermal_max_dim' at your own cost, which grows as dim^3 per iteration)")
    with blas_threads(opt.blas_threads):
        ops = cluster_operators(cl, batch.n_max)
        engine = opt.engine if opt.engine != "auto" else ("batch" if ops.dim <= opt.batch_max else "point")
        if engine == "batch" and not hot:  # the batched engine is T = 0 only
            out = _solve_batched(batch, cl, ops, seeds, init, opt)
        elif opt.symmetry and init is None and not hot and opt.continuation:
            out = _solve_points_images(batch, cl, ops, seeds, opt, T)
        else:
            out = _solve_points(batch, cl, ops, seeds, init, opt, T)
    return CMFBatchResult(batch=batch, cell=cl.cell, seeds=seeds, options=opt, cluster=cl,
                          seconds=time.perf_counter() - t0, T=T if hot else None, **out)


ENGINES = ("auto", "batch", "point")


def _solve_batched(batch, cl, ops, seeds, init, opt):
    """All (point, seed) rows together (:func:`phasemap.cmf.batch.solve_rows`), in chunks."""
    P, K, S = batch.size, len(seeds), cl.n_sites
    rows = P * K
    if init is not None:
        x0 = np.concatenate([init.n, init.phi], axis=2).reshape(rows, 2 * S)
    else:
        x0 = np.broadcast_to(np.stack([np.concatenate([s.n0, s.phi0]) for s in seeds])[None],
                             (P, K, 2 * S)).reshape(rows, 2 * S)
    rep = lambda a: np.repeat(np.asarray(a), K, axis=0)  # noqa: E731
    prob = BatchProblem(cl, ops, rep(batch.t), rep(batch.V), rep(batch.U), rep(batch.V2), rep(batch.mu),
                        batch.hardcore)
    dense = ops.dim <= opt.batch_dense_max
    per_row = 8.0 * ops.dim * (ops.dim if dense else 20)  # dense H, or the Krylov vectors
    chunk = max(16, int(opt.batch_memory_mb * 2**20 / per_row))
    parts = []
    for s0 in range(0, rows, chunk):
        sel = np.arange(s0, min(rows, s0 + chunk))
        parts.append(solve_rows(prob.take(sel), x0[sel], opt, batch.n_max, dense, rng=opt.rng))
    r = {k: np.concatenate([p[k] for p in parts]) for k in parts[0]}
    return dict(energy=r["energy"].reshape(P, K), converged=r["converged"].reshape(P, K),
                iterations=r["iterations"].reshape(P, K), residual=r["residual"].reshape(P, K),
                n=r["n"].reshape(P, K, S), phi=r["phi"].reshape(P, K, S), top_weight=r["top"].reshape(P, K))


def _solve_points_images(batch, cl, ops, seeds, opt, T):
    """The per-point path on the first seed of every symmetry orbit (:mod:`phasemap.cmf.symmetry`);
    a seed that is the image ``g(seed k)`` of an earlier one gets the image of seed k's rows."""
    from .symmetry import apply, seed_images

    images = seed_images(seeds, cl, batch, batch.n_max)
    solved = [k for k, im in enumerate(images) if im is None]
    if len(solved) == len(seeds):
        return _solve_points(batch, cl, ops, seeds, None, opt, T)
    part = _solve_points(batch, cl, ops, [seeds[k] for k in solved], None, opt, T)
    col = {k: j for j, k in enumerate(solved)}
    out = {key: (np.empty((batch.size, len(seeds)) + v.shape[2:], v.dtype) if isinstance(v, np.ndarray) else v)
           for key, v in part.items()}
    for k, im in enumerate(images):
        j = col[k if im is None else im[0]]
        for key, v in part.items():
            if isinstance(v, np.ndarray):
                out[key][:, k] = v[:, j]
        if im is not None:
            out["n"][:, k], out["phi"][:, k] = apply(im[1], part["n"][:, j], part["phi"][:, j], batch.n_max)
            if im[1][2]:  # particle-hole (hard-core): the top level's weight is the density
                out["top_weight"][:, k] = np.nan_to_num(out["n"][:, k].max(1))
    out["seed_images"] = np.array([-1 if im is None else im[0] for im in images])
    return out


def _solve_points(batch, cl, ops, seeds, init, opt, T):
    P, K, S = batch.size, len(seeds), cl.n_sites
    out = dict(energy=np.empty((P, K)), converged=np.zeros((P, K), bool), iterations=np.zeros((P, K), int),
               residual=np.empty((P, K)), n=np.empty((P, K, S)), phi=np.empty((P, K, S)),
               top_weight=np.zeros((P, K)), entropy=np.zeros((P, K)))
    compiled = opt.compiled and ops.dim > opt.dense_max
    probs = [ClusterProblem(cl, ops, batch.t[p], batch.V[p], batch.U[p], batch.V2[p], batch.mu[p], batch.hardcore)
             for p in range(P)]

    def store(p, k, row):
        out["energy"][p, k] = row["energy"]
        out["converged"][p, k] = row["converged"]
        out["iterations"][p, k] = row["iterations"]
        out["residual"][p, k] = row["residual"]
        out["n"][p, k] = row["n"]
        out["phi"][p, k] = row["phi"]
        out["top_weight"][p, k] = row["top"]
        out["entropy"][p, k] = row.get("entropy", 0.0)

    if compiled and (init is not None or not opt.continuation) and not np.any(T > 0):
        # every row independent: all points x seeds in one parallel call
        jobs = [(p, k, *_row_start(batch, sd, p, None, None, init, k, opt)) for p in range(P) for k, sd in enumerate(seeds)]
        chunk = max(16, int(opt.batch_memory_mb * 2**20 / (16.0 * ops.dim)))  # start and end vectors
        for c0 in range(0, len(jobs), chunk):
            part = jobs[c0: c0 + chunk]
            for (p, k, _, _), row in zip(part, _solve_rows_compiled(probs, part, opt, batch.n_max)):
                store(p, k, row)
        return out
    def solve(jobs):
        if compiled:  # T = 0 here: the seeds of this point in parallel
            return _solve_rows_compiled(probs, jobs, opt, batch.n_max)
        return [_solve_row(probs[p], x0, v0, opt, batch.n_max, 0.0) for p, _, x0, v0 in jobs]

    if opt.branch_every > 0 and opt.continuation and init is None and not np.any(T > 0):
        from .branches import track_branches

        rows, out["branch_stats"] = track_branches(
            batch, seeds, opt.branch_every, solve,
            lambda sd, p, prev, pp, k: _row_start(batch, sd, p, prev, pp, None, k, opt), _keeps_character, _param_step)
        out["energy"][:] = np.inf
        out["residual"][:] = np.inf
        out["n"][:] = np.nan
        out["phi"][:] = np.nan
        for p in range(P):
            for k in range(K):
                if rows[p][k] is not None:
                    store(p, k, rows[p][k])
        return out
    last = [None] * K  # previous point's end state per seed
    last2 = [None] * K  # and the one before (linear predictor along a scan)
    for p in range(P):
        jobs = [(p, k, *_row_start(batch, sd, p, last[k], last2[k], init, k, opt)) for k, sd in enumerate(seeds)]
        if compiled and T[p] == 0:  # the seeds of this point in parallel, each continuing its own branch
            rows = _solve_rows_compiled(probs, jobs, opt, batch.n_max)
        else:
            rows = [_solve_row(probs[p], x0, v0, opt, batch.n_max, float(T[p])) for _, _, x0, v0 in jobs]
        for k, row in enumerate(rows):
            last2[k], last[k] = last[k], row
            store(p, k, row)
    return out


def _row_start(batch, sd, p, prev, pp, init, k, opt):
    """Start ``(x0, v0)`` of seed ``sd`` at point ``p``: the seed, ``init``, or (continuation) the
    seed's converged state at the previous point (``prev``; secant predictor with ``pp``)."""
    S = len(sd.n0)
    x0 = np.concatenate([sd.n0, sd.phi0])
    v0 = None
    if init is not None:
        x0 = np.concatenate([init.n[p, k], init.phi[p, k]])
    elif opt.continuation and prev is not None and prev["converged"] and _keeps_character(sd, prev["n"], prev["phi"]):
        x0 = np.concatenate([prev["n"], prev["phi"]])
        v0 = prev["v"]
        if pp is not None and pp["converged"] and p >= 2 and _keeps_character(sd, pp["n"], pp["phi"]):
            # secant predictor from the two previous points (equally weighted in the
            # distance of the parameters), kept only if it moves little
            s1, s2 = _param_step(batch, p, p - 1), _param_step(batch, p - 1, p - 2)
            d1, d2 = np.linalg.norm(s1), np.linalg.norm(s2)
            if d2 > 0 and d1 <= 2 * d2 and s1 @ s2 > 0.999 * d1 * d2:  # same direction
                x_pp = np.concatenate([pp["n"], pp["phi"]])
                pred = x0 + (d1 / d2) * (x0 - x_pp)
                if np.abs(pred - x0).max() < 0.1:
                    x0 = np.concatenate([np.clip(pred[:S], 0, batch.n_max), np.clip(pred[S:], 0, None)])
    return x0, v0


def _solve_rows_compiled(probs, jobs, opt, n_max):
    """Rows ``(p, k, x0, v0)`` by the compiled Lanczos loop (:mod:`phasemap.cmf.lanczos_kernel`),
    in parallel; the end states in the per-point path's format (energy from the final state)."""
    from .lanczos_kernel import solve_point_rows

    pr = [probs[p] for p, _, _, _ in jobs]
    ops, cl = pr[0].ops, pr[0].cluster
    M, M2 = cl.inter_matrices()
    d0 = np.stack([q.ops.diagonal(q.U, q.V, q.V2, q.mu, np.zeros(cl.n_sites)) for q in pr])
    v_rand = np.random.default_rng(0).standard_normal(ops.dim)  # lanczos_ground_state's start without v0
    V0 = np.stack([v_rand if v0 is None else v0 for _, _, _, v0 in jobs])
    X0 = np.stack([x0 for _, _, x0, _ in jobs])
    r0 = [np.inf if v0 is None else WARM_RESIDUAL for _, _, _, v0 in jobs]  # continued rows start warm
    _, ve, it, res, conv, _ = solve_point_rows(ops, M, M2, np.stack([q.t for q in pr]), np.stack([q.V for q in pr]),
                                             np.array([q.V2 for q in pr]), d0, X0, V0, opt, n_max, r0)
    rows = []
    for j, q in enumerate(pr):
        ex = ops.expectations(ve[j])
        rows.append({"energy": q.energy(ex), "converged": bool(conv[j]), "iterations": int(it[j]),
                     "residual": float(res[j]), "n": ex["n"], "phi": ex["phi"], "top": float(ex["top"].max()), "v": ve[j]})
    return rows
