r"""Fixed-particle-number sectors with translation symmetry: basis, hopping table, matrices.

The Hamiltonian of :mod:`phasemap.model` conserves the particle number N and commutes with
the translations of the torus, so it is block diagonal in momentum Q. A :class:`Sector`
holds, for one N,

* the orbit representatives of the translation group (QuSpin's general boson basis, which
  also supplies the representative search), their occupations and stabilisers;
* the diagonal energies (U, V, V2, mu terms) of the representatives;
* the *hopping table*: every hop from every representative, with the target representative,
  the group element relating target state and representative, the bond family and the hop
  direction. It does not depend on Q or on a twist, so it is built once per N and reused for
  every momentum sector and every twisted boundary condition.

Momentum states follow :math:`|r,Q\rangle = N_r^{-1/2}\sum_{g\in G} e^{iQ\cdot g}T_g|r\rangle`
(:math:`T_g` moves every boson by the lattice vector g, so a single boson in sector Q is the
plane wave :math:`e^{iQ\cdot r}`) with :math:`N_r = |G|\,|\mathrm{Stab}(r)|`. A hop
:math:`c\,|s\rangle` from representative r with :math:`s = T_h r'` contributes
:math:`c\,e^{-iQ\cdot h}\sqrt{|\mathrm{Stab}(r')|/|\mathrm{Stab}(r)|}` to
:math:`\langle r',Q|H|r,Q\rangle`; representatives whose stabiliser is not compatible with Q
(:math:`e^{iQ\cdot h}\neq 1` for some h in Stab) have no state in that sector.

Twisted boundary conditions use a uniform vector potential A (Cartesian, units of the
inverse lattice spacing): a boson hopping by the bond vector D picks up :math:`e^{iA\cdot D}`.
This keeps translation symmetry; the twist around the torus vector R is :math:`A\cdot R`.

References
----------
.. [1] A. W. Sandvik, "Computational studies of quantum spin systems", AIP Conf. Proc. 1297,
   135 (2010), sec. 4 (momentum states of representatives).
.. [2] P. Weinberg and M. Bukov, SciPost Phys. 2, 003 (2017); 7, 020 (2019) (QuSpin).
.. [3] C. Lanczos, J. Res. Natl. Bur. Stand. 45, 255 (1950); R. B. Lehoucq, D. C. Sorensen,
   C. Yang, *ARPACK Users' Guide* (SIAM, 1998) (ground states by ``scipy.sparse.linalg.eigsh``).
"""

from __future__ import annotations

import time

import numpy as np
import scipy.sparse as sp
from scipy.sparse.linalg import ArpackNoConvergence, LinearOperator, eigsh

from ..lattice import Supercell
from ..model import Model
from .clusters import TranslationGroup

__all__ = ["Sector", "SectorResult"]

_DENSE_MAX = 600  # below this dimension use dense diagonalisation


def _lowest(H, k, tol, v0):
    """Lowest k eigenpairs of a sparse Hermitian matrix by implicitly restarted Lanczos.

    A complex Hermitian H is diagonalised through its real symmetric embedding
    [[Re H, -Im H], [Im H, Re H]] (every level doubled; a vector (x, y) is x + iy), which
    keeps ARPACK on its symmetric driver.
    """
    n = H.shape[0]
    if v0 is not None and len(v0) != n:
        v0 = None

    def arpack(op, kk, x0):
        try:
            return eigsh(op, k=kk, which="SA", tol=tol, v0=x0, ncv=max(20, 2 * kk + 1))
        except ArpackNoConvergence:  # retry once with a larger Krylov space and more restarts
            return eigsh(op, k=kk, which="SA", tol=tol, v0=x0, ncv=max(40, 4 * kk + 1), maxiter=100 * op.shape[0])

    if not np.iscomplexobj(H.data):
        w, v = arpack(H, k, None if v0 is None else np.real(v0))
    else:
        def mv(x):
            z = H @ (x[:n] + 1j * x[n:]) if x.ndim == 1 else H @ (x[:n, 0] + 1j * x[n:, 0])
            return np.concatenate([z.real, z.imag])

        op = LinearOperator((2 * n, 2 * n), matvec=mv, dtype=np.float64)
        x0 = None if v0 is None else np.concatenate([np.real(v0), np.imag(v0)])
        if x0 is not None and not np.any(x0):
            x0 = None
        w2, v2 = arpack(op, k, x0)
        o = np.argsort(w2)
        w2, v2 = w2[o], v2[:, o]
        z = v2[:n] + 1j * v2[n:]
        # (x, y) and (-y, x) are the same complex vector; Lanczos from one start vector
        # sees one copy of each level, so k embedded vectors give k complex ones
        q, _ = np.linalg.qr(z)
        Hq = q.conj().T @ (H @ q)
        w, u = np.linalg.eigh(Hq)
        w, v = w[:k], (q @ u)[:, :k]
    o = np.argsort(w)
    return w[o], v[:, o]


