"""Adaptive boundary tracing: a 2-D map computed coarse to fine.

The dense grid of a phase map is covered by coarse cells (about ``coarse`` fine cells on a
side). The corners of every cell are solved; a cell is split in four (by index bisection)
when its corners differ in phase label, when a corner is unconverged, or when an order
parameter (filling, largest condensate, largest structure factor) changes across it by more
than ``steep``. Splitting stops at the fine grid. A cell that is not split is *filled*: its
interior points take the corners' label, phase and per-site arrays of the nearest corner, and
bilinear interpolation of the corners' scalar values; they are marked ``solved = False``.

A filled cell is re-opened when a point solved later on its edge (by a refined neighbour)
carries another label: a boundary that bulges into a cell through one edge and leaves through
the same edge is then still traced.

What it cannot see: a phase region that lies entirely inside one coarse cell without touching
any corner or any refined neighbour's edge, and a steep change below ``steep`` per cell.
Choose ``coarse`` smaller than the smallest region you care about.

The result is the same labelled grid as a dense map (all variables on every grid point) plus
the boolean mask ``solved``; the points are solved level by level, each level one batch, so
each level is one independent, deterministic chunk (checkpointed for resume).
"""

from __future__ import annotations

import numpy as np

__all__ = ["trace", "coarse_breaks", "boundary_agreement", "STEEP_KEYS"]

#: order parameters whose change across a cell triggers refinement
STEEP_KEYS = ("filling", "condensate_max", "sq_max")


def coarse_breaks(n: int, coarse: int) -> np.ndarray:
    """Indices of the coarse grid lines along an axis of ``n`` points (ends included)."""
    if n <= 1:
        return np.zeros(1, int)
    k = max(1, int(round((n - 1) / max(coarse, 1))))
    return np.unique(np.round(np.linspace(0, n - 1, k + 1)).astype(int))


class _Grid:
    """Flat per-point arrays of the full grid, filled as points are solved or interpolated."""

    def __init__(self, shape):
        self.shape = shape
        self.data: dict | None = None
        self.solved = np.zeros(shape, bool)
        self.known = np.zeros(shape, bool)
        self.code = np.full(shape, -1, int)  # label code of known points
        self._codes: dict = {}

    def _alloc(self, part):
        P = self.shape[0] * self.shape[1]
        self.data = {}
        for k, v in part.items():
            v = np.asarray(v)
            self.data[k] = np.zeros((P,) + v.shape[1:], v.dtype if v.dtype.kind != "U" else object)

    def code_of(self, labels, converged):
        out = np.empty(len(labels), int)
        for i, (lab, c) in enumerate(zip(labels, converged)):
            key = str(lab) if c else "\0unconverged"
            out[i] = self._codes.setdefault(key, len(self._codes))
        return out

    def put(self, flat_idx, part):
        if self.data is None:
            self._alloc(part)
        for k, v in part.items():
            self.data[k][flat_idx] = v
        ij = np.unravel_index(flat_idx, self.shape)
        self.solved[ij] = True
        self.known[ij] = True
        self.code[ij] = self.code_of(part["label"], part["converged"])


def _corners(c):
    i0, i1, j0, j1 = c
    return [(i0, j0), (i1, j0), (i0, j1), (i1, j1)]


