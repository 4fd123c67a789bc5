"""Exact diagonalization of periodic clusters (canonical ensemble).

Front door: :func:`solve_ed` (one particle number -> :class:`phasemap.solution.Solution`),
:func:`staircase` (E0(N), mu+-(N), gaps, S(K) over N as an xarray Dataset), :func:`scan_ed`
(over a model parameter). Cluster library: :data:`CLUSTERS`. See docs/ed.md.
"""

from .clusters import CLUSTERS, chain, check_bonds, get_cluster, momentum_classes, point_group
from .groundstate import GroundState, ground_state
from .guard import DEFAULT_BUDGET_GIB, estimate, fock_dimension
from .io import save_dataset
from .solve import EDThresholds, observables, scan_ed, solve_ed
from .staircase import filling_from_staircase, particle_hole_shift, staircase

__all__ = ["CLUSTERS", "chain", "check_bonds", "get_cluster", "momentum_classes", "point_group",
           "GroundState", "ground_state", "DEFAULT_BUDGET_GIB", "estimate", "fock_dimension",
           "save_dataset", "EDThresholds", "observables", "solve_ed", "filling_from_staircase",
           "particle_hole_shift", "scan_ed", "staircase"]
