"""Cluster-size scaling checks against published values.

* Square-lattice Bose-Hubbard model, n = 1 Mott lobe tip. Single site:
  (zt/U)_c = 3 - 2 sqrt(2) (Fisher, Weichman, Grinstein, Fisher, PRB 40, 546 (1989)); quantum
  Monte Carlo: (t/U)_c = 0.05974(3) (Capogrosso-Sansone, Söyler, Prokof'ev, Svistunov, PRA 77,
  015602 (2008); citation from memory). The CMF tip must move monotonically from the first
  towards the second with λ.
* Triangular hard-core bosons at half filling (mu = 3V): superfluid -> supersolid at
  t/V ≈ 0.112 (V/2t ≈ 4.45; Heidarian & Damle, PRL 95, 127206 (2005)). The CMF transition must
  move from the site-decoupled value towards it with cluster size.
"""

import math

import numpy as np
import pytest

from phasemap import ConfigError, Model
from phasemap.cmf.scaling import cluster_scaling, fit_linear, plot_scaling
from phasemap.cmf.stability import MottCluster, mott_lobe_tip
from phasemap.mf import insulator_instability
from phasemap.params import ParamBatch

QMC_TIP = 0.05974  # Capogrosso-Sansone et al. 2008
HD_SS = 0.112  # Heidarian & Damle 2005, t/V at the SF-SS transition, half filling


def test_fit_linear_exact_line_and_errors():
    f = fit_linear([0.0, 0.5, 1.0 / 3.0], [1.0, 2.0, 1.0 + 2.0 / 3.0])
    assert abs(f["extrapolated"] - 3.0) < 1e-12 and f["extrapolated_err"] < 1e-10
    f = fit_linear([0.0, 0.5], [1.0, 2.0])
    assert math.isnan(f["extrapolated_err"])
    with pytest.raises(ConfigError):
        fit_linear([0.5], [1.0])


def test_single_site_stability_matches_site_decoupled_formula():
    # one-site cluster: chi T = zt[(n+1)/(U n - mu) + n/(mu - U(n-1))] (Fisher et al. 1989)
    m = Model("square", t=0.03, U=1.0, n_max=3, mu=0.3)
    lam = MottCluster(m, "sq1").instability(0.3)
    ref = insulator_instability(ParamBatch.from_models([m]), np.ones((1, 1)),
                                cell=__import__("phasemap").Supercell("square", ((1, 0), (0, 1))))[0]
    assert abs(lam - ref) < 1e-10
    tip = mott_lobe_tip(m, "sq1")
    assert abs(tip["t_over_U"] * 4 - (3 - 2 * math.sqrt(2))) < 1e-6
    assert abs(tip["mu_over_U"] - (math.sqrt(2) - 1)) < 1e-4


def test_lobe_tip_small_clusters_move_towards_qmc():
    m = Model("square", t=0.01, U=1.0, n_max=3)
    tips = [mott_lobe_tip(m, c)["t_over_U"] for c in ("sq1", "sq2x1", "sq2x2")]
    assert tips[0] < tips[1] < tips[2] < QMC_TIP


def _extrapolation_weights(lam):
    """w with extrapolated value = w . values for the least-squares line evaluated at lambda = 1."""
    lam = np.asarray(lam, float)
    d = lam - lam.mean()
    return 1 / len(lam) + (1 - lam.mean()) * d / (d @ d)


@pytest.mark.slow
def test_lobe_tip_scaling_square_lattice(tmp_path):
    m = Model("square", t=0.01, U=1.0, n_max=3)
    res = cluster_scaling(m, ["sq1", "sq2x1", "sq2x2", "sq2x3", "sq3x3"], "lobe-tip", fit_min_lambda=0.5,
                          reference=(QMC_TIP, "QMC"))
    v = res.values
    print("\n" + res.table())
    assert abs(v[0] * 4 - (3 - 2 * math.sqrt(2))) < 1e-6
    assert np.all(np.diff(v) > 0) and np.all(v < QMC_TIP)  # monotonic, from below
    # measured (this machine, 2026-12): the line through sq2x2, sq2x3, sq3x3 extrapolates to
    # (t/U)_c = 0.0534124, 10.6 % below the QMC value: clusters this small do not reach a 5 %
    # target. Tolerance: each tip is found to brentq's xtol = 1e-7 (in t/U); the extrapolation
    # weights sum to |w| = 5.3, so 1e-6.
    w = _extrapolation_weights(res.lam[res.fit_mask])
    assert np.abs(w).sum() < 6
    assert res.extrapolated == pytest.approx(0.0534124, abs=1e-6)
    assert res.extrapolated / QMC_TIP - 1 == pytest.approx(-0.106, abs=1e-3)
    paths = plot_scaling(res, str(tmp_path / "tip"))
    assert all(p and __import__("os").path.getsize(p) > 0 for p in paths)


@pytest.mark.slow
def test_triangular_supersolid_transition_moves_towards_qmc():
    m = Model("triangular", t=0.1, V=1.0, mu=3.0)
    res = cluster_scaling(m, ["tri3-sd", "tri3", "tri6", "tri9", "tri12"], "transition", axis="t", lo=0.05,
                          hi=0.35, order="contrast", threshold=1e-3, xtol=2e-3, patterns=("sqrt3",), n_random=0,
                          fit_min_lambda=0.3)
    v = res.values
    print("\n" + res.table())
    assert v[-1] < v[0]  # the largest cluster is closer to QMC than site-decoupled MF
    assert abs(v[-1] - HD_SS) < abs(v[0] - HD_SS)
    assert np.all(v > HD_SS - 0.02)  # mean field overestimates order
    # measured (this machine, 2026-12): t_c/V = 0.2498, 0.2146, 0.2018, 0.1900, 0.1830 for
    # tri3-sd ... tri12 (bisection brackets of width 2e-3, midpoints within 1e-3 of the crossing);
    # the line through tri3 ... tri12 extrapolates to 0.1516, 0.040 (35 %) above Heidarian & Damle:
    # linear extrapolation in λ from clusters up to 12 sites does not reach the QMC value.
    # Tolerance: 1e-3 per value times the sum of the extrapolation weights.
    assert v == pytest.approx([0.24980469, 0.21464844, 0.20175781, 0.19003906, 0.18300781], abs=1e-3)
    tol = 1e-3 * np.abs(_extrapolation_weights(res.lam[res.fit_mask])).sum()
    assert res.extrapolated == pytest.approx(0.151578, abs=tol)
    assert res.extrapolated - HD_SS == pytest.approx(0.0396, abs=tol)
