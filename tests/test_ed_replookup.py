"""Table-free representative lookup (phasemap.ed.replookup) and hard-core particle-hole symmetry.

Sources:
* internal consistency: the table-free sector (largest orbit image found by applying the
  group, index by bisection) must reproduce the dense rank-table sector's E0 to 1e-10 and its
  whole spectrum (dense eigvalsh), including a sector with a sign character;
* exact: the representative of a state is the largest of its explicit images under every
  site permutation of the group (brute force written here) and the stabiliser is the number
  of permutations that fix it;
* exact: particle-hole symmetry of hard-core bosons, E0(L - N) = E0(N) + (L - 2N)(W - mu),
  derived below, against direct diagonalisation of every N.
"""

from __future__ import annotations

import numpy as np
import pytest

from phasemap import ConfigError, Model
from phasemap.ed import ground_state, staircase
from phasemap.ed.clusters import get_cluster, point_group
from phasemap.ed.replookup import row_layout
from phasemap.ed.sgkernels import _canon
from phasemap.ed.solve import solve_ed
from phasemap.ed.spacegroup import SymSector, det_character, group_permutations

CASES = [  # (cluster, N, t, V, V2)
    ("tri12", 4, 0.1, 1.0, 0.0),
    ("tri12", 5, (0.1, 0.1, 0.15), (1.0, 1.0, 0.8), 0.0),  # uniaxial strain: C2v kept
    ("tri12", 6, (0.3, 0.1, 0.2), 1.0, 0.0),  # all families different: only C2
    ("tri21", 7, 0.12, 1.0, 0.0),  # chiral cluster, rows of 7 sites
    ("tri21", 10, (0.2, 0.2, 0.1), (1.0, 1.0, 1.1), 0.3),
    ("tri27", 9, 0.1, 1.0, 0.1),  # rows of 9 sites with a twisted wrap
    ("tri27", 8, (0.1, 0.1, 0.15), (1.0, 1.0, 0.9), 0.1),
    ("tri36", 5, 0.1, 1.0, 0.2),  # 6 x 6 rows, two-row head
    ("tri36", 6, (0.1, 0.13, 0.1), (1.0, 0.9, 1.0), 0.0),
]


@pytest.mark.parametrize("cluster,N,t,V,V2", CASES)
def test_table_free_reproduces_table_energy(cluster, N, t, V, V2):
    """E0 of the table-free sector = E0 of the rank-table sector to 1e-10, same dimension and entries."""
    m = Model("triangular", t=t, V=V, V2=V2, mu=0.3)
    a = ground_state(m, cluster, N, rep_lookup="table")
    b = ground_state(m, cluster, N, rep_lookup="search")
    assert a.sector.lookup == "table" and b.sector.lookup == "search"
    assert a.sector.dim == b.sector.dim and a.sector.nnz == b.sector.nnz
    assert abs(a.e0 - b.e0) < 1e-10


@pytest.mark.parametrize("cluster,t", [("tri12", (0.2, 0.2, 0.3)), ("tri27", (0.1, 0.07, 0.1))])
def test_table_free_sign_character_spectrum(cluster, t):
    """Mirror-odd (det) character: the whole table-free spectrum equals the rank-table one."""
    m = Model("triangular", t=t, V=1.0, mu=0.1)
    cell = get_cluster(cluster)
    ops = point_group(cell, m)
    chi = det_character(ops)
    N = 5
    a = SymSector(cell, m, N, ops=ops, chi=chi, lookup="table")
    b = SymSector(cell, m, N, ops=ops, chi=chi, lookup="search")
    assert a.dim == b.dim > 1 and np.any(b.data < 0) and np.any(b.data > 0)
    wa = np.linalg.eigvalsh(a.matrix().toarray())
    wb = np.linalg.eigvalsh(b.matrix().toarray())
    assert np.abs(wa - wb).max() < 1e-10
    x = np.random.default_rng(2).normal(size=b.dim)
    assert np.allclose(b.matvec(x), b.matrix() @ x, atol=1e-13)


@pytest.mark.parametrize("cluster,t", [("tri12", 0.1), ("tri21", 0.1), ("tri27", (0.1, 0.1, 0.2)), ("tri36", 0.1),
                                       ("tri36", (0.1, 0.1, 0.2))])
def test_representative_is_largest_explicit_image(cluster, t):
    """Exact: the key equals max over all |G| explicit permutations; the count equals the stabiliser."""
    m = Model("triangular", t=t, V=1.0)
    cell = get_cluster(cluster)
    ops = point_group(cell, m)
    ident = next(k for k, M in enumerate(ops) if np.array_equal(M, np.eye(2)))
    ops.insert(0, ops.pop(ident))
    perms, _ = group_permutations(cell, ops)
    L = cell.n_sites
    sec = SymSector(cell, m, 3, ops=ops, lookup="search")
    lk = sec._search
    rm = lk.layout.rm
    scr = np.empty(2 * len(ops), np.int64)
    rng = np.random.default_rng(7)
    for _ in range(300):
        occ = rng.choice(L, size=int(rng.integers(1, L)), replace=False)
        if rng.random() < 0.3:  # symmetric states (large stabilisers): a periodic pattern
            occ = np.nonzero((cell.sites[:, 0] - cell.sites[:, 1]) % 3 == 0)[0]
        imgs = [sum(1 << int(rm[p[i]]) for i in occ) for p in perms]
        s = sum(1 << int(i) for i in occ)
        best, sgn, cnt, ok = _canon(np.int64(s), *lk.pack[:7], scr)
        assert best == max(imgs) and cnt == imgs.count(max(imgs)) and ok and sgn == 1


