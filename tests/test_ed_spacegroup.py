"""Space-group sectors (phasemap.ed.spacegroup) against translation-only sectors and exact limits.

Sources:
* internal consistency: the trivial space-group sector must reproduce the translation-only
  ground-state energy (Perron-Frobenius puts a ground state in both), and every sector's
  spectrum must be part of the Q = 0 translation spectrum;
* exact: Burnside's lemma against an explicit orbit enumeration written here;
* stiffness: linear response at zero twist against the twist finite differences of the
  translation path (two different numerical routes to d^2E/dphi^2).
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest

from phasemap import Model
from phasemap.ed import ground_state
from phasemap.ed.clusters import get_cluster, point_group
from phasemap.ed.sector import Sector
from phasemap.ed.spacegroup import SymSector, det_character, group_permutations, sector_dimension
from phasemap.ed.solve import solve_ed

CASES = [  # (cluster, N, t, V, V2)
    ("tri12", 4, 0.1, 1.0, 0.0),
    ("tri12", 5, (0.1, 0.1, 0.15), (1.0, 1.0, 0.8), 0.0),  # uniaxial strain along d3: C2v kept
    ("tri12", 6, (0.3, 0.1, 0.2), 1.0, 0.0),  # all families different: only C2
    ("tri21", 7, 0.12, 1.0, 0.0),  # chiral cluster: rotations only
    ("tri21", 9, (0.2, 0.2, 0.1), 1.0, 0.3),
]


@pytest.mark.parametrize("cluster,N,t,V,V2", CASES)
def test_space_group_reproduces_translation_energy(cluster, N, t, V, V2):
    """Internal consistency (issue 14): E0 of the trivial sector = translation-only E0 to 1e-10."""
    m = Model("triangular", t=t, V=V, V2=V2, mu=0.2)
    a = ground_state(m, cluster, N, space_group=True)
    b = ground_state(m, cluster, N, space_group=False, all_momenta=True)
    assert isinstance(a.sector, SymSector) and not isinstance(b.sector, SymSector)
    assert abs(a.e0 - b.e0) < 1e-10
    assert a.sector.dim < b.dims[b.q_name]  # the point group actually reduced the sector


@pytest.mark.slow
@pytest.mark.parametrize("N,t", [(9, 0.1), (8, (0.1, 0.1, 0.15))])
def test_space_group_reproduces_translation_energy_tri27(N, t):
    """Internal consistency on tri27 (issue 14), 1e-10."""
    m = Model("triangular", t=t, V=1.0, V2=0.1)
    a = ground_state(m, "tri27", N, space_group=True)
    b = ground_state(m, "tri27", N, space_group=False)
    assert abs(a.e0 - b.e0) < 1e-10


def test_sector_spectra_inside_translation_spectrum():
    """Every eigenvalue of the trivial and of the det (mirror-odd) sector is a Q = 0 level (dense, tri12)."""
    m = Model("triangular", t=0.2, V=1.0, mu=0.1)
    cell = get_cluster("tri12")
    N = 5
    full = np.linalg.eigvalsh(Sector(cell, m, N).matrix(np.zeros(2)).toarray())
    ops = point_group(cell, m)
    dims = 0
    for chi in (None, det_character(ops)):
        s = SymSector(cell, m, N, ops=ops, chi=chi)
        w = np.linalg.eigvalsh(s.matrix().toarray())
        assert np.all(np.min(np.abs(w[:, None] - full[None, :]), axis=1) < 1e-10)
        dims += s.dim
    assert dims < len(full)  # the two-dimensional irreps at Q = 0 are missing from these two
    # the mirror-odd sector is a genuinely different sector (its lowest level lies higher)
    s_odd = SymSector(cell, m, N, ops=ops, chi=det_character(ops))
    assert s_odd.solve()[0][0] > full[0] + 1e-6


def _orbits_by_hand(perms, L, N):
    """Count orbits of N-particle hard-core states under a permutation group (explicit sets)."""
    seen, count = set(), 0
    for occ in itertools.combinations(range(L), N):
        s = sum(1 << i for i in occ)
        if s in seen:
            continue
        count += 1
        for p in perms:
            seen.add(sum(1 << int(p[i]) for i in occ))
    return count


@pytest.mark.parametrize("cluster,t", [("tri12", 0.1), ("tri12", (0.1, 0.1, 0.2)), ("tri21", 0.1)])
def test_burnside_dimension_equals_explicit_orbit_count(cluster, t):
    """Exact (Burnside's lemma) against explicit orbit enumeration; and the sector finds them all."""
    m = Model("triangular", t=t, V=1.0)
    cell = get_cluster(cluster)
    perms, _ = group_permutations(cell, point_group(cell, m))
    for N in (2, 3, 4):
        d = sector_dimension(perms, np.ones(len(perms), np.int64), N)
        assert d == _orbits_by_hand(perms, cell.n_sites, N)
        assert SymSector(cell, m, N).dim == d


@pytest.mark.parametrize("cluster,N,t", [("tri12", 4, 0.1), ("tri12", 5, (0.1, 0.1, 0.15)), ("tri21", 8, 0.2)])
def test_stiffness_linear_response_equals_twist(cluster, N, t):
    """Linear response at zero twist (space group) = twist finite differences (translations), 1e-7."""
    m = Model("triangular", t=t, V=1.0)
    kw = dict(observables=("stiffness",), neighbors=False)
    a = solve_ed(m, cluster=cluster, particles=N, **kw)
    b = solve_ed(m, cluster=cluster, particles=N, space_group=False, **kw)
    assert a.extra["stiffness_method"] == "linear response"
    assert b.extra["stiffness_method"] == "twist finite differences"
    for f in ("d1", "d2", "d3"):
        assert abs(a.order[f"stiffness_{f}"] - b.order[f"stiffness_{f}"]) < 1e-7
    assert a.order["stiffness_error"] < 1e-8


def test_guard_uses_exact_sector_dimension():
    """The memory guard refuses with the exact (Burnside) sector dimension in the message."""
    from phasemap.model import ConfigError

    m = Model("triangular", t=0.1, V=1.0)
    cell = get_cluster("tri36")
    perms, _ = group_permutations(cell, point_group(cell, m))
    dim = sector_dimension(perms, np.ones(len(perms), np.int64), 12)
    assert dim == 2905462  # = C(36,12)/432 rounded up by the symmetric states
    assert dim >= math.comb(36, 12) / len(perms)
    with pytest.raises(ConfigError, match="2905462 in the space-group sector") as e:
        ground_state(m, "tri36", 12, budget_gib=1.0)
    assert "budget" in str(e.value)


def test_point_no_stiffness_flag(capsys):
    """CLI: --no-stiffness drops the stiffness of an ED point; refused for a method without one."""
    import json

    from phasemap.cli import main

    args = ["point", "--t", "0.1", "--V", "1", "--hardcore", "--method", "ed", "--cluster", "tri12",
            "--particles", "4", "--json"]
    assert main(args) == 0
    assert "stiffness" in json.loads(capsys.readouterr().out)["order"]
    assert main(args + ["--no-stiffness"]) == 0
    order = json.loads(capsys.readouterr().out)["order"]
    assert "stiffness" not in order and "S(K)/N" in order
    assert main(["point", "--t", "0.1", "--V", "1", "--hardcore", "--mu", "1", "--no-stiffness"]) == 2
    assert "--no-stiffness" in capsys.readouterr().err


def test_stiffness_sector_over_budget_is_skipped_with_its_estimate():
    """The stiffness sector (smaller group, larger sector) over the budget: no stiffness, a flag
    with the estimate, everything else computed (how tri36 runs at the default budget)."""
    m = Model("triangular", t=0.1, V=1.0)
    sol = solve_ed(m, cluster="tri21", particles=7, budget_gib=0.0015, neighbors=False)
    assert "stiffness" not in sol.order and "S(K)/N" in sol.order
    flag = next(f for f in sol.flags if f.startswith("stiffness not computed"))
    assert "stiffness sector" in flag and "GiB" in flag
    assert solve_ed(m, cluster="tri21", particles=7, budget_gib=0.1, neighbors=False).order["stiffness"] > 0


@pytest.mark.parametrize("mirror_odd", [False, True])
def test_freed_rank_table_is_rebuilt_identically(mirror_odd):
    """A sector that frees its rank table after the build (how large tri36 sectors run)
    rebuilds the same table on demand, and the on-the-fly product equals the explicit matrix
    (internal consistency; the mirror-odd character exercises the sign bit of the packed entries)."""
    m = Model("triangular", t=(0.1, 0.07, 0.1), V=(1.0, 1.2, 1.0))
    cell = get_cluster("tri27", "triangular")
    ops = point_group(cell, m)
    assert len(ops) == 4  # strain keeps C2 and two mirrors
    chi = det_character(ops) if mirror_odd else None
    kept = SymSector(cell, m, 8, ops=ops, chi=chi, keep_table=True)
    freed = SymSector(cell, m, 8, ops=ops, chi=chi, keep_table=False)
    assert freed.table is None and kept.table is not None
    assert np.array_equal(freed.ensure_table(), kept.table)
    x = np.random.default_rng(3).normal(size=kept.dim)
    assert np.allclose(freed.matvec(x), kept.matrix() @ x, atol=1e-13)
    if mirror_odd:
        assert np.any(kept.data < 0) and np.any(kept.data > 0)
