"""Internal consistency: cluster mean field without intra-cluster bonds is site-decoupled MF.

Source: exact limit. A cluster whose sites share no bond has no intra-cluster term: its
Hamiltonian is a sum of one-site Hamiltonians in the decoupled fields, its ground state a
product state, and its self-consistency and variational energy are those of site-decoupled
mean field (:mod:`phasemap.mf`; Fisher et al., PRB 40, 546 (1989) for the decoupling itself).
The two codes share no solver code (dense/Lanczos cluster eigenproblem vs closed-form 2x2 or
batched eigh), so they must agree to rounding wherever both converge. A row that converges in
only one of them (a random seed that stalls in the other's Anderson history), or that ends on
a different member of a degenerate pair, is checked the strict way: its end state must be a
fixed point of the other code, with the same energy.
"""

import numpy as np
import pytest

from phasemap import Model, solve
from phasemap.cmf import get_cluster, solve_cmf_batch
from phasemap.mf import MFOptions, solve_batch
from phasemap.params import ParamBatch
from phasemap.seeds import Seed


def _random_models(rng, n, hardcore):
    out = []
    for _ in range(n):
        kw = dict(t=tuple(rng.uniform(0, 0.15, 3)), V=tuple(rng.uniform(0, 1.0, 3)), V2=rng.uniform(0, 0.2))
        if hardcore:
            out.append(Model("triangular", mu=rng.uniform(-1, 7), **kw))
        else:
            out.append(Model("triangular", U=1.0, n_max=3, mu=rng.uniform(-0.3, 2.5), **kw))
    return out


def _check_cross_fixed_points(batch, cmf_kwargs, res, ref, rows, fold):
    """Each listed (p, k): the end state of either code, restarted in the other, stays put."""
    for p, k in rows:
        sub = batch.take([p])
        cell = res.seeds[k].cell
        for src in (res, ref):
            if not src.converged[p, k]:
                continue
            n, phi = src.n[p, k], np.abs(src.phi[p, k])
            if src is ref:
                n, phi = n[fold], phi[fold]
            seed = [Seed("end state", cell, n, phi)]
            a = solve_cmf_batch(sub, seeds=seed, **cmf_kwargs)
            b = solve_batch(sub, MFOptions(tol=1e-11, anderson=5), seeds=seed)
            assert a.converged[0, 0] and b.converged[0, 0], (p, k)
            assert a.energy[0, 0] == pytest.approx(src.energy[p, k], abs=1e-10)
            assert b.energy[0, 0] == pytest.approx(src.energy[p, k], abs=1e-10)


@pytest.mark.parametrize("hardcore", [True, False])
def test_one_site_cluster_equals_site_decoupled(hardcore):
    rng = np.random.default_rng(5 if hardcore else 6)
    batch = ParamBatch.from_models(_random_models(rng, 4, hardcore))
    kw = dict(cluster="tri1", continuation=False, tol=1e-11, anderson=5, engine="point")
    res = solve_cmf_batch(batch, n_random=2, **kw)
    ref = solve_batch(batch, MFOptions(tol=1e-11, anderson=5), seeds=res.seeds)  # same iteration scheme
    both = res.converged & ref.converged
    assert both.any(axis=1).all()  # every point has rows converged in both
    # where both converge: the same state to rounding (measured 4e-16 in the energy)
    assert np.allclose(res.energy[both], ref.energy[both], atol=1e-12, rtol=0)
    assert np.allclose(res.n[both], ref.n[both], atol=1e-9)
    assert np.allclose(np.abs(res.phi[both]), np.abs(ref.phi[both]), atol=1e-9)
    assert np.array_equal(res.best(), ref.best())
    # Fock seeds without a fixed point fail in both; the rest, converged in one only, strictly
    odd = np.argwhere(res.converged != ref.converged)
    assert all(res.seeds[k].name.startswith("random") for _, k in odd)
    _check_cross_fixed_points(batch, kw, res, ref, odd, fold=[0])


