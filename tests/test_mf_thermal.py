"""Site-decoupled mean field at a temperature T > 0: exact limits and closed forms.

Reference values are derived in this file (not read from the code):

* Hard-core lattice gas, t = 0, V = 0: independent two-level sites, n = 1/(1 + exp(-mu/T)) and
  grand potential per site -T ln(1 + exp(mu/T)) (exact).
* Soft-core single site, t = 0, V = 0: n = sum_m m w_m / Z, w_m = exp(-(U m(m-1)/2 - mu m)/T),
  grand potential -T ln Z (exact grand-canonical single-site averages; Z summed here to a cut-off
  far above the solver's n_max).
* T -> 0 reproduces the ground-state solver at random points (internal consistency).
* Triangular hard-core, t = 0, V, at n = 1/3: the linearised self-consistency of the uniform
  state n0 has the sqrt3 x sqrt3 (K-point) mode d_A + d_B + d_C = 0 with eigenvalue
  3 V n0 (1 - n0) / T (each site has three neighbours on each of the two other sublattices;
  dn/d(eps) = -n0(1-n0)/T), so T_inst = 3 V n0 (1 - n0) = 2V/3 at n0 = 1/3, with
  mu = 6 V n0 + T ln((1 - n0)/n0) = 2V - T ln 2 keeping the uniform state at n0 = 1/3 (derived here).
* Square-lattice XY limit (hard-core, V = 0, mu = 0, half filling): the normal state n = 1/2 has
  the local susceptibility d<b>/dPhi = 1/(2T), so the uniform condensate appears below
  T_c = z t / 2 = 2t (derived here; in spin language J = 2t, T_c = J). Quantum Monte Carlo gives
  T_KT/J = 0.34303(8) (Melko, Sandvik & Scalapino, PRB 69, 014509 (2004), as quoted in issue 13;
  the convention H = -J sum (SxSx + SySy) is assumed from memory): mean field overestimates the
  ordering temperature about 2.9-fold and, in 2D, orders where there is no long-range order at all
  (Mermin-Wagner). Used only as a documented illustration, not asserted.
"""

import numpy as np
import pytest

import phasemap
from phasemap.mf import MFOptions, insulator_instability, solve_batch
from phasemap.model import ConfigError
from phasemap.params import ParamBatch, points

ENGINES = ("numba", "numpy")


@pytest.mark.parametrize("engine", ENGINES)
def test_lattice_gas_fermi_function(engine):
    """Exact: n = 1/(1 + exp(-mu/T)), Omega = -T ln(1 + exp(mu/T)) for t = V = 0 hard-core."""
    m = phasemap.Model(lattice="triangular", t=0.0, V=0.0, mu=0.0)
    mu = np.array([-2.0, -0.7, -0.1, 0.0, 0.05, 0.4, 1.3, 3.0])
    for T in (0.05, 0.3, 1.0, 4.0):
        b = points(m, {"mu": mu, "T": np.full(mu.size, T)})
        r = solve_batch(b, MFOptions(engine=engine))
        k = r.best()
        n = r.n[np.arange(mu.size), k].mean(1)
        om = r.energy[np.arange(mu.size), k]
        assert np.allclose(n, 1.0 / (1.0 + np.exp(-mu / T)), atol=1e-10, rtol=0)
        assert np.allclose(om, -T * np.logaddexp(0.0, mu / T), atol=1e-10, rtol=0)


@pytest.mark.parametrize("engine", ENGINES)
def test_softcore_single_site_grand_canonical(engine):
    """Exact: t = 0, V = 0 soft-core site = independent grand-canonical single sites."""
    U, n_max = 1.0, 9
    m = phasemap.Model(lattice="square", t=0.0, U=U, mu=0.5, n_max=n_max)
    mu = np.array([-0.5, 0.2, 0.5, 1.0, 1.7, 2.5])
    T = np.array([0.1, 0.25, 0.5, 0.2, 0.6, 0.35])
    r = solve_batch(points(m, {"mu": mu, "T": T}), MFOptions(engine=engine))
    k = r.best()
    p = np.arange(mu.size)
    mm = np.arange(60.0)
    for i in p:
        logw = -(0.5 * U * mm * (mm - 1) - mu[i] * mm) / T[i]
        w = np.exp(logw - logw.max())
        Z = w.sum()
        n_exact = (mm * w).sum() / Z
        om_exact = -T[i] * (np.log(Z) + logw.max())
        assert r.n[i, k[i]].mean() == pytest.approx(n_exact, abs=1e-9)
        assert r.energy[i, k[i]] == pytest.approx(om_exact, abs=1e-9)
        assert r.top_weight[i, k[i]] < 1e-6  # cut-off n_max = 9 is far above these fillings


