r"""Batched plateau location: the workhorse of the strain workflow.

For many models at once (strains, scaled parameters, perturbed parameters) the grand-canonical
ground state is evaluated on a chemical-potential grid in *one* batched solve, then the two
edges of the commensurate plateau at filling :math:`f` are located by multi-section search on
the filling itself,

.. math:: \mu_{\rm lo} = \sup\{\mu : n(\mu) < f - \varepsilon\},\qquad
          \mu_{\rm hi} = \inf\{\mu : n(\mu) > f + \varepsilon\},

which needs only that :math:`n(\mu)` is non-decreasing (exact: :math:`n = -\partial\omega/\partial\mu`
with :math:`\omega(\mu)` concave) and never needs the grid to resolve a narrow plateau. When
the plateau is absent both searches meet at the chemical potential where the filling passes
:math:`f`; the fillings on either side of that point tell a first-order jump (phase
separation at fixed filling, Maxwell construction) from a continuous passage.

Each search step evaluates ``sections`` interior points of every live bracket in one batched
call, shrinking the bracket by ``sections + 1`` (batched solves cost about the same for 2 or
200 points, so this beats bisection by a large factor).

Non-converged points never decide a bracket: they are skipped, counted and reported in the
``flags`` of the model concerned.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from fractions import Fraction

import numpy as np

from ..classify import Thresholds
from ..model import ConfigError, Model
from ..methods import MethodSpec
from ..params import ParamBatch

__all__ = ["PlateauResult", "locate_plateaus", "evaluate_points",
           "default_window", "parse_fraction", "INCOMPRESSIBLE", "clear_cache"]

INCOMPRESSIBLE = ("empty", "full", "mott", "solid")
#: edge searches with fewer points per step than this retry a step whose every point failed to
#: converge once (on one point more) before giving the bracket up
RETRY_BELOW = 4


def parse_fraction(fraction) -> tuple[str, float]:
    """``"1/3"`` -> ("1/3", 0.333...). Allowed: 0 <= f <= n_max as a fraction with small denominator."""
    try:
        fr = Fraction(str(fraction).strip())
    except (ValueError, ZeroDivisionError):
        raise ConfigError(f"fraction: expected a filling such as '1/3', '2/3', '1', '0', got {fraction!r}") from None
    if fr < 0 or fr.denominator > 12:
        raise ConfigError(f"fraction: must be >= 0 with denominator <= 12, got {fraction!r}")
    lab = f"{fr.numerator}" if fr.denominator == 1 else f"{fr.numerator}/{fr.denominator}"
    return lab, float(fr)


# -- batches --------------------------------------------------------------------------------
def _base(models: list[Model], mu_max: float) -> Model:
    b = models[0]
    for m in models:
        if m.lattice != b.lattice or m.hardcore != b.hardcore:
            raise ConfigError("strain models: all points must share the lattice and hard-core/soft-core choice")
    # seeds depend on whether interactions are present: take the most interacting model as base
    b = max(models, key=lambda m: sum(abs(v) for v in m.V) + abs(m.V2))
    if not b.hardcore:
        need = max(max(m.n_max for m in models),
                   Model.default_n_max(mu_max, min(m.U for m in models)) if b._auto_n_max else 0)
        if need != b.n_max:
            b = b.replace(n_max=need)
    return b


def _batch(models: list[Model], mu: np.ndarray) -> ParamBatch:
    """Points (model p, mu[p, k]) flattened p-major."""
    mu = np.asarray(mu, float)
    P, M = mu.shape
    rep = lambda a: np.repeat(np.asarray(a, float), M, axis=0)  # noqa: E731
    base = _base(models, float(np.max(mu)))
    return ParamBatch(base=base, t=rep([m.t for m in models]), V=rep([m.V for m in models]),
                      U=rep([m.U for m in models]), V2=rep([m.V2 for m in models]), mu=mu.ravel())


_CACHE: dict = {}
_CACHE_MAX = 20000


def clear_cache() -> None:
    """Forget cached point evaluations."""
    _CACHE.clear()


def _key(model: Model, mu: float) -> tuple:
    return (model.lattice, model.t, model.V, model.U, model.V2, model.n_max, round(float(mu), 12))


_END = ("filling", "label", "phase", "energy", "converged", "sq_max", "condensate_max")
_FIELDS = ("filling", "energy", "converged", "phase", "label", "sq_max", "condensate_max", "contrast",
           "iterations")


def evaluate_points(models: list[Model], mu, spec: MethodSpec = MethodSpec(), thresholds=Thresholds()) -> dict:
    """Solve and classify model ``p`` at chemical potentials ``mu[p, :]`` in one batched call.

    Parameters
    ----------
    models : list of Model
    mu : array, shape (P, M)
        Absolute chemical potentials (model unit).
    spec : MethodSpec
        A grand-canonical method (``mf``, ``cmf:<cluster>``).

    Returns
    -------
    dict of ndarray (P, M)
        filling, energy (grand potential per site), converged, phase, label, sq_max,
        condensate_max, contrast, iterations. Results are cached per (model, mu, method).
    """
    from ..scan import evaluate

    spec = MethodSpec.parse(spec)
    if not spec.capabilities.grand_canonical:
        raise ConfigError(f"method {spec.name!r}: {spec.impl.title} is not grand canonical; plateau searches "
                          "in mu need a grand-canonical method (check_strain / strain_sweep give the "
                          "method's own step)")
    mu = np.asarray(mu, float)
    P, M = mu.shape
    tag = (spec.name, json.dumps(thresholds.to_dict(), sort_keys=True))
    out = {k: np.empty((P, M), dtype=object if k in ("phase", "label") else float) for k in _FIELDS}
    out["converged"] = np.zeros((P, M), bool)
    todo = []
    for p in range(P):
        for k in range(M):
            hit = _CACHE.get((tag, _key(models[p], mu[p, k])))
            if hit is None:
                todo.append((p, k))
            else:
                for f in _FIELDS:
                    out[f][p, k] = hit[f]
    if todo:
        ps = np.array([p for p, _ in todo])
        ks = np.array([k for _, k in todo])
        sub = [models[p] for p in ps]
        batch = _batch(sub, mu[ps, ks][:, None])
        flat = evaluate(batch, spec, None, thresholds)
        if len(_CACHE) > _CACHE_MAX:
            _CACHE.clear()
        for i, (p, k) in enumerate(todo):
            rec = {f: flat[f][i] for f in _FIELDS}
            rec["converged"] = bool(rec["converged"])
            rec["phase"], rec["label"] = str(rec["phase"]), str(rec["label"])
            _CACHE[(tag, _key(models[p], mu[p, k]))] = rec
            for f in _FIELDS:
                out[f][p, k] = rec[f]
    for f in ("phase", "label"):
        out[f] = out[f].astype(str)
    return out


def default_window(model: Model, fraction: float | None = None) -> tuple[float, float]:
    """A chemical-potential window (model unit) holding the empty-to-full range of ``model``.

    Hard-core mean field is empty below ``-z t`` and full above ``z (V + t) + z_2 V2``
    (exact edges of the product state); a margin of a quarter of the largest energy is added.
    Soft-core: up to ``max(2, f + 1) U`` plus the same interaction terms.
    """
    z = model.z
    tmax = max(model.t)
    vmax = max(max(model.V), 0.0)
    E = max(model.scale, tmax, 1e-12)
    lo = -z * tmax - 0.25 * E
    hi = z * (vmax + tmax) + z * max(model.V2, 0.0) + 0.25 * E
    if not model.hardcore:
        top = max(2.0, (fraction or 0.0) + 1.0)
        hi = top * model.U + top * (z * (vmax + tmax) + z * max(model.V2, 0.0)) + 0.25 * E
    return lo, hi


# -- plateau location -------------------------------------------------------------------------
@dataclass
class PlateauResult:
    """Edges of the plateau at filling ``fraction`` for P models (arrays of shape (P,)).

    Attributes
    ----------
    fraction : str
    mu_lo, mu_hi : ndarray
        Plateau edges (model unit); ``-inf``/``+inf`` when the plateau reaches the end of the
        window (e.g. the empty state below any chemical potential). Without a plateau both
        are the chemical potential where the filling passes ``fraction``.
    width : ndarray
        ``mu_hi - mu_lo`` (>= 0; ``inf`` for an open plateau).
    exists : ndarray of bool
        ``width > width_floor``.
    n_below, n_above : ndarray
        Fillings just below the lower edge and just above the upper edge.
    label_below, label_above, label_center : ndarray of str
        Phase labels just below, just above and at the middle of the plateau (or at the
        crossing point when there is none).
    phase_center : ndarray of str
    jump_lo, jump_hi : ndarray
        Filling jump at each edge (> jump_tol: first-order).
    energy_below, energy_above, mu_below, mu_above : ndarray
        Grand potential per site and chemical potential of the end states (Maxwell construction).
    reached : ndarray of bool
        False when the filling never passes ``fraction`` inside the window.
    flags : list of list of str
    tol : ndarray
        Bracket width of the edges (model unit).
    """

    fraction: str
    target: float
    mu_lo: np.ndarray
    mu_hi: np.ndarray
    width: np.ndarray
    exists: np.ndarray
    n_below: np.ndarray
    n_above: np.ndarray
    label_below: np.ndarray
    label_above: np.ndarray
    label_center: np.ndarray
    phase_center: np.ndarray
    center_converged: np.ndarray
    jump_lo: np.ndarray
    jump_hi: np.ndarray
    energy_below: np.ndarray
    energy_above: np.ndarray
    mu_below: np.ndarray
    mu_above: np.ndarray
    reached: np.ndarray
    tol: np.ndarray
    sq_center: np.ndarray
    condensate_center: np.ndarray
    flags: list = field(default_factory=list)
    grid: dict | None = None
    grid_mu: np.ndarray | None = None
    unconverged: list = field(default_factory=list)

    @property
    def size(self) -> int:
        return len(self.mu_lo)

    def ok(self, p: int) -> bool:
        """True when no non-converged point touched the answer of model ``p``."""
        return not self.unconverged[p]

    def to_record(self, method: str):
        """The common :class:`~phasemap.strain.record.StepRecord` (sharp grand-canonical edges)."""
        from .record import StepRecord

        return StepRecord(
            method=method, fraction=self.fraction, sharp=True, mu_lo=self.mu_lo, mu_hi=self.mu_hi,
            width=self.width, exists=self.exists, converged=np.array([self.ok(p) for p in range(self.size)]),
            order={"sq_max": self.sq_center, "condensate_max": self.condensate_center},
            flags=self.flags, info={"edges": "grand-canonical plateau edges (bisected on the filling)"},
            grid=self.grid, detail=self)


def _first_true(cond: np.ndarray, valid: np.ndarray) -> np.ndarray:
    """Index of the first valid True per row (M if none)."""
    c = cond & valid
    M = c.shape[1]
    return np.where(c.any(1), np.argmax(c, 1), M)


def _last_true(cond: np.ndarray, valid: np.ndarray) -> np.ndarray:
    c = cond & valid
    M = c.shape[1]
    return np.where(c.any(1), M - 1 - np.argmax(c[:, ::-1], 1), -1)


def locate_plateaus(models: list[Model], fraction="1/3", spec: MethodSpec = MethodSpec(), mu=None, n_mu: int = 121,
                    tol: float = 1e-4, width_floor: float = 1e-3, filling_tol: float = 1e-6,
                    jump_tol: float = 1e-3, sections: int | None = None, thresholds=Thresholds(),
                    keep_grid: bool = False, hint=None, hint_pad: int = 12, grid_every: int = 1) -> PlateauResult:
    """Locate the plateau at ``fraction`` for every model (one batched solve per search step).

    Parameters
    ----------
    models : list of Model
        Share lattice and hard-core choice (mu is ignored: scanned).
    fraction : str, default "1/3"
        Filling of the plateau ("1/3" solid, "0" empty, "1" full or Mott n=1, ...).
    spec : MethodSpec
    mu : array, optional
        Common absolute chemical-potential grid (shape (M,)) or one row per model (P, M).
        Default: ``n_mu`` points over :func:`default_window` of each model.
    tol : float, default 1e-4
        Edge precision relative to each model's energy scale (``Model.scale``).
    width_floor : float, default 1e-3
        A plateau narrower than this (relative to the scale) counts as absent.
    filling_tol : float, default 1e-6
        Filling tolerance epsilon defining "on the plateau".
    jump_tol : float, default 1e-3
        A filling change larger than this across a converged edge bracket is a discontinuity.
    sections : int, optional
        Interior points per bracket and search step (default: the method's ``edge_sections``,
        31 for site-decoupled mean field, 7 for cluster mean field).
    keep_grid : bool
        Keep the coarse grid evaluation (for phase maps).
    hint : array (P, 2), optional
        Where each model's plateau (or crossing) is expected, e.g. the edges found at a nearby
        strain or hopping factor (NaN rows: no hint). The coarse grid is then first evaluated
        only on the points of the full grid between ``hint_pad`` grid points below the hint
        and ``hint_pad`` above it; a model whose sub-grid does not show the filling passing
        ``fraction`` strictly inside it (converged points below and above) is redone on the
        full grid. With a non-decreasing filling the brackets, hence the edges, are those of
        the full grid; see :func:`_sub_grid`. Not combined with ``keep_grid``.
    hint_pad : int, default 12
        Grid points kept on each side of the hint.
    grid_every : int, default 1
        Solve only every ``grid_every``-th point of the coarse grid (and its last point); the
        others are kept in the grid arrays as not computed (``grid["computed"]`` False, NaN,
        empty labels) and skipped by the brackets like non-converged points. The brackets are
        then up to ``grid_every`` times wider and the edge search refines them to the same
        ``tol`` (the edges agree with a full-grid search within the edge brackets); only the
        kept (strain, mu) map is coarser.

    Returns
    -------
    PlateauResult
    """
    lab, f = parse_fraction(fraction)
    models = list(models)
    P = len(models)
    if P == 0:
        raise ConfigError("strain models: no parameter points")
    for name, v, lo in (("tol", tol, 0), ("width_floor", width_floor, 0), ("filling_tol", filling_tol, 0),
                        ("jump_tol", jump_tol, 0)):
        if not (np.isfinite(v) and v > lo):
            raise ConfigError(f"{name}: must be a finite number > 0, got {v!r}")
    spec = MethodSpec.parse(spec)
    if sections is None:
        sections = getattr(spec.impl, "edge_sections", 31)
    if int(sections) < 1:
        raise ConfigError(f"sections: must be an integer >= 1, got {sections!r}")
    scale = np.array([m.scale for m in models], float)
    if mu is None:
        if n_mu < 3:
            raise ConfigError(f"n_mu: need at least 3 chemical potentials, got {n_mu}")
        win = np.array([default_window(m, f) for m in models])
        grid_mu = win[:, :1] + (win[:, 1:] - win[:, :1]) * np.linspace(0, 1, n_mu)[None, :]
    else:
        grid_mu = np.asarray(mu, float)
        if grid_mu.ndim == 1:
            grid_mu = np.broadcast_to(grid_mu, (P, len(grid_mu))).copy()
        if grid_mu.shape[0] != P or grid_mu.shape[1] < 3 or np.any(np.diff(grid_mu, axis=1) <= 0) \
                or not np.all(np.isfinite(grid_mu)):
            raise ConfigError("mu: need at least 3 strictly increasing finite chemical potentials")
    if hint is not None and not keep_grid:
        kw = dict(fraction=fraction, spec=spec, n_mu=n_mu, tol=tol, width_floor=width_floor, filling_tol=filling_tol,
                  jump_tol=jump_tol, sections=sections, thresholds=thresholds)
        return _locate_hinted(models, grid_mu, np.asarray(hint, float).reshape(P, 2), int(hint_pad), kw)
    if int(grid_every) < 1:
        raise ConfigError(f"grid_every: must be an integer >= 1, got {grid_every!r}")
    g = _evaluate_every(models, grid_mu, spec, thresholds, int(grid_every))
    n, conv = g["filling"].astype(float), g["converged"]
    computed = g["computed"]
    flags = [[] for _ in range(P)]
    unconv = [[] for _ in range(P)]  # what did not converge (a field, not flag text; also shown in flags)

    def _fail(p, msg):
        unconv[p].append(msg)
        flags[p].append(f"unconverged: {msg}")

    bad = (computed & ~conv).sum(1)
    for p in range(P):
        if bad[p]:
            flags[p].append(f"note: {int(bad[p])} of {int(computed[p].sum())} grid points did not converge (skipped)")
        nc = n[p][conv[p]]
        if len(nc) > 1 and np.any(np.diff(nc) < -jump_tol):
            flags[p].append("non-monotonic filling on the grid (a seed may have missed the ground state)")
    below = n < f - filling_tol
    above = n > f + filling_tol
    M = grid_mu.shape[1]
    # lower edge: last point below (a) and first converged point not below after it (b)
    ia = _last_true(below, conv)
    # upper edge: first point above (b) and last converged point not above before it (a)
    ib = _first_true(above, conv)
    reached = (ia < M - 1) & (ib > 0) & conv.any(1)
    # also require that something at or above f exists
    reached &= ((~below) & conv).any(1) & ((~above) & conv).any(1)
    rows = np.arange(P)
    cols = np.arange(M)[None, :]
    # lower bracket
    lo_open = ia < 0
    ja = np.where(lo_open, 0, ia)
    after = (cols > ja[:, None]) & conv & ~below
    jb = _first_true(after, np.ones_like(conv))
    jb = np.where(jb >= M, M - 1, jb)
    lo_a, lo_b = grid_mu[rows, ja], grid_mu[rows, jb]
    # upper bracket
    hi_open = ib >= M
    kb = np.where(hi_open, M - 1, ib)
    before = (cols < kb[:, None]) & conv & ~above
    ka = _last_true(before, np.ones_like(conv))
    ka = np.where(ka < 0, 0, ka)
    hi_a, hi_b = grid_mu[rows, ka], grid_mu[rows, kb]

    def end(idx):
        return {k: g[k][rows, idx].copy() for k in _END}

    ends = {"lo_a": end(ja), "lo_b": end(jb), "hi_a": end(ka), "hi_b": end(kb)}
    ends["lo_a"]["mu"], ends["lo_b"]["mu"] = lo_a.copy(), lo_b.copy()
    ends["hi_a"]["mu"], ends["hi_b"]["mu"] = hi_a.copy(), hi_b.copy()
    # multi-section search on both brackets of every live model
    tol_abs = tol * scale
    live_lo = reached & ~lo_open
    live_hi = reached & ~hi_open
    K = int(sections)
    skipped = np.zeros(P, int)
    stalled = np.zeros((P, 2), bool)
    # few points per step (bisection for K = 1): a step whose every interior point failed is
    # retried once on K + 1 other points before the bracket is given up
    retry = np.zeros((P, 2), bool)
    for _ in range(200):
        need_lo = live_lo & ((lo_b - lo_a) > tol_abs)
        need_hi = live_hi & ((hi_b - hi_a) > tol_abs)
        if not (need_lo.any() or need_hi.any()):
            break
        items = []  # (p, side, points)
        for side, need, a, b in ((0, need_lo, lo_a, lo_b), (1, need_hi, hi_a, hi_b)):
            for p in np.nonzero(need)[0]:
                k = K + int(retry[p, side])
                items.append((p, side, a[p] + (b[p] - a[p]) * np.arange(1, k + 1) / (k + 1)))
        for k in sorted({len(x[2]) for x in items}):
            group = [x for x in items if len(x[2]) == k]
            r = evaluate_points([models[p] for p, _, _ in group], np.array([x[2] for x in group]), spec, thresholds)
            for i, (p, side, mm) in enumerate(group):
                nn, cc = r["filling"][i].astype(float), r["converged"][i]
                skipped[p] += int((~cc).sum())
                cond = (nn >= f - filling_tol) if side == 0 else (nn > f + filling_tol)
                # first converged point satisfying cond; bracket = (last converged not-cond before it, it)
                okc = cc & cond
                first = int(np.argmax(okc)) if okc.any() else k
                prev = [j for j in range(first) if cc[j] and not cond[j]]
                a_key, b_key = ("lo_a", "lo_b") if side == 0 else ("hi_a", "hi_b")
                if prev:
                    j = prev[-1]
                    for q in _END:
                        ends[a_key][q][p] = r[q][i, j]
                    ends[a_key]["mu"][p] = mm[j]
                if first < k:
                    for q in _END:
                        ends[b_key][q][p] = r[q][i, first]
                    ends[b_key]["mu"][p] = mm[first]
                if not prev and first == k and not cc.any():
                    if K < RETRY_BELOW and not retry[p, side]:
                        retry[p, side] = True
                    else:  # every interior point failed: cannot shrink this bracket
                        (live_lo if side == 0 else live_hi)[p] = False
                        stalled[p, side] = True
                else:
                    retry[p, side] = False
                if side == 0:
                    lo_a[p], lo_b[p] = ends["lo_a"]["mu"][p], ends["lo_b"]["mu"][p]
                else:
                    hi_a[p], hi_b[p] = ends["hi_a"]["mu"][p], ends["hi_b"]["mu"][p]
    for p in range(P):
        for side, (a, b) in enumerate(((lo_a, lo_b), (hi_a, hi_b))):
            if not stalled[p, side]:
                continue
            w = b[p] - a[p]
            what = "lower" if side == 0 else "upper"
            if w > width_floor * scale[p]:
                _fail(p, f"{what} edge bracket [{a[p]:.6g}, {b[p]:.6g}] could not be refined "
                                "(every interior point failed to converge)")
            else:
                flags[p].append(f"note: {what} edge known to +-{w / 2:.2g} only (closer points do not converge: "
                                "critical slowing down near a continuous transition)")
        if skipped[p]:
            flags[p].append(f"note: {int(skipped[p])} points skipped during the edge search (not converged)")
    mu_lo = np.where(lo_open, -np.inf, 0.5 * (lo_a + lo_b))
    mu_hi = np.where(hi_open, np.inf, 0.5 * (hi_a + hi_b))
    mu_lo = np.where(reached, mu_lo, np.nan)
    mu_hi = np.where(reached, mu_hi, np.nan)
    with np.errstate(invalid="ignore"):
        width = np.where(reached, np.maximum(mu_hi - mu_lo, 0.0), 0.0)
        # a lower edge above the upper edge by more than both brackets: n(mu) is not monotonic, i.e.
        # at some mu every seed missed the lower-energy state; that is a failed search, not a closed
        # plateau (width NaN: not determined, skipped by the critical-strain root search)
        slack = np.where(lo_open, 0.0, lo_b - lo_a) + np.where(hi_open, 0.0, hi_b - hi_a) + width_floor * scale
        inverted = reached & ~lo_open & ~hi_open & (mu_lo - mu_hi > slack)
    for p in np.flatnonzero(inverted):
        _fail(p, f"edges inverted: lower edge {mu_lo[p]:.6g} above upper edge {mu_hi[p]:.6g} (the filling is not "
                 "monotonic in mu: at some mu every seed missed the lower-energy state); width not determined")
    width = np.where(inverted, np.nan, width)
    exists = reached & (width > width_floor * scale)
    # state on the plateau (or at the crossing): the first point at or above the lower edge;
    # for a plateau open below (e.g. the empty state) the last point at or below the upper edge
    cen = {k: np.where(lo_open, ends["hi_a"][k], ends["lo_b"][k]) for k in _END}
    both = lo_open & hi_open
    if both.any():
        mid = int(np.argmin(np.where(computed[0], np.abs(np.arange(M) - M // 2), M)))
        for k in _END:
            cen[k] = np.where(both, g[k][:, mid], cen[k])
    c = {k: cen[k][:, None] for k in _END}
    for p in range(P):
        if not reached[p]:
            nc = n[p][conv[p]]
            rng = f"{nc.min():.4g}..{nc.max():.4g}" if len(nc) else "none converged"
            flags[p].append(f"filling {lab} not reached in the window mu {grid_mu[p, 0]:.4g}..{grid_mu[p, -1]:.4g} "
                            f"(fillings {rng})")
        elif exists[p] and c["phase"][p, 0] not in INCOMPRESSIBLE:
            flags[p].append(f"plateau centre is {c['label'][p, 0]!r}, not incompressible")
        if reached[p] and not c["converged"][p, 0]:
            _fail(p, "the state at the plateau centre / crossing did not converge")
        for side, key in ((0, "lo_a"), (0, "lo_b"), (1, "hi_a"), (1, "hi_b")):
            if reached[p] and not ends[key]["converged"][p] and not (lo_open[p] if side == 0 else hi_open[p]):
                _fail(p, f"edge end state {key} did not converge")
    n_below = np.where(lo_open, np.nan, ends["lo_a"]["filling"].astype(float))
    n_above = np.where(hi_open, np.nan, ends["hi_b"]["filling"].astype(float))
    res = PlateauResult(
        fraction=lab, target=f, mu_lo=mu_lo, mu_hi=mu_hi, width=width, exists=exists,
        n_below=n_below, n_above=n_above,
        label_below=np.where(lo_open, "", ends["lo_a"]["label"]).astype(str),
        label_above=np.where(hi_open, "", ends["hi_b"]["label"]).astype(str),
        label_center=c["label"][:, 0].astype(str), phase_center=c["phase"][:, 0].astype(str),
        center_converged=c["converged"][:, 0].astype(bool),
        jump_lo=np.where(lo_open, 0.0, np.abs(ends["lo_b"]["filling"].astype(float) - ends["lo_a"]["filling"].astype(float))),
        jump_hi=np.where(hi_open, 0.0, np.abs(ends["hi_b"]["filling"].astype(float) - ends["hi_a"]["filling"].astype(float))),
        energy_below=ends["lo_a"]["energy"].astype(float), energy_above=ends["hi_b"]["energy"].astype(float),
        mu_below=ends["lo_a"]["mu"].astype(float), mu_above=ends["hi_b"]["mu"].astype(float),
        reached=reached, tol=np.maximum(np.where(lo_open, 0, lo_b - lo_a), np.where(hi_open, 0, hi_b - hi_a)),
        sq_center=c["sq_max"][:, 0].astype(float), condensate_center=c["condensate_max"][:, 0].astype(float),
        flags=flags, unconverged=unconv, grid=g if keep_grid else None, grid_mu=grid_mu if keep_grid else None,
    )
    return res


def _evaluate_every(models, grid_mu, spec, thresholds, every: int) -> dict:
    """:func:`evaluate_points` on every ``every``-th column of the grid and its last one; the other
    columns are marked not computed (``computed`` False, ``converged`` False, NaN, empty labels),
    so the bracket logic, which skips non-converged points, passes over them."""
    P, M = grid_mu.shape
    cols = np.unique(np.r_[np.arange(0, M, every), M - 1])
    if len(cols) == M:
        g = evaluate_points(models, grid_mu, spec, thresholds)
        g["computed"] = np.ones((P, M), bool)
        return g
    sub = evaluate_points(models, grid_mu[:, cols], spec, thresholds)
    g = {}
    for k, v in sub.items():
        fill = "" if v.dtype.kind in "UO" else (False if v.dtype == bool else np.nan)
        a = np.full((P, M), fill, dtype=v.dtype if v.dtype.kind not in "UO" else object)
        a[:, cols] = v
        g[k] = a.astype(str) if v.dtype.kind in "UO" else a
    g["computed"] = np.zeros((P, M), bool)
    g["computed"][:, cols] = True
    return g


def _sub_grid(grid_mu: np.ndarray, hint: np.ndarray, pad: int):
    """Per model, the contiguous run of ``grid_mu`` points covering ``hint`` plus ``pad`` points on each side.

    Returns ``(start (P,), K)``: every model gets ``K`` points (the longest run needed) starting at
    ``start[p]``; rows without a finite hint get ``start = -1``.
    """
    P, M = grid_mu.shape
    lo = np.array([np.searchsorted(grid_mu[p], hint[p, 0]) for p in range(P)]) - pad
    hi = np.array([np.searchsorted(grid_mu[p], hint[p, 1]) for p in range(P)]) + pad
    ok = np.all(np.isfinite(hint), axis=1) & (hint[:, 1] >= hint[:, 0])
    K = int(min(M, max([h - l for h, l, o in zip(hi, lo, ok) if o], default=M)))
    start = np.clip(lo, 0, M - K)
    return np.where(ok, start, -1), K


def _locate_hinted(models, grid_mu, hint, pad, kw) -> PlateauResult:
    """:func:`locate_plateaus` on sub-grids around ``hint``, the full grid where the sub-grid does not bracket."""
    P, M = grid_mu.shape
    start, K = _sub_grid(grid_mu, hint, pad)
    use = start >= 0
    good = np.zeros(P, bool)
    parts = {}
    if use.any() and K < M:
        idx = np.nonzero(use)[0]
        sub = np.stack([grid_mu[p, start[p]:start[p] + K] for p in idx])
        r = locate_plateaus([models[p] for p in idx], mu=sub, **kw)
        first, last = start[idx] == 0, start[idx] + K == M
        # the sub-grid answer is the full grid's when the filling passes the target inside it
        # (a converged point below before it and one above after it, unless the sub-grid
        # already reaches that end of the full grid)
        lo_in = np.isfinite(r.mu_lo) | first
        hi_in = np.isfinite(r.mu_hi) | last
        ok = r.reached & lo_in & hi_in
        good[idx[ok]] = True
        parts["sub"] = (idx[ok], r, np.nonzero(ok)[0])
    rest = np.nonzero(~good)[0]
    if len(rest):
        r = locate_plateaus([models[p] for p in rest], mu=grid_mu[rest], **kw)
        parts["full"] = (rest, r, np.arange(len(rest)))
    return _merge_results(P, list(parts.values()))


def _merge_results(P, parts) -> PlateauResult:
    """One PlateauResult of P models from pieces ``(target indices, result, source indices)``."""
    import dataclasses

    base = parts[0][1]
    out = {}
    for f in dataclasses.fields(PlateauResult):
        v = getattr(base, f.name)
        if isinstance(v, np.ndarray) and v.shape[:1] == (base.size,):
            a = np.empty((P,) + v.shape[1:], dtype=v.dtype if v.dtype != object else object)
            if a.dtype.kind == "U":
                a = a.astype(object)
            for dst, r, src in parts:
                a[dst] = getattr(r, f.name)[src]
            out[f.name] = a.astype(str) if v.dtype.kind == "U" else a
        elif isinstance(v, list):
            lst = [None] * P
            for dst, r, src in parts:
                for d, s_ in zip(dst, src):
                    lst[d] = getattr(r, f.name)[s_]
            out[f.name] = lst
        elif f.name in ("grid", "grid_mu"):
            out[f.name] = None
        else:
            out[f.name] = v
    return PlateauResult(**out)


def fixed_filling(res: PlateauResult, p: int, jump_tol: float = 1e-3) -> dict:
    r"""Canonical (fixed-filling) answer at the plateau filling for model ``p``.

    * plateau present: the incompressible state itself (e.g. the 1/3 solid);
    * no plateau, filling jumps across ``fraction`` at ``mu_c``: phase separation between
      the two grand-canonical branches (Maxwell construction: the tie line of the canonical
      energy :math:`e(n) = \omega + \mu n` between the branch fillings, slope :math:`\mu_c`),
      with lever-rule fractions;
    * no plateau, continuous passage: the homogeneous compressible state there.
    """
    f = res.target
    out = {"filling": res.fraction, "converged": res.ok(p)}
    if not res.reached[p]:
        out.update(state="not-reached", label="", detail="the filling is not reached in the chemical-potential window")
        return out
    if not res.center_converged[p]:
        out.update(state="unconverged", label="", detail="the state at this filling did not converge")
        return out
    if res.exists[p]:
        ph = str(res.phase_center[p])
        out.update(state=ph, label=str(res.label_center[p]),
                   detail=f"incompressible {res.label_center[p]} over a plateau of width {res.width[p]:.4g}")
        return out
    nb, na = float(res.n_below[p]), float(res.n_above[p])
    if np.isfinite(nb) and np.isfinite(na) and na - nb > jump_tol and nb < f < na:
        x_below = (na - f) / (na - nb)
        eb = res.energy_below[p] + res.mu_below[p] * nb  # canonical energy per site e = omega + mu n
        ea = res.energy_above[p] + res.mu_above[p] * na
        mu_c = 0.5 * (res.mu_lo[p] + res.mu_hi[p])
        e13 = x_below * eb + (1 - x_below) * ea
        out.update(state="phase-separated", label=f"{res.label_below[p]} + {res.label_above[p]}",
                   mu_c=float(mu_c), n_below=nb, n_above=na, label_below=str(res.label_below[p]),
                   label_above=str(res.label_above[p]), fraction_below=float(x_below),
                   fraction_above=float(1 - x_below), energy=float(e13),
                   tie_line_slope=float((ea - eb) / (na - nb)),
                   detail=(f"first-order jump n {nb:.4f} -> {na:.4f} at mu {mu_c:.6g}: coexistence of "
                           f"{res.label_below[p]} ({x_below:.0%}) and {res.label_above[p]} ({1 - x_below:.0%})"))
        return out
    ph = str(res.phase_center[p])
    out.update(state=ph, label=str(res.label_center[p]), mu_c=float(0.5 * (res.mu_lo[p] + res.mu_hi[p])),
               detail=f"homogeneous {res.label_center[p]} (filling passes {res.fraction} continuously)")
    return out


def mu_margin(res: PlateauResult, p: int, mu: float) -> float:
    """Signed distance of ``mu`` from the plateau edges: > 0 inside (to the nearer edge), < 0 outside.

    Without a plateau: minus the distance to the crossing point.
    """
    lo, hi = res.mu_lo[p], res.mu_hi[p]
    if not res.reached[p]:
        return -math.inf
    if res.exists[p]:
        if lo <= mu <= hi:
            return float(min(mu - lo, hi - mu))
        return float(-(lo - mu) if mu < lo else -(mu - hi))
    if math.isinf(lo) or math.isinf(hi):
        return -math.inf
    return -abs(mu - 0.5 * (lo + hi))
