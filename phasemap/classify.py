"""Classification of a (mean-field or cluster-mean-field) ground state into a phase.

Decision table (DESIGN.md §3), with documented thresholds (:class:`Thresholds`):

* ``max |<b>| > condensate_tol``: compressible; *superfluid* if the density contrast
  (largest difference between symmetry-equivalent sites) ``<= contrast_tol``, else *supersolid*.
* otherwise (no condensate): *empty* if n = 0, *full* if n = n_max (hard-core: n = 1;
  soft-core: every site at the occupation cut-off, labelled as such and never as the Mott lobe
  n = n_max, which the truncation cannot tell from n_max + 1), *mott* if uniform with integer n, *solid* if density-modulated. A state with zero
  condensate whose pattern is not one of the named ones keeps its actual pattern
  (``pattern="other"``) and is labelled by its filling only.
* at a temperature T > 0: a uniform state without condensate at non-integer filling is the
  *normal* fluid (thermal gas); density-modulated states without condensate are (thermal)
  *solid*.
* non-converged points are *unconverged*, never classified.

Thresholds near continuous transitions are fragile: boundaries are located by
bisection with the linear-stability test (see :mod:`phasemap.boundary`), not by reading
a grid.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from fractions import Fraction

import numpy as np

from .lattice import Supercell, patterns_for, sq_peak
from .solution import UNCONVERGED

__all__ = ["Thresholds", "classify", "classify_arrays", "filling_label", "order_parameters"]


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
    cluster_sublattice_tol : float, default 0.1
        Cluster mean field only: a named pattern whose sublattice-averaged densities differ by
        more than this is a density wave even if it respects the cluster's own symmetry
        (heuristic: edge effects of the open cluster are smaller; see
        :func:`density_wave_contrast`).
    """

    condensate_tol: float = 1e-5
    contrast_tol: float = 1e-5
    integer_tol: float = 1e-6
    max_denominator: int = 12
    cluster_sublattice_tol: float = 0.1

    def to_dict(self) -> dict:
        return asdict(self)


def filling_label(n: float, max_denominator: int = 12) -> str:
    f = Fraction(float(n)).limit_denominator(max_denominator)
    return f"{f.numerator}" if f.denominator == 1 else f"{f.numerator}/{f.denominator}"


def _label_periodic(cell: Supercell, pat) -> bool:
    lab = lambda ij: np.asarray(pat.label(ij[:, 0], ij[:, 1])) % pat.n_sub  # noqa: E731
    base = lab(cell.sites)
    return all(np.array_equal(base, lab(cell.sites + v)) for v in cell.vectors)


def order_parameters(cell: Supercell, densities, condensate) -> dict:
    """S(Q) maximum over nonzero allowed momenta, density contrast, condensate."""
    q, sq = cell.structure_factor(densities)
    peak, k = sq_peak(q, sq)
    out = {
        "contrast": float(np.ptp(densities)),
        "condensate_max": float(np.max(condensate)),
        "condensate_mean": float(np.mean(condensate)),
    }
    if k >= 0:
        out["sq_max"] = float(peak)
        out["q_max"] = cell.momentum_name(q[k])
    else:
        out["sq_max"], out["q_max"] = 0.0, "Gamma"
    return out


def density_wave_contrast(cell: Supercell, n, orbits, sublattice_tol: float) -> np.ndarray:
    """Density-wave measure per state (rows of ``n``), compared with ``contrast_tol``.

    Without ``orbits`` (periodic mean-field cells, all sites equivalent): ``max n - min n``.
    With ``orbits`` (an open cluster tile): the largest difference between symmetry-equivalent
    sites; and, because a density wave can respect the tile symmetry (then no equivalent sites
    differ), also any named pattern whose sublattice averages differ by more than
    ``sublattice_tol`` — a size criterion: edge effects of an open cluster are smaller.
    """
    if orbits is None:
        return np.ptp(n, axis=1)
    orbits = np.asarray(orbits)
    out = np.max([np.ptp(n[:, orbits == o], axis=1) for o in np.unique(orbits)], axis=0)
    for name, pat in patterns_for(cell.lattice).items():
        if name == "uniform":
            continue
        sub = np.asarray(pat.label(cell.sites[:, 0], cell.sites[:, 1])) % pat.n_sub
        avg = np.stack([n[:, sub == k].mean(1) for k in range(pat.n_sub) if np.any(sub == k)], axis=1)
        big = np.ptp(avg, axis=1) > sublattice_tol
        out = np.where(big, np.maximum(out, np.ptp(avg, axis=1)), out)
    return out


