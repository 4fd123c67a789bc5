r"""Cluster mean field (CMF): a cluster of sites solved exactly, the bonds leaving it decoupled.

Front door: :func:`solve_cmf_batch` (used by ``phasemap.solve(model, method="cmf",
cluster="tri12")``). Modules:

* :mod:`.clusters` — cluster library, user clusters, bond lists, scaling variable λ;
* :mod:`.hamiltonian` — QuSpin operators built once per cluster and n_max;
* :mod:`.selfconsistency` — boundary fields, Anderson-accelerated self-consistency,
  variational energy;
* :mod:`.stability` — linear stability of the zero-condensate cluster state (Mott lobes);
* :mod:`.scaling` — cluster-size scaling and extrapolation in λ;
* :mod:`.guard` — Hilbert-space dimension and memory estimate, budget check.

Caution: like every mean-field-type method CMF overestimates order; the extrapolation in λ
is a heuristic, not a controlled limit.

References
----------
D. Yamamoto, I. Danshita, C. A. R. Sá de Melo, PRA 85, 021601(R) (2012) (attribution from memory).
"""

from .clusters import LIBRARY, Cluster, get_cluster, library_names
from .guard import CostEstimate, check_budget, estimate_cost
from .selfconsistency import CMFBatchResult, CMFOptions, cluster_seeds, solve_cmf_batch

__all__ = ["solve_cmf_batch", "CMFOptions", "CMFBatchResult", "cluster_seeds", "Cluster", "get_cluster",
           "LIBRARY", "library_names", "estimate_cost", "check_budget", "CostEstimate"]
