r"""Hard-core sectors of the space group (translations x kept point group), compiled.

For hard-core bosons a Fock state of L <= 62 sites is an integer (bit i = site i). The group
G = {(v, M)} of the torus (all L translations v times the point-group operations M that map
the torus *and the actual couplings* onto themselves, :func:`phasemap.ed.clusters.point_group`)
acts by site permutations. For a real one-dimensional character chi of G with chi(v, M) =
chi(M) (zero total momentum) the sector basis is

.. math:: |\tilde r\rangle = \frac{1}{\sqrt{|G|\,|\mathrm{Stab}\,r|}}\sum_{g\in G}\chi(g)\,g|r\rangle ,

one state per orbit whose stabiliser has chi = 1 (other orbits have no state in the sector).
The representative r of an orbit is its smallest integer. For an operator O that commutes
with G (the Hamiltonian, or a G-averaged observable) the matrix element is

.. math:: \langle\tilde r'|O|\tilde r\rangle = \sqrt{|\mathrm{Stab}\,r'|/|\mathrm{Stab}\,r|}
          \sum_{s = h r' \in O|r\rangle} c_s\,\chi(h) .

Implementation (numba, no Python loop over states):

* **Enumeration**: the C(L, N) states with N bits are walked in increasing order
  (Gosper's next-combination, which is colexicographic rank order); a table indexed by
  the colex rank (4 bytes per Fock state) records for every Fock state its representative
  index times chi(h), so a state not yet seen starts a new orbit and all its images are
  marked at once. The number of sector states is known beforehand exactly from Burnside's
  lemma (:func:`sector_dimension`), which the memory guard uses.
* Bit permutations and colex ranks use byte tables (five look-ups each for 36 sites).
* **Hamiltonian**: CSR built in two parallel passes over representatives (count, fill); an
  int8 code per entry stores bond family and character sign, so a new model on the same
  cluster (same symmetry) only recomputes the values (scans in t reuse the sector).
* **Lanczos** (ARPACK ``eigsh``) on a parallel compiled CSR product.

Why the ground state lies in the trivial sector: with t >= 0 every off-diagonal element of H
in the occupation basis is <= 0, so (Perron-Frobenius) a ground state psi >= 0 exists; its
group average (1/|G|) sum_g g psi is >= 0, nonzero and an eigenvector of the same energy,
and it lies in the trivial (chi = 1, Q = 0) sector. E0(N) from that sector is exact.
The stiffness (linear response to a twist) uses the subgroup that leaves the twist direction
invariant (:func:`phasemap.ed.spacegroup.stiffness`).

References
----------
.. [1] A. Weiße and H. Fehske, Lect. Notes Phys. 739, 529 (2008) (symmetric bases).
.. [2] A. W. Sandvik, AIP Conf. Proc. 1297, 135 (2010), sec. 4 (representatives, stabilisers).
.. [3] R. W. Gosper, HAKMEM item 175 (1972) (next bit pattern with the same popcount).
.. [4] W. Burnside, *Theory of groups of finite order* (1897) (orbit counting).
"""

from __future__ import annotations

import math
import time

import numpy as np

from ..lattice import Supercell
from ..model import Model
from .clusters import point_group
from .guard import TABLE_KEEP_BYTES
from .replookup import SearchLookup, empty_pack, flagged_states
from .sgkernels import (
    _COL_BITS,
    _COL_MASK,
    _SENT,
    _apply_bonds,
    _bond_counts,
    _compact,
    _count_hops,
    _fill_hops,
    _mark_orbits,
    _packed_matvec,
    _pair_correlation,
    _perm_tables,
    _stabilisers,
    _values,
)

__all__ = ["SymSector", "group_permutations", "sector_dimension", "MAX_SITES"]

MAX_SITES = 62
_DENSE_MAX = 600


# -- byte tables -----------------------------------------------------------------------------
def _rank_tables(L: int) -> tuple[np.ndarray, np.ndarray]:
    """rtab[c, m, b]: colex-rank contribution of byte b of chunk c when m bits lie below it."""
    C = (L + 7) // 8
    rtab = np.zeros((C, L + 1, 256), np.int64)
    for c in range(C):
        for m in range(L + 1):
            for b in range(256):
                r, j = 0, 0
                for k in range(8):
                    if (b >> k) & 1:
                        r += math.comb(8 * c + k, m + j + 1)
                        j += 1
                rtab[c, m, b] = r
    pc = np.array([bin(b).count("1") for b in range(256)], np.int64)
    return rtab, pc


