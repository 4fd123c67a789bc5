"""Directed-loop tables and the error analysis (fast, no sampling of a physical model).

Sources: detailed balance of the directed-loop equations (Syljuåsen & Sandvik, PRE 66, 046701
(2002)); bounce-free solutions at the Heisenberg point (same source, and Alet, Wessel & Troyer,
PRE 71, 036706 (2005)); binning/autocorrelation of an AR(1) process (exact tau_int =
(1+a)/(2(1-a)), e.g. Sokal 1997).
"""

from __future__ import annotations

import numpy as np

from phasemap.qmc.stats import estimate
from phasemap.qmc.tables import loop_tables, vertex_weights


def _exit_weights(w, cum):
    prob = np.diff(np.concatenate([np.zeros(cum.shape[:-1] + (1,)), cum], -1), axis=-1)
    return prob * w[:, None, None]  # a[code, in, out] = W(code) P(out | code, in)


# exact (detailed balance): a(c, in -> out) = a(c', out -> in) with c' = c ^ 2^in ^ 2^out, rows sum to 1
def test_tables_detailed_balance_random_weights():
    rng = np.random.default_rng(0)
    for _ in range(30):
        t, V, mi, mj = rng.uniform(0, 1), rng.uniform(-1, 2), rng.uniform(-1, 1), rng.uniform(-1, 1)
        w, C = vertex_weights(t, V, mi, mj, eps=rng.uniform(0, 0.3))
        assert w.min() >= 0
        cum, info = loop_tables(w[None])
        a = _exit_weights(w, cum[0])
        for c in range(16):
            for i in range(4):
                if w[c] > 0:
                    assert abs(cum[0, c, i, -1] - 1) < 1e-12
                for o in range(4):
                    c2 = c ^ (1 << i) ^ (1 << o)
                    assert abs(a[c, i, o] - a[c2, o, i]) < 1e-10 * max(1, w.max())
                    if w[c2] == 0:
                        assert abs(a[c, i, o]) < 1e-14 and (o == 3 or cum[0, c, i, o] >= cum[0, c, i, max(o - 1, 0)])


# Syljuasen & Sandvik 2002: at the isotropic Heisenberg point with the minimal shift there are no bounces
def test_heisenberg_point_bounce_free():
    J = 1.0  # t = J/2, V = J, mu shared so that the bond is S.S - 1/4 (chain: mu = J, half on each end)
    w, C = vertex_weights(J / 2, J, J / 2, J / 2, eps=0.0)
    cum, info = loop_tables(w[None])
    assert info[0]["bounce"] < 1e-12
    assert info[0]["heat_bath"] == 0


# exact: AR(1) series x_t = a x_{t-1} + noise has tau_int = (1 + a) / (2 (1 - a))
def test_binning_tau_ar1_and_flag():
    rng = np.random.default_rng(1)
    a, n = 0.9, 200000
    x = np.empty(n)
    x[0] = 0
    eps = rng.normal(size=n)
    for k in range(1, n):
        x[k] = a * x[k - 1] + eps[k]
    e = estimate([x[:, None]], bins=40)
    tau = (1 + a) / (2 * (1 - a))
    assert abs(e.tau - tau) < 0.25 * tau
    assert e.decorrelated
    short = estimate([x[:4000, None]], bins=400)  # bins of 10 sweeps, tau = 9.5: must be flagged
    assert not short.decorrelated
    white = estimate([eps[:, None]], bins=40)
    assert abs(white.tau - 0.5) < 0.1 and white.decorrelated


def test_chains_frozen_in_different_sectors_are_flagged():
    # Two chains stuck at different particle numbers (40 and 41 on a 9x9 torus at half filling): every
    # chain's own series is constant, so binning alone sees error 0 growth-free bins and no autocorrelation;
    # the chains' disagreement must flag the run (between-chain check, Gelman & Rubin, Statist. Sci. 7,
    # 457 (1992)). Independent chains of one stationary process must not be flagged.
    frozen = [np.full((4000, 1), 40.0), np.full((4000, 1), 41.0)]
    e = estimate(frozen, bins=16)
    assert e.value == 40.5 and not e.decorrelated
    # chains frozen at different values of a fluctuating-looking quantity: each chain white noise
    # around its own mean (shift 10 sigma of a chain mean) -> flagged too
    rng = np.random.default_rng(3)
    shifted = [rng.normal(0.0, 1.0, (4000, 1)), rng.normal(0.16, 1.0, (4000, 1))]
    assert not estimate(shifted, bins=16).decorrelated
    # 200 runs of 4 independent white-noise chains: agreement expected (tail probability 1e-6 per run)
    flagged = sum(not estimate([rng.normal(size=(2000, 1)) for _ in range(4)], bins=16).decorrelated
                  for _ in range(200))
    assert flagged <= 2
    same = [np.full((1000, 1), 12.0), np.full((1000, 1), 12.0)]  # one frozen value in every chain: a real gap
    assert estimate(same, bins=8).decorrelated
