"""Decoupled-chain limit: one bond family active -> periodic chains (XXZ rings)."""

import math

import numpy as np
import pytest
from _ed_dense import heisenberg_ring

from phasemap import Model
from phasemap.ed import chain, ground_state

# Matsubara-Matsuda mapping (Prog. Theor. Phys. 16, 569 (1956)): b^+ = S^+, n = S^z + 1/2, so
# b_i^+ b_j + h.c. = 2 (Sx Sx + Sy Sy) and V n_i n_j = V (Sz Sz + (Sz_i + Sz_j)/2 + 1/4).
# On a ring at half filling sum_bonds (Sz_i + Sz_j)/2 = Sz_total = 0, and on an even ring the
# sublattice rotation by pi about z flips the sign of the XY term. With V = 2t:
#     E_boson = 2t (E_Heisenberg + L/4).
T = 1.0
CHAIN = Model("triangular", t=(T, 0, 0), V=(2 * T, 0, 0))


def heis_from_boson(e_boson, L):
    return e_boson / (2 * T) - L / 4


@pytest.mark.parametrize("L", [4, 6, 8, pytest.param(10, marks=pytest.mark.slow)])
def test_heisenberg_ring_small_L_against_dense_kron(L):
    # independent dense diagonalisation of sum S_i.S_{i+1} built with numpy Kronecker products
    e_dense = np.linalg.eigvalsh(heisenberg_ring(L))[0]
    gs = ground_state(CHAIN, chain("triangular", L), L // 2)
    assert abs(heis_from_boson(gs.e0, L) - e_dense) < 1e-9


def test_two_decoupled_rings_on_a_2d_torus():
    # torus (6,0),(0,2) with only family d1 coupled = two independent 6-rings (d2, d3 off)
    from phasemap.ed import get_cluster

    L = 6
    e_ring = np.linalg.eigvalsh(heisenberg_ring(L))[0]
    gs = ground_state(CHAIN, get_cluster([[L, 0], [0, 2]], "triangular"), L)
    assert abs(gs.e0 - 2 * 2 * T * (e_ring + L / 4)) < 1e-9


def test_hulthen_limit_trend():
    # Hulthen 1938 / Bethe ansatz: e0 = 1/4 - ln 2 per bond of the infinite Heisenberg chain.
    e_inf = 0.25 - math.log(2)
    Ls = [12, 14, 16, 18]
    e = [heis_from_boson(ground_state(CHAIN, chain("triangular", L), L // 2).e0, L) / L for L in Ls]
    assert all(b > a for a, b in zip(e, e[1:]))  # monotonic approach from below (even rings)
    assert all(x < e_inf for x in e)
    # leading finite-size correction ~ 1/L^2 (conformal, c = 1): extrapolate the last two
    L1, L2 = Ls[-2:]
    ext = (e[-1] * L2**2 - e[-2] * L1**2) / (L2**2 - L1**2)
    assert abs(ext - e_inf) < 1e-3
    assert abs(e[-1] - e_inf) > abs(ext - e_inf)  # the extrapolation moves towards Hulthen


def test_free_fermion_ring_energy():
    # Jordan-Wigner (Lieb, Schultz, Mattis, Ann. Phys. 16, 407 (1961)): hard-core bosons with
    # V = 0 on a ring are free fermions, periodic for odd N and antiperiodic for even N.
    L = 10
    m = Model("triangular", t=(T, 0, 0), V=0)
    for N in (3, 4, 5):
        shift = 0.0 if N % 2 else 0.5
        eps = np.sort(-2 * T * np.cos(2 * np.pi * (np.arange(L) + shift) / L))
        assert abs(ground_state(m, chain("triangular", L), N).e0 - eps[:N].sum()) < 1e-9
