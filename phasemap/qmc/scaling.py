r"""Finite-size scaling of quantum Monte Carlo: many runs in parallel, extrapolation, crossings.

One torus at one temperature cannot decide a phase. This module runs a list of sizes (and
parameter points) in parallel processes and

* extrapolates S(K)/N and the stiffness to L -> infinity by a weighted least-squares fit in
  ``1/L**power`` using the one-sigma errors (:func:`weighted_fit`, :func:`extrapolate`): the
  intercept and its fit uncertainty (scaled up by sqrt(chi^2/dof) when the fit is poor);
* classifies with the error bars (:func:`classify_extrapolated`): a solid needs an S(K)/N that
  survives the extrapolation by ``nsigma`` of its uncertainty, a superfluid a stiffness that
  does; if the extrapolated value is compatible with zero but its error bar still allows a
  sizeable value the answer is *undecided*, not "disordered";
* locates a transition along a parameter from the crossing of the Binder ratios (or of the
  L-scaled stiffness L * rho_s, quantum scaling with z = 1) of successive sizes
  (:func:`crossings`), with a bootstrap uncertainty from the one-sigma errors; when the pairs
  of sizes do not agree within their errors the answer is a bracket.

Runs that are not decorrelated (``QMCResult.decorrelated`` False) never enter a fit or a
crossing: they are listed in ``flags``.
"""

from __future__ import annotations

import contextlib
import math
import os
from dataclasses import dataclass, field

import numpy as np

from ..model import ConfigError, Model
from .tempering import positive

__all__ = ["run_many", "job_seed", "weighted_fit", "extrapolate", "classify_extrapolated", "crossings",
           "combine_crossings", "finite_size_scaling", "scan_crossing", "ScalingResult", "CrossingScan",
           "parse_sizes", "temperature_for"]


# ----------------------------------------------------------------------------- parallel runs
def job_seed(seed: int, k: int) -> int:
    """Seed of job ``k`` of a set started with ``seed`` (independent streams, reproducible)."""
    return int(np.random.SeedSequence([int(seed), int(k)]).generate_state(1, np.uint32)[0])


def _one(job):
    from .run import run_qmc

    model, kw = job
    return run_qmc(model, **kw)


#: folder for the chain checkpoints of every run started by :func:`run_many` without a store of
#: its own (set by :func:`chain_checkpoints`, e.g. inside one chunk of a strain sweep)
_CHAIN_DIR: list = [None]


@contextlib.contextmanager
def chain_checkpoints(folder):
    """Inside this block every :func:`run_many` without a ``checkpoint`` keeps its chains'
    checkpoints in ``folder`` (file names carry lattice, beta, seed and chain; a file of another
    run is not reused), so a job made of many runs (the qmc strain step) killed at any moment
    replays its finished runs from their files and continues the interrupted ones mid-chain."""
    old = _CHAIN_DIR[0]
    _CHAIN_DIR[0] = None if folder is None else str(folder)
    try:
        yield
    finally:
        _CHAIN_DIR[0] = old


def run_chunk(job) -> dict:
    """One Monte Carlo run as a chunk of :func:`phasemap.executor.run_chunks` (packed QMCResult)."""
    from ..store import pack_object

    return pack_object(_one(job))


