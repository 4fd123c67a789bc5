"""Front door of exact diagonalization: ``solve_ed(model, cluster=..., particles=N) -> Solution``.

What the :class:`phasemap.solution.Solution` fields mean for ED (finite cluster, canonical):

* ``energy`` = E0(N) / L (model Hamiltonian including ``-mu N``), ``filling`` = N / L;
* ``densities`` = N / L on every site (a momentum eigenstate is translation invariant;
  density order shows up in S(Q), not in site densities);
* ``condensate`` = sqrt(n_max(k) / L) on every site, with n_max(k) the largest eigenvalue
  of the one-body density matrix (equals |<b>| of a uniform condensate for large L);
* ``order``: ``S(K)/N`` (S(K)/L), ``sq_max``/``q_max`` (largest S(Q)/L at Q != 0),
  ``condensate_fraction``, ``stiffness`` (mean over families) and ``stiffness_<family>``,
  ``gap`` (mu+ - mu-);
* ``phase``: a finite-size indicator (see :class:`EDThresholds`), never a thermodynamic
  statement; ``flags`` record degeneracies and the thresholds used;
* ``residual`` = ||H psi - E0 psi||; ``converged`` = residual <= :data:`RESIDUAL_TOL` x max(1, |E0|)
  (an eigensolver that stopped short is flagged, not reported as converged);
  ``iterations`` = number of momentum sectors solved;
* ``extra``: cluster, N, E0, momentum, every sector energy, dimensions, times, S(Q) at all
  momenta, n(k), mu+(N), mu-(N).

References
----------
.. [1] A. Weiße and H. Fehske, Lect. Notes Phys. 739, 529 (2008).
.. [2] S. Wessel and M. Troyer, Phys. Rev. Lett. 95, 127205 (2005); D. Heidarian and
   K. Damle, Phys. Rev. Lett. 95, 127206 (2005) (finite-size indicators: S(K)/N, stiffness).
"""

from __future__ import annotations

import json
import math
from dataclasses import asdict, dataclass
from fractions import Fraction

import numpy as np

from ..lattice import patterns_for
from ..model import ConfigError, Model, check_keys
from ..solution import Solution
from .groundstate import ground_state
from .io import canonical_mu
from .guard import DEFAULT_BUDGET_GIB
from .spacegroup import SymSector
from .observables import measure as observables

__all__ = ["EDThresholds", "solve_ed", "observables", "indicator", "scan_ed"]


@dataclass(frozen=True)
class EDThresholds:
    """Finite-size phase indicator thresholds.

    sq : float, default 0.05
        Density order if max_{Q != 0} S(Q)/L exceeds this (perfect √3×√3 solid at 1/3: 1/9).
    stiffness : float, default 0.1
        Superfluid response if the mean stiffness exceeds ``stiffness * max(t)`` (free
        bosons at density n have rho = 3 n t on the triangular lattice, 2 n t on the square).
    gap : float, default 1e-9
        Incompressible if mu+ - mu- exceeds ``gap * scale`` (finite clusters are always
        gapped; this only separates exact level crossings).
    """

    sq: float = 0.05
    stiffness: float = 0.1
    gap: float = 1e-9


def _pattern(cell, q_name: str) -> str:
    for name, p in sorted(patterns_for(cell.lattice).items(), key=lambda kv: kv[1].n_sub):
        if name != "uniform" and q_name in p.q:
            return name
    return ""


def indicator(model: Model, cell, N: int, obs: dict, gap: float | None, th: EDThresholds) -> tuple[str, str, str, list]:
    """Finite-size phase indicator -> (phase, label, pattern, flags)."""
    L = cell.n_sites
    frac = Fraction(N, L)
    flags = []
    if N == 0:
        return "empty", "empty", "", flags
    if N == model.n_max * L:
        return "full", "full", "", flags
    ordered = obs.get("sq_max", 0.0) > th.sq
    tmax = max(model.t) if max(model.t) > 0 else 1.0
    sf = obs.get("stiffness", 0.0) > th.stiffness * tmax if "stiffness" in obs else obs.get("condensate_fraction", 0) > 0.5
    pattern = _pattern(cell, obs.get("q_max", "")) if ordered else "uniform"
    if ordered and sf:
        return "supersolid", f"supersolid {frac} ({obs.get('q_max')})", pattern, flags
    if ordered:
        return "solid", f"solid {frac} ({obs.get('q_max')})", pattern, flags
    if sf:
        return "superfluid", f"superfluid n={float(frac):.4g}", "uniform", flags
    if frac.denominator == 1 and gap is not None and gap > th.gap * model.scale:
        return "mott", f"mott n={frac}", "uniform", flags
    flags.append("no-order-no-stiffness")
    return "solid", f"insulating {frac} (no density order on this cluster)", "", flags