_RANK_CACHE: dict = {}


def _rank_tables_cached(L):
    if L not in _RANK_CACHE:
        _RANK_CACHE[L] = _rank_tables(L)
    return _RANK_CACHE[L]


def _enumerate(N, total, ptab, rtab, pc, chi, table, n_chunks=512):
    """Representatives (smallest state of each orbit in the sector), stabilisers; fills ``table``.

    Parallel: flag orbit minima (early exit at the first smaller image; one bit per Fock
    state), collect them in rank order, count stabilisers, then mark every Fock state with its
    representative.
    """
    z = empty_pack()
    orbits = flagged_states(N, total, 0, ptab, z[1], z[2], z[3], z[4], z[5], z[6], False, n_chunks)
    stab = np.empty(len(orbits), np.int64)
    ok = np.empty(len(orbits), np.bool_)
    _stabilisers(orbits, ptab, chi, stab, ok)
    index = np.where(ok, np.cumsum(ok) - 1, -1).astype(np.int64)
    _mark_orbits(orbits, index, ptab, rtab, pc, chi, table)
    return orbits[ok], stab[ok]


# -- group -----------------------------------------------------------------------------------
def group_permutations(cell: Supercell, ops) -> tuple[np.ndarray, np.ndarray]:
    """Site permutations of every element (v, M) and the index of its point operation.

    ``perms[g, i]`` is the site reached from site ``i``; translations run over all L lattice
    vectors of the torus, point operations ``M`` act as ``r -> r M`` in (i, j) coordinates.
    """
    trans = cell.sites - cell.sites[0]
    perms, opi = [], []
    for k, M in enumerate(ops):
        rot = cell.sites @ np.asarray(M)
        for v in trans:
            perms.append(cell.index(rot + v))
            opi.append(k)
    return np.array(perms, np.int64), np.array(opi, np.int64)


def _cycle_poly(perm: np.ndarray, n_max: int) -> list[int]:
    """Coefficients of prod_cycles (1 + x^c + ... + x^{n_max c}): fixed states per particle number."""
    L = len(perm)
    seen = np.zeros(L, bool)
    poly = [1]
    for i in range(L):
        if seen[i]:
            continue
        c, j = 0, i
        while not seen[j]:
            seen[j] = True
            j = perm[j]
            c += 1
        new = [0] * (len(poly) + n_max * c)
        for a, v in enumerate(poly):
            if v:
                for k in range(n_max + 1):
                    new[a + k * c] += v
        poly = new
    return poly


def sector_dimension(perms: np.ndarray, chi: np.ndarray, N: int, n_max: int = 1) -> int:
    """Exact number of states of the sector (Burnside: (1/|G|) sum_g chi(g) |Fix_N(g)|)."""
    tot = 0
    cache = {}
    for g, p in enumerate(perms):
        key = p.tobytes()
        if key not in cache:
            poly = _cycle_poly(p, n_max)
            cache[key] = poly[N] if N < len(poly) else 0
        tot += int(chi[g]) * cache[key]
    if tot % len(perms):  # pragma: no cover - chi is not a character of the group
        raise ValueError("sector_dimension: the given signs are not a character of the group")
    return tot // len(perms)


def det_character(ops) -> np.ndarray:
    """+1 for proper rotations, -1 for mirrors (a one-dimensional character of any point group)."""
    return np.array([int(round(np.linalg.det(np.asarray(M)))) for M in ops], np.int64)


