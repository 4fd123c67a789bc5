"""Ground state at fixed particle number: loop over momentum classes, keep the lowest.

References
----------
.. [1] A. Weiße and H. Fehske, Lect. Notes Phys. 739, 529 (2008).
.. [2] P. Weinberg and M. Bukov, SciPost Phys. 2, 003 (2017) (QuSpin).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..lattice import Supercell
from ..model import ConfigError, Model
from .clusters import check_bonds, get_cluster, momentum_classes, point_group
from .guard import DEFAULT_BUDGET_GIB, check_budget, choose_lookup, estimate
from .sector import Sector
from .spacegroup import MAX_SITES, SymSector, group_permutations, sector_dimension

__all__ = ["GroundState", "ground_state", "check_particles"]

#: Levels closer than this (relative) count as degenerate across momenta.
DEGENERACY_TOL = 1e-8


@dataclass
class GroundState:
    """Lowest state at fixed N.

    Attributes
    ----------
    e0 : float
        Ground-state energy (of the model's Hamiltonian, including ``-mu N``).
    q : ndarray (2,)
        Momentum of the ground state (units of the reciprocal vectors); ``q_name`` its label.
    degenerate : list of str
        All momenta whose sector energy is within ``DEGENERACY_TOL`` of ``e0``.
    sector_e0 : dict
        Lowest energy of every diagonalised momentum class (key: representative label).
    dims, times : dict
        Dimension and solve time (s) of each diagonalised sector; ``build_time`` for the basis.
    """

    cell: Supercell
    model: Model
    N: int
    e0: float
    q: np.ndarray
    q_name: str
    vec: np.ndarray
    sector: Sector
    degenerate: list = field(default_factory=list)
    sector_e0: dict = field(default_factory=dict)
    dims: dict = field(default_factory=dict)
    times: dict = field(default_factory=dict)
    build_time: float = 0.0
    residual: float = 0.0

    @property
    def L(self) -> int:
        return self.cell.n_sites


def check_particles(N, L: int, n_max: int, name: str = "particles") -> int:
    """Validate a particle number ``0 <= N <= n_max L``."""
    if isinstance(N, bool) or not float(N).is_integer():
        raise ConfigError(f"{name}: expected an integer number of bosons, got {N!r}")
    N = int(N)
    if not 0 <= N <= n_max * L:
        raise ConfigError(f"{name}: must be between 0 and n_max * sites = {n_max * L}, got {N}")
    return N


def n_hop_dirs(model: Model) -> int:
    return 2 * sum(1 for t in model.t if t != 0)


def uses_space_group(model: Model, cell, *, symmetric=True, momenta=None, all_momenta=False,
                     space_group=True, lookup="auto") -> bool:
    """True when :func:`ground_state` works in the trivial space-group sector (hard-core, t >= 0)."""
    return bool(space_group and symmetric and model.hardcore and momenta is None and not all_momenta
                and min(model.t) >= 0 and cell.n_sites <= MAX_SITES and lookup == "auto")


#: Space-group sectors kept for reuse by later models on the same cluster (scans, strain),
#: as long as their rank tables together stay below this many bytes.
SECTOR_CACHE_BYTES = 2 * 2**30
_SECTORS: dict = {}


def _search_ok(cell) -> bool:
    from .replookup import row_layout

    key = (cell.lattice.name, cell.vectors.tobytes())
    if key not in _LAYOUT_OK:
        _LAYOUT_OK[key] = row_layout(cell) is not None
    return _LAYOUT_OK[key]


_LAYOUT_OK: dict = {}


def space_group_plan(model: Model, cell, N: int, budget_gib=DEFAULT_BUDGET_GIB, rep_lookup: str = "auto",
                     ops=None):
    """(lookup, estimate) of the trivial space-group sector at N (:func:`phasemap.ed.guard.choose_lookup`)."""
    ops = point_group(cell, model) if ops is None else ops
    perms, _ = group_permutations(cell, ops)
    dim = sector_dimension(perms, np.ones(len(perms), np.int64), N)
    return choose_lookup(cell.n_sites, N, dim, n_hop_dirs(model), budget_gib, rep_lookup,
                         search_ok=_search_ok(cell))


def sector_estimate(model: Model, cell, N: int, budget_gib=DEFAULT_BUDGET_GIB, rep_lookup: str = "auto", **kw):
    """The memory estimate :func:`ground_state` checks for this sector (same options)."""
    if uses_space_group(model, cell, **kw):
        return space_group_plan(model, cell, N, budget_gib, rep_lookup)[1]
    sym = kw.get("symmetric", True)
    return estimate(cell.n_sites, N, model.n_max, n_hop_dirs(model), cell.n_sites if sym else 1)


def space_group_sector(model: Model, cell, N: int, budget_gib=DEFAULT_BUDGET_GIB, rep_lookup: str = "auto") -> SymSector:
    """The trivial sector of the kept space group at N (cached per cluster, N and symmetry).

    ``rep_lookup``: "table" (dense rank table, fastest), "search" (table-free,
    :mod:`phasemap.ed.replookup`) or "auto" (the table when its estimate fits ``budget_gib``).
    """
    ops = point_group(cell, model)
    lookup, est = space_group_plan(model, cell, N, budget_gib, rep_lookup, ops=ops)
    key = (cell.lattice.name, cell.vectors.tobytes(), N, tuple(np.asarray(ops).ravel().tolist()),
           tuple(bool(t) for t in model.t), bool(model.V2), lookup)
    check_budget(est, budget_gib, what=f"ED sector N={N} on {cell!r}")  # also for a cached sector
    sec = _SECTORS.get(key)
    if sec is not None and sec.compatible(model):
        sec.set_model(model)
        return sec
    sec = SymSector(cell, model, N, ops=ops, lookup=lookup)
    sec.estimate = est
    if 4.0 * sec.fock <= SECTOR_CACHE_BYTES:
        while _SECTORS and sum(4.0 * s.fock for s in _SECTORS.values()) + 4.0 * sec.fock > SECTOR_CACHE_BYTES:
            _SECTORS.pop(next(iter(_SECTORS)))
        _SECTORS[key] = sec
    return sec


def ground_state(model: Model, cluster, N: int, *, symmetric: bool = True, point_group_reduce: bool = True,
                 budget_gib: float | None = DEFAULT_BUDGET_GIB, tol: float = 1e-10, lookup: str = "auto",
                 momenta=None, all_momenta: bool = False, space_group: bool = True,
                 rep_lookup: str = "auto") -> GroundState:
    """Exact ground state with N bosons on a periodic cluster.

    Parameters
    ----------
    model : Model
    cluster : str, Supercell or (2, 2) vectors
    N : int
    symmetric : bool
        Use translation blocks (default); ``False`` diagonalises the whole N sector.
    point_group_reduce : bool
        Diagonalise one momentum per class of momenta related by the point-group operations
        that respect the couplings and by time reversal (degenerate sectors).
    budget_gib : float or None
        Memory budget of the sector; ``None`` disables the guard.
    tol : float
        Lanczos (ARPACK) relative residual tolerance; energies are accurate to ~tol^2.
    momenta : list of int, optional
        Restrict to these momentum indices (``cell.momenta``); then no class reduction.
    space_group : bool, default True
        Hard-core bosons with t >= 0 (and no ``momenta``/``all_momenta``): diagonalise only
        the trivial sector of the space group that the couplings keep (translations x kept
        point group, :mod:`phasemap.ed.spacegroup`), where a ground state lies by the
        Perron-Frobenius argument below. ``False`` uses the translation-only Q = 0 sector.
    rep_lookup : {"auto", "table", "search"}
        Space-group path: the dense rank table (4 bytes per Fock state, fastest), the
        table-free search (:mod:`phasemap.ed.replookup`), or "auto" (the table when the
        guard's estimate fits ``budget_gib``, else the search).
    all_momenta : bool, default False
        Diagonalise every momentum class. By default only Q = 0 is diagonalised: with
        t >= 0 every off-diagonal element is <= 0 in the occupation basis, so by the
        Perron-Frobenius theorem a ground state with non-negative amplitudes exists; its
        translation average is a Q = 0 ground state. E0(N) is therefore exact either way;
        ``all_momenta`` additionally lists degenerate momenta and every sector energy.

    Notes
    -----
    The Perron-Frobenius argument needs t >= 0 (enforced by :class:`phasemap.Model`) and no
    twist; ``all_momenta`` is the check (tests/test_ed_symmetry.py).

    Raises
    ------
    ConfigError
        Bad cluster or particle number, doubled bonds, or over the memory budget.
    """
    cell = get_cluster(cluster, model.lattice)
    check_bonds(cell, model)
    N = check_particles(N, cell.n_sites, model.n_max)
    if uses_space_group(model, cell, symmetric=symmetric, momenta=momenta, all_momenta=all_momenta,
                        space_group=space_group, lookup=lookup):
        import time

        t0 = time.perf_counter()
        sec = space_group_sector(model, cell, N, budget_gib, rep_lookup)
        build = time.perf_counter() - t0
        t1 = time.perf_counter()
        w, v = sec.solve(tol=tol)
        name = cell.momentum_name(np.zeros(2))
        vec = v[:, 0]
        residual = float(np.linalg.norm(sec.matvec(vec) - w[0] * vec))
        return GroundState(cell, model, N, float(w[0]), np.zeros(2), name, vec, sec, [name], {name: float(w[0])},
                           {name: sec.dim}, {name: time.perf_counter() - t1}, build_time=build, residual=residual)
    est = estimate(cell.n_sites, N, model.n_max, n_hop_dirs(model), cell.n_sites if symmetric else 1)
    check_budget(est, budget_gib, what=f"ED sector N={N} on {cell!r}")
    sec = Sector(cell, model, N, symmetric=symmetric, lookup=lookup)
    if not symmetric:
        classes = [[0]]
        qs = np.zeros((1, 2))
    else:
        qs = cell.momenta
        if momenta is not None:
            classes = [[int(k)] for k in momenta]
        elif not all_momenta and min(model.t) >= 0:
            gamma = int(np.argmin(np.abs(np.mod(qs + 0.5, 1) - 0.5).sum(1)))
            classes = [[gamma]]
        else:
            classes = momentum_classes(cell, point_group(cell, model) if point_group_reduce else [])
    best, sector_e0, dims, times = None, {}, {}, {}
    for cls in classes:
        k = cls[0]
        r = sec.solve(qs[k], tol=tol, q_index=k)
        name = cell.momentum_name(qs[k]) if symmetric else "all"
        sector_e0[name], dims[name], times[name] = r.e0, r.dim, r.time
        if r.dim and (best is None or r.e0 < best.e0 - DEGENERACY_TOL * max(1.0, abs(r.e0))):
            best = r
    scale = DEGENERACY_TOL * max(1.0, abs(best.e0))
    degenerate = [cell.momentum_name(qs[m]) if symmetric else "all"
                  for cls in classes if sector_e0[cell.momentum_name(qs[cls[0]]) if symmetric else "all"] - best.e0 < scale
                  for m in cls]
    vec = best.vectors[:, 0]
    H = sec.matrix(qs[best.q_index])
    residual = float(np.linalg.norm(H @ vec - best.e0 * vec))
    q = qs[best.q_index]
    return GroundState(cell, model, N, float(best.e0), q, cell.momentum_name(q) if symmetric else "all", vec, sec,
                       degenerate, sector_e0, dims, times, build_time=sec.build_time, residual=residual)
