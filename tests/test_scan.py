"""Scans: filling curves (plateaus, first-order jumps) and phase maps with refined boundaries."""

import json

import numpy as np
import pytest

import phasemap
from phasemap.scan import filling_curve, phase_map

TRI = dict(lattice="triangular", V=1.0)


def _supersolid_window(tv, npts):
    m = phasemap.Model(t=tv, **TRI)
    fc = filling_curve(m, mu=np.linspace(-0.98, 6.98, npts), relative=True, tol=1e-4)
    ds = fc.dataset
    lab, ph = ds["label"].values, np.array([str(x).split()[0] for x in ds["label"].values])
    conv, n = ds["converged"].values, ds["filling"].values
    return fc, lab, ph, conv, n


def _check_supersolid_window(fc, lab, ph, conv, n):
    # Wessel & Troyer, PRL 95, 127205 (2005), qualitative: the supersolid lives only between the
    # 1/3 and 2/3 solids; outside that density window the solid-superfluid change is first order.
    ss = conv & (ph == "supersolid")
    assert ss.any(), "no supersolid found at small t/V"
    assert np.all((n[ss] > 1 / 3) & (n[ss] < 2 / 3)), n[ss]
    assert {p["label"] for p in fc.plateaus} >= {"solid 1/3", "solid 2/3"}
    # every grid step superfluid <-> solid (no supersolid in between) must carry a refined jump
    jumps = fc.jumps
    for i in range(len(lab) - 1):
        a, b = ph[i], ph[i + 1]
        if {a, b} == {"superfluid", "solid"}:
            mu_lo, mu_hi = fc.mu[i], fc.mu[i + 1]
            hit = [j for j in jumps if mu_lo <= j["mu"] <= mu_hi]
            assert hit, (mu_lo, mu_hi, a, b)
            j = hit[0]
            lo, hi = sorted((j["n_below"], j["n_above"]))
            assert hi - lo > 0.1  # a genuine discontinuity, not a steep continuous rise
    low = [j for j in jumps if j["to"] == "solid 1/3"]
    high = [j for j in jumps if j["from"] == "solid 2/3"]
    assert len(low) == 1 and low[0]["from"] == "superfluid" and low[0]["n_below"] < 1 / 3
    assert len(high) == 1 and high[0]["to"] == "superfluid" and high[0]["n_above"] > 2 / 3
    # the solid-supersolid changes at n = 1/3+ and 2/3- are continuous (no jump attached)
    for j in jumps:
        assert "supersolid" not in (j["from"].split()[0], j["to"].split()[0]) or abs(j["mu"] - 3.0) < 0.05, j


def test_supersolid_only_between_one_third_and_two_thirds():
    # Wessel & Troyer, PRL 95, 127205 (2005), qualitative (site-decoupled MF, t/V = 0.1)
    _check_supersolid_window(*_supersolid_window(0.1, 41))


@pytest.mark.slow
@pytest.mark.parametrize("tv", [0.05, 0.07])
def test_supersolid_window_small_t(tv):
    # Wessel & Troyer, PRL 95, 127205 (2005), qualitative
    _check_supersolid_window(*_supersolid_window(tv, 81))


def test_first_order_jump_is_an_energy_crossing():
    # common practice, no source: a first-order transition is where two branches cross in energy.
    # The 1/3 solid with zero condensate has E = -mu/3 exactly (classical state, no bonds occupied)
    m = phasemap.Model(t=0.1, **TRI)
    fc = filling_curve(m, mu=np.linspace(-0.5, 1.0, 11), relative=True, tol=1e-5)
    jumps = [j for j in fc.jumps if j["to"] == "solid 1/3"]
    assert len(jumps) == 1
    mu_c = jumps[0]["mu"]
    for dmu, winner in ((-1e-3, "superfluid"), (1e-3, "solid")):
        s = phasemap.solve(m.replace(mu=mu_c + dmu))
        br = {b["seed"]: b for b in s.branches}
        e_solid = br["solid sqrt3 1/3"]["energy"]
        assert abs(e_solid - (-(mu_c + dmu) / 3)) < 1e-10  # exact classical energy
        assert s.phase == winner
        sf = br["superfluid"]
        assert sf["converged"] and sf["condensate_max"] > 0.1
        # the branches cross at mu_c: sign of E_sf - E_solid changes across the jump
        assert np.sign(sf["energy"] - e_solid) == (-1 if dmu < 0 else 1)