#: Largest accepted eigen-residual ||H psi - E0 psi|| relative to max(1, |E0|) (the eigensolver
#: targets 1e-12; energies are then accurate to ~1e-20).
RESIDUAL_TOL = 1e-6

ED_OPTIONS = {"symmetric", "point_group_reduce", "budget_gib", "tol", "lookup", "observables", "phi",
            "neighbors", "thresholds", "all_momenta", "space_group", "rep_lookup"}


def solve_ed(model: Model, cluster="tri12", particles=None, **options) -> Solution:
    """Exact ground state of ``model`` on a periodic cluster at fixed particle number.

    Parameters
    ----------
    model : Model
    cluster : str, Supercell or (2, 2) vectors, default "tri12"
        Library name (:data:`phasemap.ed.clusters.CLUSTERS`), supercell or superlattice vectors.
    particles : int, optional
        Number of bosons N. Default: the grand-canonical ground state of the cluster at
        ``model.mu`` (the N minimising E0(N); this diagonalises every N).
    symmetric, point_group_reduce, budget_gib, tol, lookup, all_momenta, space_group, rep_lookup
        See :func:`phasemap.ed.groundstate.ground_state` (``all_momenta=True`` lists every
        momentum sector's energy and the degenerate ground-state momenta).
    observables : tuple, default ("sq", "condensate", "stiffness")
    phi : float, default 1e-2
        Twist used for the stiffness (finite difference).
    neighbors : bool, default True
        Also solve N-1 and N+1 for mu-(N), mu+(N) and the gap.
    thresholds : EDThresholds or dict

    Returns
    -------
    Solution
        ``method="ed"``; field meanings in the module notes.

    Raises
    ------
    ConfigError
        Unknown options, bad cluster/particles, doubled bonds or over the memory budget.

    Examples
    --------
    >>> from phasemap import Model
    >>> sol = solve_ed(Model("triangular", t=0.1, V=1), cluster="tri12", particles=4)
    >>> round(sol.order["S(K)/N"], 3) > 0.05
    True
    """
    check_keys("ed options", options, ED_OPTIONS)
    th = options.pop("thresholds", EDThresholds())
    if isinstance(th, dict):
        check_keys("thresholds", th, EDThresholds.__dataclass_fields__)
        th = EDThresholds(**th)
    which = tuple(options.pop("observables", ("sq", "condensate", "stiffness")))
    phi = float(options.pop("phi", 1e-2))
    neighbors = bool(options.pop("neighbors", True))
    gs_opts = options
    if particles is None:
        from .staircase import staircase

        ds = staircase(model, cluster, observables=(), **{k: v for k, v in gs_opts.items() if k != "symmetric"})
        particles = int(ds["N"].values[int(np.nanargmin(ds["E0"].values))])
    gs = ground_state(model, cluster, particles, **gs_opts)
    cell, N, L = gs.cell, gs.N, gs.L
    obs = observables(gs, which, phi=phi, budget_gib=gs_opts.get("budget_gib", DEFAULT_BUDGET_GIB))
    mu_p = mu_m = gap = None
    e_side = {}
    if neighbors:
        for dn in (-1, 1):
            if 0 <= N + dn <= model.n_max * L:
                side = {k: v for k, v in gs_opts.items() if k != "all_momenta"}
                e_side[dn] = ground_state(model, cell, N + dn, **side).e0
        e_side[0] = gs.e0
        ns = sorted(e_side)
        m_m, m_p = canonical_mu([N + d for d in ns], [e_side[d] + model.mu * (N + d) for d in ns])
        k = ns.index(0)
        mu_m = None if math.isnan(m_m[k]) else float(m_m[k])
        mu_p = None if math.isnan(m_p[k]) else float(m_p[k])
        if mu_p is not None and mu_m is not None:
            gap = mu_p - mu_m
    phase, label, pattern, flags = indicator(model, cell, N, obs, gap, th)
    converged = bool(gs.residual <= RESIDUAL_TOL * max(1.0, abs(gs.e0)))
    if not converged:
        flags.append(f"eigensolver residual {gs.residual:.1e} above {RESIDUAL_TOL:g} x max(1, |E0|)")
    if "stiffness_skipped" in obs:
        flags.append("stiffness not computed: " + obs["stiffness_skipped"])
    if len(gs.degenerate) > 1:
        flags.append("degenerate-momenta " + ",".join(gs.degenerate))
    lam = obs.get("lambda_max", math.nan)
    order = {k: obs[k] for k in ("S(K)/N", "sq_max", "q_max", "condensate_fraction", "stiffness", "stiffness_error")
             if k in obs}
    for f, v in obs.get("stiffness_families", {}).items():
        order[f"stiffness_{f}"] = v
    if gap is not None:
        order["gap"] = gap
    extra = {
        "cluster": cell.vectors.tolist(), "n_sites": L, "N": N, "E0": gs.e0, "momentum": gs.q.tolist(),
        "momentum_name": gs.q_name, "degenerate": gs.degenerate, "sector_e0": gs.sector_e0,
        "sector_dims": gs.dims, "sector_times_s": gs.times, "build_time_s": gs.build_time,
        "mu_plus": mu_p, "mu_minus": mu_m, "thresholds": asdict(th), "twist_phi": phi,
        "sectors": "space group (trivial)" if isinstance(gs.sector, SymSector) else "translations",
    }
    if "stiffness_method" in obs:
        extra["stiffness_method"] = obs["stiffness_method"]
    if "sq" in obs:
        extra["momenta"], extra["sq"] = obs["momenta"], obs["sq"]
    if "nk" in obs:
        extra["nk"] = obs["nk"]
    comp = None
    if gap is not None:
        comp = math.inf if gap <= 0 else 1.0 / (L * gap)
    return Solution(
        model=model, method=f"ed:{cluster}" if isinstance(cluster, str) else "ed", phase=phase, label=label, filling=N / L,
        densities=np.full(L, N / L), condensate=np.full(L, math.sqrt(max(lam, 0.0) / L) if lam == lam else math.nan),
        energy=gs.e0 / L, converged=converged, iterations=len(gs.sector_e0), residual=gs.residual,
        seed=f"Q={gs.q_name}", pattern=pattern, order=order, flags=flags, sites=cell.sites.copy(),
        compressibility=comp, extra=extra,
    )


