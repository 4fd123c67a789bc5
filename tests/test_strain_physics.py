"""Strain workflow against closed-form mean-field answers, verdict text vs JSON, sweep vs root-finding."""

import json

import numpy as np
import pytest

from phasemap import Model
from phasemap.cli import main
from phasemap.strain import check_strain, critical_strain, locate_plateaus
from phasemap.strain.engine import fixed_filling
from phasemap.strain.table import StrainTable

Z = 6  # triangular lattice coordination


def _linear_t_table(t0=0.1, slope=1.0, V=0.0):
    # hard-core isotropic, t(s) = t0 + slope * s (linear: PCHIP reproduces it exactly)
    s = np.linspace(0.0, 0.4, 5)
    return StrainTable.from_columns({"strain": s, "t": t0 + slope * s, "V": np.full(5, V)}, unit="K")


def test_t0_plateau_edges_exact():
    # exact (t = 0 classical limit): per-site energies 0, -mu/3 (one sqrt3 sublattice, no bond),
    # V - 2mu/3 (two sublattices, one bond per site), 3V - mu give plateaus 1/3 on mu/V in (0, 3)
    # and 2/3 on (3, 6) (tests/test_v2_classical.py with V2 = 0); the product state reproduces them
    m = Model(t=0.0, V=1.0)
    r = locate_plateaus([m], "1/3", tol=1e-4, n_mu=41)
    assert r.exists[0] and r.label_center[0] == "solid 1/3"
    assert r.mu_lo[0] == pytest.approx(0.0, abs=2e-4) and r.mu_hi[0] == pytest.approx(3.0, abs=2e-4)
    r2 = locate_plateaus([m], "2/3", tol=1e-4, n_mu=41)
    assert r2.mu_lo[0] == pytest.approx(3.0, abs=2e-4) and r2.mu_hi[0] == pytest.approx(6.0, abs=2e-4)


def test_empty_edge_and_critical_strain_closed_form():
    # exact for the product state at V = 0: the empty state is stable for mu < -z t, and for
    # |mu| < z t the filling is n = (1 + mu/(z t))/2. With t(s) = t0 + a s a fixed mu = -m leaves
    # the empty state where z t(s) = m, i.e. at s_c = (m/z - t0)/a.
    t0, a, m = 0.1, 1.0, 1.5
    tab = _linear_t_table(t0, a)
    s = np.array([0.0, 0.2, 0.4])
    r = locate_plateaus(tab.models(s), "0", tol=1e-6)
    np.testing.assert_allclose(r.mu_hi, -Z * (t0 + a * s), atol=1e-5)
    assert np.all(np.isinf(r.mu_lo))
    # the filling passes 1/2 at mu = 0 continuously (closed form n = (1 + mu/(zt))/2)
    h = locate_plateaus(tab.models(s), "1/2", tol=1e-6)
    np.testing.assert_allclose(0.5 * (h.mu_lo + h.mu_hi), 0.0, atol=1e-5)
    assert not h.exists.any() and fixed_filling(h, 0)["state"] == "superfluid"
    s_c = (m / Z - t0) / a  # = 0.15
    c = critical_strain(tab, "mf", fraction="0", criterion="mu", mu=-m, n_strain=5, xtol=1e-5, tol=1e-6)
    assert c.status == "found" and c.direction == "leaves the plateau with increasing strain"
    assert c.strain_c == pytest.approx(s_c, abs=2e-5)


