"""Half filling on the triangular lattice from finite-size scaling (slow).

Wessel & Troyer, PRL 95, 127205 (2005); Heidarian & Damle, PRL 95, 127206 (2005): hard-core
bosons at half filling (mu = 3V) are a supersolid for t/V below ≈ 0.112 (from memory) and a
superfluid above. At t/V = 0.2 only the stiffness must extrapolate to non-zero.

Not here yet: t/V = 0.08 (supersolid). With 6x6 and 12x12 at T = 0.02 V and 6000 sweeps the
S(K)/N and stiffness bins were not decorrelated (measured 2026-12-02), so the run is excluded
and the phase is "undecided"; a decorrelated run needs longer chains than a slow test allows.
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
