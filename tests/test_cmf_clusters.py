"""Cluster library, scaling variable λ, user clusters, memory guard, option checking.

Sources: λ values of the compact 3/6/9/12-site triangular domains 1/3, 1/2, 16/27, 2/3
(DESIGN.md §6, from counting bonds); the largest number of bonds of an N-site animal on the
triangular lattice, 3N - ceil(sqrt(12N - 3)) (Harary & Harborth 1976).
"""

from fractions import Fraction

import pytest

from phasemap import ConfigError, Model
from phasemap.cmf import check_budget, estimate_cost, get_cluster, library_names, solve_cmf_batch
from phasemap.cmf.clusters import max_bonds_triangular
from phasemap.lattice import patterns_for
from phasemap.params import ParamBatch


@pytest.mark.parametrize("name, lam", [("tri3", Fraction(1, 3)), ("tri6", Fraction(1, 2)),
                                       ("tri9", Fraction(16, 27)), ("tri12", Fraction(2, 3)),
                                       ("sq2x2", Fraction(1, 2)), ("sq3x3", Fraction(2, 3)),
                                       ("sq4x4", Fraction(3, 4)), ("tri1", Fraction(0)),
                                       ("tri3-sd", Fraction(0)), ("sq2-sd", Fraction(0))])
def test_lambda_of_compact_domains(name, lam):
    # DESIGN.md §6 (bond counting): λ = N_B / (N_C z / 2)
    assert get_cluster(name).lam_fraction == lam


@pytest.mark.parametrize("name", [n for n in library_names("triangular") if n not in ("tri1", "tri3-sd")])
def test_triangular_library_commensurate_and_bond_maximal(name):
    cl = get_cluster(name)
    # commensurate with the √3×√3 pattern (DESIGN.md §6)
    assert cl.commensurate(patterns_for("triangular")["sqrt3"].supercell())
    # bond count of the domain: Harary & Harborth (1976) maximum (21 sites: one short, documented)
    best = max_bonds_triangular(cl.n_sites)
    assert cl.n_bonds >= best - (1 if cl.n_sites in (15, 21) else 0)


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