def test_row_layouts_of_the_library():
    """Every library torus splits into rows of <= 12 sites (so the table-free path is available)."""
    for name, n1 in (("tri9", 3), ("tri12", 6), ("tri21", 7), ("tri27", 9), ("tri36", 6)):
        lay = row_layout(get_cluster(name))
        assert lay.n1 == n1 and lay.n1 * lay.n2 == get_cluster(name).n_sites


def test_table_free_observables_and_stiffness_equal_table():
    """S(Q), condensate fraction (matrix-free hops through the search) and stiffness agree to 1e-9."""
    m = Model("triangular", t=(0.2, 0.2, 0.25), V=1.0)
    a = solve_ed(m, cluster="tri12", particles=5, rep_lookup="table", neighbors=False)
    b = solve_ed(m, cluster="tri12", particles=5, rep_lookup="search", neighbors=False)
    for k in ("S(K)/N", "condensate_fraction", "stiffness"):
        assert abs(a.order[k] - b.order[k]) < 1e-9, k


def test_auto_lookup_and_guard():
    """auto: the table-free search on every torus with a row layout, the rank table otherwise
    (a 13-site torus: one cyclic row of 13 > 12 sites); the guard refuses with the table-free
    estimate, and the forced table's estimate holds its 4 bytes per Fock state."""
    import math

    from phasemap.ed.groundstate import space_group_plan

    m = Model("triangular", t=0.1, V=1.0)
    cell = get_cluster("tri36")
    lk, est = space_group_plan(m, cell, 18, budget_gib=13.0)
    assert lk == "search" and "table-free" in est.describe() and est.gib < 12
    lk_t, est_t = space_group_plan(m, cell, 18, budget_gib=None, rep_lookup="table")
    assert lk_t == "table" and est_t.bytes > 4 * math.comb(36, 18)
    with pytest.raises(ConfigError, match="table-free lookup"):
        ground_state(m, "tri36", 18, budget_gib=2.0)
    odd = get_cluster([[4, 1], [-1, 3]])
    assert odd.n_sites == 13 and row_layout(odd) is None
    assert space_group_plan(m, odd, 4)[0] == "table"
    with pytest.raises(ConfigError, match="rep_lookup"):
        ground_state(m, odd, 4, rep_lookup="search")
    with pytest.raises(ConfigError, match="rep_lookup"):
        ground_state(m, "tri12", 4, rep_lookup="hash")
    a = ground_state(m, "tri27", 13)
    assert a.sector.lookup == "search"


# -- particle-hole symmetry -------------------------------------------------------------------
@pytest.mark.parametrize("cluster,model", [
    ("tri12", {"t": 0.15, "V": 1.0, "mu": 0.4}),
    ("tri12", {"t": (0.2, 0.1, 0.15), "V": (1.0, 0.7, 1.3), "mu": -0.2}),
    ("tri21", {"t": (0.2, 0.3, 0.25), "V": (1.0, 0.8, 1.2), "V2": 0.3, "mu": 0.7}),
])
def test_particle_hole_every_n_against_direct(cluster, model):
    """Exact: n -> 1 - n maps the hopping onto itself (hard-core) and sum_b V_b n_i n_j onto
    sum_b V_b (1 - n_i)(1 - n_j) = sum_b V_b - sum_b V_b (n_i + n_j) + sum_b V_b n_i n_j. On a
    torus every family f has L bonds and each site lies on two of them, so
    sum_b V_b (n_i + n_j) = 2 N sum_f V_f; likewise for the 3 next-nearest families with V2.
    With -mu N: E0(L - N) = E0(N) + L W - 2 N W - mu (L - 2 N) = E0(N) + (L - 2N)(W - mu),
    W = sum_f V_f + 3 V2. Checked for every N against diagonalising L - N directly."""
    m = Model("triangular", **model)
    a = staircase(m, cluster, particle_hole=True, observables=())
    b = staircase(m, cluster, particle_hole=False, observables=())
    L = get_cluster(cluster).n_sites
    assert int(a["from_particle_hole"].values.sum()) == L - L // 2
    assert np.abs(a["E0"].values - b["E0"].values).max() < 1e-9
    W = sum(m.V) + 3 * m.V2
    for N in range(L + 1):  # the derivation above, independent of the module's shift function
        assert abs(b["E0"].values[L - N] - b["E0"].values[N] - (L - 2 * N) * (W - m.mu)) < 1e-9
