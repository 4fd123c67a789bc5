"""QMCResult -> Solution: a finite-lattice, finite-temperature phase *indicator* with error bars.

One finite torus at one temperature cannot decide a thermodynamic phase (a solid needs an
order parameter S(K)/N that survives L -> infinity; a superfluid a stiffness that does). The
indicator below only says what this run measured, using the one-sigma errors:

* *ordered* if ``sq_max - nsigma * err > sq`` (largest S(Q)/N at Q != 0; a perfect √3×√3 solid
  at filling 1/3 has S(K)/N = 1/9);
* *stiff* if ``stiffness - nsigma * err > stiffness * max(t)`` (free bosons at density n have a
  stiffness of order 3 n t on the triangular lattice);
* ordered and stiff -> supersolid; ordered -> solid; stiff -> superfluid; neither -> empty /
  full when the filling is within ``edge`` of 0 / 1, else "solid" labelled *insulating or
  normal* with the flag ``no-order-no-stiffness`` (the same convention as exact diagonalization).

A run that is not decorrelated (or a ground-state search that did not settle) is
``unconverged`` and never classified.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass
from fractions import Fraction

import numpy as np

from ..lattice import patterns_for
from ..model import ConfigError, check_keys
from ..solution import UNCONVERGED, Solution

__all__ = ["QMCThresholds", "to_solution", "CAUTION"]

CAUTION = ("quantum Monte Carlo on one finite torus at one temperature: statistically exact for that "
           "system, but a phase needs finite-size scaling of S(K)/N and the stiffness")


@dataclass(frozen=True)
class QMCThresholds:
    """Indicator thresholds (see module notes). ``nsigma``: error bars a signal must clear."""

    sq: float = 0.05
    stiffness: float = 0.1
    edge: float = 0.02
    nsigma: float = 2.0


def _pattern(cell, q_name: str) -> str:
    for name, p in sorted(patterns_for(cell.lattice).items(), key=lambda kv: kv[1].n_sub):
        if name != "uniform" and q_name in p.q:
            return name
    return ""


def to_solution(res, thresholds=None) -> Solution:
    """Solution of a :class:`~phasemap.qmc.QMCResult` (module notes give the decision rules).

    ``energy``, ``filling``, ``compressibility`` are the QMC averages; ``errors`` holds their
    one-sigma errors and those of ``S(K)/N``, ``binder``, ``stiffness``, ``stiffness_<family>``
    and ``structure_factor`` (array over ``extra["momenta"]``). ``densities`` = filling on
    every site (a thermal average on a torus is translation invariant; density order is in
    S(Q)); ``condensate`` is NaN (not measured; the stiffness is the superfluid indicator).
    """
    th = thresholds or QMCThresholds()
    if isinstance(th, dict):
        check_keys("thresholds", th, QMCThresholds.__dataclass_fields__)
        th = QMCThresholds(**th)
    if not isinstance(th, QMCThresholds):
        raise ConfigError(f"thresholds: expected QMCThresholds or dict, got {type(th).__name__}")
    from ..lattice import Supercell

    model, est = res.model, res.estimates
    cell = Supercell(model.lattice, res.vectors)
    N = res.n_sites
    n = est["filling"].value
    order, errors = {}, {}
    for k in ("S(K)/N", "binder", "stiffness", "compressibility", "energy", "filling"):
        if k in est:
            errors[k] = est[k].error
    for k in est:
        if k.startswith("stiffness"):
            order[k], errors[k] = est[k].value, est[k].error
    if "S(K)/N" in est:
        order["S(K)/N"], order["binder"] = est["S(K)/N"].value, est["binder"].value
    mom = np.asarray(res.momenta)
    nz = np.any(np.abs(np.mod(mom + 0.5, 1) - 0.5) > 1e-9, axis=1) if len(mom) else np.zeros(0, bool)
    ordered, q_name = False, ""
    if nz.any():
        k = int(np.argmax(np.where(nz, res.sq, -np.inf)))
        order["sq_max"], q_name = float(res.sq[k]), cell.momentum_name(mom[k])
        order["q_max"] = q_name
        errors["sq_max"] = float(res.sq_err[k])
        ordered = res.sq[k] - th.nsigma * res.sq_err[k] > th.sq
    errors["structure_factor"] = np.asarray(res.sq_err)
    tmax = max(model.t) if max(model.t) > 0 else 1.0
    stiff = "stiffness" in est and est["stiffness"].value - th.nsigma * est["stiffness"].error > th.stiffness * tmax
    frac = Fraction(n).limit_denominator(12)
    flags = list(res.flags)
    if ordered and stiff:
        phase, label = "supersolid", f"supersolid n≈{n:.4g} ({q_name})"
    elif ordered:
        phase, label = "solid", f"solid {frac} ({q_name})"
    elif stiff:
        phase, label = "superfluid", f"superfluid n≈{n:.4g}"
    elif n < th.edge:
        phase, label = "empty", "empty"
    elif n > 1 - th.edge:
        phase, label = "full", "full"
    else:
        phase, label = "solid", f"insulating or normal n≈{n:.4g} (no density order, no stiffness on this torus)"
        flags.append("no-order-no-stiffness")
    pattern = _pattern(cell, q_name) if ordered else "uniform"
    converged = bool(res.decorrelated) and not any(f.startswith("ground-state-not-reached") for f in flags)
    if not converged:
        phase = UNCONVERGED
    flags.append(f"finite torus {res.cluster} (N = {N}) at T = {res.T:.4g}: {CAUTION}")
    extra = {"cluster": res.cluster, "n_sites": N, "T": res.T, "beta": res.beta, "betas": list(res.betas),
             "ground_state": res.ground_state, "momenta": mom, "sq": np.asarray(res.sq),
             "tau_int": {k: e.tau for k, e in est.items()},
             "decorrelated": {k: e.decorrelated for k, e in est.items()},
             "sweeps": res.sweeps, "thermalization": res.thermalization, "bins": res.bins, "chains": res.chains,
             "seed": res.seed, "thresholds": asdict(th), "info": res.info}
    return Solution(
        model=model, method=f"qmc:{res.cluster}", phase=phase, label=label, filling=n,
        densities=np.full(N, n), condensate=np.full(N, math.nan), energy=est["energy"].value,
        converged=converged, iterations=res.sweeps * res.chains, residual=est["energy"].error,
        seed=f"seed={res.seed}", pattern=pattern, order=order, flags=flags, sites=cell.sites.copy(),
        compressibility=est["compressibility"].value, extra=extra, errors=errors)
