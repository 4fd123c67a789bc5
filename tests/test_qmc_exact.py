"""QMC (stochastic series expansion) against exact thermal averages of the same small torus.

Reference: full diagonalization computed here with numpy (tests/_qmc_exact.py), independent of
the engine and of phasemap's ED ("exact" beside each check). Every comparison is within
4 sigma of the run's own one-sigma binning error, and the errors are required to be small
(relative size stated per check) so that agreement means something.
"""

from __future__ import annotations

import numpy as np
import pytest

from _qmc_exact import compare as _compare
from _qmc_exact import free_fermion_chain, thermal, torus_bonds
from phasemap import Model
from phasemap.model import ConfigError
from phasemap.qmc import open_chain, run_graph, run_qmc

TRI9 = ((3, 0), (0, 3))
TRI12 = ((2, 2), (-2, 4))


# exact (full diagonalization in the test): isotropic triangular 9-site torus
def test_tri9_isotropic_against_exact():
    m = Model("triangular", t=0.3, V=1.0, mu=1.0)
    res = run_qmc(m, cluster="tri9", T=0.5, sweeps=20000, bins=20, seed=3)
    out = _compare(res, "triangular", TRI9, m, 0.5)
    assert res.decorrelated
    assert res.energy.error < 0.01 * abs(res.energy.value)  # sigma small: < 1 % of the value
    assert dict((k, e) for k, e, _ in out)["stiffness_d1"].error < 0.05 * 0.17


# exact: anisotropic hopping and interaction per family (strained triangular lattice), 9 sites
def test_tri9_anisotropic_against_exact():
    m = Model("triangular", t=(0.3, 0.1, 0.2), V=(1.0, 0.5, 0.8), mu=0.7)
    res = run_qmc(m, cluster="tri9", T=0.3, sweeps=20000, bins=20, seed=5)
    _compare(res, "triangular", TRI9, m, 0.3)
    assert res.filling.error < 0.005


# exact: 3x3 square torus, anisotropic (t_x != t_y, V_x != V_y)
def test_square_3x3_anisotropic_against_exact():
    m = Model("square", t=(0.5, 0.25), V=(1.0, 0.3), mu=0.4)
    res = run_qmc(m, size=(3, 3), T=0.5, sweeps=20000, bins=20, seed=7)
    _compare(res, "square", ((3, 0), (0, 3)), m, 0.5, keys=("energy", "filling", "compressibility", "stiffness"))


# exact: 12-site triangular torus, several anisotropic points down to low T (K point present)
@pytest.mark.slow
@pytest.mark.parametrize("t,V,mu,T", [((0.3, 0.1, 0.2), (1.0, 0.5, 0.8), 0.7, 0.4),
                                      ((0.1, 0.1, 0.15), (1.0, 1.0, 0.7), 1.5, 0.15),
                                      (0.2, 1.0, 3.0, 0.25)])
def test_tri12_against_exact(t, V, mu, T):
    m = Model("triangular", t=t, V=V, mu=mu)
    res = run_qmc(m, cluster="tri12", T=T, sweeps=30000, bins=20, seed=5)
    _compare(res, "triangular", TRI12, m, T)
    assert res.filling.error < 0.005


# exact: 4x3 square torus, anisotropic, S(Q) at X = (1/2, 0)
@pytest.mark.slow
def test_square_4x3_against_exact():
    m = Model("square", t=(0.5, 0.25), V=(1.0, 0.3), mu=0.4)
    res = run_qmc(m, size=(4, 3), T=0.5, sweeps=20000, bins=20, seed=7)
    cell, bonds = torus_bonds("square", ((4, 0), (0, 3)), m.t, m.V)
    X = np.array([0.5, 0.0])
    ex = thermal(cell.n_sites, bonds, m.mu, 0.5, sites=cell.sites, q=X)
    hit = np.nonzero(np.all(np.abs(res.momenta - X) < 1e-9, axis=1))[0][0]
    assert abs(res.sq[hit] - ex["sq"]) < 4 * res.sq_err[hit]
    _compare(res, "square", ((4, 0), (0, 3)), m, 0.5, keys=("energy", "filling", "compressibility", "stiffness"))