def run_many(jobs: list, workers: int | None = None, executor=None, checkpoint=None, progress: bool = False,
             desc: str = "Monte Carlo runs") -> list:
    """Run ``[(model, run_qmc kwargs), ...]``; results in input order.

    Each job (its chains one after the other, ``workers=1`` inside) is one chunk of
    :func:`phasemap.executor.run_chunks`: by default spread over ``workers`` local processes
    (default: the number of cores), or on ``executor`` (processes, Dask). The numbers depend on
    the jobs' seeds only, never on where they ran.

    ``checkpoint`` (:class:`phasemap.store.ChunkStore`, key = job index): finished runs are saved
    as they arrive and taken from it on a rerun; unfinished runs keep their chains' own
    checkpoints in ``checkpoint.inner()/<job>`` and resume mid-chain. One progress bar
    (``progress``) advances by the sites of each finished run.
    """
    from ..executor import ProcessExecutor, SerialExecutor, run_chunks
    from ..store import unpack_object

    inner = checkpoint.inner() if checkpoint is not None and hasattr(checkpoint, "inner") else None
    chains = {k: str(inner / str(k)) for k in range(len(jobs))} if inner is not None else \
        {k: _CHAIN_DIR[0] for k in range(len(jobs))} if _CHAIN_DIR[0] is not None else {}
    jobs = [(m, {**kw, "workers": 1, **({"checkpoint": chains[k]} if k in chains else {})})
            for k, (m, kw) in enumerate(jobs)]
    own = executor is None
    if own:
        workers = min(len(jobs), os.cpu_count() or 1) if workers is None else max(1, int(workers))
        executor = (SerialExecutor() if workers <= 1 or len(jobs) <= 1 else
                    ProcessExecutor(workers, context="fork"))
    weights = {k: int(np.prod(kw["size"])) if kw.get("size") is not None else 1 for k, (m, kw) in enumerate(jobs)}
    try:
        parts = run_chunks(run_chunk, dict(enumerate(jobs)), executor, store=checkpoint, progress=progress,
                           desc=desc, weights=weights, unit="site")
    finally:
        if own:
            executor.close()
    return [unpack_object(parts[k]) for k in range(len(jobs))]


def parse_sizes(sizes) -> list[int]:
    """``"6,9,12"`` or a list -> sorted distinct L (each >= 2)."""
    if isinstance(sizes, str):
        try:
            sizes = [int(x) for x in sizes.replace(" ", "").split(",") if x]
        except ValueError:
            raise ConfigError(f"sizes: expected comma-separated integers L (L x L tori), got {sizes!r}") from None
    out = sorted({int(L) for L in sizes})
    if len(out) < 2 or out[0] < 2:
        raise ConfigError(f"sizes: need at least two distinct L >= 2, got {list(sizes)}")
    return out


def temperature_for(model: Model, L: int, T=None, beta_L=None) -> float:
    """Temperature of size ``L``: ``T`` if given, else ``1 / (beta_L * L)`` (beta grows with L,
    z = 1 quantum scaling; ``beta_L`` in inverse model units per lattice spacing)."""
    if T is not None:
        return positive("T", T, "temperature")
    if beta_L is None:
        raise ConfigError("T / beta_L: give a temperature T or beta_L (beta = beta_L * L)")
    return 1.0 / (positive("beta_L", beta_L) * L)


# ----------------------------------------------------------------------------- fits
def weighted_fit(x, y, err, deg: int = 1) -> dict:
    """Weighted least squares ``y = c0 + c1 x + ... `` with weights 1/err^2.

    Returns ``{"coef", "cov", "chi2", "dof", "scale"}``; ``cov`` is multiplied by
    ``scale = max(1, chi2/dof)`` when dof > 0 (a poor fit widens the uncertainty, never
    narrows it).
    """
    x, y, e = (np.asarray(a, float) for a in (x, y, err))
    if len(x) < deg + 1:
        raise ConfigError(f"fit: need at least {deg + 1} points for degree {deg}, got {len(x)}")
    # a zero error (e.g. a filling that never fluctuated) gets the largest error of the set, or a tiny
    # floor relative to the data, so that the weights stay finite
    floor = 1e-9 * max(1.0, float(np.nanmax(np.abs(y))) if len(y) else 1.0)
    e = np.where(e > floor, e, max(floor, float(np.nanmax(e)) if np.any(e > floor) else floor))
    A = np.vander(x, deg + 1, increasing=True) / e[:, None]
    b = y / e
    # least squares by SVD: the covariance V diag(1/s^2) V^T is positive semi-definite by construction
    U, sv, Vt = np.linalg.svd(A, full_matrices=False)
    cov = (Vt.T / sv ** 2) @ Vt
    coef = Vt.T @ ((U.T @ b) / sv)
    chi2 = float(np.sum((A @ coef - b) ** 2))
    dof = len(x) - deg - 1
    scale = max(1.0, chi2 / dof) if dof > 0 else 1.0
    return {"coef": coef, "cov": cov * scale, "chi2": chi2, "dof": dof, "scale": scale}


def extrapolate(L, values, errors, power: float = 1.0) -> dict:
    """Value at L -> infinity from a weighted fit ``a + b / L**power``; ``{value, error, slope,
    chi2, dof, power, sizes}``. With two sizes the line goes through both points (dof = 0)."""
    L = np.asarray(L, float)
    f = weighted_fit(1.0 / L ** power, values, errors, 1)
    return {"value": float(f["coef"][0]), "error": float(math.sqrt(f["cov"][0, 0])), "slope": float(f["coef"][1]),
            "chi2": f["chi2"], "dof": f["dof"], "power": power, "sizes": [int(x) for x in L]}


