"""The cluster-mean-field Hamiltonian against an independent dense construction (tests/_cluster_dense.py).

* Zero boundary fields (V = V2 = 0 and a state without condensate): the decoupled terms vanish
  and the cluster problem is the exact diagonalisation of the open cluster, all particle
  numbers. The solver's branch started from a Fock seed (phi = 0 stays 0: a number eigenstate
  has <b> = 0) must have E/N_C = lowest eigenvalue of the open-cluster H - mu N (exact).
* Any converged branch, with V, V2, U, t on: its (n, phi) must be a fixed point of the map
  built here (ground state of the dense cluster Hamiltonian with the boundary fields of these
  (n, phi)), and its energy the variational energy <H>/N of that cluster-product state,
  computed here (exact for the cluster-product state).
* The Mott-lobe path (phasemap.cmf.stability, a second, number-conserving Hamiltonian) against
  the same dense construction: sector energies E(N0 - 1), E(N0), E(N0 + 1), the susceptibility
  chi_ab = <0|B_a (H - E0)^-1 Q B_b|0> (B = b + b^+; second-order perturbation theory in the
  boundary field -Phi_a B_a, computed here by a sum over the eigenstates) and the largest
  eigenvalue of chi^1/2 T chi^1/2 (T = boundary hopping built here). Both scaling paths are
  checked against one reference, and against each other (the solver's Mott branch has the
  energy of the stability path's sector-N0 state).
"""

import numpy as np
import pytest
from _cluster_dense import DenseCluster, cluster_bonds

from phasemap import Model
from phasemap.cmf import solve_cmf_batch
from phasemap.cmf.stability import MottCluster
from phasemap.params import ParamBatch


def _dense(res):
    cell = res.cell
    lattice = cell.lattice.name
    bonds = cluster_bonds(lattice, cell.sites, cell.vectors)
    return lattice, bonds, DenseCluster(cell.n_sites, res.batch.n_max)


def _open_cluster_ground(model, cluster):
    """Lowest eigenvalue (per site) and densities of the open cluster, built here."""
    res = solve_cmf_batch(ParamBatch.from_models([model]), cluster=cluster, n_random=0, patterns=())
    lattice, bonds, dc = _dense(res)
    H = dc.hamiltonian(lattice, bonds, model.t, model.V, model.V2, None if model.hardcore else model.U, model.mu)
    w, v = np.linalg.eigh(H)
    return res, w, v, dc


@pytest.mark.parametrize("lattice,cluster,n_max,t,mu", [
    ("square", "sq2x2", 3, 0.03, 0.45),  # inside the n = 1 lobe
    ("square", "sq2x2", 3, 0.015, 1.45),  # inside the n = 2 lobe
    ("triangular", "tri3", 3, 0.02, 0.5),
])
def test_zero_field_softcore_cluster_equals_open_cluster_ed(lattice, cluster, n_max, t, mu):
    # exact: without boundary fields the cluster problem is the open cluster itself
    m = Model(lattice, t=t, U=1.0, n_max=n_max, mu=mu)
    res, w, v, dc = _open_cluster_ground(m, cluster)
    assert w[1] - w[0] > 1e-6  # nondegenerate: the comparison of densities is meaningful
    S = res.cell.n_sites
    fock = [k for k, s in enumerate(res.seeds) if s.name.startswith("uniform n=")]
    assert fock
    for k in fock:
        # phi stays 0 up to the Lanczos residual (eig_tol 1e-11; dim 256 > dense_max): other-N
        # admixtures of that size give <b> of that size, the stable insulator does not amplify them
        assert res.converged[0, k] and np.max(np.abs(res.phi[0, k])) < 1e-8
        assert res.energy[0, k] == pytest.approx(w[0] / S, abs=1e-10), res.seeds[k].name
        assert res.n[0, k] == pytest.approx(dc.expectations(v[:, 0])[0], abs=1e-9)
    # the Mott state: N = n S bosons, and this branch wins at these points
    assert res.n[0, fock[0]].sum() == pytest.approx(round(mu + 0.5) * S, abs=1e-6)
    assert res.energy[0, int(res.best()[0])] == pytest.approx(w[0] / S, abs=1e-10)


CASES = [
    # hard-core triangular with V and V2 (supersolid / superfluid / solid neighbourhoods)
    ("triangular", "tri6", dict(t=0.08, V=1.0, V2=0.1, mu=2.0)),
    ("triangular", "tri6", dict(t=0.25, V=1.0, V2=0.1, mu=3.3)),
    ("triangular", "tri3", dict(t=(0.1, 0.07, 0.05), V=(1.0, 0.8, 0.9), V2=0.2, mu=1.5)),
    # soft-core with V and V2 on both lattices
    ("square", "sq2x2", dict(t=0.05, U=1.0, n_max=2, V=0.1, V2=0.05, mu=0.6)),
    ("square", "sq2x2", dict(t=0.12, U=1.0, n_max=2, V=0.2, V2=0.1, mu=1.0)),
    ("triangular", "tri3", dict(t=(0.04, 0.03, 0.05), U=1.0, n_max=3, V=(0.1, 0.15, 0.05), V2=0.05, mu=0.9)),
]


