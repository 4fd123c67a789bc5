"""Symmetries of the cluster mean-field equations and seeds solved as images (option ``symmetry``).

Reference for the map: the independent dense cluster Hamiltonian of ``tests/_cluster_dense.py``
(bonds found from the site coordinates, Kronecker-product operators), nothing from phasemap.
A site permutation that keeps the intra bonds, the decoupled bonds and their families (up to a
relabelling of families with equal t and V) maps the ground state at fields x to the ground
state at the permuted fields (exact: the Hamiltonians are unitarily equivalent). Hard-core
particle-hole conjugation b -> b^+ maps the model at mu to the model at sum_j V_ij - mu (exact
algebra: sum V (1-n_i)(1-n_j) - mu sum (1-n_i) = const + sum V n_i n_j + (sum_j V_ij - mu) sum n_i);
on the triangular lattice with nearest-neighbour V that is mu = 3 V, with V2 as well 3 V + 3 V2,
on the square lattice 2 V (z = 6, 6, 4 neighbours: derived below from the bond lists).
"""

import numpy as np
import pytest

from phasemap import Model
from phasemap.api import select_winners
from phasemap.cmf import get_cluster, solve_cmf_batch
from phasemap.cmf.symmetry import apply, automorphisms, half_filling_mu, seed_images
from phasemap.params import ParamBatch

from _cluster_dense import DenseCluster, cluster_bonds


def _dense_map(cl, lattice, t, V, V2, mu, x):
    S = cl.n_sites
    bonds = cluster_bonds(lattice, cl.sites.tolist(), cl.cell.vectors.tolist())
    dc = DenseCluster(S, 1)
    H = dc.hamiltonian(lattice, bonds, t, V, V2, None, mu, n_out=x[:S], phi_out=x[S:])
    w, v = np.linalg.eigh(H)
    assert w[1] - w[0] > 1e-8  # non-degenerate ground state at these random fields
    g = v[:, 0]
    n, phi = dc.expectations(g)
    return np.concatenate([n, np.abs(phi)]), dc.variational_energy(lattice, bonds, t, V, V2, None, mu, g), bonds


# a user cluster: three sites in a row on the triangular lattice, period 3 along the row; its
# intra bonds (a path) alone would allow 4 relabellings, the decoupled bonds leave 2
CHAIN3 = {"vectors": [[3, 0], [0, 1]], "sites": [[0, 0], [1, 0], [2, 0]]}


@pytest.mark.parametrize("name,lattice,n_sym", [("tri3", "triangular", 6), ("tri6", "triangular", 2),
                                                ("sq2x2", "square", 8), (CHAIN3, "triangular", 2)],
                         ids=["tri3", "tri6", "sq2x2", "chain3"])
def test_symmetries_commute_with_the_dense_cluster_map(name, lattice, n_sym):
    cl = get_cluster(name, lattice)
    S, F = cl.n_sites, cl.lattice.n_families
    syms = automorphisms(cl)
    # tri3 (triangle): its 6 site permutations, each with the family relabelling it induces; tri6,
    # sq2x2: counted by the backtracking (a check that symmetries are found at all)
    assert len(syms) == n_sym
    rng = np.random.default_rng(1)
    t, V, V2 = np.full(F, 0.1), np.full(F, 1.0), 0.3
    bonds = cluster_bonds(lattice, cl.sites.tolist(), cl.cell.vectors.tolist())
    z = np.zeros(S)
    for a, b, _ in bonds["intra"] + bonds["inter"]:
        z[a] += 1
        z[b] += 1
    z2 = np.zeros(S)
    for a, b in bonds["intra2"] + bonds["inter2"]:
        z2[a] += 1
        z2[b] += 1
    assert np.all(z == z[0]) and np.all(z2 == z2[0])
    mu_half = (z[0] * 1.0 + z2[0] * V2) / 2  # half of one site's interaction sum (exact algebra above)
    assert half_filling_mu(cl, V, V2) == pytest.approx(mu_half, abs=1e-12)
    for _ in range(3):
        x = np.concatenate([rng.uniform(0, 1, S), rng.uniform(0, 0.4, S)])
        gx, e, _ = _dense_map(cl, lattice, t, V, V2, mu_half, x)
        for perm, fam in syms:
            for ph in (False, True):
                g = (perm, fam, ph)
                y = np.concatenate(apply(g, x[:S], x[S:]))
                gy, ey, _ = _dense_map(cl, lattice, t, V, V2, mu_half, y)
                assert np.abs(gy - np.concatenate(apply(g, gx[:S], gx[S:]))).max() < 1e-10
                # the variational energy of the image state (particle-hole: the constant of the
                # algebra above vanishes at mu_half)
                assert abs(ey - e) < 1e-12
    # particle-hole away from mu_half is no symmetry of the map
    x = np.concatenate([rng.uniform(0, 1, S), rng.uniform(0, 0.4, S)])
    gx, _, _ = _dense_map(cl, lattice, t, V, V2, mu_half - 0.5, x)
    g = (np.arange(S), tuple(range(F)), True)
    gy, _, _ = _dense_map(cl, lattice, t, V, V2, mu_half - 0.5, np.concatenate(apply(g, x[:S], x[S:])))
    assert np.abs(gy - np.concatenate(apply(g, gx[:S], gx[S:]))).max() > 1e-3


