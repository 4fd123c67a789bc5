"""ED as a method of the strain workflow: exact classical limit, verdict text vs JSON, sweep lines, bad input."""

import itertools
import json

import numpy as np
import pytest
import xarray as xr
from _ed_dense import bonds, dense_hamiltonian

from phasemap.cli import main
from phasemap.ed import staircase
from phasemap.model import ConfigError
from phasemap.strain import check_strain
from phasemap.strain.ed_method import clear_ed_cache, ed_plateaus
from phasemap.strain.sweep import strain_sweep
from phasemap.strain.table import StrainTable

TRI12 = ((2, 2), (-2, 4))


def _csv(path, rows, extra_cols=""):
    head = "# unit = K\nstrain,t,V" + extra_cols + "\n"
    path.write_text(head + "".join(",".join(f"{x:g}" for x in r) + "\n" for r in rows))
    return path


def _classical_min(V, N, L=12):
    """Brute force over all 2^12 occupations of tri12: min sum_b V_b n_a n_b at fixed N."""
    conf = np.array(list(itertools.product((0, 1), repeat=L)), dtype=np.int8)
    E = np.zeros(len(conf))
    for f, a, b in bonds("triangular", TRI12):
        E += V[f] * conf[:, a] * conf[:, b]
    return E[conf.sum(1) == N].min()


def test_t0_plateau_edges_are_classical_tri12():
    # exact classical limit: at t = 0 H is diagonal, E0(N) is the classical minimum. The 1/3 step on
    # tri12 (N = 4) runs from mu/V = 0 (a particle of the sqrt3 x sqrt3 solid is removed at no cost) to
    # mu/V = 3 (an added particle sits next to three solid sites); same as the infinite lattice
    # (test_strain_physics.test_t0_plateau_edges_exact for mean field).
    s = np.array([0.0, 0.05, 0.1])
    V = 6.0 - 12.0 * s  # V varies with strain, t = 0 at every strain
    tab = StrainTable.from_columns({"strain": s, "t": np.zeros(3), "V": V}, unit="K")
    clear_ed_cache()
    for si, Vi in zip(s, V):
        d = check_strain(tab, float(si), "ed").data
        p = d["plateau"]
        assert d["method"] == "ed:tri12" and d["N"] == 4 and d["n_sites"] == 12
        assert p["mu_lo"] == pytest.approx(0.0, abs=1e-9) and p["mu_hi"] == pytest.approx(3 * Vi, abs=1e-9)
        assert p["mu_lo_over_V"] == pytest.approx(0.0, abs=1e-10) and p["mu_hi_over_V"] == pytest.approx(3.0, abs=1e-10)
        assert p["width_over_V"] == pytest.approx(3.0, abs=1e-10)
        # and the brute-force classical minima of the same cluster
        Ec = [_classical_min((Vi,) * 3, n) for n in (3, 4, 5)]
        assert p["mu_lo"] == pytest.approx(Ec[1] - Ec[0], abs=1e-9)
        assert p["mu_hi"] == pytest.approx(Ec[2] - Ec[1], abs=1e-9)
        assert any("t = 0" in f for f in d["flags"])


def test_t0_anisotropic_edges_equal_classical_minima():
    # exact: anisotropic V at t = 0, edges = differences of brute-force classical minima
    V = (5.0, 6.0, 6.5)
    tab = StrainTable.from_columns({"strain": [0.0, 0.1], "t_d1": [0, 0], "t_d2": [0, 0], "t_d3": [0, 0],
                                    "V_d1": [V[0]] * 2, "V_d2": [V[1]] * 2, "V_d3": [V[2]] * 2}, unit="K")
    r = ed_plateaus(tab.models([0.05]), "ed:tri12")
    Ec = [_classical_min(V, n) for n in (3, 4, 5)]
    assert r.mu_minus[0] == pytest.approx(Ec[1] - Ec[0], abs=1e-9)
    assert r.mu_plus[0] == pytest.approx(Ec[2] - Ec[1], abs=1e-9)


