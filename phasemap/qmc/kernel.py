r"""Compiled (numba) hot loops of the stochastic series expansion: no Python per operator.

Configuration
-------------
* ``state[i]`` in {0, 1}: occupation of site i in the propagated state at string position 0.
* ``ops[p]`` for p in [0, M): ``-1`` identity, ``2 b`` diagonal operator on bond b,
  ``2 b + 1`` off-diagonal (hopping) operator on bond b.
* A vertex has four legs: 0 = site i below, 1 = site j below, 2 = site i above, 3 = site j
  above (bond ``b = (i, j)``); its code is ``l0 + 2 l1 + 4 l2 + 8 l3`` with ``l`` the
  occupations on the legs.
* ``wtab[type, code]``: vertex weight (matrix element of ``C_b - H_b``), 0 if forbidden.
* ``cum[type, code, in, out]``: cumulative directed-loop exit probabilities
  (``phasemap.qmc.tables``).

Random numbers: xoshiro256** (Blackman & Vigna 2018) on a ``uint64[4]`` state array owned by
the caller, so that a checkpoint can store and restore it exactly.

Particle-hole flip (last step of a sweep, ``do_flip``): every occupation of the configuration is
inverted, ``n_i -> 1 - n_i`` at every imaginary time (the state at position 0 flipped; every
operator keeps its bond and its diagonal/off-diagonal type, a hop of a particle becomes the hop
of a hole on the same bond with the same weight t). The map is an involution and keeps n and M,
so accepting it with min(1, W'/W), ``ln(W'/W) = sum over vertices of lflip[type, code]`` with
``lflip[type, c] = ln(wtab[type, c ^ 15] / wtab[type, c])`` (``-inf`` if the flipped weight
vanishes), satisfies detailed balance. ``flipc[0]`` counts attempts, ``flipc[1]`` acceptances.

Canonical sampling (``canon``): the directed-loop update satisfies detailed balance loop by loop
(the reverse loop has the reverse probability), so rejecting every loop whose outcome leaves the
particle-number sector -- undoing its vertex changes -- samples the same weights restricted to
that sector (a Metropolis restriction of a reversible kernel). A loop changes the particle number
only through the world-line segments that cross the string boundary (position 0, the legs
``first[i]`` / ``last[i]`` of each site): every traversal of such a segment flips its occupation,
``dn += 2 * (new occupation) - 1``; a bounce traverses it twice and cancels. Sites without
operators are not flipped (that flip changes N). Common practice in world-line Monte Carlo at
fixed particle number, no source for this form.

Per-sweep record (``rec[s, :]``): ``n_ops, N_particles, D_i, D_j, |rho_K|^2, |rho_K|^4`` where
``D`` is the total particle displacement (lattice coordinates) accumulated by the hopping
operators around imaginary time, and ``rho_K`` the order parameter averaged over the
measured time slices.
"""

from __future__ import annotations

import numpy as np
from numba import njit

__all__ = ["seed_state", "sweep", "block", "flip_table", "pt_block", "swap_step", "NREC"]

NREC = 6  # columns of the per-sweep record

_M64 = (1 << 64) - 1


def seed_state(seed: int, stream: int = 0) -> np.ndarray:
    """xoshiro256** state from an integer seed and a stream (chain) index via splitmix64."""
    x = (int(seed) * 0x9E3779B97F4A7C15 + int(stream) * 0xD1B54A32D192ED03 + 0x1234567) & _M64
    out = []
    for _ in range(4):
        x = (x + 0x9E3779B97F4A7C15) & _M64
        z = x
        z = ((z ^ (z >> 30)) * 0xBF58476D1CE4E5B9) & _M64
        z = ((z ^ (z >> 27)) * 0x94D049BB133111EB) & _M64
        out.append(z ^ (z >> 31))
    return np.array(out, dtype=np.uint64)


def flip_table(wtab: np.ndarray) -> np.ndarray:
    """``lflip[type, c] = ln(wtab[type, c ^ 15] / wtab[type, c])`` (module notes): the log weight
    ratio of a vertex under the particle-hole flip; ``-inf`` if the flipped vertex is forbidden,
    0 for vertices that cannot occur (weight 0)."""
    w = np.asarray(wtab, float)
    wf = w[:, np.arange(16) ^ 15]
    out = np.zeros_like(w)
    ok = w > 0
    with np.errstate(divide="ignore"):
        out[ok] = np.log(wf[ok]) - np.log(w[ok])
    return out


