r"""Sensitivity of the strain answer to the tabulated parameters.

* :func:`critical_vs_lambda`: every row's interaction (``param="V"``: V and V2 together;
  or ``"t"``, ``"U"``, ``"V2"`` alone) multiplied by :math:`\lambda` over a user range; the
  critical strain :math:`s_c(\lambda)` and the range of :math:`\lambda` for which the
  transition lies inside the table (its ends found by batched multi-section on the criterion at the table
  ends: the transition enters the table where :math:`s_c(\lambda)` equals an end strain).
* :func:`local_derivatives`: :math:`\partial w/\partial p` of the plateau width at one
  strain for every parameter (per-family t and V, V2, U), by central differences, with the
  dimensionless elasticity :math:`(p/w)\,\partial w/\partial p`, so "which one matters most"
  is a comparison of pure numbers.

All points of a step (every lambda times every strain, every perturbed model) are solved in
one batched call; the per-lambda roots (and the lambdas at which the transition crosses a
table end) are found by batched multi-section to ``xtol``.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..classify import Thresholds
from ..model import ConfigError
from .critical import coarse_strains
from ..methods import MethodSpec
from .engine import locate_plateaus, parse_fraction
from .roots import multisection
from .table import StrainTable

__all__ = ["LambdaScan", "critical_vs_lambda", "local_derivatives", "parse_lambdas", "SCALE_PARAMS"]

SCALE_PARAMS = ("V", "t", "U", "V2")


#: Most scale factors of one lambda scan (each is a critical-strain search).
MAX_LAMBDAS = 200


def parse_lambdas(text) -> np.ndarray:
    """``"0.7:1.0:7"`` (start:stop:count) or ``"0.8,0.9,1"`` -> array of positive factors."""
    if isinstance(text, (list, tuple, np.ndarray)):
        lam = np.asarray(text, float)
    else:
        s = str(text).strip()
        if "," in s and any(not x.strip() for x in s.split(",")):
            raise ConfigError(f"lambda: empty item in the comma list {text!r}; give numbers > 0 such as 0.8,0.9,1")
        try:
            if ":" in s:
                a, b, n = s.split(":")
                n = int(n)
                ok = 1 <= n <= MAX_LAMBDAS
                lam = np.linspace(float(a), float(b), n) if ok else None
            else:
                lam = np.array([float(x) for x in s.split(",") if x.strip()])
        except ValueError:
            raise ConfigError(f"lambda: expected start:stop:count (e.g. 0.7:1.0:7) or a comma list of "
                              f"positive numbers, got {text!r}") from None
        if lam is None:
            raise ConfigError(f"lambda: count must be >= 1 and <= {MAX_LAMBDAS} (each factor is a "
                              f"critical-strain search), got {text!r}")
    if lam.size == 0 or not np.all(np.isfinite(lam)) or np.any(lam <= 0):
        raise ConfigError(f"lambda: factors must be finite numbers > 0, got {text!r}")
    if lam.size > MAX_LAMBDAS:
        raise ConfigError(f"lambda: at most {MAX_LAMBDAS} factors (<= {MAX_LAMBDAS}), got {lam.size}")
    return np.unique(lam)


def _scaled(table: StrainTable, param: str, lam: float) -> StrainTable:
    if param == "V":
        return table.scaled(V=lam)
    if param == "t":
        return table.scaled(t=lam)
    if param == "U":
        if table.hardcore:
            raise ConfigError("scale parameter U: the table is hard-core (U = inf); scale V or t instead")
        return table.scaled(U=lam)
    if param == "V2":
        return table.scaled(V2=lam)
    raise ConfigError(f"scale parameter: {param!r} not allowed (allowed: {', '.join(SCALE_PARAMS)})")


@dataclass
class LambdaScan:
    """Critical strain versus a scale factor lambda for one method.

    Attributes
    ----------
    method, param : str
    lambdas : ndarray
    strain_c : ndarray
        NaN where no transition lies inside the table.
    uncertainty : ndarray
        Half-width of the final bracket.
    inside : ndarray of bool
    entry : list of dict
        Lambdas at which the transition crosses a table end: ``{"lambda", "strain" (the end),
        "inside_for": "larger lambda"/"smaller lambda"}``.
    smallest_inside : float or None
        Smallest lambda of the scanned range at which the transition lies inside the table
        (refined to the entry point when it is an interior boundary).
    flags : list of str
    """

    method: str
    param: str
    fraction: str
    lambdas: np.ndarray
    strain_c: np.ndarray
    uncertainty: np.ndarray
    inside: np.ndarray
    entry: list = field(default_factory=list)
    smallest_inside: float | None = None
    span: tuple = ()
    flags: list = field(default_factory=list)

    def to_dict(self) -> dict:
        return {"method": self.method, "param": self.param, "fraction": self.fraction,
                "lambdas": self.lambdas.tolist(),
                "strain_c": [None if not np.isfinite(x) else float(x) for x in self.strain_c],
                "uncertainty": [None if not np.isfinite(x) else float(x) for x in self.uncertainty],
                "inside": [bool(x) for x in self.inside], "entry": self.entry,
                "smallest_inside": self.smallest_inside, "span": list(self.span), "flags": list(self.flags)}

    def summary(self) -> str:
        p = "V, V2" if self.param == "V" else self.param
        if self.smallest_inside is None:
            return (f"{self.method}: with {p} scaled by {self.lambdas.min():g}..{self.lambdas.max():g} no transition "
                    "lies inside the table")
        s = f"{self.method}: the transition lies inside the table from lambda = {self.smallest_inside:.4g} ({p} scaled)"
        ends = [e for e in self.entry]
        if ends:
            s += "; it crosses the table end " + ", ".join(
                f"s = {e['strain']:g} at lambda = {e['lambda']:.4g}" for e in ends)
        return s


def critical_vs_lambda(table: StrainTable, spec="mf", lambdas=(0.7, 0.8, 0.9, 1.0), param: str = "V",
                       fraction="1/3", n_strain: int | None = None, xtol: float | None = None,
                       width_floor: float = 1e-3, thresholds=Thresholds(), **locate_kw) -> LambdaScan:
    """Critical strain (plateau closing) for every scale factor lambda, batched.

    Parameters
    ----------
    table : StrainTable
    spec : str or MethodSpec
    lambdas : array-like or str
        Scale factors (see :func:`parse_lambdas`).
    param : {"V", "t", "U", "V2"}
        What is scaled: "V" scales every interaction V and V2 together.
    xtol : float, optional
        Absolute strain tolerance of the roots (default 1e-3 of the span).

    Returns
    -------
    LambdaScan
    """
    spec = MethodSpec.parse(spec)
    lab, _ = parse_fraction(fraction)
    lam = parse_lambdas(lambdas)
    if param not in SCALE_PARAMS:
        raise ConfigError(f"scale parameter: {param!r} not allowed (allowed: {', '.join(SCALE_PARAMS)})")
    lo, hi = table.span
    xtol = 1e-3 * (hi - lo) if xtol is None else float(xtol)
    S = coarse_strains(table, n_strain)
    tabs = [_scaled(table, param, x) for x in lam]
    kw = dict(locate_kw, thresholds=thresholds, width_floor=width_floor)
    flags: list[str] = []

    def hvals(pairs):
        """pairs of (lambda index, strain) -> criterion (width - floor), one batched solve."""
        models = [tabs[i].model(s) for i, s in pairs]
        r = locate_plateaus(models, lab, spec, **kw)
        for p, (i, s) in enumerate(pairs):
            flags.extend(f"lambda {lam[i]:.4g}, strain {s:.4g}: unconverged: {f}" for f in r.unconverged[p])
        floor = np.array([width_floor * m.scale for m in models])
        return np.where(r.reached, r.width, 0.0) - floor

    H = hvals([(i, s) for i in range(len(lam)) for s in S]).reshape(len(lam), len(S))
    brackets, owner = [], []
    for i in range(len(lam)):
        for k in range(len(S) - 1):
            if (H[i, k] > 0) != (H[i, k + 1] > 0):
                brackets.append((S[k], S[k + 1], H[i, k], H[i, k + 1]))
                owner.append(i)
                break
    sc = np.full(len(lam), np.nan)
    unc = np.full(len(lam), np.nan)
    if brackets:
        narrowed, _ = multisection(lambda pts: hvals([(owner[j], x) for j, x in pts]), brackets, sections=15,
                                   steps=6, xtol=2 * xtol)
        for j, (a, b, _, _) in enumerate(narrowed):
            sc[owner[j]] = 0.5 * (a + b)
            unc[owner[j]] = 0.5 * (b - a)
    inside = np.isfinite(sc)
    # where does the transition cross the table ends? the lambda at which the criterion at an
    # end strain changes sign (batched multi-section in lambda, all crossings at once)
    entry = []
    ends_br, ends_own = [], []
    for end_k, s_end in ((0, lo), (len(S) - 1, hi)):
        g = H[:, end_k]
        for i in range(len(lam) - 1):
            if (g[i] > 0) != (g[i + 1] > 0):
                ends_br.append((lam[i], lam[i + 1], g[i], g[i + 1]))
                ends_own.append((i, s_end))
    if ends_br:
        def hv_lambda(pts):
            models = [_scaled(table, param, x).model(ends_own[j][1]) for j, x in pts]
            r = locate_plateaus(models, lab, spec, **kw)
            floor = np.array([width_floor * m.scale for m in models])
            return np.where(r.reached, r.width, 0.0) - floor

        narrowed, _ = multisection(hv_lambda, ends_br, sections=15, steps=3,
                                   xtol=1e-3 * float(np.min(lam)))
        for (a_, b_, _, _), (i, s_end) in zip(narrowed, ends_own):
            root = 0.5 * (a_ + b_)
            if inside[i + 1] and not inside[i]:
                side = "larger lambda"
            elif inside[i] and not inside[i + 1]:
                side = "smaller lambda"
            else:
                side = "both sides (several roots)"
            entry.append({"lambda": float(root), "uncertainty": float(0.5 * (b_ - a_)), "strain": float(s_end),
                          "between": [float(lam[i]), float(lam[i + 1])], "inside_for": side})
    smallest = None
    if inside.any():
        i0 = int(np.argmax(inside))
        smallest = float(lam[i0])
        if i0 > 0:  # refine to the entry point between the last outside and the first inside lambda
            cand = [e["lambda"] for e in entry if e["inside_for"] == "larger lambda"
                    and lam[i0 - 1] <= e["lambda"] <= lam[i0]]
            if cand:
                smallest = float(min(cand))
    return LambdaScan(method=spec.name, param=param, fraction=lab, lambdas=lam, strain_c=sc, uncertainty=unc,
                      inside=inside, entry=entry, smallest_inside=smallest, span=(lo, hi), flags=flags)


def local_derivatives(table: StrainTable, strain: float, spec="mf", fraction="1/3", rel_step: float = 0.02,
                      thresholds=Thresholds(), extrapolate=False, **locate_kw) -> dict:
    """Derivatives of the plateau width with respect to every model parameter at one strain.

    Central differences with step ``rel_step`` times the parameter (times the largest V for a
    parameter that is zero), all perturbed models in one batched solve.

    Returns
    -------
    dict
        ``width`` (table unit), ``derivatives``: list of ``{"param", "value", "dW_dp",
        "elasticity"}`` sorted by ``|elasticity|`` (largest first), ``most_important``, ``flags``.
    """
    spec = MethodSpec.parse(spec)
    lab, _ = parse_fraction(fraction)
    if not (np.isfinite(rel_step) and 0 < rel_step < 0.5):
        raise ConfigError(f"rel_step: must be between 0 and 0.5, got {rel_step!r}")
    m0 = table.model(strain, extrapolate=extrapolate)
    fams = m0.families
    vref = max(abs(v) for v in m0.V) or max(m0.t) or 1.0
    specs = []  # (name, value, builder)
    for k, f in enumerate(fams):
        specs.append((f"t_{f}", m0.t[k], lambda m, x, k=k: m.replace(t=tuple(x if j == k else v for j, v in enumerate(m.t)))))
    for k, f in enumerate(fams):
        specs.append((f"V_{f}", m0.V[k], lambda m, x, k=k: m.replace(V=tuple(x if j == k else v for j, v in enumerate(m.V)))))
    specs.append(("V2", m0.V2, lambda m, x: m.replace(V2=x)))
    if not m0.hardcore:
        specs.append(("U", m0.U, lambda m, x: m.replace(U=x)))
    models = [m0]
    steps = []
    for name, val, build in specs:
        d = rel_step * (abs(val) if val != 0 else vref)
        if name.startswith("t_") and val - d < 0:
            d = max(val, 1e-12) * 0.5 if val > 0 else d
        lo_v = val - d if not (name.startswith("t_") and val == 0) else val
        models += [build(m0, lo_v), build(m0, val + d)]
        steps.append((val + d) - lo_v)
    r = locate_plateaus(models, lab, spec, thresholds=thresholds, **locate_kw)
    W = np.where(r.reached, r.width, 0.0)
    w0 = float(W[0])
    out = []
    for j, (name, val, _) in enumerate(specs):
        dw = (W[2 + 2 * j] - W[1 + 2 * j]) / steps[j]
        el = (val / w0) * dw if (w0 > 0 and val != 0) else None
        out.append({"param": name, "value": float(val), "dW_dp": float(dw),
                    "elasticity": None if el is None else float(el)})
    out.sort(key=lambda d: -abs(d["elasticity"]) if d["elasticity"] is not None else 0.0)
    flags = [f"unconverged: {f}" for p in range(r.size) for f in r.unconverged[p]]
    most = out[0]["param"] if out and out[0]["elasticity"] is not None else None
    return {"strain": float(strain), "method": spec.name, "fraction": lab, "unit": table.unit, "width": w0,
            "rel_step": rel_step, "derivatives": out, "most_important": most, "flags": flags,
            "note": ("elasticity = (p / w) dw/dp: the relative change of the plateau width per relative change "
                     "of the parameter; derivatives of one bond family break the mirror symmetry of d2/d3")}
