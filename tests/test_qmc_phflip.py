"""The particle-hole flip update of the QMC engine (``phasemap.qmc.kernel``, docs/qmc.md).

n_i -> 1 - n_i for the whole configuration, accepted with min(1, W'/W). Checked against exact
thermal averages from full diagonalization computed in the test with numpy (tests/_qmc_exact.py,
independent of the engine): at the particle-hole-symmetric chemical potential (mu = half the sum
of a site's couplings: 3V isotropic, V1 + V2 + V3 with anisotropy, + 3 V2 with next-nearest
repulsion), where the flip is accepted often, and away from it, where a wrong acceptance ratio
would drag the filling towards 1 - n. Within 4 sigma of the run's own binning error.
"""

from __future__ import annotations

import numpy as np
import pytest

from _qmc_exact import thermal, torus_bonds
from phasemap import Model
from phasemap.qmc import run_graph, run_qmc
from phasemap.qmc.geometry import torus
from phasemap.qmc.kernel import NREC, flip_table
from phasemap.qmc.run import analyze, not_decorrelated

TRI9 = ((3, 0), (0, 3))
TRI13 = ((-4, 1), (-1, -3))  # smallest triangular torus that accepts V2 (docs/qmc.md)


def _check(res, vectors, model, T, q):
    """energy, filling, compressibility and S(q)/N within 4 sigma of the exact thermal averages."""
    cell, bonds = torus_bonds("triangular", vectors, model.t, model.V, model.V2)
    ex = thermal(cell.n_sites, bonds, model.mu, T, sites=cell.sites, q=np.asarray(q, float))
    hit = np.nonzero(np.all(np.abs(np.mod(res.momenta - np.asarray(q) + 0.5, 1) - 0.5) < 1e-9, axis=1))[0][0]
    rows = [(k, res[k].value, res[k].error, ex[k]) for k in ("energy", "filling", "compressibility")]
    rows.append(("S(q)/N", res.sq[hit], res.sq_err[hit], ex["sq"]))
    for name, v, e, x in rows:
        assert e > 0, name
        assert abs(v - x) < 4 * e, f"{name}: qmc {v:.6f} ± {e:.2g}, exact {x:.6f}"
    return ex


# exact (full diagonalization in the test): vertex weights of an anisotropic model are not
# flip-invariant one by one, so the acceptance is < 1 even at the symmetric mu = V1 + V2 + V3
@pytest.mark.parametrize("mu,T,acc_range", [(2.3, 0.3, (0.05, 0.95)),   # symmetric point
                                            (2.0, 0.4, (1e-3, 0.5))])   # not symmetric
def test_tri9_anisotropic_flip_against_exact(mu, T, acc_range):
    m = Model("triangular", t=(0.3, 0.1, 0.2), V=(1.0, 0.5, 0.8), mu=mu)
    res = run_qmc(m, cluster="tri9", T=T, sweeps=20000, bins=20, seed=5)
    _check(res, TRI9, m, T, (2 / 3, 1 / 3))
    assert res.filling.error < 0.002
    acc = res.info["flip_acceptance"][0]
    assert acc_range[0] < acc < acc_range[1], acc  # the update is exercised (and not always taken)


# exact: isotropic half filling mu = 3V, low T where the loops alone hardly change N on 9 sites:
# every vertex weight is flip-invariant, the flip is always accepted
def test_tri9_half_filling_flip_against_exact():
    m = Model("triangular", t=0.15, V=1.0, mu=3.0)
    res = run_qmc(m, cluster="tri9", T=0.1, sweeps=20000, bins=20, seed=6)
    assert res.info["flip_acceptance"] == [1.0]
    cell, bonds = torus_bonds("triangular", TRI9, m.t, m.V)
    ex = thermal(cell.n_sites, bonds, m.mu, 0.1, sites=cell.sites, q=np.array([2 / 3, 1 / 3]))
    for k, x in (("energy", ex["energy"]), ("filling", ex["filling"]), ("S(K)/N", ex["sq"]),
                 ("compressibility", ex["compressibility"])):
        assert res[k].error > 0 and abs(res[k].value - x) < 4 * res[k].error, (k, res[k], x)


