r"""Ordering temperatures: where each order of the T = 0 state disappears on heating.

For every point of a line in parameter space (e.g. several chemical potentials), the state is
solved on a coarse temperature grid (T = 0 included) with a method that has a finite-temperature
mode (``capabilities.temperature``: ``mf``, ``cmf``). Two orders are followed separately:

* ``density``: the density wave (contrast ``max n - min n`` of the winning state) — the melting
  temperature of a solid or the density-wave ordering temperature of a supersolid;
* ``condensate``: ``max |<b>|`` — the superfluid (mean-field) ordering temperature.

The temperature where an order present at T = 0 first vanishes is bracketed on the grid and
refined by bisection on "the order parameter is nonzero". The order of the transition is
recorded: after the bisection the order parameter just below the transition is compared with
its value three bracket widths further down. A continuous transition has
:math:`m \propto (T_c - T)^{\beta}` (:math:`\beta = 1/2` in mean field), so that ratio is at
most ~1/2; a jump that survives the halving of the bracket keeps it near 1 (first order).

Solutions are compared by the grand potential (see :mod:`phasemap.mf`), so a first-order
transition temperature is where the ordered and disordered branches cross — not where the
ordered branch stops existing (its spinodal).

Caution: mean field overestimates ordering temperatures, badly in two dimensions, where a
continuous symmetry cannot break at T > 0 at all (Mermin-Wagner) and the superfluid
transition is of Kosterlitz-Thouless type. See docs/thermal.md.
"""

from __future__ import annotations

import math

import numpy as np
import xarray as xr

from .classify import Thresholds
from .methods import resolve
from .model import ConfigError, Model
from .params import points

__all__ = ["transition_temperatures", "ORDERS"]

#: order name -> (flat variable of phasemap.scan.evaluate giving its size, phases that have the order).
#: Presence is read from the classification (which knows which cluster sites are equivalent, so an
#: anisotropic cluster's inequivalent sites are not a density wave); the size serves the
#: first-order test.
ORDERS = {"density": ("contrast", ("solid", "supersolid")), "condensate": ("condensate_max", ("superfluid", "supersolid"))}


def _line(model: Model, line: dict | None) -> tuple[dict, int]:
    if not line:
        return {}, 1
    arrs = {k: np.atleast_1d(np.asarray(v, float)) for k, v in line.items()}
    if "T" in arrs:
        raise ConfigError("line: T is the scanned variable of a transition-temperature search; "
                          "give the other parameters")
    sizes = {len(v) for v in arrs.values()}
    if len(sizes) != 1:
        raise ConfigError("line: every parameter needs the same number of values")
    return arrs, sizes.pop()


