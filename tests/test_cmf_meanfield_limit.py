"""Internal consistency: cluster mean field without intra-cluster bonds is site-decoupled MF.

Source: exact limit (DESIGN.md §2) — a one-site cluster, or any cluster whose sites share no
bond, has a product ground state and the same self-consistency and variational energy as
:mod:`phasemap.mf` (Fisher et al., PRB 40, 546 (1989) for the decoupling itself).
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


@pytest.mark.parametrize("hardcore", [True, False])
def test_one_site_cluster_equals_site_decoupled(hardcore):
    rng = np.random.default_rng(5 if hardcore else 6)
    batch = ParamBatch.from_models(_random_models(rng, 4, hardcore))
    res = solve_cmf_batch(batch, cluster="tri1", n_random=2, continuation=False, tol=1e-11, anderson=5)
    ref = solve_batch(batch, MFOptions(tol=1e-11, anderson=5), seeds=res.seeds)  # same iteration scheme
    both = res.converged & ref.converged
    # same convergence record (Fock-state seeds without a fixed point fail in both) and
    # every point has converged rows
    assert (res.converged == ref.converged).mean() > 0.9 and both.any(axis=1).all()
    assert np.allclose(res.energy[both], ref.energy[both], atol=1e-9)
    assert np.array_equal(res.best(), ref.best())
    assert np.allclose(res.n[both], ref.n[both], atol=1e-7)
    assert np.allclose(np.abs(res.phi[both]), np.abs(ref.phi[both]), atol=1e-7)


def test_bondless_cluster_on_sqrt3_cell_equals_site_decoupled():
    # three sites at mutual distance 2 (no nn or nnn bond) form a fundamental domain of the √3×√3 cell
    cl = get_cluster({"vectors": [[1, 1], [-1, 2]], "sites": [[0, 0], [2, 0], [4, 0]]}, "triangular")
    assert cl.n_bonds == 0 and len(cl.intra2) == 0
    rng = np.random.default_rng(7)
    batch = ParamBatch.from_models(_random_models(rng, 4, True))
    res = solve_cmf_batch(batch, cluster=cl, n_random=2, continuation=False, tol=1e-11, anderson=5)
    seeds = [Seed(s.name, cl.cell, s.n0, s.phi0) for s in res.seeds]
    ref = solve_batch(batch, MFOptions(tol=1e-11), seeds=seeds)
    both = res.converged & ref.converged
    assert (res.converged == ref.converged).mean() > 0.9 and both.any(axis=1).all()
    # a random seed may pass a degenerate point (local levels crossing) where the cluster's
    # eigenvector and the closed form pick different members: compare almost all rows ...
    same = np.isclose(res.energy, ref.energy, atol=1e-9, rtol=0) & both
    assert same.sum() >= 0.9 * both.sum()
    # ... and the winners exactly
    pb, pr = res.best(), ref.best()
    P = np.arange(len(pb))
    assert np.allclose(res.energy[P, pb], ref.energy[P, pr], atol=1e-9)


def test_front_door_and_classification():
    # phasemap.solve(model, method="cmf", cluster=...) returns a classified Solution
    m = Model("triangular", t=0.02, V=1.0, mu=1.5)
    sol = solve(m, method="cmf", cluster="tri3")
    assert sol.method == "cmf:tri3" and sol.converged  # one spelling: method with its cluster
    assert sol.phase == "solid" and sol.label.startswith("solid 1/3")  # t=0 plateau 0<mu<3 (DESIGN §4)
    sol = solve(Model("triangular", t=0.3, V=0.0, mu=0.0), method="cmf", cluster="tri3")
    assert sol.phase == "superfluid"
    assert len(sol.densities) == 3
