r"""Replica exchange in the chemical potential (parallel tempering in mu), compiled.

``R`` replicas of the same torus, beta and couplings at a ladder ``mu_0 < mu_1 < ... < mu_{R-1}``
(the target mu included) each do ordinary SSE sweeps (``kernel.sweep``); after every sweep,
neighbouring replicas ``(a, a+1)`` try to exchange their configurations, even pairs on even
sweeps and odd pairs on odd sweeps. A replica *slot* keeps its mu, its loop count, its random
stream and its measurements; configurations (operator string and state) move between slots.

Swap ratio (derivation in docs/qmc.md, "Replica exchange in mu"). With a common cut-off ``M``
and a common beta, the SSE weight of a configuration ``C`` (``n`` operators) under slot ``a`` is
``W_a(C) = beta^n (M - n)! / M! * prod_v w_a(v)`` over its vertices ``v``; only the diagonal
vertex weights ``w_a = C_a - E_a(n_i, n_j)`` depend on mu (through the bond share of mu *and*
the shift ``C_a``), the hopping weight ``t`` does not. Exchanging ``C_a`` and ``C_b`` is accepted
with ``min(1, W_a(C_b) W_b(C_a) / (W_a(C_a) W_b(C_b)))`` whose logarithm is

    sum_{type, code} cnt_a[type, code] (lw_b - lw_a)[type, code] + cnt_b (lw_a - lw_b),

``cnt`` the number of diagonal vertices of each code in a configuration and ``lw = ln w``; a
vertex with weight 0 under the other slot (``lw = -inf``) means rejection. The beta and
factorial factors cancel because beta, ``n`` and ``M`` are the same on both sides (the cut-off
grows only during warm-up, for all replicas together, by appending identities).

Walker labels: ``walker[slot]`` is the index of the configuration (its starting slot) now in a
slot; they are bookkeeping only (round trips of a configuration over the ladder).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from ..model import ConfigError
from .kernel import _uniform, sweep

__all__ = ["mu_ladder", "log_weights", "pt_block", "swap_step"]


def mu_ladder(mu: float, replicas: int, mu_step: float | None, beta: float, n_sites: int, scale: float,
              ladder=None) -> tuple[list, int]:
    """Chemical potentials of the replicas and the index of the target ``mu``.

    ``ladder`` (explicit list, must contain ``mu``) wins; else ``replicas`` values
    ``mu + mu_step * (k - (replicas - 1) // 2)``. Default ``mu_step = 1 / sqrt(beta N / scale)``
    (``scale`` the largest coupling): neighbouring replicas then differ by about one standard
    deviation of the particle number for a compressibility ~ 1/scale (overlap of the N
    histograms; common practice, no source).
    """
    if ladder is not None:
        try:
            lad = sorted(float(x) for x in ladder)
        except (TypeError, ValueError):
            raise ConfigError(f"mu_ladder: expected a list of numbers, got {ladder!r}") from None
        if len(lad) < 2 or not all(math.isfinite(x) for x in lad) or len(set(lad)) != len(lad):
            raise ConfigError(f"mu_ladder: need >= 2 distinct finite chemical potentials, got {ladder!r}")
        hit = [k for k, x in enumerate(lad) if abs(x - mu) <= 1e-12 * max(1.0, abs(mu))]
        if not hit:
            raise ConfigError(f"mu_ladder: must contain the model's mu = {mu:g}, got {lad}")
        lad[hit[0]] = float(mu)
        return lad, hit[0]
    if isinstance(replicas, bool) or not isinstance(replicas, (int, np.integer)) or not 1 <= replicas <= 64:
        raise ConfigError(f"replicas: expected an integer in [1, 64], got {replicas!r}")
    if mu_step is None:
        mu_step = 1.0 / math.sqrt(beta * n_sites / scale)
    try:
        mu_step = float(mu_step)
    except (TypeError, ValueError):
        raise ConfigError(f"mu_step: expected a positive number, got {mu_step!r}") from None
    if not (mu_step > 0 and math.isfinite(mu_step)):
        raise ConfigError(f"mu_step: must be > 0 and finite, got {mu_step}")
    c = (int(replicas) - 1) // 2
    return [float(mu) + mu_step * (k - c) if k != c else float(mu) for k in range(int(replicas))], c


def log_weights(wtab: np.ndarray) -> np.ndarray:
    """``ln wtab`` with ``-inf`` for forbidden vertices (module notes)."""
    w = np.asarray(wtab, float)
    out = np.full_like(w, -np.inf)
    ok = w > 0
    out[ok] = np.log(w[ok])
    return out


@njit(cache=True)
def _diag_counts(ops, state, bsite, btype, cnt, tmp):
    """cnt[type, code] = number of diagonal vertices of each code in (ops, state)."""
    cnt[:, :] = 0
    for i in range(state.shape[0]):
        tmp[i] = state[i]
    for p in range(ops.shape[0]):
        op = ops[p]
        if op < 0:
            continue
        b = op >> 1
        i = bsite[b, 0]
        j = bsite[b, 1]
        if op & 1:
            tmp[i] = 1 - tmp[i]
            tmp[j] = 1 - tmp[j]
        else:
            cnt[btype[b], tmp[i] * 5 + tmp[j] * 10] += 1


@njit(cache=True)
def _swap_log_ratio(cnt_a, cnt_b, lw_a, lw_b):
    lr = 0.0
    for ty in range(cnt_a.shape[0]):
        for c in (0, 5, 10, 15):
            na = cnt_a[ty, c]
            nb = cnt_b[ty, c]
            if na > 0:
                if lw_b[ty, c] == -np.inf:
                    return -np.inf
                lr += na * (lw_b[ty, c] - lw_a[ty, c])
            if nb > 0:
                if lw_a[ty, c] == -np.inf:
                    return -np.inf
                lr += nb * (lw_a[ty, c] - lw_b[ty, c])
    return lr


@njit(cache=True)
def swap_step(parity, ops, state, walker, bsite, btype, lw, cnt, tmp, rng, swapc):
    """Exchange attempts between slots (a, a+1), a = parity, parity + 2, ... (module notes).
    ``swapc[a, 0]`` counts attempts of pair a, ``swapc[a, 1]`` acceptances."""
    R = ops.shape[0]
    for r in range(R):
        _diag_counts(ops[r], state[r], bsite, btype, cnt[r], tmp)
    for a in range(parity, R - 1, 2):
        b = a + 1
        lr = _swap_log_ratio(cnt[a], cnt[b], lw[a], lw[b])
        swapc[a, 0] += 1
        accept = lr >= 0.0
        if not accept and lr > -np.inf:
            accept = _uniform(rng) < np.exp(lr)
        if accept:
            swapc[a, 1] += 1
            for p in range(ops.shape[1]):
                x = ops[a, p]
                ops[a, p] = ops[b, p]
                ops[b, p] = x
            for i in range(state.shape[1]):
                x = state[a, i]
                state[a, i] = state[b, i]
                state[b, i] = x
            w = walker[a]
            walker[a] = walker[b]
            walker[b] = w


@njit(cache=True)
def pt_block(nsw, ops, state, bsite, btype, bvec, wtab, cum, beta, nloops, rng,
             X, vtx, vty, opidx, first, last, cosq, sinq, kidx, nslice, sq_acc, rec, row0, do_measure,
             lflip, do_flip, flipc, lw, cnt, tmp, swap_rng, swapc, walker, counter, nops, visits):
    """``nsw`` sweeps of every replica, each followed by one round of exchange attempts.

    Stacked per slot (leading axis R): ops, state, wtab, cum, nloops, rng, sq_acc, rec, lflip,
    flipc, lw, cnt. ``counter[0]`` (sweeps done, decides the parity of the pairs) is advanced.
    ``nops[r]`` gets the operator count of slot r after its last sweep, ``visits[r]`` is
    incremented by its vertex visits. Measurements (``do_measure``) go to ``rec[r, row0 + s]``.
    """
    R = ops.shape[0]
    for s in range(nsw):
        for r in range(R):
            n, v = sweep(ops[r], state[r], bsite, btype, bvec, wtab[r], cum[r], beta, nloops[r], rng[r],
                         X, vtx, vty, opidx, first, last, cosq, sinq, kidx, nslice, sq_acc[r], rec[r],
                         row0 + s, do_measure, lflip[r], do_flip, flipc[r])
            nops[r] = n
            visits[r] += v
        if R > 1:
            swap_step(counter[0] % 2, ops, state, walker, bsite, btype, lw, cnt, tmp, swap_rng, swapc)
        counter[0] += 1
