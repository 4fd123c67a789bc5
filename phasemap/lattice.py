"""Lattices, bond families, periodic supercells, sublattice patterns and momenta.

Geometry only: nothing here knows about the Hamiltonian. Sites are labelled by
integer coordinates ``(i, j)`` meaning ``r = i*a1 + j*a2``.

Triangular lattice (DESIGN.md §1): ``a1 = (1, 0)``, ``a2 = (1/2, sqrt(3)/2)``;
nearest-neighbour families ``d1 = a1``, ``d2 = a2``, ``d3 = a2 - a1``;
next-nearest neighbours at distance sqrt(3): ``a1 + a2``, ``2a1 - a2``, ``2a2 - a1``.
Square lattice: families ``x = (1, 0)``, ``y = (0, 1)``; next-nearest ``(1, 1)``, ``(1, -1)``.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from fractions import Fraction
from functools import cached_property

import numpy as np

__all__ = [
    "sq_peak",
    "Lattice",
    "Supercell",
    "Pattern",
    "get_lattice",
    "LATTICES",
    "PATTERNS",
    "patterns_for",
    "search_cell",
    "tile_orbits",
]


@dataclass(frozen=True)
class Lattice:
    """A Bravais lattice with named nearest-neighbour bond families."""

    name: str
    a1: tuple[float, float]
    a2: tuple[float, float]
    families: tuple[str, ...]
    nn: tuple[tuple[int, int], ...]  # one integer bond vector per family
    nnn: tuple[tuple[int, int], ...]  # next-nearest neighbour vectors (each bond once)
    special_q: dict = field(default_factory=dict, compare=False, hash=False)

    @property
    def n_families(self) -> int:
        return len(self.families)

    @property
    def z(self) -> int:
        """Coordination number (nearest neighbours)."""
        return 2 * len(self.nn)

    def cartesian(self, ij) -> np.ndarray:
        ij = np.asarray(ij, dtype=float)
        basis = np.array([self.a1, self.a2])
        return ij @ basis


_S3 = float(np.sqrt(3.0))

LATTICES: dict[str, Lattice] = {
    "triangular": Lattice(
        name="triangular",
        a1=(1.0, 0.0),
        a2=(0.5, _S3 / 2),
        families=("d1", "d2", "d3"),
        nn=((1, 0), (0, 1), (-1, 1)),
        nnn=((1, 1), (2, -1), (-1, 2)),
        # momenta in units of the primitive reciprocal vectors: Q.r = 2 pi (q1 i + q2 j)
        special_q={"Gamma": (0, 0), "K": (Fraction(2, 3), Fraction(1, 3)),
                   "K'": (Fraction(1, 3), Fraction(2, 3)), "M1": (Fraction(1, 2), 0),
                   "M2": (0, Fraction(1, 2)), "M3": (Fraction(1, 2), Fraction(1, 2))},
    ),
    "square": Lattice(
        name="square",
        a1=(1.0, 0.0),
        a2=(0.0, 1.0),
        families=("x", "y"),
        nn=((1, 0), (0, 1)),
        nnn=((1, 1), (1, -1)),
        special_q={"Gamma": (0, 0), "M": (Fraction(1, 2), Fraction(1, 2)),
                   "X": (Fraction(1, 2), 0), "Y": (0, Fraction(1, 2))},
    ),
}


def get_lattice(name: str | Lattice) -> Lattice:
    if isinstance(name, Lattice):
        return name
    try:
        return LATTICES[name]
    except KeyError:
        raise ValueError(
            f"lattice: unknown lattice {name!r}; allowed: {', '.join(LATTICES)}"
        ) from None


class Supercell:
    """Periodic pattern of sites: the lattice modulo two integer superlattice vectors.

    Parameters
    ----------
    lattice : str or Lattice
    vectors : 2x2 integer array-like
        Rows are the superlattice vectors ``A1, A2`` in ``(i, j)`` coordinates.
    sites : (N, 2) int array, optional
        Representative coordinates of the N sites (a fundamental domain). By
        default a compact domain is chosen (sites closest to the origin).

    Notes
    -----
    ``neighbors[f, s]`` is the index of the site ``sites[s] + nn[f]`` reduced into
    the cell, so the bonds of family ``f`` are the pairs ``(s, neighbors[f, s])``,
    each bond of the infinite periodic lattice counted once per cell.
    """

    def __init__(self, lattice, vectors, sites=None):
        self.lattice = get_lattice(lattice)
        A = np.array(vectors, dtype=np.int64).reshape(2, 2)
        det = int(round(A[0, 0] * A[1, 1] - A[0, 1] * A[1, 0]))
        if det == 0:
            raise ValueError(f"supercell vectors {A.tolist()} are linearly dependent")
        if det < 0:
            A = A[::-1].copy()
            det = -det
        self.vectors = A
        self.n_sites = det
        # adj(A)^T such that frac coords (times det) of r are r @ adjT
        self._adjT = np.array([[A[1, 1], -A[0, 1]], [-A[1, 0], A[0, 0]]], dtype=np.int64).T
        if sites is None:
            sites = self._compact_domain()
        sites = np.array(sites, dtype=np.int64).reshape(-1, 2)
        keys = self._keys(sites)
        if len(sites) != det or len(set(map(tuple, keys))) != det:
            raise ValueError(
                f"cluster sites: {len(sites)} sites given but they must be {det} distinct "
                f"sites, one per class modulo the superlattice {A.tolist()} (the cluster must tile the lattice)"
            )
        self.sites = sites
        self._lookup = {tuple(k): n for n, k in enumerate(keys)}

    # -- reduction modulo the superlattice -------------------------------------------
    def _keys(self, ij) -> np.ndarray:
        """Integer canonical key of each site class: (det * fractional coords) mod det."""
        ij = np.asarray(ij, dtype=np.int64).reshape(-1, 2)
        # r = x A  => x = r A^{-1} = r adj(A) / det ; adj(A) = [[A11, -A01], [-A10, A00]]
        A = self.vectors
        adj = np.array([[A[1, 1], -A[0, 1]], [-A[1, 0], A[0, 0]]], dtype=np.int64)
        return np.mod(ij @ adj, self.n_sites)

    def index(self, ij) -> np.ndarray:
        """Site index of the lattice points ``ij`` (any shape (..., 2))."""
        ij = np.asarray(ij, dtype=np.int64)
        keys = self._keys(ij.reshape(-1, 2))
        out = np.fromiter((self._lookup[tuple(k)] for k in keys), dtype=np.int64, count=len(keys))
        return out.reshape(ij.shape[:-1])

    def _compact_domain(self) -> np.ndarray:
        A = self.vectors
        R = int(np.abs(A).sum()) + 2
        g = np.arange(-R, R + 1)
        cand = np.stack(np.meshgrid(g, g, indexing="ij"), -1).reshape(-1, 2)
        pos = self.lattice.cartesian(cand)
        d2 = np.round((pos**2).sum(1), 9)
        # deterministic order: distance, then angle, then coordinates
        ang = np.round(np.arctan2(pos[:, 1], pos[:, 0]) % (2 * np.pi), 9)
        order = np.lexsort((cand[:, 1], cand[:, 0], ang, d2))
        keys = self._keys(cand[order])
        seen, chosen = set(), []
        for k, c in zip(map(tuple, keys), cand[order]):
            if k not in seen:
                seen.add(k)
                chosen.append(c)
                if len(chosen) == self.n_sites:
                    break
        return np.array(chosen)

    # -- bonds ------------------------------------------------------------------------
    @cached_property
    def neighbors(self) -> np.ndarray:
        """(F, N) index of the nearest neighbour of each site along each family."""
        nn = np.array(self.lattice.nn)
        return np.stack([self.index(self.sites + d) for d in nn])

    @cached_property
    def nnn_neighbors(self) -> np.ndarray:
        """(K, N) index of the next-nearest neighbours (each bond once)."""
        return np.stack([self.index(self.sites + d) for d in np.array(self.lattice.nnn)])

    @cached_property
    def positions(self) -> np.ndarray:
        return self.lattice.cartesian(self.sites)

    # -- momenta ----------------------------------------------------------------------
    @cached_property
    def momenta(self) -> np.ndarray:
        """(N, 2) allowed momenta in units of the primitive reciprocal vectors, in [0, 1)."""
        det = self.n_sites
        A = self.vectors
        adj = np.array([[A[1, 1], -A[0, 1]], [-A[1, 0], A[0, 0]]], dtype=np.int64)
        # q . A_k in Z  <=>  q = m A^{-T}... enumerate m and reduce
        qs = set()
        for m1 in range(det):
            for m2 in range(det):
                num = adj @ np.array([m1, m2])  # q = A^{-1} m = adj m / det
                q = tuple(Fraction(int(x) % det, det) for x in num)
                qs.add(q)
        qs = sorted(qs)
        if len(qs) != det:  # pragma: no cover - algebraic identity
            raise RuntimeError("momentum enumeration failed")
        return np.array([[float(a), float(b)] for a, b in qs])

    def momentum_name(self, q) -> str:
        for name, ref in self.lattice.special_q.items():
            if np.allclose(np.mod(np.asarray(q, float) - np.array(ref, float) + 0.5, 1.0) - 0.5, 0, atol=1e-9):
                return name
        return f"({q[0]:.4g},{q[1]:.4g})"

    def phases(self, q) -> np.ndarray:
        """exp(i Q.r_s) for every site."""
        q = np.asarray(q, dtype=float)
        return np.exp(2j * np.pi * (self.sites @ q))

    def structure_factor(self, densities) -> tuple[np.ndarray, np.ndarray]:
        """Density order parameter |rho_Q|^2 = |(1/N) sum_s n_s e^{iQ.r_s}|^2 at every allowed Q.

        ``densities`` has shape (..., N); returns (momenta (M, 2), values (..., M)).
        """
        n = np.asarray(densities, dtype=float)
        ph = np.exp(2j * np.pi * (self.sites @ self.momenta.T))  # (N, M)
        rho = n @ ph / self.n_sites
        return self.momenta, np.abs(rho) ** 2

    def __repr__(self):
        return f"Supercell({self.lattice.name!r}, {self.vectors.tolist()}, N={self.n_sites})"


@dataclass(frozen=True)
class Pattern:
    """A named sublattice ordering pattern used to seed and to recognise solids."""

    name: str
    lattice: str
    vectors: tuple[tuple[int, int], tuple[int, int]]
    n_sub: int
    label: object  # callable (i, j) -> sublattice index
    description: str
    q: tuple  # ordering momentum name(s)

    def supercell(self) -> Supercell:
        return Supercell(self.lattice, self.vectors)

    def sublattice(self, cell: Supercell) -> np.ndarray:
        return np.asarray(self.label(cell.sites[:, 0], cell.sites[:, 1])) % self.n_sub


PATTERNS: dict[str, dict[str, Pattern]] = {
    "triangular": {
        "uniform": Pattern("uniform", "triangular", ((1, 0), (0, 1)), 1,
                           lambda i, j: 0 * i, "uniform", ("Gamma",)),
        "sqrt3": Pattern("sqrt3", "triangular", ((1, 1), (-1, 2)), 3,
                         lambda i, j: (i - j) % 3, "√3×√3 three-sublattice", ("K", "K'")),
        "stripe_d1": Pattern("stripe_d1", "triangular", ((1, 0), (0, 2)), 2,
                             lambda i, j: j % 2, "stripes along d1", ("M2",)),
        "stripe_d2": Pattern("stripe_d2", "triangular", ((2, 0), (0, 1)), 2,
                             lambda i, j: i % 2, "stripes along d2", ("M1",)),
        "stripe_d3": Pattern("stripe_d3", "triangular", ((1, -1), (2, 0)), 2,
                             lambda i, j: (i + j) % 2, "stripes along d3", ("M3",)),
        "2x2": Pattern("2x2", "triangular", ((2, 0), (0, 2)), 4,
                       lambda i, j: (i % 2) + 2 * (j % 2), "2×2 four-sublattice", ("M1", "M2", "M3")),
    },
    "square": {
        "uniform": Pattern("uniform", "square", ((1, 0), (0, 1)), 1,
                           lambda i, j: 0 * i, "uniform", ("Gamma",)),
        "checkerboard": Pattern("checkerboard", "square", ((1, 1), (1, -1)), 2,
                                lambda i, j: (i + j) % 2, "checkerboard", ("M",)),
        "stripe_x": Pattern("stripe_x", "square", ((1, 0), (0, 2)), 2,
                            lambda i, j: j % 2, "stripes along x", ("Y",)),
        "stripe_y": Pattern("stripe_y", "square", ((2, 0), (0, 1)), 2,
                            lambda i, j: i % 2, "stripes along y", ("X",)),
        "2x2": Pattern("2x2", "square", ((2, 0), (0, 2)), 4,
                       lambda i, j: (i % 2) + 2 * (j % 2), "2×2 four-sublattice", ("M", "X", "Y")),
    },
}

# A cell commensurate with every named pattern of the lattice, used for random seeds.
_SEARCH_CELLS = {"triangular": ((2, 2), (-2, 4)), "square": ((2, 0), (0, 2))}


def patterns_for(lattice) -> dict[str, Pattern]:
    return PATTERNS[get_lattice(lattice).name]


def search_cell(lattice) -> Supercell:
    """Smallest supercell commensurate with all named patterns (12 sites triangular, 4 square)."""
    lat = get_lattice(lattice)
    return Supercell(lat, _SEARCH_CELLS[lat.name])


# -- point-group symmetry of a cluster tile ---------------------------------------------------
def _point_group(lat: Lattice) -> list[np.ndarray]:
    """Integer matrices (acting on (i, j) row vectors) of the lattice's point group."""
    if lat.name == "triangular":
        rot = np.array([[0, 1], [-1, 1]])  # (i, j) -> (-j, i + j): rotation by 60 degrees
    else:
        rot = np.array([[0, 1], [-1, 0]])  # (i, j) -> (-j, i): rotation by 90 degrees
    mirror = np.array([[0, 1], [1, 0]])  # (i, j) -> (j, i)
    ops, R = [], np.eye(2, dtype=np.int64)
    for _ in range(6 if lat.name == "triangular" else 4):
        ops += [R.copy(), R @ mirror]
        R = R @ rot
    return ops


