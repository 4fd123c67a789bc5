"""Independent dense cluster Hamiltonians for the cluster-mean-field tests (numpy/scipy only).

Nothing here comes from phasemap: the bonds of a cluster are found from its site coordinates
and its superlattice vectors with the nearest / next-nearest vectors written out below, the
operators are Kronecker products of single-site (n_max + 1)-dimensional matrices.

Decoupling (the definition of cluster mean field, e.g. D. Yamamoto, I. Danshita,
C. A. R. Sá de Melo, PRA 85, 021601(R) (2012); attribution from memory): every lattice bond
is counted once, as (r, r + d) for each cluster site r and each bond vector d. If r + d lies
in the cluster the bond is kept exactly; otherwise its far end is the cluster site b
equivalent to r + d modulo the superlattice and

    b_a^+ b_b' + h.c. -> phi_b (b_a + b_a^+) + phi_a (b_b + b_b^+) - 2 phi_a phi_b,
    n_a n_b'         -> n_b n_a + n_a n_b - n_a n_b     (numbers: expectation values).
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

NN = {"triangular": [(1, 0), (0, 1), (-1, 1)], "square": [(1, 0), (0, 1)]}
NNN = {"triangular": [(1, 1), (2, -1), (-1, 2)], "square": [(1, 1), (1, -1)]}


def _equivalent(r, sites, vectors):
    A = np.array(vectors, float)
    for k, s in enumerate(sites):
        x = np.linalg.solve(A.T, np.subtract(r, s).astype(float))
        if np.allclose(x, np.round(x), atol=1e-9):
            return k
    raise AssertionError(f"{r} is equivalent to no cluster site")


def cluster_bonds(lattice, sites, vectors):
    """intra, inter: lists of (a, b, family); intra2, inter2: lists of (a, b)."""
    sites = [tuple(map(int, s)) for s in sites]
    pos = {s: k for k, s in enumerate(sites)}
    out = {"intra": [], "inter": [], "intra2": [], "inter2": []}
    for a, (i, j) in enumerate(sites):
        for f, d in enumerate(NN[lattice]):
            q = (i + d[0], j + d[1])
            if q in pos:
                out["intra"].append((a, pos[q], f))
            else:
                out["inter"].append((a, _equivalent(q, sites, vectors), f))
        for d in NNN[lattice]:
            q = (i + d[0], j + d[1])
            if q in pos:
                out["intra2"].append((a, pos[q]))
            else:
                out["inter2"].append((a, _equivalent(q, sites, vectors)))
    return out


class DenseCluster:
    """Operators b_a, n_a of S sites with occupations 0..n_max (dense arrays)."""

    def __init__(self, S, n_max):
        d = n_max + 1
        self.S, self.dim = S, d**S
        b1 = np.diag(np.sqrt(np.arange(1.0, d)), 1)  # b|m> = sqrt(m)|m-1>
        eye = sp.identity(d, format="csr")
        self.b = []
        for a in range(S):
            op = sp.identity(1, format="csr")
            for k in range(S):
                op = sp.kron(op, sp.csr_matrix(b1) if k == a else eye, format="csr")
            self.b.append(op.toarray())
        self.n = [np.diag(bb.T @ bb).copy() for bb in self.b]  # diagonal of b^+ b
        self.N = np.sum(self.n, axis=0)

    def hamiltonian(self, lattice, bonds, t, V, V2, U, mu, n_out=None, phi_out=None):
        """Cluster Hamiltonian with boundary fields from the outside expectation values.

        ``U = None``: hard-core (n_max must be 1). ``n_out``, ``phi_out`` (S,) default to zero.
        """
        S = self.S
        n_out = np.zeros(S) if n_out is None else np.asarray(n_out, float)
        phi_out = np.zeros(S) if phi_out is None else np.asarray(phi_out, float)
        H = np.zeros((self.dim, self.dim))
        diag = -mu * self.N
        if U is not None:
            diag = diag + 0.5 * U * sum(n * (n - 1) for n in self.n)
        Phi, eps = np.zeros(S), np.zeros(S)
        for a, b, f in bonds["intra"]:
            hop = self.b[a].T @ self.b[b]
            H -= t[f] * (hop + hop.T)
            diag = diag + V[f] * self.n[a] * self.n[b]
        for a, b in bonds["intra2"]:
            diag = diag + V2 * self.n[a] * self.n[b]
        for a, b, f in bonds["inter"]:
            Phi[a] += t[f] * phi_out[b]
            Phi[b] += t[f] * phi_out[a]
            eps[a] += V[f] * n_out[b]
            eps[b] += V[f] * n_out[a]
        for a, b in bonds["inter2"]:
            eps[a] += V2 * n_out[b]
            eps[b] += V2 * n_out[a]
        for a in range(S):
            H -= Phi[a] * (self.b[a] + self.b[a].T)
            diag = diag + eps[a] * self.n[a]
        H[np.diag_indices(self.dim)] += diag
        return H

    def expectations(self, v):
        p = v * v
        return np.array([n @ p for n in self.n]), np.array([v @ (bb @ v) for bb in self.b])

    def variational_energy(self, lattice, bonds, t, V, V2, U, mu, v):
        """<H>/S of the cluster-product state built from ``v`` (every bond once)."""
        n, phi = self.expectations(v)
        H0 = self.hamiltonian(lattice, bonds, t, V, V2, U, mu)  # intra part only
        E = v @ H0 @ v
        for a, b, f in bonds["inter"]:
            E += -2 * t[f] * phi[a] * phi[b] + V[f] * n[a] * n[b]
        for a, b in bonds["inter2"]:
            E += V2 * n[a] * n[b]
        return E / self.S
