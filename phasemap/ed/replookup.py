r"""Table-free representative lookup for hard-core space-group sectors (large tori).

The dense lookup of :mod:`phasemap.ed.spacegroup` keeps 4 bytes per Fock state (36 GB for
36 sites at N = 18). Here nothing of the size of the Fock space is kept:

* the representative of an orbit is its **largest** image ("key"), computed on the fly for
  any state by applying the group;
* the keys of the sector are kept sorted (8 bytes per sector state) and a state's index is a
  two-level binary search (a coarse copy of every 64th key, then one block of 64).

Making each image cheap. Sites are relabelled ``p = x + n1 y`` along two translations
``a1`` (order ``n1``) and ``a2``, so a bit string is ``n2 = L / n1`` rows of ``n1`` bits and
the translation ``x a1 + y a2`` is a rotation of every row by ``x`` (two shifts and two masks
for all rows at once) after ``y`` steps of "move every row up one, the top row wraps to row 0
rotated by the twist ``sh``" (``n2 a2 = sh a1`` on the torus). A point operation is one
byte-table permutation (five look-ups for 36 sites) that also does the relabelling. The
largest image must have the largest possible top row: with a table ``maxrot[v]`` (largest
rotation of the row value v) only the (point operation, row) pairs that reach the overall
largest top row are expanded into full words, typically one or two of the |G| = 432 elements
on tri36. Because translations act transitively, the largest image has the top bit set, so
the enumeration of the sector walks only the C(L-1, N-1) states with bit L-1 set (a factor
N/L fewer than the dense path) and keeps a one-bit flag per walked state.

All kernels are compiled (numba) and parallel over states. Correctness is checked against the
dense-table path and brute-force orbit maxima in tests/test_ed_replookup.py.
"""

from __future__ import annotations

import numpy as np

from .sgkernels import (
    _collect,
    _flag_orbits,
    _key_info,
    _perm_tables,
    _relabel,
    _unrank,
)

__all__ = ["RowLayout", "SearchLookup", "row_layout"]

#: Longest row (bits) of the relabelled torus: the row tables have 2**n1 entries.
MAX_ROW = 12
#: Bits of the "head" (the top rows compared first): tables of 2**HEAD_BITS int32.
HEAD_BITS = 12


class RowLayout:
    """Relabelling of the torus sites into ``n2`` rows of ``n1`` bits (see module notes)."""

    def __init__(self, cell, a1, a2, n1):
        L = cell.n_sites
        s0 = cell.sites[0]
        self.a1, self.a2 = np.asarray(a1), np.asarray(a2)
        self.n1, self.n2 = int(n1), L // int(n1)
        xs, ys = np.meshgrid(np.arange(self.n1), np.arange(self.n2), indexing="xy")
        pts = s0 + xs.ravel()[:, None] * self.a1 + ys.ravel()[:, None] * self.a2
        self.pos = cell.index(pts)  # pos[p] = cell site at row-major position p
        if len(set(self.pos.tolist())) != L:
            raise ValueError("RowLayout: the two translations do not tile the torus")
        self.rm = np.empty(L, np.int64)
        self.rm[self.pos] = np.arange(L)  # rm[cell site] = row-major position
        wrap = int(cell.index(s0 + self.n2 * self.a2))
        sh = [x for x in range(self.n1) if int(cell.index(s0 + x * self.a1)) == wrap]
        self.sh = sh[0]
        self.L = L


def _order(cell, a) -> int:
    s0 = cell.sites[0]
    i0 = int(cell.index(s0))
    for n in range(1, cell.n_sites + 1):
        if int(cell.index(s0 + n * np.asarray(a))) == i0:
            return n
    raise AssertionError  # pragma: no cover


def row_layout(cell, max_row: int = MAX_ROW) -> RowLayout | None:
    """Two translations that write the torus as rows of at most ``max_row`` bits (longest rows).

    Returns ``None`` when no pair of small lattice vectors does it (then only the dense
    lookup is available).
    """
    L = cell.n_sites
    box = sorted(((x, y) for x in range(-6, 7) for y in range(-6, 7) if (x, y) != (0, 0)),
                 key=lambda v: (abs(v[0]) + abs(v[1]), -v[0], -v[1]))
    box = [np.array(v) for v in box]
    orders = [(_order(cell, a), k) for k, a in enumerate(box)]
    for n1, k in sorted(orders, key=lambda o: (-o[0], o[1])):
        if n1 > max_row or n1 < 2 or L % n1:
            continue
        for a2 in box:
            try:
                return RowLayout(cell, box[k], a2, n1)
            except ValueError:
                continue
    return None


def _head_tables(n1: int, h: int):
    """Joint rotations of the top ``h`` rows (an ``h n1``-bit value v, top row highest):
    maxhead[v] = largest joint rotation, rothead[v] = bit a set if rotation a attains it."""
    nb = n1 * h
    v = np.arange(1 << nb, dtype=np.int64)
    hi, lo = _masks(n1, h)
    rots = np.stack([v] + [((v << a) & hi[a]) | ((v >> (n1 - a)) & lo[a]) for a in range(1, n1)])
    mx = rots.max(0)
    rothead = ((rots == mx[None, :]) * (1 << np.arange(n1))[:, None]).sum(0)
    return mx.astype(np.int32), rothead.astype(np.int32)


