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