def tile_orbits(cell: Supercell, t, V) -> np.ndarray:
    """Orbit index of every site of ``cell`` seen as a cluster tile (cluster mean field).

    The symmetry operations are lattice point-group elements followed by a translation that
    map the tile's own site set onto itself, map the superlattice onto itself (so the tiling,
    hence every decoupled bond, is preserved) and only exchange bond families with equal
    couplings (``t``, ``V``: arrays (P, F) or (F,); families must agree at every point).
    Sites in one orbit are equivalent in the cluster problem, so only density differences
    *within* an orbit signal a density wave; differences between orbits can be edge effects
    of the open cluster.
    """
    lat = cell.lattice
    t, V = np.atleast_2d(t), np.atleast_2d(V)
    nn = np.array(lat.nn)
    sites = [tuple(s) for s in cell.sites]
    site_set = set(sites)
    parent = list(range(cell.n_sites))

    def find(a):
        while parent[a] != a:
            parent[a] = parent[parent[a]]
            a = parent[a]
        return a

    for R in _point_group(lat):
        # bond families must map onto families with identical couplings
        img = nn @ R
        perm = []
        for d in img:
            f2 = [f for f, e in enumerate(nn) if np.array_equal(d, e) or np.array_equal(d, -e)]
            perm.append(f2[0] if f2 else -1)
        if -1 in perm or any(not (np.array_equal(t[:, f], t[:, g]) and np.array_equal(V[:, f], V[:, g]))
                             for f, g in enumerate(perm)):
            continue
        if np.any(cell._keys(cell.vectors @ R) != 0):
            continue  # the superlattice is not mapped onto itself
        rot = cell.sites @ R
        for c in {tuple(sites[0] - r) for r in rot}:
            moved = [tuple(r + c) for r in rot]
            if set(moved) == site_set:
                for a, m in enumerate(moved):
                    b = sites.index(m)
                    parent[find(a)] = find(b)
    roots = [find(a) for a in range(cell.n_sites)]
    _, orbit = np.unique(roots, return_inverse=True)
    return orbit


def sq_peak(q, sq):
    """Largest S(Q) over the nonzero momenta of the last axis (Q != 0 modulo reciprocal vectors).

    ``q``: (Nq, 2) momenta in units of the primitive reciprocal vectors; ``sq``: (..., Nq).
    Returns ``(value, index)`` of shape ``sq.shape[:-1]``; value 0 and index -1 where the cell
    has no nonzero momentum. The one helper for every S(Q) maximum (classification, scans, ED).
    """
    q = np.asarray(q, float)
    sq = np.asarray(sq, float)
    nz = np.any(np.abs(np.mod(q + 0.5, 1) - 0.5) > 1e-9, axis=-1)
    if not nz.any():
        return np.zeros(sq.shape[:-1]), np.full(sq.shape[:-1], -1)
    k = np.argmax(np.where(nz, sq, -np.inf), axis=-1)
    return np.take_along_axis(sq, np.asarray(k)[..., None], -1)[..., 0], k
