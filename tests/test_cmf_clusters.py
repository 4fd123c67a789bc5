"""Cluster library, scaling variable λ, user clusters, memory guard, option checking.

Sources: bonds inside each library cluster are counted here from its site coordinates with an
independent bond list (tests/_cluster_dense.py); λ = N_B / (N_C z / 2) by definition (bonds
kept over all bonds of the cluster's sites; D. Yamamoto, A. Masaki, I. Danshita, PRB 86,
054516 (2012), attribution from memory). Closed forms for the compact shapes: a triangle of
side k has k(k+1)/2 sites and 3k(k-1)/2 bonds (tri3: k = 2, 3 bonds; tri6: k = 3, 9 bonds);
a k x l rectangle on the square lattice has k(l-1) + l(k-1) bonds. The largest number of
bonds of an N-site animal on the triangular lattice is 3N - ceil(sqrt(12N - 3)) (F. Harary,
H. Harborth, J. Combin. Inform. System Sci. 1, 1 (1976); quoted from memory).
"""

import math
from fractions import Fraction

import pytest
from _cluster_dense import cluster_bonds

from phasemap import ConfigError, Model
from phasemap.cmf import (
    check_budget,
    estimate_cost,
    get_cluster,
    library_names,
    solve_cmf_batch,
)
from phasemap.cmf.clusters import max_bonds_triangular
from phasemap.lattice import patterns_for
from phasemap.params import ParamBatch

Z = {"triangular": 6, "square": 4}


def harary_harborth(n):
    return 3 * n - math.ceil(math.sqrt(12 * n - 3))


def counted_bonds(cl):
    return len(cluster_bonds(cl.lattice.name, cl.sites, cl.cell.vectors)["intra"])


@pytest.mark.parametrize("name, n_bonds", [("tri3", 3), ("tri6", 9), ("sq2x2", 2 * 1 + 2 * 1),
                                           ("sq2x3", 2 * 2 + 3 * 1), ("sq3x3", 3 * 2 + 3 * 2),
                                           ("sq4x4", 4 * 3 + 4 * 3), ("tri1", 0), ("tri3-sd", 0), ("sq2-sd", 0)])
def test_bond_count_of_compact_shapes(name, n_bonds):
    # closed forms of the module notes; the package's count and the count made here agree
    cl = get_cluster(name)
    assert counted_bonds(cl) == cl.n_bonds == n_bonds


@pytest.mark.parametrize("name", library_names())
def test_lambda_is_kept_bonds_over_all_bonds(name):
    # λ = N_B / (N_C z / 2) with N_B counted here
    cl = get_cluster(name)
    z = Z[cl.lattice.name]
    assert cl.lam_fraction == Fraction(2 * counted_bonds(cl), cl.n_sites * z)


def test_lambda_values_of_the_scaling_sequence():
    # from the counts above: tri3 3/9, tri6 9/18, tri9 16/27, tri12 24/36 (tri9, tri12 counted here)
    lam = {n: get_cluster(n).lam_fraction for n in ("tri3", "tri6", "tri9", "tri12")}
    assert lam == {"tri3": Fraction(1, 3), "tri6": Fraction(1, 2), "tri9": Fraction(16, 27), "tri12": Fraction(2, 3)}


@pytest.mark.parametrize("name", [n for n in library_names("triangular") if n not in ("tri1", "tri3-sd")])
def test_triangular_library_commensurate_and_bond_maximal(name):
    cl = get_cluster(name)
    # commensurate with the √3×√3 pattern: s = (i - j) mod 3 is periodic on the cluster's
    # superlattice iff both generators have s = 0 (s is linear mod 3)
    assert all((v[0] - v[1]) % 3 == 0 for v in cl.cell.vectors.tolist())
    assert cl.commensurate(patterns_for("triangular")["sqrt3"].supercell())
    # bond count: the Harary & Harborth (1976) maximum, except tri15 (30 of 31) and tri21 (46 of
    # 47), one bond short (the greedy domain search, docs/cmf.md)
    assert max_bonds_triangular(cl.n_sites) == harary_harborth(cl.n_sites)
    assert counted_bonds(cl) == harary_harborth(cl.n_sites) - (1 if name in ("tri15", "tri21") else 0)


def test_incommensurate_cell_is_refused_by_the_commensurability_check():
    # (2,0) has s = 2: the √3×√3 labelling is not periodic on the 2×2 cell
    from phasemap.cmf.clusters import Cluster
    from phasemap.lattice import Supercell

    cl = Cluster(Supercell("triangular", ((2, 0), (0, 2))))
    assert not cl.commensurate(patterns_for("triangular")["sqrt3"].supercell())


def test_every_bond_counted_once():
    # each lattice bond belongs to one (site, family) pair per cell: intra + inter = N * z/2
    for name in library_names():
        cl = get_cluster(name)
        assert len(cl.intra) + len(cl.inter) == cl.n_sites * cl.lattice.n_families
        assert len(cl.intra2) + len(cl.inter2) == cl.n_sites * len(cl.lattice.nnn)


def test_tri12_commensurate_with_all_patterns():
    cl = get_cluster("tri12")
    assert all(cl.commensurate(p.supercell()) for p in patterns_for("triangular").values())
    assert not get_cluster("tri9").commensurate(patterns_for("triangular")["stripe_d1"].supercell())


def test_user_cluster_validation():
    cl = get_cluster({"vectors": [[2, 0], [0, 1]], "sites": [[0, 0], [1, 0]]}, "square")
    assert cl.n_bonds == 1 and cl.lam_fraction == Fraction(1, 4)
    with pytest.raises(ConfigError, match="tile"):
        get_cluster({"vectors": [[2, 0], [0, 1]], "sites": [[0, 0], [2, 0]]}, "square")
    with pytest.raises(ConfigError, match="vectors"):
        get_cluster({"sites": [[0, 0]]}, "square")
    with pytest.raises(ConfigError, match="unknown key 'vector'"):
        get_cluster({"vector": [[1, 0], [0, 1]]}, "square")
    with pytest.raises(ConfigError, match="unknown cluster 'tri7'"):
        get_cluster("tri7", "triangular")
    with pytest.raises(ConfigError, match="square lattice"):
        get_cluster("sq2x2", "triangular")


def test_unknown_option_and_budget():
    b = ParamBatch.from_models([Model("triangular", t=0.1, V=1.0, mu=3.0)])
    with pytest.raises(ConfigError, match="unknown key 'tolerance'"):
        solve_cmf_batch(b, cluster="tri3", tolerance=1e-6)
    est = estimate_cost(get_cluster("tri21"), 1)
    assert est.dim == 2**21
    with pytest.raises(ConfigError, match="2,097,152") as e:
        solve_cmf_batch(b, cluster="tri21", memory_mb=100)
    assert "MiB" in str(e.value)
    soft = get_cluster("sq4x4")
    with pytest.raises(ConfigError, match="too large"):
        check_budget(soft, 2, memory_mb=4096, max_dim=2**22)  # 3^16 = 43 M states
