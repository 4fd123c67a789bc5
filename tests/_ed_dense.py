"""Independent dense reference Hamiltonians for the ED tests (numpy only, no phasemap.ed code).

Bonds are recomputed here from the superlattice vectors (sites reduced by solving
r = x A for fractional x), so the geometry does not come from the code under test either.
"""

from __future__ import annotations

import itertools

import numpy as np

NN = {"triangular": [(1, 0), (0, 1), (-1, 1)], "square": [(1, 0), (0, 1)]}
NNN = {"triangular": [(1, 1), (2, -1), (-1, 2)], "square": [(1, 1), (1, -1)]}


def torus_sites(vectors):
    """Sites of the torus (one per class) and a function mapping any (i, j) to its index."""
    A = np.array(vectors, float)
    Ainv = np.linalg.inv(A)

    def key(r):
        x = np.asarray(r, float) @ Ainv
        x = np.round(x - np.floor(x + 1e-9), 9) % 1.0
        return tuple(np.round(x, 6))

    L = int(round(abs(np.linalg.det(A))))
    R = int(np.abs(A).sum()) + 1
    sites, idx = [], {}
    for i in range(-R, R + 1):
        for j in range(-R, R + 1):
            k = key((i, j))
            if k not in idx:
                idx[k] = len(sites)
                sites.append((i, j))
    assert len(sites) == L
    return sites, (lambda r: idx[key(r)])


def bonds(lattice, vectors, which="nn"):
    """List of (family, s, s') for every bond of the torus (each once)."""
    sites, index = torus_sites(vectors)
    vecs = NN[lattice] if which == "nn" else NNN[lattice]
    return [(f, s, index((i + d[0], j + d[1]))) for f, d in enumerate(vecs) for s, (i, j) in enumerate(sites)]


def classical_energies(lattice, vectors, V, V2=0.0):
    """Interaction energy sum_b V_f n n + V2 sum_nnn n n and particle number of every hard-core
    occupation of the torus (occupation k of site s = bit s of k, k = 0 .. 2^L - 1)."""
    L = len(torus_sites(vectors)[0])
    codes = np.arange(2**L, dtype=np.int64)
    conf = ((codes[:, None] >> np.arange(L)) & 1).astype(np.int8)
    E = np.zeros(len(codes))
    for f, a, b in bonds(lattice, vectors):
        E += V[f] * (conf[:, a] & conf[:, b])
    if V2:
        for _, a, b in bonds(lattice, vectors, "nnn"):
            E += V2 * (conf[:, a] & conf[:, b])
    return E, conf.sum(1, dtype=np.int64)

def dense_hamiltonian(lattice, vectors, N, t, V, U=np.inf, V2=0.0, mu=0.0, n_max=1):
    """Dense H of the extended Bose-Hubbard model at fixed N on the torus (occupation basis)."""
    sites, _ = torus_sites(vectors)
    L = len(sites)
    states = [s for s in itertools.product(range(n_max + 1), repeat=L) if sum(s) == N]
    pos = {s: k for k, s in enumerate(states)}
    H = np.zeros((len(states), len(states)))
    nn, nnn = bonds(lattice, vectors), bonds(lattice, vectors, "nnn")
    for k, s in enumerate(states):
        n = np.array(s, float)
        e = -mu * N + sum(V[f] * n[a] * n[b] for f, a, b in nn) + sum(V2 * n[a] * n[b] for _, a, b in nnn)
        if np.isfinite(U):
            e += 0.5 * U * np.sum(n * (n - 1))
        H[k, k] = e
        for f, a, b in nn:
            for x, y in ((a, b), (b, a)):  # b_x^+ b_y
                if s[y] > 0 and s[x] < n_max:
                    new = list(s)
                    new[x] += 1
                    new[y] -= 1
                    H[pos[tuple(new)], k] += -t[f] * np.sqrt((s[x] + 1) * s[y])
    return H


def heisenberg_ring(L):
    """Dense Heisenberg ring sum_i S_i . S_{i+1} (J = 1) from Kronecker products."""
    import scipy.sparse as sp

    sx = sp.csr_matrix([[0, 0.5], [0.5, 0]])
    sy = sp.csr_matrix(np.array([[0, -0.5j], [0.5j, 0]]))
    sz = sp.csr_matrix(np.diag([0.5, -0.5]))

    def op(o, i):
        out = sp.identity(1, format="csr")
        for k in range(L):
            out = sp.kron(out, o if k == i else sp.identity(2), format="csr")
        return out

    H = sp.csr_matrix((2**L, 2**L), dtype=complex)
    for i in range(L):
        j = (i + 1) % L
        for o in (sx, sy, sz):
            H = H + op(o, i) @ op(o, j)
    return H.toarray()