@pytest.mark.parametrize("hardcore", [True, False])
def test_one_site_cluster_batched_engine_equals_site_decoupled(hardcore):
    # the batched engine (phasemap.cmf.batch) on the same rows: where both converge, the same
    # state; the winning state of every point the same. (A seed that wanders before landing may
    # land on the winner's state in one code only; then the earlier seed wins the tie.)
    rng = np.random.default_rng(5 if hardcore else 6)
    batch = ParamBatch.from_models(_random_models(rng, 4, hardcore))
    res = solve_cmf_batch(batch, cluster="tri1", n_random=2, continuation=False, tol=1e-11, anderson=5,
                          engine="batch")
    ref = solve_batch(batch, MFOptions(tol=1e-11, anderson=5), seeds=res.seeds)
    both = res.converged & ref.converged
    assert both.any(axis=1).all()
    assert np.allclose(res.energy[both], ref.energy[both], atol=1e-12, rtol=0)
    assert np.allclose(res.n[both], ref.n[both], atol=1e-9)
    assert np.allclose(np.abs(res.phi[both]), np.abs(ref.phi[both]), atol=1e-9)
    pb, pr = res.best(), ref.best()
    P = np.arange(len(pb))
    assert np.allclose(res.energy[P, pb], ref.energy[P, pr], atol=1e-12, rtol=0)
    assert np.allclose(res.n[P, pb], ref.n[P, pr], atol=1e-9)


def test_bondless_cluster_on_sqrt3_cell_equals_site_decoupled():
    # three sites at mutual distance 2 (no nn or nnn bond) form a fundamental domain of the √3×√3 cell
    cl = get_cluster({"vectors": [[1, 1], [-1, 2]], "sites": [[0, 0], [2, 0], [4, 0]]}, "triangular")
    assert cl.n_bonds == 0 and len(cl.intra2) == 0
    rng = np.random.default_rng(7)
    batch = ParamBatch.from_models(_random_models(rng, 4, True))
    kw = dict(cluster=cl, continuation=False, tol=1e-11, anderson=5)
    res = solve_cmf_batch(batch, n_random=2, **kw)
    seeds = [Seed(s.name, cl.cell, s.n0, s.phi0) for s in res.seeds]
    ref = solve_batch(batch, MFOptions(tol=1e-11), seeds=seeds)
    fold = ref.cell.index(cl.cell.sites)  # search-cell site of each cluster site
    both = res.converged & ref.converged
    assert both.any(axis=1).all()
    same = np.isclose(res.energy, ref.energy, atol=1e-12, rtol=0) & both
    # a random seed may pass a degenerate point (local levels crossing) where the cluster's
    # eigenvector and the closed form pick different members: such rows, and rows converged in
    # one code only, must be fixed points of both codes (strict check, no fraction allowed)
    odd = np.argwhere((both & ~same) | (res.converged != ref.converged))
    assert all(res.seeds[k].name.startswith("random") for _, k in odd)
    _check_cross_fixed_points(batch, kw, res, ref, odd, fold=fold)
    # ... and the winners exactly
    pb, pr = res.best(), ref.best()
    P = np.arange(len(pb))
    assert np.allclose(res.energy[P, pb], ref.energy[P, pr], atol=1e-12, rtol=0)


def test_front_door_and_classification():
    # phasemap.solve(model, method="cmf", cluster=...) returns a classified Solution
    m = Model("triangular", t=0.02, V=1.0, mu=1.5)
    sol = solve(m, method="cmf", cluster="tri3")
    assert sol.method == "cmf:tri3" and sol.converged  # one spelling: method with its cluster
    # near the classical limit the 1/3 solid wins on 0 < mu < 3V (t = 0 energies 0, -mu/3,
    # V - 2mu/3: tests/test_v2_classical.py with V2 = 0)
    assert sol.phase == "solid" and sol.label.startswith("solid 1/3")
    sol = solve(Model("triangular", t=0.3, V=0.0, mu=0.0), method="cmf", cluster="tri3")
    assert sol.phase == "superfluid"
    assert len(sol.densities) == 3
