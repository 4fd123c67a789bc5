r"""Ground-state observables on a periodic cluster.

Conventions (L sites, N bosons, translation-invariant ground state :math:`|\psi\rangle`):

* density correlation :math:`C(\delta) = \langle n_0 n_\delta\rangle`, from the diagonal
  translation-invariant operators :math:`\sum_i n_i n_{i+\delta}` on the representatives;
* structure factor :math:`S(Q) = \frac1L\sum_{ij} e^{iQ\cdot(r_i-r_j)}\langle n_i n_j\rangle`;
  the order parameter reported is :math:`S(Q)/L = \langle|\rho_Q|^2\rangle` with
  :math:`\rho_Q = \frac1L\sum_i n_i e^{iQ\cdot r_i}`, the same normalisation as
  :meth:`phasemap.lattice.Supercell.structure_factor` (1/9 for a perfect √3×√3 solid at 1/3);
* one-body density matrix :math:`\rho_{ij} = \langle b_i^\dagger b_j\rangle = g(r_j-r_i)`; its
  eigenvalues are the momentum occupations :math:`n(k) = \sum_\delta g(\delta)e^{ik\cdot\delta}`
  (sum N); condensate fraction :math:`f_c = \max_k n(k)/N`;
* superfluid stiffness along bond family f: with a uniform vector potential
  :math:`A = \phi\,\hat e_f` (:math:`\hat e_f` the unit vector of the bond, phase
  :math:`e^{iA\cdot D}` per hop by D), :math:`\rho_f = \frac1L\,\partial^2E_0/\partial\phi^2`,
  evaluated by central differences :math:`[E_0(h)+E_0(-h)-2E_0(0)]/(Lh^2)` at
  :math:`h = \phi, 2\phi` combined by Richardson extrapolation (error :math:`O(\phi^4)`) inside
  the ground-state momentum sector (the symmetric difference removes a possible linear term
  from a current-carrying degenerate level). Free bosons at k = 0 give
  :math:`\rho_f = \frac2L\sum_g t_g(\hat e_f\cdot D_g)^2` per boson, i.e.
  :math:`\rho = 2 n \sum_g t_g (\hat e\cdot D_g)^2` at density n.

References
----------
.. [1] O. Penrose and L. Onsager, Phys. Rev. 104, 576 (1956) (condensate from the largest
   eigenvalue of the one-body density matrix).
.. [2] M. E. Fisher, M. N. Barber, D. Jasnow, Phys. Rev. A 8, 1111 (1973) (helicity modulus
   from twisted boundary conditions).
.. [3] E. L. Pollock and D. M. Ceperley, Phys. Rev. B 36, 8343 (1987) (superfluid stiffness).
"""

from __future__ import annotations

import numpy as np

import math

from ..model import ConfigError
from ..lattice import sq_peak
from .guard import DEFAULT_BUDGET_GIB
from .sector import Sector
from .spacegroup import SymSector, stiffness_linear_response

__all__ = ["density_correlation", "structure_factor", "one_body", "stiffness", "measure"]


def _displacement_index(sector: Sector) -> np.ndarray:
    """target[d, i] = site reached from site i by the displacement of site d (relative to site 0)."""
    cell = sector.cell
    rel = cell.sites - cell.sites[0]
    return np.stack([cell.index(cell.sites + d) for d in rel])


def density_correlation(sector: Sector, q, vec) -> np.ndarray:
    """C(delta) = <n_0 n_delta> for the displacement of every site (translation average)."""
    if isinstance(sector, SymSector):
        return sector.density_correlation(vec)
    keep = sector.mask(q)
    w = np.abs(vec) ** 2
    n = sector.occ[keep].astype(float)
    tgt = _displacement_index(sector)
    return np.array([w @ np.einsum("ri,ri->r", n, n[:, t]) for t in tgt]) / sector.L


def structure_factor(sector: Sector, q, vec) -> tuple[np.ndarray, np.ndarray]:
    """(momenta, S(Q)) at every allowed momentum of the cluster; see module notes."""
    cell = sector.cell
    C = density_correlation(sector, q, vec)
    rel = cell.sites - cell.sites[0]
    ph = np.exp(-2j * np.pi * (rel @ cell.momenta.T))  # (L, M)
    return cell.momenta, np.real(C @ ph)