class FockSector:
    """Fixed-N occupation basis of a torus with vectorised one-boson moves (numpy/scipy only).

    ``moves(i, j)`` gives (source rows, target rows, amplitude) of b_i^+ b_j. Hops carry the
    Peierls phase exp(i A.D) for a boson moved by the Cartesian vector D (e1 = (1, 0),
    e2 = (1/2, sqrt(3)/2) on the triangular lattice, unit square otherwise).
    """

    def __init__(self, lattice, vectors, N, n_max=1):
        self.lattice, self.vectors, self.N, self.n_max = lattice, vectors, N, n_max
        sites, _ = torus_sites(vectors)
        self.L = L = len(sites)
        self.occ = np.array([s for s in itertools.product(range(n_max + 1), repeat=L) if sum(s) == N], dtype=np.int64)
        self.base = (n_max + 1) ** np.arange(L)
        self.codes = self.occ @ self.base
        self.order = np.argsort(self.codes)
        self.dim = len(self.occ)
        self.nn = bonds(lattice, vectors)
        prim = np.array([[1.0, 0.0], [0.5, np.sqrt(3) / 2]]) if lattice == "triangular" else np.eye(2)
        self.D = [np.array(d, float) @ prim for d in NN[lattice]]

    def moves(self, i, j):
        ok = np.nonzero((self.occ[:, j] > 0) & (self.occ[:, i] < self.n_max))[0]
        new = self.codes[ok] + self.base[i] - self.base[j]
        tgt = self.order[np.searchsorted(self.codes, new, sorter=self.order)]
        return ok, tgt, np.sqrt((self.occ[ok, i] + 1.0) * self.occ[ok, j])

    def hamiltonian(self, t, V, A=(0.0, 0.0)):
        import scipy.sparse as sp

        n = self.occ.astype(float)
        diag = sum(V[f] * n[:, a] * n[:, b] for f, a, b in self.nn)
        rows, cols, vals = [np.arange(self.dim)], [np.arange(self.dim)], [np.asarray(diag, complex) + 0j * np.ones(self.dim)]
        for f, a, b in self.nn:  # b = a + d_f
            for x, y, D in ((a, b, -self.D[f]), (b, a, self.D[f])):  # b_x^+ b_y moves a boson by r_x - r_y
                src, tgt, amp = self.moves(x, y)
                rows.append(tgt), cols.append(src)
                vals.append(-t[f] * amp * np.exp(1j * (np.asarray(A, float) @ D)))
        return sp.csr_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))),
                             shape=(self.dim, self.dim))

    def ground_state(self, t, V, A=(0.0, 0.0)):
        """(E0, psi, gap to the next level)."""
        H = self.hamiltonian(t, V, A)
        if self.dim <= 400:
            w, v = np.linalg.eigh(H.toarray())
        else:
            from scipy.sparse.linalg import eigsh

            w, v = eigsh(H, k=2, which="SA", tol=1e-14, v0=np.ones(self.dim, complex))
            o = np.argsort(w)
            w, v = w[o], v[:, o]
        return float(w[0]), v[:, 0], float(w[1] - w[0])

    def stiffness(self, t, V, family, h=2e-3):
        """rho_f = (1/L) d^2 E0 / d phi^2 for A = phi e_f (e_f: unit vector of bond family f),
        central differences at h and 2h combined by Richardson extrapolation."""
        e = self.D[family] / np.linalg.norm(self.D[family])
        E = {x: self.ground_state(t, V, x * e)[0] for x in (-2 * h, -h, 0.0, h, 2 * h)}
        c1 = (E[h] + E[-h] - 2 * E[0.0]) / (self.L * h * h)
        c2 = (E[2 * h] + E[-2 * h] - 2 * E[0.0]) / (self.L * 4 * h * h)
        return (4 * c1 - c2) / 3

    def condensate_fraction(self, psi):
        """Largest eigenvalue of <b_i^+ b_j> / N in the state psi."""
        rho = np.zeros((self.L, self.L), complex)
        for i in range(self.L):
            rho[i, i] = np.abs(psi) ** 2 @ self.occ[:, i]
            for j in range(self.L):
                if i != j:
                    src, tgt, amp = self.moves(i, j)
                    rho[i, j] = np.sum(np.conj(psi[tgt]) * psi[src] * amp)
        return float(np.linalg.eigvalsh(rho)[-1] / self.N)
