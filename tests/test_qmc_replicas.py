"""Replica exchange (parallel tempering) in mu and T of the QMC engine (``phasemap.qmc.tempering``,
docs/qmc.md "Replica exchange").

Physics checks against exact thermal averages from full diagonalization of the 9-site triangular
torus computed in the test with numpy (tests/_qmc_exact.py, independent of the engine): energy,
filling, compressibility and S(K)/N of *every* replica at its own (mu, T), within 4 sigma of the
run's binning error. Reproducibility and checkpoint/resume: common practice, no source.
"""

from __future__ import annotations

import json
import subprocess
import sys
import textwrap

import numpy as np
import pytest
from _kill_run import kill_mid_run

from _qmc_exact import thermal, torus_bonds
from phasemap import Model
from phasemap.model import ConfigError
from phasemap.qmc import run_qmc
from phasemap.qmc import run as qrun

TRI9 = ((3, 0), (0, 3))
K = np.array([2 / 3, 1 / 3])


def _exact(model, mu, T):
    cell, bonds = torus_bonds("triangular", TRI9, model.t, model.V, model.V2)
    return thermal(cell.n_sites, bonds, mu, T, sites=cell.sites, q=K)


def _check_replicas(res, model, nsig=4.0):
    """every replica's energy, filling, compressibility, S(K)/N against full diagonalization"""
    assert res.decorrelated, res.flags
    for rep in res.info["replicas"]:
        ex = _exact(model, rep["mu"], rep["T"])
        for k, x in (("energy", ex["energy"]), ("filling", ex["filling"]),
                     ("compressibility", ex["compressibility"]), ("S(K)/N", ex["sq"])):
            v, e = rep[k]["value"], rep[k]["error"]
            assert e > 0, (rep["mu"], rep["T"], k)
            assert abs(v - x) < nsig * e, f"mu {rep['mu']:g}, T {rep['T']:g}, {k}: qmc {v:.6f} ± {e:.2g}, exact {x:.6f}"
    # the run's own estimates are those of its (mu, T) replica
    tgt = [r for r in res.info["replicas"] if r["mu"] == res.model.mu and abs(r["T"] - res.T) < 1e-12]
    assert len(tgt) == 1
    for k in ("energy", "filling", "compressibility", "S(K)/N"):
        assert res[k].value == tgt[0][k]["value"] and res[k].error == tgt[0][k]["error"], k


# exact: full diagonalization of tri9 with anisotropic hopping and V; a mu ladder at T = 0.3
def test_mu_ladder_every_replica_against_exact():
    m = Model("triangular", t=(0.3, 0.1, 0.2), V=(1.0, 0.5, 0.8), mu=2.0)
    res = run_qmc(m, cluster="tri9", T=0.3, sweeps=12000, bins=20, seed=21, mu_ladder=[1.7, 2.0, 2.3])
    assert res.info["mu_ladder"] == pytest.approx([1.7, 2.0, 2.3]) and res.info["T_ladder"] == pytest.approx([0.3] * 3)
    acc = res.info["swap_acceptance"]
    assert all(0.02 < a < 0.98 for a in acc), acc  # the exchange is exercised and not trivial
    assert res.filling.error < 0.003
    _check_replicas(res, m)


# exact: full diagonalization of tri9, a temperature ladder at fixed mu (swap ratio with the beta^n factor)
def test_temperature_ladder_every_replica_against_exact():
    m = Model("triangular", t=0.15, V=1.0, mu=2.5)
    res = run_qmc(m, cluster="tri9", T=0.25, sweeps=12000, bins=20, seed=22, T_ladder=[0.25, 0.29, 0.34])
    acc = res.info["swap_acceptance"]
    assert all(0.02 < a < 0.98 for a in acc), acc
    _check_replicas(res, m)


# exact: full diagonalization of tri9; mu and T ladder given as pairs, next-nearest-neighbour-free
# anisotropic model, every replica at its own (mu, T)
def test_mu_T_pairs_against_exact():
    m = Model("triangular", t=(0.2, 0.15, 0.1), V=(1.0, 0.7, 0.9), mu=2.2)
    res = run_qmc(m, cluster="tri9", T=0.3, sweeps=12000, bins=20, seed=23,
                  mu_ladder=[2.0, 2.2, 2.4], T_ladder=[0.33, 0.3, 0.27])
    assert res.info["mu_ladder"] == pytest.approx([2.0, 2.2, 2.4])
    assert res.info["T_ladder"] == pytest.approx([0.33, 0.3, 0.27])
    assert all(0.02 < a < 0.98 for a in res.info["swap_acceptance"]), res.info["swap_acceptance"]
    _check_replicas(res, m)