# -- the sector --------------------------------------------------------------------------------
class SymSector:
    """One hard-core sector of the space group at fixed N (zero momentum, real character).

    Parameters
    ----------
    cell : Supercell
    model : Model
        Hard-core couplings (``t >= 0``); sets the bond families that hop and the diagonal.
    N : int
    ops : list of 2x2 int arrays, optional
        Point operations kept (default: :func:`phasemap.ed.clusters.point_group`, the ones
        that map the torus and the couplings onto themselves). Must form a group.
    chi : array of +-1 per operation, optional
        One-dimensional character of the point group (default trivial).
    """

    def __init__(self, cell: Supercell, model: Model, N: int, ops=None, chi=None, keep_table=None,
                 lookup: str = "table"):
        t0 = time.perf_counter()
        if not model.hardcore:
            raise ValueError("SymSector: hard-core bosons only")
        L = self.L = cell.n_sites
        if L > MAX_SITES:
            raise ValueError(f"SymSector: at most {MAX_SITES} sites")
        self.cell, self.model, self.N = cell, model, int(N)
        self.ops = [np.asarray(M) for M in (point_group(cell, model) if ops is None else ops)]
        ident = next(k for k, M in enumerate(self.ops) if np.array_equal(M, np.eye(2)))
        self.ops.insert(0, self.ops.pop(ident))
        chi_op = np.ones(len(self.ops), np.int64) if chi is None else np.asarray(chi, np.int64)
        if chi is not None:
            chi_op = np.concatenate([[chi_op[ident]], np.delete(chi_op, ident)])
        self.chi_op = chi_op
        self.perms, self.opi = group_permutations(cell, self.ops)
        self.chi = chi_op[self.opi].astype(np.int64)
        self.dim = sector_dimension(self.perms, self.chi, self.N)
        if self.dim > _COL_MASK + 1:
            raise ValueError(f"SymSector: sector dimension {self.dim} above the packed-column limit 2**{_COL_BITS}")
        self.fock = math.comb(L, self.N)
        if lookup not in ("table", "search"):
            raise ValueError(f"SymSector: lookup must be 'table' or 'search', got {lookup!r}")
        self.lookup = lookup
        self._rtab, self._pc = _rank_tables_cached(L)
        self._ptab = _perm_tables(self.perms)
        if lookup == "search":
            self.keep_table = False
            lk = self._search = SearchLookup(cell, self.perms[::L], self.chi_op, self.N)
            self.states, self.stab = lk.states, lk.stab
            self.table = np.zeros(0, np.int32)  # empty: the kernels search instead
            self._sx = lk.pack
        else:
            self.keep_table = 4.0 * self.fock <= TABLE_KEEP_BYTES if keep_table is None else bool(keep_table)
            self._search = None
            self._sx = empty_pack()
            self.table = np.zeros(self.fock, np.int32)
            self.states, self.stab = _enumerate(self.N, self.fock, self._ptab, self._rtab, self._pc, self.chi,
                                                self.table)
        n = len(self.states)
        if n != self.dim:  # pragma: no cover - guards the Burnside count and the enumeration
            raise RuntimeError(f"SymSector: enumeration found {n} states, Burnside predicts {self.dim}")
        self.enum_time = time.perf_counter() - t0
        self._bonds_H()
        if 2 * cell.neighbors.shape[0] > 2 ** (31 - _COL_BITS):  # pragma: no cover - 8 families fit
            raise ValueError("SymSector: too many hopping families for the packed entries")
        nb = np.asarray(cell.neighbors, np.int64)
        self.counts = _bond_counts(self.states, nb)
        self.nnn_counts = (_bond_counts(self.states, np.asarray(cell.nnn_neighbors, np.int64)).sum(1)
                           if model.V2 else None)
        self.indptr = np.cumsum(_count_hops(self.states, self._ba, self._bb))
        self.packed = np.empty(int(self.indptr[-1]), np.int32)
        _fill_hops(self.states, self.table, self._rtab, self._pc, self._sx, self._ba, self._bb, self._bcode,
                   self.indptr, self.packed)
        nnz = _compact(self.indptr, self.packed)
        if nnz < len(self.packed):
            self.packed = self.packed[:nnz].copy()
        if not self.keep_table:
            self.table = None if lookup == "table" else self.table
        stab = self.stab.astype(np.float64)
        self._sq, self._isq = np.sqrt(stab), 1.0 / np.sqrt(stab)
        self._z = None
        self.set_model(model)
        self.build_time = time.perf_counter() - t0

    # -- structure ---------------------------------------------------------------------------
    def _bonds_H(self):
        """Directed hops b_a^+ b_b of every family with t != 0 (code = family + 1)."""
        nb = self.cell.neighbors
        ba, bb, code = [], [], []
        for f in range(nb.shape[0]):
            if self.model.t[f] == 0:
                continue
            i = np.arange(self.L)
            ba += [i, nb[f]]
            bb += [nb[f], i]
            code += [np.full(2 * self.L, f + 1)]
        cat = lambda x, d: np.concatenate(x).astype(d) if x else np.zeros(0, d)  # noqa: E731
        self._ba, self._bb, self._bcode = cat(ba, np.int64), cat(bb, np.int64), cat(code, np.int8)
        self._hop_families = tuple(f for f in range(nb.shape[0]) if self.model.t[f] != 0)

    @property
    def nnz(self) -> int:
        return int(self.indptr[-1])

    @property
    def group_order(self) -> int:
        return len(self.perms)

    def compatible(self, model: Model) -> bool:
        """True if ``model`` can reuse this sector (same hopping families, symmetry kept)."""
        if not model.hardcore or model.lattice != self.model.lattice:
            return False
        if tuple(f for f in range(len(model.t)) if model.t[f] != 0) != self._hop_families:
            return False
        if bool(model.V2) != bool(self.model.V2):
            return False
        kept = point_group(self.cell, model)
        return all(any(np.array_equal(M, K) for K in kept) for M in self.ops)

    def set_model(self, model: Model) -> None:
        """Recompute the matrix values for new couplings on the same sector (cheap)."""
        if model is not self.model and not self.compatible(model):
            raise ValueError("SymSector.set_model: the model changes the symmetry or the hopping families")
        self.model = model
        self._amps = -np.asarray(model.t, float)
        self._amp2 = np.repeat(self._amps, 2) * np.tile([1.0, -1.0], len(self._amps))
        d = self.counts.astype(np.float64) @ np.asarray(model.V, float) - model.mu * self.N
        if self.nnn_counts is not None:
            d = d + model.V2 * self.nnn_counts
        self.diag = d

    @property
    def data(self) -> np.ndarray:
        """Explicit off-diagonal values (8 bytes per entry; the product does not need them)."""
        out = np.empty(self.nnz, np.float64)
        _values(self.indptr, self.packed, self.stab.astype(np.float64), self._amps, out)
        return out

    @property
    def indices(self) -> np.ndarray:
        return self.packed & _COL_MASK

    def matvec(self, x) -> np.ndarray:
        x = np.ascontiguousarray(x, dtype=np.float64)
        y = np.empty_like(x)
        if self._z is None:
            self._z = np.empty(self.dim)
        _packed_matvec(self.indptr, self.packed, self._amp2, self._sq, self._isq, self.diag, x, self._z, y)
        return y

    def matrix(self):
        """The sector Hamiltonian as a scipy CSR matrix (for tests and small sectors)."""
        import scipy.sparse as sp

        H = sp.csr_matrix((self.data, self.indices, self.indptr), shape=(self.dim, self.dim))
        return (H + sp.diags(self.diag)).tocsr()

    def drop_table(self) -> None:
        """Free the rank table (4 bytes per Fock state); :meth:`ensure_table` rebuilds it."""
        if self.lookup == "table":
            self.table = None

    def ensure_table(self) -> np.ndarray:
        """The rank table (Fock rank -> +-(representative index + 1)), rebuilt if it was freed."""
        if self.table is None:
            table = np.full(self.fock, _SENT, np.int32)
            _mark_orbits(self.states, np.arange(self.dim, dtype=np.int64), self._ptab, self._rtab, self._pc,
                         self.chi, table)
            self.table = table
        return self.table

    # -- eigenpairs ------------------------------------------------------------------------------
    def solve(self, k: int = 1, tol: float = 1e-10, v0=None):
        """Lowest ``k`` eigenpairs (energies, vectors) of the sector."""
        from scipy.sparse.linalg import ArpackNoConvergence, LinearOperator, eigsh

        n = self.dim
        if n == 0:
            return np.zeros(0), np.zeros((0, 0))
        k = min(k, n)
        if self.nnz == 0:  # no hopping: the sector Hamiltonian is diagonal
            o = np.argsort(self.diag, kind="stable")[:k]
            v = np.zeros((n, k))
            v[o, np.arange(k)] = 1.0
            return self.diag[o], v
        if n <= _DENSE_MAX or k >= n - 1:
            w, v = np.linalg.eigh(self.matrix().toarray())
            return w[:k], v[:, :k]
        op = LinearOperator((n, n), matvec=self.matvec, dtype=np.float64)
        if v0 is None:
            v0 = np.random.default_rng(12345).uniform(0.5, 1.5, n)  # overlaps the Perron vector
        try:
            w, v = eigsh(op, k=k, which="SA", tol=tol, v0=v0, ncv=max(20, 2 * k + 1))
        except ArpackNoConvergence:
            w, v = eigsh(op, k=k, which="SA", tol=tol, v0=v0, ncv=max(40, 4 * k + 1), maxiter=100 * n)
        o = np.argsort(w)
        return w[o], v[:, o]

    # -- observables -------------------------------------------------------------------------
    def apply_bonds(self, ba, bb, amp, x) -> np.ndarray:
        """Matrix-free product with a G-invariant hopping operator sum_q amp_q b_{a_q}^+ b_{b_q}."""
        table = self.ensure_table()
        y = np.empty(self.dim)
        _apply_bonds(self.states, table, self._rtab, self._pc, self._sx, self.stab.astype(np.float64),
                     np.asarray(ba, np.int64), np.asarray(bb, np.int64), np.asarray(amp, np.float64),
                     np.ascontiguousarray(x, np.float64), y)
        return y

    def _displacements(self):
        """rel (L, 2) displacement of every site from site 0; tgt[d, i] = site i + rel[d]."""
        cell = self.cell
        rel = cell.sites - cell.sites[0]
        tgt = np.stack([cell.index(cell.sites + d) for d in rel])
        return rel, tgt

    def _point_images(self, rel):
        """img[k, d] = displacement index of rel[d] M_k (for averaging over the point group)."""
        cell = self.cell
        return np.stack([cell.index(cell.sites[0] + rel @ M) for M in self.ops])

    def density_correlation(self, vec) -> np.ndarray:
        """C(delta) = <n_0 n_delta> (translation average, point-group symmetric)."""
        rel, tgt = self._displacements()
        raw = _pair_correlation(self.states, np.abs(vec) ** 2, tgt, 8) / self.L
        img = self._point_images(rel)
        return raw[img].mean(0)

    def one_body(self, vec) -> np.ndarray:
        """g(delta) = <b_0^+ b_delta> for every displacement (point-group averaged operator)."""
        rel, tgt = self._displacements()
        img = self._point_images(rel)
        g = np.full(self.L, np.nan)
        g[0] = self.N / self.L
        for d in range(1, self.L):
            if not np.isnan(g[d]):
                continue
            imgs = img[:, d]
            a = np.concatenate([np.arange(self.L)] * len(imgs))
            b = np.concatenate([tgt[e] for e in imgs])
            amp = np.full(len(a), 1.0 / len(imgs))
            val = float(vec @ self.apply_bonds(a, b, amp, vec)) / self.L
            g[np.unique(imgs)] = val
        return g


