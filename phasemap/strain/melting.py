"""Melting temperature of the commensurate solid versus strain, one record per method.

At every strain where a method finds the plateau at T = 0, the solid is heated at the plateau's
central chemical potential (mu_lo + mu_hi)/2 until its density order disappears: the melting
temperature T_melt, with the order of the transition (see :mod:`phasemap.thermal`). A method
provides it through :meth:`phasemap.methods.Method.strain_melting` (returns a
:class:`MeltingRecord`); mean-field methods (mf, cmf on clusters small enough for full
diagonalisation) use :func:`phasemap.thermal.transition_temperatures`.

Hook for finite-lattice Monte Carlo: a method with ``capabilities.temperature`` overrides
``strain_melting`` and returns a MeltingRecord with ``errors["T_melt"]`` (one sigma) and
``info["criterion"]`` (e.g. the crossing of the sqrt3 x sqrt3 Binder ratio over system sizes);
the sweep, its files and the figure take it as they are.

The central chemical potential is a choice: mean-field T_melt varies across the plateau (the
solid's dome in the (mu, T) plane); the centre is near the dome's top for the 1/3 solid.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..model import ConfigError

__all__ = ["MeltingRecord", "mean_field_melting", "check_T_measure"]


@dataclass
class MeltingRecord:
    """T_melt of the solid at P strains for one method.

    Attributes
    ----------
    method : str
    mu : ndarray (P,)
        Chemical potential of the heating (NaN where no plateau at T = 0).
    T_melt : ndarray (P,)
        Melting temperature in the table unit (NaN: no solid at T = 0; inf: above ``T_max``).
    first_order : ndarray of bool (P,)
    jump : ndarray (P,)
        Density contrast just below T_melt.
    converged : ndarray of bool (P,)
        No unconverged point met in the search.
    T_max : float
    errors : dict
        One-sigma errors (Monte Carlo methods): ``{"T_melt": ndarray}``.
    info : dict
        ``criterion`` (how T_melt was found) and the method's caution.
    """

    method: str
    mu: np.ndarray
    T_melt: np.ndarray
    first_order: np.ndarray
    jump: np.ndarray
    converged: np.ndarray
    T_max: float
    errors: dict = field(default_factory=dict)
    info: dict = field(default_factory=dict)

    def survives(self, T: float) -> np.ndarray:
        """(P,) the solid exists at T = 0 and melts above ``T``."""
        return np.isfinite(self.mu) & (np.nan_to_num(self.T_melt, nan=-np.inf) > T)

    def to_dict(self) -> dict:
        f = lambda a: [None if not np.isfinite(x) else float(x) for x in np.asarray(a, float)]  # noqa: E731
        return {"method": self.method, "mu": f(self.mu), "T_melt": f(self.T_melt),
                "first_order": [bool(x) for x in self.first_order], "jump": f(self.jump),
                "converged": [bool(x) for x in self.converged], "T_max": self.T_max,
                "errors": {k: f(v) for k, v in self.errors.items()}, "info": dict(self.info)}


def check_T_measure(T) -> float | None:
    """Validated measurement temperature (None passes)."""
    if T is None:
        return None
    try:
        T = float(T)
    except (TypeError, ValueError):
        raise ConfigError(f"T_measure: expected a temperature >= 0 in the table unit, got {T!r}") from None
    if not (np.isfinite(T) and T >= 0):
        raise ConfigError(f"T_measure: expected a finite temperature >= 0 in the table unit, got {T!r}")
    return T


def mean_field_melting(spec, models, record, T_max=None, n_T: int = 10, tol: float = 1e-3,
                       thresholds=None) -> MeltingRecord:
    """T_melt by bisection on the density contrast at the plateau centre of ``record`` (a StepRecord)."""
    from ..classify import Thresholds
    from ..thermal import transition_temperatures

    th = thresholds or Thresholds()
    P = len(models)
    mu = np.where(record.exists, 0.5 * (record.mu_lo + record.mu_hi), np.nan)
    if T_max is None:
        T_max = float(max(np.abs(m.V).max() for m in models))  # mean-field T_melt < 2V/3 at t = 0
    out = MeltingRecord(method=spec.name, mu=mu, T_melt=np.full(P, np.nan), first_order=np.zeros(P, bool),
                        jump=np.full(P, np.nan), converged=np.ones(P, bool), T_max=float(T_max),
                        info={"criterion": "density contrast vanishes on heating at the plateau centre "
                              "(grand potential of every seed; bisection)", "caution": spec.impl.caution})
    opts = spec.option_dict
    for p in np.nonzero(np.isfinite(mu))[0]:  # models differ in t, V per strain: one line each
        ds = transition_temperatures(models[p], {"mu": [mu[p]]}, T_max=T_max, n_T=n_T, relative=False,
                                     method=spec.impl.name, options=opts, thresholds=th, tol=tol,
                                     orders=("density",))
        out.T_melt[p] = ds["Tc_density"].values[0]
        out.first_order[p] = bool(ds["first_order_density"].values[0])
        out.jump[p] = ds["jump_density"].values[0]
        out.converged[p] = not bool(ds["unconverged_density"].values[0])
    return out
