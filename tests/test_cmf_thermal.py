"""Cluster mean field at a temperature T > 0 (full diagonalisation of small clusters).

Reference values are derived or computed in this file:

* One-site clusters (tri1, sq1) decouple every bond: they must equal site-decoupled mean field at
  T > 0 where the uniform state wins (V = 0) — an independent implementation (phasemap.mf).
* t = V = 0 on the triangle tri3: independent sites, n = 1/(1 + exp(-mu/T)),
  Omega/N = -T ln(1 + exp(mu/T)) (exact).
* Triangle tri3, hard-core, V = 0, t > 0, uniform state: the 8 x 8 cluster Hamiltonian is built
  here from scratch (three intra bonds; each site has 4 outside neighbours with the cluster's own
  <b> = phi, so Phi = 4 t phi; 6 decoupled bonds per cluster), its thermal state iterated to
  self-consistency, and Omega/N = [<H_intra> - 12 t phi^2 - 3 mu n - T S] / 3 (independent
  dense computation).
"""

import itertools

import numpy as np
import pytest
import scipy.linalg

import phasemap
from phasemap.model import ConfigError


def test_one_site_cluster_equals_site_mean_field():
    """cmf:tri1 / cmf:sq1 at T > 0 = mf at T > 0 (uniform states; V = 0)."""
    rng = np.random.default_rng(3)
    cases = [(phasemap.Model(lattice="triangular", t=0.1, V=0.0, mu=0.0), "tri1", 0.6, (-2, 3)),
             (phasemap.Model(lattice="square", t=0.02, U=1.0, mu=0.5, n_max=4), "sq1", 0.06, (-0.3, 2.5))]
    for m, cl, tmax, (lo, hi) in cases:
        for _ in range(3):
            p = m.replace(t=float(rng.uniform(0, tmax)), mu=float(rng.uniform(lo, hi)))
            T = float(rng.uniform(0.05, 1.0)) * (1.0 if m.hardcore else 0.3)
            a = phasemap.solve(p, method="mf", T=T, compressibility=False)
            b = phasemap.solve(p, method=f"cmf:{cl}", T=T, compressibility=False)
            assert a.converged and b.converged
            assert b.energy == pytest.approx(a.energy, abs=1e-8)
            assert b.filling == pytest.approx(a.filling, abs=1e-7)
            assert b.condensate.max() == pytest.approx(a.condensate.max(), abs=1e-6)
            assert b.entropy == pytest.approx(a.entropy, abs=1e-7)


def test_triangle_lattice_gas_exact():
    """Exact: t = V = 0, every site an independent two-level system."""
    m = phasemap.Model(lattice="triangular", t=0.0, V=0.0, mu=0.0)
    for mu, T in ((-0.5, 0.3), (0.2, 1.0), (1.0, 0.25)):
        s = phasemap.solve(m.replace(mu=mu), method="cmf:tri3", T=T, compressibility=False)
        assert s.filling == pytest.approx(1 / (1 + np.exp(-mu / T)), abs=1e-10)
        assert s.energy == pytest.approx(-T * np.logaddexp(0.0, mu / T), abs=1e-10)


def _triangle_reference(t, mu, T, iters=4000):
    """Independent thermal cluster mean field of the hard-core triangle, uniform state."""
    states = list(itertools.product((0, 1), repeat=3))
    index = {s: i for i, s in enumerate(states)}
    nop = np.zeros((3, 8, 8))
    bop = np.zeros((3, 8, 8))
    for s in states:
        for a in range(3):
            nop[a, index[s], index[s]] = s[a]
            if s[a] == 1:
                s2 = list(s)
                s2[a] = 0
                bop[a, index[tuple(s2)], index[s]] = 1.0
    hop = sum(bop[i].T @ bop[j] + bop[j].T @ bop[i] for i, j in ((0, 1), (1, 2), (0, 2)))
    H_intra = -t * hop
    phi, n = 0.3, 0.5
    for _ in range(iters):
        H = H_intra + sum(-4 * t * phi * (bop[a] + bop[a].T) - mu * nop[a] for a in range(3))
        w, v = scipy.linalg.eigh(H)
        p = np.exp(-(w - w[0]) / T)
        p /= p.sum()
        rho = (v * p) @ v.T
        new_phi, new_n = np.trace(rho @ bop[0]), np.trace(rho @ nop[0])
        if abs(new_phi - phi) + abs(new_n - n) < 1e-14:
            break
        phi, n = 0.5 * (phi + new_phi), 0.5 * (n + new_n)
    S = -(p[p > 0] * np.log(p[p > 0])).sum()
    omega = (np.trace(rho @ H_intra) - 12 * t * phi**2 - 3 * mu * n - T * S) / 3
    return n, phi, omega


@pytest.mark.parametrize("mu,T", [(0.5, 1.0), (-0.4, 2.2), (1.5, 3.5)])
def test_triangle_against_independent_dense_construction(mu, T):
    t = 1.0
    n, phi, omega = _triangle_reference(t, mu, T)
    m = phasemap.Model(lattice="triangular", t=t, V=0.0, mu=mu)
    s = phasemap.solve(m, method="cmf:tri3", T=T, compressibility=False)
    assert s.converged
    assert s.filling == pytest.approx(n, abs=1e-7)
    assert s.condensate.max() == pytest.approx(phi, abs=1e-6)
    assert s.energy == pytest.approx(omega, abs=1e-8)


def test_thermal_cluster_size_guard():
    m = phasemap.Model(lattice="triangular", t=0.05, V=1.0, mu=1.5)
    with pytest.raises(ConfigError, match="thermal_max_dim = 1,024"):
        phasemap.solve(m, method="cmf:tri12", T=0.3)
    phasemap.solve(m, method="cmf:tri12", T=0.0, compressibility=False)  # T = 0: no guard
