"""Half filling on the triangular lattice from finite-size scaling (slow).

Wessel & Troyer, PRL 95, 127205 (2005); Heidarian & Damle, PRL 95, 127206 (2005): hard-core
bosons at half filling (mu = 3V) are a supersolid for t/V below ≈ 0.112 (from memory) and a
superfluid above. At t/V = 0.2 only the stiffness must extrapolate to non-zero.

Not here: t/V = 0.08 (supersolid); it is benchmarks/validate_qmc_supersolid.py (docs/qmc.md,
"Half-filling validation"). T = 0.02 V (the first attempt) is T/t = 0.25, above the ordering
scale; at beta V = 10 L the autocorrelation times of S(K)/N are 100-300 sweeps and those of the
particle number 300-650 sweeps (chains also sit in different particle-number sectors for >10^4
sweeps), so a decorrelated 6/9/12 set needs far more than the few CPU minutes of a slow test.
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
