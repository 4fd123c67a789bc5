"""Compiled kernels of the hard-core space-group sectors (numba; one file so that numba's
on-disk cache, which only watches the file of the cached function, sees every callee).

Used by :mod:`phasemap.ed.spacegroup` (dense rank table: enumeration, Hamiltonian entries,
products, observables) and :mod:`phasemap.ed.replookup` (table-free lookup: orbit keys by
applying the group, bisection). Layout of the table-free arguments ``sx`` and ``geo``: see
:mod:`phasemap.ed.replookup`.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, prange

_SENT = np.int32(-(2**31))
#: Hamiltonian entries are one int32 each: column in the low _COL_BITS bits, above it
#: 2 (family) + (1 if the character sign is -1); values are made on the fly in the product.
_COL_BITS = 27
_COL_MASK = (1 << _COL_BITS) - 1


# -- byte tables (built in Python, read by the kernels) -------------------------------------
def _perm_tables(perms: np.ndarray) -> np.ndarray:
    """ptab[g, c, b]: image bits of byte b of chunk c under permutation g (site i -> perms[g, i])."""
    G, L = perms.shape
    C = (L + 7) // 8
    tab = np.zeros((G, C, 256), np.int64)
    byte = np.arange(256)
    for c in range(C):
        for k in range(8):
            i = 8 * c + k
            if i >= L:
                break
            on = (byte >> k) & 1
            tab[:, c, :] |= on[None, :].astype(np.int64) << perms[:, i][:, None].astype(np.int64)
    return tab


# -- dense rank table ------------------------------------------------------------------------
@njit(cache=True, inline="always")
def _permute(ptab, g, s):
    out = np.int64(0)
    for c in range(ptab.shape[1]):
        out |= ptab[g, c, (s >> (8 * c)) & 255]
    return out


@njit(cache=True, inline="always")
def _rank(rtab, pc, s):
    r = np.int64(0)
    m = 0
    for c in range(rtab.shape[0]):
        b = (s >> (8 * c)) & 255
        r += rtab[c, m, b]
        m += pc[b]
    return r


@njit(cache=True, inline="always")
def _next_comb(s):
    """Next integer with the same number of set bits (Gosper)."""
    c = s & -s
    r = s + c
    return (((r ^ s) >> 2) // c) | r


@njit(cache=True, inline="always")
def _is_min(s, ptab):
    """True if no image of s is smaller (early exit; element 0 is the identity)."""
    for g in range(1, ptab.shape[0]):
        if _permute(ptab, g, s) < s:
            return False
    return True


@njit(cache=True, parallel=True)
def _stabilisers(orbits, ptab, chi, stab, ok):
    G = ptab.shape[0]
    for o in prange(orbits.shape[0]):
        s = orbits[o]
        st = 0
        good = True
        for g in range(G):
            if _permute(ptab, g, s) == s:
                st += 1
                if chi[g] != 1:
                    good = False
        stab[o] = st
        ok[o] = good


@njit(cache=True, parallel=True)
def _mark_orbits(orbits, index, ptab, rtab, pc, chi, table):
    """table[rank(g r)] = chi(g) (index(r) + 1), or the sentinel for orbits outside the sector."""
    G = ptab.shape[0]
    sent = np.int32(-(2**31))
    for o in prange(orbits.shape[0]):
        s = orbits[o]
        i = index[o]
        for g in range(G):
            rk = _rank(rtab, pc, _permute(ptab, g, s))
            table[rk] = sent if i < 0 else np.int32((i + 1) * chi[g])


def _unrank(rank: int, N: int) -> int:
    """Integer with N set bits of colexicographic rank ``rank``."""
    s = 0
    for k in range(N, 0, -1):
        c = k - 1
        while math.comb(c + 1, k) <= rank:
            c += 1
        s |= 1 << c
        rank -= math.comb(c, k)
    return s


# -- Hamiltonian entries, products, observables (either lookup) -----------------------------
@njit(cache=True, inline="always")
def _locate(t, table, rtab, pc, sx, scr):
    """chi(h) (index + 1) of the sector state whose orbit holds t, 0 if none (table or search)."""
    if table.shape[0] > 0:
        v = table[_rank(rtab, pc, t)]
        return np.int64(0) if v == np.int32(-(2**31)) else np.int64(v)
    return search_locate(t, sx, scr)


_BLOCKED = np.int64(-(2**62))


@njit(cache=True, inline="always")
def _hop(s, a, b, table, rtab, pc, sx, scr):
    """Target of the hop b -> a from state s: :func:`_locate` of it, or _BLOCKED (b empty or a full)."""
    if (s >> b) & 1 and not (s >> a) & 1:
        return _locate(s ^ ((np.int64(1) << a) | (np.int64(1) << b)), table, rtab, pc, sx, scr)
    return _BLOCKED


@njit(cache=True, parallel=True)
def _count_hops(reps, ba, bb):
    """Allowed hops per representative (an upper bound on the entries; see :func:`_compact`)."""
    n = reps.shape[0]
    counts = np.zeros(n + 1, np.int64)
    for r in prange(n):
        s = reps[r]
        k = 0
        for q in range(ba.shape[0]):
            if (s >> bb[q]) & 1 and not (s >> ba[q]) & 1:
                k += 1
        counts[r + 1] = k
    return counts


@njit(cache=True, parallel=True)
def _fill_hops(reps, table, rtab, pc, sx, ba, bb, bcode, indptr, packed):
    """Column and matrix-element kind of every hop, packed in one int32 (``_COL_BITS``); -1 if
    the target orbit is not in the sector."""
    n = reps.shape[0]
    for r in prange(n):
        scr = np.empty(2 * sx[0].shape[0], np.int64)
        s = reps[r]
        p = indptr[r]
        for q in range(ba.shape[0]):
            v = _hop(s, ba[q], bb[q], table, rtab, pc, sx, scr)
            if v == _BLOCKED:
                continue
            if v == 0:
                packed[p] = -1
            else:
                kind = 2 * (np.int64(bcode[q]) - 1)
                if v > 0:
                    col = v - 1
                else:
                    col = -v - 1
                    kind += 1
                packed[p] = np.int32(col | (kind << _COL_BITS))
            p += 1


@njit(cache=True)
def _compact(indptr, packed):
    """Drop the -1 entries in place; returns the new number of entries (indptr updated)."""
    k = 0
    start = indptr[0]
    for r in range(indptr.shape[0] - 1):
        end = indptr[r + 1]
        for p in range(start, end):
            if packed[p] >= 0:
                packed[k] = packed[p]
                k += 1
        start = end
        indptr[r + 1] = k
    return k


@njit(cache=True, parallel=True)
def _values(indptr, packed, stab, amps, out):
    """out[p] = +-amps[family] * sqrt(stab[col] / stab[row]) (explicit values, tests and small sectors)."""
    n = indptr.shape[0] - 1
    for r in prange(n):
        sr = stab[r]
        for p in range(indptr[r], indptr[r + 1]):
            e = packed[p]
            c = e & _COL_MASK
            k = e >> _COL_BITS
            a = amps[k >> 1] * np.sqrt(stab[c] / sr)
            out[p] = -a if k & 1 else a


@njit(cache=True, parallel=True)
def _packed_matvec(indptr, packed, amp2, sq, isq, diag, x, z, y):
    r"""y = H x with values made on the fly: y_r = d_r x_r + (1/sqrt S_r) sum_p a_p sqrt(S_c) x_c."""
    n = indptr.shape[0] - 1
    for r in prange(n):
        z[r] = sq[r] * x[r]
    for r in prange(n):
        acc = 0.0
        for p in range(indptr[r], indptr[r + 1]):
            e = packed[p]
            acc += amp2[e >> _COL_BITS] * z[e & _COL_MASK]
        y[r] = diag[r] * x[r] + isq[r] * acc


@njit(cache=True, parallel=True)
def _apply_bonds(reps, table, rtab, pc, sx, stab, ba, bb, amp, x, y):
    """Matrix-free y = O x for a G-invariant hopping operator O = sum_q amp_q b_a^+ b_b."""
    n = reps.shape[0]
    for r in prange(n):
        scr = np.empty(2 * sx[0].shape[0], np.int64)
        s = reps[r]
        acc = 0.0
        for q in range(ba.shape[0]):
            v = _hop(s, ba[q], bb[q], table, rtab, pc, sx, scr)
            if v != 0 and v != _BLOCKED:
                col = v - 1 if v > 0 else -v - 1
                w = amp[q] * np.sqrt(stab[col] / stab[r]) * x[col]
                acc += w if v > 0 else -w
        y[r] = acc


@njit(cache=True)
def _bond_counts(reps, nb):
    """counts[r, f] = number of bonds (i, nb[f, i]) with both ends occupied."""
    n = reps.shape[0]
    F, L = nb.shape
    out = np.zeros((n, F), np.int16)
    for r in range(n):
        s = reps[r]
        for f in range(F):
            k = 0
            for i in range(L):
                k += ((s >> i) & 1) & ((s >> nb[f, i]) & 1)
            out[r, f] = k
    return out


@njit(cache=True, parallel=True)
def _pair_correlation(reps, w, tgt, nchunk):
    """sum_r w_r sum_i n_i n_tgt[d, i] for every displacement d."""
    D, L = tgt.shape
    n = reps.shape[0]
    out = np.zeros((nchunk, D))
    for c in prange(nchunk):
        for r in range(c * n // nchunk, (c + 1) * n // nchunk):
            s = reps[r]
            for d in range(D):
                k = 0
                for i in range(L):
                    k += ((s >> i) & 1) & ((s >> tgt[d, i]) & 1)
                out[c, d] += w[r] * k
    return out.sum(0)


# -- table-free lookup: geo = [n1, n2, sh, full mask, h (rows in the head), bucket shift, bucket mask]
@njit(cache=True, inline="always")
def _rowrot(w, a, n1, hi, lo):
    """Rotate every row by a (bit x -> x + a mod n1): the translation a * a1."""
    if a == 0:
        return w
    return ((w << a) & hi[a]) | ((w >> (n1 - a)) & lo[a])


@njit(cache=True, inline="always")
def _ext(w, geo, hi, lo):
    """w shifted up by h - 1 rows with its top h - 1 rows (twisted) appended below row 0."""
    n1, n2, sh, h = geo[0], geo[1], geo[2], geo[4]
    if h == 1:
        return w
    return (w << (n1 * (h - 1))) | _rowrot(w >> (n1 * (n2 - h + 1)), sh, n1, hi, lo)


@njit(cache=True, inline="always")
def _head_max(w, geo, hi, lo, maxhead):
    """Largest head (top h rows) reachable from w by translations."""
    n1, n2, h = geo[0], geo[1], geo[4]
    hmask = (np.int64(1) << (n1 * h)) - 1
    e = _ext(w, geo, hi, lo)
    m = np.int64(0)
    for k in range(n2):
        m = max(m, np.int64(maxhead[(e >> (n1 * k)) & hmask]))
    return m


@njit(cache=True, inline="always")
def _shift_rows(w, b, geo, hi, lo):
    """The translation b * a2: rows move up by b, the top b rows wrap (twisted) to the bottom."""
    n1, n2, sh, full = geo[0], geo[1], geo[2], geo[3]
    if b == 0:
        return w
    return ((w << (n1 * b)) & full) | _rowrot(w >> (n1 * (n2 - b)), sh, n1, hi, lo)


@njit(cache=True)
def _canon(s, ptab, chi, geo, hi, lo, maxhead, rothead, scr):
    """(largest image, chi of an element reaching it, number of elements reaching it, chi agrees).

    ``ptab`` maps the input labelling to row-major positions (one table per point operation);
    ``scr`` is scratch space of 2 P integers.
    """
    n1, n2, h = geo[0], geo[1], geo[4]
    hmask = (np.int64(1) << (n1 * h)) - 1
    P = ptab.shape[0]
    gtop = np.int64(-1)
    for M in range(P):
        w = _permute(ptab, M, s)
        m = _head_max(w, geo, hi, lo, maxhead)
        scr[M] = w
        scr[P + M] = m
        gtop = max(gtop, m)
    best = np.int64(-1)
    sgn = np.int64(0)
    cnt = 0
    ok = True
    for M in range(P):
        if scr[P + M] != gtop:
            continue
        w = scr[M]
        e = _ext(w, geo, hi, lo)
        for b in range(n2):
            v = (e >> (n1 * (n2 - 1 - b))) & hmask
            if maxhead[v] == gtop:
                msk = rothead[v]
                y = _shift_rows(w, b, geo, hi, lo)
                for a in range(n1):
                    if (msk >> a) & 1:
                        c = _rowrot(y, a, n1, hi, lo)
                        if c > best:
                            best, sgn, cnt, ok = c, chi[M], 1, True
                        elif c == best:
                            cnt += 1
                            if chi[M] != sgn:
                                ok = False
    return best, sgn, cnt, ok


@njit(cache=True, inline="always")
def _is_key(s, ptab, chi, geo, hi, lo, maxhead, rothead, scr):
    """True if no image of the row-major state s is larger (early exit on the heads)."""
    n1, n2, h = geo[0], geo[1], geo[4]
    stop = (s >> (n1 * (n2 - h))) & ((np.int64(1) << (n1 * h)) - 1)
    for M in range(ptab.shape[0]):
        if _head_max(_permute(ptab, M, s), geo, hi, lo, maxhead) > stop:
            return False
    return _canon(s, ptab, chi, geo, hi, lo, maxhead, rothead, scr)[0] == s


@njit(cache=True, parallel=True)
def _flag_orbits(starts, chunk, total, topbit, ptab, chi, geo, hi, lo, maxhead, rothead, bits, largest):
    """bits[rank] = 1 where s = topbit | (rank-th combination) represents its orbit: the smallest
    image (``largest`` False, dense-table path) or the largest in the row-major labelling
    (True, table-free path). Chunks of a multiple of 8 ranks (one writer per byte); counts per chunk."""
    nch = starts.shape[0]
    counts = np.zeros(nch, np.int64)
    for c in prange(nch):
        scr = np.empty(2 * ptab.shape[0], np.int64)
        x = starts[c]
        r1 = min(total, (c + 1) * chunk)
        k = 0
        for rank in range(c * chunk, r1):
            s = x | topbit
            if _is_key(s, ptab, chi, geo, hi, lo, maxhead, rothead, scr) if largest else _is_min(s, ptab):
                bits[rank >> 3] |= np.uint8(1 << (rank & 7))
                k += 1
            if rank + 1 < r1:
                x = _next_comb(x)
        counts[c] = k
    return counts


@njit(cache=True, parallel=True)
def _collect(starts, chunk, total, topbit, bits, offsets, out):
    """The flagged states of :func:`_flag_orbits` in rank (= increasing integer) order."""
    for c in prange(starts.shape[0]):
        x = starts[c]
        r1 = min(total, (c + 1) * chunk)
        k = offsets[c]
        for rank in range(c * chunk, r1):
            if (bits[rank >> 3] >> (rank & 7)) & 1:
                out[k] = x | topbit
                k += 1
            if rank + 1 < r1:
                x = _next_comb(x)


@njit(cache=True, parallel=True)
def _key_info(keys, ptab, chi, geo, hi, lo, maxhead, rothead, stab, ok):
    for i in prange(keys.shape[0]):
        scr = np.empty(2 * ptab.shape[0], np.int64)
        _, sgn, cnt, good = _canon(keys[i], ptab, chi, geo, hi, lo, maxhead, rothead, scr)
        stab[i] = cnt
        ok[i] = good and sgn == 1


@njit(cache=True, parallel=True)
def _relabel(keys, inv, out):
    for i in prange(keys.shape[0]):
        out[i] = _permute(inv, 0, keys[i])


@njit(cache=True, inline="always")
def _search(keys, bucket, geo, k):
    """Index of k in the sorted keys, or -1 (bucket of the bits below the top bit, then bisection)."""
    bk = (k >> geo[5]) & geo[6]
    a = np.int64(bucket[bk])
    b = np.int64(bucket[bk + 1])
    while a < b:
        mid = (a + b) >> 1
        if keys[mid] < k:
            a = mid + 1
        else:
            b = mid
    if a < keys.shape[0] and keys[a] == k:
        return a
    return -1


@njit(cache=True)
def search_locate(t, sx, scr):
    """Signed index chi(h) (i + 1) of the sector state reached by the cell-order state t, or 0."""
    ptab, chi, geo, hi, lo, maxhead, rothead, keys, bucket = sx
    best, sgn, _, ok = _canon(t, ptab, chi, geo, hi, lo, maxhead, rothead, scr)
    if not ok:
        return np.int64(0)
    i = _search(keys, bucket, geo, best)
    if i < 0:
        return np.int64(0)
    return sgn * (i + 1)
