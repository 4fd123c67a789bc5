"""One plateau record for every method of the strain workflow.

Whatever the method — a grand-canonical mean-field plateau with thermodynamic edges, the
finite-cluster step mu-(N), mu+(N) of exact diagonalization, or a finite-lattice Monte Carlo
n(mu) — the strain workflow sees a :class:`StepRecord`: edges, width, whether the solid is
indicated, convergence, order parameters with their one-sigma errors, flags, and the method's
own full result in ``detail``. Critical strains come as a :class:`CriticalResult` (root of the
plateau width, sharp methods) or an :class:`IndicatorResult` (finite lattices: no sharp
transition, a labelled crossover indicator that never enters the band).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

__all__ = ["StepRecord", "IndicatorResult"]


@dataclass
class StepRecord:
    """The plateau (or finite-lattice step) at filling ``fraction`` for P models.

    Attributes
    ----------
    method : str
        Spec name (``"mf"``, ``"cmf:tri12"``, ``"ed:tri21"``).
    fraction : str
    sharp : bool
        True: grand-canonical edges of the infinite lattice (the width closes at a critical
        strain). False: the step of a finite lattice (its gap never closes exactly).
    mu_lo, mu_hi, width : ndarray (P,)
        Edges and width in the table unit (finite lattice: mu-(N), mu+(N) and the charge gap).
    exists : ndarray of bool (P,)
        Plateau present (sharp) or density order indicated (finite lattice).
    converged : ndarray of bool (P,)
        No unconverged point touched the answer.
    order : dict of ndarray
        Order parameters at the plateau (``"S(K)/N"``, ``"sq_max"``, ``"condensate"``, ...).
    errors : dict of ndarray
        One-sigma statistical errors keyed like ``order`` or the edges (empty: deterministic).
    flags : list of list of str
    info : dict
        Scalars describing the method's system (cluster, n_sites, N, thresholds, edge meaning).
    grid : dict or None
        ``(P, M)`` arrays on the sweep's common mu grid when the method computed them.
    detail : object
        The method's own full result (PlateauResult, EDPlateau, ...).
    """

    method: str
    fraction: str
    sharp: bool
    mu_lo: np.ndarray
    mu_hi: np.ndarray
    width: np.ndarray
    exists: np.ndarray
    converged: np.ndarray
    order: dict = field(default_factory=dict)
    errors: dict = field(default_factory=dict)
    flags: list = field(default_factory=list)
    info: dict = field(default_factory=dict)
    grid: dict | None = None
    detail: object = None

    @property
    def size(self) -> int:
        return len(self.mu_lo)

    def ok(self, p: int) -> bool:
        return bool(self.converged[p])


@dataclass
class IndicatorResult:
    """"Critical strain" of a finite-lattice method: no sharp transition, only indicators.

    Same reading as :class:`phasemap.strain.critical.CriticalResult` (``method``,
    ``strain_c`` = None, ``in_band`` = False, :meth:`summary`, :meth:`to_dict`).
    """

    method: str
    record: dict

    strain_c = None
    in_band = False

    @property
    def status(self) -> str:
        return self.record["status"]

    def to_dict(self) -> dict:
        return dict(self.record)

    def summary(self) -> str:
        return self.record["text"]