def test_images_need_equal_couplings_on_exchanged_families_and_half_filling():
    cl = get_cluster("tri12")
    strained = ParamBatch.from_models([Model("triangular", t=(0.1, 0.12, 0.1), V=1.0, mu=3.0)])
    iso = ParamBatch.from_models([Model("triangular", t=0.1, V=1.0, mu=3.0)])
    off = ParamBatch.from_models([Model("triangular", t=0.1, V=1.0, mu=3.0), Model("triangular", t=0.1, V=1.0, mu=2.9)])
    from phasemap.cmf import cluster_seeds

    seeds = cluster_seeds(iso.base, cl)
    for batch in (strained, iso, off):
        for k, im in enumerate(seed_images(seeds, cl, batch, 1)):
            if im is None:
                continue
            j, (perm, fam, ph) = im
            assert np.array_equal(batch.t[:, list(fam)], batch.t) and np.array_equal(batch.V[:, list(fam)], batch.V)
            assert not ph or np.allclose(batch.mu, 3.0)  # particle-hole only where every point has mu = 3 V
            assert np.allclose(np.concatenate(apply(im[1], seeds[j].n0, seeds[j].phi0)),
                               np.concatenate([seeds[k].n0, seeds[k].phi0]))
    assert sum(im is not None for im in seed_images(seeds, cl, iso, 1)) \
        > sum(im is not None for im in seed_images(seeds, cl, off, 1))


LINES = {
    "tri3 t, mu = 3": ("tri3", [Model("triangular", t=0.05 + 0.01 * k, V=1.0, mu=3.0) for k in range(30)]),
    "tri6 t, mu = 3": ("tri6", [Model("triangular", t=0.05 + 0.01 * k, V=1.0, mu=3.0) for k in range(20)]),
}


@pytest.mark.parametrize("line", list(LINES))
def test_seed_images_give_the_answers_of_every_seed_solved(line):
    # reference: the same per-point path with every seed solved (symmetry=False); winners' energies
    # to 1e-9 and phase labels equal (the image of a converged row is a converged row of the image
    # seed, exact up to the solver tolerance)
    cl, models = LINES[line]
    batch = ParamBatch.from_models(models)
    ref = solve_cmf_batch(batch, cluster=cl, engine="point", symmetry=False)
    new = solve_cmf_batch(batch, cluster=cl, engine="point")
    assert new.seed_images is not None and (new.seed_images >= 0).any()
    k0, ok0, _, _, lab0, _ = select_winners(ref)
    k1, ok1, _, _, lab1, _ = select_winners(new)
    P = np.arange(batch.size)
    assert ok0.all() and np.array_equal(ok0, ok1)
    assert np.abs(ref.energy[P, k0] - new.energy[P, k1]).max() < 1e-9
    assert list(lab0) == list(lab1)
    # every row of an image seed that converged in both is the reference's row of that seed
    # (solver tolerance 1e-9 on the map residual; states to 1e-6, energies to 1e-9)
    img = new.seed_images >= 0
    both = ref.converged[:, img] & new.converged[:, img]
    assert both.sum() >= 20
    for key, tol in (("energy", 1e-9), ("n", 1e-6), ("phi", 1e-6)):
        d = np.abs(getattr(ref, key)[:, img] - getattr(new, key)[:, img])
        assert d[both].max() < tol, key


@pytest.mark.parametrize("bad", ["yes", 1, None])
def test_bad_symmetry_option_is_a_config_error(bad):
    from phasemap.model import ConfigError

    batch = ParamBatch.from_models([Model("triangular", t=0.1, V=1.0, mu=3.0)])
    with pytest.raises(ConfigError, match="symmetry"):
        solve_cmf_batch(batch, cluster="tri3", symmetry=bad)
