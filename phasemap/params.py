"""Many parameter points of one model family, as arrays (the unit of vectorized solving)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .model import ConfigError, Model

__all__ = ["ParamBatch", "AXES", "grid", "points", "axis_names"]


@dataclass
class ParamBatch:
    """P parameter points sharing lattice, hard-core-ness and n_max.

    Arrays: ``t``, ``V`` of shape (P, F); ``U``, ``V2``, ``mu`` of shape (P,); ``T`` (P,) the
    temperature of each point when it is scanned (``None``: the method's ``T`` option, default 0).
    """

    base: Model
    t: np.ndarray
    V: np.ndarray
    U: np.ndarray
    V2: np.ndarray
    mu: np.ndarray
    T: np.ndarray | None = None

    def temperatures(self, default: float = 0.0) -> np.ndarray:
        """(P,) temperatures: the scanned ``T`` if any, else ``default`` (a method's ``T`` option)."""
        return np.full(self.size, float(default)) if self.T is None else np.asarray(self.T, float)

    @property
    def size(self) -> int:
        return len(self.mu)

    @property
    def n_max(self) -> int:
        return self.base.n_max

    @property
    def hardcore(self) -> bool:
        return self.base.hardcore

    @classmethod
    def from_models(cls, models) -> "ParamBatch":
        models = list(models)
        if not models:
            raise ConfigError("no parameter points given")
        b = models[0]
        n_max = max(m.n_max for m in models)
        for m in models:
            if m.lattice != b.lattice or m.hardcore != b.hardcore:
                raise ConfigError("a batch of points must share the lattice and hard-core/soft-core choice")
        base = b if b.n_max == n_max else b.replace(n_max=n_max)
        return cls(
            base=base,
            t=np.array([m.t for m in models], float),
            V=np.array([m.V for m in models], float),
            U=np.array([m.U for m in models], float),
            V2=np.array([m.V2 for m in models], float),
            mu=np.array([m.mu for m in models], float),
        )

    def model(self, p: int) -> Model:
        kw = dict(t=tuple(self.t[p]), V=tuple(self.V[p]), V2=float(self.V2[p]), mu=float(self.mu[p]))
        if not self.hardcore:
            kw["U"] = float(self.U[p])
        return self.base.replace(**kw)

    def take(self, idx) -> "ParamBatch":
        idx = np.asarray(idx)
        return ParamBatch(self.base, self.t[idx], self.V[idx], self.U[idx], self.V2[idx], self.mu[idx],
                          None if self.T is None else np.asarray(self.T)[idx])


#: Scan axes: name -> description. "t" scales every family's hopping keeping their ratios
#: (the largest family gets the value); "V" likewise; "t_<family>"/"V_<family>" set one family.
AXES = {
    "t": "hopping scale (largest family)",
    "V": "nearest-neighbour repulsion scale (largest family)",
    "mu": "chemical potential",
    "U": "on-site repulsion",
    "V2": "next-nearest-neighbour repulsion",
    "T": "temperature (mean-field methods with capabilities.temperature)",
}


def axis_names(model: Model) -> list[str]:
    return list(AXES) + [f"{b}_{f}" for b in ("t", "V") for f in model.families]


def grid(model: Model, axes: dict, relative: bool = False) -> tuple[ParamBatch, tuple[int, ...]]:
    """Parameter points on the outer product of ``axes`` (first axis slowest), as arrays.

    With ``relative=True`` values are in units of ``model.scale`` (V for hard-core, U for
    soft-core), i.e. the axes are the ratios t/V, mu/V (or t/U, mu/U).
    """
    vals = [np.atleast_1d(np.asarray(v, float)) for v in axes.values()]
    shape = tuple(len(v) for v in vals)
    mesh = [g.ravel() for g in np.meshgrid(*vals, indexing="ij")]
    return points(model, dict(zip(axes, mesh)), relative), shape


def points(model: Model, axes: dict, relative: bool = False) -> ParamBatch:
    """Parameter points ``k`` with ``axes[name][k]`` (equal-length arrays), as arrays."""
    names = list(axes)
    allowed = axis_names(model)
    for n in names:
        if n not in allowed:
            raise ConfigError(f"scan axis: unknown parameter {n!r}; allowed: {', '.join(allowed)}")
        if n == "U" and model.hardcore:
            raise ConfigError("scan axis: U cannot be scanned for hard-core bosons (U = inf)")
    vals = [np.atleast_1d(np.asarray(axes[n], float)) for n in names]
    for n, v in zip(names, vals):
        if v.ndim != 1 or v.size == 0 or not np.all(np.isfinite(v)):
            raise ConfigError(f"scan axis {n}: values must be a non-empty 1-D list of finite numbers")
    if len({len(v) for v in vals}) != 1:
        raise ConfigError("scan points: every axis needs the same number of values")
    mesh = vals
    P = len(vals[0])
    scale = model.scale if relative else 1.0
    t = np.tile(np.array(model.t, float), (P, 1))
    V = np.tile(np.array(model.V, float), (P, 1))
    U = np.full(P, model.U, float)
    V2 = np.full(P, model.V2, float)
    mu = np.full(P, model.mu, float)
    T = None
    fams = model.families
    for n, g in zip(names, mesh):
        g = g * scale
        if n in ("t", "V"):
            arr = t if n == "t" else V
            ref = arr.max(axis=1, keepdims=True)
            shape_ = np.where(ref > 0, arr / np.where(ref > 0, ref, 1.0), 1.0)
            arr[:] = g[:, None] * shape_
        elif n == "mu":
            mu[:] = g
        elif n == "U":
            U[:] = g
        elif n == "V2":
            V2[:] = g
        elif n == "T":
            T = g.copy()
        else:
            base, fam = n.split("_", 1)
            (t if base == "t" else V)[:, fams.index(fam)] = g
    if np.any(t < 0):
        raise ConfigError("scan axis: hopping values must be >= 0 (frustrated t < 0 not supported)")
    if not model.hardcore and np.any(U <= 0):
        raise ConfigError("scan axis U: values must be > 0")
    if T is not None and np.any(T < 0):
        raise ConfigError("scan axis T: temperatures must be >= 0 (in the energy unit; ratio to V or U "
                          "on relative axes)")
    base = model
    if not model.hardcore and model._auto_n_max:
        need = Model.default_n_max(float(mu.max()), float(U.min()))
        if need > model.n_max:
            base = model.replace(n_max=need)
    return ParamBatch(base, t, V, U, V2, mu, T)
