r"""Exact diagonalization as a method of the strain workflow (canonical, finite periodic cluster).

For every interpolated model ED on a periodic cluster of L sites containing K (tri12 by
default; tri21, tri27, tri36; sectors over the memory budget are refused with their estimate by
the ED cost guard, :mod:`phasemap.ed.guard` — on a 23-GiB machine tri36 runs for isotropic
couplings and under uniaxial strain, where the smaller symmetry group makes the N = 13 sector
~12.8 GiB, docs/ed.md) gives the *finite-cluster* step of the staircase at
:math:`N = fL` (f = 1/3 by default):

.. math:: \mu_-(N) = E_c(N) - E_c(N-1),\qquad \mu_+(N) = E_c(N+1) - E_c(N),\qquad
          \Delta(N) = \mu_+(N) - \mu_-(N),

with :math:`E_c = E_0 + \mu N` the ground-state energy without the chemical-potential term
(same convention as :func:`phasemap.ed.staircase`), and the density order
:math:`S(K)/N = \langle|\rho_K|^2\rangle` at N (1/9 for a perfect
:math:`\sqrt3\times\sqrt3` solid at 1/3). Only the three sectors N-1, N, N+1 are
diagonalised (:func:`phasemap.ed.ground_state`), S(K) only at N.

Semantics (the honest part):

* On a finite cluster the charge gap never closes exactly (a finite system has a discrete
  spectrum; the gap of a compressible phase decays like 1/L only as L grows), so ED gives
  **no sharp critical strain**. The strain of the steepest drop of S(K)/N or of the gap
  along the path is reported as an *indicator* of the crossover on that cluster, never as a
  critical strain, and it is not part of the mf/cmf band.
* Whether S(K)/N exceeds the density-order indicator threshold of :mod:`phasemap.ed`
  (:class:`phasemap.ed.EDThresholds`, ``sq = 0.05``) is a finite-size indicator, not a
  thermodynamic statement.
* Exact limit used in the tests: at t = 0 the Hamiltonian is diagonal in the occupation
  basis, E0(N) is the classical minimum and the 1/3 step on tri12 runs from
  :math:`\mu/V = 0` to :math:`\mu/V = 3` (removing a particle of the √3×√3 solid costs
  nothing, adding one creates three nearest-neighbour bonds).

References: A. Weiße and H. Fehske, Lect. Notes Phys. 739, 529 (2008) (ED);
S. Wessel and M. Troyer, PRL 95, 127205 (2005) and D. Heidarian and K. Damle, PRL 95, 127206
(2005) (finite-size S(K)/N and gap analysis of the triangular-lattice 1/3 solid).
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field
from fractions import Fraction

import numpy as np

from ..model import ConfigError, Model
from ..methods import MethodSpec, get_method
from .engine import parse_fraction

__all__ = ["DEFAULT_ED_CLUSTER", "ED_CAUTION", "EDPlateau", "ed_setup", "ed_plateaus", "ed_indicator", "ed_report",
           "clear_ed_cache"]

DEFAULT_ED_CLUSTER = "tri12"

ED_CAUTION = get_method("ed").caution

_CACHE: dict = {}


def clear_ed_cache() -> None:
    """Forget cached ED sector energies."""
    _CACHE.clear()


def _model_key(m: Model) -> tuple:
    return (m.lattice, tuple(m.t), tuple(m.V), m.U, m.V2, m.n_max, m.mu)


@dataclass
class EDPlateau:
    """Finite-cluster step at N = f L for P models (arrays of shape (P,)).

    Attributes
    ----------
    method, cluster : str
        ``"ed:tri12"``, ``"tri12"``.
    n_sites, N : int
    fraction : str
    e_canonical : ndarray (P, 3)
        E_c(N-1), E_c(N), E_c(N+1) (model unit).
    mu_minus, mu_plus, gap : ndarray
        Canonical chemical potentials and charge gap (model unit).
    sk : ndarray
        S(K)/N at N (``<|rho_K|^2>``).
    sq_max : ndarray, q_max : list of str
        Largest S(Q)/L at Q != 0 and its momentum.
    residual : ndarray
        Largest ||H psi - E0 psi|| of the three sectors.
    seconds : ndarray
        Wall time per model.
    flags : list of list of str
    """

    method: str
    cluster: str
    n_sites: int
    N: int
    fraction: str
    e_canonical: np.ndarray
    mu_minus: np.ndarray
    mu_plus: np.ndarray
    gap: np.ndarray
    sk: np.ndarray
    sq_max: np.ndarray
    q_max: list
    residual: np.ndarray
    seconds: np.ndarray
    threshold: float
    flags: list = field(default_factory=list)

    @property
    def size(self) -> int:
        return len(self.gap)

    @property
    def ordered(self) -> np.ndarray:
        """S(K)/N above the density-order indicator threshold (finite-size indicator)."""
        return self.sk > self.threshold

    def to_record(self):
        """The common :class:`~phasemap.strain.record.StepRecord` (finite-cluster step, not sharp)."""
        from .record import StepRecord

        from ..ed.solve import RESIDUAL_TOL

        scale = np.maximum(1.0, np.nanmax(np.abs(self.e_canonical), axis=1))
        conv = self.residual <= RESIDUAL_TOL * scale  # eigen-residual, as in phasemap.ed.solve_ed
        return StepRecord(
            method=self.method, fraction=self.fraction, sharp=False, mu_lo=self.mu_minus, mu_hi=self.mu_plus,
            width=self.gap, exists=self.ordered, converged=conv,
            order={"S(K)/N": self.sk, "sq_max": self.sq_max},
            flags=self.flags,
            info={"cluster": self.cluster, "n_sites": self.n_sites, "N": self.N, "SK_threshold": self.threshold,
                  "edges": "canonical mu-(N) = E_c(N) - E_c(N-1), mu+(N) = E_c(N+1) - E_c(N); width = charge gap"},
            detail=self)


def ed_setup(spec, models, fraction="1/3", budget_gib=None):
    """Validate an ED spec for ``models`` before anything is solved; returns ``(cell, N, budget)``.

    Raises ConfigError (naming the method, cluster or fraction) for an unknown cluster, a
    cluster without K, a filling that is not an integer number of bosons on the cluster,
    doubled bonds (e.g. V2 != 0 on tri9/tri12) or sectors over the ED memory budget.
    """
    from ..ed.clusters import check_bonds, get_cluster
    from ..ed.groundstate import sector_estimate
    from ..ed.guard import DEFAULT_BUDGET_GIB, check_budget

    spec = MethodSpec.parse(spec)
    if not spec.capabilities.canonical:
        raise ConfigError(f"method {spec.name!r}: not an ED method")
    opts = spec.option_dict
    extra = set(opts) - {"cluster", "budget_gib"}
    if extra:
        raise ConfigError(f"method {spec.name!r}: unknown ED option(s) {sorted(extra)}; allowed: cluster, budget_gib")
    name = opts.get("cluster", DEFAULT_ED_CLUSTER)
    budget = opts.get("budget_gib", DEFAULT_BUDGET_GIB if budget_gib is None else budget_gib)
    if not models:
        raise ConfigError("strain models: no parameter points")
    lab, f = parse_fraction(fraction)
    cell = get_cluster(name, models[0].lattice)
    L = cell.n_sites
    lat = cell.lattice
    if "K" not in lat.special_q:
        raise ConfigError(f"method {spec.name!r}: the strain ED plateau measures sqrt3 x sqrt3 order at K; the "
                          f"{lat.name} lattice has no K point")
    K = np.array([float(x) for x in lat.special_q["K"]])
    if not np.any(np.all(np.abs(np.mod(cell.momenta - K + 0.5, 1) - 0.5) < 1e-9, axis=1)):
        raise ConfigError(f"method {spec.name!r}: cluster {name} does not contain K = (2/3, 1/3); use a "
                          "K-compatible cluster (tri12, tri21, tri27, tri36)")
    Nf = Fraction(lab) * L
    if Nf.denominator != 1:
        raise ConfigError(f"fraction: filling {lab} of the {L}-site cluster {name} is not an integer number of "
                          f"bosons (N = {float(Nf):.4g}); choose a cluster with L divisible by {Fraction(lab).denominator}")
    N = int(Nf)
    n_max = max(m.n_max for m in models)
    if not (1 <= N <= n_max * L - 1):
        raise ConfigError(f"fraction: ED needs N-1 >= 0 and N+1 <= n_max L; got N = {N} on {L} sites")
    for m in models:
        try:
            check_bonds(cell, m)
        except ConfigError as e:
            hint = (f"; the table has V2 = {m.V2:g} != 0, which {name} cannot hold (doubled next-nearest-neighbour "
                    "bonds): use ed:tri21 or ed:tri27" if m.V2 != 0 else "")
            raise ConfigError(f"method {spec.name!r}: {e}{hint}") from None
    for n in (N - 1, N, N + 1):
        est = max((sector_estimate(m, cell, n, budget) for m in models), key=lambda e: e.bytes)
        check_budget(est, budget, what=f"ED sector N={n} on {name} ({spec.name})")
    return cell, N, budget


def ed_plateaus(models: list[Model], spec=f"ed:{DEFAULT_ED_CLUSTER}", fraction="1/3", budget_gib=None,
                tol: float = 1e-10, thresholds=None) -> EDPlateau:
    """Finite-cluster step mu-(N), mu+(N), gap and S(K)/N at N = f L for every model.

    Three sectors per model (N-1, N, N+1, ground states at Q = 0, exact for t >= 0 by
    Perron-Frobenius, see :func:`phasemap.ed.ground_state`); S(K) is measured at N only.
    Results are cached per (cluster, model).
    """
    from ..ed import EDThresholds, ground_state, observables
    from ..ed.io import canonical_mu

    spec = MethodSpec.parse(spec)
    th = thresholds or EDThresholds()
    cell, N, budget = ed_setup(spec, models, fraction, budget_gib)
    lab, _ = parse_fraction(fraction)
    name = spec.option_dict.get("cluster", DEFAULT_ED_CLUSTER)
    P = len(models)
    Ec = np.full((P, 3), np.nan)
    sk, sqm, res, secs = (np.full(P, np.nan) for _ in range(4))
    qmax, flags = [], []
    for p, m in enumerate(models):
        t0 = time.perf_counter()
        key = (name, _model_key(m), N, tol)
        hit = _CACHE.get(key)
        if hit is None:
            rec = {"Ec": [], "res": []}
            for n in (N - 1, N, N + 1):
                gs = ground_state(m, cell, n, budget_gib=budget, tol=tol)
                rec["Ec"].append(gs.e0 + m.mu * n)
                rec["res"].append(gs.residual)
                if n == N:
                    obs = observables(gs, ("sq",))
                    rec["sk"] = obs.get("S(K)/N", math.nan)
                    rec["sq_max"] = obs.get("sq_max", math.nan)
                    rec["q_max"] = obs.get("q_max", "")
                del gs  # free this sector before the next is built (the guard checks one sector at a time)
            _CACHE[key] = hit = rec
        Ec[p] = hit["Ec"]
        sk[p], sqm[p] = hit["sk"], hit["sq_max"]
        qmax.append(hit["q_max"])
        res[p] = max(hit["res"])
        fl = []
        if max(m.t) == 0:
            fl.append("note: t = 0: classical, massively degenerate ground states; E0(N) and the edges are exact, "
                      "S(K)/N depends on the vector ARPACK returns")
        if Ec[p, 2] - 2 * Ec[p, 1] + Ec[p, 0] < 0:
            fl.append("note: E_c(N) is not convex at N (mu+ < mu-): the cluster skips N grand-canonically")
        flags.append(fl)
        secs[p] = time.perf_counter() - t0
    mu_m, mu_p = (x[:, 1] for x in canonical_mu([N - 1, N, N + 1], Ec))
    return EDPlateau(method=spec.name, cluster=name, n_sites=cell.n_sites, N=N, fraction=lab, e_canonical=Ec,
                     mu_minus=mu_m, mu_plus=mu_p, gap=mu_p - mu_m, sk=sk, sq_max=sqm, q_max=qmax, residual=res,
                     seconds=secs, threshold=float(th.sq), flags=flags)


def _steepest_drop(s, y):
    """Midpoint of the interval with the most negative finite-difference slope dy/ds (or None)."""
    s, y = np.asarray(s, float), np.asarray(y, float)
    ok = np.isfinite(y)
    s, y = s[ok], y[ok]
    if len(s) < 2:
        return None
    slope = np.diff(y) / np.diff(s)
    k = int(np.argmin(slope))
    if not slope[k] < 0:
        return None
    return {"strain": float(0.5 * (s[k] + s[k + 1])), "resolution": float(0.5 * (s[k + 1] - s[k])),
            "interval": [float(s[k]), float(s[k + 1])], "slope": float(slope[k])}


def ed_indicator(strains, ed: EDPlateau, vref, unit: str) -> dict:
    """ED "critical-strain" record: no sharp transition, plus steepest-drop indicators.

    The strain of the steepest drop of S(K)/N and of gap/V between samples (interval
    midpoint, +- half the interval) is a finite-cluster crossover *indicator*: it depends on
    the cluster's size and shape and is not a critical strain (never put into the band).
    """
    s = np.asarray(strains, float)
    vref = np.asarray(vref, float)
    sk_drop = _steepest_drop(s, ed.sk)
    gap_drop = _steepest_drop(s, ed.gap / vref)
    if gap_drop is not None:
        gap_drop["slope_unit"] = "1/strain (gap/V)"
    k = int(np.nanargmin(ed.gap))
    txt = (f"{ed.method}: no sharp transition on a finite cluster ({ed.n_sites} sites, N = {ed.N}; the charge gap "
           f"never closes exactly); smallest gap {ed.gap[k]:.4g} {unit} ({ed.gap[k] / vref[k]:.3g} V) at strain "
           f"{s[k]:.4g}")
    if sk_drop is not None:
        txt += (f"; indicator (not a critical strain): steepest drop of S(K)/N at strain "
                f"{sk_drop['strain']:.4g} +- {sk_drop['resolution']:.2g}")
    if gap_drop is not None:
        txt += f", of gap/V at {gap_drop['strain']:.4g} +- {gap_drop['resolution']:.2g}"
    above = ed.ordered
    if above.all():
        txt += f"; S(K)/N above the indicator threshold {ed.threshold:g} at every strain"
    elif not above.any():
        txt += f"; S(K)/N below the indicator threshold {ed.threshold:g} at every strain"
    else:
        txt += f"; S(K)/N above the indicator threshold {ed.threshold:g} at {int(above.sum())} of {len(s)} strains"
    return {"method": ed.method, "cluster": ed.cluster, "n_sites": ed.n_sites, "N": ed.N, "fraction": ed.fraction,
            "status": "no-sharp-transition", "strain_c": None, "in_band": False,
            "reason": "finite cluster: the charge gap never closes exactly, so there is no sharp critical strain",
            "indicator_SK_drop": sk_drop, "indicator_gap_drop": gap_drop,
            "indicator_note": "steepest drop between path samples: a finite-cluster crossover indicator, "
                              "not a critical strain; not included in the mf/cmf band",
            "smallest_gap": {"strain": float(s[k]), "gap": float(ed.gap[k]), "gap_over_V": float(ed.gap[k] / vref[k])},
            "SK_threshold": ed.threshold, "SK_above_threshold": [bool(x) for x in above],
            "text": txt}


def ed_report(model: Model, r: EDPlateau, mu) -> dict:
    """Sections of a one-strain check that the finite-cluster ED step has (see
    :func:`phasemap.strain.check_strain`): ensemble, order S(K)/N, no sharp transition, state at mu."""
    Vref = max(abs(v) for v in model.V)
    rel = (lambda x: x / Vref) if Vref > 0 else (lambda x: None)  # noqa: E731
    lo, hi = float(r.mu_minus[0]), float(r.mu_plus[0])
    sk = float(r.sk[0])
    lab = r.fraction
    out = {
        "kind": "ed", "ensemble": "canonical (finite periodic cluster)", "cluster": r.cluster,
        "n_sites": r.n_sites, "N": r.N,
        "plateau": {"E_canonical": {str(r.N - 1): float(r.e_canonical[0, 0]), str(r.N): float(r.e_canonical[0, 1]),
                                    str(r.N + 1): float(r.e_canonical[0, 2])}},
        "order": {"S(K)/N": sk, "threshold": r.threshold, "above_threshold": bool(sk > r.threshold),
                  "perfect_solid": 1.0 / 9.0 if lab == "1/3" else None, "sq_max": float(r.sq_max[0]),
                  "q_max": r.q_max[0],
                  "threshold_source": "phasemap.ed.EDThresholds.sq (finite-size density-order indicator)"},
        "critical": {"sharp": False,
                     "text": "on a finite cluster the charge gap never closes exactly, so ED gives no sharp "
                             "critical strain (compare clusters: only the scaling with size decides)"},
        "residual": float(r.residual[0]), "seconds": float(r.seconds[0]),
        "verdict": "ordered-on-cluster" if sk > r.threshold else "no-order-on-cluster",
    }
    if mu is not None:
        m = min(mu - lo, hi - mu)
        out["at_mu"] = {"mu": mu, "inside_step": bool(lo <= mu <= hi), "margin_mu": float(m),
                        "margin_mu_over_V": rel(float(m)),
                        "nearest_edge": "lower" if abs(mu - lo) <= abs(mu - hi) else "upper",
                        "compared": f"N = {r.N - 1}, {r.N}, {r.N + 1} only"}
    return out