def classify_arrays(model, cell: Supercell, densities, condensate, converged,
                    thresholds: Thresholds = Thresholds(), orbits=None, thermal=None):
    """Vectorized classification of P states on ``cell``.

    ``orbits``: symmetry orbits of the sites (see :func:`phasemap.lattice.tile_orbits`); a
    density wave is a density difference *within* an orbit. Default: all sites equivalent
    (periodic mean-field cells). Cluster mean field passes the tile's orbits, so the
    edge-induced density differences of an open cluster are not mistaken for a solid.

    ``thermal``: (P,) bool (or one bool), True where the state is at a temperature T > 0.

    Returns ``(phase, label, pattern)``: three object arrays of shape (P,).
    """
    th = thresholds
    n = np.atleast_2d(np.asarray(densities, float))
    phi = np.atleast_2d(np.asarray(condensate, float))
    conv = np.broadcast_to(np.asarray(converged, bool), n.shape[:1])
    hot = np.broadcast_to(np.asarray(False if thermal is None else thermal, bool), n.shape[:1])
    nbar = n.mean(1)
    contrast = density_wave_contrast(cell, n, orbits, th.cluster_sublattice_tol)
    cond = phi.max(1) > th.condensate_tol
    modulated = contrast > th.contrast_tol
    # simplest named pattern with constant density on each sublattice
    pattern = np.full(len(n), "other", dtype=object)
    pattern[~modulated] = "uniform"
    best_nsub = np.full(len(n), np.inf)
    tol = max(th.contrast_tol, 1e-9)
    for name, pat in patterns_for(cell.lattice).items():
        if name == "uniform" or not _label_periodic(cell, pat):
            continue
        sub = pat.sublattice(cell)
        ok = np.ones(len(n), bool)
        for k in range(pat.n_sub):
            if np.any(sub == k):
                ok &= np.ptp(n[:, sub == k], axis=1) <= tol
        take = ok & modulated & (pat.n_sub < best_nsub)
        pattern[take] = name
        best_nsub[take] = pat.n_sub
    phase = np.empty(len(n), dtype=object)
    label = np.empty(len(n), dtype=object)
    k_int = np.rint(nbar)
    integer = np.abs(nbar - k_int) <= th.integer_tol
    for p in range(len(n)):  # cheap string assembly; the physics above is vectorized
        if not conv[p]:
            phase[p], label[p], pattern[p] = UNCONVERGED, UNCONVERGED, ""
            continue
        word = _pattern_word(pattern[p])
        pname = " " + word if word else ""
        if cond[p]:
            if modulated[p]:
                phase[p], label[p] = "supersolid", f"supersolid{pname}"
            else:
                phase[p], label[p] = "superfluid", "superfluid"
        elif not modulated[p] and integer[p]:
            k = int(k_int[p])
            if k == 0:
                phase[p] = label[p] = "empty"
            elif model.hardcore and k == 1:
                phase[p] = label[p] = "full"
            elif k >= model.n_max:
                # every site at the occupation cut-off: the truncation is saturated, so this is not
                # the n = n_max Mott lobe (n_max + 1 may be lower in energy); never named as one
                phase[p], label[p] = "full", f"full n={k} = cut-off n_max (raise n_max)"
            else:
                phase[p], label[p] = "mott", f"mott n={k}"
        elif not modulated[p] and hot[p]:
            phase[p], label[p] = "normal", f"normal n={nbar[p]:.3g}"
        elif not modulated[p]:
            # no condensate, no density wave, non-integer filling: a degenerate point (t = 0 edge)
            # or a cluster's resonating number eigenstate (DESIGN.md §6) — labelled as what it is
            phase[p], label[p] = "solid", f"solid {filling_label(nbar[p], th.max_denominator)} (no named pattern)"
        else:
            phase[p], label[p] = "solid", f"solid {filling_label(nbar[p], th.max_denominator)}{pname}"
    return phase, label, pattern


def classify(model, cell: Supercell, densities, condensate, converged: bool = True,
             thresholds: Thresholds = Thresholds(), orbits=None) -> tuple[str, str, str]:
    """Return ``(phase, label, pattern)`` for one state on ``cell``."""
    ph, lab, pat = classify_arrays(model, cell, np.asarray(densities)[None], np.asarray(condensate)[None],
                                   np.array([converged]), thresholds, orbits)
    return ph[0], lab[0], pat[0]


def _pattern_word(pattern: str) -> str:
    """Word appended to a label; the √3×√3 solids are the default reading of "solid 1/3, 2/3"."""
    if pattern.startswith("stripe"):
        return "stripe"
    return {"sqrt3": "", "uniform": "", "other": "", "2x2": "2×2"}.get(pattern, pattern)