def classify_extrapolated(sk: dict | None, rho: dict | None, filling: float, t_max: float, nsigma: float = 2.0,
                          sk_resolution: float = 0.01, rho_resolution: float = 0.02, edge: float = 0.02) -> dict:
    """Phase from extrapolated S(K)/N and stiffness with their fit errors.

    *ordered*: ``sk.value - nsigma * sk.error > 0``; *stiff*: the same for the stiffness.
    Not ordered but ``sk.value + nsigma * sk.error > sk_resolution`` (S(K)/N of a perfect
    1/3 solid is 1/9) means the data cannot exclude order: *undecided*; likewise for the
    stiffness with ``rho_resolution * t_max``. Returns ``{"phase", "ordered", "stiff", "why"}``.
    """
    def test(d, res):
        if d is None:
            return None, "not measured"
        lo, hi = d["value"] - nsigma * d["error"], d["value"] + nsigma * d["error"]
        if lo > 0:
            return True, f"{d['value']:.4g} ± {d['error']:.2g} > 0 by {d['value'] / max(d['error'], 1e-300):.1f} sigma"
        if hi < res:
            return False, f"{d['value']:.4g} ± {d['error']:.2g} compatible with 0 (< {res:.3g} at {nsigma:g} sigma)"
        return None, f"{d['value']:.4g} ± {d['error']:.2g}: neither > 0 nor below {res:.3g} at {nsigma:g} sigma"

    o, why_o = test(sk, sk_resolution)
    s, why_s = test(rho, rho_resolution * max(t_max, 1e-12))
    if o is True and s is True:
        phase = "supersolid"
    elif o is True and s is False:
        phase = "solid"
    elif o is False and s is True:
        phase = "superfluid"
    elif o is False and s is False:
        phase = "empty" if filling < edge else "full" if filling > 1 - edge else "insulating or normal"
    else:
        phase = "undecided"
    return {"phase": phase, "ordered": o, "stiff": s, "why": {"S(K)/N": why_o, "stiffness": why_s},
            "nsigma": nsigma}


# ----------------------------------------------------------------------------- crossings
def first_sign_change(x, d):
    """First sign change of ``d`` along ``x`` among the points where ``d`` is defined (finite).

    A NaN is a point that was not measured reliably (e.g. a run that did not decorrelate), not a
    zero: it is skipped, so the sign change is bracketed by the nearest *defined* neighbours and
    located by linear interpolation between them. Returns ``(root, i, j)`` with ``i < j`` the
    indices of the bracketing points (``j - i > 1`` when undefined points lie between them), or
    ``(nan, None, None)`` without a sign change. ``d = 0`` counts as not positive.
    """
    x, d = np.asarray(x, float), np.asarray(d, float)
    ok = np.flatnonzero(np.isfinite(d))
    for i, j in zip(ok[:-1], ok[1:]):
        if (d[i] > 0) != (d[j] > 0):
            return float(x[i] + (x[j] - x[i]) * d[i] / (d[i] - d[j])), int(i), int(j)
    return math.nan, None, None


def _first_crossing(x, d):
    return first_sign_change(x, d)[0]


def crossings(x, L, y, err, nboot: int = 400, seed: int = 0) -> list[dict]:
    """Crossing of the curves ``y[k]`` (size ``L[k]``) of successive sizes along ``x``.

    ``y, err``: (nL, nx). For each pair (L_k, L_k+1) the first sign change of their
    difference, linearly interpolated; the one-sigma uncertainty is the spread of the crossing
    over ``nboot`` Gaussian resamplings of the curves within their errors (fixed ``seed``:
    reproducible); ``found`` is the fraction of resamplings with a crossing.
    """
    x = np.asarray(x, float)
    y, err = np.asarray(y, float), np.asarray(err, float)
    rng = np.random.default_rng(seed)
    out = []
    for k in range(len(L) - 1):
        d = y[k + 1] - y[k]
        xc = _first_crossing(x, d)
        draws = []
        for _ in range(nboot):
            yy = y[k:k + 2] + err[k:k + 2] * rng.standard_normal(y[k:k + 2].shape)
            c = _first_crossing(x, yy[1] - yy[0])
            if np.isfinite(c):
                draws.append(c)
        sd = float(np.std(draws)) if len(draws) > 1 else math.nan
        out.append({"sizes": [int(L[k]), int(L[k + 1])], "x": float(xc), "error": sd,
                    "found": len(draws) / nboot if nboot else 0.0})
    return out


