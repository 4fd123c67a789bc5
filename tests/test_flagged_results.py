"""No wrong answer without a word: filling curves never publish plateau edges or jumps built from
unconverged points; a plateau cut by the scan window is "beyond the window", not infinite; soft-core
results whose occupation cut-off matters are flagged everywhere, and a state saturating the cut-off
is never named the Mott lobe n = n_max.

Sources: exact limits named beside each check; the rest is software behaviour (common practice,
no source).
"""

import json
import math

import numpy as np
import pytest

import phasemap
from phasemap.scan import EDGE_FOUND, EDGE_UNCONVERGED, EDGE_WINDOW, filling_curve, phase_map, plateau_text

TRI = phasemap.Model(lattice="triangular", t=0.1, V=1.0)  # hard-core, t/V = 0.1
MU = np.linspace(-1, 7, 41)


@pytest.fixture(scope="module")
def starved():
    """The curve of issue 12 with the self-consistency starved (max_iter = 3)."""
    return filling_curve(TRI, mu=MU, options={"max_iter": 3})


def test_forced_nonconvergence_publishes_no_unflagged_plateau_or_jump(starved):
    conv = starved.dataset["converged"].values
    assert (~conv).sum() >= 5  # the starving works (9 of 41 when written)
    mu = starved.mu
    for p in starved.plateaus:
        for side, inner, step in (("lo", p["mu_lo_bound"], -1), ("hi", p["mu_hi_bound"], 1)):
            i = int(np.argmin(np.abs(mu - inner)))
            j = i + step
            if 0 <= j < len(mu) and not conv[j]:  # the neighbour outside is unconverged
                assert p[f"{side}_status"] == EDGE_UNCONVERGED and math.isnan(p[f"mu_{side}"]), p
                assert p["flagged"] and not math.isfinite(p["width"])
            if p[f"{side}_status"] not in EDGE_FOUND:
                assert p["flagged"] and math.isnan(p[f"mu_{side}"])
    # every plateau of this curve touches an unconverged stretch: none may be reported as found
    assert starved.plateaus and all(p["flagged"] for p in starved.plateaus)
    assert starved.found_jumps == []
    assert starved.flags and "unconverged" in starved.flags[0] and starved.unresolved
    ds = starved.dataset
    assert json.loads(ds.attrs["flags"]) == starved.flags
    assert all(p["flagged"] for p in json.loads(ds.attrs["plateaus"]))


def test_converged_curve_finds_what_the_starved_one_flags(starved):
    # the same curve converged: edges are results, the three first-order jumps are found; the
    # t = 0.1 V 1/3 plateau lower edge lies above the t = 0 edge mu = 0 (exact classical limit,
    # quantum fluctuations shrink the plateau) and the upper one below 3
    full = filling_curve(TRI, mu=MU)
    assert full.flags == [] and full.unresolved == []
    p = full.plateau("1/3")
    assert p["lo_status"] == p["hi_status"] == "refined" and not p["flagged"]
    assert 0.0 < p["mu_lo"] < 0.3 and 2.4 < p["mu_hi"] < 3.0
    assert len(full.found_jumps) == 3
    q = starved.plateau("1/3")
    assert q["mu_lo_bound"] >= p["mu_lo"] - 1e-9 and q["mu_hi_bound"] <= p["mu_hi"] + 1e-9  # bounds are honest


def test_map_boundaries_next_to_unconverged_points_are_flagged():
    # max_iter = 20 starves the points near the transitions (about 8 of 22 refined boundary points
    # end on an unconverged state when written)
    t = ("t", np.array([0.05, 0.1, 0.15]))
    ds = phase_map(TRI, x=t, y=("mu", MU[::2]), options={"max_iter": 20}, progress=False, refine_tol=1e-3)
    ok = ds["boundary_converged"].values
    flags = json.loads(ds.attrs["flags"])
    assert (~ok).any() and ok.any()
    assert any("boundary_converged = 0" in f for f in flags) and any("unconverged" in f for f in flags)
    # default options: fewer such points, and the flag is there exactly when there are some
    full = phase_map(TRI, x=t, y=("mu", MU[::2]), progress=False, refine_tol=1e-3)
    nf = int((~full["boundary_converged"].values).sum())
    assert nf < int((~ok).sum())
    assert (nf > 0) == any("boundary_converged = 0" in f for f in json.loads(full.attrs["flags"]))


