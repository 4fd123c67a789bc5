"""Exactly solvable limits of site-decoupled mean field, and an independent energy check.

Reference values are derived in this file (not read from the code):
* t = 0 hard-core triangular: classical lattice gas, plateaus n = 0, 1/3, 2/3, 1 with edges at
  mu/V = 0, 3, 6 and energies min(0, -mu/3, V - 2mu/3, 3V - mu) per site (exact classical limit).
* V = 0 hard-core: product state with phi^2 = n(1-n) gives n = (1 + mu/zt)/2, E = -(zt/4)(1 + mu/zt)^2
  (exact for the product state).
* Square lattice, V = 2t, mu = zV/2: hard-core bosons = isotropic Heisenberg antiferromagnet in zero
  field (Matsubara & Matsuda 1956 mapping; exact SU(2) symmetry), so the checkerboard (Neel along z)
  and superfluid (Neel in the xy plane) product states are degenerate, E = -2t per site (derived below).
* Energy: <H>/N of the product state recomputed here from the Solution's sites, densities and
  condensates with an independent neighbour table; lower bound E >= E0 >= Anderson's cluster bound
  (sum of lowest eigenvalues of the triangle / bond Hamiltonians; P. W. Anderson, Phys. Rev. 83,
  1260 (1951) -- quoted from memory) computed here by exact diagonalisation of 3 or 2 sites.
"""

import itertools

import numpy as np
import pytest
import scipy.linalg

import phasemap
from phasemap.mf import solve_batch
from phasemap.params import points
from phasemap.scan import filling_curve

# geometry written out here independently of phasemap.lattice: the 12-site cell {(2,2), (-2,4)}
# (det = 12), the bond vectors of length 1 (triangular (1,0), (0,1), (-1,1) for r = i e1 + j e2,
# e1 = (1,0), e2 = (1/2, sqrt3/2)) and of length sqrt3 / sqrt2 (next-nearest)
CELL = {"triangular": ((2, 2), (-2, 4)), "square": ((2, 0), (0, 2))}
FAMILIES = {"triangular": [(1, 0), (0, 1), (-1, 1)], "square": [(1, 0), (0, 1)]}
NNN = {"triangular": [(1, 1), (2, -1), (-1, 2)], "square": [(1, 1), (1, -1)]}


def _key(ij, A):
    x = np.linalg.solve(np.asarray(A, float).T, np.asarray(ij, float))
    return tuple(np.round((x - np.floor(x + 1e-9)) * 1e6).astype(int) % 1000000)


def neighbour_table(sites, lattice):
    """nbr[f][s] = index of sites[s] + d_f modulo the search cell; also NNN."""
    A = CELL[lattice]
    keys = {_key(s, A): n for n, s in enumerate(sites)}
    assert len(keys) == len(sites)
    nn = [[keys[_key(np.add(s, d), A)] for s in sites] for d in FAMILIES[lattice]]
    nnn = [[keys[_key(np.add(s, d), A)] for s in sites] for d in NNN[lattice]]
    return np.array(nn), np.array(nnn)


def product_energy_hardcore(sol):
    """<H>/N of the hard-core product state with site densities n and condensates phi (real, >= 0)."""
    m = sol.model
    n, phi = np.asarray(sol.densities), np.asarray(sol.condensate)
    nn, nnn = neighbour_table(sol.sites, m.lattice)
    E = 0.0
    for f, j in enumerate(nn):
        E += np.sum(-2 * m.t[f] * phi * phi[j] + m.V[f] * n * n[j])
    for j in nnn:
        E += m.V2 * np.sum(n * n[j])
    return E / len(n) - m.mu * n.mean()


