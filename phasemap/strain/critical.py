r"""Critical strain: where the commensurate plateau closes along the interpolated parameter path.

Along the PCHIP path :math:`s \mapsto` model(s) of a :class:`~phasemap.strain.table.StrainTable`
the *criterion function*

* ``criterion="width"``: :math:`h(s) = w(s) - w_{\rm floor}` with :math:`w` the plateau width
  (the plateau "closes" where it becomes narrower than ``width_floor``, default 1e-3 V), or
* ``criterion="mu"``: :math:`h(s)` = signed distance of a fixed chemical potential from the
  plateau edges (> 0 inside): the strain at which that chemical potential leaves the plateau,

is sampled on a coarse strain grid in one batched solve, every sign change is bracketed, and
the root is found with :func:`scipy.optimize.brentq`. When :math:`h` keeps its sign inside
the table, the result says so and gives the closest approach (the minimum of :math:`|h|`).

Each method (``mf``, ``cmf:<cluster>``) gives its own critical strain; :func:`critical_band`
spreads them into a band. Mean-field methods overestimate the solid, so their critical
strains are bound-like estimates (the plateau closes at smaller strain in reality when t/V
grows with strain).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..classify import Thresholds
from ..model import ConfigError
from ..methods import MethodSpec
from .engine import locate_plateaus, mu_margin, parse_fraction
from .roots import narrowed_brentq
from .table import StrainTable

__all__ = ["CriticalResult", "critical_strain", "critical_band", "criterion_values", "coarse_strains"]


@dataclass
class CriticalResult:
    """Critical strain of one method.

    Attributes
    ----------
    method : str
    status : {"found", "none", "uncertain"}
        "none": no sign change of the criterion inside the table.
    strain_c : float or None
        The first root (lowest strain) of the criterion.
    roots : list of float
        Every root inside the table (a plateau can close and reopen).
    bracket : (float, float) or None
        Coarse bracket of ``strain_c``.
    xtol : float
        Absolute strain tolerance of brentq.
    direction : str
        "closes with increasing strain" or "opens with increasing strain".
    closest : dict
        ``{"strain", "value"}``: smallest criterion value on the path (closest approach) when
        there is no root, in the table unit.
    strains, values : ndarray
        The coarse path samples of the criterion.
    t_over_V_c : float or None
        Controlling ratio at ``strain_c``.
    interpolation_uncertainty : float or None
        Strain uncertainty from the table's row spacing (leave-one-out change of t/V near
        ``strain_c`` divided by d(t/V)/ds).
    flags : list of str
    """

    method: str
    fraction: str
    criterion: str
    status: str
    strain_c: float | None
    roots: list
    bracket: tuple | None
    xtol: float
    direction: str
    closest: dict
    strains: np.ndarray
    values: np.ndarray
    unit: str
    mu: float | None = None
    t_over_V_c: float | None = None
    interpolation_uncertainty: float | None = None
    evaluations: int = 0
    extrapolation_hint: float | None = None
    flags: list = field(default_factory=list)

    @property
    def in_band(self) -> bool:
        """A sharp critical strain was found (it enters the band across methods)."""
        return self.strain_c is not None

    def to_dict(self) -> dict:
        return {
            "method": self.method, "fraction": self.fraction, "criterion": self.criterion, "status": self.status,
            "strain_c": self.strain_c, "roots": list(self.roots), "bracket": list(self.bracket) if self.bracket else None,
            "xtol": self.xtol, "direction": self.direction, "closest": self.closest, "unit": self.unit,
            "mu": self.mu, "t_over_V_c": self.t_over_V_c, "interpolation_uncertainty": self.interpolation_uncertainty,
            "evaluations": self.evaluations, "extrapolation_hint": self.extrapolation_hint,
            "strains": np.asarray(self.strains).tolist(), "values": np.asarray(self.values).tolist(),
            "flags": list(self.flags),
        }

    def summary(self) -> str:
        if self.status in ("found", "uncertain") and self.strain_c is not None:
            s = (f"{self.method}: critical strain {self.strain_c:.5g} (+-{self.xtol:.1g} root-finding"
                 + (f", +-{self.interpolation_uncertainty:.1g} from the row spacing" if self.interpolation_uncertainty else "")
                 + f"); the {self.fraction} plateau {self.direction.split(' with')[0]} there")
            if self.t_over_V_c is not None:
                s += f" (t/V = {self.t_over_V_c:.4g})"
            if len(self.roots) > 1:
                s += f"; further roots at {', '.join(f'{r:.5g}' for r in self.roots[1:])}"
            if self.status == "uncertain":
                s += " [uncertain: unconverged points, see flags]"
            return s
        c = self.closest
        what = "plateau width" if self.criterion == "width" else "distance of mu from the plateau edge"
        s = (f"{self.method}: no transition inside the table; closest approach at strain {c['strain']:.4g} "
             f"({what} {c['value']:.4g} {self.unit})")
        if self.extrapolation_hint is not None:
            s += f"; a linear extrapolation of the last rows would put it near strain {self.extrapolation_hint:.3g} (outside the table, not a result)"
        return s


def coarse_strains(table: StrainTable, n: int | None = None) -> np.ndarray:
    """Default coarse path: the rows and the midpoints between them (at least 9 points)."""
    lo, hi = table.span
    if n is None:
        n = max(9, 2 * table.n_rows - 1)
    if n < 2:
        raise ConfigError(f"n_strain: need at least 2 strains, got {n}")
    return np.linspace(lo, hi, int(n))


def criterion_values(table: StrainTable, strains, spec=MethodSpec(), fraction="1/3", criterion="width",
                     mu: float | None = None, width_floor: float = 1e-3, extrapolate: bool = False,
                     models=None, **locate_kw):
    """Criterion :math:`h(s)` at ``strains`` (one batched solve); returns ``(h, PlateauResult, models)``.

    ``h`` is in the table unit: width minus floor (``criterion="width"``) or the signed
    margin of ``mu`` (``criterion="mu"``). Non-converged answers are reported in the result's flags.
    """
    spec = MethodSpec.parse(spec)
    if criterion not in ("width", "mu"):
        raise ConfigError(f"criterion: {criterion!r} not allowed (allowed: width, mu)")
    if criterion == "mu" and (mu is None or not math.isfinite(float(mu))):
        raise ConfigError("criterion 'mu': needs a finite chemical potential mu (table unit)")
    strains = np.atleast_1d(np.asarray(strains, float))
    if models is None:
        table.check_range(strains, extrapolate)
        models = table.models(strains, extrapolate=extrapolate)
    res = locate_plateaus(models, fraction, spec, width_floor=width_floor, **locate_kw)
    if criterion == "width":
        floor = np.array([width_floor * m.scale for m in models])
        h = np.where(res.reached, res.width, 0.0) - floor
    else:
        h = np.array([mu_margin(res, p, float(mu)) for p in range(res.size)])
    return h, res, models


def critical_strain(table: StrainTable, spec="mf", fraction="1/3", criterion="width", mu: float | None = None,
                    strains=None, n_strain: int | None = None, xtol: float | None = None,
                    width_floor: float = 1e-3, coarse=None, thresholds=Thresholds(), sections: int = 15,
                    **locate_kw) -> CriticalResult:
    """Critical strain of one method by brentq on the criterion along the interpolated path.

    Parameters
    ----------
    table : StrainTable
    spec : str or MethodSpec
    fraction : str, default "1/3"
    criterion : {"width", "mu"}
        Plateau closing (width) or a fixed chemical potential ``mu`` leaving the plateau.
    strains : array, optional
        Coarse path (default :func:`coarse_strains`).
    xtol : float, optional
        Absolute strain tolerance (default 5e-4 of the table span).
    coarse : (strains, values, PlateauResult), optional
        Precomputed coarse samples (from a sweep), to avoid solving them again.
    sections : int, default 15
        Batched multi-section points narrowing each coarse bracket before brentq
        (:func:`phasemap.strain.roots.narrowed_brentq`); 0: brentq alone (the sweep passes the
        method's ``root_sections``). Every root-finding solve is hinted with the plateau edges
        at the nearest strains already solved on either side of it (``locate_plateaus`` ``hint``,
        ``hint_pad`` = the method's ``root_hint_pad`` grid points around it, 12 by default).
    **locate_kw
        Passed to :func:`~phasemap.strain.engine.locate_plateaus` (tol, n_mu, ...).

    Returns
    -------
    CriticalResult
    """
    spec = MethodSpec.parse(spec)
    lab, _ = parse_fraction(fraction)
    lo, hi = table.span
    if xtol is None:
        xtol = 5e-4 * (hi - lo)
    if not (np.isfinite(xtol) and xtol > 0):
        raise ConfigError(f"xtol: must be a number > 0, got {xtol!r}")
    kw = dict(locate_kw, thresholds=thresholds)
    if coarse is not None:
        S, H, res = coarse
        S, H = np.asarray(S, float), np.asarray(H, float)
    else:
        S = coarse_strains(table, n_strain) if strains is None else np.asarray(strains, float)
        if S.ndim != 1 or len(S) < 2 or np.any(np.diff(S) <= 0):
            raise ConfigError("strains: need at least 2 strictly increasing strains")
        H, res, _ = criterion_values(table, S, spec, lab, criterion, mu, width_floor, **kw)
    flags = []
    for p in range(res.size):
        flags += [f"strain {S[p]:.4g}: unconverged: {f}" for f in res.unconverged[p]]
    count = [len(S)]

    # every strain solved so far (coarse path, then the root finder's) with its edges
    seen = {float(x): (lo_, hi_) for x, lo_, hi_ in zip(S, res.mu_lo, res.mu_hi)}

    def hint(x):
        # the plateau (or crossing) at the nearest solved strains on either side of x bounds where to look
        xs_ = np.array(sorted(seen))
        i = int(np.clip(np.searchsorted(xs_, x) - 1, 0, len(xs_) - 2))
        near = [seen[float(v)] for v in xs_[i:i + 2]]
        lo = [v[0] for v in near if np.isfinite(v[0])]
        hi = [v[1] for v in near if np.isfinite(v[1])]
        return (min(lo), max(hi)) if lo and hi else (np.nan, np.nan)

    def hv(xs):
        h = np.array([hint(x) for x in xs], float)
        if np.isfinite(h).all(axis=1).any() and criterion == "width":
            kw["hint"] = h
            kw.setdefault("hint_pad", getattr(spec.impl, "root_hint_pad", 12))
        v, r, _ = criterion_values(table, list(xs), spec, lab, criterion, mu, width_floor, **kw)
        kw.pop("hint", None)
        for p in range(r.size):
            flags.extend(f"strain {xs[p]:.6g}: unconverged: {f}" for f in r.unconverged[p])
            seen[float(xs[p])] = (r.mu_lo[p], r.mu_hi[p])
        return v

    def h(s):
        return float(hv([s])[0])

    pos = H > 0
    finite = np.isfinite(H)
    roots, brackets = [], []
    for i in range(len(S) - 1):
        if finite[i] and finite[i + 1] and pos[i] != pos[i + 1]:
            a, b = S[i], S[i + 1]
            r, _, n_ev = narrowed_brentq(h, hv, a, b, H[i], H[i + 1], xtol, sections=max(int(sections), 1),
                                         steps=1 if sections > 0 else 0)
            count[0] += n_ev
            roots.append(float(r))
            brackets.append((float(a), float(b)))
    absH = np.where(finite, np.abs(H), np.inf)
    k = int(np.argmin(np.where(finite, H, np.inf))) if criterion == "width" else int(np.argmin(absH))
    closest = {"strain": float(S[k]), "value": float(H[k] + (width_floor * res_scale(table, S[k]) if criterion == "width" else 0.0)),
               "on": "coarse path"}
    if roots:
        i0 = next(i for i in range(len(S) - 1) if finite[i] and finite[i + 1] and pos[i] != pos[i + 1])
        direction = "closes with increasing strain" if pos[i0] else "opens with increasing strain"
        if criterion == "mu":
            direction = ("leaves the plateau with increasing strain" if pos[i0]
                         else "enters the plateau with increasing strain")
        sc = roots[0]
        status = "uncertain" if flags else "found"
        tv = float(table.ratio(sc)[0])
        unc = _interp_uncertainty(table, sc)
        hint = None
    else:
        direction, sc, status, tv, unc = "", None, ("uncertain" if flags else "none"), None, None
        hint = _extrapolate_hint(S, H) if criterion == "width" else None
    return CriticalResult(method=spec.name, fraction=lab, criterion=criterion, status=status, strain_c=sc,
                          roots=roots, bracket=brackets[0] if brackets else None, xtol=float(xtol),
                          direction=direction, closest=closest, strains=S, values=H, unit=table.unit,
                          mu=None if mu is None else float(mu), t_over_V_c=tv, interpolation_uncertainty=unc,
                          evaluations=count[0], extrapolation_hint=hint, flags=flags)


def res_scale(table: StrainTable, s: float) -> float:
    return table.model(s).scale


def _extrapolate_hint(S, H):
    """Linear extrapolation of the criterion through the last two samples (a hint, not a result)."""
    if len(S) < 2 or not (np.isfinite(H[-1]) and np.isfinite(H[-2])):
        return None
    slope = (H[-1] - H[-2]) / (S[-1] - S[-2])
    if slope >= 0 or H[-1] <= 0:
        return None
    return float(S[-1] - H[-1] / slope)


def _interp_uncertainty(table: StrainTable, s: float) -> float | None:
    """Strain uncertainty of a root from the row spacing: LOO change of t/V near s over d(t/V)/ds."""
    if table.n_rows < 3:
        return None
    loo = table.leave_one_out()["t/V"]
    k = int(np.argmin(np.abs(table.strain - s)))
    neigh = loo[max(0, k - 1): k + 2]
    rel = float(neigh.max()) if len(neigh) else 0.0
    ds = 1e-3 * (table.span[1] - table.span[0])
    a, b = max(table.span[0], s - ds), min(table.span[1], s + ds)
    r = table.ratio([a, s, b])
    if not np.all(np.isfinite(r)):
        return None
    slope = (r[2] - r[0]) / (b - a)
    if slope == 0 or not np.isfinite(slope):
        return None
    return float(rel * r[1] / abs(slope))


def critical_band(results) -> dict:
    """Spread of the critical strains of several methods.

    Returns
    -------
    dict
        ``lo``, ``hi`` (band of the found critical strains), ``methods`` (name -> strain or
        None), ``missing`` (methods without a transition in the table), ``text``.
    """
    found = {r.method: r.strain_c for r in results if r.strain_c is not None}
    missing = [r.method for r in results if r.strain_c is None and getattr(r, "reason", "") != "closed"]
    closed = [r.method for r in results if r.strain_c is None and getattr(r, "reason", "") == "closed"]
    if found:
        lo, hi = min(found.values()), max(found.values())
        txt = (f"critical strain band {lo:.4g} .. {hi:.4g} over {', '.join(found)}" if len(found) > 1
               else f"critical strain {lo:.4g} ({next(iter(found))} only)")
    else:
        lo = hi = None
        txt = "no method finds a transition inside the table"
    if missing:
        txt += f"; no transition inside the table for {', '.join(missing)}"
    if closed:  # statistical methods (qmc): closed at every strain where the width was determined
        txt += f"; {', '.join(closed)}: plateau already closed at the first strain with a determined width"
    return {"lo": lo, "hi": hi, "methods": {r.method: r.strain_c for r in results}, "missing": missing + closed,
            "text": txt}
