r"""Next-nearest-neighbour repulsion V2 against exact values, for mean field, cluster mean field and ED.

Reference values are derived here (not read from the code).

Classical limit t = 0, hard-core bosons, triangular lattice, isotropic V, next-nearest V2
(distance √3). Every site has 6 nearest and 6 next-nearest neighbours, i.e. 3 NN and 3 NNN
bonds per site. With s = (i - j) mod 3 the nearest neighbours (1,0), (0,1), (-1,1) change s,
the next-nearest ones (1,1), (2,-1), (-1,2) keep it. Energies per site of the candidate states
(bonds with both ends occupied, per site):

* empty: 0;
* 1/4, one sublattice of the 2×2 cell (i, j both even): occupied sites are 2 apart, no NN and
  no NNN pair: E = -mu/4;
* 1/3, one √3 sublattice: no NN pair; all 6 NNN of an occupied site are occupied, 6/2 bonds per
  occupied site, 1/3 of the sites: E = V2 - mu/3;
* 1/2 stripe (rows j even occupied): along d1 both neighbours occupied (V: 2/2 per occupied
  site), d2, d3 change the row parity; of the NNN only (-1,2) keeps the parity (V2: 2/2 per
  occupied site): E = (V + V2)/2 - mu/2;
* particle-hole partners: with holes h = 1 - n, sum_bonds W n_i n_j = sum_bonds W (1 - h_i - h_j + h_i h_j),
  i.e. per site 3 W - 6 W rho_h + (hole term); for 2/3 (holes on one √3 sublattice),
  3/4 (holes on the 2×2 sublattice) and full:
  E = V + 2 V2 - 2mu/3,  3(V + V2)/2 - 3mu/4,  3(V + V2) - mu.

Lower envelope for 0 < V2 < V/5 (consecutive crossings, ordered): plateau edges
mu = 0, 12 V2, 3V - 3V2, 3V + 9V2, 6V - 6V2, 6V + 6V2 (symmetric about 3(V + V2)).
At V2 = 0 this is the classical 0, 1/3, 2/3, 1 staircase with edges 0, 3V, 6V.

Every method here works with states periodic in a finite cell (mean field: the 12-site search
cell {(2,2), (-2,4)}; cluster mean field: the cluster's cell; ED: the 12-site torus), so the
derived envelope is also checked against a brute-force minimum over all occupations periodic in
that cell (energies from an independent bond list, tests/_ed_dense.py). On the 3-site √3 cell
only empty, 1/3, 2/3 and full exist.

A self-consistent (decoupled) state at t = 0 must also be stable against changing one site
(one cluster): removing a particle from the 1/3 solid gains mu - 6 V2 (6 occupied NNN), adding
one costs 3V - mu (3 occupied NN), so the 1/3 solid is a fixed point only for 6 V2 < mu < 3V,
the 2/3 solid for 3V + 6V2 < mu < 6V. The cluster checks use chemical potentials inside these
windows (outside them the decoupled map at t = 0 can have no fixed point at all).

Away from t = 0 (to test the *field* of V2, not only its energy): the uniform hard-core
product state with n, phi = sqrt(n(1 - n)) has E = -6t n(1-n) + 3(V + V2) n^2 - mu n; its
stationary point is n = (mu + 6t) / (12 t + 6 V + 6 V2) (exact for the product state).
"""

import numpy as np
import pytest
from _ed_dense import classical_energies

from phasemap import Model
from phasemap.cmf import solve_cmf_batch
from phasemap.ed import ground_state
from phasemap.mf import MFOptions, solve_batch
from phasemap.params import grid
from phasemap.scan import filling_curve

V, V2 = 1.0, 0.1
TRI12 = ((2, 2), (-2, 4))


def envelope(mu, V=V, V2=V2):
    """Derived classical ground-state energy per site (module notes), 0 < V2 < V/5."""
    return min(0.0, -mu / 4, V2 - mu / 3, (V + V2) / 2 - mu / 2, V + 2 * V2 - 2 * mu / 3,
               1.5 * (V + V2) - 0.75 * mu, 3 * (V + V2) - mu)