def combine_crossings(cross: list[dict], nsigma: float = 2.0) -> dict:
    """One answer from the crossings of successive size pairs.

    The estimate is the crossing of the largest pair that has one, with its statistical error;
    the finite-size uncertainty is the spread between pairs. If the pairs disagree beyond
    ``nsigma`` combined errors the answer is the bracket [min, max] (``status="bracket"``).
    """
    ok = [c for c in cross if np.isfinite(c["x"])]
    if not ok:
        return {"status": "none", "value": None, "stat_error": None, "fss_error": None, "bracket": None,
                "text": "no crossing of the curves of successive sizes inside the scanned range"}
    best = ok[-1]
    xs = np.array([c["x"] for c in ok])
    es = np.array([c["error"] if np.isfinite(c["error"]) else 0.0 for c in ok])
    fss = float(xs.max() - xs.min()) / 2 if len(ok) > 1 else None
    agree = all(abs(a - b) <= nsigma * math.hypot(ea, eb) for a, ea in zip(xs, es) for b, eb in zip(xs, es))
    pairs = ", ".join(f"{c['sizes'][0]}/{c['sizes'][1]}: {c['x']:.4g} ± {c['error']:.2g}" for c in ok)
    if len(ok) > 1 and not agree:
        return {"status": "bracket", "value": float(best["x"]), "stat_error": float(best["error"]), "fss_error": fss,
                "bracket": [float(xs.min()), float(xs.max())],
                "text": f"between {xs.min():.4g} and {xs.max():.4g} (size pairs disagree: {pairs})"}
    txt = f"{best['x']:.4g} ± {best['error']:.2g} (statistical)"
    if fss is not None:
        txt += f" ± {fss:.2g} (finite size: spread of the pairs {pairs})"
    else:
        txt += f" from one pair of sizes only ({pairs}); finite-size drift not measured"
    return {"status": "found", "value": float(best["x"]), "stat_error": float(best["error"]), "fss_error": fss,
            "bracket": None, "text": txt}


# ----------------------------------------------------------------------------- front doors
@dataclass
class ScalingResult:
    """Sizes of one model, extrapolated (see module notes).

    Attributes: ``model``, ``sizes`` (L of the L x L tori), ``results`` (one QMCResult per size),
    ``extrapolations`` (``{"S(K)/N": ..., "stiffness": ...}`` from :func:`extrapolate`, None if
    fewer than two usable sizes), ``classification`` (:func:`classify_extrapolated`),
    ``flags``, ``settings`` (temperatures, sweeps, seed).
    """

    model: Model
    sizes: list
    results: list
    extrapolations: dict
    classification: dict
    flags: list = field(default_factory=list)
    settings: dict = field(default_factory=dict)

    def table(self) -> dict:
        """Columns per size: L, N, T, estimates and errors, decorrelated."""
        cols = {k: [] for k in ("L", "n_sites", "T", "beta", "decorrelated")}
        keys = ("energy", "filling", "compressibility", "S(K)/N", "binder", "stiffness")
        for k in keys:
            cols[k], cols[f"{k}_error"], cols[f"{k}_tau"] = [], [], []
        for L, r in zip(self.sizes, self.results):
            cols["L"].append(L)
            cols["n_sites"].append(r.n_sites)
            cols["T"].append(r.T)
            cols["beta"].append(r.beta)
            cols["decorrelated"].append(bool(r.decorrelated))
            for k in keys:
                e = r.estimates.get(k)
                cols[k].append(e.value if e else math.nan)
                cols[f"{k}_error"].append(e.error if e else math.nan)
                cols[f"{k}_tau"].append(e.tau if e else math.nan)
        return cols

    def to_dict(self) -> dict:
        return {"model": self.model.to_dict(), "sizes": list(self.sizes), "per_size": self.table(),
                "extrapolations": self.extrapolations, "classification": self.classification,
                "flags": list(self.flags), "settings": self.settings}

    def summary(self) -> str:
        s = self.settings
        lines = [f"model : {self.model.describe()}",
                 f"sizes : {', '.join(f'{L}x{L}' for L in self.sizes)} (N = "
                 f"{', '.join(str(r.n_sites) for r in self.results)}), {s.get('sweeps')} sweeps x {s.get('chains')} "
                 f"chain(s), seed {s.get('seed')}"]
        for L, r in zip(self.sizes, self.results):
            part = [f"L={L:<3d} T={r.T:.4g}"]
            for k in ("S(K)/N", "binder", "stiffness", "filling"):
                if k in r.estimates:
                    part.append(f"{k} {format(r.estimates[k])}")
            lines.append("  " + ", ".join(part) + ("" if r.decorrelated else "  NOT DECORRELATED (excluded)"))
        for k, d in self.extrapolations.items():
            if d is not None:
                lines.append(f"{k} (L -> inf, fit a + b/L^{d['power']:g}): {d['value']:.5g} ± {d['error']:.2g} "
                             f"(chi2 {d['chi2']:.2g}, dof {d['dof']})")
            else:
                lines.append(f"{k} (L -> inf): not extrapolated (fewer than two decorrelated sizes)")
        c = self.classification
        lines.append(f"phase : {c['phase']}  [S(K)/N: {c['why']['S(K)/N']}; stiffness: {c['why']['stiffness']}]")
        lines += [f"flag  : {f}" for f in self.flags]
        return "\n".join(lines)


