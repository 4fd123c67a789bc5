"""Symmetry bookkeeping: particle-hole relation, translation blocks, momentum labels, guard."""

import numpy as np
import pytest
from _ed_dense import dense_hamiltonian

from phasemap import ConfigError, Model
from phasemap.ed import estimate, fock_dimension, get_cluster, ground_state, momentum_classes, point_group, staircase
from phasemap.ed.sector import Sector


def test_particle_hole_relation_hardcore():
    # exact: n -> 1 - n maps the hopping onto itself; sum_b V_b (1-h_i)(1-h_j) =
    # sum_b V_b - 2 W N_h + sum_b V_b h_i h_j with W = sum_f V_f + 3 V2 (bonds per site, each
    # once; 3 nnn families), and -mu (L - N_h). Hence E0(L-N) - E0(N) = (L - 2N)(W - mu).
    m = Model("triangular", t=(0.2, 0.3, 0.25), V=(1.0, 0.8, 1.2), V2=0.3, mu=0.4)
    vec, L = ((4, 1), (-1, 5)), 21
    W = sum(m.V) + 3 * m.V2
    for N in (3, 7):
        e_n = ground_state(m, vec, N).e0
        e_h = ground_state(m, vec, L - N).e0
        assert abs((e_h - e_n) - (L - 2 * N) * (W - m.mu)) < 1e-9, N


def test_translation_blocks_reproduce_full_spectrum():
    # every eigenvalue of the full N sector (independent dense H) appears in exactly one block
    t, V = (1.0, 0.7, 0.4), (1.0, 2.0, 0.5)
    m = Model("triangular", t=t, V=V, mu=0.3)
    vec = ((2, 2), (-2, 4))
    full = np.linalg.eigvalsh(dense_hamiltonian("triangular", vec, 4, t, V, mu=0.3))
    sec = Sector(get_cluster(vec), m, 4)
    blocks = np.sort(np.concatenate([np.linalg.eigvalsh(sec.matrix(q).toarray()) for q in sec.momenta]))
    assert len(blocks) == len(full)
    assert np.abs(blocks - full).max() < 1e-10


def test_translation_blocks_soft_core_against_dense():
    t, V, U = (0.3, 0.2, 0.4), (0.5, 0.5, 0.2), 2.0
    m = Model("triangular", t=t, V=V, U=U, n_max=2)
    vec = ((3, 0), (0, 3))
    full = np.linalg.eigvalsh(dense_hamiltonian("triangular", vec, 5, t, V, U=U, n_max=2))
    sec = Sector(get_cluster(vec), m, 5)
    blocks = np.sort(np.concatenate([np.linalg.eigvalsh(sec.matrix(q).toarray()) for q in sec.momenta]))
    assert np.abs(blocks - full).max() < 1e-10


@pytest.mark.parametrize("t", [(1.0, 1.0, 1.0), (1.0, 0.6, 0.6)])
def test_point_group_classes_are_degenerate(t):
    # momenta related by a coupling-preserving point-group element or by time reversal have
    # the same sector ground-state energy
    m = Model("triangular", t=t, V=1.0)
    cell = get_cluster("tri12")
    sec = Sector(cell, m, 5)
    e = np.array([sec.solve(q).e0 for q in cell.momenta])
    for cls in momentum_classes(cell, point_group(cell, m)):
        assert np.ptp(e[cls]) < 1e-9
    assert len(point_group(cell, m)) == (12 if t[1] == t[0] else 4)


def test_momentum_label_convention_with_twist():
    # a boson in sector Q is the plane wave exp(iQ.r); with phase exp(iA.D) per hop by D its
    # energy is -2 sum_f t_f cos(2 pi Q.d_f - A.D_f) (sign of Q fixed by the twist)
    t = (1.0, 0.7, 0.3)
    m = Model("triangular", t=t, V=0)
    cell = get_cluster("tri12")
    sec = Sector(cell, m, 1)
    A = np.array([0.3, -0.2])
    D = cell.lattice.cartesian(np.array(cell.lattice.nn))
    for q in cell.momenta:
        ref = -2 * sum(tf * np.cos(2 * np.pi * q @ np.array(d) - A @ Df) for tf, d, Df in zip(t, cell.lattice.nn, D))
        assert abs(sec.solve(q, A=A).e0 - ref) < 1e-12


