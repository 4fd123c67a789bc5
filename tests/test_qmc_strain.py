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


def test_critical_strain_across_an_undetermined_strain():
    """Regression (demo sweep, session 2): a NaN width (edge from a run that did not decorrelate)
    next to the sign change hid the root and the summary claimed the plateau does not close,
    although the extrapolated width was already negative. NaN = not measured: skipped; the root is
    interpolated between the nearest strains where the width is defined (exact for this
    piecewise-linear construction: 0.04 + 0.08 * 0.5 / 0.7)."""
    from phasemap.strain.qmc_method import qmc_critical
    from phasemap.strain.record import StepRecord

    table = read_table("demo")
    S = np.linspace(0.0, 0.16, 5)
    w = np.array([1.0, 0.5, np.nan, -0.2, -0.3])
    step = _synthetic_step(w, 20.0)
    rec = StepRecord("qmc", "1/3", True, w * 0, w, w, w > 0, np.isfinite(w), detail=step, flags=[[]] * 5)
    c = qmc_critical(None, table, S, rec, "1/3")
    assert c.status == "found" and c.strain_c == pytest.approx(0.04 + 0.08 * 0.5 / 0.7, abs=1e-12)
    assert c.undetermined == [0.08] and c.interval == (0.04, 0.12)
    assert "interpolated between strains 0.04 and 0.12" in c.summary()
    assert "does not close" not in c.summary()
    assert c.stat_error is not None and c.stat_error > 0  # resampling sees the same root
    # closed at every strain where the width is defined: the closing lies below, never "does not close"
    w = np.array([np.nan, -0.1, -0.2, -0.3, -0.4])
    step = _synthetic_step(w, 20.0)
    rec = StepRecord("qmc", "1/3", True, w * 0, w, w, w > 0, np.isfinite(w), detail=step, flags=[[]] * 5)
    c = qmc_critical(None, table, S, rec, "1/3")
    assert c.status == "none" and c.reason == "closed" and c.strain_c is None
    assert "closes below strain 0.04" in c.summary() and "does not close" not in c.summary()
    # open everywhere: the honest "does not close inside the table"
    w = np.array([1.0, np.nan, 0.8, 0.6, 0.5])
    step = _synthetic_step(w, 20.0)
    rec = StepRecord("qmc", "1/3", True, w * 0, w, w, w > 0, np.isfinite(w), detail=step, flags=[[]] * 5)
    c = qmc_critical(None, table, S, rec, "1/3")
    assert c.reason == "open" and "does not close inside the table (smallest 0.5" in c.summary()


def test_binder_crossing_skips_an_undetermined_point():
    """The crossing of two sizes' curves is bracketed by the nearest defined points (a NaN from a
    run that did not decorrelate is skipped, not read as 'no crossing'); exact linear crossing."""
    from phasemap.qmc.scaling import crossings, first_sign_change

    x = np.array([0.0, 1.0, 2.0, 3.0])
    y = np.array([[1.0, 1.5, np.nan, 2.5], [0.0, 1.0, np.nan, 3.5]])  # difference -1, -0.5, nan, +1
    assert first_sign_change(x, y[1] - y[0]) == (pytest.approx(1.0 + 2.0 * 0.5 / 1.5), 1, 3)
    c = crossings(x, [6, 9], y, np.full_like(y, 1e-6), nboot=20)[0]
    assert c["x"] == pytest.approx(1.0 + 2.0 * 0.5 / 1.5)


def _tiny_table(tmp_path):
    """Two strains, V2 = 0 (3x3 tori accept it), hard-core, t/V = 0.05 .. 0.1."""
    p = tmp_path / "tiny.csv"
    p.write_text("# unit = V\nstrain,t,V\n0.0,0.05,1.0\n0.1,0.1,1.0\n")
    return read_table(str(p))