def local_states_softcore(sol):
    """Rebuild each site's local ground state from the neighbours' <n>, <b> (independent eigh)."""
    m = sol.model
    n, phi = np.asarray(sol.densities), np.asarray(sol.condensate)
    nn, nnn = neighbour_table(sol.sites, m.lattice)
    d = m.n_max + 1
    occ = np.arange(d, dtype=float)
    b = np.diag(np.sqrt(occ[1:]), 1)
    out = []
    for s in range(len(n)):
        Phi = sum(m.t[f] * (phi[nn[f, s]] + phi[np.nonzero(nn[f] == s)[0][0]]) for f in range(len(nn)))
        eps = sum(m.V[f] * (n[nn[f, s]] + n[np.nonzero(nn[f] == s)[0][0]]) for f in range(len(nn)))
        eps += m.V2 * sum(n[nnn[k, s]] + n[np.nonzero(nnn[k] == s)[0][0]] for k in range(len(nnn)))
        h = np.diag(0.5 * m.U * occ * (occ - 1) + (eps - m.mu) * occ) - Phi * (b + b.T)
        w, v = scipy.linalg.eigh(h)
        g = v[:, 0] * np.sign(v[:, 0].sum())
        out.append(g)
    return np.array(out), occ, b


def product_energy_softcore(sol):
    g, occ, b = local_states_softcore(sol)
    m = sol.model
    n = (g**2 * occ).sum(1)
    phi = np.einsum("si,ij,sj->s", g, b, g)
    onsite = (g**2 * 0.5 * m.U * occ * (occ - 1)).sum(1)
    nn, nnn = neighbour_table(sol.sites, m.lattice)
    E = onsite.sum() - m.mu * n.sum()
    for f, j in enumerate(nn):
        E += np.sum(-2 * m.t[f] * phi * phi[j] + m.V[f] * n * n[j])
    for j in nnn:
        E += m.V2 * np.sum(n * n[j])
    return E / len(n), n, phi


def anderson_bound(model):
    """Lower bound on E0/N: triangular = 2 min eig(h_triangle), square = 2 min eig(h_bond)."""
    d = model.n_max + 1
    occ = np.arange(d, dtype=float)
    b = np.diag(np.sqrt(occ[1:]), 1)
    N = np.diag(occ)
    one = np.eye(d)
    ons = np.diag(0.5 * (0.0 if model.hardcore else model.U) * occ * (occ - 1)) if not model.hardcore else 0 * N
    t, V, mu = max(model.t), max(model.V), model.mu
    assert len(set(model.t)) == 1 and len(set(model.V)) == 1 and model.V2 == 0

    def op(o, k, L):
        mats = [one] * L
        mats[k] = o
        out = mats[0]
        for x in mats[1:]:
            out = np.kron(out, x)
        return out

    if model.lattice == "triangular":  # 2N triangles, each bond in 2, each site in 6
        L, bonds, share_b, share_s = 3, [(0, 1), (1, 2), (0, 2)], 0.5, 1 / 6
    else:  # 2N bonds, each site in 4
        L, bonds, share_b, share_s = 2, [(0, 1)], 1.0, 1 / 4
    h = np.zeros((d**L, d**L))
    for i, j in bonds:
        hop = op(b.T, i, L) @ op(b, j, L)
        h += share_b * (-t * (hop + hop.T) + V * op(N, i, L) @ op(N, j, L))
    for i in range(L):
        h += share_s * (op(ons, i, L) - mu * op(N, i, L))
    return 2 * np.linalg.eigvalsh(h)[0]


def classical_triangular(mu, V=1.0):
    # exact classical ground-state energy per site of the hard-core triangular lattice gas, t = 0
    return min(0.0, -mu / 3, V - 2 * mu / 3, 3 * V - mu)


# ----------------------------------------------------------------------------------------------
def test_t0_triangular_plateaus_and_edges():
    # exact classical limit (t = 0): plateaus 0, 1/3, 2/3, 1; edges mu/V = 0, 3, 6
    m = phasemap.Model(lattice="triangular", t=0.0, V=1.0)
    mu = np.linspace(-0.9, 6.9, 14)  # no grid point on a degenerate edge
    fc = filling_curve(m, mu=mu, relative=True, tol=5e-5)
    plats = [p for p in fc.plateaus if p["width"] > 1e-3]
    assert [p["fraction"] for p in plats] == ["0", "1/3", "2/3", "1"]
    assert [p["label"] for p in plats] == ["empty", "solid 1/3", "solid 2/3", "full"]
    edges = [(p["mu_lo"], p["mu_hi"]) for p in plats]
    exact = [(-np.inf, 0.0), (0.0, 3.0), (3.0, 6.0), (6.0, np.inf)]
    for (a, b), (ea, eb) in zip(edges, exact):
        for got, ref in ((a, ea), (b, eb)):
            assert (got == ref) if np.isinf(ref) else abs(got - ref) < 1e-4, (edges)
    # energies equal the exact classical ground-state energies
    for p, mu_ in zip(fc.dataset["energy"].values, mu):
        assert abs(p - classical_triangular(mu_)) < 1e-10


