"""Exact thermal averages of hard-core bosons on a small torus, by full diagonalization with
numpy (one dense block per particle number). Independent of the QMC engine and of phasemap's
ED: only the site coordinates and the bond pairs of the torus are taken from
``phasemap.lattice.Supercell`` (geometry).

Stiffness: rho_f = (1/N) d^2 F / d phi^2 with F = -T ln Tr exp(-H(phi)/T), the hopping along a
bond with Cartesian displacement D carrying the phase exp(i phi e_f . D) (uniform vector
potential along the unit vector e_f of family f; twisted boundary conditions in a
translation-invariant gauge), by a central difference.
"""

from __future__ import annotations

import numpy as np
from scipy.special import logsumexp

from phasemap.cmf.threads import blas_threads
from phasemap.lattice import Supercell
from phasemap.qmc.stats import Estimate


def torus_bonds(lattice, vectors, t, V, V2=0.0):
    """[(i, j, t, V, cartesian displacement)] for every bond of the torus."""
    cell = Supercell(lattice, vectors)
    lat = cell.lattice
    out = []
    for f, d in enumerate(lat.nn):
        if t[f] == 0 and V[f] == 0:
            continue
        for s in range(cell.n_sites):
            out.append((s, int(cell.neighbors[f, s]), t[f], V[f], lat.cartesian(d)))
    if V2:
        for k, d in enumerate(lat.nnn):
            for s in range(cell.n_sites):
                out.append((s, int(cell.nnn_neighbors[k, s]), 0.0, V2, lat.cartesian(d)))
    return cell, out


def _blocks(N):
    states = np.arange(1 << N)
    occ = ((states[:, None] >> np.arange(N)) & 1).astype(float)
    pop = occ.sum(1).astype(int)
    return occ, pop


def thermal(N, bonds, mu, T, A=None, sites=None, q=None, sectors=None):
    """Exact <H>/N, <n>, S(q)/N = <|rho_q|^2>, ln Z and compressibility beta(<Np^2>-<Np>^2)/N.

    ``A``: Cartesian vector potential (twist) applied to the hopping. ``sectors``: particle
    numbers summed over (default all: grand canonical; ``[Np]``: canonical ensemble).
    """
    beta = 1.0 / T
    occ, pop = _blocks(N)
    logw, Es, Ns, Sq = [], [], [], []
    for Np in range(N + 1) if sectors is None else sectors:
        idx = np.nonzero(pop == Np)[0]
        pos = {s: k for k, s in enumerate(idx)}
        dim = len(idx)
        H = np.zeros((dim, dim), complex)
        o = occ[idx]
        H[np.diag_indices(dim)] = -mu * o.sum(1)
        for i, j, t, V, D in bonds:
            H[np.diag_indices(dim)] += V * o[:, i] * o[:, j]
            if t == 0:
                continue
            ph = np.exp(1j * (A @ D)) if A is not None else 1.0
            # b_j^+ b_i (particle i -> j, displacement +D) has amplitude -t e^{i A.D}
            for k, s in enumerate(idx):
                if o[k, i] == 1 and o[k, j] == 0:
                    s2 = s ^ (1 << i) ^ (1 << j)
                    k2 = pos[s2]
                    H[k2, k] += -t * ph
                    H[k, k2] += -t * np.conj(ph)
        with blas_threads(1):  # multithreaded BLAS is many times slower on a loaded machine
            e, v = np.linalg.eigh(H if A is not None else H.real)
        logw.append(-beta * e)
        Es.append(e)
        Ns.append(np.full(dim, Np))
        if q is not None:
            phase = np.exp(2j * np.pi * (sites @ q))
            rq2 = np.abs(o @ phase) ** 2 / N**2  # diagonal in the Fock basis
            Sq.append(np.einsum("ak,a,ak->k", np.conj(v), rq2, v).real)
    logw, Es, Ns = map(np.concatenate, (logw, Es, Ns))
    lnZ = logsumexp(logw)
    p = np.exp(logw - lnZ)
    out = {"lnZ": lnZ, "energy": p @ Es / N, "filling": p @ Ns / N,
           "compressibility": beta * (p @ Ns**2 - (p @ Ns) ** 2) / N}
    if q is not None:
        out["sq"] = p @ np.concatenate(Sq)
    return out


def stiffness(N, bonds, mu, T, direction, h=0.01, F0=None, sectors=None):
    """rho along the unit Cartesian vector ``direction`` (see module notes); central difference
    with step h (relative error ~ h^2 / 12 ~ 1e-5, far below the QMC errors compared with)."""
    e = np.asarray(direction, float) / np.linalg.norm(direction)
    F = lambda phi: -T * thermal(N, bonds, mu, T, A=phi * e, sectors=sectors)["lnZ"]  # noqa: E731
    F0 = F(0.0) if F0 is None else F0
    return (F(h) + F(-h) - 2 * F0) / (N * h * h)


def free_fermion_chain(L, t, mu, T):
    """Open XX chain = free fermions: exact <H>/L and filling (Jordan-Wigner; Lieb, Schultz &
    Mattis, Ann. Phys. 16, 407 (1961))."""
    h = np.zeros((L, L))
    for s in range(L - 1):
        h[s, s + 1] = h[s + 1, s] = -t
    eps = np.linalg.eigvalsh(h) - mu
    f = 0.5 * (1 - np.tanh(eps / (2 * T)))
    return {"energy": float(f @ eps / L), "filling": float(f.sum() / L)}


def compare(res, lattice, vectors, model, T, keys=("energy", "filling", "compressibility", "sq", "stiffness"),
            nsig=4.0, sectors=None):
    """Assert every ``keys`` estimate of the QMC result ``res`` within ``nsig`` of its own sigma of
    the exact thermal average (``sectors``: canonical, see :func:`thermal`); returns the list
    ``(name, estimate, exact)``."""
    cell, bonds = torus_bonds(lattice, vectors, model.t, model.V, model.V2)
    assert cell.n_sites == res.n_sites
    K = np.array(cell.lattice.special_q["K"] if "K" in cell.lattice.special_q else cell.lattice.special_q["M"], float)
    ex = thermal(cell.n_sites, bonds, model.mu, T, sites=cell.sites, q=K, sectors=sectors)
    out = []
    for k in ("energy", "filling", "compressibility"):
        if k in keys:
            out.append((k, res[k], ex[k]))
    if "sq" in keys:
        hit = np.nonzero(np.all(np.abs(np.mod(res.momenta - K + 0.5, 1) - 0.5) < 1e-9, axis=1))[0][0]
        out.append(("S(K)/N", Estimate(res.sq[hit], res.sq_err[hit], 0.0), ex["sq"]))
        if "S(K)/N" in res.estimates:
            out.append(("S(K)/N", res["S(K)/N"], ex["sq"]))
    if "stiffness" in keys:
        D = cell.lattice.cartesian(np.array(cell.lattice.nn))
        for f, name in enumerate(cell.lattice.families):
            rho = stiffness(cell.n_sites, bonds, model.mu, T, D[f], F0=-T * ex["lnZ"], sectors=sectors)
            out.append((f"stiffness_{name}", res[f"stiffness_{name}"], rho))
    for name, e, x in out:
        assert e.error > 0, name
        assert abs(e.value - x) < nsig * e.error, f"{name}: qmc {e.value:.6f} ± {e.error:.2g}, exact {x:.6f}"
    return out
