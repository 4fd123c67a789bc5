r"""Linear stability of a zero-condensate cluster state (Mott lobes in cluster mean field).

Without boundary condensate fields the cluster Hamiltonian conserves the particle number;
let :math:`|0\rangle` be its ground state in the sector :math:`N`. To linear order in the
fields :math:`\Phi_a` the condensate responds as
:math:`\phi_a = \sum_b \chi_{ab}\Phi_b` with the static susceptibility

.. math:: \chi_{ab} = \langle 0|B_a\, (H_0 - E_0)^{-1} Q\, B_b|0\rangle,\qquad B = b + b^\dagger,

(the intermediate states live in the sectors :math:`N\pm1`), and
:math:`\Phi = T_{\rm in}\phi` closes the loop. The insulating cluster state is unstable
towards a condensate when the largest eigenvalue of :math:`\chi T_{\rm in}` reaches 1. For a
one-site cluster this is :func:`phasemap.mf.insulator_instability`
(:math:`zt[(n+1)/(Un-\mu) + n/(\mu-U(n-1))] = 1`).

References
----------
M. P. A. Fisher, P. B. Weichman, G. Grinstein, D. S. Fisher, PRB 40, 546 (1989).
D. van Oosten, P. van der Straten, H. T. C. Stoof, PRA 63, 053601 (2001).
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
from scipy.optimize import brentq, minimize_scalar
from scipy.sparse.linalg import LinearOperator, cg

from ..model import ConfigError
from .clusters import get_cluster
from .selfconsistency import lanczos_ground_state
from .threads import blas_threads

__all__ = ["MottCluster", "mott_lobe_tip"]


def _sector_dim(S: int, n_max: int, N: int) -> int:
    """Number of occupation configurations of S sites (0..n_max each) with N bosons."""
    if N < 0 or N > S * n_max:
        return 0
    c = np.zeros(N + 1, dtype=object)
    c[0] = 1
    for _ in range(S):
        new = np.zeros_like(c)
        for k in range(n_max + 1):
            new[k:] += c[: N + 1 - k]
        c = new
    return int(c[N])


def _sector_hamiltonian(cl, model, N: int, eps):
    """QuSpin number-conserving basis of N bosons and H_0 (mu = 0, no condensate field) in it."""
    from quspin.basis import boson_basis_general

    S = cl.n_sites
    b = boson_basis_general(S, Nb=N, sps=model.n_max + 1)
    dim = int(b.Ns)
    occ = np.zeros((S, dim))
    for a in range(S):
        me, r, c = b.Op("n", [a], 1.0, np.float64)
        occ[a, r] = me
    diag = 0.5 * model.U * (occ * (occ - 1)).sum(0) + eps @ occ
    for a, c_, f in cl.intra:
        diag += model.V[f] * occ[a] * occ[c_]
    for a, c_ in cl.intra2:
        diag += model.V2 * occ[a] * occ[c_]
    rows, cols, vals = [np.arange(dim)], [np.arange(dim)], [diag]
    for a, c_, f in cl.intra:
        for i, j in ((a, c_), (c_, a)):
            me, r, c = b.Op("+-", [int(i), int(j)], -model.t[f], np.float64)
            rows.append(r), cols.append(c), vals.append(me)
    H = sp.csr_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(dim, dim))
    return b, H, occ


class MottCluster:
    """Zero-condensate cluster state in the sector ``N = n * N_C`` at fixed t, U, V.

    The chemical potential only shifts the sectors rigidly, so one object serves every mu.
    """

    def __init__(self, model, cluster, filling: int = 1, memory_mb: float = 4096.0, max_dim: int = 2**22):
        if model.hardcore:
            raise ConfigError("mott lobe: needs soft-core bosons (finite U)")
        cl = get_cluster(cluster, model.lattice)
        self.cluster, self.model, self.filling = cl, model, int(filling)
        S, sps = cl.n_sites, model.n_max + 1
        N0 = int(filling) * S
        self.dims = {d: _sector_dim(S, model.n_max, N0 + d) for d in (-1, 0, 1)}
        total = sum(self.dims.values())
        est = total * (1 + S + 2 * cl.n_bonds) * 40
        if total > max_dim or est / 2**20 > memory_mb:
            raise ConfigError(f"mott lobe: cluster {cl.name!r} with n_max={model.n_max} needs sectors of "
                              f"dimension {self.dims[0]:,} (N) and {self.dims[1]:,} (N+1), ~{est / 2**20:,.0f} MiB; "
                              f"budget memory_mb={memory_mb:g}, max_dim={max_dim:,}")
        M, M2 = cl.inter_matrices()
        self.T_in = np.tensordot(np.asarray(model.t, float), M, axes=1)
        eps = (np.tensordot(np.asarray(model.V, float), M, axes=1) + model.V2 * M2) @ np.full(S, float(filling))
        self.bases, self.blocks, self.occ = {}, {}, {}
        for d in (-1, 0, 1):
            if self.dims[d] == 0:
                continue
            b, H, occ = _sector_hamiltonian(cl, model, N0 + d, eps)
            self.bases[d], self.blocks[d], self.occ[d] = b, H, occ
        E0, g = self._lowest(self.blocks[0])
        self.E = {0: E0}
        for d in (-1, 1):
            self.E[d] = self._lowest(self.blocks[d])[0] if d in self.blocks else np.inf
        self.g = g
        # B_a |0> in the sectors N -/+ 1, by moving one boson on site a in the integer encoding
        states0 = np.asarray(self.bases[0].states, dtype=np.int64)
        occ0 = self.occ[0]
        self.rhs = {}
        for d in (-1, 1):
            if d not in self.bases:
                continue
            st = np.asarray(self.bases[d].states, dtype=np.int64)
            order = np.argsort(st)
            R = np.zeros((S, len(st)))
            for a in range(S):
                m = occ0[a]
                ok = (m < model.n_max) if d == 1 else (m > 0)
                amp = np.sqrt(m[ok] + 1.0) if d == 1 else np.sqrt(m[ok])
                target = states0[ok] + d * sps ** (S - 1 - a)
                pos = order[np.searchsorted(st, target, sorter=order)]
                assert np.all(st[pos] == target)
                np.add.at(R[a], pos, amp * g[ok])
            self.rhs[d] = R

    @staticmethod
    def _lowest(H):
        if H.shape[0] <= 400:
            w, v = np.linalg.eigh(H.toarray())
            return float(w[0]), v[:, 0]
        return lanczos_ground_state(H, None, 1e-12, krylov=60)

    def mu_window(self) -> tuple[float, float]:
        """Range of mu where the sector-N state is the cluster ground state (at Phi = 0)."""
        return self.E[0] - self.E[-1], self.E[1] - self.E[0]

    def susceptibility(self, mu: float) -> np.ndarray:
        """chi_ab at chemical potential mu (inf if the sector-N state is not the ground state)."""
        lo, hi = self.mu_window()
        S = self.cluster.n_sites
        if not lo < mu < hi:
            return np.full((S, S), np.inf)
        chi = np.zeros((S, S))
        for d in (-1, 1):
            if d not in self.blocks:
                continue
            A = self.blocks[d]
            shift = self.E[0] + d * mu  # (H_d - d mu) - (E0 - 0) -> H_d - (E0 + d mu)
            R = self.rhs[d]
            if A.shape[0] <= 2000:
                w, v = np.linalg.eigh(A.toarray())
                Y = (R @ v) / (w - shift)
                chi += Y @ (v.T @ R.T)
            else:
                op = LinearOperator(A.shape, matvec=lambda x, A=A, s=shift: A @ x - s * x, dtype=float)
                for b in range(S):
                    y, info = cg(op, R[b], rtol=1e-11, atol=0.0, maxiter=5000)
                    chi[:, b] += R @ y
        return 0.5 * (chi + chi.T)

    def instability(self, mu: float) -> float:
        """Largest eigenvalue of chi^(1/2) T_in chi^(1/2) (>= 1: the insulator is unstable)."""
        chi = self.susceptibility(mu)
        if not np.all(np.isfinite(chi)):
            return np.inf
        w, U = np.linalg.eigh(chi)
        sq = (U * np.sqrt(np.clip(w, 0, None))) @ U.T
        return float(np.linalg.eigvalsh(sq @ self.T_in @ sq)[-1])

    def most_stable(self) -> tuple[float, float]:
        """(mu, instability) at the mu where the insulator is most stable."""
        lo, hi = self.mu_window()
        if not lo < hi:
            return np.nan, np.inf
        pad = 1e-6 * (hi - lo)
        r = minimize_scalar(self.instability, bounds=(lo + pad, hi - pad), method="bounded",
                            options={"xatol": 1e-7 * max(1.0, abs(hi - lo))})
        return float(r.x), float(r.fun)


def mott_lobe_tip(model, cluster, filling: int = 1, t_bracket=None, xtol: float = 1e-7, **budget) -> dict:
    """Tip of the Mott lobe of integer ``filling`` in cluster mean field.

    At fixed hopping the insulator is stable for mu inside the lobe (largest eigenvalue of
    the linearised self-consistency map < 1); the tip is the hopping at which the minimum
    over mu of that eigenvalue reaches 1 (root found by Brent's method). The hopping is
    scaled as a whole (``model.t`` fixes the ratios between families).

    Parameters
    ----------
    model : Model
        Soft-core model; its ``U``, ``V``, ``n_max`` and hopping ratios are used.
    cluster : cluster specification
    filling : int
    t_bracket : (float, float), optional
        Bracket of the largest family's hopping (default: from 0.2x to 3x the single-site
        value 2n+1-2sqrt(n(n+1)) U / z).

    Returns
    -------
    dict with ``t`` (critical largest-family hopping), ``t_over_U``, ``mu`` (at the tip),
    ``mu_over_U``, ``cluster``, ``lam``.
    """
    t_ref = np.asarray(model.t, float)
    scale = t_ref.max()
    if scale <= 0:
        raise ConfigError("mott lobe tip: the model needs a nonzero hopping to fix the family ratios")
    shape = t_ref / scale
    n = filling
    x1 = 2 * n + 1 - 2 * np.sqrt(n * (n + 1))
    if t_bracket is None:
        t_bracket = (0.2 * x1 * model.U / model.z, 3.0 * x1 * model.U / model.z)
    cl = get_cluster(cluster, model.lattice)
    cache = {}

    def g(t):
        m = model.replace(t=tuple(t * shape))
        mc = MottCluster(m, cl, filling, **budget)
        mu, lam = mc.most_stable()
        cache[t] = mu
        return lam - 1.0

    with blas_threads(1):
        tc = brentq(g, *t_bracket, xtol=xtol * model.U)
        mu = cache.get(tc)
        if mu is None:
            g(tc)
            mu = cache[tc]
    return {"t": float(tc), "t_over_U": float(tc / model.U), "mu": float(mu), "mu_over_U": float(mu / model.U),
            "cluster": cl.name, "lam": cl.lam, "filling": n}
