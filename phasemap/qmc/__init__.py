"""Quantum Monte Carlo for hard-core bosons: stochastic series expansion with directed loops.

Public API::

    run_qmc(model, cluster=None, size=None, T=None, sweeps=10000, thermalization=None, bins=32,
            seed=0, chains=1, checkpoint=None, ...) -> QMCResult
    QMCResult.to_solution() -> phasemap.solution.Solution

See docs/qmc.md for the method, the estimators and the error analysis.

References
----------
.. [1] A. W. Sandvik, Phys. Rev. B 59, R14157 (1999) (stochastic series expansion, operator loops).
.. [2] O. F. Syljuåsen and A. W. Sandvik, Phys. Rev. E 66, 046701 (2002) (directed loops).
.. [3] F. Alet, S. Wessel and M. Troyer, Phys. Rev. E 71, 036706 (2005) (solving the
   directed-loop equations, minimal bounces, heat-bath fallback).
"""

from .geometry import Graph, open_chain, torus
from .run import GROUND_STATE, QMCResult, run_graph, run_qmc
from .stats import Estimate

__all__ = ["run_qmc", "QMCResult", "Estimate", "Graph", "torus", "open_chain", "run_graph", "GROUND_STATE"]