def _split(c):
    i0, i1, j0, j1 = c
    im = [(i0, i1)] if i1 - i0 <= 1 else [(i0, (i0 + i1) // 2), ((i0 + i1) // 2, i1)]
    jm = [(j0, j1)] if j1 - j0 <= 1 else [(j0, (j0 + j1) // 2), ((j0 + j1) // 2, j1)]
    return [(a, b, e, f) for a, b in im for e, f in jm]


def _needs(g: _Grid, c, steep):
    ij = _corners(c)
    size = max(c[1] - c[0], c[3] - c[2])
    codes = {int(g.code[p]) for p in ij}
    if len(codes) > 1 or any(not g.data["converged"][np.ravel_multi_index(p, g.shape)] for p in ij):
        return True
    fl = [np.ravel_multi_index(p, g.shape) for p in ij]
    for k in STEEP_KEYS:
        if k in g.data:
            v = np.asarray(g.data[k][fl], float)
            if np.all(np.isfinite(v)) and np.ptp(v) > steep * size:
                return True
    return False


def _fill(g: _Grid, c):
    """Interior (and not yet known edge) points of cell ``c`` from its corners.

    A uniform cell interpolates its scalars bilinearly; a cell whose corners differ (smallest
    cells only) takes every value from the nearest corner.
    """
    i0, i1, j0, j1 = c
    uniform = len({int(g.code[p]) for p in _corners(c)}) == 1
    ii, jj = np.meshgrid(np.arange(i0, i1 + 1), np.arange(j0, j1 + 1), indexing="ij")
    free = ~g.known[ii, jj]
    if not free.any():
        return
    ii, jj = ii[free], jj[free]
    fx = (ii - i0) / max(i1 - i0, 1)
    fy = (jj - j0) / max(j1 - j0, 1)
    w = np.stack([(1 - fx) * (1 - fy), fx * (1 - fy), (1 - fx) * fy, fx * fy], axis=1)  # (m, 4)
    cf = np.array([np.ravel_multi_index(p, g.shape) for p in _corners(c)])
    near = cf[np.argmax(w, axis=1)]
    dst = np.ravel_multi_index((ii, jj), g.shape)
    for k, arr in g.data.items():
        if uniform and arr.ndim == 1 and arr.dtype.kind == "f":
            vals = arr[cf]
            if np.all(np.isfinite(vals)):
                arr[dst] = w @ vals
            else:
                arr[dst] = arr[near]
        else:
            arr[dst] = arr[near]
    if "iterations" in g.data:
        g.data["iterations"][dst] = 0
    g.known[ii, jj] = True
    cc = np.array([g.code[p] for p in _corners(c)])
    g.code[ii, jj] = cc[np.argmax(w, axis=1)]


def _edge_disagrees(g: _Grid, c):
    """A point solved on the edge of filled cell ``c`` has another label than its corners."""
    i0, i1, j0, j1 = c
    ref = g.code[i0, j0]
    if len({int(g.code[p]) for p in _corners(c)}) > 1:
        return False  # a smallest boundary cell, filled from the nearest corner on purpose
    for sl in ((slice(i0, i1 + 1), j0), (slice(i0, i1 + 1), j1), (i0, slice(j0, j1 + 1)), (i1, slice(j0, j1 + 1))):
        s = g.solved[sl]
        if np.any(g.code[sl][s] != ref):
            return True
    return False


def trace(shape, solve, coarse: int = 8, steep: float = 0.05, finest: int = 1, on_level=None):
    """Adaptive evaluation of a 2-D grid.

    Parameters
    ----------
    shape : (nx, ny)
        The dense grid (flat index ``i * ny + j``, first axis slowest, as :func:`phasemap.params.grid`).
    solve : callable(level, flat_indices) -> dict of flat arrays
        Solves and classifies the given grid points (the dict of :func:`phasemap.scan.evaluate`:
        needs ``label``, ``converged`` and the :data:`STEEP_KEYS`). ``level`` numbers the batches
        0, 1, ... (for checkpoints; batches are deterministic given the earlier ones).
    coarse : int
        Coarse cell size in fine cells.
    steep : float
        Refine a cell whose corners' filling, largest condensate or largest structure factor
        differ by more than ``steep`` per fine grid step.
    finest : {1, 2}
        Size (in fine steps) of the smallest cell. 1 solves both sides of every boundary; 2
        stops one level earlier and fills a boundary cell's interior from the nearest corner,
        so a filled label may be wrong only on a point within one fine step of the boundary.
    on_level : callable(level, n_new, n_solved_total), optional
        Progress hook.

    Returns
    -------
    data : dict of flat arrays over the whole grid
    solved : (nx, ny) bool — points actually solved (the rest are filled from cell corners)
    """
    nx, ny = shape
    g = _Grid(shape)
    if nx == 1 or ny == 1:  # degenerate grid: solve everything
        idx = np.arange(nx * ny)
        g.put(idx, solve(0, idx))
        if on_level:
            on_level(0, len(idx), len(idx))
        return g.data, g.solved
    bx, by = coarse_breaks(nx, coarse), coarse_breaks(ny, coarse)
    pending = [((int(a), int(b), int(e), int(f)), False)
               for a, b in zip(bx[:-1], bx[1:]) for e, f in zip(by[:-1], by[1:])]
    filled: list = []
    level = -1
    while True:
        new = sorted({int(np.ravel_multi_index(p, shape)) for c, _ in pending for p in _corners(c)
                      if not g.solved[p]})
        if new:
            level += 1
            idx = np.array(new, int)
            g.put(idx, solve(level, idx))
            if on_level:
                on_level(level, len(idx), int(g.solved.sum()))
        # re-open filled cells whose edge now carries a solved point of another label
        reopened, keep = [], []
        for c in filled:
            if _edge_disagrees(g, c):
                i0, i1, j0, j1 = c
                g.known[i0:i1 + 1, j0:j1 + 1] &= g.solved[i0:i1 + 1, j0:j1 + 1]
                reopened.append((c, True))
            else:
                keep.append(c)
        filled = keep
        work = pending + reopened
        if not work:
            break
        pending = []
        for c, forced in work:
            if c[1] - c[0] <= 1 and c[3] - c[2] <= 1:
                continue  # fine cell: every point is a solved corner
            if finest > 1 and c[1] - c[0] <= finest and c[3] - c[2] <= finest:
                filled.append(c)  # smallest cell: nearest-corner fill
                _fill(g, c)
                continue
            if forced or _needs(g, c, steep):
                pending += [(ch, False) for ch in _split(c)]
            else:
                filled.append(c)
                _fill(g, c)
    for c in filled:  # cells un-known by a neighbour's re-opening are filled again
        _fill(g, c)
    return g.data, g.solved


def boundary_agreement(reference, labels) -> dict:
    """Compare a traced label grid with a dense one.

    Returns ``{"mismatched": m, "beyond_one_cell": b, "points": P}``: ``m`` points carry another
    label than the dense map; ``b`` of them have no point of their label within one fine grid
    step (Chebyshev distance 1, diagonals included) in the dense map, i.e. the traced boundary
    is off by more than one fine cell there.
    """
    ref, lab = np.asarray(reference), np.asarray(labels)
    mis = ref != lab
    beyond = 0
    nx, ny = ref.shape
    for i, j in zip(*np.nonzero(mis)):
        win = ref[max(i - 1, 0):i + 2, max(j - 1, 0):j + 2]
        if not np.any(win == lab[i, j]):
            beyond += 1
    return {"mismatched": int(mis.sum()), "beyond_one_cell": int(beyond), "points": int(ref.size)}