# -- stiffness by linear response ------------------------------------------------------------------
def _twist_bonds(sec: SymSector, unit: np.ndarray):
    """Directed hops with theta = unit . (r_a - r_b): arrays (a, b, t, theta)."""
    cell = sec.cell
    lat = cell.lattice
    D = lat.cartesian(np.array(lat.nn))
    a, b, t, th = [], [], [], []
    for f in range(D.shape[0]):
        if sec.model.t[f] == 0:
            continue
        i = np.arange(sec.L)
        j = cell.neighbors[f]
        c = float(unit @ D[f])  # site j = site i + D_f: a boson moving j -> i moves by -D_f
        a += [i, j]
        b += [j, i]
        t += [np.full(sec.L, sec.model.t[f])] * 2
        th += [np.full(sec.L, -c), np.full(sec.L, c)]
    return (np.concatenate(a), np.concatenate(b), np.concatenate(t), np.concatenate(th))


def family_classes(cell: Supercell, ops) -> list[list[int]]:
    """Bond families related by the kept point operations (their stiffnesses are equal)."""
    nn = [np.array(d) for d in cell.lattice.nn]
    classes, seen = [], set()
    for f, d in enumerate(nn):
        if f in seen:
            continue
        cls = [g for g, e in enumerate(nn)
               if any(np.array_equal(d @ M, e) or np.array_equal(d @ M, -e) for M in ops)]
        seen.update(cls)
        classes.append(sorted(cls, key=lambda g: g != f))
    return classes


