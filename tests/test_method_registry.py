"""A toy method registered from outside runs through solve, a phase map and the strain workflow.

The toy is the classical lattice gas: site-decoupled mean field with every hopping set to zero.
Its answers are exact (t = 0 hard-core bosons on the triangular lattice with NN repulsion V):
the 1/3 plateau of the √3×√3 solid runs from mu = 0 to mu = 3V — adding a particle to the solid
costs 3V (three occupied neighbours), removing one gains nothing (exact; common knowledge).
"""

import math

import numpy as np
import pytest

import phasemap
from phasemap.methods import Capabilities, MethodSpec, available, get_method, parse_specs, register, unregister
from phasemap.methods.grand_canonical import GrandCanonicalMethod
from phasemap.mf import MFOptions, solve_batch
from phasemap.model import ConfigError
from phasemap.params import ParamBatch


class ClassicalGas(GrandCanonicalMethod):
    name = "toygas"
    title = "classical lattice gas (toy)"
    Options = MFOptions
    capabilities = Capabilities(grand_canonical=True, sharp_edges=True)
    caution = "toy method for the registry test"

    def solve_batch(self, batch, options=None, init=None):
        b = ParamBatch(batch.base, np.zeros_like(batch.t), batch.V, batch.U, batch.V2, batch.mu)
        res = solve_batch(b, self.options(options), init=init)
        res.batch = batch
        res.method = self.name
        return res

    def site_coordinates(self, batch, options=None):
        from phasemap.lattice import search_cell

        return search_cell(batch.base.lattice).sites


@pytest.fixture
def toy():
    m = register(ClassicalGas())
    yield m
    unregister(m.name)


def test_registered_toy_is_found_and_spelled_once(toy):
    assert "toygas" in available() and get_method("toygas") is toy
    assert MethodSpec.parse("toygas").name == "toygas"
    with pytest.raises(ConfigError, match="takes no cluster"):
        MethodSpec.parse("toygas:tri12")
    with pytest.raises(ConfigError, match="did you mean 'tol'"):
        MethodSpec.parse("toygas", tl=1e-9)
    assert [s.name for s in parse_specs("mf,toygas,cmf:tri6")] == ["mf", "toygas", "cmf:tri6"]
    for bad in ("mf,", ",mf", "mf,,cmf:tri6", ""):
        with pytest.raises(ConfigError, match="methods"):
            parse_specs(bad)


def test_toy_through_solve(toy):
    m = phasemap.Model("triangular", t=0.3, V=1.0, mu=1.5)  # hopping ignored by the toy
    sol = phasemap.solve(m, method="toygas")
    assert sol.method == "toygas" and sol.converged
    assert sol.label == "solid 1/3"
    assert abs(sol.energy - (-1.5 / 3)) < 1e-10  # exact: E/N = -mu/3 in the 1/3 solid at t = 0
    assert sol.errors == {}


def test_toy_through_a_phase_map(toy):
    from phasemap.scan import phase_map

    m = phasemap.Model("triangular", t=0.0, V=1.0)
    ds = phase_map(m, x=("t", np.array([0.0, 0.1])), y=("mu", np.array([-0.5, 1.5, 4.5, 6.5])),
                   method="toygas", refine=False, progress=False)
    assert ds.attrs["method"] == "toygas"
    labels = ds["label"].values[0]
    assert list(labels) == ["empty", "solid 1/3", "solid 2/3", "full"]


def test_toy_through_the_strain_workflow(toy, tmp_path):
    from phasemap.strain import check_strain, read_table

    path = tmp_path / "toy.csv"  # invented table (V2 = 0, isotropic V) for this test only
    path.write_text("# unit = K\n# lattice = triangular\nstrain,t_d1,t_d2,t_d3,V_d1,V_d2,V_d3\n"
                    "0.0,0.5,0.5,0.5,6.0,6.0,6.0\n0.1,0.9,0.7,0.7,6.0,6.0,6.0\n")
    table = read_table(str(path))
    chk = check_strain(table, 0.05, "toygas", melt=False)
    p = chk.data["plateau"]
    V = table.model(0.05).V
    assert chk.data["method"] == "toygas" and chk.data["caution"] == toy.caution
    # exact t = 0 edges (isotropic V): removing a particle of the √3×√3 solid costs nothing
    # (mu_lo = 0); an added particle meets three occupied neighbours (mu_hi = 3V)
    assert math.isclose(p["mu_lo"], 0.0, abs_tol=2e-3) and math.isclose(p["mu_hi"], 3 * V[0], rel_tol=1e-4)