@pytest.mark.parametrize("mu,full_sublattices", [(1.5, 1), (4.5, 2)])
def test_t0_solids_are_sqrt3(mu, full_sublattices):
    # exact classical limit: 1/3 solid = one sqrt3 sublattice s = (i - j) mod 3 full, 2/3 = two full
    s = phasemap.solve(phasemap.Model(lattice="triangular", t=0.0, V=1.0, mu=mu))
    assert s.converged and s.phase == "solid"
    sub = (s.sites[:, 0] - s.sites[:, 1]) % 3
    occ = [np.unique(np.round(s.densities[sub == k], 12)) for k in range(3)]
    assert all(len(o) == 1 for o in occ), occ  # constant on each sublattice
    vals = sorted(float(o[0]) for o in occ)
    assert vals == [0.0] * (3 - full_sublattices) + [1.0] * full_sublattices
    assert np.allclose(s.condensate, 0.0)
    assert s.order["q_max"] in ("K", "K'") and abs(s.order["sq_max"] - 1 / 9) < 1e-12


@pytest.mark.parametrize("lattice", ["square", "triangular"])
def test_hardcore_V0_filling_and_energy(lattice):
    # exact for the product state: n = (1 + mu/zt)/2 for |mu| < zt, E = -(zt/4)(1 + mu/zt)^2;
    # n = 0 (E = 0) below, n = 1 (E = -mu) above
    z, t = {"square": 4, "triangular": 6}[lattice], 0.7
    mus = np.array([-1.3, -0.97, -0.5, -0.1, 0.0, 0.33, 0.8, 0.99, 1.4]) * z * t
    base = phasemap.Model(lattice=lattice, t=t, V=0.0)
    for mu in mus:
        s = phasemap.solve(base.replace(mu=float(mu)))
        assert s.converged, s.flags
        x = mu / (z * t)
        n_ref = np.clip((1 + x) / 2, 0, 1)
        E_ref = -(z * t / 4) * (1 + x) ** 2 if abs(x) < 1 else (0.0 if x <= -1 else -mu)
        assert abs(s.filling - n_ref) < 1e-8, (mu, s.filling, n_ref)
        assert np.allclose(s.densities, n_ref, atol=1e-8)
        assert abs(s.energy - E_ref) < 1e-10
        assert s.phase == ("empty" if x <= -1 else "full" if x >= 1 else "superfluid")


def _su2_point(V_over_t):
    t = 1.0
    V = V_over_t * t
    m = phasemap.Model(lattice="square", t=t, V=V, mu=4 * V / 2)  # mu = zV/2: zero effective field
    return phasemap.solve(m)


def test_square_V2t_checkerboard_and_superfluid_degenerate():
    # Matsubara & Matsuda 1956 mapping: at V = 2t, mu = zV/2 = 2V the hard-core model is the
    # isotropic Heisenberg AF (J = 2t) in zero field: exact SU(2) symmetry -> the z-Neel product state
    # (checkerboard solid n = 1,0) and the xy-Neel state (superfluid n = 1/2, phi = 1/2) are degenerate.
    # Derivation (z = 4, mu = 2V): checkerboard E = 0 - mu/2 = -V; superfluid (n = 1/2, phi^2 = 1/4)
    # E = -z t phi^2 + (z/2) V n^2 - mu n = -t + V/2 - V = -t - V/2; with V = 2t both equal -2t.
    s = _su2_point(2.0)
    br = {b["seed"]: b for b in s.branches}
    cb, sf = br["solid checkerboard 1/2"], br["superfluid"]
    assert cb["converged"] and sf["converged"]
    assert abs(cb["filling"] - 0.5) < 1e-10 and cb["condensate_max"] < 1e-8  # a genuine solid
    assert abs(sf["filling"] - 0.5) < 1e-10 and abs(sf["condensate_max"] - 0.5) < 1e-8
    assert abs(cb["energy"] - (-2.0)) < 1e-10 and abs(sf["energy"] - (-2.0)) < 1e-10
    assert abs(cb["energy"] - sf["energy"]) < 1e-12
    assert abs(s.energy - (-2.0)) < 1e-10