@pytest.mark.parametrize("lattice,cluster,kw", CASES)
def test_converged_branches_are_fixed_points_of_the_independent_hamiltonian(lattice, cluster, kw):
    m = Model(lattice, **kw)
    pats = ("checkerboard",) if lattice == "square" else ("sqrt3",)
    res = solve_cmf_batch(ParamBatch.from_models([m]), cluster=cluster, tol=1e-11, n_random=1, patterns=pats)
    lattice, bonds, dc = _dense(res)
    U = None if m.hardcore else m.U
    checked = 0
    for k in np.nonzero(res.converged[0])[0]:
        n, phi = res.n[0, k], res.phi[0, k]
        H = dc.hamiltonian(lattice, bonds, m.t, m.V, m.V2, U, m.mu, n, phi)
        w, v = np.linalg.eigh(H)
        if w[1] - w[0] < 1e-7:  # degenerate cluster ground state: the map is not single-valued
            continue
        g = v[:, 0]
        n2, phi2 = dc.expectations(g)
        assert n2 == pytest.approx(n, abs=1e-7), res.seeds[k].name
        assert np.abs(phi2) == pytest.approx(np.abs(phi), abs=1e-7), res.seeds[k].name
        E = dc.variational_energy(lattice, bonds, m.t, m.V, m.V2, U, m.mu, g)
        assert res.energy[0, k] == pytest.approx(E, abs=1e-9), res.seeds[k].name
        checked += 1
    assert checked >= 3


def _sector(dc, H, N):
    idx = np.nonzero(np.isclose(dc.N, N))[0]
    return idx, H[np.ix_(idx, idx)]


STAB = [
    ("square", "sq2x2", dict(t=0.03, U=1.0, n_max=3, V=0.04, V2=0.03), 1),  # 2 NNN bonds inside
    ("square", "sq2x1", dict(t=0.03, U=1.0, n_max=3, V=0.05, V2=0.02), 1),
    ("triangular", "tri3", dict(t=(0.012, 0.008, 0.01), U=1.0, n_max=3, V=0.03, V2=0.02), 2),
]


@pytest.mark.parametrize("lattice,cluster,kw,filling", STAB)
def test_mott_stability_path_against_independent_construction(lattice, cluster, kw, filling):
    m = Model(lattice, **kw)
    mc = MottCluster(m, cluster, filling=filling)
    cell = mc.cluster.cell
    S = cell.n_sites
    bonds = cluster_bonds(lattice, cell.sites, cell.vectors)
    dc = DenseCluster(S, m.n_max)
    # the insulating boundary: every outside site holds `filling` bosons, no condensate
    H = dc.hamiltonian(lattice, bonds, m.t, m.V, m.V2, m.U, 0.0, n_out=np.full(S, float(filling)))
    N0 = filling * S
    E = {}
    for d in (-1, 0, 1):
        idx, Hs = _sector(dc, H, N0 + d)
        w, v = np.linalg.eigh(Hs)
        E[d] = (w, v, idx)
        assert mc.E[d] == pytest.approx(w[0], abs=1e-10), d
    window = (E[0][0][0] - E[-1][0][0], E[1][0][0] - E[0][0][0])
    assert mc.mu_window() == pytest.approx(window, abs=1e-10)
    mu = 0.5 * sum(window)
    # susceptibility by a sum over all eigenstates of the N0 +- 1 sectors (H - mu N)
    w0, v0, i0 = E[0]
    g = np.zeros(dc.dim)
    g[i0] = v0[:, 0]
    e0 = w0[0] - mu * N0
    chi = np.zeros((S, S))
    for d in (-1, 1):
        w, v, idx = E[d]
        Bg = np.array([((dc.b[a] + dc.b[a].T) @ g)[idx] for a in range(S)])  # (S, dim_d)
        amp = Bg @ v  # <m|B_a|0>
        chi += (amp / (w - mu * (N0 + d) - e0)) @ amp.T
    assert mc.susceptibility(mu) == pytest.approx(chi, abs=1e-9)
    T = np.zeros((S, S))
    for a, b, f in bonds["inter"]:
        T[a, b] += m.t[f]
        T[b, a] += m.t[f]
    lw, lU = np.linalg.eigh(chi)
    sq = (lU * np.sqrt(np.clip(lw, 0, None))) @ lU.T
    lam = np.linalg.eigvalsh(sq @ T @ sq)[-1]
    assert mc.instability(mu) == pytest.approx(lam, abs=1e-9)
    assert 0 < lam < 1  # inside the lobe at these points


def test_two_cluster_paths_agree_on_the_mott_state_and_its_edge():
    # the solver (phasemap.cmf.selfconsistency) and the stability path (phasemap.cmf.stability)
    # describe the same zero-condensate state: same energy; and the solver's superfluid seed
    # condenses just outside the stability path's lobe edge, not just inside it
    m = Model("square", t=0.04, U=1.0, n_max=3)
    mc = MottCluster(m, "sq2x2", filling=1)
    S = 4
    from scipy.optimize import brentq

    hi = mc.mu_window()[1]
    mid, _ = mc.most_stable()
    mu_c = brentq(lambda x: mc.instability(x) - 1.0, mid, hi - 1e-9, xtol=1e-12)
    mus = [mid, mu_c - 0.01, mu_c + 0.01]
    batch = ParamBatch.from_models([m.replace(mu=x) for x in mus])
    res = solve_cmf_batch(batch, cluster="sq2x2", tol=1e-10, n_random=0, patterns=(), continuation=False)
    kf, km = res.seed_names.index("superfluid"), res.seed_names.index("uniform n=1")
    for p, x in enumerate(mus):
        assert res.converged[p, km]
        assert res.energy[p, km] == pytest.approx((mc.E[0] - x * S) / S, abs=1e-10)
    assert res.converged[:, kf].all()
    assert np.max(res.phi[0, kf]) < 1e-6 and np.max(res.phi[1, kf]) < 1e-6
    assert np.max(res.phi[2, kf]) > 1e-2