def transition_temperatures(model: Model, line: dict | None = None, T_max: float | None = None, n_T: int = 12,
                            relative: bool = True, method="mf", options=None, thresholds=Thresholds(),
                            tol: float = 1e-4, jump_tol: float = 1e-3, ratio_first_order: float = 0.8,
                            orders=("density", "condensate")) -> xr.Dataset:
    """Ordering temperature of each order of the T = 0 state at every point of ``line``.

    Parameters
    ----------
    model : Model
        Fixed parameters.
    line : dict, optional
        Scan-axis name -> values (equal lengths), e.g. ``{"mu": [1.0, 1.5, 2.0]}``; default the
        model itself (one point).
    T_max : float, default 1.5 (units of ``model.scale`` when ``relative``)
        Top of the search; a transition above it is reported as ``above_T_max``.
    n_T : int, default 12
        Coarse temperature grid 0, T_max/n_T, ..., T_max (must resolve the ordered region).
    relative : bool, default True
        ``line`` values and temperatures in units of ``model.scale`` (V or U).
    method, options
        A method with ``capabilities.temperature`` and its options (``T`` is scanned).
    tol : float
        Bisection tolerance on T, relative to ``T_max``.
    jump_tol, ratio_first_order : float
        First order: the order parameter just below T_c exceeds ``jump_tol`` and keeps more
        than ``ratio_first_order`` of its value three bracket widths further down.

    Returns
    -------
    xarray.Dataset with dimension ``point`` (coordinates: the line's parameters) and, per
    order ``o`` in ``orders``: ``Tc_<o>`` (NaN when the order is absent at T = 0),
    ``first_order_<o>``, ``jump_<o>`` (order parameter just below T_c), ``bracket_<o>``,
    ``above_T_max_<o>``, ``unconverged_<o>`` (an unconverged point met in the bisection); and
    ``phase_T0`` (label of the T = 0 state).
    """
    from .scan import evaluate

    impl, opts = resolve(method, options)
    if not impl.capabilities.temperature:
        raise ConfigError(f"method: {impl.name!r} ({impl.title}) has no finite-temperature mode")
    opts.pop("T", None)
    for o in orders:
        if o not in ORDERS:
            raise ConfigError(f"orders: unknown order {o!r}; allowed: {', '.join(ORDERS)}")
    if not (isinstance(n_T, int) and 2 <= n_T <= 1000):
        raise ConfigError(f"n_T: expected an integer between 2 and 1000, got {n_T!r}")
    T_max = 1.5 if T_max is None else float(T_max)
    if not (math.isfinite(T_max) and T_max > 0):
        raise ConfigError(f"T_max: expected a finite temperature > 0, got {T_max!r}")
    if not (0 < tol < 0.1):
        raise ConfigError(f"tol: expected 0 < tol < 0.1 (relative to T_max), got {tol!r}")
    arrs, P = _line(model, line)
    Tg = np.linspace(0.0, T_max, n_T + 1)

    def run(idx, T):
        ax = {k: v[idx] for k, v in arrs.items()}
        ax["T"] = np.asarray(T, float)
        return evaluate(points(model, ax, relative), impl.name, opts, thresholds)

    G = len(Tg)
    flat = run(np.repeat(np.arange(P), G), np.tile(Tg, P))
    out = {"phase_T0": ("point", flat["label"].reshape(P, G)[:, 0].astype(str))}
    steps = int(math.ceil(math.log2(1.0 / (n_T * tol))))
    for o in orders:
        key, phases = ORDERS[o]
        op = flat[key].reshape(P, G)
        conv = flat["converged"].reshape(P, G)
        present = np.isin(flat["phase"], phases).reshape(P, G) & conv
        ordered = present[:, 0]
        off = np.where(~present, np.arange(G)[None, :], G).min(1)  # first grid T without the order
        above = ordered & (off >= G)
        todo = np.nonzero(ordered & ~above)[0]
        Tc = np.full(P, np.nan)
        Tc[above] = np.inf
        first = np.zeros(P, bool)
        jump = np.full(P, np.nan)
        bracket = np.full(P, np.nan)
        unconv = np.zeros(P, bool)
        unconv[todo] = ~conv[todo, off[todo]]
        if todo.size:
            lo, hi = Tg[off[todo] - 1], Tg[off[todo]]
            op_lo = op[todo, off[todo] - 1]
            for _ in range(steps):
                mid = 0.5 * (lo + hi)
                f = run(todo, mid)
                same = np.isin(f["phase"], phases) & f["converged"]
                unconv[todo] |= ~f["converged"]
                lo, hi = np.where(same, mid, lo), np.where(same, hi, mid)
                op_lo = np.where(same, f[key], op_lo)
            w = hi - lo
            far = run(todo, np.maximum(lo - 3 * w, 0.0))
            ratio = op_lo / np.maximum(far[key], 1e-300)
            Tc[todo] = 0.5 * (lo + hi)
            first[todo] = (op_lo > jump_tol) & (ratio > ratio_first_order)
            jump[todo], bracket[todo] = op_lo, w
        out.update({f"Tc_{o}": ("point", Tc), f"first_order_{o}": ("point", first), f"jump_{o}": ("point", jump),
                    f"bracket_{o}": ("point", bracket), f"above_T_max_{o}": ("point", above),
                    f"unconverged_{o}": ("point", unconv)})
    coords = {k: ("point", v) for k, v in arrs.items()}
    unit = model.scale_name if relative else model.unit
    return xr.Dataset(out, coords=coords, attrs={
        "title": "phasemap ordering temperatures", "method": impl.spec_name(opts), "T_max": T_max, "n_T": n_T,
        "temperature_unit": unit, "relative_to": model.scale_name if relative else "",
        "caution": "mean field overestimates ordering temperatures (badly in 2D; Mermin-Wagner, KT)"})
