r"""``cmf-scaled``: cluster mean field on several clusters, extrapolated in the cluster-size variable λ.

Spelling: ``cmf-scaled`` (clusters tri3, tri6, tri9), ``cmf-scaled:3+6+9+12`` (with tri12), ``cmf-scaled:3+6+9`` (``N`` stands
for ``triN``), ``cmf-scaled:tri3+tri6+tri12`` or ``cmf-scaled:sq2x2+sq3x3`` (any library names).

Strain workflow only (no single-point solve, no maps). For every cluster ``C`` the plateau at the
filling is located with the cluster's own strain step (``cmf:C``, :mod:`phasemap.strain.engine`,
whichever cmf engine the cluster uses) on the computed strains (``every``-th strain of the path
and the last one). Then, per strain, the edges mu_lo, mu_hi and the width of the clusters are
fitted by a straight line in :math:`\lambda = N_B/(N_C z/2)` (library values, docs/cmf.md) and
extrapolated to :math:`\lambda = 1` with the standard error of the fit
(:func:`phasemap.cmf.scaling.fit_linear`, the fit of ``phasemap cluster-scaling``).

Critical strain: every cluster's plateau-closing strain on the computed strains (the line through
the last two open strains continued to the width floor, kept inside the bracket of the first closed
strain; by default (``polish=True``) then replaced by that cluster's own cmf critical strain by brentq,
since a first-order closing pins every cluster to the same bracket end), then these roots
extrapolated linearly in λ to λ = 1. Errors: the fit's standard error (residuals; undefined for
two clusters) and the brackets' error ((s_closed - s_open)/sqrt(12) per cluster, propagated through
the fit weights at λ = 1). Beside it: the root of the λ-extrapolated width along the strain (a
second estimate from the same data; their difference is reported as ``form_difference``).

Caution (docs/cmf.md): the linear form in λ is a heuristic; at the half-filling supersolid
transition the same extrapolation over tri3…tri12 still overshoots quantum Monte Carlo.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field, fields

import numpy as np

from ..model import ConfigError, check_keys
from . import Capabilities, Method, MethodSpec

__all__ = ["ClusterScaledMeanField", "ScaledStep", "ScaledCritical", "DEFAULT_CLUSTERS", "METHOD"]

#: Default clusters (λ = 1/3, 1/2, 16/27). tri12 (λ = 2/3) is opt-in (``cmf-scaled:3+6+9+12``): on the
#: per-point engine one demo strain costs about 9 min on the 2-core machine (docs/strain.md).
DEFAULT_CLUSTERS = ("tri3", "tri6", "tri9")
#: Plateau search of each cluster (coarser than a single cmf sweep: the spread between clusters is
#: 0.1-1 V, so edges to 1e-3 V suffice and the cost of the per-point engine stays bounded).
SEARCH = {"n_mu": 49, "tol": 1e-3, "sections": 1}
#: grid points kept on either side of the previous cluster's edges (the hint of the next cluster's search)
HINT_PAD = 2
_OWN = ("clusters", "every", "n_mu", "tol", "sections", "polish")
_NAME = re.compile(r"^\d+$")


def _clusters(arg) -> tuple:
    items = arg if isinstance(arg, (list, tuple)) else str(arg).replace(",", "+").split("+")
    out = []
    for x in items:
        x = str(x).strip()
        if not x:
            raise ConfigError(f"cmf-scaled clusters: empty item in {arg!r}; write e.g. 3+6+9+12 or tri3+tri6")
        out.append(f"tri{x}" if _NAME.match(x) else x)
    if len(set(out)) != len(out):
        raise ConfigError(f"cmf-scaled clusters: {'+'.join(out)} lists a cluster twice")
    return tuple(out)


class ClusterScaledMeanField(Method):
    name = "cmf-scaled"
    title = "cluster mean field extrapolated in the cluster size (λ → 1)"
    capabilities = Capabilities(cluster=True, sharp_edges=True, error_bars=True)
    default_arg = "+".join(DEFAULT_CLUSTERS)
    strain_local = False  # "every" subsampling along the whole path; the λ fit needs every cluster at a strain
    caution = ("cluster mean field extrapolated linearly in λ = N_B/(N_C z/2) to λ = 1: a heuristic form (no theorem "
               "fixes it); the fit error covers the scatter of the clusters, not the form, and on the triangular "
               "supersolid transition the same extrapolation still overshoots quantum Monte Carlo (docs/cmf.md)")

    # -- options -------------------------------------------------------------------------------
    def parse_arg(self, arg):
        return {"clusters": _clusters((arg or "").strip() or self.default_arg)}

    def option_names(self):
        from ..cmf import CMFOptions

        return list(_OWN) + [f.name for f in fields(CMFOptions) if f.name not in ("T", "thermal_max_dim")]

    def options(self, options=None):
        d = dict(options or {})
        check_keys("cmf-scaled options", d, self.option_names())
        if d.get("clusters") is not None:
            d["clusters"] = _clusters(d["clusters"])
        if d.get("patterns") is not None:
            d["patterns"] = tuple(d["patterns"])
        return d

    def short_name(self, options):
        return self.spec_name({"clusters": dict(options).get("clusters", DEFAULT_CLUSTERS)})

    def spec_name(self, options):
        d = dict(options)
        cl = _clusters(d.pop("clusters", DEFAULT_CLUSTERS))
        arg = "+".join(c[3:] if c.startswith("tri") and _NAME.match(c[3:]) else c for c in cl)
        return f"{self.name}:{arg}" + "".join(f",{k}={v}" for k, v in sorted(d.items()))

    def check_cluster(self, cluster, model):
        from ..cmf import get_cluster

        for c in _clusters(cluster):
            get_cluster(c, model.lattice)

    def settings(self, spec) -> dict:
        """(clusters, every, search settings, cmf options) of a spec, validated."""
        d = self.options(spec.option_dict)
        s = {"clusters": d.pop("clusters", DEFAULT_CLUSTERS), "every": d.pop("every", 2),
             "polish": bool(d.pop("polish", True)), **{k: d.pop(k, v) for k, v in SEARCH.items()}}
        for k in ("every", "n_mu", "sections"):
            if not (isinstance(s[k], (int, np.integer)) and s[k] >= (3 if k == "n_mu" else 1)):
                raise ConfigError(f"cmf-scaled {k}: expected an integer >= {3 if k == 'n_mu' else 1}, got {s[k]!r}")
        if not (isinstance(s["tol"], (int, float)) and s["tol"] > 0):
            raise ConfigError(f"cmf-scaled tol: expected a number > 0, got {s['tol']!r}")
        s["cmf"] = d
        return s

    def cluster_specs(self, spec) -> list:
        s = self.settings(spec)
        return [MethodSpec.parse(f"cmf:{c}", **s["cmf"]) for c in s["clusters"]]

    def solve_point(self, model, **options):
        raise ConfigError("method cmf-scaled: only in the strain workflow (strain-check, strain-sweep); for one point "
                          "use cmf:<cluster>, for a transition versus λ use phasemap cluster-scaling")

    # -- strain workflow -----------------------------------------------------------------------
    def check_setup(self, spec, models, fraction="1/3"):
        from ..cmf import get_cluster

        s = self.settings(spec)
        if not models:
            raise ConfigError("strain models: no parameter points")
        cl = [get_cluster(c, models[0].lattice) for c in s["clusters"]]
        lam = [c.lam for c in cl]
        if len(set(lam)) < 2:
            raise ConfigError(f"method {spec.name!r}: the λ extrapolation needs at least two clusters with different "
                              f"λ, got {', '.join(f'{c.name} (λ = {c.lam_fraction})' for c in cl)}")
        for c in cl:
            if c.lam_fraction == 0:
                raise ConfigError(f"method {spec.name!r}: cluster {c.name} has λ = 0 (site-decoupled); compare it "
                                  "with mf separately, it is not a cluster of the extrapolation")
        for sp in self.cluster_specs(spec):
            sp.impl.check_setup(sp, models, fraction)

    def strain_step(self, spec, models, fraction, **kw):
        s = self.settings(spec)
        P = len(models)
        computed = np.zeros(P, bool)
        computed[:: int(s["every"])] = True
        computed[-1] = True
        sub = [m for m, c in zip(models, computed) if c]
        search = {k: kw[k] for k in ("width_floor", "filling_tol", "jump_tol", "thresholds") if k in kw}
        search.update({k: s[k] for k in SEARCH})
        recs, prev = {}, None
        for sp, c in zip(self.cluster_specs(spec), s["clusters"]):
            # the previous cluster's edges at the same strains tell where to look (much nearer than mf's);
            # a sub-grid that does not bracket falls back to the full grid (locate_plateaus ``hint``)
            hint = {} if prev is None else {"hint": np.stack([prev.mu_lo, prev.mu_hi], axis=1), "hint_pad": HINT_PAD}
            recs[c] = prev = sp.impl.strain_step(sp, sub, fraction, **search, **hint)
        step = ScaledStep.build(spec, s, models, computed, recs, fraction, kw.get("width_floor", 1e-3))
        return _record(step, spec.name, fraction)

    def strain_critical(self, spec, table, strains, record, fraction, width_floor=1e-3, parts=None, **kw):
        return _critical(spec, table, strains, record, fraction, width_floor,
                         self.cluster_specs(spec) if self.settings(spec)["polish"] else None, polished=parts)

    def strain_critical_parts(self, spec, table, strains, record, fraction, width_floor=1e-3, **kw):
        """The clusters whose brentq polish will run (``polish``, a plateau closing on the computed strains),
        costliest (largest) first: independent root searches, so a sweep runs them side by side."""
        if not self.settings(spec)["polish"]:
            return []
        step: ScaledStep = record.detail
        S, floor = _computed(table, strains, step, width_floor)
        found = [cl for j, cl in enumerate(step.clusters) if _closing(S, step, j, floor)[1] is not None]
        return sorted(found, key=lambda cl: -step.n_sites[step.clusters.index(cl)])

    def strain_critical_part(self, spec, table, strains, record, fraction, piece, width_floor=1e-3, **kw):
        step: ScaledStep = record.detail
        sp = self.cluster_specs(spec)[step.clusters.index(piece)]
        return _polish(sp, table, _computed(table, strains, step, width_floor)[0], step, piece, fraction, width_floor)

    def strain_point(self, spec, model, record, mu, fraction, **kw):
        return _report(model, record, mu, fraction)


# -- the step ---------------------------------------------------------------------------------
@dataclass
class ScaledStep:
    """Per-cluster plateau edges on the computed strains and their extrapolation to λ = 1."""

    clusters: tuple
    lam: np.ndarray             # (C,) λ of every cluster (library value)
    lam_text: list              # exact fractions, "1/3", ...
    n_sites: list
    computed: np.ndarray        # (P,) bool
    per: dict                   # "mu_lo", "mu_hi", "width", "converged", "exists": (P, C), NaN where not computed
    ext: dict                   # "mu_lo", "mu_lo_error", "mu_hi", ..., "width", "width_error": (P,)
    fits: list                  # per strain: {"mu_lo": fit dict, ...} or None
    records: dict               # cluster -> StepRecord of cmf:<cluster> (computed strains only)
    settings: dict
    flags: list = field(default_factory=list)
    floor: np.ndarray = None    # (P,) width floor in the model unit (width_floor x scale)

    @property
    def jump_lo(self) -> np.ndarray:
        """Filling jumps at the edges: not defined for λ-extrapolated edges (NaN; each cluster's are in
        ``records[cluster].detail``)."""
        return np.full(len(self.computed), np.nan)

    jump_hi = jump_lo

    @classmethod
    def build(cls, spec, s, models, computed, recs, fraction, width_floor):
        from ..cmf import get_cluster
        from ..cmf.scaling import fit_linear

        cl = [get_cluster(c, models[0].lattice) for c in s["clusters"]]
        lam = np.array([c.lam for c in cl])
        P, C = len(models), len(cl)
        per = {k: np.full((P, C), np.nan) for k in ("mu_lo", "mu_hi", "width")}
        per["converged"] = np.zeros((P, C), bool)
        per["exists"] = np.zeros((P, C), bool)
        idx = np.nonzero(computed)[0]
        flags = [[] for _ in range(P)]
        for j, c in enumerate(s["clusters"]):
            r = recs[c]
            for k in ("mu_lo", "mu_hi", "width", "converged", "exists"):
                per[k][idx, j] = getattr(r, k)
            for i, p in enumerate(idx):
                flags[p] += [f"cmf:{c}: {f}" for f in r.flags[i]]
        ext = {k: np.full(P, np.nan) for k in ("mu_lo", "mu_lo_error", "mu_hi", "mu_hi_error", "width", "width_error")}
        fits = [None] * P
        for p in idx:
            ok = np.isfinite(per["mu_lo"][p]) & np.isfinite(per["mu_hi"][p])
            if len(set(lam[ok])) < 2:
                flags[p].append("edges of fewer than two clusters: no λ extrapolation at this strain")
                continue
            if (~ok).any():
                flags[p].append(f"not in the λ fit (filling not reached / open edge): "
                                f"{', '.join(c.name for c, o in zip(cl, ok) if not o)}")
            closed = [c.name for c, e, o in zip(cl, per["exists"][p], ok) if o and not e]
            if closed and len(closed) < ok.sum():
                flags[p].append(f"plateau closed for {', '.join(closed)} but open for larger-λ or smaller-λ "
                                "clusters: their edges are the crossing point, the linear λ fit mixes both")
            fits[p] = {}
            for k in ("mu_lo", "mu_hi", "width"):
                f = fit_linear(lam[ok], per[k][p, ok])
                fits[p][k] = f
                ext[k][p], ext[f"{k}_error"][p] = f["extrapolated"], f["extrapolated_err"]
        return cls(tuple(s["clusters"]), lam, [str(c.lam_fraction) for c in cl], [c.n_sites for c in cl], computed, per, ext, fits, recs,
                   {k: v for k, v in s.items() if k != "cmf"} | {"cmf_options": s["cmf"], "width_floor": width_floor},
                   flags, np.array([width_floor * m.scale for m in models]))


def _record(step: ScaledStep, method: str, fraction: str):
    from ..strain.record import StepRecord

    P = len(step.computed)
    e = step.ext
    err = np.nan_to_num(e["width_error"], nan=0.0)
    exists = np.where(np.isfinite(e["width"]), e["width"] - 2 * err > step.floor, False)
    conv = step.computed & np.isfinite(e["width"]) & step.per["converged"].all(1)
    order, errors = {}, {k: e[f"{k}_error"] for k in ("mu_lo", "mu_hi", "width")}
    comps = {}
    for j, c in enumerate(step.clusters):
        for k in ("mu_lo", "mu_hi", "width"):
            order[f"{k}_{c}"] = step.per[k][:, j]
        comps[f"cmf:{c}"] = (f"mu_lo_{c}", f"mu_hi_{c}")
    flags = [list(f) for f in step.flags]
    for p in range(P):
        if not step.computed[p]:
            flags[p].insert(0, f"not computed (cmf-scaled every = {step.settings['every']})")
    return StepRecord(
        method=method, fraction=fraction, sharp=True, mu_lo=e["mu_lo"], mu_hi=e["mu_hi"], width=e["width"], exists=exists,
        converged=conv, order=order, errors=errors, flags=flags,
        info={"cluster": "+".join(step.clusters), "n_sites": int(max(step.n_sites)), "lambda": dict(zip(step.clusters, step.lam_text)),
              "components": comps,
              "edges": ("cluster mean field plateau edges of every cluster, fitted linearly in λ = N_B/(N_C z/2) "
                        f"({', '.join(f'{c}: {t}' for c, t in zip(step.clusters, step.lam_text))}) and extrapolated "
                        "to λ = 1; errors: standard error of the fit")},
        detail=step)


# -- critical strain --------------------------------------------------------------------------
_CRITICAL_TYPE = None


def _critical_type():
    """:class:`ScaledCritical`, built on first use: its base class lives in phasemap.strain, whose import
    asks this registry for methods (a module-level import here would be circular)."""
    global _CRITICAL_TYPE
    if _CRITICAL_TYPE is None:
        from ..strain.critical import CriticalResult

        @dataclass
        class ScaledCritical(CriticalResult):
            """Critical strain extrapolated in λ: every cluster's root, the fit, its standard error."""

            fit_error: float | None = None
            resolution_error: float | None = None
            per_cluster: list = field(default_factory=list)   # [{"cluster", "lambda", "strain_c", "in_fit"}]
            fit: dict = field(default_factory=dict)
            alt_root: float | None = None
            resolution: float | None = None

            @property
            def form_difference(self) -> float | None:
                if self.strain_c is None or self.alt_root is None:
                    return None
                return abs(self.strain_c - self.alt_root)

            def to_dict(self) -> dict:
                d = super().to_dict()
                d.update(fit_error=self.fit_error, resolution_error=self.resolution_error, per_cluster=self.per_cluster, fit=self.fit, alt_root=self.alt_root,
                         form_difference=self.form_difference, resolution=self.resolution)
                return d

            def scaling(self):
                """The per-cluster critical strains and their fit as a :class:`phasemap.cmf.scaling.ScalingResult`."""
                from ..cmf.scaling import ScalingResult

                pc = self.per_cluster
                vals = np.array([np.nan if x["strain_c"] is None else x["strain_c"] for x in pc], float)
                return ScalingResult("critical strain", "critical strain", [x["cluster"] for x in pc],
                                     np.array([x["lambda"] for x in pc]), vals, self.fit, np.array([x["in_fit"] for x in pc]),
                                     list(pc))

            def figure(self):
                """Critical strain of every cluster versus λ with the fit and its λ → 1 value (strain-sweep figure)."""
                if not self.fit:
                    return None
                from ..cmf.scaling import scaling_figure

                return scaling_figure(self.scaling())

            def summary(self) -> str:
                rows = ", ".join(f"{x['cluster']} (λ = {x['lambda_text']}) {x['strain_c']:.4g}" if x["strain_c"] is not None
                                 else f"{x['cluster']} (λ = {x['lambda_text']}) none in the table" for x in self.per_cluster)
                head = f"{self.method}: cluster mean field per cluster: {rows}"
                if self.strain_c is None:
                    c = self.closest
                    why = ("fewer than two clusters close their plateau inside the table" if self.status == "none" else self.status)
                    return (f"{head}; no extrapolated critical strain ({why}; smallest λ-extrapolated width "
                            f"{c['value']:.3g} {self.unit} at strain {c['strain']:.4g})")
                err = f"{self.fit_error:.2g}" if self.fit_error is not None else "n/a (two clusters: no fit error)"
                s = (f"{head}; extrapolated to λ → 1: critical strain {self.strain_c:.4g} ± {err} (fit) ± "
                     f"{self.resolution_error:.2g} (per-cluster roots known to their strain brackets)")
                if self.alt_root is not None:
                    s += f"; root of the λ-extrapolated width {self.alt_root:.4g} (difference {self.form_difference:.2g})"
                if self.t_over_V_c is not None:
                    s += f" (t/V = {self.t_over_V_c:.4g})"
                if self.flags:
                    s += f" [{'; '.join(self.flags)}]"
                return s

        ScaledCritical.__qualname__ = "ScaledCritical"  # picklable as phasemap.methods.cmf_scaled.ScaledCritical
        ScaledCritical.__module__ = __name__           # (module __getattr__ below), e.g. by the sweep's chunks
        _CRITICAL_TYPE = ScaledCritical
    return _CRITICAL_TYPE


