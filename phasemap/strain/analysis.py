r"""One strain: plateau extent, phase at a chemical potential, phase at fixed filling, margins.

:func:`check_strain` answers "at strain s, is the system still in the commensurate solid?"
and returns a :class:`StrainCheck` whose ``data`` dictionary holds every number; the
plain-language :meth:`StrainCheck.verdict` is written from that dictionary only, so the text
and the JSON (:meth:`StrainCheck.to_json`) cannot disagree.

Conventions
-----------
* Energies (chemical potential, plateau width) are in the table's unit; "relative to V"
  divides by the largest nearest-neighbour repulsion at that strain.
* The *melt factor* is the factor by which every hopping must be multiplied, interactions
  fixed (i.e. the factor by which t/V must grow), for the plateau to close; found by
  :func:`scipy.optimize.brentq` on the plateau width. A factor below 1 means the plateau is
  already gone and says how far t/V would have to fall to bring it back.
* Fixed filling: the canonical answer is read from the grand-canonical branches. A filling
  jump across the target filling is a first-order transition: at fixed filling the system
  phase-separates between the two branches (Maxwell construction).

Caution: site-decoupled mean field overestimates the solid; cluster mean field less so.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field

import numpy as np

from ..classify import Thresholds
from ..model import ConfigError, Model
from ..methods import MethodSpec, get_method
from .engine import evaluate_points, fixed_filling, locate_plateaus, mu_margin, parse_fraction
from .roots import narrowed_brentq
from .table import StrainTable

__all__ = ["check_strain", "StrainCheck", "melt_factor", "strain_filling_curve", "CAUTION"]

#: Caution of the site-decoupled mean-field band (the sweep's summary caution).
CAUTION = get_method("mf").caution


def _jsonable(v):
    from ..store import jsonable

    return jsonable(v)


def _fmt(x, unit="", digits=3):
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return "n/a"
    if isinstance(x, str):
        return x
    if math.isinf(x):
        return "unbounded" if x > 0 else "-unbounded"
    s = f"{x:.{digits}g}"
    return f"{s} {unit}".strip()


def _scaled_t(model: Model, factor: float) -> Model:
    return model.replace(t=tuple(float(x) * factor for x in model.t))


def melt_factor(model: Model, spec: MethodSpec = MethodSpec(), fraction="1/3", f_min: float = 0.05,
                f_max: float = 10.0, rtol: float = 1e-3, width_floor: float = 1e-3, sections: int = 0,
                **locate_kw) -> dict:
    """Factor by which all hoppings (t/V) must be multiplied for the plateau to close.

    Root of ``w(f) - width_floor * scale`` with :func:`scipy.optimize.brentq`. The bracket is
    found by stepping geometrically from ``f = 1`` towards ``f_max`` (plateau present) or
    ``f_min`` (absent), six steps at most, stopping at the first sign change; ``sections`` > 0
    adds one batched multi-section narrowing before brentq (worth it only when a batch of many
    points costs little more than one). Every plateau search after the first is hinted with
    the edges found at the nearest factor already evaluated (:func:`locate_plateaus` ``hint``:
    the coarse chemical-potential grid is evaluated only around them, with a fall-back to the
    full grid).

    Returns
    -------
    dict
        ``status`` ("found", "beyond-range", "already-melted", "never-present",
        "unconverged"), ``factor`` (None unless found), ``bracket``, ``evaluations``,
        ``flags``.
    """
    if not (0 < f_min < 1 < f_max and np.isfinite(f_max)):
        raise ConfigError(f"melt factor range: need 0 < f_min < 1 < f_max, got {f_min}, {f_max}")
    floor = width_floor * model.scale
    kw = dict(locate_kw)
    kw.setdefault("tol", width_floor / 5)
    kw["width_floor"] = width_floor
    flags: list[str] = []
    count = [0]
    known: dict = {}  # factor -> (mu_lo, mu_hi) where the plateau / crossing was found

    def hint(f):
        if not known:
            return (np.nan, np.nan)
        return known[min(known, key=lambda g: abs(math.log(g / f)))]

    def widths(factors):
        count[0] += len(factors)
        h = np.array([hint(f) for f in factors], float)
        r = locate_plateaus([_scaled_t(model, f) for f in factors], fraction, spec,
                            hint=h if np.isfinite(h).all(axis=1).any() else None, **kw)
        for p in range(r.size):
            if not r.ok(p):
                flags.append(f"t x{factors[p]:.4g}: unconverged: " + "; ".join(r.unconverged[p]))
            if r.reached[p] and np.isfinite(r.mu_lo[p]) and np.isfinite(r.mu_hi[p]):
                known[float(factors[p])] = (float(r.mu_lo[p]), float(r.mu_hi[p]))
        return np.where(r.reached, r.width, 0.0) - floor

    h1 = widths([1.0])[0]
    up = h1 > 0
    grid = np.geomspace(1.0, f_max, 7)[1:] if up else np.geomspace(f_min, 1.0, 7)[:-1][::-1]
    prev_f, prev_h = 1.0, h1
    bracket = None
    h_at = {}
    for f in grid:
        h = h_at[f] = widths([f])[0]
        if (h > 0) != (prev_h > 0):
            bracket = (min(prev_f, f), max(prev_f, f))
            break
        prev_f, prev_h = f, h
    out = {"status": "", "factor": None, "bracket": None, "range": [f_min, f_max], "rtol": rtol, "flags": flags}
    if bracket is None:
        out["status"] = "beyond-range" if up else "never-present"
        out["evaluations"] = count[0]
        return out

    def h(f):
        return widths([f])[0]

    a, b = bracket
    ha, hb = (prev_h, h_at[b]) if prev_f == a else (h_at[a], prev_h)
    root, _, _ = narrowed_brentq(h, widths, a, b, ha, hb, xtol=rtol * a, sections=max(int(sections), 1),
                                 steps=1 if sections > 0 else 0)
    out.update(status="found" if up else "already-melted", factor=float(root), bracket=[a, b],
               evaluations=count[0])
    if flags:
        out["status"] += "-uncertain"
    return out


def strain_filling_curve(table: StrainTable, strain: float, spec="mf", mu=None, extrapolate=False, **kw):
    """The full filling curve n(mu) at one strain (:func:`phasemap.scan.filling_curve`, absolute mu)."""
    from ..scan import filling_curve

    spec = MethodSpec.parse(spec)
    model = table.model(strain, extrapolate=extrapolate)
    if mu is None:
        from .engine import default_window

        lo, hi = default_window(model)
        mu = np.linspace(lo, hi, 161)
    return filling_curve(model, mu, relative=False, method=spec, **kw)


@dataclass
class StrainCheck:
    """Answer of :func:`check_strain`; ``data`` is plain JSON."""

    data: dict = field(default_factory=dict)

    def to_json(self, indent=2) -> str:
        return json.dumps(_jsonable(self.data), indent=indent, ensure_ascii=False)

    def verdict(self) -> str:
        """Plain-language verdict, written from ``data`` only."""
        return verdict_text(self.data)


def _edge_kind(jump, tol):
    return "first-order" if jump > tol else "continuous"


def check_strain(table: StrainTable, strain: float, spec="mf", mu: float | None = None, fraction="1/3",
                 extrapolate: bool = False, melt: bool = True, melt_max: float = 10.0, thresholds=Thresholds(),
                 tol: float = 1e-4, width_floor: float = 1e-3, jump_tol: float = 1e-3, n_mu: int = 121) -> StrainCheck:
    """Is the system at ``strain`` in the commensurate solid, and how far from leaving it?

    One path for every method: the method's :meth:`~phasemap.methods.Method.strain_step` gives
    the plateau record (grand-canonical plateau, or the finite-cluster step of exact
    diagonalization), the common part of the answer is built from it, and the method adds its
    own sections (:meth:`~phasemap.methods.Method.strain_point`: state at ``mu``, melt factor,
    order parameter, ...).

    Parameters
    ----------
    table : StrainTable
    strain : float
        Must lie inside the table unless ``extrapolate``.
    spec : str or MethodSpec
        "mf", "cmf:<cluster>", or "ed[:<cluster>]" (exact diagonalization on a periodic cluster
        containing K, default tri12: the finite-cluster step mu-(N), mu+(N) at N = f L, its
        charge gap and S(K)/N; no melt factor and no sharp edge, see
        :mod:`phasemap.strain.ed_method`).
    mu : float, optional
        Chemical potential (table unit) at which to report the phase and its distance to
        the plateau edges.
    fraction : str, default "1/3"
    melt : bool
        Compute the melt factor (root-finding; the slowest part; sharp methods only).
    tol, width_floor, jump_tol, n_mu
        See :func:`phasemap.strain.engine.locate_plateaus` (tol, width_floor relative to V).

    Returns
    -------
    StrainCheck
    """
    spec = MethodSpec.parse(spec)
    lab, _ = parse_fraction(fraction)
    model = table.model(strain, extrapolate=extrapolate)
    if mu is not None:
        mu = float(mu)
        if not math.isfinite(mu):
            raise ConfigError(f"mu: must be a finite number, got {mu}")
    kw = dict(tol=tol, width_floor=width_floor, jump_tol=jump_tol, thresholds=thresholds, n_mu=n_mu)
    rec = spec.impl.strain_step(spec, [model], lab, **kw)
    Vref = max(abs(v) for v in model.V)
    rel = (lambda x: float(x) / Vref if Vref > 0 else None)  # noqa: E731
    lo, hi, w = float(rec.mu_lo[0]), float(rec.mu_hi[0]), float(rec.width[0])
    plateau = {"fraction": lab, "sharp": rec.sharp, "mu_lo": lo, "mu_hi": hi, "width": w,
               "mu_lo_over_V": rel(lo), "mu_hi_over_V": rel(hi), "width_over_V": rel(w), "edges": rec.info["edges"]}
    plateau.update({k: rec.info[k] for k in ("cluster", "n_sites", "N") if k in rec.info})
    if rec.errors:
        plateau["errors"] = {k: float(v[0]) for k, v in rec.errors.items()}
    data = {
        "strain": float(strain), "method": spec.name, "unit": table.unit, "fraction": lab,
        "table": table.path, "extrapolated": bool(not (table.span[0] <= strain <= table.span[1])),
        "parameters": {"t": list(model.t), "V": list(model.V), "U": "inf" if model.hardcore else model.U,
                       "V2": model.V2, "t_over_V": max(model.t) / Vref if Vref > 0 else math.inf,
                       "families": list(model.families)},
        "plateau": plateau, "flags": list(rec.flags[0]), "caution": spec.impl.caution,
        "converged": bool(rec.converged[0]),
    }
    report = spec.impl.strain_point(spec, model, rec, mu, lab, melt=melt, melt_max=melt_max, **kw)
    for k, v in report.items():
        if k == "plateau":
            data["plateau"].update(v)
        elif k == "flags":
            data["flags"] += v
        else:
            data[k] = v
    return StrainCheck(data)


def grand_canonical_report(spec, model: Model, res, mu, lab: str, melt=True, melt_max=10.0, thresholds=Thresholds(),
                           width_floor=1e-3, jump_tol=1e-3, n_mu=121) -> dict:
    """Sections of a one-strain check that only a grand-canonical plateau has (see :func:`check_strain`)."""
    out = {"plateau": {
        "exists": bool(res.exists[0]), "reached": bool(res.reached[0]),
        "label": str(res.label_center[0]) if res.exists[0] else "",
        "lower_edge": _edge_kind(res.jump_lo[0], jump_tol) if math.isfinite(res.mu_lo[0]) else "open",
        "upper_edge": _edge_kind(res.jump_hi[0], jump_tol) if math.isfinite(res.mu_hi[0]) else "open",
        "below": str(res.label_below[0]), "above": str(res.label_above[0]), "edge_precision": float(res.tol[0]),
    }, "fixed_filling": fixed_filling(res, 0, jump_tol), "flags": []}
    if mu is not None:
        pt = evaluate_points([model], np.array([[mu]]), spec, thresholds)
        conv = bool(pt["converged"][0, 0])
        m = mu_margin(res, 0, mu)
        nearest = None
        if res.exists[0] and res.reached[0]:
            d_lo, d_hi = abs(mu - res.mu_lo[0]), abs(mu - res.mu_hi[0])
            nearest = "lower" if d_lo <= d_hi else "upper"
        out["at_mu"] = {"mu": mu, "converged": conv, "phase": str(pt["phase"][0, 0]) if conv else "unconverged",
                        "label": str(pt["label"][0, 0]) if conv else "unconverged",
                        "filling": float(pt["filling"][0, 0]) if conv else None,
                        "inside_plateau": bool(res.exists[0] and m >= 0), "margin_mu": float(m) if math.isfinite(m) else None,
                        "nearest_edge": nearest}
        if not conv:
            out["flags"].append(f"unconverged: the state at mu = {mu:g} did not converge (not classified)")
    if melt and res.reached[0]:
        Vref = max(abs(v) for v in model.V)
        t_over_V = max(model.t) / Vref if Vref > 0 else math.inf
        mf = melt_factor(model, spec, lab, f_max=melt_max, width_floor=width_floor, jump_tol=jump_tol,
                         thresholds=thresholds, n_mu=n_mu)
        out["melt"] = {**mf, "t_over_V_at_melt": (mf["factor"] * t_over_V if mf["factor"] else None)}
        out["flags"] += [f"melt search: {x}" for x in mf["flags"]]
    ok = res.ok(0) and (mu is None or out["at_mu"]["converged"])  # melt-search flags are reported, not decisive
    out["converged"] = ok
    if not res.reached[0]:
        out["verdict"] = "not-reached"
    elif not ok:
        out["verdict"] = "uncertain"
    else:
        out["verdict"] = "holds" if res.exists[0] else "melted"
    return out


def _verdict_text_step(d: dict) -> str:
    u = d["unit"]
    p, o = d["plateau"], d["order"]
    frac = d["fraction"]
    rel = (lambda k: f" ({p[k]:.3g} V)" if (p.get(k) is not None and u != "V") else "")  # noqa: E731
    lines = [f"at strain {d['strain']:g} ({d['method']}: exact diagonalization, {d['n_sites']}-site periodic "
             f"cluster, canonical, N = {d['N']}) the finite-cluster {frac} step runs from "
             f"mu- = {_fmt(p['mu_lo'], u, 4)}{rel('mu_lo_over_V')} to mu+ = {_fmt(p['mu_hi'], u, 4)}"
             f"{rel('mu_hi_over_V')}; width = charge gap {_fmt(p['width'], u, 4)}{rel('width_over_V')}."]
    ref = f"; perfect sqrt3 x sqrt3 solid: {o['perfect_solid']:.4g}" if o.get("perfect_solid") else ""
    word = "above" if o["above_threshold"] else "not above"
    lines.append(f"S(K)/N = {o['S(K)/N']:.4g} is {word} the density-order indicator {o['threshold']:g} of "
                 f"phasemap.ed (EDThresholds.sq{ref}).")
    lines.append(f"{d['critical']['text']}.")
    a = d.get("at_mu")
    if a:
        mrel = f" ({a['margin_mu_over_V']:.3g} V)" if (a.get("margin_mu_over_V") is not None and u != "V") else ""
        if a["inside_step"]:
            lines.append(f"at mu = {_fmt(a['mu'], u, 4)} the cluster holds N = {d['N']} "
                         f"({a['compared']} compared), {_fmt(a['margin_mu'], u)}{mrel} inside the {a['nearest_edge']} edge.")
        else:
            orel = f" ({-a['margin_mu_over_V']:.3g} V)" if (a.get("margin_mu_over_V") is not None and u != "V") else ""
            lines.append(f"mu = {_fmt(a['mu'], u, 4)} lies outside the cluster's N = {d['N']} step, "
                         f"{_fmt(-a['margin_mu'], u)}{orel} beyond the {a['nearest_edge']} edge.")
    return "\n".join(lines + _closing_lines(d))


def _closing_lines(d: dict) -> list[str]:
    """Flags, the extrapolation warning and the method's caution, shared by every verdict."""
    out = [f"flag: {f}" for f in d.get("flags", [])]
    if d.get("extrapolated"):
        out.append("warning: this strain lies outside the table; parameters were extrapolated.")
    out.append(f"caution: {d['caution']}.")
    return out