@pytest.mark.parametrize("lattice", ["square", "triangular"])
def test_hardcore_V0_plateau_edges_at_plus_minus_zt(lattice):
    # exact for the product state: empty for mu < -zt, full for mu > zt (continuous transitions)
    z = {"square": 4, "triangular": 6}[lattice]
    m = phasemap.Model(lattice=lattice, t=1.0, V=0.0)
    fc = filling_curve(m, mu=np.linspace(-1.5 * z, 1.5 * z, 31), relative=False, tol=1e-7)
    p = {q["label"]: q for q in fc.plateaus}
    assert set(p) == {"empty", "full"}
    assert abs(p["empty"]["mu_hi"] - (-z)) < 1e-4
    assert abs(p["full"]["mu_lo"] - z) < 1e-4
    assert fc.jumps == []  # continuous


def test_filling_curve_is_monotonic_and_rejects_bad_mu():
    # exact: dn/dmu >= 0 in the grand-canonical ground state (convexity of E(mu))
    m = phasemap.Model(t=0.2, **TRI)
    fc = filling_curve(m, mu=np.linspace(-1, 7, 41), relative=True, refine=False)
    conv = fc.dataset["converged"].values
    assert conv.all()
    assert np.all(np.diff(fc.filling) >= -1e-9)
    E = fc.dataset["energy"].values  # E(mu) concave with dE/dmu = -n
    mu = fc.mu
    assert np.all(np.diff(E, 2) <= 1e-9)
    dE = np.diff(E) / np.diff(mu)
    nmid = 0.5 * (fc.filling[1:] + fc.filling[:-1])
    assert np.all(np.abs(dE + nmid) < 0.05)
    with pytest.raises(phasemap.model.ConfigError, match="mu"):
        filling_curve(m, mu=[1.0, 0.5])


def test_phase_map_t0_column_and_boundaries():
    # exact classical limit (t = 0): boundaries mu/V = 0, 3, 6; at finite t the supersolid stays
    # inside the (1/3, 2/3) window (Wessel & Troyer PRL 95, 127205 (2005), qualitative)
    m = phasemap.Model(**TRI)
    tv = np.array([0.0, 0.1])
    muv = np.linspace(-0.9, 6.9, 14)  # no grid point on a degenerate edge
    ds = phase_map(m, x=("t", tv), y=("mu", muv), relative=True, refine=True, refine_tol=1e-5, progress=False)
    for var in ("label", "phase_code", "filling", "energy", "converged", "densities", "condensate",
                "boundary_t", "boundary_mu", "boundary_from", "boundary_to"):
        assert var in ds, var
    assert ds["label"].shape == (2, 14)
    names = json.loads(ds.attrs["phase_names"])
    codes = ds["phase_code"].values
    for i in range(2):
        for j in range(14):
            assert str(ds["label"].values[i, j]).startswith(names[codes[i, j]])
    assert json.loads(ds.attrs["model"])["lattice"] == "triangular"
    col0 = [str(x) for x in ds["label"].values[0]]
    assert set(col0) == {"empty", "solid 1/3", "solid 2/3", "full"}
    bt, bm = ds["boundary_t"].values, ds["boundary_mu"].values
    at0 = np.sort(bm[np.abs(bt) < 1e-12])
    assert len(at0) == 3 and np.allclose(at0, [0.0, 3.0, 6.0], atol=1e-4), at0
    fill = ds["filling"].values
    ss = np.char.startswith(ds["label"].values.astype(str), "supersolid")
    assert np.all((fill[ss] > 1 / 3) & (fill[ss] < 2 / 3))