@njit(inline="always")
def _rotl(x, k):
    return (x << np.uint64(k)) | (x >> np.uint64(64 - k))


@njit(inline="always")
def _next(s):
    result = _rotl(s[1] * np.uint64(5), 7) * np.uint64(9)
    t = s[1] << np.uint64(17)
    s[2] ^= s[0]
    s[3] ^= s[1]
    s[1] ^= s[2]
    s[0] ^= s[3]
    s[2] ^= t
    s[3] = _rotl(s[3], 45)
    return result


@njit(inline="always")
def _uniform(s):
    return float(_next(s) >> np.uint64(11)) * (1.0 / 9007199254740992.0)


@njit(inline="always")
def _randint(s, n):
    k = int(_uniform(s) * n)
    return k if k < n else n - 1


@njit(cache=True)
def sweep(ops, state, bsite, btype, bvec, wtab, cum, beta, nloops, rng,
          X, vtx, vty, opidx, first, last, cosq, sinq, kidx, nslice, sq_acc, rec, srow, do_measure,
          lflip, do_flip, flipc, canon):
    """One Monte Carlo step: diagonal update, linked vertex list, ``nloops`` directed loops and,
    if ``do_flip``, one particle-hole flip attempt (module notes).

    ``canon``: fixed particle number (module notes, "Canonical sampling"): a loop that changes the
    particle number is undone and sites without operators are never flipped.

    Measurements (when ``do_measure``) are taken on the configuration after the diagonal
    update: the per-sweep record goes to ``rec[srow]``, slice-averaged ``|rho_Q|^2`` is added
    to ``sq_acc``. Returns ``(n_ops, vertex_visits)``.
    """
    M = ops.shape[0]
    N = state.shape[0]
    Nb = bsite.shape[0]
    # ---------------- diagonal update ----------------
    n = 0
    for p in range(M):
        if ops[p] >= 0:
            n += 1
    aprob = beta * Nb
    for p in range(M):
        op = ops[p]
        if op == -1:
            b = _randint(rng, Nb)
            i = bsite[b, 0]
            j = bsite[b, 1]
            code = state[i] + 2 * state[j] + 4 * state[i] + 8 * state[j]
            w = wtab[btype[b], code]
            if w > 0.0 and _uniform(rng) * (M - n) < aprob * w:
                ops[p] = 2 * b
                n += 1
        elif (op & 1) == 0:
            b = op >> 1
            i = bsite[b, 0]
            j = bsite[b, 1]
            code = state[i] + 2 * state[j] + 4 * state[i] + 8 * state[j]
            w = wtab[btype[b], code]
            if _uniform(rng) * aprob * w < (M - n + 1):
                ops[p] = -1
                n -= 1
        else:
            b = op >> 1
            i = bsite[b, 0]
            j = bsite[b, 1]
            state[i] = 1 - state[i]
            state[j] = 1 - state[j]
    # ---------------- linked vertex list (+ measurements) ----------------
    for i in range(N):
        first[i] = -1
        last[i] = -1
    npart = 0
    for i in range(N):
        npart += state[i]
    di = 0
    dj = 0
    m2 = 0.0
    m4 = 0.0
    nsl = nslice if n > 0 else 1
    if nsl > n and n > 0:
        nsl = n
    next_slice = 0
    islice = 0
    k = 0
    for p in range(M):
        op = ops[p]
        if do_measure and islice < nsl and k == next_slice:
            _measure_slice(state, cosq, sinq, kidx, sq_acc, nsl, N)
            if kidx >= 0:
                re = 0.0
                im = 0.0
                for s in range(N):
                    if state[s] == 1:
                        re += cosq[s, kidx]
                        im += sinq[s, kidx]
                a = (re * re + im * im) / (N * N)
                m2 += a / nsl
                m4 += a * a / nsl
            islice += 1
            next_slice = (islice * n) // nsl
        if op == -1:
            continue
        b = op >> 1
        i = bsite[b, 0]
        j = bsite[b, 1]
        si = state[i]
        sj = state[j]
        if op & 1:
            if si == 1:
                di += bvec[b, 0]
                dj += bvec[b, 1]
            else:
                di -= bvec[b, 0]
                dj -= bvec[b, 1]
            state[i] = 1 - si
            state[j] = 1 - sj
        vtx[k] = si + 2 * sj + 4 * state[i] + 8 * state[j]
        vty[k] = btype[b]
        opidx[k] = p
        v0 = 4 * k
        if last[i] >= 0:
            X[v0] = last[i]
            X[last[i]] = v0
        else:
            first[i] = v0
        last[i] = v0 + 2
        if last[j] >= 0:
            X[v0 + 1] = last[j]
            X[last[j]] = v0 + 1
        else:
            first[j] = v0 + 1
        last[j] = v0 + 3
        k += 1
    if do_measure:
        while islice < nsl:  # n == 0 case
            _measure_slice(state, cosq, sinq, kidx, sq_acc, nsl, N)
            if kidx >= 0:
                re = 0.0
                im = 0.0
                for s in range(N):
                    if state[s] == 1:
                        re += cosq[s, kidx]
                        im += sinq[s, kidx]
                a = (re * re + im * im) / (N * N)
                m2 += a / nsl
                m4 += a * a / nsl
            islice += 1
        rec[srow, 0] = n
        rec[srow, 1] = npart
        rec[srow, 2] = di
        rec[srow, 3] = dj
        rec[srow, 4] = m2
        rec[srow, 5] = m4
    for i in range(N):
        if first[i] >= 0:
            X[first[i]] = last[i]
            X[last[i]] = first[i]
    # canonical sampling: legs whose segment crosses the string boundary (position 0), undo buffer
    cross = np.zeros(4 * n if canon else 0, np.bool_)
    undo = np.empty(2 * n if canon else 0, np.int64)  # (vertex, code before the loop), first visits only
    seen = np.full(n if canon else 0, -1, np.int64)  # loop that last saved this vertex
    if canon:
        for i in range(N):
            if first[i] >= 0:
                cross[first[i]] = True
                cross[last[i]] = True
    # ---------------- directed loops ----------------
    visits = 0
    if n > 0:
        for iloop in range(nloops):
            j0 = _randint(rng, 4 * n)
            jj = j0
            nu = 0
            dn = 0
            while True:
                kk = jj >> 2
                li = jj & 3
                c = vtx[kk]
                ty = vty[kk]
                r = _uniform(rng)
                lo = 3
                for m in range(3):
                    if r < cum[ty, c, li, m]:
                        lo = m
                        break
                cn = c ^ (1 << li) ^ (1 << lo)
                if canon and seen[kk] != iloop:  # a loop can pass a vertex many times: keep its first code
                    seen[kk] = iloop
                    undo[nu] = kk
                    undo[nu + 1] = c
                    nu += 2
                vtx[kk] = cn
                visits += 1
                jj = 4 * kk + lo
                if jj == j0:
                    break
                if canon and cross[jj]:  # the segment crossing position 0 flips: N changes by +-1
                    dn += 2 * ((cn >> lo) & 1) - 1
                jj = X[jj]
                if jj == j0:
                    break
            if dn != 0:  # canonical: restore every vertex the loop touched
                for m in range(0, nu, 2):
                    vtx[undo[m]] = undo[m + 1]
        # map back: operator types and the state at position 0
        for kk in range(n):
            p = opidx[kk]
            b = ops[p] >> 1
            c = vtx[kk]
            if (c & 3) == (c >> 2):
                ops[p] = 2 * b
            else:
                ops[p] = 2 * b + 1
    for i in range(N):
        if first[i] >= 0:
            leg = first[i]
            state[i] = (vtx[leg >> 2] >> (leg & 3)) & 1
        elif not canon and _uniform(rng) < 0.5:
            state[i] = 1 - state[i]
    # ---------------- particle-hole flip of the whole configuration ----------------
    if do_flip:
        lr = 0.0
        for kk in range(n):  # vtx holds the vertex codes after the loops
            lr += lflip[vty[kk], vtx[kk]]
        flipc[0] += 1
        accept = lr >= 0.0
        if not accept and lr > -np.inf:
            accept = _uniform(rng) < np.exp(lr)
        if accept:
            flipc[1] += 1
            for i in range(N):
                state[i] = 1 - state[i]
    return n, visits