# exact: next-nearest-neighbour V2 on the smallest triangular torus without doubled V2 bonds (13 sites)
@pytest.mark.slow
def test_tri13_v2_against_exact():
    vec = ((-4, 1), (-1, -3))
    m = Model("triangular", t=0.25, V=1.0, V2=0.4, mu=1.5)
    res = run_qmc(m, cluster=vec, T=0.5, sweeps=10000, bins=20, seed=11)
    _compare(res, "triangular", vec, m, 0.5, keys=("energy", "filling", "compressibility"))


# exact: XX chain (one family, V = 0) = free fermions (Jordan-Wigner; Lieb, Schultz & Mattis 1961), open chain
@pytest.mark.parametrize("mu,T", [(0.0, 0.2), (0.6, 0.5), (-0.9, 1.0)])
def test_open_xx_chain_free_fermions(mu, T):
    L, t = 10, 0.5
    g = open_chain(L, t=t, mu=mu)
    est, *_ = run_graph(g, beta=1.0 / T, sweeps=20000, bins=20, seed=2)
    ex = free_fermion_chain(L, t, mu, T)
    for k in ("energy", "filling"):
        assert abs(est[k].value - ex[k]) < 4 * est[k].error, (k, est[k], ex[k])
        assert est[k].error < 0.01


# exact t = 0 limit (DESIGN.md §4): hard-core lattice gas n = 1/(1 + exp(-mu/T)) with V = 0
def test_lattice_gas_limit():
    m = Model("triangular", t=0.0, V=0.0, mu=0.3)
    res = run_qmc(m, cluster="tri12", T=0.5, sweeps=4000, bins=20, seed=1)
    n = 1 / (1 + np.exp(-0.3 / 0.5))
    assert abs(res.filling.value - n) < 4 * res.filling.error
    assert abs(res["stiffness"].value) == 0.0


# common practice, no source: reproducibility and independence of seeds
def test_same_seed_identical_numbers():
    m = Model("triangular", t=0.2, V=1.0, mu=2.0)
    a = run_qmc(m, cluster="tri9", T=0.3, sweeps=2000, bins=10, seed=42)
    b = run_qmc(m, cluster="tri9", T=0.3, sweeps=2000, bins=10, seed=42)
    c = run_qmc(m, cluster="tri9", T=0.3, sweeps=2000, bins=10, seed=43)
    assert a.to_dict()["estimates"] == b.to_dict()["estimates"]
    assert np.array_equal(a.sq, b.sq)
    assert a.energy.value != c.energy.value


# common practice: bad input -> ConfigError naming the field
def test_refusals():
    with pytest.raises(ConfigError, match="U:"):
        run_qmc(Model("triangular", t=0.1, V=1, U=5.0), cluster="tri9", T=1)
    with pytest.raises(ConfigError, match="t:"):
        Model("triangular", t=-0.1, V=1)
    with pytest.raises(ConfigError, match="cluster:.*doubled|cluster:.*itself"):
        run_qmc(Model("triangular", t=0.1, V=1, V2=0.2), cluster="tri9", T=1)
    with pytest.raises(ConfigError, match="cluster:.*doubled|cluster:.*itself"):
        run_qmc(Model("triangular", t=0.1, V=1, V2=0.2), cluster="tri12", T=1)
    with pytest.raises(ConfigError, match="cluster/size"):
        run_qmc(Model("triangular", t=0.1, V=1), T=1)
    with pytest.raises(ConfigError, match="size:"):
        run_qmc(Model("triangular", t=0.1, V=1), size=(1, 3), T=1)
    with pytest.raises(ConfigError, match="T:"):
        run_qmc(Model("triangular", t=0.1, V=1), cluster="tri9", T=-1)
    with pytest.raises(ConfigError, match="sweeps:"):
        run_qmc(Model("triangular", t=0.1, V=1), cluster="tri9", T=1, sweeps=5, bins=10)
