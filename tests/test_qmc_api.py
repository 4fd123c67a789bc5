"""QMC front doors: registry method, Solution with errors, CLI, chains, checkpoint/restart.

Sources: "common practice, no source" (reproducibility, interface contracts); the physics of
every number is checked in test_qmc_exact.py / test_qmc_physics.py.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import textwrap

import numpy as np
import pytest
from _kill_run import kill_mid_run

import phasemap
from phasemap import Model
from phasemap.model import ConfigError
from phasemap.qmc import run_qmc

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


def test_solve_through_registry_fills_errors():
    m = Model("triangular", t=0.1, V=1.0, mu=1.5)
    sol = phasemap.solve(m, method="qmc:tri9", T=0.2, sweeps=3000, bins=20, seed=1)
    assert sol.method == "qmc:tri9"
    for k in ("energy", "filling", "S(K)/N", "stiffness", "compressibility", "structure_factor"):
        assert k in sol.errors
    assert sol.errors["energy"] > 0 and sol.converged
    assert sol.phase == "solid" and abs(sol.filling - 1 / 3) < 0.01  # deep in the 1/3 plateau (t/V = 0.1, mu = 1.5 V)
    same = phasemap.solve(m, method="qmc", cluster="tri9", T=0.2, sweeps=3000, bins=20, seed=1)
    assert same.energy == sol.energy
    rh = phasemap.solve(m, method="qmc:3x3", T=0.2, sweeps=3000, bins=20, seed=1)
    assert rh.method == "qmc:3x3" and rh.extra["n_sites"] == 9
    with pytest.raises(ConfigError, match="qmc options"):
        phasemap.solve(m, method="qmc:tri9", T=0.2, sweep=10)


def test_not_decorrelated_is_unconverged():
    m = Model("triangular", t=0.1, V=1.0, mu=1.5)
    res = run_qmc(m, cluster="tri9", T=0.2, sweeps=2000, bins=20, seed=1)
    res.decorrelated = False
    sol = res.to_solution()
    assert sol.phase == "unconverged" and not sol.converged


def test_chains_parallel_equals_serial():
    m = Model("triangular", t=0.2, V=1.0, mu=2.0)
    a = run_qmc(m, cluster="tri9", T=0.3, sweeps=2000, bins=10, seed=4, chains=2, workers=1)
    b = run_qmc(m, cluster="tri9", T=0.3, sweeps=2000, bins=10, seed=4, chains=2, workers=2)
    assert a.to_dict()["estimates"] == b.to_dict()["estimates"]
    one = run_qmc(m, cluster="tri9", T=0.3, sweeps=2000, bins=10, seed=4, chains=1)
    assert one.energy.value != a.energy.value  # the second chain contributes


def test_cli_point_qmc_json():
    env = dict(os.environ, PYTHONPATH=ROOT)
    out = subprocess.run([sys.executable, "-m", "phasemap", "point", "--t", "0.1", "--V", "1", "--hardcore", "--mu",
                          "1.5", "--method", "qmc:tri9", "--T", "0.2", "--sweeps", "2000", "--seed", "3", "--json"],
                         capture_output=True, text=True, env=env, timeout=600)
    assert out.returncode == 0, out.stderr
    d = json.loads(out.stdout)
    assert d["method"] == "qmc:tri9" and d["errors"]["energy"] > 0
    bad = subprocess.run([sys.executable, "-m", "phasemap", "point", "--t", "0.1", "--V", "1", "--hardcore",
                          "--method", "mf", "--sweeps", "100"], capture_output=True, text=True, env=env, timeout=600)
    assert bad.returncode == 2 and "--sweeps" in bad.stderr


_SCRIPT = textwrap.dedent("""
    import json, sys
    from phasemap import Model
    from phasemap.qmc import run_qmc
    m = Model("triangular", t=0.2, V=1.0, mu=2.7)
    r = run_qmc(m, cluster="tri9", T=0.3, sweeps=int(sys.argv[2]), bins=20, seed=9, checkpoint=sys.argv[1],
                checkpoint_interval=0.05)
    print(json.dumps([r.to_dict()["estimates"], r.info["flip_acceptance"]]))
""")


@pytest.mark.slow
def test_checkpoint_sigkill_restart_identical(tmp_path):
    sweeps = 150000
    script = tmp_path / "run.py"
    script.write_text(_SCRIPT)
    ck = tmp_path / "ck"
    env = kill_mid_run(script, ck, sweeps)
    with np.load(list(ck.glob("*.npz"))[0]) as z:
        resumed_from = int(z["meas_done"])
    assert 0 < resumed_from < sweeps
    out = subprocess.run([sys.executable, str(script), str(ck), str(sweeps)], env=env, capture_output=True,
                         text=True, timeout=600)
    assert out.returncode == 0, out.stderr
    restarted = json.loads(out.stdout.strip().splitlines()[-1])
    m = Model("triangular", t=0.2, V=1.0, mu=2.7)  # near half filling: particle-hole flips are accepted too
    ref = run_qmc(m, cluster="tri9", T=0.3, sweeps=sweeps, bins=20, seed=9)
    assert 0.01 < ref.info["flip_acceptance"][0] < 0.99
    assert restarted == [ref.to_dict()["estimates"], ref.info["flip_acceptance"]]


# exact (full diagonalization in the test, T -> 0): the beta-doubling ground-state search
def test_ground_state_by_beta_doubling():
    from _qmc_exact import thermal, torus_bonds

    m = Model("triangular", t=0.1, V=1.0, mu=1.5)
    res = run_qmc(m, cluster="tri9", sweeps=4000, bins=20, seed=2)
    assert res.ground_state and res.beta == res.betas[-1] and len(res.betas) >= 2
    assert all(b2 == 2 * b1 for b1, b2 in zip(res.betas, res.betas[1:]))
    _, bonds = torus_bonds("triangular", ((3, 0), (0, 3)), m.t, m.V)
    e0 = thermal(9, bonds, m.mu, 1e-3)["energy"]
    assert abs(res.energy.value - e0) < 4 * res.energy.error + 1e-9, (res.energy, e0)