@njit(inline="always")
def _measure_slice(state, cosq, sinq, kidx, sq_acc, nsl, N):
    Nq = cosq.shape[1]
    norm = 1.0 / (nsl * N * N)
    for q in range(Nq):
        re = 0.0
        im = 0.0
        for s in range(N):
            if state[s] == 1:
                re += cosq[s, q]
                im += sinq[s, q]
        sq_acc[q] += (re * re + im * im) * norm


@njit(cache=True)
def block(nsw, ops, state, bsite, btype, bvec, wtab, cum, beta, nloops, rng,
          X, vtx, vty, opidx, first, last, cosq, sinq, kidx, nslice, sq_acc, rec, row0, lflip, do_flip, flipc,
          canon=False):
    """``nsw`` measured sweeps; records go to ``rec[row0 : row0 + nsw]``. Returns vertex visits."""
    tot = 0
    for s in range(nsw):
        n, v = sweep(ops, state, bsite, btype, bvec, wtab, cum, beta, nloops, rng,
                     X, vtx, vty, opidx, first, last, cosq, sinq, kidx, nslice, sq_acc, rec, row0 + s, True,
                     lflip, do_flip, flipc, canon)
        tot += v
    return tot


# ----------------------------------------------------------------------------- replica exchange
# The compiled half of phasemap.qmc.tempering (module notes there). It lives in this file because numba's
# on-disk cache of a function only watches the function's own source file: a pt_block cached in another
# file would keep calling an old sweep after sweep changed.


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
def swap_step(parity, ops, state, walker, bsite, btype, lw, lbeta, nops, cnt, tmp, rng, swapc):
    """Exchange attempts between slots (a, a+1), a = parity, parity + 2, ... (module notes).
    ``lbeta[r] = ln beta_r``, ``nops[r]`` the operator count of the configuration in slot r.
    ``swapc[a, 0]`` counts attempts of pair a, ``swapc[a, 1]`` acceptances."""
    R = ops.shape[0]
    for r in range(R):
        _diag_counts(ops[r], state[r], bsite, btype, cnt[r], tmp)
    for a in range(parity, R - 1, 2):
        b = a + 1
        lr = _swap_log_ratio(cnt[a], cnt[b], lw[a], lw[b])
        if lbeta[a] != lbeta[b]:
            lr += (nops[b] - nops[a]) * (lbeta[a] - lbeta[b])
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
            w = nops[a]
            nops[a] = nops[b]
            nops[b] = w


