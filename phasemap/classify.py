"""Classification of a (mean-field or cluster-mean-field) ground state into a phase.

Decision table (DESIGN.md §3), with documented thresholds (:class:`Thresholds`):

* ``max |<b>| > condensate_tol``: compressible; *superfluid* if the density contrast
  ``max n - min n <= contrast_tol``, else *supersolid*.
* otherwise (no condensate): *empty* if n = 0, *full* if n = n_max for hard-core,
  *mott* if uniform with integer n, *solid* if density-modulated. A state with zero
  condensate whose pattern is not one of the named ones keeps its actual pattern
  (``pattern="other"``) and is labelled by its filling only.
* non-converged points are *unconverged*, never classified.

Thresholds near continuous transitions are fragile: boundaries are located by
bisection with the linear-stability test (see :mod:`phasemap.boundary`), not by reading
a grid.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from fractions import Fraction

import numpy as np

from .lattice import Supercell, patterns_for
from .solution import UNCONVERGED

__all__ = ["Thresholds", "classify", "filling_label", "recognise_pattern", "order_parameters"]


@dataclass(frozen=True)
class Thresholds:
    """Classification thresholds (dimensionless).

    condensate_tol : float, default 1e-5
        Minimum ``max_s |<b_s>|`` for a condensate.
    contrast_tol : float, default 1e-5
        Minimum ``max n - min n`` for a density wave.
    integer_tol : float, default 1e-6
        Distance of the mean density from an integer for a Mott insulator / empty / full.
    max_denominator : int, default 12
        Largest denominator of a solid's filling fraction label.
    """

    condensate_tol: float = 1e-5
    contrast_tol: float = 1e-5
    integer_tol: float = 1e-6
    max_denominator: int = 12

    def to_dict(self) -> dict:
        return asdict(self)


def filling_label(n: float, max_denominator: int = 12) -> str:
    f = Fraction(float(n)).limit_denominator(max_denominator)
    return f"{f.numerator}" if f.denominator == 1 else f"{f.numerator}/{f.denominator}"


def recognise_pattern(cell: Supercell, densities, tol: float) -> str:
    """Name of the simplest named pattern whose sublattices carry constant density."""
    n = np.asarray(densities, float)
    best = None
    for name, pat in patterns_for(cell.lattice).items():
        try:
            sub = pat.sublattice(cell)
        except Exception:  # noqa: BLE001 - pattern not commensurate with this cell
            continue
        # the pattern label must itself be periodic in the cell
        if not _label_periodic(cell, pat):
            continue
        ok = all(np.ptp(n[sub == k]) <= tol for k in range(pat.n_sub) if np.any(sub == k))
        if ok and (best is None or pat.n_sub < best[0]):
            best = (pat.n_sub, name)
    return best[1] if best else "other"


def _label_periodic(cell: Supercell, pat) -> bool:
    lab = lambda ij: np.asarray(pat.label(ij[:, 0], ij[:, 1])) % pat.n_sub  # noqa: E731
    base = lab(cell.sites)
    return all(np.array_equal(base, lab(cell.sites + v)) for v in cell.vectors)


def order_parameters(cell: Supercell, densities, condensate) -> dict:
    """S(Q) maximum over nonzero allowed momenta, density contrast, condensate."""
    q, sq = cell.structure_factor(densities)
    nonzero = np.any(np.abs(q) > 1e-12, axis=1)
    out = {
        "contrast": float(np.ptp(densities)),
        "condensate_max": float(np.max(condensate)),
        "condensate_mean": float(np.mean(condensate)),
    }
    if nonzero.any():
        k = int(np.argmax(np.where(nonzero, sq, -1)))
        out["sq_max"] = float(sq[k])
        out["q_max"] = cell.momentum_name(q[k])
    else:
        out["sq_max"], out["q_max"] = 0.0, "Gamma"
    return out


def classify(model, cell: Supercell, densities, condensate, converged: bool = True,
             thresholds: Thresholds = Thresholds()) -> tuple[str, str, str]:
    """Return ``(phase, label, pattern)`` for one state on ``cell``."""
    if not converged:
        return UNCONVERGED, UNCONVERGED, ""
    th = thresholds
    n = np.asarray(densities, float)
    nbar = float(n.mean())
    contrast = float(np.ptp(n))
    cond = float(np.max(condensate)) > th.condensate_tol
    modulated = contrast > th.contrast_tol
    pattern = recognise_pattern(cell, n, max(th.contrast_tol, 1e-9)) if modulated else "uniform"
    word = _pattern_word(pattern)
    pname = " " + word if word else ""
    if cond:
        if modulated:
            return "supersolid", f"supersolid{pname}", pattern
        return "superfluid", "superfluid", "uniform"
    if not modulated:
        k = round(nbar)
        if abs(nbar - k) <= th.integer_tol:
            if k == 0:
                return "empty", "empty", "uniform"
            if model.hardcore and k == 1:
                return "full", "full", "uniform"
            return "mott", f"mott n={k}", "uniform"
        # uniform, no condensate, non-integer: only at degenerate points (t = 0 edges)
        return "solid", f"solid {filling_label(nbar, th.max_denominator)} (uniform, degenerate)", "uniform"
    return "solid", f"solid {filling_label(nbar, th.max_denominator)}{pname}", pattern


def _pattern_word(pattern: str) -> str:
    """Word appended to a label; the √3×√3 solids are the default reading of "solid 1/3, 2/3"."""
    if pattern.startswith("stripe"):
        return "stripe"
    return {"sqrt3": "", "uniform": "", "other": "", "2x2": "2×2"}.get(pattern, pattern)
