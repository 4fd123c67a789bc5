"""The certified warm ground state of the compiled dense rows (:func:`phasemap.cmf.kernel._ground_warm`).

Reference: NumPy's full ``eigh`` (an independent general-purpose LAPACK computation). The warm
refinement must return the ground state of ``H`` to the accuracy of a dense solver when it
accepts, and refuse (so that the kernel falls back to the full eigensolve) whenever its start
leads elsewhere: a start near an excited state, a degenerate ground level, a ground state in
another particle-number block than the start. Inverse iteration converges to the level nearest
its shift, so without the certificates each refusal case below would return a wrong state.
"""

import numpy as np
import pytest

from phasemap import Model
from phasemap.cmf import get_cluster, solve_cmf_batch
from phasemap.cmf.batch import BatchProblem, _reference_vector
from phasemap.cmf.hamiltonian import cluster_operators
from phasemap.cmf.kernel import WARM_MAX_DIM, iterate_dense_rows, warm_ground_state
from phasemap.cmf.selfconsistency import CMFOptions
from phasemap.params import ParamBatch


def _matrix(dim, levels, seed=0):
    rng = np.random.default_rng(seed)
    Q, _ = np.linalg.qr(rng.standard_normal((dim, dim)))
    H = (Q * np.asarray(levels, float)) @ Q.T
    return 0.5 * (H + H.T), rng


def _levels(dim, low, seed=1):
    ev = np.sort(np.random.default_rng(seed).uniform(-1, 3, dim))
    ev[:len(low)] = low
    return np.sort(ev)


@pytest.mark.parametrize("dim", [8, 27])
@pytest.mark.parametrize("noise", [1e-9, 1e-3, 0.1])
def test_accepted_state_is_the_dense_ground_state(dim, noise):
    H, rng = _matrix(dim, _levels(dim, [-2.0, -1.5]))
    w, V = np.linalg.eigh(H)
    ok, v = warm_ground_state(H, V[:, 0] + noise * rng.standard_normal(dim))
    assert ok
    assert abs(abs(v @ V[:, 0]) - 1.0) < 1e-13
    np.testing.assert_allclose(v * np.sign(v @ V[:, 0]), V[:, 0], atol=1e-12)
    assert abs(v @ H @ v - w[0]) < 1e-12


@pytest.mark.parametrize("dim", [8, 27])
def test_start_near_an_excited_state_is_refused(dim):
    # inverse iteration shifted at the start's Rayleigh quotient would converge to the first
    # excited level; the Cholesky factorisation of H - shift does not exist there
    H, rng = _matrix(dim, _levels(dim, [-2.0, -1.0]), seed=2)
    _, V = np.linalg.eigh(H)
    ok, _ = warm_ground_state(H, V[:, 1] + 1e-4 * rng.standard_normal(dim))
    assert not ok


@pytest.mark.parametrize("gap,accepted", [(0.0, False), (1e-12, False), (1e-6, True)])
def test_degenerate_ground_level_is_refused(gap, accepted):
    # the degeneracy threshold of the full solve is 1e-10 (relative): a level within it needs the
    # reference-vector projection (pick_ground), not the warm state
    H, rng = _matrix(8, _levels(8, [-2.0, -2.0 + gap]), seed=3)
    _, V = np.linalg.eigh(H)
    ok, v = warm_ground_state(H, V[:, 0] + 1e-6 * rng.standard_normal(8))
    assert ok == accepted
    if accepted:
        assert abs(abs(v @ V[:, 0]) - 1.0) < 1e-12


def test_ground_state_in_another_block_is_refused():
    # number-conserving cluster Hamiltonian (zero condensate field): two blocks; the previous
    # state lies in block A, the ground state moved to block B (a sector change of the iterate)
    HA, _ = _matrix(4, [-1.0, 0.5, 1.0, 2.0], seed=4)
    HB, _ = _matrix(4, [-1.2, 0.3, 1.5, 2.5], seed=5)
    H = np.zeros((8, 8))
    H[:4, :4], H[4:, 4:] = HA, HB
    wA, VA = np.linalg.eigh(HA)
    start = np.concatenate([VA[:, 0], np.zeros(4)])
    ok, _ = warm_ground_state(H, start)
    assert not ok
    H[4:, 4:] += 0.5 * np.eye(4)  # block A's state is the ground state again: accepted, stays in A
    ok, v = warm_ground_state(H, start)
    assert ok and np.abs(v[4:]).max() == 0.0 and abs(abs(v[:4] @ VA[:, 0]) - 1.0) < 1e-13


def _rows(models, cluster):
    # every point started 0.05 away from its winning state (so that the rows converge directly)
    cl = get_cluster(cluster)
    batch = ParamBatch.from_models(models)
    res = solve_cmf_batch(batch, cluster=cl, engine="batch", n_random=0)
    p, k = np.arange(batch.size), res.best()
    ops = cluster_operators(cl, batch.n_max)
    x0 = np.concatenate([res.n[p, k], res.phi[p, k]], axis=1) + 0.05
    prob = BatchProblem(cl, ops, batch.t, batch.V, batch.U, batch.V2, batch.mu, models[0].hardcore)
    return iterate_dense_rows(prob, x0, CMFOptions(), batch.n_max, _reference_vector(ops.dim))


def test_compiled_rows_take_the_warm_path():
    # not a timing: the count of full eigensolves. Rows that converge directly need the full
    # solve only for their first iteration (and a few refusals); a warm path that is never
    # accepted would make every iteration a full solve
    models = [Model("triangular", t=t, V=1.0, mu=mu) for t, mu in ((0.05, 1.5), (0.1, 3.0), (0.4, 2.0))]
    _, iters, _, conv, full = _rows(models, "tri3")
    assert conv.all() and (iters >= 5).all()
    assert full.sum() <= 0.3 * iters.sum()
    assert WARM_MAX_DIM >= 27  # tri3 soft-core (n_max = 2) is refined warm too


def test_final_states_in_two_threads_equal_one_call(monkeypatch):
    # the final states of >= 4,096 compiled rows are evaluated in two halves on two threads:
    # the halves must be put back in row order (a swapped concatenation fails this)
    import numba

    import phasemap.cmf.batch as batch_mod
    from phasemap.params import grid

    if numba.get_num_threads() < 2:
        pytest.skip("one thread: the two-thread branch does not run")
    m = Model("triangular", t=0.6, V=(10.0, 10.0, 8.5), mu=0.0, unit="K")
    batch, _ = grid(m, {"t": np.linspace(0, 0.4, 24), "mu": np.linspace(-1, 7, 24)}, relative=True)
    two = solve_cmf_batch(batch, cluster="tri3")  # 576 points x 8 seeds = 4,608 rows
    assert two.energy.size >= batch_mod.THREADS_MIN_ROWS
    monkeypatch.setattr(batch_mod, "THREADS_MIN_ROWS", 10**9)
    one = solve_cmf_batch(batch, cluster="tri3")
    for name in ("energy", "n", "phi", "converged", "iterations"):
        np.testing.assert_array_equal(getattr(two, name), getattr(one, name))