def test_lookup_strategies_agree():
    m = Model("triangular", t=(0.3, 0.2, 0.1), V=1.0)
    cell = get_cluster("tri12")
    e = [Sector(cell, m, 5, lookup=lk).solve(cell.momenta[3]).e0 for lk in ("direct", "sorted", "search")]
    assert np.ptp(e) < 1e-12


def test_staircase_particle_hole_shortcut_matches_direct():
    m = Model("triangular", t=0.15, V=1.0, mu=0.5)
    a = staircase(m, "tri9", particle_hole=True, observables=())
    b = staircase(m, "tri9", particle_hole=False, observables=())
    assert np.abs(a["E0"].values - b["E0"].values).max() < 1e-9
    assert a["from_particle_hole"].values.sum() == 5  # 9 sites: N = 5..9 mapped from N = 4..0


def test_fock_dimension_and_estimate_against_counts():
    import itertools

    for L, N, nm in ((6, 4, 2), (5, 7, 3), (8, 3, 1)):
        brute = sum(1 for s in itertools.product(range(nm + 1), repeat=L) if sum(s) == N)
        assert fock_dimension(L, N, nm) == brute
    m = Model("triangular", t=0.1, V=1)
    sec = Sector(get_cluster("tri21"), m, 7)
    est = estimate(21, 7, 1, 6)
    assert abs(est.sector - sec.dim) / sec.dim < 0.01
    assert abs(est.hops - len(sec.hop_amp)) / len(sec.hop_amp) < 0.05


def test_guard_refuses_with_estimate():
    with pytest.raises(ConfigError, match=r"GiB.*budget"):
        # strained tri36 at N = 18: 6.3e7 sector states, ~30 GiB even without the rank table (> 16 GiB)
        ground_state(Model("triangular", t=(0.1, 0.1, 0.12), V=1), "tri36", 18)
    with pytest.raises(ConfigError, match="budget"):
        ground_state(Model("triangular", t=0.1, V=1), "tri12", 6, budget_gib=1e-6)


def test_bad_input_is_refused_clearly():
    m = Model("triangular", t=0.1, V=1)
    with pytest.raises(ConfigError, match="particles"):
        ground_state(m, "tri12", 13)
    with pytest.raises(ConfigError, match="doubled bond"):
        ground_state(m.replace(V2=0.5), "tri12", 4)
    with pytest.raises(ConfigError, match="joins a site to itself"):
        ground_state(m, [[2, 0], [0, 1]], 1)
    with pytest.raises(ConfigError, match="unknown cluster"):
        ground_state(m, "tri13", 1)
    with pytest.raises(ConfigError, match="lattice"):
        ground_state(m, "sq16", 1)


@pytest.mark.parametrize("model,N", [
    (Model("triangular", t=(0.3, 0.1, 0.2), V=(1.0, 0.5, 1.5)), 5),
    (Model("triangular", t=0.05, V=1.0), 4),
    (Model("triangular", t=(0.2, 0.4, 0.1), V=0.3, U=1.5, n_max=2), 7),
])
def test_perron_frobenius_gamma_holds_the_ground_state(model, N):
    # Perron-Frobenius (t >= 0: off-diagonal elements <= 0): a ground state lies at Q = 0,
    # so the default Gamma-only E0 equals the minimum over every momentum sector
    full = ground_state(model, "tri12", N, momenta=range(12))  # every momentum, no reduction
    gamma = ground_state(model, "tri12", N)
    assert len(full.sector_e0) == 12 and list(gamma.sector_e0) == ["Gamma"]
    assert abs(full.e0 - gamma.e0) < 1e-10
    assert "Gamma" in full.degenerate