@pytest.mark.slow  # 7-11 s at load 5 (loop-table set-up of the tori and the NetCDF write dominate)
def test_sweep_files_carry_the_qmc_settings_they_ran_with(tmp_path):
    """DEVELOPERS.md conventions: every file of a strain sweep carries store.provenance, and for
    qmc that includes the full statistical settings (sizes, T, sweeps, seed, ...) actually used."""
    import json

    from phasemap.store import COMPLETE_NAME, load_netcdf
    from phasemap.strain.sweep import strain_sweep

    spec = MethodSpec.parse("qmc:3+6", sweeps=40, order_sweeps=40, bins=4, rounds=1, workers=1)
    sw = strain_sweep(_tiny_table(tmp_path), [spec], strains=[0.0, 0.1], melting=True)
    assert not sw.melting and any("no melting temperature for qmc" in n and "Binder ratios" in n for n in sw.notes)
    sw.save(tmp_path / "out", figures=False)
    ds = load_netcdf(tmp_path / "out" / "sweep.nc")
    opts = json.loads(ds.attrs["method_options"])[spec.name]
    assert opts["sizes"] == [3, 6] and opts["sweeps"] == 40 and opts["seed"] == 0 and opts["T_over_V"] == 0.05
    done = json.loads((tmp_path / "out" / COMPLETE_NAME).read_text())
    mo = done["method_options"]
    assert (json.loads(mo) if isinstance(mo, str) else mo)[spec.name]["rounds"] == 1
    head = [ln for ln in (tmp_path / "out" / "plateau.csv").read_text().splitlines() if ln.startswith("#")]
    assert any("method_options" in ln and '"order_sweeps": 40' in ln for ln in head)


def test_point_checkpoint_folder_is_locked(tmp_path):
    """A qmc point with --checkpoint holds the folder's single-writer lock (store.output_lock):
    refused (exit 2, nothing written) while another live run holds it; released afterwards."""
    import json
    import os
    import socket

    from phasemap.cli import main
    from phasemap.store import LOCK_NAME

    ck = tmp_path / "ck"
    ck.mkdir()
    (ck / LOCK_NAME).write_text(json.dumps({"pid": os.getppid(), "pid_start": None, "host": socket.gethostname(),
                                            "started": "2026-01-01T00:00:00+00:00", "command": "other"}))
    argv = ["point", "--t", "0.1", "--V", "1", "--hardcore", "--mu", "1.5", "--method", "qmc:3x3", "--T", "0.5",
            "--sweeps", "40", "--bins", "4", "--checkpoint", str(ck)]
    assert main(argv) == 2
    assert sorted(p.name for p in ck.iterdir()) == [LOCK_NAME]
    (ck / LOCK_NAME).unlink()
    assert main(argv) == 0
    names = sorted(p.name for p in ck.iterdir())
    assert LOCK_NAME not in names and any(n.endswith(".npz") for n in names)


def test_qmc_melting_refused_with_a_reason():
    """No qmc melting temperature yet: the hook says why, and the sweep skips it with that note
    instead of calling it (mean-field methods keep theirs)."""
    from phasemap.methods import get_method
    from phasemap.strain.sweep import _has_melting

    spec = MethodSpec.parse("qmc")
    with pytest.raises(ConfigError, match="no melting temperature.*Binder ratios"):
        get_method("qmc").strain_melting(spec, [], None, "1/3")
    assert not _has_melting(spec) and _has_melting(MethodSpec.parse("mf"))


def test_qmc_check_says_why_there_is_no_melt_factor(tmp_path):
    from phasemap.strain import check_strain

    spec = MethodSpec.parse("qmc:3+6", sweeps=40, order_sweeps=40, bins=4, rounds=1, workers=1)
    res = check_strain(_tiny_table(tmp_path), 0.0, spec)
    assert res.data["melt"]["status"] == "not-computed"
    assert "t/V melt factor: not computed for qmc" in res.verdict()


def test_refine_measures_the_skipped_strains_at_the_closing(monkeypatch):
    """every = 2 measures strains 0, 2, 4, 6, 8 first; the extrapolated width (exactly 1 - p/5 + 20/N
    here) changes sign between 4 and 6, so strain 5 is measured too, and nothing else."""
    import phasemap.strain.qmc_method as qm

    calls = []

    def fake(models, pidx, s, f, T, per, counter, flags):
        calls.append([int(p) for p in pidx])
        for p in pidx:
            for a, L in enumerate(s["sizes"]):
                per["width"][p, a] = 1.0 - p / 5.0 + 20.0 / L ** 2
                per["width_error"][p, a] = 1e-3

    monkeypatch.setattr(qm, "_measure", fake)
    models = [Model(lattice="triangular", t=0.1, V=1.0, U=math.inf)] * 9
    step = qm.qmc_plateaus(models, MethodSpec.parse("qmc"))
    assert calls == [[0, 2, 4, 6, 8], [5]]
    assert np.flatnonzero(step.computed).tolist() == [0, 2, 4, 5, 6, 8]
    assert step.extrap["width"][5] == pytest.approx(0.0, abs=1e-9)  # the 1/N fit is exact here
    calls.clear()
    step = qm.qmc_plateaus(models, MethodSpec.parse("qmc", refine=False))
    assert calls == [[0, 2, 4, 6, 8]]


