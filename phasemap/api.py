"""One front door over every method: ``phasemap.solve(model, method=..., **options)``."""

from __future__ import annotations

import numpy as np

from .classify import Thresholds, order_parameters
from .model import ConfigError, Model
from .methods import get_method, resolve
from .solution import Solution, UNCONVERGED

__all__ = ["solve", "solutions_from_batch", "select_winners", "phase_codes"]


def phase_codes():
    from .solution import PHASES

    return {name: i for i, name in enumerate(PHASES + (UNCONVERGED,))}


def select_winners(result, thresholds: Thresholds = Thresholds()):
    """Winning seed per point and whether the point counts as converged.

    Lowest variational energy among converged seeds (ties to the simplest seed). For
    site-decoupled results an insulating winner that is linearly unstable (chi T > 1) is
    replaced by the lowest converged condensed seed within 1e-9 of its energy (the two are
    degenerate to solver precision right at a continuous transition); if there is none the
    point is flagged unconverged. Returns ``(k, ok, unstable, phase, label, pattern)``.
    """
    from .classify import classify_arrays

    best = result.best()
    P = result.batch.size
    r = np.arange(P)
    ok = best >= 0
    k = np.where(ok, best, np.argmin(result.residual, axis=1))
    impl = get_method(result.method)
    orbits = impl.site_orbits(result)  # open cluster: only equivalent sites must agree
    T = getattr(result, "T", None)
    thermal = None if T is None else np.asarray(T) > 0
    cls = lambda kk, okk: classify_arrays(result.batch.base, result.cell, result.n[r, kk],  # noqa: E731
                                          np.abs(result.phi[r, kk]), okk, thresholds, orbits, thermal)
    phase, label, pattern = cls(k, ok)
    unstable = impl.unstable_insulators(result, phase, k)
    unstable = np.zeros(P, bool) if unstable is None else ok & unstable
    if unstable.any():
        E = result.energy
        cond = result.converged & (np.abs(result.phi).max(-1) > thresholds.condensate_tol)
        near = cond & (E <= E[r, k][:, None] + 1e-9 * np.maximum(1.0, np.abs(E[r, k]))[:, None])
        alt = np.argmin(np.where(near, E, np.inf), axis=1)
        fixed = unstable & near.any(axis=1)
        k = np.where(fixed, alt, k)
        unstable &= ~fixed
        ok = ok & ~unstable
        phase, label, pattern = cls(k, ok)
    return k, ok, unstable, phase, label, pattern


def solutions_from_batch(result, thresholds: Thresholds = Thresholds(), method: str = "mf",
                         models: list[Model] | None = None) -> list[Solution]:
    """Turn a batched mean-field-type result into one classified Solution per point.

    ``result`` needs: batch, cell, seeds, energy, converged, iterations, residual, n, phi,
    top_weight, options, method, best() (see :class:`phasemap.mf.MFBatchResult`).
    """
    kw, okw, unstable, phases, labels, patterns = select_winners(result, thresholds)
    sols = []
    for p in range(result.batch.size):
        model = models[p] if models is not None else result.batch.model(p)
        k, conv = int(kw[p]), bool(okw[p])
        flags = []
        branches = [
            {"seed": s.name, "energy": float(result.energy[p, j]), "converged": bool(result.converged[p, j]),
             "filling": float(result.n[p, j].mean()), "condensate_max": float(result.phi[p, j].max())}
            for j, s in enumerate(result.seeds)
        ]
        if unstable[p]:
            flags.append("insulator-linearly-unstable (a condensed state was not reached)")
        if conv:
            lower = (~result.converged[p]) & (result.energy[p] < result.energy[p, k] - 1e-8 * max(1, abs(result.energy[p, k])))
            if lower.any():
                flags.append("lower-energy-unconverged-seed")
        n, phi = result.n[p, k], np.abs(result.phi[p, k])
        if not model.hardcore and result.top_weight[p, k] > result.options.weight_warn:
            flags.append(f"n_max-weight {result.top_weight[p, k]:.1e} (increase n_max)")
        phase, label, pattern = phases[p], labels[p], patterns[p]
        sols.append(Solution(
            model=model, method=method, phase=phase, label=label, filling=float(n.mean()),
            densities=n.copy(), condensate=phi.copy(), energy=float(result.energy[p, k]), converged=conv,
            iterations=int(result.iterations[p, k]), residual=float(result.residual[p, k]),
            seed=result.seeds[k].name, pattern=pattern, order=order_parameters(result.cell, n, phi),
            flags=flags, sites=result.cell.sites.copy(), branches=branches,
        ))
        T = getattr(result, "T", None)
        if T is not None and T[p] > 0:
            sols[-1].temperature = float(T[p])
            sols[-1].entropy = float(result.entropy[p, k])
    return sols


def solve(model: Model, method: str = "mf", **options) -> Solution:
    """Ground state of ``model`` at its parameters.

    Parameters
    ----------
    model : Model
    method : str
        A registered method (:func:`phasemap.methods.available`), optionally with its cluster:
        ``"mf"`` site-decoupled mean field, ``"cmf"`` / ``"cmf:tri12"`` cluster mean field,
        ``"ed:tri12"`` exact diagonalization of a periodic cluster (``particles=N``), ...
    **options
        Method options (see the method's module in :mod:`phasemap.methods`); grand-canonical
        methods also take ``thresholds`` (:class:`phasemap.classify.Thresholds` or dict) and
        ``compressibility`` (bool, default True: dn/dmu by central difference).

    Returns
    -------
    Solution
    """
    if not isinstance(model, Model):
        raise ConfigError(f"model: expected a phasemap.Model, got {type(model).__name__}")
    impl, options = resolve(method, options)
    return impl.solve_point(model, **options)