def envelope_sqrt3_cell(mu, V=V, V2=V2):
    """Derived minimum over the 8 occupations of the 3-site √3 cell: empty, 1/3, 2/3, full."""
    return min(0.0, V2 - mu / 3, V + 2 * V2 - 2 * mu / 3, 3 * (V + V2) - mu)


EDGES = [0.0, 12 * V2, 3 * V - 3 * V2, 3 * V + 9 * V2, 6 * V - 6 * V2, 6 * V + 6 * V2]


def periodic_minima(vectors, V=V, V2=V2):
    """Brute force: (interaction energy, N, L) of every occupation of the periodic cell."""
    E, N = classical_energies("triangular", vectors, (V,) * 3, V2)
    return E, N, int(round(abs(np.linalg.det(np.array(vectors, float)))))


def brute_force_energy(vectors, mu):
    """Lowest energy per site over all occupations periodic in ``vectors``."""
    E, N, L = periodic_minima(vectors)
    return float(np.min(E - mu * N)) / L


# one chemical potential inside every plateau of the derived staircase
MU_INSIDE = [-0.5, 0.6, 2.0, 3.3, 4.6, 6.0, 7.0]
FRACTIONS = ["0", "1/4", "1/3", "1/2", "2/3", "3/4", "1"]


def test_mf_t0_with_V2_plateaus_edges_and_energies():
    # exact classical limit with V2 (module notes): the mean-field product state at t = 0 is a
    # classical occupation, so the staircase, its edges and its energies are the derived ones
    m = Model("triangular", t=0.0, V=V, V2=V2)
    fc = filling_curve(m, mu=MU_INSIDE, relative=True, tol=1e-5)
    assert [p["fraction"] for p in fc.plateaus] == FRACTIONS
    inner = [p["mu_hi"] for p in fc.plateaus[:-1]]
    assert inner == pytest.approx(EDGES, abs=2e-5)  # bisection tolerance 1e-5
    for e, mu in zip(fc.dataset["energy"].values, MU_INSIDE):
        assert e == pytest.approx(envelope(mu), abs=1e-12)
        assert e == pytest.approx(brute_force_energy(TRI12, mu), abs=1e-12)


@pytest.mark.parametrize("engine", ["numba", "numpy"])
def test_mf_uniform_superfluid_with_V2_closed_form(engine):
    # exact for the uniform product state (module notes); the V2 field enters the stationary
    # density, so a wrong field gives a wrong n even where the energy formula is right
    t, Vn, V2n = 0.3, 0.2, 0.15
    batch, _ = grid(Model("triangular", t=t, V=Vn, V2=V2n), {"mu": [-0.8, 0.5, 2.0]}, relative=False)
    res = solve_batch(batch, MFOptions(engine=engine, tol=1e-12))
    k = res.seed_names.index("superfluid")
    for p, mu in enumerate([-0.8, 0.5, 2.0]):
        n_ref = (mu + 6 * t) / (12 * t + 6 * Vn + 6 * V2n)
        assert 0 < n_ref < 1
        E_ref = -6 * t * n_ref * (1 - n_ref) + 3 * (Vn + V2n) * n_ref**2 - mu * n_ref
        assert res.converged[p, k]
        assert np.allclose(res.n[p, k], n_ref, atol=1e-9), (res.n[p, k][0], n_ref)
        assert np.allclose(np.abs(res.phi[p, k]), np.sqrt(n_ref * (1 - n_ref)), atol=1e-9)
        assert res.energy[p, k] == pytest.approx(E_ref, abs=1e-11)


def _cmf_best(cluster, mu):
    batch, _ = grid(Model("triangular", t=0.0, V=V, V2=V2), {"mu": list(mu)}, relative=False)
    res = solve_cmf_batch(batch, cluster=cluster, n_random=0)
    k = res.best()
    assert np.all(k >= 0)
    P = np.arange(len(mu))
    return res.energy[P, k], res.n[P, k].mean(1), res.cell