def one_body(sector: Sector, q, vec) -> dict:
    """One-body density matrix g(delta) = <b_0^+ b_delta>, n(k) and the condensate fraction.

    Works on the Fock-space expansion of the ground state (translation invariance makes
    row 0 of the density matrix sufficient); requires a translation-symmetric sector.
    """
    cell = sector.cell
    if isinstance(sector, SymSector):
        rel = cell.sites - cell.sites[0]
        g = sector.one_body(vec)
        nk = np.real(np.exp(2j * np.pi * (cell.momenta @ rel.T)) @ g)
        k = int(np.argmax(nk))
        N = max(sector.N, 1)
        return {"g": g, "nk": nk, "k_max": cell.momenta[k],
                "condensate_fraction": float(nk[k] / N) if sector.N else 0.0}
    if not sector.group.orders and sector.L > 1:
        raise ValueError("one_body: needs a translation-symmetric sector (symmetric=True)")
    codes, amp = sector.expand(q, vec)
    occ = sector.occupations(codes)
    cell, place, L = sector.cell, sector._place, sector.L
    rel = cell.sites - cell.sites[0]
    tgt = cell.index(cell.sites[0] + rel)
    g = np.zeros(L, complex)
    for d, j in enumerate(tgt):
        if j == 0:
            g[d] = np.vdot(amp, occ[:, 0] * amp)
            continue
        ok = np.nonzero((occ[:, j] > 0) & (occ[:, 0] < sector.sps - 1))[0]
        new = codes[ok] + place[0] - place[j]
        pos = np.searchsorted(codes, new)
        g[d] = np.sum(np.conj(amp[pos]) * amp[ok] * np.sqrt((occ[ok, 0] + 1.0) * occ[ok, j]))
    nk = np.real(np.exp(2j * np.pi * (cell.momenta @ rel.T)) @ g)
    N = max(sector.N, 1)
    k = int(np.argmax(nk))
    return {"g": g, "nk": nk, "k_max": cell.momenta[k], "condensate_fraction": float(nk[k] / N) if sector.N else 0.0}


def stiffness(sector: Sector, q, e0: float, vec, phi: float = 1e-2, tol: float = 1e-12, errors: dict | None = None,
              budget_gib=None) -> dict:
    """Superfluid stiffness rho_f for a twist along each bond family (see module notes).

    Space-group sectors (:class:`phasemap.ed.spacegroup.SymSector`) use linear response at
    zero twist (one ground state and one conjugate-gradient solve per class of equivalent
    families, :func:`phasemap.ed.spacegroup.stiffness_linear_response`); translation sectors
    use the twist finite differences. ``errors`` (optional dict) receives the numerical error
    of each family: the CG bound, or for finite differences the Richardson difference
    |curv(phi) - curv(2 phi)| / 3 (its leading O(phi^4) remainder is smaller).
    """
    if isinstance(sector, SymSector):
        res = stiffness_linear_response(sector, tol=min(tol, 1e-10), budget=budget_gib)
        if errors is not None:
            errors.update({f: v[1] for f, v in res.items()})
        return {f: v[0] for f, v in res.items()}
    lat = sector.cell.lattice
    D = lat.cartesian(np.array(lat.nn))
    out = {}
    for f, name in enumerate(lat.families):
        e = D[f] / np.linalg.norm(D[f])
        curv = []
        for h in (phi, 2 * phi):
            ep = sector.solve(q, A=h * e, v0=vec, tol=tol).e0
            em = sector.solve(q, A=-h * e, v0=vec, tol=tol).e0
            curv.append((ep + em - 2 * e0) / (sector.L * h**2))
        out[name] = float((4 * curv[0] - curv[1]) / 3)  # Richardson: error O(phi^4)
        if errors is not None:
            errors[name] = float(abs(curv[0] - curv[1]) / 3)
    return out


def measure(gs, which=("sq", "condensate", "stiffness"), phi: float = 1e-2, tol: float = 1e-12,
            budget_gib=DEFAULT_BUDGET_GIB) -> dict:
    """Measure ground-state observables; returns a dict (see module notes).

    The stiffness of a space-group ground state needs its own (larger) sector of the subgroup
    that keeps the twist direction; it is checked against ``budget_gib`` like any sector.
    """
    out = {}
    allowed = {"sq", "condensate", "stiffness"}
    bad = set(which) - allowed
    if bad:
        raise ConfigError(f"observables: unknown {sorted(bad)}; allowed: {sorted(allowed)}")
    sec, q, vec, cell = gs.sector, gs.q, gs.vec, gs.cell
    if "sq" in which:
        mom, sq = structure_factor(sec, q, vec)
        sq_n = sq / cell.n_sites
        out["momenta"], out["sq"] = mom, sq
        peak, k = sq_peak(mom, sq_n)
        if k >= 0:
            out["sq_max"], out["q_max"] = float(peak), cell.momentum_name(mom[k])
        if "K" in cell.lattice.special_q:
            Kq = np.array(cell.lattice.special_q["K"], float)
            hit = np.all(np.abs(np.mod(mom - Kq + 0.5, 1) - 0.5) < 1e-9, axis=1)
            out["S(K)/N"] = float(sq_n[hit][0]) if hit.any() else math.nan
    if "condensate" in which and (isinstance(sec, SymSector) or sec.group.orders):
        ob = one_body(sec, q, vec)
        out["condensate_fraction"] = ob["condensate_fraction"]
        out["nk"], out["k_condensate"] = ob["nk"], cell.momentum_name(ob["k_max"])
        out["lambda_max"] = float(np.max(ob["nk"]))
    if "stiffness" in which:
        err = {}
        try:
            st = stiffness(sec, q, gs.e0, vec, phi=phi, tol=tol, errors=err, budget_gib=budget_gib)
        except ConfigError as e:  # the stiffness sector alone is over the budget: skip it, say why
            out["stiffness_skipped"] = str(e)
        else:
            out["stiffness_families"] = st
            out["stiffness"] = float(np.mean(list(st.values())))
            out["stiffness_error"] = float(max(err.values())) if err else 0.0
            out["stiffness_method"] = "linear response" if isinstance(sec, SymSector) else "twist finite differences"
    return out
