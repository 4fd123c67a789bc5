"""QMC at a fixed particle number (``fixed_filling``, canonical ensemble) against exact canonical
thermal averages of the same small torus.

Reference: full diagonalization of the one particle-number block, computed here with numpy
(tests/_qmc_exact.py with ``sectors=[N]``), independent of the engine ("exact" beside each check).
Each case also checks that the grand-canonical answer at the same mu is many sigma away, so a
sampler that leaks into other particle numbers fails.
"""

from __future__ import annotations

import numpy as np
import pytest

from _qmc_exact import compare, thermal, torus_bonds
from phasemap import Model
from phasemap.model import ConfigError
from phasemap.qmc import run_qmc

TRI9 = ((3, 0), (0, 3))
TRI12 = ((2, 2), (-2, 4))
SQ43 = ((4, 0), (0, 3))
KEYS = ("energy", "sq", "stiffness")


def _check(res, lattice, vectors, model, T, n_part, keys=KEYS):
    n_sites = res.n_sites
    assert res.info["fixed_particles"] == n_part
    assert res.info["particle_numbers"] == [{n_part: res.sweeps}] * res.chains  # N never left the sector
    assert res.filling.value == pytest.approx(n_part / n_sites, abs=1e-12)
    assert np.isnan(res["compressibility"].value)
    out = compare(res, lattice, vectors, model, T, keys=keys, sectors=[n_part])
    cell, bonds = torus_bonds(lattice, vectors, model.t, model.V, model.V2)
    gc = thermal(cell.n_sites, bonds, model.mu, T)  # grand canonical at the same mu
    e = res.energy
    assert abs(gc["energy"] - e.value) > 8 * e.error, "test cannot tell canonical from grand canonical"
    return out


# exact (canonical block of the full diagonalization): anisotropic triangular 9-site torus, 3 particles
# at a mu where the grand-canonical filling is far from 1/3
def test_tri9_anisotropic_fixed_particles_against_exact():
    m = Model("triangular", t=(0.3, 0.2, 0.25), V=(1.0, 0.8, 0.9), mu=2.5)
    res = run_qmc(m, cluster="tri9", T=0.4, sweeps=20000, bins=20, seed=5, fixed_filling=3 / 9)
    _check(res, "triangular", TRI9, m, 0.4, 3)
    assert res.decorrelated
    assert res.energy.error < 0.01 * abs(res.energy.value)


# exact (canonical block): half-filled 12-site triangular torus at mu = 3V (particle-hole flip on)
def test_tri12_half_filling_fixed_particles_against_exact():
    m = Model("triangular", t=0.15, V=1.0, mu=2.0)
    res = run_qmc(m, cluster="tri12", T=0.25, sweeps=16000, bins=16, seed=2, fixed_filling=0.5)
    _check(res, "triangular", TRI12, m, 0.25, 6)
    assert res.info["flip_acceptance"][0] is not None  # 2 N = N_sites: the flip keeps N and is tried


# exact (canonical block): anisotropic 4x3 square torus, 5 particles, flip not tried (it would change N)
def test_square_4x3_fixed_particles_against_exact():
    m = Model("square", t=(0.4, 0.25), V=(0.5, 1.0), mu=-0.5)
    res = run_qmc(m, cluster=SQ43, T=0.3, sweeps=16000, bins=16, seed=1, fixed_filling=5 / 12)
    _check(res, "square", SQ43, m, 0.3, 5, keys=("energy", "stiffness"))  # (pi, pi) not on a 4x3 torus
    assert res.info["flip_acceptance"][0] is None


def test_fixed_filling_rounding_and_same_seed():
    m = Model("triangular", t=0.2, V=1.0, mu=3.0)
    a = run_qmc(m, size=(3, 3), T=0.5, sweeps=400, bins=4, seed=9, fixed_filling=0.5, chains=2)
    b = run_qmc(m, size=(3, 3), T=0.5, sweeps=400, bins=4, seed=9, fixed_filling=0.5, chains=2)
    assert a.info["fixed_particles"] == 5  # 4.5 rounds up
    assert a.energy.value == b.energy.value and a["S(K)/N"].value == b["S(K)/N"].value


@pytest.mark.parametrize("bad", [1.5, -0.1, "half", True, float("nan")])
def test_fixed_filling_refusals(bad):
    m = Model("triangular", t=0.2, V=1.0, mu=3.0)
    with pytest.raises(ConfigError, match="fixed_filling"):
        run_qmc(m, cluster="tri9", T=0.5, sweeps=100, bins=4, fixed_filling=bad)


def test_fixed_filling_refuses_replicas():
    m = Model("triangular", t=0.2, V=1.0, mu=3.0)
    with pytest.raises(ConfigError, match="fixed_filling"):
        run_qmc(m, cluster="tri9", T=0.5, sweeps=100, bins=4, fixed_filling=0.5, replicas=3)


def test_cli_point_fixed_filling():
    import json
    import os
    import subprocess
    import sys

    env = dict(os.environ, PYTHONPATH=os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
    cmd = [sys.executable, "-m", "phasemap", "point", "--t", "0.1", "--V", "1", "--hardcore", "--mu", "3",
           "--method", "qmc:tri12", "--T", "0.3", "--sweeps", "1000", "--seed", "3", "--json"]
    out = subprocess.run(cmd + ["--fixed-filling", "0.5"], capture_output=True, text=True, env=env, timeout=600)
    assert out.returncode == 0, out.stderr
    d = json.loads(out.stdout)
    assert d["filling"] == 0.5 and d["extra"]["info"]["fixed_particles"] == 6
    bad = subprocess.run(cmd + ["--fixed-filling", "2"], capture_output=True, text=True, env=env, timeout=600)
    assert bad.returncode != 0 and "fixed_filling" in bad.stderr and "[0, 1]" in bad.stderr