def test_cmf_t0_with_V2_triangle_cluster():
    # exact classical limit on the 3-site √3 cell (module notes), at chemical potentials where
    # the state is also a fixed point of the decoupled map (stable against changing one cluster:
    # 1/3 for 6 V2 < mu < 3V, 2/3 for 3V + 6V2 < mu < 6V; see the module notes)
    mu = [-0.5, 1.0, 2.0, 5.0, 8.0]
    E, n, cell = _cmf_best("tri3", mu)
    assert cell.n_sites == 3
    for e, x in zip(E, mu):
        assert e == pytest.approx(envelope_sqrt3_cell(x), abs=1e-12)
        assert e == pytest.approx(brute_force_energy(((1, 1), (-1, 2)), x), abs=1e-12)
    assert n == pytest.approx([0, 1 / 3, 1 / 3, 2 / 3, 1], abs=1e-12)


def test_cmf_t0_with_V2_six_site_cluster():
    # the 6-site cluster keeps three NNN bonds inside (intra-cluster V2) and decouples the rest:
    # energies equal the brute-force minimum over the 2^6 occupations of its cell, and the
    # derived closed forms of the states that win there (1/3 at mu = 2, 1/2 stripe at 3.3,
    # 2/3 at 5)
    vec6 = ((1, 1), (-2, 4))
    mu = [-0.5, 2.0, 3.3, 5.0, 7.0]
    E, n, cell = _cmf_best("tri6", mu)
    assert cell.n_sites == 6
    for e, x in zip(E, mu):
        assert e == pytest.approx(brute_force_energy(vec6, x), abs=1e-12)
    assert E[1:4] == pytest.approx([V2 - 2.0 / 3, (V + V2) / 2 - 3.3 / 2, V + 2 * V2 - 2 * 5.0 / 3], abs=1e-12)
    assert n == pytest.approx([0, 1 / 3, 1 / 2, 2 / 3, 1], abs=1e-12)


@pytest.mark.slow
def test_cmf_t0_with_V2_tri12_plateau_edges():
    # the 12-site cluster holds every derived state: the winner's filling changes exactly at the
    # derived edges 12 V2, 3V - 3V2, 3V + 9V2, 6V - 6V2 (both neighbours are fixed points there)
    d = 1e-3
    mu = [x + s for x in EDGES[1:5] for s in (-d, d)]
    E, n, _ = _cmf_best("tri12", mu)
    for e, x in zip(E, mu):
        assert e == pytest.approx(envelope(x), abs=1e-12)
    assert n == pytest.approx([1 / 4, 1 / 3, 1 / 3, 1 / 2, 1 / 2, 2 / 3, 2 / 3, 3 / 4], abs=1e-12)


def test_ed_t0_with_V2_tri21():
    # exact classical limit on the 21-site torus {(4,1), (-1,5)} (a library torus on which no
    # NNN bond is doubled; ED refuses tri12 with V2 != 0). N = 7: one √3 sublattice,
    # 21 NNN bonds, E0 = 21 V2; N = 6: one particle less removes its 6 NNN bonds, 15 V2;
    # N = 8: a particle on an empty site has 3 occupied NN and no occupied NNN, 21 V2 + 3V.
    # Canonical step of the 1/3 solid: mu- = 6 V2, mu+ = 3V. Brute force over all 2^21
    # occupations confirms that these are the minima.
    vec = ((4, 1), (-1, 5))
    m = Model("triangular", t=0.0, V=V, V2=V2)
    e0 = {N: ground_state(m, vec, N).e0 for N in (6, 7, 8)}
    assert [e0[6], e0[7], e0[8]] == pytest.approx([15 * V2, 21 * V2, 21 * V2 + 3 * V], abs=1e-12)
    assert e0[7] - e0[6] == pytest.approx(6 * V2, abs=1e-12)
    assert e0[8] - e0[7] == pytest.approx(3 * V, abs=1e-12)
    E, Nc, _ = periodic_minima(vec)
    assert [E[Nc == N].min() for N in (6, 7, 8)] == pytest.approx([e0[6], e0[7], e0[8]], abs=1e-12)