def test_verdict_text_and_json_agree(capsys, tmp_path):
    # common practice, no source: the text is written from the JSON data, so every number agrees
    s = np.linspace(0.0, 0.1, 4)
    tab = StrainTable.from_columns({"strain": s, "t": 0.3 + 3 * s, "V": np.full(4, 6.0)}, unit="K")
    p = tmp_path / "t.csv"
    p.write_text("# unit = K\nstrain,t,V\n" + "".join(f"{a:g},{0.3 + 3 * a:g},6\n" for a in s))
    args = [str(p), "--strain", "0.05", "--mu", "9", "--no-melt"]
    assert main(["strain-check", *args, "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert main(["strain-check", *args]) == 0
    text = capsys.readouterr().out
    assert d["verdict"] == "holds" and "the 1/3 solid holds" in text
    w = d["plateau"]["width"]
    assert f"plateau width {w:.3g} K ({d['plateau']['width_over_V']:.2g} V)" in text
    assert f"mu from {d['plateau']['mu_lo']:.4g} K to {d['plateau']['mu_hi']:.4g} K" in text
    assert f"at mu = 9 K the state is {d['at_mu']['label']}" in text
    # same answer through the Python API
    api = check_strain(tab, 0.05, "mf", mu=9.0, melt=False).data
    assert api["plateau"]["width"] == pytest.approx(w, rel=1e-12)


def test_sweep_critical_strain_is_a_root():
    # the sweep's critical strain brackets a sign change of the plateau width criterion within xtol
    from phasemap.strain.sweep import strain_sweep

    s = np.linspace(0.0, 0.1, 3)
    tab = StrainTable.from_columns({"strain": s, "t": 0.15 + 1.5 * s, "V": np.ones(3)}, unit="V")
    sw = strain_sweep(tab, "mf", n_strain=3, n_mu=41, xtol=1e-3)
    c = sw.critical["mf"]
    assert c.status == "found" and 0.0 < c.strain_c < 0.1
    r = locate_plateaus(tab.models([c.strain_c - 2 * c.xtol, c.strain_c + 2 * c.xtol]), "1/3")
    assert r.exists[0] and not r.exists[1]
    ds = sw.to_dataset()
    assert ds["width"].sel(solver="mf").values[0] > 0 and ds.attrs["energy_unit"] == "V"


@pytest.mark.slow
def test_sweep_equals_independent_root_finding():
    # the critical strain from the sweep equals brentq on an independent coarse path within tolerance
    from phasemap.strain.sweep import strain_sweep

    s = np.linspace(0.0, 0.1, 3)
    tab = StrainTable.from_columns({"strain": s, "t": 0.15 + 1.5 * s, "V": np.ones(3)}, unit="V")
    sw = strain_sweep(tab, "mf", n_strain=3, n_mu=41)
    c2 = critical_strain(tab, "mf", n_strain=7)
    assert sw.critical["mf"].strain_c == pytest.approx(c2.strain_c, abs=2 * c2.xtol)


def test_hinted_plateau_search_equals_full_grid():
    # independent computation: the full-grid search. A hint (edges found at a nearby point)
    # restricts the coarse grid to the full grid's points around it; with a non-decreasing
    # filling the brackets, hence the edges, must be the full grid's to the last bit. A hint
    # far from the plateau (or none) must fall back to the full grid, never return its own
    # sub-grid answer.
    from phasemap.strain.engine import clear_cache

    models = [Model(t=t, V=1.0) for t in (0.02, 0.08, 0.14, 0.3)]
    clear_cache()
    full = locate_plateaus(models, "1/3", n_mu=81)
    good = np.stack([full.mu_lo, full.mu_hi], axis=1) + np.array([[-0.05, 0.05]])
    good[3] = np.nan  # no hint for this model: full grid
    # around the upper edge only: the sub-grid misses the lower edge (and, far above, everything)
    upper = np.stack([full.mu_hi, full.mu_hi], axis=1)
    far = np.tile([[8.5, 8.6]], (len(models), 1))
    assert np.all(full.width[:3] > 0.5)  # plateaus much wider than 3 grid points: the sub-grids are partial
    for hint in (good, upper, far):
        clear_cache()
        r = locate_plateaus(models, "1/3", n_mu=81, hint=hint, hint_pad=3)
        for k in ("mu_lo", "mu_hi", "width", "exists", "label_center", "n_below", "n_above", "reached"):
            np.testing.assert_array_equal(getattr(r, k), getattr(full, k), err_msg=k)


def test_bisection_edges_bracket_the_exact_edges_like_the_multisection():
    # exact (t = 0 classical limit, test_t0_plateau_edges_exact): the 1/3 plateau runs from mu/V = 0
    # to 3. Bisection (one point per step, the cmf default) and the former 7- and 31-point steps
    # must each end on a bracket no wider than tol that contains the exact edge, so their edges
    # agree within the sum of their brackets; at t > 0 (no closed form) the same agreement holds
    # between bisection and the 31-point search, and plateau/label/fillings are the same.
    from phasemap.strain.engine import clear_cache

    models = [Model(t=t, V=1.0) for t in (0.0, 0.05, 0.12, 0.3)]
    out = {}
    for k in (1, 7, 31):
        clear_cache()
        out[k] = locate_plateaus(models, "1/3", n_mu=41, tol=1e-4, sections=k)
    for k, r in out.items():
        assert r.tol[0] <= 1e-4 + 1e-15, k  # (a stalled bracket near a continuous edge may stay wider)
        assert abs(r.mu_lo[0] - 0.0) <= r.tol[0] / 2 + 1e-12 and abs(r.mu_hi[0] - 3.0) <= r.tol[0] / 2 + 1e-12, k
    a, b = out[1], out[31]
    for key in ("mu_lo", "mu_hi"):
        np.testing.assert_array_less(np.abs(getattr(a, key) - getattr(b, key)), (a.tol + b.tol) / 2 + 1e-12)
    for key in ("exists", "label_center", "reached"):
        np.testing.assert_array_equal(getattr(a, key), getattr(b, key), err_msg=key)
    np.testing.assert_allclose(a.n_below, b.n_below, atol=5e-3)


def test_bisection_retries_a_step_whose_point_failed(monkeypatch):
    # a bisection step whose only point does not converge is retried once on two other points
    # (before, with one point per step, such a bracket was given up and the answer flagged
    # unconverged); the edges are then those of a search where nothing failed
    import phasemap.strain.engine as eng

    m = [Model(t=0.05, V=1.0)]
    eng.clear_cache()
    ref = locate_plateaus(m, "1/3", n_mu=41, sections=1)
    orig, calls = eng.evaluate_points, []

    def flaky(models, mu, *a, **k):
        r = orig(models, mu, *a, **k)
        calls.append(np.asarray(mu).shape)
        if np.asarray(mu).shape[1] == 1 and len(calls) == 2:  # the first bisection step fails
            r = dict(r, converged=np.zeros_like(r["converged"]))
        return r

    monkeypatch.setattr(eng, "evaluate_points", flaky)
    eng.clear_cache()
    r = locate_plateaus(m, "1/3", n_mu=41, sections=1)
    assert any(c[1] == 2 for c in calls)  # the retry: two points for the brackets whose point failed
    assert r.ok(0) and not any("could not be refined" in f for f in r.flags[0])
    assert abs(r.mu_lo[0] - ref.mu_lo[0]) <= (r.tol[0] + ref.tol[0]) / 2 + 1e-12
    assert abs(r.mu_hi[0] - ref.mu_hi[0]) <= (r.tol[0] + ref.tol[0]) / 2 + 1e-12


@pytest.mark.parametrize("method", ["mf", "cmf:tri3"])
def test_critical_strain_equals_brentq_on_full_grid_searches(method):
    # independent computation: brentq on the width of full-grid plateau searches (no hint, the
    # former 7/31-point edge steps), the former path. The critical strain with hints from the
    # nearest solved strains (and cmf's narrow sub-grids, bisection edges) must agree within
    # the two xtols.
    from scipy.optimize import brentq

    from phasemap.strain.engine import clear_cache

    s = np.linspace(0.0, 0.1, 3)
    tab = StrainTable.from_columns({"strain": s, "t": 0.15 + 1.5 * s, "V": np.ones(3)}, unit="V")
    xtol = 2e-4
    clear_cache()
    c = critical_strain(tab, method, n_strain=3, n_mu=41, xtol=xtol, sections=0)

    def h(x):
        return locate_plateaus(tab.models([x]), "1/3", method, n_mu=41, sections=7).width[0] - 1e-3

    clear_cache()
    old = brentq(h, c.bracket[0], c.bracket[1], xtol=xtol)
    assert c.status == "found" and c.strain_c == pytest.approx(old, abs=2 * xtol)


def test_map_on_every_other_mu_keeps_the_edges():
    # the cmf sweep solves its (strain, mu) map on every other mu of the common grid: the solved
    # columns must equal the full map's exactly (same points, same solver), the others be marked
    # not computed, and the edges (refined from the wider brackets to the same tol) agree with
    # the full-grid search within the two edge brackets; exact t = 0 edges 0 and 3V as above
    from phasemap.strain.engine import clear_cache

    models = [Model(t=t, V=1.0) for t in (0.0, 0.05, 0.3)]
    mu = np.linspace(-1.0, 8.0, 41)
    clear_cache()
    full = locate_plateaus(models, "1/3", mu=mu, keep_grid=True, sections=1)
    clear_cache()
    half = locate_plateaus(models, "1/3", mu=mu, keep_grid=True, sections=1, grid_every=2)
    cols = np.arange(0, 41, 2)
    assert half.grid["computed"][:, cols].all() and not half.grid["computed"][:, 1::2].any()
    for k in ("filling", "energy"):
        np.testing.assert_array_equal(half.grid[k][:, cols], full.grid[k][:, cols])
        assert np.isnan(half.grid[k][:, 1::2]).all()
    assert (half.grid["label"][:, 1::2] == "").all() and not half.grid["converged"][:, 1::2].any()
    assert not any("did not converge" in f for fs in half.flags for f in fs)
    for key in ("mu_lo", "mu_hi"):
        np.testing.assert_array_less(np.abs(getattr(half, key) - getattr(full, key)), (half.tol + full.tol) / 2 + 1e-12)
    assert abs(half.mu_lo[0]) <= half.tol[0] / 2 + 1e-12 and abs(half.mu_hi[0] - 3.0) <= half.tol[0] / 2 + 1e-12
    np.testing.assert_array_equal(half.exists, full.exists)
    np.testing.assert_array_equal(half.label_center, full.label_center)


def test_inverted_edges_are_a_failed_search_not_a_closed_plateau(monkeypatch):
    # exact (t = 0 classical limit, as in test_t0_plateau_edges_exact): 1/3 plateau on mu/V in (0, 3),
    # 2/3 on (3, 6). A solver that at some mu far above the plateau misses the lower-energy state and
    # returns a filling below 1/3 makes n(mu) non-monotonic: the last point below 1/3 then lies above
    # the first point above 1/3, the lower edge above the upper edge. That is a failed search (seen with
    # cmf:tri12 at one strain of the demo sweep, where it had been read as a closed plateau, width 0,
    # and gave a spurious critical strain): it must be flagged, with width NaN (not determined).
    import phasemap.strain.engine as eng

    m = [Model(t=0.0, V=1.0)]
    orig = eng.evaluate_points

    def missed(models, mu, *a, **k):
        r = orig(models, mu, *a, **k)
        bad = (np.asarray(mu) > 4.5) & (np.asarray(mu) < 5.5)  # inside the 2/3 plateau
        return dict(r, filling=np.where(bad, 0.2, r["filling"]))

    monkeypatch.setattr(eng, "evaluate_points", missed)
    eng.clear_cache()
    r = locate_plateaus(m, "1/3", tol=1e-4, n_mu=41)
    eng.clear_cache()
    assert r.mu_lo[0] > 4.5 and r.mu_hi[0] == pytest.approx(3.0, abs=2e-4)  # the inversion happened
    assert not r.ok(0) and any("edges inverted" in f for f in r.flags[0])
    assert np.isnan(r.width[0]) and not r.exists[0]