@pytest.mark.parametrize("lattice,kw", [("triangular", {}), ("square", {"U": 1.0, "n_max": 4})])
def test_low_temperature_reproduces_ground_state(lattice, kw):
    """Internal consistency: T -> 0 gives the T = 0 solver's filling, condensate and energy."""
    rng = np.random.default_rng(13)
    m = phasemap.Model(lattice=lattice, t=0.05, V=1.0 if not kw else 0.0, mu=1.0, **kw)
    P = 12
    scale = 0.25 if not kw else 0.05
    ax = {"t": rng.uniform(0.02, scale, P), "mu": rng.uniform(-0.5, 7.0 if not kw else 2.5, P)}
    b0 = points(m, ax)
    g = phasemap.api.solutions_from_batch(solve_batch(b0, MFOptions()))
    b1 = points(m, {**ax, "T": np.full(P, 1e-4 * m.scale)})
    h = phasemap.api.solutions_from_batch(solve_batch(b1, MFOptions()))
    for a, c in zip(g, h):
        assert c.temperature > 0 and a.converged and c.converged
        assert c.energy == pytest.approx(a.energy, abs=1e-6)
        assert c.filling == pytest.approx(a.filling, abs=1e-4)
        assert c.condensate.max() == pytest.approx(a.condensate.max(), abs=1e-4)
        assert c.phase == a.phase


def test_triangular_sqrt3_instability_temperature():
    """Derived (module docstring): T_inst = 3 V n0 (1 - n0) = 2V/3 at n0 = 1/3, t = 0.

    Just below T_inst the uniform n = 1/3 state is unstable and the sqrt3 x sqrt3 solid wins;
    well above it the uniform normal state wins.
    """
    V, n0 = 1.0, 1.0 / 3.0
    T_inst = 3 * V * n0 * (1 - n0)
    m = phasemap.Model(lattice="triangular", t=0.0, V=V)
    for T, want in ((0.98 * T_inst, "solid"), (1.5 * T_inst, "normal")):
        s = phasemap.solve(m.replace(mu=6 * V * n0 - T * np.log(2.0)), method="mf", T=T, compressibility=False)
        assert s.converged and s.phase == want, (T, s.phase, s.label)
        if want == "solid":
            assert s.pattern == "sqrt3" and s.order["contrast"] > 0.05
        else:
            assert s.filling == pytest.approx(n0, abs=1e-9)


def test_uniform_state_linearised_map_matches_derivation():
    """The uniform n = 1/3 state's map, linearised numerically on a sqrt3 perturbation, has the
    derived eigenvalue 3 V n0 (1 - n0)/T (checks the thermal local problem, not the solve)."""
    V, n0, T = 1.0, 1.0 / 3.0, 0.5
    m = phasemap.Model(lattice="triangular", t=0.0, V=V, mu=2 * V - T * np.log(2.0))
    from phasemap.lattice import search_cell
    from phasemap.mf import _local_hardcore, cell_ops

    cell = search_cell(m.lattice)
    ops = cell_ops(cell)
    sub = (cell.sites[:, 0] - cell.sites[:, 1]) % 3
    d = np.where(sub == 0, 2.0, -1.0) * 1e-7
    b = ParamBatch.from_models([m])
    n = np.full((1, cell.n_sites), n0) + d
    Phi, eps = ops.fields(b.t, b.V, b.V2, b.mu, n, np.zeros_like(n))
    out = _local_hardcore(Phi, eps, n, np.array([[T]]))[0]
    ratio = (out - n0)[0] / d
    assert np.allclose(ratio, 3 * V * n0 * (1 - n0) / T, rtol=1e-5)