@pytest.mark.parametrize("ratio,winner", [(2.2, "solid"), (1.8, "superfluid")])
def test_square_away_from_su2_degeneracy_lifts(ratio, winner):
    # Matsubara & Matsuda mapping: V > 2t is an Ising-like XXZ AF (checkerboard solid),
    # V < 2t easy-plane (superfluid); the branch energies -V/2 - V/2 = -V vs -t - V/2 (derived above)
    s = _su2_point(ratio)
    br = {b["seed"]: b for b in s.branches}
    assert abs(br["solid checkerboard 1/2"]["energy"] - (-ratio)) < 1e-10
    assert abs(br["superfluid"]["energy"] - (-1.0 - ratio / 2)) < 1e-10
    assert s.phase == winner


HC_POINTS = [("triangular", tv, mv) for tv, mv in itertools.product([0.0, 0.05, 0.2, 0.5], [-0.5, 1.0, 3.0, 4.4, 6.5])]


@pytest.mark.parametrize("lattice,tv,muv", HC_POINTS + [("square", 0.3, 1.0), ("square", 0.1, 2.0)])
def test_energy_is_product_state_expectation_hardcore(lattice, tv, muv):
    # exact for a product state: <H>/N from densities and condensates; phi^2 = n(1 - n) for a pure
    # hard-core site state; E >= Anderson bound (quoted from memory); E <= best classical state
    m = phasemap.Model(lattice=lattice, t=tv, V=1.0, mu=muv)
    s = phasemap.solve(m)
    assert s.converged
    n, phi = s.densities, s.condensate
    assert np.allclose(phi, np.sqrt(np.clip(n * (1 - n), 0, None)), atol=1e-7)
    assert abs(s.energy - product_energy_hardcore(s)) < 1e-10
    assert s.energy >= anderson_bound(m) - 1e-12
    if lattice == "triangular":
        assert s.energy <= classical_triangular(muv) + 1e-12  # classical states are product states
        if tv == 0.0:
            assert abs(s.energy - classical_triangular(muv)) < 1e-12


@pytest.mark.parametrize("lattice,x,mu", [("square", 0.1, 0.4), ("square", 0.25, 0.5), ("square", 0.1, 1.3),
                                          ("triangular", 0.3, 1.7), ("triangular", 0.05, 0.5)])
def test_energy_is_product_state_expectation_softcore(lattice, x, mu):
    # exact for a product state: rebuild each site's Gutzwiller state from its neighbours' <n>, <b>
    # (self-consistency), then <H>/N; Anderson bound in the same n_max-truncated space
    z = {"square": 4, "triangular": 6}[lattice]
    m = phasemap.Model(lattice=lattice, t=x / z, U=1.0, mu=mu, n_max=4)
    s = phasemap.solve(m)
    assert s.converged
    E, n, phi = product_energy_softcore(s)
    assert np.allclose(n, s.densities, atol=1e-7) and np.allclose(phi, s.condensate, atol=1e-7)
    assert abs(s.energy - E) < 1e-9
    assert s.energy >= anderson_bound(m) - 1e-12
    # a Fock state |k> on every site is a product state: E_MF <= min_k (U k(k-1)/2 - mu k)
    assert s.energy <= min(0.5 * k * (k - 1) - mu * k for k in range(5)) + 1e-12


def test_energy_of_every_converged_branch_is_a_product_state_energy():
    # exact for a product state: rerun the seeds with solve_batch and check every converged branch,
    # not only the winner (the winner is chosen by comparing these numbers)
    m = phasemap.Model(lattice="triangular", t=0.08, V=1.0, mu=2.9)
    res = solve_batch(points(m, {"mu": [2.9]}))
    sites = res.cell.sites
    checked = 0
    for k, seed in enumerate(res.seeds):
        if not res.converged[0, k]:
            continue
        fake = type("S", (), dict(model=m, densities=res.n[0, k], condensate=np.abs(res.phi[0, k]), sites=sites))
        assert abs(res.energy[0, k] - product_energy_hardcore(fake)) < 1e-10, seed.name
        checked += 1
    assert checked >= 5