def stiffness_linear_response(sec: SymSector, tol: float = 1e-10, cg_rtol: float = 1e-10, budget=None):
    r"""Stiffness rho_f = (1/L) d^2E0/dphi^2 at zero twist from second-order perturbation theory.

    With a uniform vector potential ``A = phi e_f`` a hop by D gets :math:`e^{i\phi\,\theta}`,
    :math:`\theta = e_f\cdot D`, so :math:`H(\phi) = H + i\phi J + \frac{\phi^2}{2}K + O(\phi^3)`
    with J real antisymmetric (entries :math:`-t\theta`) and K symmetric (:math:`t\theta^2`), and

    .. math:: \rho_f = \frac1L\Big[\langle K\rangle - 2\,b^T (H-E_0)^{-1}_{\perp} b\Big],
              \qquad b = J\psi .

    One ground state and one conjugate-gradient solve per class of symmetry-equivalent
    families, in the sector of the subgroup that keeps e_f (translations and the mirror that
    contains e_f), where J commutes with the group. CG error on the second term is at most
    ``2 |x| |r|`` (x the solution, r the final residual), returned per family as ``error``.

    Returns
    -------
    dict family name -> (rho, error, sector dimension)
    """
    from scipy.sparse.linalg import LinearOperator, cg

    from .guard import check_budget, choose_lookup
    from .replookup import row_layout

    cell, model = sec.cell, sec.model
    lat = cell.lattice
    D = lat.cartesian(np.array(lat.nn))
    out = {}
    if not sec._hop_families:  # no hopping: E0 does not depend on the twist
        return {name: (0.0, 0.0, 0) for name in lat.families}
    for cls in family_classes(cell, sec.ops):
        f = cls[0]
        unit = D[f] / np.linalg.norm(D[f])
        sub = [M for M in sec.ops if np.array_equal(np.array(lat.nn[f]) @ M, np.array(lat.nn[f]))]
        lookup = "table"
        if budget is not None:
            ps, _ = group_permutations(cell, sub)
            dim = sector_dimension(ps, np.ones(len(ps), np.int64), sec.N)
            lookup, est = choose_lookup(sec.L, sec.N, dim, 2 * len(sec._hop_families), budget,
                                        search_ok=row_layout(cell) is not None)
            check_budget(est, budget, what=f"stiffness sector (twist along {lat.families[f]}) N={sec.N} on {cell!r}")
        S = SymSector(cell, model, sec.N, ops=sub, lookup=lookup)
        w, v = S.solve(tol=tol)
        e0, psi = float(w[0]), v[:, 0]
        a, b_, t, th = _twist_bonds(S, unit)
        K = float(psi @ S.apply_bonds(a, b_, t * th**2, psi))
        rhs = S.apply_bonds(a, b_, -t * th, psi)
        rhs -= (psi @ rhs) * psi
        if S.dim <= 1 or not np.any(rhs):
            second, err = 0.0, 0.0
        else:
            def mv(x):
                x = x - (psi @ x) * psi
                y = S.matvec(x) - e0 * x
                return y - (psi @ y) * psi

            op = LinearOperator((S.dim, S.dim), matvec=mv, dtype=np.float64)
            x, info = cg(op, rhs, rtol=cg_rtol, atol=0.0, maxiter=20 * S.dim + 1000)
            r = rhs - mv(x)
            second = float(rhs @ x)
            err = 2.0 * float(np.linalg.norm(x) * np.linalg.norm(r))
            if info != 0:
                err = max(err, abs(second))
        rho = (K - 2.0 * second) / sec.L
        for g in cls:
            out[lat.families[g]] = (rho, err / sec.L, S.dim)
    return out
