r"""Canonical staircase E0(N), mu+-(N), charge gaps and n(mu); parameter scans.

Chemical potentials are canonical differences of the energies *without* the chemical
potential term, :math:`E_c(N) = E_0(N) + \mu N`:
:math:`\mu_+(N) = E_c(N+1) - E_c(N)`, :math:`\mu_-(N) = E_c(N) - E_c(N-1)`, the charge gap
:math:`\Delta(N) = \mu_+(N) - \mu_-(N)`. The cluster's grand-canonical filling at chemical
potential :math:`\mu` is :math:`N^*(\mu)/L` with :math:`N^* = \arg\min_N [E_c(N) - \mu N]`
(a staircase; steps at the lower convex hull of :math:`E_c(N)`). Finite clusters always
have steps; only their size dependence tells plateaus from a compressible phase.

Hard-core particle-hole symmetry (exact): :math:`n_i \to 1 - n_i` maps the hopping onto
itself and gives :math:`E_0(L-N) = E_0(N) + (L-2N)(W - \mu)`, with
:math:`W = \sum_f V_f + n_{nnn} V_2` the interaction summed over the bonds of one site
(each bond once; :math:`n_{nnn}` = number of next-nearest-neighbour families). With
``particle_hole=True`` only :math:`N \le L/2` is diagonalised.

References
----------
.. [1] T. Matsubara and H. Matsuda, Prog. Theor. Phys. 16, 569 (1956) (hard-core bosons as
   spins 1/2; particle-hole symmetry).
.. [2] S. Wessel and M. Troyer, Phys. Rev. Lett. 95, 127205 (2005) (triangular-lattice
   hard-core bosons: 1/3 and 2/3 solids).
"""

from __future__ import annotations

import json
import time

import numpy as np

from ..model import ConfigError, Model
from .clusters import get_cluster
from .groundstate import check_particles, ground_state, sector_estimate
from .guard import DEFAULT_BUDGET_GIB, check_budget
from .io import canonical_mu, filling_from_staircase  # noqa: F401  (filling_from_staircase public here too)

__all__ = ["staircase", "filling_from_staircase", "particle_hole_shift"]


def particle_hole_shift(model: Model, L: int, N: int) -> float:
    """E0(L-N) - E0(N) for hard-core bosons (see module notes)."""
    from ..lattice import get_lattice

    W = sum(model.V) + len(get_lattice(model.lattice).nnn) * model.V2
    return (L - 2 * N) * (W - model.mu)


def _n_range(n_range, L, n_max):
    if n_range is None:
        return list(range(0, n_max * L + 1))
    if isinstance(n_range, str):
        try:
            a, b = (int(x) for x in n_range.split(":"))
        except ValueError:
            raise ConfigError(f"particles: range must look like 'a:b' (inclusive), got {n_range!r}") from None
        n_range = range(a, b + 1)
    ns = sorted({check_particles(n, L, n_max, "particles") for n in n_range})
    if not ns:
        raise ConfigError("particles: empty particle-number range")
    return ns


def _prov(model) -> dict:
    from ..store import provenance

    return provenance(model, "ed")


