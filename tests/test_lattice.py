"""Lattice geometry: the 12-site sqrt3-compatible supercell, sublattice labels, structure factor."""

import itertools

import numpy as np
import pytest

from phasemap.lattice import Supercell, patterns_for, search_cell

E1, E2 = np.array([1.0, 0.0]), np.array([0.5, np.sqrt(3) / 2])  # primitive vectors, r = i e1 + j e2


def shell(length):
    """Integer (i, j) with |i e1 + j e2| = length (exact geometry, enumerated here)."""
    return sorted((i, j) for i in range(-3, 4) for j in range(-3, 4)
                  if abs(np.linalg.norm(i * E1 + j * E2) - length) < 1e-9)


NN6 = shell(1.0)  # the 6 nearest neighbours
NNN6 = shell(np.sqrt(3.0))  # the 6 next-nearest neighbours (distance sqrt 3)


def _reduce_key(ij, A):
    """Class of lattice point ij modulo the superlattice spanned by the rows of A (independent code)."""
    A = np.asarray(A, float)
    x = np.linalg.solve(A.T, np.asarray(ij, float))  # ij = x0 A0 + x1 A1
    f = np.round((x - np.floor(x + 1e-9)) * 1e6).astype(int) % 1000000
    return tuple(f)


def test_12_site_cell_sites_and_neighbours():
    # exact: |det [[2,2],[-2,4]]| = 12; each triangular site has 6 distinct NN on a cell this big
    A = ((2, 2), (-2, 4))
    cell = Supercell("triangular", A)
    assert cell.n_sites == 12
    keys = [_reduce_key(s, A) for s in cell.sites]
    assert len(set(keys)) == 12  # one representative per class
    key_to_idx = {k: n for n, k in enumerate(keys)}
    for n, s in enumerate(cell.sites):
        nbrs = [key_to_idx[_reduce_key(np.add(s, d), A)] for d in NN6]
        assert len(set(nbrs)) == 6 and n not in nbrs
        # the code's neighbour table agrees with the independent reduction (+d and -d of each family)
        fam = cell.neighbors[:, n]
        assert set(fam) <= set(nbrs)
        assert set(cell.index(np.array([np.add(s, d) for d in NN6]))) == set(nbrs)


def test_sqrt3_labels_differ_across_every_bond():
    # exact: s = (i - j) mod 3 changes by +-1 along (1,0), (0,1), (-1,1) (the nearest neighbours)
    # and by 0 mod 3 along (1,1), (2,-1), (-1,2) (the next-nearest, distance sqrt 3)
    assert sorted({(i - j) % 3 for i, j in NN6}) == [1, 2] and {(i - j) % 3 for i, j in NNN6} == {0}
    cell = Supercell("triangular", ((2, 2), (-2, 4)))
    s = (cell.sites[:, 0] - cell.sites[:, 1]) % 3
    assert np.bincount(s).tolist() == [4, 4, 4]
    for n, site in enumerate(cell.sites):
        for d in NN6:
            m = cell.index(np.add(site, d))
            assert s[m] != s[n]
        for d in NNN6:
            assert s[cell.index(np.add(site, d))] == s[n]
    pat = patterns_for("triangular")["sqrt3"]
    assert np.array_equal(pat.sublattice(cell), s)


def _labelling_is_periodic(cell):
    """The code's sqrt3 labels on ``cell``, checked across the cell's own (wrapped) bond tables."""
    s = patterns_for("triangular")["sqrt3"].sublattice(cell)
    nn_ok = all(np.all(s[cell.neighbors[f]] != s) for f in range(cell.neighbors.shape[0]))
    nnn_ok = all(np.all(s[cell.nnn_neighbors[k]] == s) for k in range(cell.nnn_neighbors.shape[0]))
    return nn_ok and nnn_ok and np.bincount(s, minlength=3).tolist() == [cell.n_sites // 3] * 3


@pytest.mark.parametrize("vectors,n", [(((1, 1), (-1, 2)), 3), (((1, 1), (-2, 4)), 6), (((3, 0), (0, 3)), 9),
                                        (((2, 2), (-2, 4)), 12)])
def test_sqrt3_compatible_cells(vectors, n):
    # exact: s(r) = (i - j) mod 3 is linear mod 3, so it is periodic on the superlattice iff
    # s(A_k) = 0 for both generators; these cells satisfy it, and the code's labelling must then
    # be consistent across every bond that wraps around the cell (NN differ, NNN agree)
    cell = Supercell("triangular", vectors)
    assert cell.n_sites == n == abs(vectors[0][0] * vectors[1][1] - vectors[0][1] * vectors[1][0])
    assert _labelling_is_periodic(cell)


@pytest.mark.parametrize("vectors", [((2, 0), (0, 2)), ((1, 0), (0, 2)), ((2, 1), (-1, 2))])
def test_sqrt3_incompatible_cells_break_the_labelling(vectors):
    # exact: s(A_k) != 0 for a generator, so some wrapped bond joins equal (NN) or different (NNN)
    # labels; the check above can fail
    assert any((v[0] - v[1]) % 3 for v in vectors)
    assert not _labelling_is_periodic(Supercell("triangular", vectors))


def test_structure_factor_of_one_third_solid_peaks_at_K():
    # exact: n = 1 on sublattice s = 0 gives |rho_K|^2 = (1/3)^2 at K = (2/3, 1/3), K' = (1/3, 2/3)
    # (in units of the primitive reciprocal vectors) and 0 at every other nonzero allowed momentum
    cell = search_cell("triangular")
    s = (cell.sites[:, 0] - cell.sites[:, 1]) % 3
    n = (s == 0).astype(float)
    q, sq = cell.structure_factor(n)
    assert len(q) == 12
    # independent evaluation of rho_Q at the K points
    for K in [(2 / 3, 1 / 3), (1 / 3, 2 / 3)]:
        rho = np.mean(n * np.exp(2j * np.pi * (cell.sites @ np.array(K))))
        assert abs(abs(rho) ** 2 - 1 / 9) < 1e-12
    nonzero = np.any(np.abs(q) > 1e-12, axis=1)
    best = q[nonzero][np.argmax(sq[nonzero])]
    assert cell.momentum_name(best) in ("K", "K'")
    assert abs(sq[nonzero].max() - 1 / 9) < 1e-12
    isK = np.array([cell.momentum_name(x) in ("K", "K'") for x in q])
    assert np.allclose(sq[nonzero & ~isK], 0.0, atol=1e-12)
    assert abs(sq[~nonzero][0] - 1 / 9) < 1e-12  # Q = 0: (mean density)^2


def test_momenta_are_allowed_by_the_superlattice():
    # exact: Q . A_k must be an integer for both superlattice vectors
    cell = search_cell("triangular")
    for q, v in itertools.product(cell.momenta, cell.vectors):
        x = q @ v
        assert abs(x - round(x)) < 1e-9
    assert len({tuple(np.round(q, 9)) for q in cell.momenta}) == 12


def test_square_checkerboard_cell():
    # exact: the checkerboard (i + j) mod 2 alternates across both bond families
    cell = patterns_for("square")["checkerboard"].supercell()
    assert cell.n_sites == 2
    s = (cell.sites[:, 0] + cell.sites[:, 1]) % 2
    for f in range(2):
        assert np.all(s[cell.neighbors[f]] != s)


def test_degenerate_vectors_rejected():
    with pytest.raises(ValueError):
        Supercell("triangular", ((1, 1), (2, 2)))