def test_only_three_sectors_and_agrees_with_staircase(monkeypatch):
    # only N = L/3 - 1, L/3, L/3 + 1 are diagonalised; the edges equal phasemap.ed.staircase's mu-+(N)
    import phasemap.ed as ped

    seen = []
    real = ped.ground_state

    def spy(model, cluster, N, **kw):
        seen.append(N)
        return real(model, cluster, N, **kw)

    monkeypatch.setattr(ped, "ground_state", spy)
    tab = StrainTable.from_columns({"strain": [0.0, 0.1], "t": [0.3, 0.6], "V": [6.0, 6.0]}, unit="K")
    clear_ed_cache()
    m = tab.model(0.05)
    r = ed_plateaus([m], "ed:tri12")
    assert sorted(seen) == [3, 4, 5]
    monkeypatch.undo()
    ds = staircase(m, "tri12", n_range="3:5")
    assert r.mu_minus[0] == pytest.approx(float(ds["mu_minus"].sel(N=4)), abs=1e-9)
    assert r.mu_plus[0] == pytest.approx(float(ds["mu_plus"].sel(N=4)), abs=1e-9)
    assert r.sk[0] == pytest.approx(float(ds["SK_per_site"].sel(N=4)), abs=1e-9)


def test_verdict_text_and_json_agree_ed(tmp_path, capsys):
    # common practice, no source: the text is written from the JSON data
    p = _csv(tmp_path / "t.csv", [(0.0, 0.3, 6), (0.05, 0.45, 6), (0.1, 0.6, 6)])
    args = [str(p), "--strain", "0.05", "--mu", "9", "--method", "ed", "--cluster", "tri12"]
    assert main(["strain-check", *args, "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert main(["strain-check", *args]) == 0
    text = capsys.readouterr().out
    pl, o, a = d["plateau"], d["order"], d["at_mu"]
    assert d["method"] == "ed:tri12" and d["kind"] == "ed" and d["critical"]["sharp"] is False
    assert f"mu- = {pl['mu_lo']:.4g} K ({pl['mu_lo_over_V']:.3g} V)" in text
    assert f"mu+ = {pl['mu_hi']:.4g} K ({pl['mu_hi_over_V']:.3g} V)" in text
    assert f"charge gap {pl['width']:.4g} K ({pl['width_over_V']:.3g} V)" in text
    assert pl["width"] == pytest.approx(pl["mu_hi"] - pl["mu_lo"], abs=1e-12)
    word = "is above" if o["above_threshold"] else "is not above"
    assert f"S(K)/N = {o['S(K)/N']:.4g} {word} the density-order indicator {o['threshold']:g}" in text
    assert o["above_threshold"] == (o["S(K)/N"] > o["threshold"]) and o["threshold"] == 0.05
    assert "never closes exactly, so ED gives no sharp critical strain" in text
    assert a["margin_mu"] == pytest.approx(min(9 - pl["mu_lo"], pl["mu_hi"] - 9), abs=1e-12)
    assert f"{a['margin_mu']:.3g} K ({a['margin_mu_over_V']:.3g} V) inside the {a['nearest_edge']} edge" in text
    assert "melt" not in d and "t/V would need" not in text  # no melt factor claimed for ED


def test_sweep_with_ed_writes_lines_and_claims_no_critical_strain(tmp_path, capsys):
    # t/V grows linearly; mf closes its plateau inside the table, ED must not claim a critical strain
    s = np.linspace(0.0, 0.2, 5)
    tab = StrainTable.from_columns({"strain": s, "t": 0.3 + 6 * s, "V": np.full(5, 6.0)}, unit="K")
    sw = strain_sweep(tab, "mf,ed:tri12", n_strain=5, n_mu=41)
    assert sw.names == ["mf", "ed:tri12"] and sw.sharp_names == ["mf"]
    c = sw.critical["ed:tri12"].to_dict()
    assert c["status"] == "no-sharp-transition" and c["strain_c"] is None and c["in_band"] is False
    assert "no sharp transition on a finite cluster" in sw.text()
    assert "indicator (not a critical strain)" in c["text"]
    assert sw.band["methods"] == {"mf": sw.critical["mf"].strain_c} and "ed:tri12" in sw.band["excluded"]
    ds = sw.to_dataset().sel(solver="ed:tri12")  # one method dimension for every method
    assert str(ds["cluster"].values) == "tri12" and not bool(ds["sharp"].values)
    assert int(ds["N"].values) == 4
    np.testing.assert_allclose(ds["width"].values, ds["mu_hi"].values - ds["mu_lo"].values)
    # the gap at every strain against an independent dense diagonalisation of the same torus
    # (tests/_ed_dense.py): E0(5) + E0(3) - 2 E0(4) with t = 0.3 + 6 s, V = 6
    gaps = np.ravel(ds["width"].values)
    assert len(gaps) == len(ds["strain"])
    for g, st in zip(gaps, ds["strain"].values):
        tt = (0.3 + 6 * st,) * 3
        e = [np.linalg.eigvalsh(dense_hamiltonian("triangular", TRI12, N, tt, (6.0,) * 3))[0] for N in (3, 4, 5)]
        assert g == pytest.approx(e[2] + e[0] - 2 * e[1], abs=1e-8), st
    from phasemap.strain.plots import plot_order_parameters, plot_plateau_edges

    labels = [ln.get_label() for ln in plot_plateau_edges(sw).axes[0].get_lines()]
    assert any(x.startswith("ed:tri12 (12 sites, N=4)") for x in labels) and "mf" in labels
    labels = [ln.get_label() for ln in plot_order_parameters(sw).axes[0].get_lines()]
    assert any("ed:tri12" in x and "S(K)/N" in x for x in labels)
    # CLI: files, summary without an ED critical strain
    out = tmp_path / "out"
    p = _csv(tmp_path / "t.csv", [(x, 0.3 + 6 * x, 6) for x in s])
    assert main(["strain-sweep", str(p), "--out", str(out), "--methods", "mf,ed:tri12", "--n-strain", "5",
                 "--n-mu", "41", "--json"]) == 0
    summ = json.loads(capsys.readouterr().out)
    assert summ["critical"]["ed:tri12"]["strain_c"] is None
    assert summ["critical"]["ed:tri12"]["status"] == "no-sharp-transition"
    assert (out / "plateau.csv").exists() and (out / "strain_plateau_edges.png").exists()
    nc = xr.open_dataset(out / "sweep.nc")
    assert json.loads(nc.attrs["methods"]) == ["mf", "ed:tri12"] and list(nc["solver"].values) == ["mf", "ed:tri12"]
    assert bool(nc["in_band"].sel(solver="mf")) == (sw.critical["mf"].strain_c is not None)
    assert not bool(nc["in_band"].sel(solver="ed:tri12")) and np.isnan(float(nc["strain_c"].sel(solver="ed:tri12")))
    nc.close()
    capsys.readouterr()
    assert main(["replot", str(out / "sweep.nc")]) == 2  # a sweep is refused by replot with a clear message
    assert "strain sweep" in capsys.readouterr().err


@pytest.mark.parametrize("method, extra, pattern", [
    ("ed:tri12", ",V2", r"V2 = 0.1 != 0.*ed:tri21"),           # tri12 doubles nnn bonds
    ("ed:tri36", "half", r"too large for the memory budget"),  # ED cost guard (N = 17..19 of 36, budget 4 GiB)
    ("ed:tri99", "", r"cluster: unknown cluster 'tri99'"),
    ("ed:sq8", "", r"cluster lattice 'square'"),
])
def test_bad_ed_input_exit_2_nothing_written(tmp_path, capsys, monkeypatch, method, extra, pattern):
    import re

    # isotropic tri36 at N = 17..19 fits this machine's default budget since the table-free
    # lookup (~9.4 GiB): a 4 GiB budget keeps the refusal path under test
    monkeypatch.setattr("phasemap.ed.guard.DEFAULT_BUDGET_GIB", 4.0)
    frac = ["--fraction", "1/2"] if extra == "half" else []
    extra = "" if extra == "half" else extra
    rows = [(0.0, 0.3, 6, 0.1), (0.1, 0.6, 6, 0.1)] if extra else [(0.0, 0.3, 6), (0.1, 0.6, 6)]
    p = _csv(tmp_path / "t.csv", rows, extra)
    out = tmp_path / "out"
    assert main(["strain-sweep", str(p), "--out", str(out), "--methods", f"mf,{method}", *frac]) == 2
    assert re.search(pattern, capsys.readouterr().err) and not out.exists()
    assert main(["strain-check", str(p), "--strain", "0.05", "--method", method, *frac]) == 2
    assert re.search(pattern, capsys.readouterr().err)


def test_fraction_not_integer_on_cluster():
    tab = StrainTable.from_columns({"strain": [0.0, 0.1], "t": [0.3, 0.6], "V": [6.0, 6.0]}, unit="K")
    with pytest.raises(ConfigError, match=r"fraction: filling 1/2 of the 21-site cluster"):
        ed_plateaus(tab.models([0.05]), "ed:tri21", "1/2")