def staircase(model: Model, cluster="tri12", n_range=None, particle_hole: bool = True,
              observables=("sq",), budget_gib: float | None = DEFAULT_BUDGET_GIB, tol: float = 1e-10,
              point_group_reduce: bool = True, lookup: str = "auto", all_momenta: bool = False, progress=None,
              rep_lookup: str = "auto"):
    """E0(N) and derived canonical quantities over a range of particle numbers.

    Parameters
    ----------
    n_range : iterable of int or "a:b", optional
        Particle numbers (default all, 0..n_max L).
    particle_hole : bool
        Hard-core only: obtain E0(L-N) from E0(N) (exact, see module notes); observables of
        the mapped points are copied (S(Q) of holes equals that of particles for Q != 0).
    observables : tuple
        Per-N observables: "sq" (cheap), "condensate", "stiffness" (costly).
    all_momenta : bool
        Diagonalise every momentum class (ground-state momenta and degeneracies); by default
        only Q = 0, which holds a ground state for t >= 0 (Perron-Frobenius, see
        :func:`phasemap.ed.groundstate.ground_state`).
    rep_lookup : {"auto", "table", "search"}
        Lookup of the space-group sectors (see :func:`phasemap.ed.groundstate.ground_state`).
    progress : callable, optional
        Called as ``progress(N, seconds)`` after each diagonalised N.

    Returns
    -------
    xarray.Dataset
        Dimension ``N`` with coordinate ``filling``; variables ``E0``, ``E0_per_site``,
        ``E_canonical``, ``mu_plus``, ``mu_minus``, ``gap``, ``q1``, ``q2``, ``q_name``,
        ``dim`` (ground-state sector), ``time_s``, ``from_particle_hole`` and the requested
        observables; attrs ``model`` (JSON), ``method`` = "ed", ``version``, ``cluster``,
        ``n_sites``, ``gap_1_3``, ``gap_2_3``.
    """
    import xarray as xr

    from .observables import measure

    cell = get_cluster(cluster, model.lattice)
    L = cell.n_sites
    ns = _n_range(n_range, L, model.n_max)
    use_ph = bool(particle_hole and model.hardcore)
    todo = [N for N in ns if not (use_ph and N > L - N and (L - N) in ns)]
    for N in todo:  # refuse before anything is diagonalised
        est = sector_estimate(model, cell, N, budget_gib, rep_lookup, all_momenta=all_momenta, lookup=lookup)
        check_budget(est, budget_gib, what=f"ED sector N={N} on {cell!r} (staircase; restrict --particles)")
    rec = {}
    for N in ns:
        if use_ph and N > L - N and (L - N) in rec:
            continue
        t0 = time.perf_counter()
        gs = ground_state(model, cell, N, budget_gib=budget_gib, tol=tol,
                          point_group_reduce=point_group_reduce, lookup=lookup, all_momenta=all_momenta,
                          rep_lookup=rep_lookup)
        obs = measure(gs, observables) if observables and N not in (0, model.n_max * L) else {}
        dt = time.perf_counter() - t0
        rec[N] = dict(E0=gs.e0, q=gs.q, q_name=gs.q_name, dim=gs.dims.get(gs.q_name, 0), time_s=dt,
                      ph=False, obs=obs, degenerate=",".join(gs.degenerate))
        del gs  # free this sector before the next is built (the guard checks one sector at a time)
        if progress:
            progress(N, dt)
    if use_ph:
        for N in ns:
            if N not in rec and (L - N) in rec:
                src = rec[L - N]
                rec[N] = dict(src, E0=src["E0"] + particle_hole_shift(model, L, L - N), ph=True, time_s=0.0)
    E0 = np.array([rec[N]["E0"] for N in ns])
    Ec = E0 + model.mu * np.array(ns)
    mu_m, mu_p = canonical_mu(ns, Ec)
    data = {
        "E0": ("N", E0, {"long_name": "ground-state energy (incl. -mu N)", "units": model.unit}),
        "E0_per_site": ("N", E0 / L, {"units": model.unit}),
        "E_canonical": ("N", Ec, {"long_name": "E0 + mu N", "units": model.unit}),
        "mu_plus": ("N", mu_p, {"long_name": "E_c(N+1) - E_c(N)", "units": model.unit}),
        "mu_minus": ("N", mu_m, {"long_name": "E_c(N) - E_c(N-1)", "units": model.unit}),
        "gap": ("N", mu_p - mu_m, {"long_name": "charge gap mu+ - mu-", "units": model.unit}),
        "q1": ("N", np.array([rec[N]["q"][0] for N in ns])),
        "q2": ("N", np.array([rec[N]["q"][1] for N in ns])),
        "q_name": ("N", np.array([rec[N]["q_name"] for N in ns], dtype=object).astype(str)),
        "degenerate": ("N", np.array([rec[N]["degenerate"] for N in ns], dtype=object).astype(str)),
        "dim": ("N", np.array([rec[N]["dim"] for N in ns], dtype=np.int64)),
        "time_s": ("N", np.array([rec[N]["time_s"] for N in ns])),
        "from_particle_hole": ("N", np.array([rec[N]["ph"] for N in ns])),
    }
    for key in ("S(K)/N", "sq_max", "condensate_fraction", "stiffness"):
        if any(key in rec[N]["obs"] for N in ns):
            name = {"S(K)/N": "SK_per_site"}.get(key, key)
            data[name] = ("N", np.array([rec[N]["obs"].get(key, np.nan) for N in ns], float))
    gaps = {}
    for p, q in ((1, 3), (2, 3)):
        n13 = L * p / q
        gaps[f"gap_{p}_{q}"] = float(data["gap"][1][ns.index(int(n13))]) if n13.is_integer() and int(n13) in ns else np.nan
    ds = xr.Dataset(data, coords={"N": ns, "filling": ("N", np.array(ns) / L)})
    ds.attrs.update({
        **_prov(model), "model": json.dumps(model.to_dict()),
        "kind": "canonical staircase", "cluster": json.dumps(cell.vectors.tolist()),
        "lattice": cell.lattice.name, "n_sites": L, "unit": model.unit,
        "particle_hole": int(use_ph), **gaps,
        "conventions": "mu+-(N) from E_c = E0 + mu N; S(K)/N = <|rho_K|^2>; see docs/ed.md",
    })
    return ds