def _run_kw(sweeps, thermalization, bins, chains, seed, k, extra):
    kw = dict(sweeps=sweeps, thermalization=thermalization, bins=bins, chains=chains, seed=job_seed(seed, k))
    kw.update(extra or {})
    return kw


def _extrapolations(sizes, results, power):
    ext, flags = {}, []
    use = [(L, r) for L, r in zip(sizes, results) if r.decorrelated]
    for L, r in zip(sizes, results):
        if not r.decorrelated:
            flags.append(f"L={L}: not decorrelated ({'; '.join(r.flags)}): excluded from the fits")
    for key in ("S(K)/N", "stiffness"):
        pts = [(L, r.estimates[key]) for L, r in use if key in r.estimates]
        if len(pts) >= 2:
            ext[key] = extrapolate([p[0] for p in pts], [p[1].value for p in pts], [p[1].error for p in pts], power)
        else:
            ext[key] = None
    return ext, flags


def finite_size_scaling(model: Model, sizes=(6, 9, 12), T=None, beta_L=None, sweeps: int = 5000,
                        thermalization=None, bins: int = 32, chains: int = 1, seed: int = 0, workers=None,
                        power: float = 1.0, nsigma: float = 2.0, run_options=None, executor=None, checkpoint=None,
                        progress: bool = False) -> ScalingResult:
    """Run ``model`` on L x L tori for every L in ``sizes`` (in parallel) and extrapolate.

    S(K)/N and the stiffness are fitted as ``a + b/L**power`` (default power 1) with weights
    from their one-sigma errors; the phase follows :func:`classify_extrapolated`.
    ``T`` fixes the temperature, else ``beta = beta_L * L``. ``executor``, ``checkpoint``,
    ``progress``: see :func:`run_many` (one run per size).
    """
    sizes = parse_sizes(sizes)
    jobs = [(model, {"size": (L, L), "T": temperature_for(model, L, T, beta_L),
                     **_run_kw(sweeps, thermalization, bins, chains, seed, k, run_options)})
            for k, L in enumerate(sizes)]
    results = run_many(jobs, workers, executor, checkpoint, progress)
    ext, flags = _extrapolations(sizes, results, power)
    n = float(np.mean([r.filling.value for r in results]))
    cls = classify_extrapolated(ext.get("S(K)/N"), ext.get("stiffness"), n, max(model.t), nsigma)
    if any(r.estimates.get("S(K)/N") is None for r in results):
        flags.append("some tori have no K point (L not a multiple of 3): no S(K)/N there")
    settings = {"T": T, "beta_L": beta_L, "sweeps": sweeps, "thermalization": thermalization, "bins": bins,
                "chains": chains, "seed": seed, "power": power, "nsigma": nsigma}
    return ScalingResult(model, sizes, results, ext, cls, flags, settings)