def __getattr__(name):
    if name == "ScaledCritical":
        return _critical_type()
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def _computed(table, strains, step, width_floor):
    """The computed strains and the width floor there (model unit)."""
    S = np.asarray(strains, float)[step.computed]
    return S, width_floor * np.array([m.scale for m in table.models(S)])


def _closing(S, step, j, floor):
    """Cluster ``j``'s width minus the floor on the computed strains and its first sign change ``(h, r, i, k)``."""
    from ..qmc.scaling import first_sign_change

    w = step.per["width"][step.computed, j]
    h = np.where(np.isfinite(w), w, 0.0) - floor
    return (h, *first_sign_change(S, h))


def _polish(sp, table, S, step, cl, fraction, width_floor):
    """Cluster ``cl``'s own cmf critical strain (brentq) from its record on the computed strains ``S``."""
    return sp.impl.strain_critical(sp, table, S, step.records[cl], fraction, width_floor=width_floor,
                                   **{q: step.settings[q] for q in SEARCH if q != "sections"})


def _critical(spec, table, strains, record, fraction, width_floor=1e-3, polish=None, polished=None):
    """Critical strain of the cmf-scaled record (module notes). ``polish``: the clusters' cmf specs, to
    polish every cluster's root with that cluster's own critical strain (brentq; costly on tri9, tri12);
    ``polished``: {cluster: that critical strain} already computed (a sweep's parallel chunks)."""
    from ..cmf.scaling import fit_linear
    from ..qmc.scaling import first_sign_change

    step: ScaledStep = record.detail
    c = step.computed
    S, floor = _computed(table, strains, step, width_floor)
    polished = polished or {}
    roots, sigs, pc = [], [], []
    for j, cl in enumerate(step.clusters):
        h, r, i, k = _closing(S, step, j, floor)
        # a closed plateau has width 0 (clipped), so the straight line between the last open and the first
        # closed strain puts the root at the closed end; instead continue the last two open strains' line
        # (exact for a width closing linearly), kept inside the bracket; the error stays the bracket's,
        # uniform: (s_k - s_i)/sqrt(12)
        sig = (S[k] - S[i]) / math.sqrt(12.0) if i is not None else math.nan
        how = "linear between computed strains"
        if i is not None and i >= 1 and h[i] > 0 and np.isfinite(h[i - 1]) and h[i - 1] > h[i]:
            r = float(min(max(S[i] + h[i] * (S[i] - S[i - 1]) / (h[i - 1] - h[i]), S[i]), S[k]))
            how = "line through the last two open strains, inside the bracket"
        if polish is not None and i is not None:
            cr = polished[cl] if cl in polished else _polish(polish[j], table, S, step, cl, fraction, width_floor)
            if cr.strain_c is not None:
                r, sig, how = cr.strain_c, cr.xtol, "brentq (cmf critical strain of the cluster)"
        roots.append(r)
        sigs.append(sig)
        pc.append({"cluster": cl, "lambda": float(step.lam[j]), "lambda_text": step.lam_text[j],
                   "strain_c": None if np.isnan(r) else r, "resolution": None if np.isnan(sig) else sig,
                   "root": how})
    roots = np.array(roots)
    mask = np.isfinite(roots)
    flags = []
    if (~mask).any():
        flags.append(f"no plateau closing inside the table for {', '.join(np.array(step.clusters)[~mask])}: "
                     "not in the λ fit")
    for x, m in zip(pc, mask):
        x["in_fit"] = bool(m)
    fit, sc, err, rerr = {}, None, None, None
    if len(set(step.lam[mask])) >= 2:
        fit = fit_linear(step.lam[mask], roots[mask])
        sc = fit["extrapolated"]
        err = fit["extrapolated_err"] if np.isfinite(fit["extrapolated_err"]) else None
        # the λ = 1 value is linear in the roots, sum_c g_c x_c: propagate every root's bracket error
        X = np.stack([step.lam[mask], np.ones(mask.sum())], 1)
        g = np.array([1.0, 1.0]) @ np.linalg.pinv(X)
        rerr = float(np.sqrt(np.sum((g * np.array(sigs)[mask]) ** 2)))
    H = step.ext["width"][c] - floor
    alt, i0, _ = first_sign_change(S, H)
    alt = None if np.isnan(alt) else alt
    fin = np.isfinite(H)
    k = int(np.nanargmin(np.where(fin, H, np.inf))) if fin.any() else 0
    closest = {"strain": float(S[k]) if len(S) else math.nan,
               "value": float(step.ext["width"][c][k]) if fin.any() else math.nan, "on": "computed strains (λ → 1)"}
    tv = None
    if sc is not None:
        lo, hi = table.span
        if not lo <= sc <= hi:
            flags.append(f"the extrapolated critical strain {sc:.4g} lies outside the table ({lo:g} .. {hi:g})")
        else:
            tv = float(table.ratio(sc)[0])
    direction = ""
    if i0 is not None:
        direction = "closes with increasing strain" if H[i0] > 0 else "opens with increasing strain"
    elif sc is not None:
        direction = "closes with increasing strain"
    res = float(np.max(np.diff(S))) if len(S) > 1 else None
    fl = flags + sorted({f for fs in record.flags for f in fs if f.startswith("cmf:") and "unconverged" in f})
    return _critical_type()(
        method=record.method, fraction=fraction, criterion="width (per cluster, λ → 1)",
        status="found" if sc is not None else "none", strain_c=sc, roots=[sc] if sc is not None else [],
        bracket=None, xtol=res if res is not None else math.nan, direction=direction, closest=closest, strains=S,
        values=H, unit=table.unit, t_over_V_c=tv, flags=fl, evaluations=int(c.sum()) * len(step.clusters),
        fit_error=err, resolution_error=rerr, per_cluster=pc, fit=fit, alt_root=alt, resolution=res)


