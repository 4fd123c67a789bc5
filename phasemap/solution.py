"""The result object shared by every solver (mean field, cluster mean field, exact diagonalization).

Reads like ``scipy.optimize.OptimizeResult``: ``success``/``converged``, ``status``,
``message`` and ``nit`` say how the solve ended, whatever method produced it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from .model import Model

__all__ = ["Solution", "PHASES", "UNCONVERGED"]

#: The phase names of the classification, in the order of the phase codes stored in files.
#: "normal" (uniform, no condensate, non-integer filling) only occurs at a temperature T > 0.
PHASES = ("empty", "full", "mott", "solid", "supersolid", "superfluid", "normal")
#: Phase value of a point whose solve did not converge (never silently classified).
UNCONVERGED = "unconverged"


@dataclass
class Solution:
    """Ground-state answer at one parameter point.

    Attributes
    ----------
    model : Model
    method : str
        The method as spelled everywhere: ``"mf"``, ``"cmf:tri12"``, ``"ed:tri21"``, ...
    phase : str
        One of :data:`PHASES`, or ``"unconverged"``.
    label : str
        Human label, e.g. ``"solid 1/3"``, ``"solid 1/2 stripe"``, ``"mott n=1"``.
    filling : float
        Mean density per site.
    densities, condensate : ndarray
        Site densities ``<n_s>`` and condensate amplitudes ``|<b_s>|`` on ``sites``.
    energy : float
        Variational (mean field) or exact (ED) energy per site, in the model's unit; at a
        temperature T > 0 the (variational) grand potential per site <H - mu N>/N - T S/N.
    converged : bool
    iterations : int
    residual : float
    seed : str
        Name of the starting point that won (lowest energy).
    pattern : str
        Recognised ordering pattern ("uniform", "sqrt3", "stripe_d1", ...; "" if none).
    order : dict
        Order parameters: ``S(Q)`` at the strongest nonzero momentum (``sq_max``, ``q_max``),
        density contrast, max condensate, and anything else the solver adds.
    flags : list of str
        Warnings attached to this point (e.g. "n_max-weight", "lower-energy-unconverged").
    sites : ndarray
        (N, 2) integer lattice coordinates of the sites the arrays refer to.
    branches : list of dict
        Every seed's end state: seed name, energy, converged, filling, phase.
    temperature : float
        Temperature in the model's unit (0: ground state).
    entropy : float or None
        Entropy per site (in units of k_B) of the winning state at T > 0.
    errors : dict
        One-sigma statistical errors keyed like the fields they belong to (``"energy"``,
        ``"filling"``, ``"compressibility"``, ``"structure_factor"``, ``"stiffness"``, or an
        ``order`` key); empty for deterministic methods.
    """

    model: Model
    method: str
    phase: str
    label: str
    filling: float
    densities: np.ndarray
    condensate: np.ndarray
    energy: float
    converged: bool
    iterations: int = 0
    residual: float = math.nan
    seed: str = ""
    pattern: str = ""
    order: dict = field(default_factory=dict)
    flags: list = field(default_factory=list)
    sites: np.ndarray | None = None
    branches: list = field(default_factory=list)
    compressibility: float | None = None
    extra: dict = field(default_factory=dict)
    errors: dict = field(default_factory=dict)
    temperature: float = 0.0
    entropy: float | None = None

    # scipy-like reading
    @property
    def success(self) -> bool:
        return bool(self.converged)

    @property
    def nit(self) -> int:
        return int(self.iterations)

    @property
    def status(self) -> int:
        return 0 if self.converged else 1

    @property
    def message(self) -> str:
        if self.converged:
            return f"converged in {self.iterations} iterations (residual {self.residual:.2e})"
        return f"NOT converged after {self.iterations} iterations (residual {self.residual:.2e})"

    def _pm(self, key) -> str:
        e = self.errors.get(key)
        return f" ± {e:.2g}" if isinstance(e, (float, int)) and not isinstance(e, bool) else ""

    def summary(self) -> str:
        m = self.model
        lines = [
            f"model    : {m.describe()}",
            f"method   : {self.method}",
            f"phase    : {self.phase}   ({self.label})",
            f"filling  : {self.filling:.6f}{self._pm('filling')}",
            (f"energy   : {self.energy:.10g}{self._pm('energy')} {m.unit} per site" if not self.temperature else
             f"T        : {self.temperature:.6g} {m.unit}; entropy {self.entropy:.6g} per site\n"
             f"grand pot: {self.energy:.10g}{self._pm('energy')} {m.unit} per site (<H - mu N>/N - T S/N)"),
            f"status   : {self.message}; winning seed {self.seed!r}",
            "densities: " + " ".join(f"{x:.4f}" for x in self.densities),
            "|<b>|    : " + " ".join(f"{x:.4f}" for x in self.condensate),
        ]
        if self.order:
            lines.append("order    : " + ", ".join(f"{k}={_fmt(v)}{self._pm(k)}" for k, v in self.order.items()))
        if self.compressibility is not None:
            lines.append(f"dn/dmu   : {self.compressibility:.6g} per {m.unit}")
        if self.flags:
            lines.append("flags    : " + ", ".join(self.flags))
        return "\n".join(lines)

    def to_dict(self) -> dict[str, Any]:
        """Plain-JSON view of the Solution."""
        d = {
            "model": self.model.to_dict(),
            "method": self.method,
            "phase": self.phase,
            "label": self.label,
            "filling": _jsonable(self.filling),
            "densities": np.asarray(self.densities).tolist(),
            "condensate": np.asarray(self.condensate).tolist(),
            "energy": _jsonable(self.energy),
            "converged": bool(self.converged),
            "iterations": int(self.iterations),
            "residual": _jsonable(self.residual),
            "seed": self.seed,
            "pattern": self.pattern,
            "order": {k: _jsonable(v) for k, v in self.order.items()},
            "compressibility": _jsonable(self.compressibility),
            "flags": list(self.flags),
            "sites": None if self.sites is None else np.asarray(self.sites).tolist(),
            "branches": [{k: _jsonable(v) for k, v in b.items()} for b in self.branches],
            **({"temperature": self.temperature, "entropy": _jsonable(self.entropy)} if self.temperature else {}),
            "errors": {k: _jsonable(v) for k, v in self.errors.items()},
        }
        if self.extra:
            d["extra"] = {k: _jsonable(v) for k, v in self.extra.items()}
        from .store import provenance

        prov = provenance(self.model, self.method)
        d["phasemap_version"] = prov["phasemap_version"]
        d["energy_unit"] = prov["energy_unit"]
        return d


def _fmt(v):
    return f"{v:.6g}" if isinstance(v, float) else str(v)


def _jsonable(v):
    if isinstance(v, np.ndarray):
        return v.tolist()
    if isinstance(v, (np.floating, float)):
        v = float(v)
        return None if math.isnan(v) else (str(v) if math.isinf(v) else v)
    if isinstance(v, np.integer):
        return int(v)
    if isinstance(v, (list, tuple)):
        return [_jsonable(x) for x in v]
    if isinstance(v, dict):
        return {k: _jsonable(x) for k, x in v.items()}
    return v