def _masks(n1: int, n2: int):
    """hi[a]: positions x >= a of every row; lo[a]: positions x < a (n2 rows of n1 bits)."""
    hi = np.zeros(n1, np.int64)
    lo = np.zeros(n1, np.int64)
    for a in range(n1):
        for y in range(n2):
            for x in range(n1):
                bit = np.int64(1) << np.int64(x + n1 * y)
                if x >= a:
                    hi[a] |= bit
                else:
                    lo[a] |= bit
    return hi, lo


def flagged_states(n_bits, total, topbit, ptab, chi, geo, hi, lo, maxhead, rothead, largest, n_chunks=2048):
    """Orbit representatives among the states ``topbit | c`` (c: the ``total`` combinations of
    ``n_bits`` bits, walked in parallel chunks), in increasing order (:func:`_flag_orbits`)."""
    chunk = max(8, -(-total // n_chunks))
    chunk = -(-chunk // 8) * 8
    starts = np.array([_unrank(c * chunk, n_bits) for c in range(-(-total // chunk))], np.int64)
    bits = np.zeros(-(-total // 8), np.uint8)
    counts = _flag_orbits(starts, chunk, total, np.int64(topbit), ptab, chi, geo, hi, lo, maxhead, rothead, bits,
                          bool(largest))
    offsets = np.concatenate([[0], np.cumsum(counts)[:-1]]).astype(np.int64)
    out = np.empty(int(counts.sum()), np.int64)
    _collect(starts, chunk, total, np.int64(topbit), bits, offsets, out)
    return out


class SearchLookup:
    """Sorted keys of one sector and the tables to find any state's key (see module notes).

    Parameters
    ----------
    cell : Supercell
    point_perms : (P, L) int array
        Site permutation of every kept point operation (translation part zero).
    chi_op : (P,) int array
        Character of each point operation (+-1).
    N : int
    layout : RowLayout, optional
    """

    def __init__(self, cell, point_perms, chi_op, N: int, layout: RowLayout | None = None, n_chunks: int = 2048):
        import math

        lay = layout or row_layout(cell)
        if lay is None:
            raise ValueError(f"table-free lookup: no row layout with rows of <= {MAX_ROW} sites on this torus")
        L = cell.n_sites
        self.layout, self.L, self.N = lay, L, int(N)
        pp = np.asarray(point_perms, np.int64)
        self.ptab_cell = _perm_tables(lay.rm[pp])  # cell bit i -> row position of M(i)
        self.ptab_row = _perm_tables(lay.rm[pp[:, lay.pos]])  # row position p -> row position of M(pos[p])
        self.inv = _perm_tables(lay.pos[None, :])  # row position p -> cell site pos[p]
        self.chi = np.asarray(chi_op, np.int64)
        full = (1 << L) - 1
        h = max(1, min(HEAD_BITS // lay.n1, lay.n2))  # rows in the head
        while h > 1 and L + lay.n1 * (h - 1) > 63:
            h -= 1
        self.geo = np.array([lay.n1, lay.n2, lay.sh, full, h, 0, 0], np.int64)
        self.hi, self.lo = _masks(lay.n1, lay.n2)
        self.maxhead, self.rothead = _head_tables(lay.n1, h)
        # -- enumeration: keys have the top bit set (N >= 1) --
        if self.N == 0:
            cand = np.zeros(1, np.int64)
            self.walked = 1
        else:
            total = math.comb(L - 1, self.N - 1)
            self.walked = total
            cand = flagged_states(self.N - 1, total, 1 << (L - 1), self.ptab_row, self.chi, self.geo, self.hi, self.lo,
                                  self.maxhead, self.rothead, True, n_chunks)
        stab = np.empty(len(cand), np.int64)
        ok = np.empty(len(cand), np.bool_)
        _key_info(cand, self.ptab_row, self.chi, self.geo, self.hi, self.lo, self.maxhead, self.rothead, stab, ok)
        self.keys = np.ascontiguousarray(cand[ok])
        self.stab = stab[ok]  # elements of G fixing the key
        nb = int(min(24, L - 1, max(1, np.ceil(np.log2(max(2, len(self.keys) / 4))))))
        self.geo[5], self.geo[6] = L - 1 - nb, (1 << nb) - 1
        ids = (self.keys >> self.geo[5]) & self.geo[6]
        self.bucket = np.searchsorted(ids, np.arange((1 << nb) + 1)).astype(np.int32)
        del ids
        self.states = np.empty(len(self.keys), np.int64)
        _relabel(self.keys, self.inv, self.states)

    @property
    def pack(self):
        """The argument tuple of :func:`search_locate`."""
        return (self.ptab_cell, self.chi, self.geo, self.hi, self.lo, self.maxhead, self.rothead, self.keys,
                self.bucket)

    def nbytes(self) -> int:
        return int(self.keys.nbytes + self.bucket.nbytes + self.states.nbytes)


def empty_pack():
    """A placeholder argument tuple for kernels running on the dense table."""
    z3 = np.zeros((1, 1, 256), np.int64)
    z = np.zeros(1, np.int64)
    z32 = np.zeros(1, np.int32)
    return (z3, z, np.zeros(7, np.int64), z, z, z32, z32, z, z32)