# -- one-strain check -------------------------------------------------------------------------
def _report(model, record, mu, fraction) -> dict:
    """Sections of ``strain-check`` for cmf-scaled: per-cluster edges, the λ → 1 edges, the verdict."""
    step: ScaledStep = record.detail
    u = model.unit or "V"
    V = max(abs(v) for v in model.V)
    floor = step.settings["width_floor"] * model.scale
    rows = {c: {"lambda": step.lam_text[j], "mu_lo": float(step.per["mu_lo"][0, j]),
                "mu_hi": float(step.per["mu_hi"][0, j]), "width": float(step.per["width"][0, j]),
                "plateau": bool(step.per["exists"][0, j]), "converged": bool(step.per["converged"][0, j])}
            for j, c in enumerate(step.clusters)}
    e = step.ext
    ext = {k: [float(e[k][0]), float(e[f"{k}_error"][0])] for k in ("mu_lo", "mu_hi", "width")}
    w, we = ext["width"]
    per_txt = "; ".join(f"{c} (λ = {r['lambda']}): {r['mu_lo']:.4g} .. {r['mu_hi']:.4g} {u}" for c, r in rows.items())
    lines = [f"{record.method}: cluster mean field on {', '.join(step.clusters)}; {fraction} plateau per cluster: "
             f"{per_txt}."]
    has_err = np.isfinite(we)
    s = we if has_err else 0.0
    margin = w - floor
    if not np.isfinite(w):
        verdict = "uncertain"
        lines.append("the edges of fewer than two clusters are known: no λ extrapolation (see flags).")
    else:
        ftxt = f"{w:.4g} ± {we:.2g} {u}" if has_err else f"{w:.4g} {u} (two clusters: no fit error)"
        pm = (lambda k: f" ± {ext[k][1]:.2g}" if has_err else "")  # noqa: E731
        edges = f"mu from {ext['mu_lo'][0]:.4g}{pm('mu_lo')} to {ext['mu_hi'][0]:.4g}{pm('mu_hi')} {u}"
        if margin - 2 * s > 0:
            verdict = "holds"
            lines.append(f"extrapolated to λ → 1 the {fraction} plateau holds: width {ftxt} ({w / V:.3g} V), {edges}; "
                         f"margin {margin / max(s, 1e-300):.1f} fit σ above the floor {floor:.2g} {u}" if has_err and s > 0
                         else f"extrapolated to λ → 1 the {fraction} plateau holds: width {ftxt} ({w / V:.3g} V), {edges}.")
        elif margin + 2 * s < 0:
            verdict = "melted"
            lines.append(f"extrapolated to λ → 1 the {fraction} plateau is closed: width {ftxt} ({w / V:.3g} V), "
                         f"{edges}" + (f"; {-margin / s:.1f} fit σ below the floor" if s > 0 else "") + ".")
        else:
            verdict = "uncertain"
            lines.append(f"extrapolated to λ → 1 the {fraction} plateau width {ftxt} is within two fit σ of the floor "
                         f"{floor:.2g} {u}: neither clearly open nor closed.")
    out = {"kind": "cmf-scaled", "clusters": rows, "lambda_extrapolated": ext, "verdict": verdict,
           "margin_width": float(margin) if np.isfinite(margin) else None,
           "margin_width_sigma": float(margin / s) if (np.isfinite(margin) and s > 0) else None,
           "fit": {k: v for k, v in (step.fits[0] or {}).items()}, "verdict_lines": lines,
           "converged": bool(record.converged[0])}
    if mu is not None:
        lo, hi = ext["mu_lo"][0], ext["mu_hi"][0]
        m = float(min(mu - lo, hi - mu))
        inside = bool(lo <= mu <= hi)
        near = ext["mu_lo"][1] if (mu - lo) <= (hi - mu) else ext["mu_hi"][1]
        out["at_mu"] = {"mu": float(mu), "inside_plateau": inside, "margin_mu": m,
                        "margin_mu_error": float(near) if has_err else None}
        lines.append(f"mu = {mu:.4g} {u} lies {'inside' if inside else 'outside'} the λ-extrapolated plateau, "
                     f"{abs(m):.3g} {u}" + (f" ± {near:.2g}" if has_err else "") + " from the nearer edge.")
    if not record.converged[0]:
        lines.append("uncertain: some cluster's plateau search met unconverged points (see flags).")
        if verdict == "holds" or verdict == "melted":
            out["verdict"] = "uncertain"
    return out


METHOD = ClusterScaledMeanField()