def scan_ed(model: Model, param: str, values, cluster="tri12", particles=None, **options):
    """Solve ED at each value of one model parameter; returns an xarray Dataset.

    ``param`` is any Model field (``t``, ``V``, ``U``, ``V2``, ``mu``); per-family parameters
    take a scalar (isotropic) or a tuple per value. Variables: ``energy`` (per site), ``N``,
    ``SK_per_site``, ``sq_max``, ``condensate_fraction``, ``stiffness``, ``gap``, ``phase``.
    """
    import xarray as xr

    fields = set(model.to_dict())
    if param not in fields or param in ("lattice", "unit", "n_max"):
        raise ConfigError(f"scan: parameter must be one of t, V, U, V2, mu, got {param!r}")
    values = list(values)
    rows = []
    for v in values:
        sol = solve_ed(model.replace(**{param: v}), cluster=cluster, particles=particles, **options)
        rows.append(sol)
    coord = np.array([np.mean(v) if np.ndim(v) else v for v in values], float)
    get = lambda k: np.array([s.order.get(k, np.nan) for s in rows], float)  # noqa: E731
    ds = xr.Dataset({
        "energy": (param, np.array([s.energy for s in rows]), {"units": model.unit}),
        "N": (param, np.array([s.extra["N"] for s in rows])),
        "SK_per_site": (param, get("S(K)/N")), "sq_max": (param, get("sq_max")),
        "condensate_fraction": (param, get("condensate_fraction")), "stiffness": (param, get("stiffness")),
        "gap": (param, get("gap")), "phase": (param, np.array([s.phase for s in rows]).astype(str)),
    }, coords={param: coord})
    from ..store import provenance

    ds.attrs.update({**provenance(model, "ed"), "model": json.dumps(model.to_dict()),
                     "kind": f"ED scan over {param}", "cluster": json.dumps(rows[0].extra["cluster"])})
    return ds