def test_square_xy_mean_field_transition_temperature():
    """Derived (module docstring): T_c = z t / 2 = 2t for the half-filled square XY limit.

    Illustration only (not asserted): QMC T_KT/J = 0.34303(8) with J = 2t
    (Melko, Sandvik & Scalapino, PRB 69, 014509 (2004)) -> T_c(MF) / T_KT ~ 2.9.
    """
    t = 0.25
    Tc = 4 * t / 2
    m = phasemap.Model(lattice="square", t=t, V=0.0, mu=0.0)
    below = phasemap.solve(m, method="mf", T=0.97 * Tc, compressibility=False)
    above = phasemap.solve(m, method="mf", T=1.03 * Tc, compressibility=False)
    assert below.converged and below.phase == "superfluid" and below.condensate.max() > 0.05
    assert above.converged and above.phase == "normal" and above.condensate.max() < 1e-6
    assert below.filling == pytest.approx(0.5, abs=1e-9) and above.filling == pytest.approx(0.5, abs=1e-9)
    # the thermal linear-stability test of the normal state: lambda = z t chi = T_c / T exactly
    b = ParamBatch.from_models([m, m])
    lam = insulator_instability(b, np.full((2, 4), 0.5), T=np.array([0.5 * Tc, 2 * Tc]))
    assert lam == pytest.approx([2.0, 0.5], rel=1e-12)
    # near T_c the product state's order parameter follows Landau: phi^2 = 3 (1 - T/T_c) / 4 + ...
    # (hard-core: tanh expansion of phi = (Phi/r) tanh(r/2T) with r = 2 z t phi)
    near = phasemap.solve(m, method="mf", T=0.995 * Tc, compressibility=False)
    assert near.condensate.max() ** 2 == pytest.approx(0.75 * 0.005, rel=0.05)


def test_temperature_option_validated():
    m = phasemap.Model(lattice="triangular", t=0.1, V=1.0, mu=1.0)
    for bad in (-0.1, float("nan"), "hot"):
        with pytest.raises(ConfigError, match="T: temperature"):
            phasemap.solve(m, method="mf", T=bad)
    with pytest.raises(ConfigError, match="scan axis T"):
        points(m, {"T": [0.1, -0.2]})


@pytest.mark.parametrize("lattice,kw", [("triangular", {"V": 1.0}), ("square", {"U": 1.0, "n_max": 4})])
def test_engines_agree_at_finite_temperature(lattice, kw):
    """The compiled kernel and the independent NumPy path reach the same thermal fixed points
    with self-consistency (t > 0) — the t = 0 limits above cannot see a kernel-only error."""
    m = phasemap.Model(lattice=lattice, t=0.05, mu=1.0, **kw)
    rng = np.random.default_rng(7)
    P = 10
    ax = {"t": rng.uniform(0.0, 0.3 if "V" in kw else 0.06, P), "mu": rng.uniform(-0.3, 6.5 if "V" in kw else 2.5, P),
          "T": rng.uniform(0.02, 0.6, P) * m.scale}
    b = points(m, ax)
    a = phasemap.api.solutions_from_batch(solve_batch(b, MFOptions(engine="numba")))
    c = phasemap.api.solutions_from_batch(solve_batch(b, MFOptions(engine="numpy")))
    for x, y in zip(a, c):
        assert x.converged and y.converged
        assert x.energy == pytest.approx(y.energy, abs=1e-9)
        assert x.filling == pytest.approx(y.filling, abs=1e-7)
        assert x.condensate.max() == pytest.approx(y.condensate.max(), abs=1e-6)


def test_transition_temperatures_sqrt3_first_order_and_xy_continuous():
    """Ordering temperatures by bisection with the order of the transition recorded.

    * Triangular t = 0 at mu = 2V - T_inst ln 2 (uniform n = 1/3 at T_inst = 2V/3, derived in the
      module docstring): the solid must survive up to at least T_inst; the three-sublattice order
      parameter admits a cubic Landau invariant (3-state Potts class; mean-field theory of such a
      term gives a first-order transition — standard Landau argument, from memory), so the computed
      transition is first order, above T_inst, with a finite jump of the density contrast.
      Recorded: T_c = 0.684 V, jump of the contrast about 0.30 — checked against an independent
      scipy minimisation of the three-sublattice grand potential (below).
    * Square XY limit: continuous at the closed-form T_c = z t / 2 (derived above).
    """
    from phasemap.thermal import transition_temperatures

    T_inst = 2.0 / 3.0
    tri = phasemap.Model(lattice="triangular", t=0.0, V=1.0)
    ds = transition_temperatures(tri, {"mu": [2.0 - T_inst * np.log(2.0)]}, T_max=1.2, n_T=12)
    assert ds["phase_T0"].values[0] == "solid 1/3"
    Tc = ds["Tc_density"].values[0]
    assert T_inst < Tc < 1.1 * T_inst
    assert bool(ds["first_order_density"].values[0]) and ds["jump_density"].values[0] > 0.1
    assert np.isnan(ds["Tc_condensate"].values[0])  # no condensate at t = 0
    # independent general-purpose computation: at t = 0 the sqrt3 product state is three
    # sublattice densities with Omega/N = V (nA nB + nB nC + nC nA) - mu <n> + T <n ln n + (1-n) ln(1-n)>;
    # minimise it with scipy from an ordered and a uniform start, bisect on "ordered is lower"
    Tc_ref, jump_ref = _sqrt3_first_order_reference(2.0 - T_inst * np.log(2.0))
    assert Tc == pytest.approx(Tc_ref, abs=2e-4)
    assert ds["jump_density"].values[0] == pytest.approx(jump_ref, abs=0.01)
    t = 0.25
    sq = phasemap.Model(lattice="square", t=t, V=0.0, mu=0.0)
    ds = transition_temperatures(sq, None, T_max=1.5, n_T=6, relative=False)
    assert ds["Tc_condensate"].values[0] == pytest.approx(4 * t / 2, abs=2 * 1.5e-4)
    assert not bool(ds["first_order_condensate"].values[0])
    assert np.isnan(ds["Tc_density"].values[0])


