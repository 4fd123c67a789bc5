r"""Quantum Monte Carlo in the strain workflow: plateau edges on several sizes, extrapolated.

Per strain and per L x L torus (default L = 6 and 9, both containing K and accepting V2):

* **edges** from n(mu) at low temperature: the lower edge is the mu at which the mean
  particle number crosses N - 1/2 (N = f L^2), the upper edge where it crosses N + 1/2. At
  T -> 0 these are the canonical mu-(N) = E0(N) - E0(N-1) and mu+(N) = E0(N+1) - E0(N) of the
  torus (the definition of exact diagonalization). Each edge is bracketed and bisected in mu
  (``rounds`` halvings of the bracket c -+ ``span`` x V around the t = 0 plateau centre c), then
  interpolated linearly between the last two measured fillings; its one-sigma error combines
  sigma_n / (dn/dmu) from that pair with the bracket width / sqrt(12);
* **order at filling f**: one longer run at the middle of the two edges gives S(K)/N, the
  Binder ratio and the stiffness with their errors;
* **L -> infinity**: edges and width are extrapolated linearly in 1/N (a gapped solid keeps
  a finite width, a compressible phase has a width ~ 1/(kappa N)), S(K)/N and the stiffness
  in 1/L; weighted fits with the one-sigma errors (:mod:`phasemap.qmc.scaling`).

Critical strain: the root of the extrapolated width along the strain path (linear between
computed strains), its statistical error from resampling every size's widths within their
errors; the finite-size uncertainty is the difference to the root obtained with the other
extrapolation form (in 1/L instead of 1/N); when the two differ by more than twice the
combined statistical errors the answer is the bracket between them. The Binder-ratio
crossing of the sizes along the strain is reported beside it (where the sqrt3 order of the
filling-f state disappears). Runs that are not decorrelated are flagged; an edge or order
value that depends on one is NaN.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..model import ConfigError
from .critical import CriticalResult

__all__ = ["QMC_STRAIN_DEFAULTS", "qmc_setup", "qmc_plateaus", "qmc_critical", "QMCStep", "QMCCritical", "strain_settings"]

#: Defaults of the strain workflow (chosen so that ``strain-sweep demo --methods qmc`` fits in
#: 30 min on 2 cores; ask for more with ``--qmc sizes=6+9+12 --qmc sweeps=5000`` ...). 1500 sweeps
#: in 12 bins = 125 sweeps per bin, so a filling with tau_int up to ~15 sweeps counts as decorrelated
#: (500 sweeps left most demo edges NaN: tau_int of the filling ~5-6 sweeps next to the edges on 6x6
#: and 9x9, measured); 7 rounds bisect mu_c -+ 1.5 V to 3 V / 128 ~ 0.023 V.
QMC_STRAIN_DEFAULTS = {"sizes": (6, 9), "T_over_V": 0.05, "sweeps": 1500, "order_sweeps": 3000, "bins": 12,
                       "rounds": 7, "span": 1.5, "every": 2, "refine": True, "retry": 4, "seed": 0, "workers": None, "T": None,
                       "thermalization": None}
_KEYS = set(QMC_STRAIN_DEFAULTS) | {"size", "cluster", "chains"}


def _sizes(v):
    if isinstance(v, str):
        try:
            v = [int(x) for x in v.replace("+", ",").split(",") if x.strip()]
        except ValueError:
            raise ConfigError(f"qmc sizes: expected L values like 6+9+12, got {v!r}") from None
    v = sorted({int(x) for x in (v if isinstance(v, (list, tuple)) else [v])})
    return tuple(v)


def strain_settings(spec) -> dict:
    """Strain-workflow settings of a qmc spec (defaults + the spec's options), validated."""
    o = dict(spec.option_dict)
    bad = sorted(set(o) - _KEYS)
    if bad:
        raise ConfigError(f"method {spec.name!r}: option(s) {bad} not used by the qmc strain workflow; allowed: "
                          f"{', '.join(sorted(_KEYS))}")
    s = dict(QMC_STRAIN_DEFAULTS)
    if o.get("size") is not None:
        L1, L2 = o.pop("size")
        if L1 != L2:
            raise ConfigError(f"method {spec.name!r}: the strain workflow uses L x L tori, got {L1}x{L2}")
        o["sizes"] = (L1,)
    if o.get("cluster") is not None:
        o["sizes"] = _sizes(o.pop("cluster"))
    s.update({k: v for k, v in o.items() if v is not None and k != "chains"})
    s["sizes"] = _sizes(s["sizes"])
    for k in ("sweeps", "order_sweeps", "bins", "rounds", "every", "retry"):
        if not (isinstance(s[k], (int, np.integer)) and s[k] >= 1):
            raise ConfigError(f"qmc {k}: expected an integer >= 1, got {s[k]!r}")
    if s["sweeps"] < 2 * s["bins"] or s["order_sweeps"] < 2 * s["bins"]:
        raise ConfigError(f"qmc sweeps: need at least 2 sweeps per bin (bins = {s['bins']}), got {s['sweeps']}")
    if s["refine"] not in (True, False, 0, 1):
        raise ConfigError(f"qmc refine: expected true/false (or 1/0), got {s['refine']!r}")
    s["refine"] = bool(s["refine"])
    if not (float(s["T_over_V"]) > 0):
        raise ConfigError(f"qmc T_over_V: must be > 0, got {s['T_over_V']!r}")
    return s


def qmc_setup(spec, models, fraction="1/3"):
    """Refuse before any sampling: L multiple of 3 (K point), filling an integer number of bosons
    on every torus, hard-core, t >= 0, bonds not doubled (V2 on small tori)."""
    from ..qmc.geometry import torus
    from .engine import parse_fraction

    s = strain_settings(spec)
    lab, f = parse_fraction(fraction)
    if not models:
        raise ConfigError("strain models: no parameter points")
    if models[0].lattice != "triangular":
        raise ConfigError(f"method {spec.name!r}: the qmc strain plateau measures sqrt3 x sqrt3 order at K "
                          "(triangular lattice only)")
    if len(s["sizes"]) < 2:
        raise ConfigError(f"method {spec.name!r}: finite-size scaling needs at least two sizes, got {s['sizes']} "
                          "(e.g. qmc:6+9)")
    for L in s["sizes"]:
        if L % 3:
            raise ConfigError(f"qmc sizes: L = {L} has no K point; use multiples of 3 (6, 9, 12, ...)")
        n = f * L * L
        if abs(n - round(n)) > 1e-9:
            raise ConfigError(f"fraction {lab}: not an integer number of bosons on {L}x{L}")
        for m in (models[0], models[-1]):
            torus(m, size=(L, L))
    return s


@dataclass
class QMCStep:
    """Everything the qmc strain step measured (per strain ``p`` and size ``L``)."""

    sizes: tuple
    fraction: float
    T: np.ndarray               # (P,)
    computed: np.ndarray        # (P,) bool
    per_size: dict              # key -> (P, nL) value / error arrays: "mu_lo", "mu_lo_error", ...
    extrap: dict                # key -> (P,) value / error: "mu_lo", "mu_lo_error", "width", ... (1/N)
    extrap_L: dict              # width extrapolated in 1/L (finite-size cross-check)
    flags: list
    settings: dict
    jump_lo: np.ndarray = None
    jump_hi: np.ndarray = None
    runs: int = 0
    retried: int = 0

    def __post_init__(self):
        P = len(self.T)
        self.jump_lo = np.full(P, np.nan) if self.jump_lo is None else self.jump_lo
        self.jump_hi = np.full(P, np.nan) if self.jump_hi is None else self.jump_hi


def _centre(m):
    vbar = float(np.mean(m.V))
    return 1.5 * vbar + 3.0 * m.V2, max(m.V)


def _edge_from_pair(m1, n1, e1, m2, n2, e2, target):
    """Linear interpolation of the target filling between two measured points; (mu, sigma_mu)."""
    if not (np.isfinite(n1) and np.isfinite(n2)) or n2 == n1:
        return 0.5 * (m1 + m2), math.nan
    x = m1 + (target - n1) * (m2 - m1) / (n2 - n1)
    slope = (n2 - n1) / (m2 - m1)
    # d x / d n1 = -(m2 - x)/(n2 - n1) ; d x / d n2 = -(x - m1)/(n2 - n1)
    s = math.hypot((m2 - x) * e1, (x - m1) * e2) / abs(n2 - n1)
    return float(min(max(x, m1), m2)), float(s if slope else math.nan)


_PER_KEYS = ("mu_lo", "mu_lo_error", "mu_hi", "mu_hi_error", "width", "width_error", "resolution", "S(K)/N",
             "S(K)/N_error", "binder", "binder_error", "stiffness", "stiffness_error", "filling", "filling_error")


def qmc_plateaus(models, spec, fraction="1/3", progress=None) -> QMCStep:
    """Edges, width and order at ``fraction`` on every size for every model (module notes).

    Every ``every``-th strain (and the last) is measured first; with ``refine`` (default) the
    strains skipped inside the first sign change of the extrapolated width are measured too, so
    the critical strain is interpolated between neighbouring strains of the path."""
    from .engine import parse_fraction

    s = strain_settings(spec)
    lab, f = parse_fraction(fraction)
    sizes = s["sizes"]
    P, nL = len(models), len(sizes)
    every = int(s["every"])
    computed = np.zeros(P, bool)
    computed[::every] = True
    computed[-1] = True
    T = np.array([float(s["T"]) if s["T"] is not None else float(s["T_over_V"]) * max(m.V) for m in models])
    per = {k: np.full((P, nL), np.nan) for k in _PER_KEYS}
    counter, flags = [0, 0], []  # runs, repeated runs
    _measure(models, np.flatnonzero(computed), s, f, T, per, counter, flags)
    ext, extL = _extrapolations(per, sizes)
    if s["refine"] and every > 1:
        pc = np.flatnonzero(computed)
        _, i, j = _significant_change(pc, ext["width"][pc], ext["width_error"][pc], 2.0)
        new = [q for q in range(pc[i] + 1, pc[j]) if not computed[q]] if i is not None else []
        if new:
            _measure(models, np.array(new), s, f, T, per, counter, flags)
            computed[new] = True
            ext, extL = _extrapolations(per, sizes)
    flags.sort(key=lambda x: int(x.split("#")[1].split(",")[0]) if x.startswith("strain #") else -1)
    return QMCStep(tuple(sizes), f, T, computed, per, ext, extL, flags, s, runs=counter[0], retried=counter[1])


def _measure(models, pidx, s, f, T, per, counter, flags):
    """Bisect both edges and run the order measurement for the strains ``pidx`` (fills ``per``)."""
    from ..qmc.scaling import job_seed, run_many

    sizes = s["sizes"]
    nL = len(sizes)

    def kw(p, L, sweeps):
        counter[0] += 1
        return {"size": (L, L), "T": float(T[p]), "sweeps": int(sweeps), "bins": int(s["bins"]),
                "thermalization": s["thermalization"] or max(int(sweeps) // 2, 100), "seed": job_seed(s["seed"], counter[0])}

    def run(points, sweeps, edge=True):
        """points: list of (p, a, mu) -> list of QMCResult (one process pool for all). A run that did
        not decorrelate (edge runs: the filling; order runs: any observable) is repeated once with
        ``retry`` x the sweeps (fresh seed; all repeats in one pool) and replaced by the repeat."""
        jobs = [(models[p].replace(mu=float(mu)), kw(p, sizes[a], sweeps)) for p, a, mu in points]
        res = run_many(jobs, s["workers"])
        bad = [i for i, r in enumerate(res) if not (r.filling.decorrelated if edge else r.decorrelated)]
        if bad and int(s["retry"]) > 1:
            again = run_many([(jobs[i][0], kw(points[i][0], sizes[points[i][1]], int(s["retry"]) * sweeps))
                              for i in bad], s["workers"])
            for i, r in zip(bad, again):
                res[i] = r
            counter[1] += len(bad)
        return res

    # -- one bracket [c - span V, c + span V] around the t = 0 plateau centre for both edges
    idx = [(int(p), a) for p in pidx for a in range(nL)]
    target = {}
    br = {}
    for p, a in idx:
        c, v = _centre(models[p])
        Ns = sizes[a] ** 2
        N = round(f * Ns)
        target[(p, a, 0)] = (N - 0.5) / Ns
        target[(p, a, 1)] = (N + 0.5) / Ns
        br[(p, a, 0)] = [c - s["span"] * v, c + s["span"] * v]
        br[(p, a, 1)] = [c - s["span"] * v, c + s["span"] * v]
    meas = {}  # (p, a, mu) -> QMCResult
    pts = sorted({(p, a, mu) for (p, a, e), b in br.items() for mu in b})
    for (p, a, mu), r in zip(pts, run(pts, s["sweeps"])):
        meas[(p, a, mu)] = r
    n_of = lambda p, a, mu: meas[(p, a, mu)].filling.value  # noqa: E731
    for key, (lo, hi) in br.items():
        p, a, e = key
        if not (n_of(p, a, lo) <= target[key] <= n_of(p, a, hi)):
            flags.append(f"strain #{p}, L={sizes[a]}: {'lower' if e == 0 else 'upper'} edge not bracketed by "
                         f"mu in [{lo:.4g}, {hi:.4g}] (n = {n_of(p, a, lo):.4f} .. {n_of(p, a, hi):.4f})")
    for _ in range(int(s["rounds"])):
        mids = {key: 0.5 * sum(b) for key, b in br.items()}
        pts = sorted({(k[0], k[1], m) for k, m in mids.items() if (k[0], k[1], m) not in meas})
        for (p, a, mu), r in zip(pts, run(pts, s["sweeps"])):
            meas[(p, a, mu)] = r
        for key, m in mids.items():
            p, a, _ = key
            if n_of(p, a, m) < target[key]:
                br[key][0] = m
            else:
                br[key][1] = m
    for key, (lo, hi) in br.items():
        p, a, e = key
        r1, r2 = meas[(p, a, lo)], meas[(p, a, hi)]
        x, sx = _edge_from_pair(lo, r1.filling.value, r1.filling.error, hi, r2.filling.value, r2.filling.error,
                                target[key])
        if not (r1.filling.decorrelated and r2.filling.decorrelated):  # the edge uses the filling only
            flags.append(f"strain #{p}, L={sizes[a]}: {'lower' if e == 0 else 'upper'} edge from a filling that is "
                         "not decorrelated: not reported")
            x = sx = math.nan
        name = "mu_lo" if e == 0 else "mu_hi"
        per[name][p, a] = x
        # one sigma: the statistical error of the interpolation combined with the bracket resolution
        # (the edge lies somewhere in [lo, hi]: uniform, (hi - lo)/sqrt(12)); a step whose slope is not
        # resolved (fillings without fluctuations) then still has an honest error
        per[f"{name}_error"][p, a] = math.hypot(sx if np.isfinite(sx) else 0.0, (hi - lo) / math.sqrt(12.0))
        per["resolution"][p, a] = hi - lo
    for p, a in idx:
        per["width"][p, a] = per["mu_hi"][p, a] - per["mu_lo"][p, a]
        per["width_error"][p, a] = math.hypot(per["mu_lo_error"][p, a], per["mu_hi_error"][p, a])
    # -- order at filling f: one longer run per size at the middle of the edges
    pts = []
    for p, a in idx:
        mid = 0.5 * (per["mu_lo"][p, a] + per["mu_hi"][p, a])
        if not np.isfinite(mid):
            mid = _centre(models[p])[0]
        pts.append((p, a, float(mid)))
    for (p, a, mu), r in zip(pts, run(pts, s["order_sweeps"], edge=False)):
        if not r.decorrelated:
            flags.append(f"strain #{p}, L={sizes[a]}: order run at mu = {mu:.4g} not decorrelated "
                         f"({'; '.join(r.flags)}): not reported")
            continue
        for k in ("S(K)/N", "binder", "stiffness", "filling"):
            if k in r.estimates:
                per[k][p, a], per[f"{k}_error"][p, a] = r.estimates[k].value, r.estimates[k].error


def _extrapolations(per, sizes):
    """L -> inf: edges and width linear in 1/N, S(K)/N and stiffness in 1/L; the width also in 1/L."""
    from ..qmc.scaling import extrapolate

    P = per["width"].shape[0]
    Ns = np.array([L * L for L in sizes], float)
    Ls = np.array(sizes, float)
    ext, extL = {}, {}
    for k, x, power in (("mu_lo", Ns, 1.0), ("mu_hi", Ns, 1.0), ("width", Ns, 1.0), ("S(K)/N", Ls, 1.0),
                        ("stiffness", Ls, 1.0)):
        ext[k], ext[f"{k}_error"] = np.full(P, np.nan), np.full(P, np.nan)
        for p in range(P):
            y, e = per[k][p], per[f"{k}_error"][p]
            ok = np.isfinite(y) & np.isfinite(e)
            if ok.sum() >= 2:
                d = extrapolate(x[ok], y[ok], np.maximum(e[ok], 1e-12), power)
                ext[k][p], ext[f"{k}_error"][p] = d["value"], d["error"]
    extL["width"], extL["width_error"] = np.full(P, np.nan), np.full(P, np.nan)
    for p in range(P):
        y, e = per["width"][p], per["width_error"][p]
        ok = np.isfinite(y)
        if ok.sum() >= 2:
            d = extrapolate(Ls[ok], y[ok], np.maximum(e[ok], 1e-12), 1.0)
            extL["width"][p], extL["width_error"][p] = d["value"], d["error"]
    return ext, extL


def to_record(step: QMCStep, spec, fraction, nsigma: float = 2.0):
    from .record import StepRecord

    P = len(step.T)
    e = step.extrap
    exists = np.where(np.isfinite(e["width"]), e["width"] - nsigma * e["width_error"] > 0, False)
    conv = step.computed & np.isfinite(e["width"])
    order = {"S(K)/N": e["S(K)/N"], "stiffness": e["stiffness"], "T": step.T}
    errors = {"mu_lo": e["mu_lo_error"], "mu_hi": e["mu_hi_error"], "width": e["width_error"],
              "S(K)/N": e["S(K)/N_error"], "stiffness": e["stiffness_error"]}
    for a, L in enumerate(step.sizes):
        for k in ("mu_lo", "mu_hi", "width", "S(K)/N", "binder", "stiffness"):
            order[f"{k}_L{L}"] = step.per_size[k][:, a]
            errors[f"{k}_L{L}"] = step.per_size[f"{k}_error"][:, a]
    flags = [[] for _ in range(P)]
    for p in range(P):
        if not step.computed[p]:
            flags[p].append(f"not computed (qmc every = {step.settings['every']}: every other strain of the path)")
    for fl in step.flags:
        if fl.startswith("strain #"):
            p = int(fl.split("#")[1].split(",")[0])
            flags[p].append(fl.split(", ", 1)[1])  # "L=6: lower edge ..." (the strain is the record's index)
    sizes = "+".join(f"{L}x{L}" for L in step.sizes)
    return StepRecord(
        method=spec.name, fraction=fraction, sharp=True, mu_lo=e["mu_lo"], mu_hi=e["mu_hi"], width=e["width"],
        exists=exists, converged=conv, order=order, errors=errors, flags=flags,
        info={"cluster": sizes, "n_sites": int(max(step.sizes) ** 2), "N": int(round(step.fraction * max(step.sizes) ** 2)),
              "edges": ("QMC: mu where <N> crosses N -+ 1/2 on each L x L torus at low T (-> canonical mu-+(N)), "
                        f"extrapolated linearly in 1/N over {sizes}; width = mu_hi - mu_lo (L -> inf)"),
              "sizes": list(step.sizes), "T": step.T.tolist(), "settings": {k: v for k, v in step.settings.items()},
              "runs": step.runs},
        detail=step)


@dataclass
class QMCCritical(CriticalResult):
    """Critical strain of qmc: root of the extrapolated width with statistical and finite-size errors.

    ``reason`` says why there is no root when ``status == "none"``: ``"open"`` (the plateau is
    resolved, width > 2 sigma, at every strain where its width was determined), ``"closed"`` (at
    none of them: the closing lies below the first), ``"unresolved"`` (resolved, then compatible
    with zero, without a resolved sign change), ``"undetermined"`` (fewer than two strains with a
    width). A sign change counts only when its positive side is a resolved plateau. ``undetermined`` lists the computed strains whose width is NaN (an edge or order
    value from a run that did not decorrelate: not measured, *not* "no plateau").
    """

    stat_error: float | None = None
    fss_error: float | None = None
    sizes: tuple = ()
    alt_root: float | None = None
    binder_crossing: dict = field(default_factory=dict)
    temperatures: tuple = ()
    reason: str = ""
    undetermined: list = field(default_factory=list)
    interval: tuple | None = None

    def to_dict(self) -> dict:
        d = super().to_dict()
        d.update(stat_error=self.stat_error, fss_error=self.fss_error, sizes=list(self.sizes), alt_root=self.alt_root,
                 binder_crossing=self.binder_crossing, temperatures=list(self.temperatures), reason=self.reason,
                 undetermined=list(self.undetermined), interval=list(self.interval) if self.interval else None)
        return d

    def summary(self) -> str:
        sz = ", ".join(f"{L}x{L} ({L * L} sites)" for L in self.sizes)
        Ts = f"T = {min(self.temperatures):.3g}..{max(self.temperatures):.3g} {self.unit}" if self.temperatures else ""
        head = f"{self.method}: quantum Monte Carlo on {sz}, {Ts}, extrapolated to L -> inf"
        st = f"{self.stat_error:.2g}" if self.stat_error is not None else "? (resampling found no root)"
        S = np.asarray(self.strains, float)
        H = np.asarray(self.values, float)
        ok = np.isfinite(H)
        if self.status == "found":
            s = (f"{head}: critical strain {self.strain_c:.4g} ± {st} (statistical)"
                 + (f" ± {self.fss_error:.2g} (finite size: 1/N vs 1/L extrapolation)" if self.fss_error is not None else ""))
        elif self.status == "bracket":
            s = (f"{head}: critical strain between {self.bracket[0]:.4g} and {self.bracket[1]:.4g} (the 1/N and 1/L "
                 f"extrapolations disagree beyond their statistical errors; statistical ± {st})")
        elif self.reason == "closed":
            first = float(S[ok][0])
            below = S[~ok & (S < first)]
            s = (f"{head}: the extrapolated {self.fraction} plateau width is not resolved (<= 2 sigma, compatible "
                 f"with a closed plateau) at any computed strain where it was determined (from strain {first:.4g}, "
                 f"width {H[ok][0]:.3g} {self.unit}): the plateau closes "
                 + (f"below strain {first:.4g}, where the width was not determined (strains "
                    f"{', '.join(f'{x:.4g}' for x in below)})" if len(below) else "at or before the start of the table"))
        elif self.reason == "open":
            c = self.closest
            s = (f"{head}: the extrapolated {self.fraction} plateau width is resolved (> 2 sigma) at every computed "
                 f"strain where it was determined: it does not close inside the table (smallest "
                 f"{c['value']:.3g} {self.unit} at strain {c['strain']:.4g})")
        elif self.reason == "unresolved":
            s = (f"{head}: the extrapolated {self.fraction} plateau width falls from resolved (> 2 sigma) to values "
                 "compatible with zero without a resolved sign change: no critical strain; run longer or larger "
                 "(--qmc sweeps=... --qmc sizes=6+9+12)")
        else:
            s = (f"{head}: the {self.fraction} plateau width was determined at fewer than two computed strains "
                 "(runs not decorrelated, see flags): no critical strain; run longer (--qmc sweeps=...)")
        if self.status != "none" and self.interval is not None and self.undetermined:
            gap = [x for x in self.undetermined if self.interval[0] < x < self.interval[1]]
            if gap:
                s += (f" [interpolated between strains {self.interval[0]:.4g} and {self.interval[1]:.4g}: width not "
                      f"determined at {', '.join(f'{x:.4g}' for x in gap)}]")
        if self.t_over_V_c is not None and self.status != "none":
            s += f" (t/V = {self.t_over_V_c:.4g})"
        bc = self.binder_crossing
        if bc.get("value") is not None:
            s += f"; Binder crossing of S(K) at filling {self.fraction}: {bc['text']}"
        return s


def _significant_change(S, H, E, nsigma):
    """First sign change of the width H between defined strains whose positive side is a resolved
    plateau (H > nsigma x its error): a sign change between values compatible with zero (the
    extrapolated width of a compressible state scatters around 0) is noise, not a transition."""
    from ..qmc.scaling import first_sign_change

    H = np.asarray(H, float)
    E = np.asarray(E, float)
    while True:
        r, i, j = first_sign_change(S, H)
        if i is None:
            return r, i, j
        pos = i if H[i] > 0 else j
        if H[pos] > nsigma * E[pos]:
            return r, i, j
        H = H.copy()
        H[pos] = 0.0  # not a resolved plateau: counts as closed


def qmc_critical(spec, table, strains, record, fraction, nboot: int = 400, nsigma: float = 2.0) -> QMCCritical:
    """Critical strain of the qmc record (module notes).

    The root is the first sign change of the extrapolated width among the computed strains
    where the width is *defined*; a NaN width (an edge or order run that did not decorrelate) is
    "not measured", not "no plateau", so it is skipped and the root is interpolated between the
    nearest defined neighbours (the strains skipped are listed in ``undetermined`` and named in
    the summary)."""
    from ..qmc.scaling import combine_crossings, crossings, extrapolate

    step: QMCStep = record.detail
    c = step.computed
    S = np.asarray(strains, float)[c]
    per = {k: v[c] for k, v in step.per_size.items()}
    Ns = np.array([L * L for L in step.sizes], float)
    H = np.asarray(record.width, float)[c]
    E = np.asarray(step.extrap["width_error"], float)[c]
    sc, i0, j0 = _significant_change(S, H, E, nsigma)
    scL = _significant_change(S, step.extrap_L["width"][c], step.extrap_L["width_error"][c], nsigma)[0]
    sc = None if not np.isfinite(sc) else sc
    scL = None if not np.isfinite(scL) else scL
    rng = np.random.default_rng(int(step.settings["seed"]))
    draws = []
    for _ in range(nboot):
        w = per["width"] + per["width_error"] * rng.standard_normal(per["width"].shape)
        h = np.array([extrapolate(Ns, w[p], np.maximum(per["width_error"][p], 1e-12))["value"]
                      if np.all(np.isfinite(w[p])) else np.nan for p in range(len(S))])
        r = _significant_change(S, h, E, nsigma)[0]
        if np.isfinite(r):
            draws.append(r)
    stat = float(np.std(draws)) if len(draws) > 1 else None
    finite = np.isfinite(H)
    k = int(np.nanargmin(np.where(finite, H, np.inf))) if finite.any() else 0
    closest = {"strain": float(S[k]) if len(S) else math.nan, "value": float(H[k]) if finite.any() else math.nan,
               "on": "computed strains"}
    bc = crossings(S, list(step.sizes), per["binder"].T, per["binder_error"].T, nboot=nboot,
                   seed=int(step.settings["seed"]))
    bcomb = combine_crossings(bc, nsigma)
    fl = [f"strain {s:g}, {f}" for s, fs in zip(np.asarray(strains, float), record.flags) for f in fs
          if not f.startswith("not computed")]
    undetermined = [float(x) for x in S[~finite]]
    status, bracket, fss, reason, interval = "none", None, None, "", None
    if sc is not None:
        status, interval = "found", (float(S[i0]), float(S[j0]))
        if j0 - i0 > 1:
            fl.append(f"width not determined at strain(s) {', '.join(f'{x:.4g}' for x in S[i0 + 1:j0])} (runs not "
                      f"decorrelated): the root is interpolated between {S[i0]:.4g} and {S[j0]:.4g}")
        if scL is not None:
            fss = abs(sc - scL)
            if fss > nsigma * math.hypot(stat or 0.0, stat or 0.0) and fss > 0:
                status, bracket = "bracket", (min(sc, scL), max(sc, scL))
        direction = "closes with increasing strain" if H[i0] > 0 else "opens with increasing strain"
    else:
        direction = ""
        sig = H[finite] > nsigma * E[finite]
        reason = ("undetermined" if finite.sum() < 2 else "open" if np.all(sig) else "closed" if not np.any(sig)
                  else "unresolved")
    strain_c = sc if status == "found" else (0.5 * (bracket[0] + bracket[1]) if bracket else None)
    tv = float(table.ratio(strain_c)[0]) if strain_c is not None else None
    return QMCCritical(method=record.method, fraction=fraction, criterion="width (L -> inf)", status=status,
                       strain_c=strain_c, roots=[sc] if sc is not None else [], bracket=bracket,
                       xtol=stat or math.nan, direction=direction, closest=closest, strains=S, values=H,
                       unit=table.unit, t_over_V_c=tv, flags=fl, stat_error=stat, fss_error=fss, sizes=step.sizes,
                       alt_root=scL, binder_crossing=bcomb, temperatures=tuple(np.unique(np.round(step.T[c], 6))),
                       evaluations=step.runs, reason=reason, undetermined=undetermined, interval=interval)


#: Why a qmc strain check gives no melt factor (the mean-field line "t/V would need to grow/fall to ...").
QMC_NO_MELT_FACTOR = ("not computed for qmc: the factor is a root of the plateau width in t/V, and for a statistical "
                      "width extrapolated over sizes that root needs a QMC scan in t/V on every size (a sweep's worth "
                      "of runs per strain), not a root finder on noisy values; the QMC answer to how far the solid is "
                      "from melting is the critical strain of `strain-sweep --methods qmc` (with t/V there)")


def qmc_report(model, record, mu, fraction) -> dict:
    """Sections of a one-strain check (``check_strain``) for qmc, with the verdict in plain words."""
    step: QMCStep = record.detail
    u = model.unit or "V"
    e, per = step.extrap, step.per_size
    sizes = ", ".join(f"{L}x{L} ({L * L} sites, N = {round(step.fraction * L * L)})" for L in step.sizes)
    rows = {}
    for a, L in enumerate(step.sizes):
        rows[f"{L}x{L}"] = {k: [float(per[k][0, a]), float(per[f"{k}_error"][0, a])]
                            for k in ("mu_lo", "mu_hi", "width", "S(K)/N", "binder", "stiffness", "filling")}
        rows[f"{L}x{L}"]["bisection_resolution"] = float(per["resolution"][0, a])
    ext = {k: [float(e[k][0]), float(e[f"{k}_error"][0])] for k in ("mu_lo", "mu_hi", "width", "S(K)/N", "stiffness")}
    w, we = ext["width"]
    sk, ske = ext["S(K)/N"]
    rho, rhoe = ext["stiffness"]
    lines = [f"{record.method}: quantum Monte Carlo on {sizes} at T = {step.T[0]:.3g} {u}, "
             f"{step.settings['sweeps']} sweeps per edge run, {step.settings['order_sweeps']} for the order."]
    if not np.isfinite(w):
        verdict = "uncertain"
        lines.append("the edges could not be determined on every size (see flags): no verdict.")
    else:
        if w - 2 * we > 0:
            verdict = "holds"
            lines.append(f"the {fraction} plateau holds after extrapolation to L -> inf: width {w:.4g} ± {we:.2g} {u} "
                         f"(mu from {ext['mu_lo'][0]:.4g} ± {ext['mu_lo'][1]:.2g} to {ext['mu_hi'][0]:.4g} ± "
                         f"{ext['mu_hi'][1]:.2g} {u}).")
        elif w + 2 * we < 0.02 * max(model.V):
            verdict = "melted"
            lines.append(f"the {fraction} plateau is gone after extrapolation to L -> inf: width {w:.4g} ± {we:.2g} {u} "
                         "(compatible with zero).")
        else:
            verdict = "uncertain"
            lines.append(f"the extrapolated {fraction} plateau width {w:.4g} ± {we:.2g} {u} is neither clearly open nor "
                         "closed at two sigma: run larger sizes or longer (--qmc sizes=6+9+12 --qmc sweeps=...).")
    melt = {"status": "not-computed", "reason": QMC_NO_MELT_FACTOR}
    lines.append(f"t/V melt factor: {QMC_NO_MELT_FACTOR}.")
    if np.isfinite(sk):
        lines.append(f"at filling {fraction}: S(K)/N -> {sk:.4g} ± {ske:.2g}, stiffness -> {rho:.4g} ± {rhoe:.2g} {u} "
                     "(linear in 1/L over the sizes).")
    lines.append(f"only {len(step.sizes)} sizes up to {max(step.sizes) ** 2} sites: the extrapolation is a two-"
                 "parameter fit; larger systems can move it." if len(step.sizes) < 3 else
                 f"sizes up to {max(step.sizes) ** 2} sites.")
    out = {"kind": "qmc", "sizes": list(step.sizes), "per_size": rows, "L_extrapolated": ext,
           "T": float(step.T[0]), "settings": {k: v for k, v in step.settings.items()}, "verdict": verdict, "melt": melt,
           "verdict_lines": lines}
    if mu is not None:
        lo, hi = ext["mu_lo"][0], ext["mu_hi"][0]
        out["at_mu"] = {"mu": float(mu), "inside_plateau": bool(lo <= mu <= hi),
                        "margin_mu": float(min(mu - lo, hi - mu))}
        lines.append(f"mu = {mu:.4g} {u} lies {'inside' if lo <= mu <= hi else 'outside'} the extrapolated plateau "
                     f"(margin {min(mu - lo, hi - mu):.3g} {u}).")
    return out
