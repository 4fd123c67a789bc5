"""Periodic clusters for exact diagonalization: library, bond checks, symmetry groups.

A cluster is a :class:`phasemap.lattice.Supercell` used as a torus. This module adds what
exact diagonalization needs on top of the geometry:

* a library of named clusters (triangular clusters that contain the K point, i.e. are
  compatible with the √3×√3 three-sublattice order, and square clusters for validation);
* a check that no bond is doubled on the torus for the couplings actually in use;
* the translation group written as a direct product of (at most two) cyclic groups, as the
  symmetry-block machinery needs independent generators;
* the lattice point-group operations that map the torus and the *actual couplings* onto
  themselves, used only to identify momenta whose sectors are degenerate.

References
----------
.. [1] A. Weiße and H. Fehske, "Exact diagonalization techniques", in *Computational
   Many-Particle Physics*, Lect. Notes Phys. 739 (Springer, 2008), pp. 529-544.
.. [2] P. Weinberg and M. Bukov, "QuSpin: a Python package for dynamics and exact
   diagonalisation of quantum many body systems", SciPost Phys. 7, 020 (2019).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np

from ..lattice import Supercell, get_lattice
from ..model import ConfigError, Model

__all__ = ["CLUSTERS", "chain", "get_cluster", "check_bonds", "TranslationGroup", "point_group",
           "momentum_classes", "has_momentum"]

#: Named periodic clusters: name -> (lattice, superlattice vectors in (i, j) coordinates).
#: Triangular ``tri<N>`` tori all satisfy i = j (mod 3) for both vectors, hence contain
#: K = (2/3, 1/3) and K' (√3×√3 compatible) and are C6-symmetric.
CLUSTERS: dict[str, tuple[str, tuple[tuple[int, int], tuple[int, int]]]] = {
    "tri12": ("triangular", ((2, 2), (-2, 4))),
    "tri21": ("triangular", ((4, 1), (-1, 5))),
    "tri27": ("triangular", ((3, 3), (-3, 6))),
    "tri36": ("triangular", ((6, 0), (0, 6))),
    "tri9": ("triangular", ((3, 0), (0, 3))),
    "sq8": ("square", ((2, 2), (2, -2))),
    "sq10": ("square", ((3, 1), (-1, 3))),
    "sq16": ("square", ((4, 0), (0, 4))),
    "sq4x4": ("square", ((4, 0), (0, 4))),
    "sq18": ("square", ((3, 3), (3, -3))),
}


def chain(lattice: str, length: int, family: int = 0) -> Supercell:
    """A periodic ring of ``length`` sites along bond family ``family`` (for decoupled chains).

    The other families are wrapped onto the ring itself; :func:`check_bonds` then refuses any
    nonzero coupling on them.
    """
    lat = get_lattice(lattice)
    d = np.array(lat.nn[family])
    other = np.array(lat.nn[1 - family if lat.n_families > 1 else 0])
    return Supercell(lat, [tuple(length * d), tuple(other)])


def get_cluster(cluster, lattice: str | None = None) -> Supercell:
    """Resolve a cluster given by library name, :class:`Supercell` or two superlattice vectors.

    Parameters
    ----------
    cluster : str or Supercell or array-like (2, 2)
        Library name (see :data:`CLUSTERS`), a ready supercell, or superlattice vectors.
    lattice : str, optional
        Lattice of the model; must agree with the cluster's lattice.

    Raises
    ------
    ConfigError
        Unknown name, degenerate vectors or a lattice mismatch.
    """
    if isinstance(cluster, Supercell):
        cell = cluster
    elif isinstance(cluster, str):
        if cluster not in CLUSTERS:
            raise ConfigError(f"cluster: unknown cluster {cluster!r}; library: {', '.join(CLUSTERS)} "
                              "(or give two superlattice vectors, e.g. [[2,2],[-2,4]])")
        lat, vec = CLUSTERS[cluster]
        cell = Supercell(lat, vec)
    else:
        try:
            vec = np.asarray(cluster, dtype=float)
        except (TypeError, ValueError):
            raise ConfigError(f"cluster: expected a name or a 2x2 integer matrix, got {cluster!r}") from None
        if vec.shape != (2, 2) or np.any(vec != np.round(vec)):
            raise ConfigError(f"cluster: superlattice vectors must be a 2x2 integer matrix, got {cluster!r}")
        try:
            cell = Supercell(lattice or "triangular", vec.astype(int))
        except ValueError as e:
            raise ConfigError(f"cluster: {e}") from None
    if lattice is not None and get_lattice(lattice).name != cell.lattice.name:
        raise ConfigError(f"cluster: cluster lattice {cell.lattice.name!r} does not match the model "
                          f"lattice {get_lattice(lattice).name!r}")
    return cell


def _in_superlattice(cell: Supercell, v) -> bool:
    return not np.any(cell._keys(np.asarray(v))[0])


def check_bonds(cell: Supercell, model: Model) -> None:
    """Refuse tori on which a coupled bond closes on itself or two bonds share a pair of sites.

    Only bond families with a nonzero hopping or interaction (and next-nearest neighbours when
    ``V2 != 0``) are checked, so decoupled chains can be embedded in a thin torus.

    Raises
    ------
    ConfigError
        Naming the bond vectors involved and the cluster.
    """
    lat = cell.lattice
    vecs = [(f"{f}", np.array(d)) for f, d, t, v in zip(lat.families, lat.nn, model.t, model.V)
            if t != 0 or v != 0]
    if model.V2 != 0:
        vecs += [(f"nnn{k}", np.array(d)) for k, d in enumerate(lat.nnn)]
    signed = [(n, s, s * d) for n, d in vecs for s in (1, -1)]
    for n, _, d in signed:
        if _in_superlattice(cell, d):
            raise ConfigError(f"cluster: on {cell!r} a {n} bond {tuple(int(x) for x in d)} joins a site to itself; "
                              "use a larger cluster or set that coupling to 0")
    for a in range(len(signed)):
        for b in range(a + 1, len(signed)):
            (na, sa, da), (nb, sb, db) = signed[a], signed[b]
            if _in_superlattice(cell, da - db):
                raise ConfigError(
                    f"cluster: on {cell!r} the bonds {na}{'+-'[sa < 0]} {tuple(int(x) for x in da)} and {nb}{'+-'[sb < 0]} "
                    f"{tuple(int(x) for x in db)} join the same pair of sites (doubled bond); use a larger cluster")


@dataclass
class TranslationGroup:
    """Translations of a torus as a direct product of cyclic groups.

    Attributes
    ----------
    generators : (k, 2) int array
        Translation vectors (k = 0, 1 or 2) in (i, j) coordinates.
    orders : tuple of int
        Order of each generator; their product is the number of sites.
    perms : list of (N,) int arrays
        ``perms[a][s]`` = site reached from ``s`` by generator ``a``.
    """

    cell: Supercell
    generators: np.ndarray
    orders: tuple
    perms: list

    @classmethod
    def of(cls, cell: Supercell, trivial: bool = False) -> "TranslationGroup":
        L = cell.n_sites
        if trivial or L == 1:
            return cls(cell, np.zeros((0, 2), int), (), [])

        def order(v):
            m, p = 1, np.array(v)
            while not _in_superlattice(cell, p):
                m, p = m + 1, p + v
            return m

        # an element of maximal order (prefer a bond vector), then a complement of the
        # remaining order such that together they reach every site (direct product)
        cand = [np.array(s) for s in cell.sites if not _in_superlattice(cell, s)]
        cand = [np.array(d) for d in cell.lattice.nn if not _in_superlattice(cell, d)] + cand
        orders = [order(v) for v in cand]
        exp = max(orders)
        g1 = cand[orders.index(exp)]
        gens, ords = [g1], [exp]
        if exp < L:
            need = L // exp
            for v, o in zip(cand, orders):
                span = cell.index(np.array([a * g1 + b * v for a in range(exp) for b in range(need)]))
                if o == need and len(set(span.tolist())) == L:
                    gens.append(v)
                    ords.append(need)
                    break
            else:  # pragma: no cover - a finite abelian group of rank <= 2 always splits
                raise RuntimeError(f"no independent translation generators found for {cell!r}")
        perms = [cell.index(cell.sites + g) for g in gens]
        return cls(cell, np.array(gens), tuple(ords), perms)

    @property
    def size(self) -> int:
        return int(np.prod(self.orders)) if self.orders else 1

    @cached_property
    def elements(self) -> np.ndarray:
        """(|G|, k) exponents of every group element (row-major over the generators)."""
        if not self.orders:
            return np.zeros((1, 0), int)
        return np.array(np.meshgrid(*[np.arange(o) for o in self.orders], indexing="ij")).reshape(len(self.orders), -1).T

    @cached_property
    def vectors(self) -> np.ndarray:
        """(|G|, 2) translation vector of every element."""
        return self.elements @ self.generators if self.orders else np.zeros((1, 2), int)

    @cached_property
    def site_perms(self) -> np.ndarray:
        """(|G|, N) site permutation of every element."""
        cell = self.cell
        return np.stack([cell.index(cell.sites + v) for v in self.vectors])

    def momenta(self) -> np.ndarray:
        """Allowed momenta (units of the reciprocal vectors) compatible with this group."""
        if not self.orders:
            return np.zeros((1, 2))
        return self.cell.momenta


def has_momentum(cell: Supercell, name: str) -> bool:
    """True if the special momentum ``name`` (e.g. "K") is an allowed momentum of ``cell``."""
    q = np.array(cell.lattice.special_q[name], dtype=float)
    return bool(np.any(np.all(np.abs(np.mod(cell.momenta - q + 0.5, 1) - 0.5) < 1e-9, axis=1)))


def _lattice_ops(lattice) -> list[np.ndarray]:
    """Point-group matrices M acting on row vectors r -> r M in (i, j) coordinates."""
    lat = get_lattice(lattice)
    if lat.name == "triangular":
        rot, mir = np.array([[0, 1], [-1, 1]]), np.array([[0, 1], [1, 0]])
    else:
        rot, mir = np.array([[0, 1], [-1, 0]]), np.array([[0, 1], [1, 0]])
    ops, frontier = {}, [np.eye(2, dtype=int)]
    while frontier:
        m = frontier.pop()
        key = tuple(m.ravel())
        if key in ops:
            continue
        ops[key] = m
        frontier += [m @ rot, m @ mir]
    return list(ops.values())


def point_group(cell: Supercell, model: Model) -> list[np.ndarray]:
    """Point-group operations that map the torus and the model's couplings onto themselves.

    An operation ``M`` (``r -> r M``) is kept if it maps both superlattice vectors into the
    superlattice and sends every bond family ``f`` onto a family ``g`` with ``t_f = t_g`` and
    ``V_f = V_g`` (next-nearest neighbours are always mapped onto each other).
    """
    lat = cell.lattice
    nn = [np.array(d) for d in lat.nn]
    keep = []
    for m in _lattice_ops(lat):
        if not all(_in_superlattice(cell, a @ m) for a in cell.vectors):
            continue
        ok = True
        for f, d in enumerate(nn):
            img = d @ m
            g = next(k for k, e in enumerate(nn) if np.array_equal(img, e) or np.array_equal(img, -e))
            ok &= (model.t[f] == model.t[g]) and (model.V[f] == model.V[g])
        if ok:
            keep.append(m)
    return keep


def momentum_classes(cell: Supercell, ops: list[np.ndarray], time_reversal: bool = True) -> list[list[int]]:
    """Partition the allowed momenta into classes with degenerate sectors.

    A point-group element ``M`` maps momentum ``Q`` to ``Q M^T`` (mod 1); time reversal (real
    Hamiltonian) maps ``Q`` to ``-Q``. Each class lists indices into ``cell.momenta``; the first
    entry is the representative that is diagonalised.
    """
    qs = cell.momenta
    L = len(qs)
    key = {tuple(np.round(np.mod(q, 1) * L).astype(int) % L): n for n, q in enumerate(qs)}
    mats = list(ops) or [np.eye(2, dtype=int)]
    signs = (1, -1) if time_reversal else (1,)
    seen, classes = set(), []
    for n, q in enumerate(qs):
        if n in seen:
            continue
        cls = []
        for m in mats:
            for s in signs:
                img = np.mod(s * q @ m.T, 1)
                k = key[tuple(np.round(img * L).astype(int) % L)]
                if k not in cls:
                    cls.append(k)
        cls.sort(key=lambda k: k != n)
        seen.update(cls)
        classes.append(cls)
    return classes
