r"""Vertex weights and directed-loop probability tables, one set per bond type.

A bond ``b = (i, j)`` of type ``tau`` carries

.. math::

    H_b = -t_\tau (b_i^\dagger b_j + h.c.) + V_\tau n_i n_j - \mu_i n_i - \mu_j n_j ,

with ``mu_i``, ``mu_j`` the shares of the chemical potential put on this bond. SSE samples
``-H = \sum_b (C_\tau - H_b) - \sum_b C_\tau``; the shift ``C_tau = max_diag(H_b) + eps_tau``
makes every diagonal vertex weight ``C_tau - E(n_i, n_j) >= eps_tau >= 0``. The off-diagonal
vertex weight is ``t_tau`` (>= 0: no sign problem).

Directed loops (Syljuåsen & Sandvik, PRE 66, 046701 (2002)): a loop head entering leg ``l`` of
a vertex flips it and leaves through leg ``m`` (flipping it too; ``m = l`` is a bounce). For a
hard-core (spin-1/2) vertex the four pairs ``(u ^ 2^k, entrance k)``, ``k = 0..3``, with ``u``
the configuration carrying the defect, form a closed set; the exit weights ``a_km`` must be
symmetric (detailed balance) with row sums ``W_k = W(u ^ 2^k)``. Following Alet, Wessel &
Troyer, PRE 71, 036706 (2005) we solve these equations per bond type and per set as a small
linear program minimising the total bounce weight ``sum_k a_kk``; if the program fails the
valid heat-bath solution ``a_km = W_k W_m / sum W`` is used instead.
"""

from __future__ import annotations

import numpy as np

__all__ = ["vertex_weights", "loop_tables", "diag_energy"]


def diag_energy(V: float, mu_i: float, mu_j: float, ni: int, nj: int) -> float:
    return V * ni * nj - mu_i * ni - mu_j * nj


def vertex_weights(t: float, V: float, mu_i: float, mu_j: float, eps: float):
    """(16,) vertex weights of one bond type and its shift C (see module notes)."""
    E = [diag_energy(V, mu_i, mu_j, a, b) for a in (0, 1) for b in (0, 1)]
    C = max(E) + eps
    w = np.zeros(16)
    for ni in (0, 1):
        for nj in (0, 1):
            w[ni + 2 * nj + 4 * ni + 8 * nj] = C - diag_energy(V, mu_i, mu_j, ni, nj)
    w[1 + 0 + 0 + 8] = t  # (1,0) -> (0,1): particle hops i -> j
    w[0 + 2 + 4 + 0] = t  # (0,1) -> (1,0)
    return w, C


def _solve_set(W: np.ndarray) -> tuple[np.ndarray, str]:
    """Symmetric a >= 0 with row sums W and minimal trace (bounces). Returns (a, how)."""
    from scipy.optimize import linprog

    S = W.sum()
    if S <= 0:
        return np.zeros((4, 4)), "empty"
    pairs = [(k, m) for k in range(4) for m in range(k, 4)]
    A = np.zeros((4, len(pairs)))
    for c, (k, m) in enumerate(pairs):
        A[k, c] += 1
        if m != k:
            A[m, c] += 1
    cost = np.array([1.0 if k == m else 0.0 for k, m in pairs])
    res = linprog(cost, A_eq=A, b_eq=W, bounds=[(0, None)] * len(pairs), method="highs")
    if res.status == 0:
        a = np.zeros((4, 4))
        for c, (k, m) in enumerate(pairs):
            a[k, m] = a[m, k] = max(res.x[c], 0.0)
        if np.allclose(a.sum(1), W, rtol=1e-9, atol=1e-12 * S):
            return a, "minimal-bounce"
    return np.outer(W, W) / S, "heat-bath"


def loop_tables(wtab: np.ndarray):
    """Cumulative exit probabilities ``cum[type, code, in, out]`` and bounce statistics.

    Parameters
    ----------
    wtab : (T, 16) array of vertex weights.

    Returns
    -------
    cum : (T, 16, 4, 4) array; ``prob[out] = cum[out] - cum[out-1]``.
    info : list of dict per type: ``bounce`` (largest bounce probability of an allowed
        vertex), ``heat_bath`` (number of sets that fell back to heat bath).
    """
    T = wtab.shape[0]
    prob = np.zeros((T, 16, 4, 4))
    info = []
    for ty in range(T):
        worst, hb = 0.0, 0
        for u in range(16):
            W = np.array([wtab[ty, u ^ (1 << k)] for k in range(4)])
            a, how = _solve_set(W)
            hb += how == "heat-bath"
            for k in range(4):
                if W[k] > 0:
                    c = u ^ (1 << k)
                    prob[ty, c, k] = a[k] / W[k]
                    worst = max(worst, prob[ty, c, k, k])
        info.append({"bounce": worst, "heat_bath": hb})
    cum = np.cumsum(prob, axis=-1)
    # the last allowed exit closes every row exactly at 1, so rounding can never pick a
    # forbidden (zero-probability) exit
    for idx in np.ndindex(cum.shape[:-1]):
        allowed = np.nonzero(prob[idx] > 0)[0]
        if len(allowed):
            cum[idx][allowed[-1]:] = 1.0
    return cum, info