# exact: full diagonalization of tri9 at t/V = 0.08 where the particle numbers 3 (the 1/3 solid) and
# 4 are nearly degenerate (mu = 2.6) and the loops rarely change N at T = 0.07 V (measured: ~40
# sector moves in 20000 sweeps): plain chains are flagged; a temperature ladder to T = 0.25 V
# decorrelates and agrees with the exact filling and compressibility
@pytest.mark.slow
def test_slow_point_temperature_ladder_against_exact():
    m = Model("triangular", t=0.08, V=1.0, mu=2.6)
    T = 0.07
    ex = _exact(m, m.mu, T)
    plain = run_qmc(m, cluster="tri9", T=T, sweeps=20000, bins=20, seed=4, chains=2, workers=1)
    rx = run_qmc(m, cluster="tri9", T=T, sweeps=20000, bins=20, seed=4, chains=2, workers=1, replicas=10, T_hot=0.25)
    assert not plain.decorrelated  # the plain chains are too slow here
    assert rx.decorrelated, rx.flags
    assert rx.filling.tau < plain.filling.tau / 2, (rx.filling.tau, plain.filling.tau)
    for k in ("energy", "filling", "compressibility"):
        assert abs(rx[k].value - ex[k]) < 4 * rx[k].error, (k, rx[k], ex[k])
    assert abs(rx["S(K)/N"].value - ex["sq"]) < 4 * rx["S(K)/N"].error


def test_same_seed_same_numbers_with_exchange():
    m = Model("triangular", t=0.15, V=1.0, mu=2.5)
    kw = dict(cluster="tri9", T=0.3, sweeps=2000, bins=10, chains=2, workers=1, replicas=3, mu_step=0.15)
    a = run_qmc(m, seed=5, **kw).to_dict()
    b = run_qmc(m, seed=5, **kw).to_dict()
    c = run_qmc(m, seed=6, **kw).to_dict()
    assert a["estimates"] == b["estimates"] and a["info"]["replicas"] == b["info"]["replicas"]
    assert a["info"]["swap_acceptance"] == b["info"]["swap_acceptance"]
    assert a["estimates"] != c["estimates"]
    # the single-replica path is untouched: replicas=1 is the plain chain
    p = run_qmc(m, seed=5, **{**kw, "replicas": 1, "mu_step": None}).to_dict()
    q = run_qmc(m, seed=5, **{k: v for k, v in kw.items() if k not in ("replicas", "mu_step")}).to_dict()
    assert p["estimates"] == q["estimates"] and "replicas" not in p["info"]


def test_interrupted_and_resumed_equals_uninterrupted(tmp_path, monkeypatch):
    """stop a replica-exchange chain after a few checkpoints (an exception in the writer, like a
    kill between two writes), rerun: identical to the uninterrupted run"""
    m = Model("triangular", t=0.2, V=1.0, mu=2.8)
    kw = dict(cluster="tri9", T=0.3, sweeps=6000, bins=10, seed=8, workers=1, mu_ladder=[2.6, 2.8, 3.0, 3.2],
              checkpoint_interval=0.0)
    ref = run_qmc(m, **kw).to_dict()
    real = qrun._save
    calls = {"n": 0}

    def dying(path, arrays):
        calls["n"] += 1
        if calls["n"] == 40:
            raise KeyboardInterrupt
        real(path, arrays)

    monkeypatch.setattr(qrun, "_save", dying)
    with pytest.raises(KeyboardInterrupt):
        run_qmc(m, checkpoint=str(tmp_path), **kw)
    monkeypatch.setattr(qrun, "_save", real)
    (f,) = tmp_path.glob("*_rx4.npz")
    with np.load(f) as z:
        assert z["ops"].ndim == 2 and z["ops"].shape[0] == 4 and 0 <= int(z["meas_done"]) < 6000
        assert int(z["therm_done"]) > 0
    again = run_qmc(m, checkpoint=str(tmp_path), **kw).to_dict()
    assert again["estimates"] == ref["estimates"] and again["info"]["replicas"] == ref["info"]["replicas"]
    assert again["info"]["swap_acceptance"] == ref["info"]["swap_acceptance"]


_SCRIPT = textwrap.dedent("""
    import json, sys
    from phasemap import Model
    from phasemap.qmc import run_qmc
    m = Model("triangular", t=0.2, V=1.0, mu=2.7)
    r = run_qmc(m, cluster="tri9", T=0.3, sweeps=int(sys.argv[2]), bins=20, seed=9, checkpoint=sys.argv[1],
                checkpoint_interval=0.05, replicas=3, mu_step=0.2)
    print(json.dumps([r.to_dict()["estimates"], r.info["swap_acceptance"], r.info["replicas"]]))
""")


@pytest.mark.slow
def test_checkpoint_sigkill_restart_identical_with_exchange(tmp_path):
    sweeps = 60000
    script = tmp_path / "run.py"
    script.write_text(_SCRIPT)
    ck = tmp_path / "ck"
    env = kill_mid_run(script, ck, sweeps)
    out = subprocess.run([sys.executable, str(script), str(ck), str(sweeps)], env=env, capture_output=True,
                         text=True, timeout=600)
    assert out.returncode == 0, out.stderr
    restarted = json.loads(out.stdout.strip().splitlines()[-1])
    ref = run_qmc(Model("triangular", t=0.2, V=1.0, mu=2.7), cluster="tri9", T=0.3, sweeps=sweeps, bins=20, seed=9,
                  replicas=3, mu_step=0.2)
    assert restarted == json.loads(json.dumps([ref.to_dict()["estimates"], ref.info["swap_acceptance"],
                                               ref.to_dict()["info"]["replicas"]]))


