r"""Cluster-size scaling: a quantity for a sequence of clusters, extrapolated linearly in λ.

For each cluster the quantity is computed with cluster mean field and plotted against the
scaling variable :math:`\lambda = N_B/(N_C z/2)` (:mod:`phasemap.cmf.clusters`); a straight
line fitted by least squares is extrapolated to :math:`\lambda = 1` (the infinite cluster),
with the standard error of the intercept from the fit covariance (residual variance
:math:`s^2 = \mathrm{RSS}/(n-2)`; undefined for two points).

Quantities
----------
``lobe-tip``
    Hopping at the tip of a Mott lobe (:func:`phasemap.cmf.stability.mott_lobe_tip`).
``transition``
    Point along a parameter axis where an order parameter of the lowest-energy state
    switches on, by bisection (:func:`transition_point`).
``order``
    An order parameter of the lowest-energy state at the model's point.

Caution: the linear extrapolation in λ is a heuristic (no theorem fixes the form of the
approach to λ = 1), and mean-field-type methods overestimate order at every finite cluster.

References
----------
D. Yamamoto, A. Masaki, I. Danshita, PRB 86, 054516 (2012); D. Yamamoto, G. Marmorini,
I. Danshita, PRL 112, 127203 (2014) (cluster mean field with scaling in λ; attribution from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..model import ConfigError
from ..params import grid
from .clusters import get_cluster
from .selfconsistency import solve_cmf_batch

__all__ = ["fit_linear", "ScalingResult", "transition_point", "order_value", "cluster_scaling",
           "plot_scaling", "scaling_figure", "ORDERS", "QUANTITIES"]

ORDERS = ("contrast", "condensate", "sq_max", "filling")
QUANTITIES = ("lobe-tip", "transition", "order")


def fit_linear(lam, values) -> dict:
    """Least-squares line ``value = a + b * lam`` and its extrapolation to lam = 1.

    Returns a dict with ``slope``, ``intercept`` (at lam = 0), ``extrapolated`` (lam = 1),
    their standard errors (``nan`` for two points) and the covariance of (slope, intercept).
    """
    x, y = np.asarray(lam, float), np.asarray(values, float)
    if len(x) < 2 or np.ptp(x) == 0:
        raise ConfigError("cluster scaling: need at least two clusters with different λ")
    X = np.stack([x, np.ones_like(x)], 1)
    coef, *_ = np.linalg.lstsq(X, y, rcond=None)
    res = y - X @ coef
    dof = len(x) - 2
    s2 = float(res @ res / dof) if dof > 0 else math.nan
    cov = s2 * np.linalg.inv(X.T @ X)
    g = np.array([1.0, 1.0])  # d(value at lam=1)/d(slope, intercept)
    var1 = float(g @ cov @ g)
    return {"slope": float(coef[0]), "intercept": float(coef[1]), "extrapolated": float(coef[0] + coef[1]),
            "extrapolated_err": math.sqrt(var1) if np.isfinite(var1) else math.nan,
            "slope_err": math.sqrt(cov[0, 0]) if np.isfinite(cov[0, 0]) else math.nan,
            "cov": cov.tolist(), "residuals": res.tolist(), "n_points": int(len(x))}


@dataclass
class ScalingResult:
    """Per-cluster values, the linear fit in λ and the extrapolated value at λ = 1."""

    quantity: str
    label: str
    clusters: list
    lam: np.ndarray
    values: np.ndarray
    fit: dict
    fit_mask: np.ndarray
    details: list = field(default_factory=list)
    reference: tuple | None = None  # (value, label) of an outside reference, for the figure

    @property
    def extrapolated(self) -> float:
        return self.fit["extrapolated"]

    @property
    def extrapolated_err(self) -> float:
        return self.fit["extrapolated_err"]

    def to_dict(self) -> dict:
        def clean(v):
            if isinstance(v, dict):
                return {k: clean(x) for k, x in v.items()}
            if isinstance(v, (list, tuple, np.ndarray)):
                return [clean(x) for x in v]
            if isinstance(v, (np.floating, float)):
                return None if math.isnan(float(v)) else float(v)
            if isinstance(v, (np.integer, np.bool_)):
                return v.item()
            return v

        return clean({
            "quantity": self.quantity, "label": self.label,
            "clusters": [{"cluster": c, "lambda": float(l), "value": float(v), "in_fit": bool(m)}
                         for c, l, v, m in zip(self.clusters, self.lam, self.values, self.fit_mask)],
            "fit": self.fit, "extrapolated": self.extrapolated, "extrapolated_err": self.extrapolated_err,
            "details": self.details,
            "reference": None if self.reference is None else {"value": self.reference[0], "label": self.reference[1]},
        })

    def table(self) -> str:
        lines = [f"{'cluster':<10} {'lambda':>8} {self.label:>16}  fit"]
        for c, l, v, m in zip(self.clusters, self.lam, self.values, self.fit_mask):
            lines.append(f"{c:<10} {l:8.4f} {v:16.8g}  {'*' if m else ''}")
        f = self.fit
        err = f"{f['extrapolated_err']:.2g}" if np.isfinite(f["extrapolated_err"]) else "n/a (2 points)"
        lines.append(f"linear fit in lambda: value = {f['intercept']:.6g} + {f['slope']:.6g} * lambda")
        lines.append(f"extrapolated to lambda = 1: {f['extrapolated']:.6g} +- {err}")
        return "\n".join(lines)


def _order_of(sol_n, sol_phi, cell, order: str) -> float:
    from ..classify import order_parameters

    if order == "contrast":
        return float(np.ptp(sol_n))
    if order == "condensate":
        return float(np.max(np.abs(sol_phi)))
    if order == "filling":
        return float(np.mean(sol_n))
    if order == "sq_max":
        return float(order_parameters(cell, sol_n, np.abs(sol_phi))["sq_max"])
    raise ConfigError(f"order parameter: unknown {order!r}; allowed: {', '.join(ORDERS)}")


def _point(model, axis, x, relative):
    batch, _ = grid(model, {axis: [x]}, relative=relative)
    return batch


def order_value(model, cluster, order: str = "contrast", axis=None, x=None, relative: bool = True,
                **options) -> tuple[float, dict]:
    """Order parameter of the lowest-energy converged CMF state at one point.

    Returns ``(value, info)``; ``value`` is nan if no seed converged.
    """
    batch = _point(model, axis, x, relative) if axis is not None else grid(model, {"mu": [model.mu]})[0]
    res = solve_cmf_batch(batch, cluster=cluster, **options)
    k = int(res.best()[0])
    if k < 0:
        return math.nan, {"converged": False}
    val = _order_of(res.n[0, k], res.phi[0, k], res.cell, order)
    return val, {"converged": True, "seed": res.seeds[k].name, "energy": float(res.energy[0, k]),
                 "iterations": int(res.iterations[0, k])}


def transition_point(model, cluster, axis: str, lo: float, hi: float, order: str = "contrast",
                     threshold: float = 1e-3, xtol: float = 1e-4, relative: bool = True, **options) -> dict:
    """Bisection for the point along ``axis`` where ``order`` of the ground state crosses ``threshold``.

    Parameters
    ----------
    model : Model
    cluster : cluster specification
    axis : str
        A scan axis of :func:`phasemap.params.grid` ("t", "mu", "V", "t_d1", ...).
    lo, hi : float
        Bracket (ratios to ``model.scale`` if ``relative``); the state must be ordered at
        one end and disordered at the other.
    order : {"contrast", "condensate", "sq_max", "filling"}
    threshold : float
    xtol : float
        Width of the final bracket.
    **options
        :class:`phasemap.cmf.CMFOptions` fields.

    Returns
    -------
    dict with ``x`` (midpoint of the final bracket), ``bracket``, ``steps``.

    Raises
    ------
    ConfigError
        Bracket that does not straddle the transition, or unconverged end points.
    """
    def ordered(x):
        v, info = order_value(model, cluster, order, axis, x, relative, **options)
        if not np.isfinite(v):
            raise ConfigError(f"transition: no converged CMF state at {axis}={x:g} (cluster {cluster})")
        return v > threshold, v

    a, b = float(lo), float(hi)
    oa, va = ordered(a)
    ob, vb = ordered(b)
    if oa == ob:
        raise ConfigError(f"transition: {order} is {'above' if oa else 'below'} {threshold:g} at both ends "
                          f"{axis}={a:g} ({va:.3g}) and {b:g} ({vb:.3g}) for cluster {cluster}; widen the bracket")
    steps = []
    while b - a > xtol:
        m = 0.5 * (a + b)
        om, vm = ordered(m)
        steps.append((m, vm))
        if om == oa:
            a = m
        else:
            b = m
    return {"x": 0.5 * (a + b), "bracket": [a, b], "steps": steps}


def cluster_scaling(model, clusters, quantity: str = "transition", fit_min_lambda: float | None = None,
                    reference=None, executor=None, checkpoint=None, progress: bool = False, **kw) -> ScalingResult:
    """Compute ``quantity`` for every cluster and extrapolate linearly in λ to λ = 1.

    Parameters
    ----------
    model : Model
    clusters : list of cluster specifications
    quantity : {"lobe-tip", "transition", "order"}
    fit_min_lambda : float, optional
        Only clusters with λ >= this enter the fit (all are reported).
    reference : (float, str), optional
        Outside reference value drawn on the figure.
    executor, checkpoint, progress
        One chunk per cluster through :func:`phasemap.executor.run_chunks` (serial by default;
        a :class:`phasemap.store.ChunkStore` checkpoint resumes after a kill).
    **kw
        ``lobe-tip``: ``filling``; ``transition``: ``axis, lo, hi, order, threshold, xtol``;
        ``order``: ``order``; plus :class:`phasemap.cmf.CMFOptions` fields.
    """
    import json

    from ..executor import run_chunks

    if quantity not in QUANTITIES:
        raise ConfigError(f"cluster scaling: unknown quantity {quantity!r}; allowed: {', '.join(QUANTITIES)}")
    if quantity == "transition":
        for k in ("axis", "lo", "hi"):
            if k not in kw:
                raise ConfigError(f"cluster scaling: quantity 'transition' needs {k!r}")
    cls = [get_cluster(c, model.lattice) for c in clusters]
    lam = np.array([c.lam for c in cls])
    tasks = {i: (model, c, quantity, kw) for i, c in enumerate(cls)}
    parts = run_chunks(scaling_chunk, tasks, executor, store=checkpoint, progress=progress,
                       desc="cluster scaling", unit="cluster")
    vals = np.array([float(parts[i]["value"]) for i in range(len(cls))], float)
    details = [json.loads(str(parts[i]["detail"])) for i in range(len(cls))]
    label = str(parts[0]["label"]) if cls else quantity
    mask = np.ones(len(cls), bool) if fit_min_lambda is None else lam >= fit_min_lambda - 1e-12
    mask &= np.isfinite(vals)
    fit = fit_linear(lam[mask], vals[mask])
    return ScalingResult(quantity, label, [c.name for c in cls], lam, vals, fit, mask, details, reference)


def scaling_chunk(task) -> dict:
    """One cluster of :func:`cluster_scaling`: ``(model, cluster, quantity, kw)`` -> arrays
    ``value``, ``detail`` (JSON text) and ``label`` (a checkpoint chunk)."""
    import json

    from ..store import jsonable

    model, c, quantity, kw = task
    if quantity == "lobe-tip":
        from .stability import mott_lobe_tip

        r = mott_lobe_tip(model, c, filling=int(kw.get("filling", 1)),
                          **{k: kw[k] for k in ("memory_mb", "max_dim") if k in kw})
        v, detail, label = r["t_over_U"], r, "(t/U)_c"
    elif quantity == "transition":
        opts = {k: v for k, v in kw.items() if k not in ("axis", "lo", "hi", "order", "threshold", "xtol", "relative")}
        axis, lo, hi = kw["axis"], kw["lo"], kw["hi"]
        r = transition_point(model, c, axis, lo, hi, kw.get("order", "contrast"), kw.get("threshold", 1e-3),
                             kw.get("xtol", 1e-4), kw.get("relative", True), **opts)
        v, detail = r["x"], {"cluster": c.name, "bracket": r["bracket"]}
        label = f"{axis}_c" + (f"/{model.scale_name}" if kw.get("relative", True) else "")
    else:
        order = kw.get("order", "contrast")
        opts = {k: x for k, x in kw.items() if k != "order"}
        v, info = order_value(model, c, order, **opts)
        detail, label = {"cluster": c.name, **info}, order
    return {"value": np.array(float(v)), "detail": np.array(json.dumps(jsonable(detail))), "label": np.array(label)}


def scaling_figure(result: ScalingResult, width: float = 3.4):
    """Figure of value vs λ with the fit and its extrapolation (a matplotlib ``Figure``, Agg canvas).

    ``width`` in inches (3.4 = one journal column)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, 0.75 * width), constrained_layout=True)
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    m = result.fit_mask
    ax.plot(result.lam[m], result.values[m], "o", color="C0", label="CMF (fitted)")
    if (~m).any():
        ax.plot(result.lam[~m], result.values[~m], "o", mfc="none", color="C0", label="CMF (not fitted)")
    for c, l, v in zip(result.clusters, result.lam, result.values):
        if np.isfinite(v):
            ax.annotate(c, (l, v), textcoords="offset points", xytext=(3, -9), fontsize=6)
    f = result.fit
    xs = np.linspace(min(result.lam.min(), 0.0), 1.0, 50)
    ax.plot(xs, f["intercept"] + f["slope"] * xs, "-", color="C0", lw=0.8)
    err = f["extrapolated_err"] if np.isfinite(f["extrapolated_err"]) else 0.0
    ax.errorbar([1.0], [f["extrapolated"]], yerr=[err], fmt="s", color="C1", ms=4, capsize=2,
                label=f"λ→1: {f['extrapolated']:.4g}")
    if result.reference is not None:
        ax.axhline(result.reference[0], color="k", ls="--", lw=0.7, label=result.reference[1])
    ax.set_xlabel(r"$\lambda = N_B/(N_C z/2)$")
    ax.set_ylabel(result.label)
    ax.set_xlim(-0.03, 1.05)
    ax.legend(fontsize=6, frameon=False)
    ax.tick_params(labelsize=7)
    return fig


def plot_scaling(result: ScalingResult, path_base: str, width: float = 3.4) -> list[str]:
    """Figure of value vs λ with the fit and its extrapolation; writes PNG and PDF (atomically).

    ``width`` in inches (3.4 = one journal column). Returns the written paths.
    """
    from ..plot import save_figure

    return [str(p) for p in save_figure(scaling_figure(result, width), path_base)]