# exact: anisotropic hopping and V plus next-nearest V2 on the 13-site torus, at the symmetric
# mu = V1 + V2 + V3 + 3 V2 and away from it; S(Q) at the first non-zero momentum of the torus
@pytest.mark.parametrize("mu,T", [(2.3 + 3 * 0.3, 0.4), pytest.param(2.6, 0.5, marks=pytest.mark.slow)])
def test_tri13_v2_flip_against_exact(mu, T):
    m = Model("triangular", t=(0.3, 0.15, 0.2), V=(1.0, 0.5, 0.8), V2=0.3, mu=mu)
    res = run_qmc(m, cluster=TRI13, T=T, sweeps=20000, bins=20, seed=12)
    q = res.momenta[np.argmax(np.linalg.norm(res.momenta, axis=1) > 0)]
    _check(res, TRI13, m, T, q)
    assert res.info["flip_acceptance"][0] > 1e-2, res.info["flip_acceptance"]


def test_flip_table_is_the_weight_ratio_of_the_flipped_vertex():
    # direct check of the table against the vertex weights (the ratio the Metropolis test uses)
    m = Model("triangular", t=(0.3, 0.15, 0.2), V=(1.0, 0.5, 0.8), V2=0.3, mu=2.0)
    g = torus(m, TRI13)
    lf = flip_table(g.wtab)
    for ty in range(g.wtab.shape[0]):
        for c in range(16):
            w, wf = g.wtab[ty, c], g.wtab[ty, c ^ 15]
            if w > 0:
                assert lf[ty, c] == (np.log(wf) - np.log(w) if wf > 0 else -np.inf)
    # isotropic, nearest neighbours only, mu = 3V: every vertex is flip-invariant (ratio exactly 1)
    g = torus(Model("triangular", t=0.1, V=1.0, mu=3.0), size=(6, 6))
    assert np.all(flip_table(g.wtab) == 0.0)


# exact symmetry N <-> N_sites - N of the half-filled model: a 9-site torus at t/V = 0.08, beta V = 40
# is a frozen regime for the loops (without the flip both seeded chains stay at one particle number
# for all sweeps); with the flip the chain visits N and 9 - N equally often
def test_half_filling_chain_visits_both_sectors():
    m = Model("triangular", t=0.08, V=1.0, mu=3.0)
    g = torus(m, "tri9")
    for flip in (False, True):
        est, _, _, outs = run_graph(g, beta=40.0, sweeps=4000, bins=10, seed=2, chains=2, workers=1, ph_flip=flip)
        for o in outs:
            Np = o["rec"][:, 1]
            if not flip:
                assert np.mean(np.diff(Np) != 0) < 0.01  # frozen
            else:
                odd = np.mean(Np % 2 == 1)
                assert 0.45 < odd < 0.55, odd  # N and 9 - N have opposite parity
                assert o["flip_accepted"] == o["flip_attempts"] > 0
    assert abs(est["filling"].value - 0.5) < 1e-12 and est["filling"].decorrelated


# the flip makes the filling blind to chains frozen in different |N - N_sites/2| sectors (measured on
# 12x12, t/V = 0.08, beta V = 120: one chain at 71/73, one at 72 particles for 64000 sweeps); the
# compressibility must still flag it (between-chain check, Gelman & Rubin, Statist. Sci. 7, 457 (1992))
def test_chains_in_different_particle_hole_sectors_are_flagged():
    g = torus(Model("triangular", t=0.08, V=1.0, mu=3.0), size=(12, 12))
    rng = np.random.default_rng(1)

    def chain(numbers):
        rec = np.zeros((4000, NREC))
        rec[:, 0] = 30000 + rng.normal(0, 50, 4000)  # operators
        rec[:, 1] = numbers
        rec[:, 4] = 0.039 + rng.normal(0, 0.002, 4000)  # |rho_K|^2
        rec[:, 5] = rec[:, 4] ** 2
        return {"rec": rec, "sq_bins": np.zeros((8, len(g.momenta)))}

    mirrored = np.where(np.arange(4000) % 2 == 0, 71, 73)  # 71 <-> 73 by the flip
    est, _, _ = analyze(g, [chain(mirrored), chain(np.full(4000, 72))], beta=120.0, bins=8)
    assert est["filling"].value == 0.5 and est["filling"].decorrelated  # blind
    assert not_decorrelated(est) == ["compressibility"]
    est, _, _ = analyze(g, [chain(mirrored), chain(mirrored[::-1])], beta=120.0, bins=8)
    assert not_decorrelated(est) == []  # the same sector in both chains: nothing to see
