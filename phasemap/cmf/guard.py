"""Memory and time guard: estimate the cost of a cluster before building its operators.

The cluster Hilbert space without particle-number conservation has dimension
``(n_max + 1) ** N_C``. The operator storage is dominated by the off-diagonal entries of
the single-site fields ``b_s + b_s^+`` (``N_C * 2 n_max / (n_max + 1)`` per row on average)
and of the intra-cluster hopping (``2 N_B (n_max / (n_max + 1))**2`` per row). The estimate
counts the peak bytes while building (coordinate lists + sorted copy) plus the per-row
Lanczos workspace and the stored ground states of all seeds.
"""

from __future__ import annotations

from dataclasses import dataclass

from ..model import ConfigError

__all__ = ["CostEstimate", "estimate_cost", "check_budget"]

#: bytes per stored off-diagonal entry while building: rows+cols (int64) + value + term id +
#: final CSR index and data (int32 + float64) + sort permutation.
_BYTES_BUILD = 80  # calibrated on tri15/tri18 (peak RSS growth, bench_cmf.py)
_BASE_BYTES = 120 * 2**20  # QuSpin import + JIT-compiled kernels
_LANCZOS_VECTORS = 24


@dataclass(frozen=True)
class CostEstimate:
    """Estimated size of one cluster problem."""

    n_sites: int
    n_max: int
    dim: int
    nnz: int
    memory_bytes: int
    flops_per_matvec: int

    @property
    def memory_mb(self) -> float:
        return self.memory_bytes / 2**20

    def describe(self) -> str:
        return (f"{self.n_sites} sites, n_max={self.n_max}: Hilbert dimension (n_max+1)^N = "
                f"{self.n_max + 1}^{self.n_sites} = {self.dim:,}, ~{self.nnz:,} off-diagonal entries, "
                f"~{self.memory_mb:,.0f} MiB")


def estimate_cost(cluster, n_max: int, n_rows: int = 1, dense_max: int = 400) -> CostEstimate:
    """Estimate dimension, stored entries and peak memory of ``cluster`` at ``n_max``.

    Parameters
    ----------
    cluster : phasemap.cmf.clusters.Cluster
    n_max : int
        Occupation cut-off (1 = hard-core).
    n_rows : int
        Number of simultaneously stored ground states (seeds), for warm starts.
    dense_max : int
        Dimension up to which dense matrices are used.
    """
    N = cluster.n_sites
    d = n_max + 1
    dim = d**N
    pu = n_max / d
    per_row = N * 2 * pu + 2 * cluster.n_bonds * pu * pu
    nnz = int(dim * per_row)
    diag = dim * 8 * (N + cluster.lattice.n_families + 4)
    mem = _BASE_BYTES + nnz * _BYTES_BUILD + diag + dim * 8 * (_LANCZOS_VECTORS + n_rows)
    if dim <= dense_max:
        mem += 3 * dim * dim * 8
    return CostEstimate(N, n_max, int(dim), nnz, int(mem), int(2 * (nnz + dim)))


def check_budget(cluster, n_max: int, memory_mb: float, max_dim: int, n_rows: int = 1) -> CostEstimate:
    """Raise :class:`ConfigError` (with the estimate) when the cluster is too large.

    Raises
    ------
    ConfigError
        If the estimated memory exceeds ``memory_mb`` or the dimension exceeds ``max_dim``.
    """
    est = estimate_cost(cluster, n_max, n_rows=n_rows)
    if est.dim > max_dim or est.memory_mb > memory_mb:
        raise ConfigError(
            f"cluster {cluster.name!r} is too large: {est.describe()}; budget memory_mb={memory_mb:g}, "
            f"max_dim={max_dim:,}. Use a smaller cluster or n_max, or raise the budget options "
            "'memory_mb' / 'max_dim'"
        )
    return est
