"""Bond lists of the sampled system: a periodic torus of the model's lattice, or any graph.

Every nearest-neighbour bond family with a nonzero hopping or interaction, and the
next-nearest-neighbour bonds when ``V2 != 0``, become bond types of their own; the chemical
potential of a site is shared equally among the bonds that touch it (``mu / c_i`` per bond,
``c_i`` their number), so every site carries exactly ``-mu n_i``.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..lattice import Supercell, get_lattice
from ..model import ConfigError, Model
from .tables import diag_energy, loop_tables, vertex_weights

__all__ = ["Graph", "torus", "open_chain", "resolve_cell"]


@dataclass
class Graph:
    """Sites, bonds and bond types of one SSE simulation.

    Attributes
    ----------
    n_sites : int
    bonds : (Nb, 2) int array of site pairs (i, j).
    bond_vec : (Nb, 2) int array, lattice displacement ``r_j - r_i`` in (i, j) coordinates.
    bond_type : (Nb,) int array.
    types : list of dict ``{name, t, V, mu_i, mu_j, eps, C}`` per bond type.
    wtab, cum : vertex weights (T, 16) and directed-loop tables (T, 16, 4, 4).
    shift : float, sum of the shifts C over all bonds (E = -<n>/beta + shift).
    sites : (N, 2) int lattice coordinates; momenta : (Nq, 2) allowed momenta (may be empty).
    lattice : Lattice (for Cartesian vectors); cell : Supercell or None.
    families : names of the nearest-neighbour families (stiffness directions).
    """

    n_sites: int
    bonds: np.ndarray
    bond_vec: np.ndarray
    bond_type: np.ndarray
    types: list
    sites: np.ndarray
    momenta: np.ndarray
    lattice: object
    cell: Supercell | None = None
    name: str = ""
    families: tuple = ()
    table_info: list = field(default_factory=list)

    def __post_init__(self):
        w = []
        for ty in self.types:
            wi, ci = vertex_weights(ty["t"], ty["V"], ty["mu_i"], ty["mu_j"], ty["eps"])
            ty["C"] = ci
            w.append(wi)
        self.wtab = np.array(w)
        self.cum, self.table_info = loop_tables(self.wtab)
        self.shift = float(sum(self.types[k]["C"] for k in self.bond_type))

    @property
    def k_index(self) -> int:
        """Index of K = (2/3, 1/3) among the momenta, -1 if absent (or not triangular)."""
        if "K" not in self.lattice.special_q or len(self.momenta) == 0:
            return -1
        K = np.array(self.lattice.special_q["K"], float)
        hit = np.nonzero(np.all(np.abs(np.mod(self.momenta - K + 0.5, 1) - 0.5) < 1e-9, axis=1))[0]
        return int(hit[0]) if len(hit) else -1


def _eps(t: float, V: float, mu_i: float, mu_j: float) -> float:
    """Default constant added to the shift C of a bond type.

    The minimal bounce probability of the set entered at a singly occupied diagonal vertex is
    ``max(0, mu_i - t) / (C + mu_i)``-like: a small shift makes the loops bounce back almost
    always when the chemical-potential share dominates the hopping, and the loops then hardly
    ever change the particle number (measured: the particle number froze on a 6x6 torus at
    t/V = 0.08, half filling, beta V = 20 with eps = t/4). Half the spread of the diagonal
    energies keeps these bounces moderate at the price of about that many more operators; at
    the Heisenberg point the tables stay bounce-free.
    """
    E = [diag_energy(V, mu_i, mu_j, a, b) for a in (0, 1) for b in (0, 1)]
    spread = max(E) - min(E)
    scale = max(abs(t), abs(V), abs(mu_i) + abs(mu_j), 1e-12)
    return max(0.25 * t, 0.5 * spread, 1e-3 * scale)


def _build(n_sites, pairs, vecs, names, tvals, Vvals, mu, sites, momenta, lattice, cell, label, families,
           epsilon=None) -> Graph:
    pairs = np.asarray(pairs, dtype=np.int64).reshape(-1, 2)
    count = np.bincount(pairs.ravel(), minlength=n_sites)
    if np.any(count == 0):
        raise ConfigError("geometry: every site must belong to at least one active bond")
    types, key_of, btype = [], {}, []
    for (i, j), nm, t, V in zip(pairs, names, tvals, Vvals):
        mi, mj = mu / count[i], mu / count[j]
        key = (nm, t, V, mi, mj)
        if key not in key_of:
            eps = _eps(t, V, mi, mj) if epsilon is None else float(epsilon)
            key_of[key] = len(types)
            types.append({"name": nm, "t": float(t), "V": float(V), "mu_i": float(mi), "mu_j": float(mj), "eps": eps})
        btype.append(key_of[key])
    return Graph(n_sites=n_sites, bonds=pairs, bond_vec=np.asarray(vecs, np.int64).reshape(-1, 2),
                 bond_type=np.array(btype, np.int64), types=types, sites=np.asarray(sites, np.int64),
                 momenta=np.asarray(momenta, float).reshape(-1, 2), lattice=lattice, cell=cell, name=label,
                 families=tuple(families))


def resolve_cell(model: Model, cluster=None, size=None) -> tuple[Supercell, str]:
    """The torus of a run: a named/explicit cluster or an L1 x L2 rhombus ``size=(L1, L2)``."""
    from ..ed.clusters import get_cluster

    if (cluster is None) == (size is None):
        raise ConfigError("cluster/size: give exactly one of cluster (e.g. 'tri12') or size=(L1, L2)")
    if cluster is not None:
        cell = get_cluster(cluster, model.lattice)
        label = cluster if isinstance(cluster, str) else f"{cell.vectors.tolist()}"
        return cell, label
    try:
        L1, L2 = (int(x) for x in size)
        ok = all(int(x) == x for x in size)
    except (TypeError, ValueError):
        raise ConfigError(f"size: expected two integers (L1, L2), got {size!r}") from None
    if not ok or L1 < 2 or L2 < 2:
        raise ConfigError(f"size: L1 and L2 must be integers >= 2, got {size!r}")
    return Supercell(model.lattice, ((L1, 0), (0, L2))), f"{L1}x{L2}"


def torus(model: Model, cluster=None, size=None, epsilon=None) -> Graph:
    """Bond list of ``model`` on a periodic torus (doubled bonds are refused)."""
    from ..ed.clusters import check_bonds

    if not model.hardcore:
        raise ConfigError(f"U: quantum Monte Carlo supports hard-core bosons only (U = inf), got U = {model.U:g}")
    if any(t < 0 for t in model.t):
        raise ConfigError(f"t: quantum Monte Carlo needs t >= 0 (t < 0 has a sign problem), got {model.t}")
    cell, label = resolve_cell(model, cluster, size)
    check_bonds(cell, model)
    lat = cell.lattice
    N = cell.n_sites
    active = [f for f in range(lat.n_families) if model.t[f] != 0 or model.V[f] != 0]
    if not active and model.V2 == 0:
        active = [0]  # only the chemical potential: carry it on family 0
    pairs, vecs, names, tv, Vv = [], [], [], [], []
    for f in active:
        for s in range(N):
            pairs.append((s, cell.neighbors[f, s]))
            vecs.append(lat.nn[f])
            names.append(lat.families[f])
            tv.append(model.t[f])
            Vv.append(model.V[f])
    if model.V2 != 0:
        for k, d in enumerate(lat.nnn):
            for s in range(N):
                pairs.append((s, cell.nnn_neighbors[k, s]))
                vecs.append(d)
                names.append("nnn")
                tv.append(0.0)
                Vv.append(model.V2)
    return _build(N, pairs, vecs, names, tv, Vv, model.mu, cell.sites, cell.momenta, lat, cell, label,
                  lat.families, epsilon)


def open_chain(length: int, t: float, V: float = 0.0, mu: float = 0.0, epsilon=None) -> Graph:
    """An open chain of ``length`` sites (bonds along d1 of the triangular lattice); for tests
    against free fermions. No windings (open), no momenta."""
    if length < 2:
        raise ConfigError(f"length: an open chain needs >= 2 sites, got {length}")
    lat = get_lattice("triangular")
    pairs = [(s, s + 1) for s in range(length - 1)]
    sites = np.array([(s, 0) for s in range(length)])
    return _build(length, pairs, [(1, 0)] * len(pairs), ["d1"] * len(pairs), [t] * len(pairs),
                  [V] * len(pairs), mu, sites, np.zeros((0, 2)), lat, None, f"open{length}", ("d1",), epsilon)