def test_plateau_cut_by_the_window_is_beyond_the_window_not_infinite():
    fc = filling_curve(TRI, mu=np.linspace(0, 2, 21))
    p = fc.plateau("1/3")
    assert p["hi_status"] == EDGE_WINDOW and math.isnan(p["mu_hi"]) and not math.isinf(p["mu_hi"])
    assert p["mu_hi_bound"] == 2.0 and p["flagged"] and math.isnan(p["width"])
    assert p["lo_status"] == "refined" and 0.0 < p["mu_lo"] < 0.3
    assert "beyond the window (> 2)" in plateau_text(p) and "inf" not in plateau_text(p)
    # the empty state below the window does extend to -inf: n(mu) is monotone and n >= 0 (exact)
    e = filling_curve(TRI, mu=np.linspace(-3, 0, 7)).plateau("0")
    assert e["lo_status"] == "unbounded" and e["mu_lo"] == -math.inf and not e["flagged"]


def test_softcore_plateau_at_window_top_is_not_unbounded():
    # soft-core: no "full" state exists; a Mott plateau at the top of the window is cut by it
    m = phasemap.Model(lattice="square", t=0.0, U=1.0, n_max=4)
    fc = filling_curve(m, mu=np.linspace(0.2, 0.8, 7))
    p = fc.plateau("1")
    assert p["label"] == "mott n=1" and p["lo_status"] == p["hi_status"] == EDGE_WINDOW


SQ2 = phasemap.Model(lattice="square", t=0.01, V=0.0, U=1.0, n_max=2)


@pytest.fixture(scope="module")
def small_cutoff_map():
    return phase_map(SQ2, x=("t", np.linspace(0, 0.06, 7)), y=("mu", np.linspace(-0.5, 3.0, 15)),
                     progress=False, refine=False)


def test_softcore_map_with_too_small_cutoff_flags_every_affected_point(small_cutoff_map):
    ds = small_cutoff_map
    top = ds["top_weight"].values
    cut = ds["cutoff"].values
    assert cut.dtype == bool and np.array_equal(cut, top > 1e-3)  # MFOptions.weight_warn default
    assert (top > 1e-2).sum() >= 60  # the issue counted 72 of 105 above 1e-2
    flags = json.loads(ds.attrs["flags"])
    assert any(f"at {int(cut.sum())} of 105 points" in f for f in flags), flags
    labels = ds["label"].values.astype(str)
    assert not np.any(labels == "mott n=2")  # n = n_max is never named as that Mott lobe
    # every point whose every site sits at the cut-off is labelled so, and is flagged
    sat = np.abs(ds["filling"].values - 2) < 1e-6
    assert sat.any() and np.all(cut[sat]) and all("cut-off" in x for x in labels[sat])
    # t = 0 column, mu/U in (2, 3): exact ground state n = 3, so not "mott n=2" (exact atomic limit)
    mu = ds["mu"].values
    col = labels[0][(mu > 2) & (mu < 3)]
    assert len(col) and all(x.startswith("full") and "cut-off" in x for x in col)


def test_enough_cutoff_gives_the_exact_atomic_lobes_unflagged():
    # t = 0, n_max = 5: Mott n for mu/U in (n - 1, n) (exact atomic limit); nothing flagged
    m = phasemap.Model(lattice="square", t=0.0, U=1.0, n_max=5)
    fc = filling_curve(m, mu=np.array([0.5, 1.5, 2.5]), refine=False)
    assert list(fc.labels) == ["mott n=1", "mott n=2", "mott n=3"]
    assert not fc.dataset["cutoff"].values.any() and not any("cut-off" in f for f in fc.flags)


def test_point_at_the_cutoff_is_flagged_and_not_a_mott_lobe():
    sol = phasemap.solve(SQ2.replace(t=0.0, mu=2.5))
    assert sol.label != "mott n=2" and "cut-off" in sol.label
    assert any(f.startswith("n_max-weight") for f in sol.flags)


def test_curve_files_carry_the_flags(tmp_path):
    from phasemap.config import parse_config
    from phasemap.runner import run
    from phasemap.store import load_csv, load_netcdf

    cfg = parse_config({"model": {"lattice": "triangular", "t": 0.1, "V": 1.0, "U": "hardcore"},
                        "scan": {"kind": "curve", "x": {"name": "mu", "start": 0.0, "stop": 2.0, "num": 21}},
                        "output": {"figures": False}}, name="c")
    log = []
    run(cfg, out=tmp_path, progress=False, log=log.append)
    assert "beyond the window (> 2)" in log[0] and "inf" not in log[0].split("plateaus")[1].split(";")[0]
    cols, meta = load_csv(tmp_path / "c_plateaus.csv")
    k = list(cols["fraction"]).index("1/3")
    assert cols["hi_status"][k] == EDGE_WINDOW and math.isnan(cols["mu_hi"][k]) and cols["flagged"][k] == 1
    assert meta["flags"] and load_netcdf(tmp_path / "c.nc").attrs["flags"]