def verdict_text(d: dict) -> str:
    """Plain-language verdict from a :func:`check_strain` dictionary (finite-lattice steps and
    sharp plateaus are described in their own words)."""
    if d.get("verdict_lines"):  # the method wrote its own plain-language lines (Method.strain_point)
        return "\n".join(list(d["verdict_lines"]) + _closing_lines(d))
    if not d["plateau"].get("sharp", True):
        return _verdict_text_step(d)
    u = d["unit"]
    p = d["plateau"]
    frac = d["fraction"]
    name = f"the {frac} solid" if frac not in ("0", "1") else {"0": "the empty state", "1": "the full state"}[frac]
    head = f"at strain {d['strain']:g} ({d['method']})"
    lines = []
    wV = p.get("width_over_V")
    rel = f" ({wV:.2g} V)" if (wV is not None and u != "V") else ""
    if d["verdict"] == "not-reached":
        lines.append(f"{head} the filling {frac} is not reached in the chemical-potential window.")
    elif p["exists"]:
        word = "holds" if d["verdict"] == "holds" else "appears to hold (uncertain: see flags)"
        lines.append(f"{head} {name} {word}; plateau width {_fmt(p['width'], u)}{rel}, "
                     f"mu from {_fmt(p['mu_lo'], u, 4)} to {_fmt(p['mu_hi'], u, 4)} "
                     f"({p['lower_edge']} lower edge, {p['upper_edge']} upper edge).")
    else:
        ff = d["fixed_filling"]
        word = "is gone" if d["verdict"] == "melted" else "appears gone (uncertain: see flags)"
        lines.append(f"{head} {name} {word} (plateau width {_fmt(p['width'], u)}).")
        if ff.get("state") == "phase-separated":
            lines.append(f"at fixed filling {frac} the system phase-separates into {ff['label_below']} "
                         f"(n = {ff['n_below']:.3f}, {ff['fraction_below']:.0%}) and {ff['label_above']} "
                         f"(n = {ff['n_above']:.3f}, {ff['fraction_above']:.0%}) at mu = {_fmt(ff['mu_c'], u, 4)}.")
        elif ff.get("state") not in (None, "not-reached", "unconverged"):
            lines.append(f"at fixed filling {frac} the state is {ff['label']} (homogeneous).")
    m = d.get("melt")
    if m:
        st = m["status"]
        if st.startswith("found"):
            lines.append(f"t/V would need to grow {m['factor']:.3g}x to melt it "
                         f"(t/V {d['parameters']['t_over_V']:.3g} -> {m['t_over_V_at_melt']:.3g}).")
        elif st.startswith("already-melted"):
            lines.append(f"t/V would need to fall to {m['factor']:.3g}x of its value to bring it back.")
        elif st == "beyond-range":
            lines.append(f"it survives even with t/V grown {m['range'][1]:g}x.")
        elif st == "never-present":
            lines.append(f"it does not appear even with t/V reduced to {m['range'][0]:g}x.")
    a = d.get("at_mu")
    if a:
        if not a["converged"]:
            lines.append(f"at mu = {_fmt(a['mu'], u, 4)} the solver did not converge; the state is not classified.")
        elif a["inside_plateau"]:
            lines.append(f"at mu = {_fmt(a['mu'], u, 4)} the state is {a['label']}, "
                         f"{_fmt(a['margin_mu'], u)} inside the {a['nearest_edge']} edge.")
        else:
            dist = f", {_fmt(-a['margin_mu'], u)} from the plateau" if a["margin_mu"] is not None else ""
            lines.append(f"at mu = {_fmt(a['mu'], u, 4)} the state is {a['label']} (n = {a['filling']:.4f}){dist}.")
    return "\n".join(lines + _closing_lines(d))