def _sqrt3_first_order_reference(mu, V=1.0):
    from scipy.optimize import minimize

    def omega(n, T):
        n = np.clip(n, 1e-15, 1 - 1e-15)
        ent = (n * np.log(n) + (1 - n) * np.log(1 - n)).mean()
        return V * (n[0] * n[1] + n[1] * n[2] + n[2] * n[0]) - mu * n.mean() + T * ent

    def best(T, start):
        r = minimize(omega, start, args=(T,), method="L-BFGS-B", bounds=[(1e-14, 1 - 1e-14)] * 3,
                     options=dict(ftol=1e-15, gtol=1e-12))
        return r.fun, r.x

    lo, hi = 0.6 * V, 0.8 * V
    for _ in range(30):
        mid = 0.5 * (lo + hi)
        (fo, xo), (fu, _) = best(mid, [0.9, 0.05, 0.05]), best(mid, [1 / 3] * 3)
        if fo < fu - 1e-13 and np.ptp(xo) > 1e-3:
            lo, jump = mid, np.ptp(xo)
        else:
            hi = mid
    return 0.5 * (lo + hi), jump


def test_temperature_refused_by_methods_without_it():
    m = phasemap.Model(lattice="triangular", t=0.05, V=1.0, mu=1.5)
    with pytest.raises(ConfigError, match="T: method 'ed'"):
        phasemap.solve(m, method="ed:tri12", T=0.3)


def test_temperature_map_and_config():
    """A (T, mu) map at t = 0, V = 0 is the exact Fermi function on every grid point (exact), and
    TOML [scan] T / T axes are validated and refused for methods without a temperature."""
    import tomllib

    from phasemap.config import parse_config
    from phasemap.scan import phase_map

    m = phasemap.Model(lattice="triangular", t=0.0, V=0.0, mu=0.0, unit="K")
    T = np.array([0.2, 0.5, 1.0])
    mu = np.array([-1.0, 0.0, 0.7])
    ds = phase_map(m, x=("T", T), y=("mu", mu), relative=False, refine=False, progress=False)
    assert np.allclose(ds["filling"].values, 1 / (1 + np.exp(-mu[None, :] / T[:, None])), atol=1e-10)
    assert set(ds["label"].values.ravel()) <= {"normal n=" + f"{x:.3g}" for x in ds["filling"].values.ravel()}
    base = """[model]\nlattice = "triangular"\nt = 0.0\nV = 1.0\nU = "hardcore"\n"""
    cfg = parse_config(tomllib.loads(base + """[scan]\nkind = "curve"\nx = {name = "mu", start = -1, stop = 7, num = 5}
T = 0.5\n"""), name="c")
    assert cfg.options(cfg.scans[0])["T"] == pytest.approx(0.5)
    parse_config(tomllib.loads(base + """[scan]\nx = {name = "T", start = 0, stop = 1, num = 3}
y = {name = "mu", start = -1, stop = 7, num = 3}\n[solver]\nT = 0.1\n"""), name="m")
    with pytest.raises(ConfigError, match=r"\[scan\].T"):
        parse_config(tomllib.loads(base + """[scan]\nkind = "curve"\nx = {name = "mu", values = [0, 1]}\nT = -1\n"""))
    with pytest.raises(ConfigError, match="scan axis T"):
        parse_config(tomllib.loads(base + """[scan]\nx = {name = "T", values = [-1, 1]}
y = {name = "mu", values = [0, 1]}\n"""))