@njit(inline="always")
def _count(x):
    c = 0
    for i in range(x.shape[0]):
        c += x[i]
    return c


@njit(cache=True)
def pt_block(nsw, ops, state, bsite, btype, bvec, wtab, cum, beta, nloops, rng,
             X, vtx, vty, opidx, first, last, cosq, sinq, kidx, nslice, sq_acc, rec, row0, do_measure,
             lflip, do_flip, flipc, lw, cnt, tmp, swap_rng, swapc, walker, counter, nops, visits, smoves, canon=False):
    """``nsw`` sweeps of every replica, each followed by one round of exchange attempts.

    Stacked per slot (leading axis R): ops, state, wtab, cum, beta, nloops, rng, sq_acc, rec, lflip,
    flipc, lw, cnt. ``counter[0]`` (sweeps done, decides the parity of the pairs) is advanced.
    ``nops[r]`` gets the operator count of slot r after its last sweep, ``visits[r]`` is
    incremented by its vertex visits, ``smoves[r]`` by one for every sweep of slot r that changed
    ``|N - N_sites / 2|`` (a move between particle-number sectors by the loops; the particle-hole
    flip and the exchanges never do). Measurements (``do_measure``) go to ``rec[r, row0 + s]``.
    """
    R = ops.shape[0]
    lbeta = np.log(beta)
    for s in range(nsw):
        for r in range(R):
            d0 = abs(2 * _count(state[r]) - state.shape[1])
            n, v = sweep(ops[r], state[r], bsite, btype, bvec, wtab[r], cum[r], beta[r], nloops[r], rng[r],
                         X, vtx, vty, opidx, first, last, cosq, sinq, kidx, nslice, sq_acc[r], rec[r],
                         row0 + s, do_measure, lflip[r], do_flip, flipc[r], canon)
            nops[r] = n
            visits[r] += v
            if abs(2 * _count(state[r]) - state.shape[1]) != d0:
                smoves[r] += 1
        if R > 1:
            swap_step(counter[0] % 2, ops, state, walker, bsite, btype, lw, lbeta, nops, cnt, tmp, swap_rng, swapc)
        counter[0] += 1
