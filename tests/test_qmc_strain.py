"""qmc in the strain workflow and in maps: refusals, edge interpolation, errors carried, flags."""

import math

import numpy as np
import pytest

from phasemap import Model
from phasemap.methods import MethodSpec
from phasemap.model import ConfigError
from phasemap.strain import read_table
from phasemap.strain.qmc_method import _edge_from_pair, qmc_setup, strain_settings


def test_spec_spelling_and_settings():
    sp = MethodSpec.parse("qmc:6+9+12")
    assert sp.name == "qmc:6+9+12"
    assert strain_settings(sp)["sizes"] == (6, 9, 12)
    assert strain_settings(MethodSpec.parse("qmc"))["sizes"] == (6, 9)


def test_setup_refusals_name_the_field():
    models = read_table("demo").models([0.0, 0.16])
    with pytest.raises(ConfigError, match="K point"):
        qmc_setup(MethodSpec.parse("qmc:6+8"), models)
    with pytest.raises(ConfigError, match="two sizes"):
        qmc_setup(MethodSpec.parse("qmc:6x6"), models)
    with pytest.raises(ConfigError, match="sweeps"):
        qmc_setup(MethodSpec.parse("qmc", sweeps=4, bins=12), models)
    with pytest.raises(ConfigError, match="strain workflow"):
        MethodSpec.parse("qmc:6x6", rounds=3).impl.solve_point(Model("triangular", t=0.1, V=1), size=(6, 6),
                                                                rounds=3)


def test_edge_interpolation_exact_and_error_propagation():
    # exact: a straight n(mu) line through (0, 0.3) and (1, 0.4) crosses 0.35 at 0.5
    x, s = _edge_from_pair(0.0, 0.3, 0.001, 1.0, 0.4, 0.001, 0.35)
    assert x == pytest.approx(0.5)
    # independent check of the error: Monte Carlo propagation of the two Gaussian fillings
    rng = np.random.default_rng(0)
    n1 = 0.3 + 0.001 * rng.standard_normal(20000)
    n2 = 0.4 + 0.001 * rng.standard_normal(20000)
    xs = (0.35 - n1) / (n2 - n1)
    assert s == pytest.approx(np.std(xs), rel=0.05)
    assert math.isnan(_edge_from_pair(0.0, 0.3, 0.0, 1.0, 0.3, 0.0, 0.35)[1])


def test_filling_curve_with_qmc_carries_errors_and_flags():
    from phasemap.scan import filling_curve

    m = Model("triangular", t=0.3, V=0.0, mu=0.0)
    fc = filling_curve(m, mu=[-0.5, 0.5], relative=False, method="qmc:3x3",
                       options={"T": 0.5, "sweeps": 200, "bins": 8, "workers": 1})
    ds = fc.dataset
    assert np.all(ds["error_filling"].values > 0)
    assert "decorrelated" in ds and "tau_filling" in ds
    # unconverged exactly where not decorrelated (never classified)
    assert np.array_equal(ds["converged"].values, ds["decorrelated"].values)
    assert fc.plateaus == []  # no plateaus from noisy labels
    # free bosons at V = 0 (hard-core, filling rises with mu): exact monotonic ordering within errors
    n, e = ds["filling"].values, ds["error_filling"].values
    assert n[1] - n[0] > 3 * math.hypot(*e)


def test_toml_filling_curve_with_qmc(tmp_path):
    from phasemap.cli import main
    from phasemap.store import load_netcdf

    cfg = tmp_path / "c.toml"
    cfg.write_text('[model]\nlattice = "triangular"\nt = 0.3\nV = 0.0\nU = "hardcore"\nmu = 0.0\n\n'
                   '[[scan]]\nname = "c"\nkind = "curve"\nx = {name = "mu", start = -0.5, stop = 0.5, num = 2}\n'
                   'relative = false\nmethod = "qmc:3x3"\n\n[solver]\nT = 0.5\nsweeps = 200\nbins = 8\n')
    assert main(["run", str(cfg), "--out", str(tmp_path / "o")]) == 0
    ds = load_netcdf(tmp_path / "o" / "c.nc")
    assert np.all(ds["error_filling"].values > 0)
