"""Scans: 2D phase maps, filling curves n(mu) with plateaus and jumps, boundary refinement.

Results are :class:`xarray.Dataset` objects (coordinates = scanned parameters, variables =
energy, filling, site densities, condensate amplitudes, phase code, convergence) with the
model, method, thresholds and package version as attributes (see :mod:`phasemap.store`).

Boundaries between grid points of different phase are refined by bisection on the
classified ground state (not read off the grid). A first-order transition shows up as a
filling jump that survives the bisection: it is reported as a discontinuity with the
fillings of both branches.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field

import numpy as np
import xarray as xr

from .api import phase_codes, select_winners
from .classify import Thresholds, filling_label
from .lattice import sq_peak
from .model import ConfigError, Model
from .params import ParamBatch, grid, points
from .methods import check_temperature, resolve

__all__ = ["phase_map", "filling_curve", "filling_curves", "FillingCurve", "refine_boundaries", "evaluate"]

INCOMPRESSIBLE = ("empty", "full", "mott", "solid")


def _progress(iterable, total, desc, enabled, unit="chunk"):
    if not enabled:
        return iterable
    from tqdm.auto import tqdm

    return tqdm(iterable, total=total, desc=desc, unit=unit, leave=False)


def evaluate(batch: ParamBatch, method="mf", options=None, thresholds=Thresholds(), chunk=4096,
             progress=False, desc="solving", checkpoint=None, executor=None):
    """Solve and classify every point of ``batch``; returns a dict of flat arrays.

    The points are cut into chunks of ``chunk`` points, solved independently (identical
    results whatever the executor). ``checkpoint``: optional object with ``load(i) -> dict |
    None`` and ``save(i, dict)`` used to resume a long scan chunk by chunk (see
    :class:`phasemap.store.ChunkStore`). ``executor``: :class:`phasemap.executor.Executor` or
    its spelling ("serial", "processes", "dask", a scheduler address); default in-process.
    """
    from .executor import run_chunks

    impl, ropts = resolve(method, options)
    check_temperature(impl, batch.T)
    if not impl.capabilities.grand_canonical and hasattr(impl, "evaluate_points"):
        # point-by-point statistical methods (qmc): one chunk per point (same executor, checkpoint
        # and progress bar), errors as error_* arrays
        return impl.evaluate_points(batch, ropts, thresholds, executor=executor, checkpoint=checkpoint,
                                    progress=progress)
    cap = impl.max_points(batch.base, ropts)  # memory guard (raises if not even one point fits)
    chunk = min(chunk, cap) if cap else chunk
    P = batch.size
    starts = list(range(0, P, chunk))
    tasks = {ci: (batch.take(np.arange(s, min(P, s + chunk))), method, options, thresholds)
             for ci, s in enumerate(starts)}
    weights = {ci: min(P, s + chunk) - s for ci, s in enumerate(starts)}
    parts = run_chunks(solve_chunk, tasks, executor, store=checkpoint, progress=progress, desc=desc,
                       weights=weights, unit="pt")
    parts = [parts[ci] for ci in range(len(starts))]
    flat = {k: np.concatenate([p[k] for p in parts]) for k in parts[0]}
    flat["cutoff"] = _cutoff_matters(batch.hardcore, flat["top_weight"], impl.options(ropts))
    return flat


def _cutoff_matters(hardcore, top_weight, options):
    """Soft-core points whose top occupation n_max carries more weight than ``weight_warn``."""
    if hardcore:
        return np.zeros(np.shape(top_weight), bool)
    return np.asarray(top_weight) > _weight_warn(options)


def _weight_warn(options) -> float:
    return float(getattr(options, "weight_warn", None) or 1e-3)


def _cutoff_flags(model, flat, flags, ds, options) -> None:
    """Say in ``flags`` and in ``ds`` (variable ``cutoff``, attrs) where the cut-off n_max matters."""
    cut = np.asarray(flat["cutoff"], bool)
    ds["cutoff"].attrs["long_name"] = "occupation cut-off n_max matters (top-occupation weight > weight_warn)"
    if model.hardcore or not cut.any():
        return
    full = np.char.find(np.asarray(flat["label"]).astype(str), "cut-off") >= 0
    flags.append(f"occupation cut-off matters at {int(cut.sum())} of {cut.size} points (top-occupation weight > "
                 f"{_weight_warn(options):g}, variable 'cutoff'"
                 + (f"; {int(full.sum())} at n = n_max = {model.n_max} everywhere are labelled 'full ... = "
                    f"cut-off', not the Mott lobe n={model.n_max}" if full.any() else "") + "): results there are not converged in n_max; raise n_max")


def solve_chunk(task):
    """One chunk of :func:`evaluate`: ``(batch, method, options, thresholds)`` -> dict of flat arrays."""
    batch, method, options, thresholds = task
    impl, opts = resolve(method, options)
    return _extract(impl.batch_solver(opts)(batch), thresholds)


def _extract(res, thresholds):
    k, ok, _, phase, label, pattern = select_winners(res, thresholds)
    P = res.batch.size
    r = np.arange(P)
    n, phi = res.n[r, k], np.abs(res.phi[r, k])
    q, sq = res.cell.structure_factor(n)
    sqm, _ = sq_peak(q, sq)
    E = np.where(res.converged, res.energy, np.inf)
    second = np.sort(E, axis=1)[:, 1] if E.shape[1] > 1 else np.full(P, np.inf)
    return dict(
        energy=res.energy[r, k], filling=n.mean(1), densities=n, condensate=phi,
        converged=ok, iterations=res.iterations[r, k], residual=res.residual[r, k],
        seed=k.astype(np.int32), phase=phase.astype(str), label=label.astype(str), pattern=pattern.astype(str),
        sq_max=sqm, condensate_max=phi.max(1), contrast=np.ptp(n, 1),
        top_weight=res.top_weight[r, k], gap_to_next_branch=second - res.energy[r, k],
    )


def _attrs(model: Model, method, thresholds, options, relative, kind, extra=None):
    from .store import provenance

    attrs = provenance(model, method, options or {})
    attrs.update({  # dicts as JSON strings, as they are stored in the file
        "title": f"phasemap {kind}",
        "model": json.dumps(attrs["model"]),
        "method_options": json.dumps(attrs["method_options"]),
        "thresholds": json.dumps(thresholds.to_dict()),
        "relative_to": model.scale_name if relative else "",
        "scale": float(model.scale) if relative else 1.0,
        "phase_names": json.dumps(list(phase_codes())),
        "caution": ("mean-field methods overestimate ordered phases (site-decoupled badly so on the "
                    "triangular lattice); finite clusters are finite"),
    })
    attrs.update(extra or {})
    return attrs


def _dataset(flat, dims, coords, sites, attrs):
    shape = tuple(len(coords[d]) for d in dims)
    codes = phase_codes()
    data = {}
    for k, v in flat.items():
        if k in ("densities", "condensate"):
            data[k] = (dims + ("site",), v.reshape(shape + (v.shape[-1],)))
        elif k == "phase":
            data["phase_code"] = (dims, np.array([codes[x] for x in v], np.int8).reshape(shape))
        else:
            data[k] = (dims, v.reshape(shape))
    ds = xr.Dataset(data, coords={**{d: coords[d] for d in dims}, "site": np.arange(sites.shape[0]),
                                  "site_i": ("site", sites[:, 0]), "site_j": ("site", sites[:, 1])}, attrs=attrs)
    ds["phase_code"].attrs["flag_meanings"] = " ".join(codes)
    ds["phase_code"].attrs["flag_values"] = list(codes.values())
    return ds


def _axis_label(name, model, relative):
    unit = model.scale_name if relative else model.unit
    sym = {"mu": "μ", "t": "t", "V": "V", "U": "U", "V2": "V₂", "T": "T"}.get(name, name)
    return f"{sym}/{unit}" if relative else f"{sym} [{unit}]"


def phase_map(model: Model, x=("t", None), y=("mu", None), relative=True, method="mf", options=None,
              thresholds=Thresholds(), refine=True, refine_tol=1e-4, progress=True, checkpoint=None,
              chunk=4096, adaptive=False, coarse=8, steep=0.05, finest=1, executor=None) -> xr.Dataset:
    """Ground-state phase map over two parameters.

    Parameters
    ----------
    model : Model
        Fixed parameters; the two scanned ones are overridden.
    x, y : (name, values)
        Axis name ("t", "mu", "V", "U", "V2", "t_<family>", "V_<family>") and values. Default
        ``t/V`` in [0, 0.5] x ``mu/V`` in [-1, 7] (hard-core), ``t/U`` in [0, 0.1] x ``mu/U`` in
        [-0.5, 3] (soft-core), 101 x 161 points.
    relative : bool, default True
        Values are ratios to ``model.scale`` (V for hard-core, U for soft-core).
    method : {"mf", "cmf"}
    refine : bool
        Locate boundaries between neighbouring grid points of different phase by bisection
        (to ``refine_tol`` of the axis span) and store them as ``boundary_*`` variables.
    checkpoint : phasemap.store.ChunkStore, optional
        Resume a long scan.
    executor : phasemap.executor.Executor or str, optional
        Where the chunks run: "serial" (default), "processes[:N]", "dask" (local cluster) or a
        Dask scheduler address; results are identical (see :mod:`phasemap.executor`).
    adaptive : bool, default False
        Trace the map coarse to fine (:mod:`phasemap.adaptive`): solve cells of ``coarse`` grid
        steps, split only those whose corners differ in phase or whose filling / condensate /
        structure factor change by more than ``steep``; the other points are filled from their
        cell's corners. Same variables on the same grid, plus ``solved`` (which points were solved).
        ``steep`` is per grid step; ``finest=2`` stops at 2 x 2 cells (labels within one grid
        step of a boundary may come from the nearest solved corner).
    """
    if x[1] is None:
        x = (x[0], np.linspace(0, 0.5 if model.hardcore else 0.1, 101))
    if y[1] is None:
        y = (y[0], np.linspace(-1, 7, 161) if model.hardcore else np.linspace(-0.5, 3, 141))
    (xn, xv), (yn, yv) = x, y
    if xn == yn:
        raise ConfigError(f"scan axes: x and y must differ (both {xn!r})")
    batch, shape = grid(model, {xn: xv, yn: yv}, relative=relative)
    from .executor import Executor, get_executor

    own = executor not in (None, "auto") and not isinstance(executor, Executor)
    executor = get_executor(executor) if own else executor
    try:
        flat = _map_points(batch, shape, method, options, thresholds, chunk, progress, checkpoint, executor,
                           adaptive, coarse, steep, finest)
    finally:
        if own:
            executor.close()
    attrs = _attrs(batch.base, method, thresholds, options, relative, "phase map",
                   {"x_axis": xn, "y_axis": yn, "x_label": _axis_label(xn, model, relative),
                    "y_label": _axis_label(yn, model, relative)})
    solved = flat.pop("solved", None)
    ds = _dataset(flat, (xn, yn), {xn: np.asarray(xv, float), yn: np.asarray(yv, float)},
                  _sites_of(method, options, batch), attrs)
    if solved is not None:
        ds["solved"] = ((xn, yn), solved.reshape(shape))
        ds["solved"].attrs["description"] = ("point solved (True) or filled from the corners of a uniform "
                                             "coarse cell by adaptive tracing (False)")
        ds.attrs.update(adaptive=1, adaptive_coarse=int(coarse), adaptive_steep=float(steep), adaptive_finest=int(finest),
                        solved_fraction=float(solved.mean()))
    if yn == "mu" or xn == "mu":
        axis = 1 if yn == "mu" else 0
        mu = np.asarray(yv if yn == "mu" else xv, float) * (model.scale if relative else 1.0)
        if len(mu) > 1:
            dn = np.gradient(flat["filling"].reshape(shape), mu, axis=axis)
            ds["compressibility"] = ((xn, yn), dn)
            ds["compressibility"].attrs["units"] = f"1/{model.unit}"
    flags = []
    unconv = ~np.asarray(flat["converged"], bool)
    if unconv.any():
        flags.append(f"{int(unconv.sum())} of {unconv.size} points unconverged (phase 'unconverged'; excluded "
                     "from boundaries)")
    _cutoff_flags(batch.base, flat, flags, ds, resolve(method, options)[0].options(options))
    ds.attrs["flags"] = json.dumps(flags)
    if refine and _refinable(method, options):
        bd = refine_boundaries(model, ds, relative=relative, method=method, options=options,
                               thresholds=thresholds, tol=refine_tol, progress=progress)
        ds = ds.merge(bd)
        bad = int((~ds["boundary_converged"].values).sum())
        if bad:
            flags.append(f"{bad} refined boundary point(s) end next to an unconverged state "
                         "(boundary_converged = 0): not phase boundaries")
            ds.attrs["flags"] = json.dumps(flags)
    return ds


def _refinable(method, options) -> bool:
    """Bisection of boundaries/edges on classified labels: deterministic methods only (a label from
    a Monte Carlo run is noisy; statistical maps stay on their grid with error bars)."""
    impl, _ = resolve(method, options)
    return not impl.capabilities.error_bars


def _map_points(batch, shape, method, options, thresholds, chunk, progress, checkpoint, executor, adaptive,
                coarse, steep, finest):
    if adaptive:
        return _adaptive(batch, shape, method, options, thresholds, coarse, steep, finest, progress, checkpoint,
                         executor, chunk)
    return evaluate(batch, method, options, thresholds, chunk=chunk, progress=progress, desc="phase map",
                    checkpoint=checkpoint, executor=executor)


def _adaptive(batch, shape, method, options, thresholds, coarse, steep, finest, progress, checkpoint, executor,
              chunk):
    """Flat arrays of an adaptively traced map (see :mod:`phasemap.adaptive`), level by level."""
    from .adaptive import trace

    bar = None
    if progress:
        from tqdm.auto import tqdm

        bar = tqdm(total=batch.size, desc="phase map (adaptive)", unit="pt", leave=False)

    def solve(level, idx):
        part = checkpoint.load(level) if checkpoint is not None else None
        if part is None or len(part["label"]) != len(idx):
            part = evaluate(batch.take(idx), method, options, thresholds, chunk=chunk, executor=executor)
            if checkpoint is not None:
                checkpoint.save(level, part)
        if bar is not None:
            bar.update(len(idx))
        return part

    try:
        data, solved = trace(shape, solve, coarse=coarse, steep=steep, finest=finest)
    finally:
        if bar is not None:
            bar.close()
    data = {k: (v.astype(str) if v.dtype == object else v) for k, v in data.items()}
    data["solved"] = solved.ravel()
    return data


def _sites_of(method, options, batch):
    """Lattice coordinates of the sites the per-site arrays refer to."""
    impl, options = resolve(method, options)
    return impl.site_coordinates(batch, options)


def refine_boundaries(model, ds, relative=True, method="mf", options=None, thresholds=Thresholds(),
                      tol=1e-4, progress=True) -> xr.Dataset:
    """Boundary points between grid neighbours of different phase label, by bisection.

    Returns a Dataset with dimension ``bpoint`` and variables ``boundary_<x>``, ``boundary_<y>``,
    ``boundary_from``, ``boundary_to`` (labels), ``boundary_jump`` (filling jump across the
    refined bracket), ``boundary_first_order`` (the jump survives halving the bracket).
    """
    xn, yn = ds.attrs["x_axis"], ds.attrs["y_axis"]
    lab = ds["label"].values
    conv = ds["converged"].values
    X, Y = ds[xn].values, ds[yn].values
    pairs = []
    for axis in (0, 1):
        l1 = lab[:-1, :] if axis == 0 else lab[:, :-1]
        l2 = lab[1:, :] if axis == 0 else lab[:, 1:]
        c = (conv[:-1, :] & conv[1:, :]) if axis == 0 else (conv[:, :-1] & conv[:, 1:])
        ii, jj = np.nonzero((l1 != l2) & c)
        for i, j in zip(ii, jj):
            i2, j2 = (i + 1, j) if axis == 0 else (i, j + 1)
            pairs.append(((X[i], Y[j]), (X[i2], Y[j2]), lab[i, j], lab[i2, j2]))
    names = (xn, yn)
    if not pairs:
        return _empty_boundaries(names)
    a = np.array([p[0] for p in pairs])
    b = np.array([p[1] for p in pairs])
    la = np.array([p[2] for p in pairs])
    lb = np.array([p[3] for p in pairs])
    span = max(np.ptp(X) if len(X) > 1 else 1.0, np.ptp(Y) if len(Y) > 1 else 1.0)
    lo, hi, flo, fhi, first = bisect_labels(model, names, a, b, la, relative, method, options, thresholds,
                                            tol * span, progress)
    mid = 0.5 * (lo + hi)
    return xr.Dataset({
        f"boundary_{xn}": ("bpoint", mid[:, 0]), f"boundary_{yn}": ("bpoint", mid[:, 1]),
        "boundary_from": ("bpoint", la.astype(str)), "boundary_to": ("bpoint", lb.astype(str)),
        "boundary_jump": ("bpoint", np.abs(fhi["filling"] - flo["filling"])),
        "boundary_first_order": ("bpoint", first),
        "boundary_bracket": ("bpoint", np.abs(hi - lo).max(1)),
        # both ends of the final bracket converged: else the bisection stopped at a convergence
        # edge, not a phase boundary (flagged, and drawn as such)
        "boundary_converged": ("bpoint", np.asarray(flo["converged"], bool) & np.asarray(fhi["converged"], bool)),
    })


def _empty_boundaries(names):
    xn, yn = names
    e = np.zeros(0)
    return xr.Dataset({f"boundary_{xn}": ("bpoint", e), f"boundary_{yn}": ("bpoint", e),
                       "boundary_from": ("bpoint", e.astype(str)), "boundary_to": ("bpoint", e.astype(str)),
                       "boundary_jump": ("bpoint", e), "boundary_first_order": ("bpoint", e.astype(bool)),
                       "boundary_bracket": ("bpoint", e), "boundary_converged": ("bpoint", e.astype(bool))})


def _points(model, names, pts, relative):
    return points(model, {n: pts[:, i] for i, n in enumerate(names)}, relative)


def _pick(mask, a, b):
    """Per-segment choice between two flats: a where mask, else b."""
    return {k: np.where(mask.reshape((-1,) + (1,) * (a[k].ndim - 1)), a[k], b[k]) for k in a}


def bisect_labels(model, names, a, b, label_a, relative, method, options, thresholds, tol, progress,
                  key="label", ref_b=None, jump_tol=1e-3):
    """Bisect segments a -> b (axis coordinates) on "same state as the a-end".

    ``key="label"``: same phase label as ``label_a``. ``key="filling"``: filling closer to
    the a-end's filling ``label_a`` than to ``ref_b``. Unconverged midpoints count as the
    b side (their flats keep ``converged=False``).

    Returns ``lo, hi, flo, fhi, first_order``: final brackets, the evaluated flats at both
    ends, and whether the transition is first order — the filling jump across the bracket
    exceeds ``jump_tol`` and did not shrink with the last halving of the bracket (a continuous
    change halves with it).
    """
    lo, hi = a.astype(float).copy(), b.astype(float).copy()
    span = np.abs(b - a).max(1)
    steps = int(max(1, math.ceil(math.log2(max(span.max(), 1e-300) / tol))))
    flo = evaluate(_points(model, names, lo, relative), method, options, thresholds)
    fhi = evaluate(_points(model, names, hi, relative), method, options, thresholds)
    jump_prev = np.abs(fhi["filling"] - flo["filling"])
    for _ in _progress(range(steps), steps, "refining boundaries", progress, unit="step"):
        mid = 0.5 * (lo + hi)
        flat = evaluate(_points(model, names, mid, relative), method, options, thresholds)
        if key == "label":
            same = flat["label"] == label_a
        else:
            same = np.abs(flat["filling"] - label_a) < np.abs(flat["filling"] - ref_b)
        jump_prev = np.abs(fhi["filling"] - flo["filling"])
        lo = np.where(same[:, None], mid, lo)
        hi = np.where(same[:, None], hi, mid)
        flo, fhi = _pick(same, flat, flo), _pick(same, fhi, flat)
    jump = np.abs(fhi["filling"] - flo["filling"])
    first_order = (jump > jump_tol) & (jump > 0.8 * jump_prev)
    return lo, hi, flo, fhi, first_order


# -- filling curves ------------------------------------------------------------------------
@dataclass
class FillingCurve:
    """n(mu) at fixed other parameters.

    Attributes
    ----------
    mu, filling : ndarray
        Chemical potential (in the units of the scan: ratio or absolute) and filling.
    plateaus : list of dict
        ``{"filling", "fraction": "1/3", "label", "mu_lo", "mu_hi", "width", "lo_status",
        "hi_status", "mu_lo_bound", "mu_hi_bound", "width_at_least", "flagged"}`` — incompressible
        regions. An edge's status is ``"refined"`` (bisected to ``tol``), ``"grid"`` (``refine``
        off), ``"unbounded"`` (exact: empty below / hard-core full above the window extend to
        infinity), ``"beyond the window"`` (the scan window cuts the plateau) or ``"next to an
        unconverged point"``. Only refined, grid and unbounded edges give ``mu_lo`` / ``mu_hi``;
        the others are NaN, with the innermost known value in ``mu_lo_bound`` / ``mu_hi_bound``
        (the plateau extends at least that far) and ``flagged`` true.
    jumps : list of dict
        First-order discontinuities ``{"mu", "n_below", "n_above", "from", "to", "status"}``
        (filling jump surviving bisection: status ``"found"``; a step whose bracket ends on an
        unconverged point: status ``"next to an unconverged point"``, not a result).
    dataset : xarray.Dataset
        All per-point data (labels, densities, condensates, energies, convergence).
    unresolved : list of dict
        ``{"mu_lo", "mu_hi", "points"}``: stretches of unconverged points (a plateau edge or a
        jump may hide there).
    flags : list of str
        Curve-level warnings (unconverged points, flagged edges, occupation cut-off).
    """

    mu: np.ndarray
    filling: np.ndarray
    plateaus: list = field(default_factory=list)
    jumps: list = field(default_factory=list)
    dataset: xr.Dataset | None = None
    unresolved: list = field(default_factory=list)
    flags: list = field(default_factory=list)

    @property
    def labels(self):
        return self.dataset["label"].values

    @property
    def found_jumps(self) -> list:
        """The jumps that are results (status "found")."""
        return [j for j in self.jumps if j["status"] == "found"]

    def plateau(self, fraction: str):
        """The plateau with the given filling fraction label (e.g. "1/3"), or None."""
        for p in self.plateaus:
            if p["fraction"] == fraction:
                return p
        return None


def filling_curve(model: Model, mu=None, relative=True, method="mf", options=None, thresholds=Thresholds(),
                  refine=True, tol=1e-6, jump_tol=1e-3, progress=False, executor=None, checkpoint=None,
                  chunk=4096) -> FillingCurve:
    """Filling versus chemical potential with plateau detection and first-order jumps.

    Parameters
    ----------
    mu : array-like
        Chemical potentials (ratios to ``model.scale`` when ``relative``). Default: 401 points
        over [-1, 7] (hard-core) or [-0.5, 3] (soft-core).
    tol : float
        Bisection tolerance of the plateau edges and jump positions (same units as ``mu``).
    jump_tol : float
        A filling change larger than this across a bracket of width ``tol`` is a discontinuity.
    executor : phasemap.executor.Executor or str, optional
        Where the chunks of the grid run (see :func:`phase_map`).
    checkpoint, chunk
        Resume the grid chunk by chunk (``chunk`` points each), as for :func:`phase_map`.

    Notes
    -----
    Plateaus are maximal runs of grid points with the same incompressible label (empty, full,
    Mott, solid); their edges are refined by bisection between the last point inside and the
    first outside. Caution: mean field overestimates plateau widths.
    """
    if mu is None:
        mu = np.linspace(-1, 7, 401) if model.hardcore else np.linspace(-0.5, 3, 351)
    mu = np.asarray(mu, float)
    if mu.ndim != 1 or len(mu) < 2 or np.any(np.diff(mu) <= 0):
        raise ConfigError("mu: the filling curve needs at least 2 strictly increasing chemical potentials")
    batch, _ = grid(model, {"mu": mu}, relative=relative)
    flat = evaluate(batch, method, options, thresholds, progress=progress, desc="filling curve", executor=executor,
                    checkpoint=checkpoint, chunk=chunk)
    attrs = _attrs(batch.base, method, thresholds, options, relative, "filling curve",
                   {"x_axis": "mu", "x_label": _axis_label("mu", model, relative)})
    ds = _dataset(flat, ("mu",), {"mu": mu}, _sites_of(method, options, batch), attrs)
    curve = FillingCurve(mu=mu, filling=flat["filling"], dataset=ds)
    labels, phases, conv, n = flat["label"], flat["phase"], flat["converged"], flat["filling"]
    names = ("mu",)
    # plateau runs
    runs, start = [], 0
    # statistical methods (qmc): no plateau runs from noisy labels; n(mu) with its error bars is the answer
    for i in range(1, len(mu) + 1 if _refinable(method, options) else 0):
        if i == len(mu) or labels[i] != labels[start]:
            if phases[start] in INCOMPRESSIBLE and conv[start]:
                runs.append((start, i - 1))
            start = i
    # edges to refine: (inside index, outside index); never towards an unconverged neighbour
    seg_a, seg_b, seg_lab = [], [], []
    for s, e in runs:
        for inside, outside in ((s, s - 1), (e, e + 1)):
            if 0 <= outside < len(mu) and conv[outside]:
                seg_a.append(mu[inside]), seg_b.append(mu[outside]), seg_lab.append(labels[inside])
    edges = {}
    refine = refine and _refinable(method, options)
    if refine and seg_a:
        lo, hi, _, fhi, _ = bisect_labels(model, names, np.array(seg_a)[:, None], np.array(seg_b)[:, None],
                                          np.array(seg_lab), relative, method, options, thresholds, tol, progress)
        for k, (x, yv) in enumerate(zip(seg_a, seg_b)):
            # the bracket's outer end must be a converged state of another phase, else not found
            edges[(x, yv)] = (0.5 * (lo[k, 0] + hi[k, 0]), EDGE_REFINED if fhi["converged"][k] else EDGE_UNCONVERGED)
    for s, e in runs:
        curve.plateaus.append(_plateau(model, mu, n, labels, phases, conv, s, e, edges, refine, thresholds))
    # first-order jumps: neighbouring points with a filling step, bisected on the filling
    dn = np.abs(np.diff(n))
    slope = dn / np.diff(mu)
    cand = np.nonzero((dn > 10 * jump_tol) & conv[:-1] & conv[1:] &
                      (slope > 4 * np.median(slope[slope > 0]) if np.any(slope > 0) else False))[0]
    if refine and len(cand):
        a, b = mu[cand][:, None], mu[cand + 1][:, None]
        lo, hi, flo, fhi, first = bisect_labels(model, names, a, b, n[cand], relative, method, options,
                                                thresholds, tol, progress, key="filling", ref_b=n[cand + 1],
                                                jump_tol=jump_tol)
        for k, i in enumerate(cand):
            ok = bool(flo["converged"][k] and fhi["converged"][k])
            if first[k] or not ok:
                curve.jumps.append({"mu": float(0.5 * (lo[k, 0] + hi[k, 0])), "n_below": float(flo["filling"][k]),
                                    "n_above": float(fhi["filling"][k]), "from": str(flo["label"][k]),
                                    "to": str(fhi["label"][k]), "status": "found" if ok else EDGE_UNCONVERGED})
    # unconverged stretches: a plateau edge or a jump may hide there; say so
    bad = np.nonzero(~np.asarray(conv, bool))[0]
    if len(bad):
        groups = np.split(bad, np.nonzero(np.diff(bad) > 1)[0] + 1)
        curve.unresolved = [{"mu_lo": float(mu[max(g[0] - 1, 0)]), "mu_hi": float(mu[min(g[-1] + 1, len(mu) - 1)]),
                             "points": int(len(g))} for g in groups]
        curve.flags.append(f"{len(bad)} of {len(mu)} points unconverged (phase 'unconverged'); plateau edges and "
                           "jumps next to them are flagged, not found, and a jump may hide in "
                           + ", ".join(f"[{u['mu_lo']:.4g}, {u['mu_hi']:.4g}]" for u in curve.unresolved)
                           + " (raise [solver] max_iter)")
    if any(p["flagged"] for p in curve.plateaus) or any(j["status"] != "found" for j in curve.jumps):
        curve.flags.append("flagged plateau edges or jumps: see their status (beyond the window / next to an "
                           "unconverged point); their mu values are bounds, not results")
    _cutoff_flags(batch.base, flat, curve.flags, ds, resolve(method, options)[0].options(options))
    ds.attrs["unresolved"] = json.dumps(curve.unresolved)
    ds.attrs["flags"] = json.dumps(curve.flags)
    ds.attrs["plateaus"] = json.dumps(curve.plateaus)
    ds.attrs["jumps"] = json.dumps(curve.jumps)
    return curve


EDGE_REFINED, EDGE_GRID, EDGE_UNBOUNDED = "refined", "grid", "unbounded"
EDGE_WINDOW, EDGE_UNCONVERGED = "beyond the window", "next to an unconverged point"
#: Edge statuses whose mu value is a result; the others are bounds only.
EDGE_FOUND = (EDGE_REFINED, EDGE_GRID, EDGE_UNBOUNDED)


def _plateau(model, mu, n, labels, phases, conv, s, e, edges, refine, thresholds) -> dict:
    """The plateau record of the run of grid points s..e (see :class:`FillingCurve`)."""
    def edge(inside, outside, end_phase):
        if not 0 <= outside < len(mu):
            # n(mu) is monotone: empty stays empty below, hard-core full stays full above
            return (math.copysign(math.inf, outside), EDGE_UNBOUNDED) if phases[inside] == end_phase else \
                (math.nan, EDGE_WINDOW)
        if not conv[outside]:
            return math.nan, EDGE_UNCONVERGED
        if not refine:
            return float(mu[inside]), EDGE_GRID
        x, status = edges[(mu[inside], mu[outside])]
        return (float(x), status) if status == EDGE_REFINED else (math.nan, status)

    lo, lo_st = edge(s, s - 1, "empty")
    hi, hi_st = edge(e, e + 1, "full" if model.hardcore else "")
    lo_b = lo if lo_st in EDGE_FOUND else float(mu[s])
    hi_b = hi if hi_st in EDGE_FOUND else float(mu[e])
    return {"filling": float(n[s]), "fraction": filling_label(n[s], thresholds.max_denominator),
            "label": str(labels[s]), "mu_lo": float(lo), "mu_hi": float(hi), "width": float(hi - lo),
            "lo_status": lo_st, "hi_status": hi_st, "mu_lo_bound": float(lo_b), "mu_hi_bound": float(hi_b),
            "width_at_least": float(hi_b - lo_b),
            "flagged": bool(lo_st not in EDGE_FOUND or hi_st not in EDGE_FOUND)}


def plateau_text(p: dict) -> str:
    """``1/3 [0.1029, 2.632]``, with flagged edges spelled out (``beyond the window (> 2)``)."""
    def one(side):
        st, x, b = p[f"{side}_status"], p[f"mu_{side}"], p[f"mu_{side}_bound"]
        if st in EDGE_FOUND:
            return f"{x:.4g}"
        rel = "<" if side == "lo" else ">"
        return f"{st} ({rel} {b:.4g})" if st == EDGE_WINDOW else f"not found: {st} (plateau reaches {b:.4g})"
    return f"{p['fraction']} [{one('lo')}, {one('hi')}]"


def filling_curves(model, mu, methods=("mf",)) -> tuple[dict, list]:
    """``{method: (mu, filling)}`` (absolute mu, no refinement) for every method that runs, and notes for the rest."""
    curves, notes = {}, []
    for m in methods:
        try:
            fc = filling_curve(model, mu=np.asarray(mu, float), relative=False, method=m, refine=False)
            curves[m] = (np.asarray(fc.mu, float), np.asarray(fc.filling, float))
        except Exception as e:  # noqa: BLE001 - overlay is optional; report why it is missing
            notes.append(f"{m} filling curve unavailable: {type(e).__name__}: {e}")
    return curves, notes