def test_retry_repeats_undecorrelated_runs_with_more_sweeps(monkeypatch):
    """A run whose filling did not decorrelate is repeated once with retry x sweeps and replaced;
    with retry = 1 its edge stays NaN (never reported). Fake sampler: an exact step n(mu) on each
    torus with edges at mu = 1 and 2, 'not decorrelated' below 6000 sweeps within 0.5 of an edge."""
    from types import SimpleNamespace

    import phasemap.qmc.scaling as sc
    import phasemap.strain.qmc_method as qm

    seen = []

    def fake_run_many(jobs, workers=None):
        out = []
        for m, kw in jobs:
            L = kw["size"][0]
            N = round(L * L / 3)
            n = (N + (m.mu > 2.0) - (m.mu < 1.0)) / L ** 2
            ok = kw["sweeps"] >= 6000 or min(abs(m.mu - 1.0), abs(m.mu - 2.0)) > 0.5
            seen.append((kw["sweeps"], ok))
            est = SimpleNamespace(value=n, error=1e-4, decorrelated=ok)
            out.append(SimpleNamespace(filling=est, decorrelated=ok, flags=[] if ok else ["not decorrelated: filling"],
                                       estimates={"filling": est}))
        return out

    monkeypatch.setattr(sc, "run_many", fake_run_many)
    models = [Model(lattice="triangular", t=0.1, V=1.0, U=math.inf)]
    step = qm.qmc_plateaus(models, MethodSpec.parse("qmc", sweeps=1500))
    assert step.retried > 0 and step.retried == sum(1 for sw, ok in seen if sw < 6000 and not ok)
    assert all(ok for sw, ok in seen if sw == 6000)
    # exact step edges: the bisection converges to mu = 1 and 2 within the bracket resolution
    assert np.allclose(step.per_size["mu_lo"][0], 1.0, atol=3 * 1.5 / 2 ** 7)
    assert np.allclose(step.per_size["mu_hi"][0], 2.0, atol=3 * 1.5 / 2 ** 7)
    seen.clear()
    step = qm.qmc_plateaus(models, MethodSpec.parse("qmc", sweeps=1500, retry=1))
    assert step.retried == 0 and np.all(np.isnan(step.per_size["width"][0]))


def test_no_root_from_widths_compatible_with_zero():
    """Regression (demo sweep with retry): the extrapolated width of a compressible state scatters
    around 0 (-0.02 +- 0.13 at 0.13, +0.013 +- 0.12 at 0.14) and that sign change was reported as a
    critical strain 0.1365 ('opens'). A sign change counts only when its positive side is a resolved
    plateau (> 2 sigma); here none is, so the plateau closes below the first determined strain."""
    from phasemap.strain.qmc_method import qmc_critical
    from phasemap.strain.record import StepRecord

    table = read_table("demo")
    S = np.array([0.0, 0.04, 0.08, 0.10, 0.12, 0.13, 0.14, 0.16])
    w = np.array([np.nan, np.nan, np.nan, -0.064, -0.049, -0.025, 0.013, 0.060])
    step = _synthetic_step(w, 20.0, err=0.06)
    err = np.full(len(S), 0.12)
    rec = StepRecord("qmc", "1/3", True, w * 0, w, w, w > 0, np.isfinite(w), detail=step, flags=[[]] * len(S))
    step.extrap["width_error"] = step.extrap_L["width_error"] = err
    c = qmc_critical(None, table, S, rec, "1/3")
    assert c.status == "none" and c.reason == "closed" and c.strain_c is None
    assert "closes below strain 0.1" in c.summary()
