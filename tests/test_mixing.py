"""The shared Anderson mixer (phasemap.mixing) and its compiled copy in the mean-field kernel.

Sources: exact property — for a linear map x -> A x + b, Anderson (type II) mixing with a
memory at least the dimension is equivalent to GMRES and reaches the fixed point
(I - A)^-1 b in about dim + 2 steps (Walker & Ni, SIAM J. Numer. Anal. 49, 1715 (2011);
from memory). Internal consistency: the compiled per-row copy of the update in
phasemap.mf_kernel follows the same iterates as the shared NumPy mixer.
"""

import numpy as np

from phasemap import Model
from phasemap.mf import MFOptions, solve_batch
from phasemap.mixing import Anderson
from phasemap.params import ParamBatch


def test_anderson_solves_a_linear_fixed_point_in_dim_plus_few_steps():
    rng = np.random.default_rng(2)
    D, R = 6, 4
    Q = np.linalg.qr(rng.standard_normal((R, D, D)))[0]
    lam = rng.uniform(-0.95, 0.95, (R, D))  # contraction, slow modes near +-1
    A = np.einsum("rij,rj,rkj->rik", Q, lam, Q)
    b = rng.standard_normal((R, D))
    exact = np.linalg.solve(np.eye(D) - A, b[..., None])[..., 0]
    mix = Anderson(R, D, memory=D + 2, mixing=0.6)
    x = np.zeros((R, D))
    for _ in range(D + 4):
        f = np.einsum("rij,rj->ri", A, x) + b - x
        x = mix.step(x, f)
    assert np.abs(x - exact).max() < 1e-6
    # plain linear mixing is far from it after the same number of steps
    y = np.zeros((R, D))
    for _ in range(D + 4):
        y = y + 0.6 * (np.einsum("rij,rj->ri", A, y) + b - y)
    assert np.abs(y - exact).max() > 1e-2


def test_anderson_keep_drops_rows_without_touching_the_others():
    rng = np.random.default_rng(4)
    D, R = 3, 5
    A = 0.5 * np.eye(D)
    b = rng.standard_normal((R, D))
    full, part = Anderson(R, D, 3, 0.6), Anderson(R, D, 3, 0.6)
    x1 = np.zeros((R, D))
    x2 = np.zeros((R, D))
    keep = np.array([True, False, True, True, False])
    for it in range(4):
        x1 = full.step(x1, x1 @ A + b - x1)
        x2 = part.step(x2, x2 @ A + b[: len(x2)] - x2 if it < 2 else x2 @ A + b[keep] - x2)
        if it == 1:
            part.keep(keep)
            x2 = x2[keep]
    assert np.allclose(x1[keep], x2, atol=1e-14)


def test_compiled_kernel_follows_the_shared_mixer():
    # hard-core and soft-core mean field: numba kernel (compiled copy) vs NumPy engine (shared mixer)
    models = [Model("triangular", t=0.1, V=1.0, mu=2.0), Model("triangular", t=0.3, V=1.0, mu=1.0),
              Model("triangular", t=0.05, V=1.0, mu=4.0)]
    soft = [Model("square", t=0.03, U=1.0, n_max=3, mu=0.4), Model("square", t=0.1, U=1.0, n_max=3, mu=0.4)]
    for ms in (models, soft):
        batch = ParamBatch.from_models(ms)
        a = solve_batch(batch, MFOptions(engine="numba", tol=1e-11))
        b = solve_batch(batch, MFOptions(engine="numpy", tol=1e-11), seeds=a.seeds)
        both = a.converged & b.converged
        assert both.sum() >= 5  # (the engines differ only in when they give up on stalled rows)
        same_path = both & (a.iterations == b.iterations)
        assert same_path.sum() >= 0.8 * both.sum()
        assert np.allclose(a.energy[both], b.energy[both], atol=1e-9)
        assert np.allclose(a.n[same_path], b.n[same_path], atol=1e-9)
