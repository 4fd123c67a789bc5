"""Half filling on the triangular lattice from finite-size scaling (slow).

Wessel & Troyer, PRL 95, 127205 (2005); Heidarian & Damle, PRL 95, 127206 (2005): hard-core
bosons at half filling (mu = 3V) are a supersolid for t/V below ≈ 0.112 (from memory) and a
superfluid above. At t/V = 0.2 only the stiffness must extrapolate to non-zero.

At t/V = 0.08 (supersolid) the runs sample the fixed particle number N_sites/2 (the ensemble of
mu = 3V by particle-hole symmetry; grand-canonical chains do not move between |N - N_sites/2|
sectors at these temperatures, docs/qmc.md) on 6x6 and 9x9 at beta V = 10 L: both S(K)/N and the
stiffness must extrapolate to non-zero. Two sizes only (a line through two points) to fit the
slow suite; the three-size check with 12x12 is benchmarks/validate_qmc_supersolid.py (docs/qmc.md,
"Half-filling validation": S(K)/N -> 0.0298 +- 0.0006, rho_s -> 0.0166 +- 0.0013 V).
"""

import pytest

from phasemap import Model
from phasemap.qmc.scaling import finite_size_scaling

pytestmark = pytest.mark.slow


@pytest.mark.parametrize("t, phase", [(0.2, "superfluid")])
def test_half_filling_phase_from_extrapolation(t, phase):
    res = finite_size_scaling(Model("triangular", t=t, V=1.0, mu=3.0), sizes=(6, 12), T=0.05 if t > 0.1 else 0.02,
                              sweeps=6000, bins=24, seed=3)
    assert all(r.decorrelated for r in res.results), res.summary()
    assert res.classification["phase"] == phase, res.summary()


def test_half_filling_supersolid_at_fixed_particle_number():
    res = finite_size_scaling(Model("triangular", t=0.08, V=1.0, mu=3.0), sizes=(6, 9), beta_L=10.0, sweeps=64000,
                              bins=8, chains=2, seed=1, run_options={"fixed_filling": 0.5})
    assert all(r.decorrelated for r in res.results), res.summary()
    assert res.classification["phase"] == "supersolid", res.summary()