@pytest.mark.parametrize("kw,field", [
    (dict(replicas=0), "replicas"), (dict(replicas=2.5), "replicas"), (dict(replicas=3, mu_step=-0.1), "mu_step"),
    (dict(mu_ladder=[1.0, 1.5]), "mu_ladder"), (dict(mu_ladder=[2.0]), "mu_ladder"),
    (dict(T_ladder=[0.5, 0.6]), "T_ladder"), (dict(replicas=3, T_hot=0.1), "T_hot"),
    (dict(mu_ladder=[1.9, 2.0], T_ladder=[0.3, 0.4, 0.5]), "mu_ladder/T_ladder"),
    (dict(replicas=3, mu_step=0.1, T_hot=1.0), "mu_step/T_hot"), (dict(mu_step=0.1), "mu_step/T_hot"),
])
def test_bad_ladders_refused(kw, field):
    m = Model("triangular", t=0.15, V=1.0, mu=2.0)
    with pytest.raises(ConfigError, match=field.replace("/", "/")):
        run_qmc(m, cluster="tri9", T=0.3, sweeps=100, bins=10, **kw)


def test_temperature_ladder_needs_a_temperature():
    m = Model("triangular", t=0.15, V=1.0, mu=2.0)
    with pytest.raises(ConfigError, match="T_ladder/T_hot"):
        run_qmc(m, cluster="tri9", sweeps=100, bins=10, replicas=3, T_hot=1.0)


def test_cli_point_and_scaling_with_replicas(tmp_path, capsys):
    from phasemap.cli import main

    assert main(["point", "--t", "0.15", "--V", "1", "--hardcore", "--mu", "2.5", "--method", "qmc:tri9", "--T", "0.3",
                 "--sweeps", "1000", "--bins", "10", "--seed", "3", "--mu-ladder", "2.3,2.5,2.7", "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["errors"]["energy"] > 0
    assert d["extra"]["info"]["mu_ladder"] == pytest.approx([2.3, 2.5, 2.7]) and len(d["extra"]["info"]["swap_acceptance"]) == 2
    assert main(["point", "--t", "0.15", "--V", "1", "--hardcore", "--mu", "2.5", "--method", "qmc:tri9", "--T", "0.3",
                 "--sweeps", "1000", "--bins", "10", "--replicas", "3", "--T-hot", "0.5", "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["extra"]["info"]["T_ladder"] == pytest.approx([0.3, 0.3 * (0.5 / 0.3) ** 0.5, 0.5])
    # bad input: non-zero exit naming the field; deterministic methods refuse the option
    assert main(["point", "--t", "0.15", "--V", "1", "--hardcore", "--mu", "2.5", "--method", "qmc:tri9", "--T", "0.3",
                 "--sweeps", "100", "--bins", "10", "--mu-ladder", "2.3,2.4"]) == 2
    assert "mu_ladder" in capsys.readouterr().err
    assert main(["point", "--t", "0.15", "--V", "1", "--hardcore", "--method", "mf", "--replicas", "3"]) == 2
    assert "--replicas" in capsys.readouterr().err
    out = tmp_path / "o"
    assert main(["qmc-scaling", "--t", "0.3", "--V", "1", "--mu", "2", "--sizes", "3,6", "--T", "0.5", "--sweeps", "200",
                 "--seed", "4", "--workers", "1", "--replicas", "3", "--out", str(out)]) == 0
    d = json.loads((out / "scaling.json").read_text())
    assert d["method_options"]["replicas"] == 3


# an exchange never changes a configuration's particle number: replica chains whose configurations
# never change |N - N_sites/2| (measured: 12x12, t/V = 0.08, beta V = 120, 0 sector moves in 9
# slots) are flagged, however well the target's N seems to fluctuate through the exchanges
def test_frozen_particle_number_sectors_are_flagged():
    from phasemap.qmc.run import frozen_sectors

    def chain(numbers_per_slot, moves):
        return {"replicas": [{"rec": np.column_stack([np.zeros(100), np.asarray(n, float)])} for n in numbers_per_slot],
                "sector_moves": moves}

    mixed = [np.full(100, 72), np.where(np.arange(100) % 2, 71, 73), np.full(100, 72)]
    assert "chain 0: 0 sector moves" in frozen_sectors([chain(mixed, [0, 0, 0])], 144, 8)
    assert frozen_sectors([chain(mixed, [5, 4, 3])], 144, 8) == ""  # 12 moves >= 8 bins
    assert frozen_sectors([chain([np.full(100, 48)] * 3, [0, 0, 0])], 144, 8) == ""  # one sector (a plateau)
