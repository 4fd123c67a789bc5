"""Cost guard: sector dimensions and memory estimates before anything is built.

The estimate is deliberately simple and slightly pessimistic; ``benchmarks/bench_ed.py``
compares it with the measured peak memory (see docs/ed.md).

References
----------
.. [1] A. Weiße and H. Fehske, "Exact diagonalization techniques", Lect. Notes Phys. 739,
   529 (2008) (dimension counting and memory of sparse Hamiltonians).
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass
from functools import lru_cache

from ..model import ConfigError

__all__ = ["fock_dimension", "Estimate", "estimate", "estimate_space_group", "choose_lookup", "check_budget",
           "DEFAULT_BUDGET_GIB"]

def _default_budget() -> float:
    """60 % of the physical memory, at most 16 GiB (8 GiB if the memory size is unknown)."""
    try:
        phys = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES") / 2**30
    except (ValueError, OSError, AttributeError):  # pragma: no cover - non-POSIX
        return 8.0
    return float(round(min(16.0, 0.6 * phys), 1))


#: Default memory budget of one sector (GiB): 60 % of this machine's memory, at most 16 GiB;
#: override with ``budget_gib=`` / ``--budget-gib``.
DEFAULT_BUDGET_GIB = _default_budget()


@lru_cache(maxsize=None)
def fock_dimension(L: int, N: int, n_max: int) -> int:
    """Number of ways to place N bosons on L sites with at most ``n_max`` per site.

    Coefficient of x^N in (1 + x + ... + x^n_max)^L (inclusion-exclusion);
    ``C(L, N)`` for hard-core bosons.
    """
    if N < 0 or N > L * n_max:
        return 0
    if L == 0:
        return 1
    return sum((-1) ** k * math.comb(L, k) * math.comb(N - k * (n_max + 1) + L - 1, L - 1)
               for k in range(0, min(L, N // (n_max + 1)) + 1))


@dataclass
class Estimate:
    """Predicted size of one particle-number sector."""

    L: int
    N: int
    n_max: int
    fock: int  # Fock states at this N
    sector: int  # states per momentum sector (fock / L)
    hops: int  # hopping-table entries (all orbits)
    bytes: float  # predicted peak memory
    kind: str = "per momentum sector"  # what ``sector`` counts

    @property
    def gib(self) -> float:
        return self.bytes / 2**30

    def describe(self) -> str:
        return (f"L={self.L}, N={self.N}, n_max={self.n_max}: {self.fock:.4g} Fock states, "
                f"{f'~{self.sector:.4g}' if self.kind.startswith('per') else self.sector} {self.kind}, ~{self.hops:.3g} hopping entries, "
                f"estimated peak memory {self.gib:.3g} GiB")


def estimate(L: int, N: int, n_max: int, n_hop_dirs: int, n_group: int | None = None,
             table: bool = True, ncv: int = 20) -> Estimate:
    """Estimate dimensions and peak memory of the sector with N particles.

    Parameters
    ----------
    n_hop_dirs : int
        Directed hopping terms per site (2 x number of families with t != 0).
    n_group : int, optional
        Order of the translation group used (default L).

    Notes
    -----
    Hops per representative = ``n_hop_dirs * L * p`` with ``p`` the probability that the
    source is occupied and the target not full; for hard-core ``p = N (L-N) / (L (L-1))``,
    for soft-core a uniform-density estimate. Bytes: hopping table (22 per entry), one
    complex sparse matrix with its assembly temporaries (~60 per entry), Lanczos vectors (``2 ncv + 8`` real vectors of twice the sector
    dimension) and the representative data (~(L + 40) bytes per state). The lookup table
    is the one :class:`phasemap.ed.sector.Sector` picks: 6 bytes per integer code
    (``sps**L``) when that is small, else ~40 bytes per Fock state.
    """
    G = n_group or L
    fock = fock_dimension(L, N, n_max)
    sector = -(-fock // G)
    if n_max == 1:
        p = _hop_probability(L, N)
    else:
        nbar = N / L
        p = min(1.0, nbar) * (1.0 - (nbar / (1 + nbar)) ** n_max)
    hops = int(sector * n_hop_dirs * L * p)
    direct = 6.0 * float(n_max + 1) ** L
    tab = (direct if direct < min(4 * 2**30, 40 * fock + 2**28) else 40.0 * fock) if table else 0.0
    b = tab + 22 * hops + 60 * hops + 8 * 2 * sector * (2 * ncv + 8) + (L + 40) * sector
    return Estimate(L, N, n_max, fock, sector, hops, float(b))


def _hop_probability(L: int, N: int) -> float:
    return N * (L - N) / (L * (L - 1)) if L > 1 else 0.0


#: A space-group rank table (4 bytes per Fock state) is kept after the build only up to this
#: size; a larger one is freed before Lanczos and rebuilt on demand by the observables.
TABLE_KEEP_BYTES = 2 * 2**30


def estimate_space_group(L: int, N: int, dim: int, n_hop_dirs: int, ncv: int = 20,
                         keep_table_bytes: float = TABLE_KEEP_BYTES, lookup: str = "table") -> Estimate:
    """Peak memory of a hard-core space-group sector (:class:`phasemap.ed.spacegroup.SymSector`).

    ``dim`` is the exact sector dimension (Burnside count). Bytes: the Hamiltonian entries
    (one packed int32 per hop, values made in the product; entries = ``dim * n_hop_dirs * L * p``
    with the hard-core hop probability ``p``), about 60 bytes per state (representatives,
    stabilisers, diagonal, row pointers, bond counts), and the larger of two phases:

    * ``lookup="table"``: the build (rank table, 4 bytes per Fock state ``C(L, N)``, one flag
      bit per Fock state, ~16 bytes per state of enumeration temporaries) and Lanczos (``ncv + 6`` vectors, plus the
      rank table only if it is kept, i.e. at most ``keep_table_bytes``; a larger table is freed
      before Lanczos and rebuilt after it by the observables that need it);
    * ``lookup="search"`` (:mod:`phasemap.ed.replookup`, no table): 16 more bytes per state
      kept (sorted keys and their cell-order states), the enumeration (one bit per walked state,
      ``C(L-1, N-1)``, plus ~32 bytes per state of temporaries) and Lanczos (``ncv + 6`` vectors).
    """
    fock = fock_dimension(L, N, 1)
    hops = int(dim * n_hop_dirs * L * _hop_probability(L, N))
    lanczos = 8.0 * (ncv + 6) * dim
    if lookup == "search":
        walked = fock_dimension(L - 1, N - 1, 1) if N > 0 else 1
        b = 4.0 * hops + 76.0 * dim + max(walked / 8.0 + 32.0 * dim, lanczos)
        kind = "in the space-group sector (exact; table-free lookup)"
    else:
        table = 4.0 * fock
        lanczos += table if table <= keep_table_bytes else 0.0
        b = 4.0 * hops + 60.0 * dim + max(table + fock / 8.0 + 16.0 * dim, lanczos)
        kind = "in the space-group sector (exact; rank table)"
    return Estimate(L, N, 1, fock, int(dim), hops, float(b), kind=kind)


#: Lookups of the space-group path: ``auto`` takes the table-free search wherever the torus
#: splits into rows (measured as fast or faster to build, same Lanczos; docs/ed.md), else the table.
REP_LOOKUPS = ("auto", "table", "search")


def choose_lookup(L: int, N: int, dim: int, n_hop_dirs: int, budget_gib=None, rep_lookup: str = "auto",
                  search_ok: bool = True) -> tuple[str, Estimate]:
    """The lookup the space-group sector will use and its memory estimate.

    ``auto``: the table-free search if the torus allows it (``search_ok``, every library
    torus), else the rank table; ``table``/``search`` force one. The caller checks the
    returned estimate against ``budget_gib`` (:func:`check_budget`); ``budget_gib`` is accepted
    here only to keep one signature for both estimates.
    """
    if rep_lookup not in REP_LOOKUPS:
        raise ConfigError(f"rep_lookup: must be one of {', '.join(REP_LOOKUPS)}, got {rep_lookup!r}")
    if rep_lookup == "search" and not search_ok:
        raise ConfigError("rep_lookup: 'search' needs a torus that splits into rows of at most 12 sites; "
                          "use 'table' or 'auto'")
    if rep_lookup == "table" or not search_ok:
        return "table", estimate_space_group(L, N, dim, n_hop_dirs, lookup="table")
    return "search", estimate_space_group(L, N, dim, n_hop_dirs, lookup="search")


def check_budget(est: Estimate, budget_gib: float | None = DEFAULT_BUDGET_GIB, what: str = "sector") -> None:
    """Refuse (ConfigError) when the estimate exceeds the budget; ``None`` disables the guard."""
    if budget_gib is None:
        return
    try:
        budget = float(budget_gib)
    except (TypeError, ValueError):
        raise ConfigError(f"budget_gib: expected a number of GiB > 0, got {budget_gib!r}") from None
    if not budget > 0:
        raise ConfigError(f"budget_gib: must be > 0 GiB, got {budget_gib!r}")
    if est.gib > budget:
        raise ConfigError(f"{what} too large for the memory budget: {est.describe()} > budget "
                          f"{budget:g} GiB (raise budget_gib / --budget-gib, or use a smaller cluster)")
