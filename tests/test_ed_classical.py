"""t = 0: the exact ground state is the classical lattice-gas minimum."""

import numpy as np
import pytest
from _ed_dense import FockSector, classical_energies

from phasemap import Model
from phasemap.ed import ground_state, solve_ed


def classical_minima(lattice, vectors, V, V2, mu, L):
    """Brute-force min over all 2^L occupations of sum_b V_b n n + V2 sum_nnn n n - mu N."""
    E, N = classical_energies(lattice, vectors, V, V2)
    E = E - mu * N
    return {n: E[N == n].min() for n in range(L + 1)}


def test_t0_equals_classical_minimum_anisotropic_12_sites():
    # exact: with t = 0 the Hamiltonian is diagonal in occupations
    vec = ((2, 2), (-2, 4))
    V, mu = (1.0, 0.7, 1.3), 0.2
    m = Model("triangular", t=0, V=V, mu=mu)
    ref = classical_minima("triangular", vec, V, 0.0, mu, 12)
    for N in range(13):
        assert abs(ground_state(m, vec, N).e0 - ref[N]) < 1e-12, N


def test_t0_equals_classical_minimum_with_V2_21_sites():
    vec = ((4, 1), (-1, 5))
    V, V2 = (1.0, 1.0, 1.0), 0.35
    m = Model("triangular", t=0, V=V, V2=V2)
    ref = classical_minima("triangular", vec, V, V2, 0.0, 21)
    for N in (7,):
        assert abs(ground_state(m, vec, N).e0 - ref[N]) < 1e-12, N


def test_t0_solid_structure_factor_and_zero_stiffness():
    # perfect sqrt3 x sqrt3 solid at 1/3: |rho_K|^2 = (1/3)^2 = 1/9 exactly; no hopping -> the
    # twisted-boundary energy does not depend on the twist: stiffness exactly zero
    sol = solve_ed(Model("triangular", t=0, V=1), cluster="tri12", particles=4)
    assert abs(sol.order["S(K)/N"] - 1 / 9) < 1e-12
    for f in ("d1", "d2", "d3"):
        assert abs(sol.order[f"stiffness_{f}"]) < 1e-12
    assert sol.phase == "solid" and sol.pattern == "sqrt3"
    # charge gap of the classical 1/3 plateau on the cluster: removing a particle from the solid
    # breaks no bond (mu- = 0), adding one puts it next to three solid sites (mu+ = 3V): gap 3V
    assert abs(sol.order["gap"] - 3.0) < 1e-12


def test_small_t_solid_stiffness_against_dense_and_its_order_in_t():
    # Reasoning instead of a threshold: a twist changes the energy only through processes that
    # carry a boson around the torus. Hops out and back (order t^2) or around a contractible loop
    # pick up no net phase; the shortest superlattice vectors of tri12, (2,2), (-2,4), (4,-2),
    # are 4 hops long, so the solid's stiffness is O(t^4 / V^3), while the superfluid's is O(t).
    # Checked: values against an independent diagonalisation with a uniform vector potential
    # (tests/_ed_dense.FockSector), and log2 rho(2t)/rho(t) -> 4 (measured 4.12 at t = 0.0125 V,
    # the excess an O(t/V) correction).
    ref = FockSector("triangular", ((2, 2), (-2, 4)), 4)
    rho = {}
    for t in (0.025, 0.0125):
        sol = solve_ed(Model("triangular", t=t, V=1), cluster="tri12", particles=4, neighbors=False)
        rho[t] = sol.order["stiffness_d1"]
        assert rho[t] == pytest.approx(ref.stiffness((t,) * 3, (1, 1, 1), 0), rel=1e-4, abs=1e-9)
        assert sol.phase == "solid"
    assert 4.0 < np.log2(rho[0.025] / rho[0.0125]) < 4.3
    sf = solve_ed(Model("triangular", t=0.025, V=0), cluster="tri12", particles=4, neighbors=False)
    assert sf.order["stiffness_d1"] == pytest.approx(ref.stiffness((0.025,) * 3, (0, 0, 0), 0), abs=1e-9)
    assert rho[0.025] < 1e-3 * sf.order["stiffness_d1"]  # O(t^4/V^3) vs O(t) at t = V/40
