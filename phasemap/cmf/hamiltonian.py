r"""Cluster Hamiltonian operators, built once per cluster and occupation cut-off with QuSpin.

The cluster Hamiltonian of cluster mean field is

.. math::

    H_C = -\sum_{\langle ab\rangle \in C} t_{f(ab)} (b_a^\dagger b_b + h.c.)
          + \frac{U}{2}\sum_a n_a(n_a-1) + \sum_{\langle ab\rangle\in C} V_{f(ab)} n_a n_b
          + V_2 \sum_{\langle\langle ab\rangle\rangle\in C} n_a n_b
          - \mu\sum_a n_a + \sum_a \left[-\Phi_a (b_a + b_a^\dagger) + \epsilon_a n_a\right],

with boundary fields :math:`\Phi_a, \epsilon_a` from the decoupled bonds
(:mod:`phasemap.cmf.selfconsistency`). The Hilbert space is QuSpin's
``boson_basis_general(N, sps=n_max+1)`` without particle-number conservation (the fields
break U(1)). Every off-diagonal matrix element belongs to exactly one *term*: one hopping
family (two-site moves) or one site's field :math:`b_a + b_a^\dagger` (one-site moves); the
CSR sparsity pattern is fixed, and per iteration only ``data = coef[term] * base`` and the
diagonal are recomputed.

References
----------
P. Weinberg, M. Bukov, SciPost Phys. 2, 003 (2017); 7, 020 (2019) (QuSpin).
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

__all__ = ["ClusterOperators", "cluster_operators"]


class ClusterOperators:
    r"""Precomputed operator data of one cluster at one occupation cut-off.

    Parameters
    ----------
    cluster : phasemap.cmf.clusters.Cluster
    n_max : int

    Attributes
    ----------
    dim : int
    occ : (S, dim) float array
        Occupation of every site in every basis state.
    diag_U : (dim,) array
        :math:`\sum_a n_a(n_a-1)/2`.
    diag_V : (F, dim) array
        Intra-cluster :math:`\sum n_a n_b` per family.
    diag_V2 : (dim,) array
        Intra-cluster next-nearest :math:`\sum n_a n_b`.
    """

    def __init__(self, cluster, n_max: int):
        from quspin.basis import boson_basis_general

        self.cluster = cluster
        self.n_max = int(n_max)
        S = cluster.n_sites
        F = cluster.lattice.n_families
        self.S, self.F = S, F
        basis = boson_basis_general(S, sps=self.n_max + 1)
        self.basis = basis
        dim = self.dim = int(basis.Ns)
        occ = np.zeros((S, dim))
        for a in range(S):
            me, r, c = basis.Op("n", [a], 1.0, np.float64)
            occ[a, r] = me
        self.occ = occ
        self.top = occ >= self.n_max - 0.5
        self.diag_U = 0.5 * (occ * (occ - 1.0)).sum(0)
        self.diag_V = np.zeros((F, dim))
        for a, b, f in cluster.intra:
            self.diag_V[f] += occ[a] * occ[b]
        self.diag_V2 = np.zeros(dim)
        for a, b in cluster.intra2:
            self.diag_V2 += occ[a] * occ[b]
        self.diag_N = occ.sum(0)
        rows, cols, vals, terms = [], [], [], []

        def add(opstr, idx, term):
            me, r, c = basis.Op(opstr, idx, 1.0, np.float64)
            rows.append(r.astype(np.int64))
            cols.append(c.astype(np.int64))
            vals.append(np.asarray(me, float))
            terms.append(np.full(len(me), term, dtype=np.int32))

        for a, b, f in cluster.intra:  # term f: hopping of family f, b_a^+ b_b + h.c.
            add("+-", [int(a), int(b)], int(f))
            add("+-", [int(b), int(a)], int(f))
        for a in range(S):  # term F + a: b_a + b_a^+
            add("+", [a], F + a)
            add("-", [a], F + a)
        # explicit diagonal slots (term index F + S, base 0) so that the pattern is fixed
        rows.append(np.arange(dim, dtype=np.int64))
        cols.append(np.arange(dim, dtype=np.int64))
        vals.append(np.zeros(dim))
        terms.append(np.full(dim, F + S, dtype=np.int32))
        r = np.concatenate(rows) if rows else np.zeros(0, np.int64)
        c = np.concatenate(cols) if cols else np.zeros(0, np.int64)
        v = np.concatenate(vals) if vals else np.zeros(0)
        tm = np.concatenate(terms) if terms else np.zeros(0, np.int32)
        order = np.lexsort((c, r))
        self.rows = r[order].astype(np.int32)
        self.indices = c[order].astype(np.int32)
        self.base = v[order]
        self.term = tm[order]
        del r, c, v, tm, order
        self.indptr = np.concatenate([[0], np.cumsum(np.bincount(self.rows, minlength=dim))]).astype(np.int32)
        self.n_terms = F + S
        self.diag_pos = np.flatnonzero(self.term == F + S)
        assert np.array_equal(self.rows[self.diag_pos], np.arange(dim))
        self.nnz = len(self.base) - dim

    # -- building the matrix -------------------------------------------------------------
    def coefficients(self, t, Phi) -> np.ndarray:
        """Coefficient of every term: ``-t_f`` for hopping families, ``-Phi_a`` for fields."""
        return np.concatenate([-np.asarray(t, float), -np.asarray(Phi, float), [0.0]])

    def diagonal(self, U, V, V2, mu, eps) -> np.ndarray:
        """Diagonal of H_C; ``U`` is ignored (0) for hard-core (n_max = 1)."""
        d = -mu * self.diag_N + np.asarray(V, float) @ self.diag_V + V2 * self.diag_V2 + np.asarray(eps, float) @ self.occ
        if self.n_max > 1:
            d = d + U * self.diag_U
        return d

    def matrix(self, coef, diag) -> sp.csr_matrix:
        """Sparse H_C (off-diagonal terms + diagonal)."""
        data = coef[self.term] * self.base
        data[self.diag_pos] = diag
        return sp.csr_matrix((data, self.indices, self.indptr), shape=(self.dim, self.dim))

    def dense(self, coef, diag) -> np.ndarray:
        H = np.zeros((self.dim, self.dim))
        np.add.at(H, (self.rows, self.indices), coef[self.term] * self.base)
        H[np.diag_indices(self.dim)] += diag
        return H

    # -- expectation values --------------------------------------------------------------
    def expectations(self, v) -> dict:
        """Expectation values in the (real, normalised) state ``v``.

        Returns a dict with ``n`` (S,), ``phi`` = <b_a> (S,), ``hop`` (F,) =
        <sum_intra (b^+ b + h.c.)> per family, ``U`` = <sum n(n-1)/2>, ``V`` (F,),
        ``V2``, ``top`` (S,) weight of the top occupation, ``nn1`` (S,) <n(n-1)>.
        """
        p = v * v
        w = v[self.rows] * self.base * v[self.indices]
        per = np.bincount(self.term, weights=w, minlength=self.n_terms + 1)[: self.n_terms]
        F = self.F
        return {
            "n": self.occ @ p,
            "phi": 0.5 * per[F:],
            "hop": per[:F],
            "U": float(self.diag_U @ p),
            "V": self.diag_V @ p,
            "V2": float(self.diag_V2 @ p),
            "top": self.top.astype(float) @ p,
        }

    def thermal_expectations(self, H: np.ndarray, T: float) -> tuple[dict, float]:
        """Expectation values (as :meth:`expectations`) in the thermal state exp(-H/T)/Z of the
        dense cluster Hamiltonian ``H`` (full diagonalisation), and its entropy (units of k_B)."""
        w, V = np.linalg.eigh(H)
        p = np.exp(-(w - w[0]) / T)
        p /= p.sum()
        keep = p > 1e-300
        Vk, pk = V[:, keep], p[keep]
        diag = (Vk * Vk) @ pk  # diagonal of rho
        off = np.einsum("ik,ik,k->i", Vk[self.rows], Vk[self.indices], pk)  # rho[rows, indices]
        per = np.bincount(self.term, weights=off * self.base, minlength=self.n_terms + 1)[: self.n_terms]
        F = self.F
        ex = {"n": self.occ @ diag, "phi": 0.5 * per[F:], "hop": per[:F], "U": float(self.diag_U @ diag),
              "V": self.diag_V @ diag, "V2": float(self.diag_V2 @ diag), "top": self.top.astype(float) @ diag}
        return ex, float(-(pk * np.log(pk)).sum())

    # -- parameter-independent term matrices (batched solver) ---------------------------
    def term_matrices(self) -> list:
        """Sparse matrices ``B_k`` of the off-diagonal terms (``F`` hopping families, then the
        ``S`` site fields), so that ``H = sum_k coef[k] B_k + diag`` (cached)."""
        mats = getattr(self, "_term_mats", None)
        if mats is None:
            mats = []
            for k in range(self.n_terms):
                sel = self.term == k
                mats.append(sp.csr_matrix((self.base[sel], (self.rows[sel], self.indices[sel])),
                                          shape=(self.dim, self.dim)))
            self._term_mats = mats
        return mats

    def dense_terms(self) -> np.ndarray:
        """(K, dim, dim) dense ``B_k`` (only for small clusters; cached)."""
        dt = getattr(self, "_dense_terms", None)
        if dt is None:
            dt = np.zeros((self.n_terms, self.dim, self.dim))
            np.add.at(dt, (self.term[self.term < self.n_terms], self.rows[self.term < self.n_terms],
                           self.indices[self.term < self.n_terms]), self.base[self.term < self.n_terms])
            self._dense_terms = dt
        return dt

    def site_field(self, a: int) -> sp.csr_matrix:
        """Sparse ``b_a + b_a^+`` (for linear response)."""
        sel = self.term == self.F + a
        return sp.csr_matrix((self.base[sel], (self.rows[sel], self.indices[sel])), shape=(self.dim, self.dim))


_CACHE: dict = {}


def cluster_operators(cluster, n_max: int) -> ClusterOperators:
    """Cached :class:`ClusterOperators` (one per cluster geometry and n_max; last 4 kept)."""
    key = (cluster.key, int(n_max))
    ops = _CACHE.get(key)
    if ops is None:
        while len(_CACHE) >= 4:
            _CACHE.pop(next(iter(_CACHE)))
        ops = _CACHE[key] = ClusterOperators(cluster, n_max)
    return ops
