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


def _synthetic_step(w_inf, slope_N, err=1e-3, sizes=(6, 9)):
    """Widths w_L = w_inf(s) + slope/N exactly (the 1/N law), tiny errors; binder crossing at index 2."""
    from phasemap.strain.qmc_method import QMCStep

    P = len(w_inf)
    per = {}
    Ns = np.array([L * L for L in sizes], float)
    per["width"] = w_inf[:, None] + slope_N / Ns[None, :]
    per["width_error"] = np.full((P, len(sizes)), err)
    per["binder"] = np.column_stack([np.linspace(1.2, 1.8, P), np.linspace(1.0, 2.0, P)])[:, :len(sizes)]
    per["binder_error"] = np.full((P, len(sizes)), 1e-3)
    ext = {"width": w_inf.copy(), "width_error": np.full(P, err)}
    extL = {"width": w_inf.copy(), "width_error": np.full(P, err)}
    return QMCStep(tuple(sizes), 1 / 3, np.full(P, 0.3), np.ones(P, bool), per, ext, extL, [],
                   {"seed": 0, "every": 1})


def test_critical_strain_root_errors_and_bracket():
    from phasemap.strain.qmc_method import qmc_critical
    from phasemap.strain.record import StepRecord

    table = read_table("demo")
    S = np.linspace(0.0, 0.16, 5)
    w = 1.0 - S / 0.1  # exact root at strain 0.1 (linear between computed strains)
    step = _synthetic_step(w, 20.0)
    rec = StepRecord("qmc", "1/3", True, w * 0, w, w, w > 0, np.ones(5, bool), detail=step, flags=[[]] * 5)
    c = qmc_critical(None, table, S, rec, "1/3")
    assert c.status == "found" and c.strain_c == pytest.approx(0.1, abs=1e-9)
    # statistical error from resampling against linear error propagation (exact for this construction):
    # intercept error of the two-point 1/N fit, sigma_a = sigma sqrt(x1^2 + x2^2)/|x1 - x2|, x = 1/N;
    # root between s = 0.08 (h = +0.2) and 0.12 (h = -0.2): dx/dh_i = 0.04 * 0.2 / 0.4^2 = 0.05 each
    sig_a = np.sqrt((1 / 36) ** 2 + (1 / 81) ** 2) / abs(1 / 36 - 1 / 81) * 1e-3
    assert c.stat_error == pytest.approx(sig_a * np.sqrt(2) * 0.05, rel=0.15)
    assert c.binder_crossing["value"] == pytest.approx(0.08, abs=1e-9)
    # the 1/L extrapolation closes elsewhere (0.12): far beyond the statistical errors -> bracket
    step.extrap_L["width"] = 1.0 - S / 0.12
    c = qmc_critical(None, table, S, rec, "1/3")
    assert c.status == "bracket" and c.bracket == pytest.approx((0.1, 0.12))
    assert "between 0.1 and 0.12" in c.summary()