@dataclass
class CrossingScan:
    """Sizes x parameter values along one axis; crossings of the Binder ratio and of L * rho_s."""

    model: Model
    axis: str
    values: np.ndarray
    sizes: list
    results: list  # [size][value] QMCResult
    curves: dict   # name -> (value (nL, nx), error (nL, nx))
    crossings: dict  # name -> list of pair crossings
    combined: dict   # name -> combine_crossings(...)
    flags: list = field(default_factory=list)
    settings: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        return {"model": self.model.to_dict(), "axis": self.axis, "values": self.values.tolist(),
                "sizes": list(self.sizes),
                "curves": {k: {"value": v.tolist(), "error": e.tolist()} for k, (v, e) in self.curves.items()},
                "crossings": self.crossings, "combined": self.combined, "flags": list(self.flags),
                "settings": self.settings}

    def summary(self) -> str:
        lines = [f"model : {self.model.describe()}", f"axis  : {self.axis} = {', '.join(f'{v:.4g}' for v in self.values)}",
                 f"sizes : {', '.join(f'{L}x{L}' for L in self.sizes)}"]
        for k, c in self.combined.items():
            lines.append(f"crossing of {k}: {c['text']}")
        lines += [f"flag  : {f}" for f in self.flags]
        return "\n".join(lines)


def scan_crossing(model: Model, axis: str, values, sizes=(6, 9, 12), T=None, beta_L=None, sweeps: int = 5000,
                  thermalization=None, bins: int = 32, chains: int = 1, seed: int = 0, workers=None,
                  nboot: int = 400, nsigma: float = 2.0, run_options=None, executor=None, checkpoint=None,
                  progress: bool = False) -> CrossingScan:
    """Binder-ratio and L-scaled-stiffness crossings of successive sizes along ``axis``.

    ``axis``: a model field (``t``, ``mu``, ``V``, ``V2``, ``t_<family>``, ``V_<family>``)
    set to each of ``values``. All (size, value) runs go to the process pool at once
    (``executor``, ``checkpoint``, ``progress``: see :func:`run_many`).
    Non-decorrelated points are NaN in the curves (flagged) and do not make crossings.
    """
    from ..params import points

    sizes = parse_sizes(sizes)
    values = np.asarray(sorted(float(v) for v in values))
    if len(values) < 2:
        raise ConfigError(f"values: need at least two values of {axis}, got {len(values)}")
    pb = points(model, {axis: values})
    models = [pb.model(i) for i in range(len(values))]
    jobs, k = [], 0
    for L in sizes:
        for m in models:
            jobs.append((m, {"size": (L, L), "T": temperature_for(m, L, T, beta_L),
                             **_run_kw(sweeps, thermalization, bins, chains, seed, k, run_options)}))
            k += 1
    flat = run_many(jobs, workers, executor, checkpoint, progress)
    res = [flat[i * len(values):(i + 1) * len(values)] for i in range(len(sizes))]
    flags = []
    curves = {}
    for name in ("binder", "L*stiffness", "S(K)/N", "stiffness"):
        v = np.full((len(sizes), len(values)), np.nan)
        e = np.full_like(v, np.nan)
        key = "stiffness" if name == "L*stiffness" else name
        for a, L in enumerate(sizes):
            for b in range(len(values)):
                r = res[a][b]
                est = r.estimates.get(key)
                if est is None or not r.decorrelated:
                    continue
                f = L if name == "L*stiffness" else 1.0
                v[a, b], e[a, b] = f * est.value, f * est.error
        curves[name] = (v, e)
    for a, L in enumerate(sizes):
        for b in range(len(values)):
            if not res[a][b].decorrelated:
                flags.append(f"L={L}, {axis}={values[b]:.4g}: not decorrelated: excluded")
    cr = {n: crossings(values, sizes, *curves[n], nboot=nboot, seed=seed) for n in ("binder", "L*stiffness")}
    comb = {n: combine_crossings(c, nsigma) for n, c in cr.items()}
    settings = {"T": T, "beta_L": beta_L, "sweeps": sweeps, "thermalization": thermalization, "bins": bins,
                "chains": chains, "seed": seed, "nboot": nboot}
    return CrossingScan(model, axis, values, sizes, res, curves, cr, comb, flags, settings)