class SectorResult:
    """Lowest eigenpairs of one momentum sector (``energies``, ``vectors``, ``dim``, ``time``)."""

    def __init__(self, q_index, energies, vectors, dim, seconds, mask):
        self.q_index, self.energies, self.vectors = q_index, energies, vectors
        self.dim, self.time, self.mask = dim, seconds, mask

    @property
    def e0(self) -> float:
        return float(self.energies[0]) if len(self.energies) else np.inf


class Sector:
    """All momentum sectors at fixed particle number ``N`` on a torus.

    Parameters
    ----------
    cell : Supercell
    model : Model
        Couplings; ``n_max`` sets the local dimension ``sps = n_max + 1``.
    N : int
        Particle number, ``0 <= N <= n_max * L``.
    symmetric : bool, default True
        Use translation symmetry; ``False`` gives the plain number-conserving basis (one
        sector, Q = 0), used for validation.
    lookup : {"auto", "direct", "sorted", "search"}
        How the representative of a hopped state is found: "direct" tabulates it for every
        integer code (``6 sps**L`` bytes), "sorted" for the Fock states of the sector only
        (binary search; ~30 bytes per Fock state), "search" applies the group to each hopped
        state (QuSpin's representative search; no table, slowest). "auto" picks the fastest
        that fits ``table_bytes``.
    """

    def __init__(self, cell: Supercell, model: Model, N: int, symmetric: bool = True,
                 lookup: str = "auto", table_bytes: float = 4 * 2**30):
        from quspin.basis import boson_basis_general

        t0 = time.perf_counter()
        self.cell, self.model, self.N = cell, model, int(N)
        L = self.L = cell.n_sites
        sps = self.sps = model.n_max + 1
        self.group = TranslationGroup.of(cell, trivial=not symmetric)
        blocks = {f"T{a}": (p, 0) for a, p in enumerate(self.group.perms)}
        if blocks:
            blocks["block_order"] = list(blocks)
        self.basis = boson_basis_general(L, Nb=self.N, sps=sps, **blocks)
        self._gcols = self._probe_columns(boson_basis_general, blocks)
        self.states = np.asarray(self.basis.states)
        self.dim = len(self.states)
        self._place = np.array([sps ** (L - 1 - i) for i in range(L)], dtype=np.int64)
        self.occ = self.occupations(self.states)
        self._stab()
        self.diag = self._diagonal(self.occ)
        from .guard import fock_dimension

        if lookup not in ("auto", "direct", "sorted", "search"):
            raise ValueError(f"lookup: expected 'auto', 'direct', 'sorted' or 'search', got {lookup!r}")
        if lookup == "auto":
            fock = fock_dimension(L, self.N, model.n_max)
            lookup = ("direct" if 6 * float(sps) ** L < min(table_bytes, 40 * fock + 2**28) else
                      "sorted" if 30 * fock < table_bytes else "search")
        self.lookup = lookup
        if lookup in ("direct", "sorted") and self.group.orders:
            self._make_table()
        self._hops()
        self.build_time = time.perf_counter() - t0

    def _probe_columns(self, factory, blocks) -> list[int]:
        """Column of QuSpin's ``g`` array that counts each of our generators.

        A single boson one generator step away from site 0 must be moved back by
        ``order - 1`` applications of that generator; the nonzero column identifies it.
        """
        if not self.group.orders:
            return []
        one = factory(self.L, Nb=1, sps=self.sps, **blocks)
        cols = []
        for a, p in enumerate(self.group.perms):
            st = np.array([self.sps ** (self.L - 1 - int(p[0]))], dtype=one.states.dtype)
            _, g = one.representative(st, return_g=True)
            nz = np.nonzero(g[0])[0]
            if len(nz) != 1 or g[0, nz[0]] != self.group.orders[a] - 1:  # pragma: no cover
                raise RuntimeError(f"unexpected symmetry bookkeeping from the basis: g={g[0].tolist()}")
            cols.append(int(nz[0]))
        return cols

    # -- basic maps ---------------------------------------------------------------------
    def occupations(self, states) -> np.ndarray:
        """(M, L) occupations of integer-coded Fock states (site 0 = most significant digit)."""
        s = np.asarray(states, dtype=np.int64)[:, None]
        return ((s // self._place[None, :]) % self.sps).astype(np.int8)

    def encode(self, occ) -> np.ndarray:
        return np.asarray(occ, dtype=np.int64) @ self._place

    def index_of(self, states) -> np.ndarray:
        """Positions of representative states in ``self.states`` (stored in descending order)."""
        asc = self.states[::-1]
        pos = np.searchsorted(asc, states)
        return self.dim - 1 - pos

    def _stab(self):
        """fixed[g, r]: representative r invariant under group element g; stab = |Stab(r)|."""
        perms = self.group.site_perms
        self.fixed = np.ones((len(perms), self.dim), dtype=bool)
        for g, p in enumerate(perms[1:], start=1):
            moved = np.empty_like(self.occ)
            moved[:, p] = self.occ  # occupation moves from site i to p[i]
            self.fixed[g] = np.all(moved == self.occ, axis=1)
        self.stab = self.fixed.sum(0)

    def _orbit_states(self, occ=None):
        """Yield (element index, integer codes of T_g r for every representative r)."""
        occ = self.occ if occ is None else occ
        for g, p in enumerate(self.group.site_perms):
            moved = np.empty_like(occ)
            moved[:, p] = occ  # T_g moves the occupation of site i to p[i]
            yield g, self.encode(moved)

    def _make_table(self):
        """Representative index and group element of every Fock state of the sector.

        "direct": arrays indexed by the integer code itself (``sps**L`` entries, fastest);
        "sorted": sorted codes of the sector, looked up by binary search.
        """
        if self.lookup == "direct":
            size = self.sps ** self.L
            self._tab_rep = np.full(size, -1, np.int32)
            self._tab_elem = np.zeros(size, np.int16 if self.group.size < 2**15 else np.int32)
            for g, codes in self._orbit_states():
                self._tab_rep[codes] = np.arange(self.dim, dtype=np.int32)
                self._tab_elem[codes] = g
            return
        codes, elems = [], []
        for g, c in self._orbit_states():
            codes.append(c)
            elems.append(np.full(self.dim, g, np.int16 if self.group.size < 2**15 else np.int32))
        codes = np.concatenate(codes)
        order = np.argsort(codes)
        codes = codes[order]
        first = np.ones(len(codes), bool)
        first[1:] = codes[1:] != codes[:-1]
        sel = order[first]
        self._tab_codes = codes[first]
        self._tab_rep = (sel % self.dim).astype(np.int32)
        self._tab_elem = np.concatenate(elems)[sel]

    def _locate(self, new) -> tuple[np.ndarray, np.ndarray]:
        """Representative index r and group element h with ``new = T_h r``."""
        G = self.group
        if not G.orders:
            return self.index_of(new), np.zeros(len(new), np.int32)
        if self.lookup == "direct":
            return self._tab_rep[new], self._tab_elem[new].astype(np.int32)
        if self.lookup == "sorted":
            k = np.searchsorted(self._tab_codes, new)
            return self._tab_rep[k], self._tab_elem[k].astype(np.int32)
        rep, g = self.basis.representative(new.astype(self.states.dtype), return_g=True)
        e = np.mod(-g[:, self._gcols], G.orders)  # rep = T^g new  =>  new = T_h rep, h = -g
        return self.index_of(rep.astype(np.int64)), np.ravel_multi_index(tuple(e.T), G.orders).astype(np.int32)

    def _diagonal(self, occ) -> np.ndarray:
        m, cell = self.model, self.cell
        n = occ.astype(float)
        e = -m.mu * n.sum(1)
        for f, nb in enumerate(cell.neighbors):
            if m.V[f]:
                e += m.V[f] * np.einsum("ri,ri->r", n, n[:, nb])
        if m.V2:
            for nb in cell.nnn_neighbors:
                e += m.V2 * np.einsum("ri,ri->r", n, n[:, nb])
        if not m.hardcore:
            e += 0.5 * m.U * (n * (n - 1)).sum(1)
        return e

    def _hops(self):
        """Hopping table: (row, col, amp, element, family, direction) for every hop."""
        m, cell, occ = self.model, self.cell, self.occ
        rows, cols, amps, elem, fam, sgn = [], [], [], [], [], []
        for f, nb in enumerate(cell.neighbors):
            if not m.t[f]:
                continue
            for j, i in enumerate(nb):
                for a, b, s in ((i, j, 1), (j, i, -1)):  # b_a^+ b_b: boson moves b -> a
                    ok = np.nonzero((occ[:, b] > 0) & (occ[:, a] < self.sps - 1))[0]
                    if not len(ok):
                        continue
                    amp = -m.t[f] * np.sqrt((occ[ok, a] + 1.0) * occ[ok, b])
                    new = self.states[ok].astype(np.int64) + self._place[a] - self._place[b]
                    r, el = self._locate(new)
                    rows.append(r)
                    cols.append(ok)
                    amps.append(amp)
                    elem.append(el)
                    fam.append(np.full(len(ok), f, np.int8))
                    sgn.append(np.full(len(ok), s, np.int8))
        cat = lambda x, d: np.concatenate(x).astype(d) if x else np.zeros(0, d)  # noqa: E731
        self.hop_rows, self.hop_cols = cat(rows, np.int32), cat(cols, np.int32)
        self.hop_amp, self.hop_elem = cat(amps, float), cat(elem, np.int32)
        self.hop_fam, self.hop_sgn = cat(fam, np.int8), cat(sgn, np.int8)

    # -- momentum sectors ---------------------------------------------------------------
    @property
    def momenta(self) -> np.ndarray:
        return self.group.momenta()

    def characters(self, q) -> np.ndarray:
        """exp(-2 pi i Q.v_g) for every group element g."""
        return np.exp(-2j * np.pi * (self.group.vectors @ np.asarray(q, float)))

    def mask(self, q) -> np.ndarray:
        """Representatives that carry a state with momentum ``q``."""
        chi = self.characters(q)
        bad = np.abs(chi - 1) > 1e-9
        if not bad.any():
            return np.ones(self.dim, bool)
        return ~np.any(self.fixed[bad], axis=0)

    def matrix(self, q, A=None) -> sp.csr_matrix:
        """Sparse Hamiltonian of momentum sector ``q`` (optionally with vector potential ``A``).

        Rows/columns are the representatives selected by :meth:`mask`.
        """
        chi = self.characters(q)
        keep = self.mask(q)
        sel = np.nonzero(keep)[0]
        newidx = np.full(self.dim, -1, np.int64)
        newidx[sel] = np.arange(len(sel))
        h = keep[self.hop_rows] & keep[self.hop_cols]
        r, c = newidx[self.hop_rows[h]], newidx[self.hop_cols[h]]
        val = self.hop_amp[h] * chi[self.hop_elem[h]] * np.sqrt(self.stab[self.hop_rows[h]] / self.stab[self.hop_cols[h]])
        if A is not None and np.any(A):
            D = self.cell.lattice.cartesian(np.array(self.cell.lattice.nn))  # (F, 2)
            phase = D @ np.asarray(A, float)
            val = val * np.exp(1j * phase[self.hop_fam[h]] * self.hop_sgn[h])
        if np.all(np.abs(val.imag) < 1e-13):
            val = val.real
        n = len(sel)
        H = sp.csr_matrix((val, (r, c)), shape=(n, n))
        return (H + sp.diags(self.diag[sel].astype(H.dtype))).tocsr()

    def solve(self, q, A=None, k: int = 1, v0=None, tol: float = 1e-12, q_index: int = -1) -> SectorResult:
        """Lowest ``k`` eigenpairs of momentum sector ``q``."""
        t0 = time.perf_counter()
        keep = self.mask(q)
        n = int(keep.sum())
        if n == 0:
            return SectorResult(q_index, np.zeros(0), np.zeros((0, 0)), 0, time.perf_counter() - t0, keep)
        H = self.matrix(q, A)
        k = min(k, n)
        if self.hop_amp.size == 0 or n <= _DENSE_MAX or k >= n - 1:
            if n <= _DENSE_MAX or k >= n - 1:
                w, v = np.linalg.eigh(H.toarray())
                w, v = w[:k], v[:, :k]
            else:  # diagonal matrix (no hopping)
                d = H.diagonal().real
                o = np.argsort(d, kind="stable")[:k]
                w, v = d[o], np.zeros((n, k))
                v[o, np.arange(k)] = 1.0
        else:
            w, v = _lowest(H, k, tol, v0)
        return SectorResult(q_index, w, v, n, time.perf_counter() - t0, keep)

    # -- full-space projection ----------------------------------------------------------
    def expand(self, q, vec) -> tuple[np.ndarray, np.ndarray]:
        """Fock-space amplitudes of a sector vector: (sorted integer states, amplitudes).

        The coefficient of :math:`T_g|r\\rangle` is :math:`\\psi_r e^{iQ\\cdot g}\\sqrt{|Stab(r)|/|G|}`.
        """
        keep = self.mask(q)
        amp0 = vec * np.sqrt(self.stab[keep] / self.group.size)
        chi = np.conj(self.characters(q))
        states, amps = [], []
        for g, codes in self._orbit_states(self.occ[keep]):
            states.append(codes)
            amps.append(amp0 * chi[g])
        states, amps = np.concatenate(states), np.concatenate(amps)
        u, first = np.unique(states, return_index=True)
        return u, amps[first]
