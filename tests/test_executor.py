"""Executors (phasemap.executor): chunks are independent and deterministic, so every executor
gives the serial result; finished chunks in a store are never recomputed.

Source: common practice, no source (software-behaviour checks; the physics of the compared maps
is checked elsewhere). The serial run is the independent reference.
"""

import os
import sys
import time

import numpy as np
import pytest
import xarray as xr

import phasemap
from phasemap.executor import DaskExecutor, ProcessExecutor, SerialExecutor, get_executor, run_chunks
from phasemap.model import ConfigError
from phasemap.scan import filling_curve, phase_map


def _map(executor, **kw):
    m = phasemap.Model("triangular", t=0.0, V=1.0)
    return phase_map(m, ("t", np.linspace(0.0, 0.4, 13)), ("mu", np.linspace(-1.0, 7.0, 17)), refine=False,
                     progress=False, chunk=40, executor=executor, **kw)


def _square(x):
    return x * x


class _Store(dict):
    def load(self, k):
        return self.get(k)

    def save(self, k, v):
        self[k] = v


def test_run_chunks_skips_stored_and_saves_each():
    store = _Store({1: -1})  # chunk 1 "finished" earlier (a marker value it would never compute)
    out = run_chunks(_square, {0: 2, 1: 3, 2: 4}, SerialExecutor(), store=store)
    assert out == {0: 4, 1: -1, 2: 16}
    assert store == {0: 4, 1: -1, 2: 16}


def _stage(task):
    kind, x = task
    return x * x if kind == "square" else -x


def _unlock_negation(store):
    # stage 2 of "group" g (key ("neg", g)) needs both of its stage-1 chunks (keys (g, 0), (g, 1))
    seen = {}

    def more(key, part):
        if key[0] == "neg":
            return {}
        seen.setdefault(key[0], {})[key[1]] = part
        g = seen[key[0]]
        return {("neg", key[0]): ("neg", g[0] + g[1])} if len(g) == 2 else {}
    return more


@pytest.mark.parametrize("executor", ["serial", "auto", "processes:2"])
def test_run_chunks_unlocks_second_stage(executor):
    # chunks unlocked by finished ones run (checkpointed) in the same call; a stage-1 chunk taken from the
    # store unlocks as well; a stage-2 chunk already in the store is not recomputed (planted: unlock
    # only computed chunks -> group 1's stage 2 never runs, KeyError)
    store = _Store({(1, 0): 1, (2, 0): 4, (2, 1): 9, ("neg", 2): 99})
    tasks = {(g, i): ("square", g + i) for g in (0, 1, 2) for i in (0, 1)}
    out = run_chunks(_stage, tasks, executor, store=store, more=_unlock_negation(store))
    assert out[(0, 0)] == 0 and out[(0, 1)] == 1 and out[(1, 1)] == 4
    assert out[("neg", 0)] == -1 and out[("neg", 1)] == -5 and out[("neg", 2)] == 99
    assert store[("neg", 0)] == -1 and store[("neg", 1)] == -5 and len(out) == 9


def test_get_executor_spellings_and_errors():
    assert isinstance(get_executor(None), SerialExecutor)
    assert isinstance(get_executor("processes:2"), ProcessExecutor) and get_executor("processes:2").workers == 2
    for bad in ("threads", "processes:0", "processes:x"):
        with pytest.raises(ConfigError, match="executor"):
            get_executor(bad)


def test_config_run_section_validated():
    from phasemap.config import parse_config

    base = {"model": {"lattice": "triangular", "t": 0.1, "V": 1.0},
            "scan": {"kind": "curve", "x": {"name": "mu", "start": 0.0, "stop": 1.0, "num": 3}}}
    assert parse_config(dict(base, run={"executor": "processes:2"})).executor == "processes:2"
    with pytest.raises(ConfigError, match=r"\[run\] executor"):
        parse_config(dict(base, run={"executor": "gpu"}))
    with pytest.raises(ConfigError, match="did you mean|scheduler"):
        parse_config(dict(base, run={"schedular": "tcp://x:1"}))


def test_processes_identical_to_serial():
    serial = _map("serial")
    with ProcessExecutor(2) as ex:
        par = _map(ex)
        xr.testing.assert_identical(serial, par)
        # the adaptive map cuts each level into chunks too
        xr.testing.assert_identical(_map("serial", adaptive=True, coarse=4), _map(ex, adaptive=True, coarse=4))


def test_dask_on_loopback_identical_to_serial():
    pytest.importorskip("distributed")
    serial = _map("serial")
    with DaskExecutor(None, workers=2, host="127.0.0.1") as ex:
        assert ex.address.startswith("tcp://127.0.0.1:")
        xr.testing.assert_identical(serial, _map(ex))
        m = phasemap.Model("triangular", t=0.1, V=1.0)
        a = filling_curve(m, np.linspace(-1, 7, 41), refine=False, executor=ex)
        b = filling_curve(m, np.linspace(-1, 7, 41), refine=False)
        xr.testing.assert_identical(a.dataset, b.dataset)


def test_strain_sweep_chunks_identical_to_whole_path():
    # a sweep runs one chunk per (method, strain) and joins them: the joined record must equal one
    # strain_step over the whole path (the pre-chunking sweep)
    from phasemap.classify import Thresholds
    from phasemap.methods import MethodSpec
    from phasemap.strain import read_table
    from phasemap.strain.sweep import strain_sweep

    table = read_table("demo")
    S = np.array([0.0, 0.08, 0.16])
    serial = strain_sweep(table, "mf", strains=S, n_mu=41, executor="serial")
    sp = MethodSpec.parse("mf")
    whole = sp.impl.strain_step(sp, table.models(S), "1/3", mu=serial.mu, keep_grid=True, width_floor=1e-3,
                                thresholds=Thresholds(), ed_thresholds=None)
    got = serial.records["mf"]
    for k in ("mu_lo", "mu_hi", "width", "exists", "converged"):
        np.testing.assert_array_equal(getattr(got, k), getattr(whole, k), err_msg=k)
    for k in whole.grid:
        np.testing.assert_array_equal(got.grid[k], whole.grid[k], err_msg=k)
    for k in ("jump_lo", "jump_hi", "label_center", "n_below", "n_above"):
        np.testing.assert_array_equal(getattr(got.detail, k), getattr(whole.detail, k), err_msg=k)
    assert got.flags == whole.flags and got.detail.flags == whole.detail.flags


@pytest.mark.slow
def test_strain_sweep_processes_identical_to_serial():
    from phasemap.strain import read_table
    from phasemap.strain.sweep import strain_sweep

    table = read_table("demo")
    S = np.array([0.0, 0.08, 0.16])
    serial = strain_sweep(table, "mf", strains=S, n_mu=41, executor="serial")
    with ProcessExecutor(2) as ex:
        par = strain_sweep(table, "mf", strains=S, n_mu=41, executor=ex)
    xr.testing.assert_identical(serial.to_dataset(), par.to_dataset())
    assert serial.critical["mf"].to_dict() == par.critical["mf"].to_dict()


@pytest.mark.slow
def test_strain_sweep_cmf_parallel_identical_to_serial(tmp_path):
    # mf and cmf:tri3 chunks on two spawned workers (one numba thread each), costliest method first,
    # every critical strain started as soon as its method's strains are in: the same dataset, critical
    # strains and plateau records as the serial sweep; a checkpointed rerun recomputes nothing
    from phasemap.store import ChunkStore
    from phasemap.strain import read_table
    from phasemap.strain.sweep import strain_sweep

    table = read_table("demo")
    S = np.array([0.08, 0.12, 0.16])
    kw = dict(strains=S, n_mu=41)
    serial = strain_sweep(table, "mf,cmf:tri3", executor="serial", **kw)
    with ProcessExecutor(2) as ex:
        par = strain_sweep(table, "mf,cmf:tri3", executor=ex, **kw)
    xr.testing.assert_identical(serial.to_dataset(), par.to_dataset())
    for n in ("mf", "cmf:tri3"):
        assert serial.critical[n].to_dict() == par.critical[n].to_dict()
        assert serial.records[n].flags == par.records[n].flags
    ck = ChunkStore(tmp_path / "ck", {"x": 1})
    first = strain_sweep(table, "mf,cmf:tri3", executor="serial", checkpoint=ck, **kw)
    assert len(ck.chunks()) == 2 * len(S) + 2
    ck.save = None  # nothing may be computed (saved) again
    again = strain_sweep(table, "mf,cmf:tri3", executor="serial", checkpoint=ck, **kw)
    xr.testing.assert_identical(first.to_dataset(), again.to_dataset())
    xr.testing.assert_identical(first.to_dataset(), serial.to_dataset())


@pytest.mark.slow
def test_qmc_runs_identical_on_every_executor(tmp_path):
    # one Monte Carlo run per chunk: in this process, forked workers (--workers) and spawned
    # workers give the same numbers (seeds from the job index); a checkpointed run taken back
    # from its ChunkStore is the stored result, not a new one
    from phasemap.qmc.scaling import finite_size_scaling
    from phasemap.store import ChunkStore

    m = phasemap.Model("triangular", t=0.1, V=1.0, mu=3.0)
    kw = dict(sizes=(3, 6), T=0.3, sweeps=2000, seed=5)
    ref = finite_size_scaling(m, workers=1, **kw).to_dict()
    assert finite_size_scaling(m, workers=2, **kw).to_dict() == ref
    with ProcessExecutor(2) as ex:
        ck = ChunkStore(tmp_path / "ck", {"case": 1})
        assert finite_size_scaling(m, executor=ex, checkpoint=ck, **kw).to_dict() == ref
    assert sorted(ck.chunks()) == [0, 1]
    again = finite_size_scaling(m, checkpoint=ChunkStore(tmp_path / "ck", {"case": 1}), workers=1,
                                **dict(kw, seed=6)).to_dict()  # taken from the store: seed 6 never ran
    assert again.pop("settings")["seed"] == 6
    assert again == {k: v for k, v in ref.items() if k != "settings"}


_ORPHAN_SCRIPT = """
import sys, time
from phasemap.executor import process_pool
pool = process_pool(2, sys.argv[1])
futs = [pool.submit(time.sleep, 120) for _ in range(2)]
while len(pool._processes) < 2:
    time.sleep(0.05)
time.sleep(1.0)  # the workers have run their initializer
print(" ".join(str(p) for p in pool._processes), flush=True)
time.sleep(120)
"""


def _alive(pid: int) -> bool:
    try:
        with open(f"/proc/{pid}/stat") as fh:
            return fh.read().rsplit(")", 1)[1].split()[0] != "Z"  # a zombie has exited
    except FileNotFoundError:
        return False


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc")
@pytest.mark.parametrize("context", ["fork", "spawn"])
def test_pool_workers_exit_when_the_parent_is_killed(context):
    # a job killed with SIGKILL must not leave its worker processes behind (they used to wait for
    # ever on their task queue); planted: no initializer -> the workers are still alive after 10 s
    import signal
    import subprocess

    proc = subprocess.Popen([sys.executable, "-c", _ORPHAN_SCRIPT, context], stdout=subprocess.PIPE, text=True)
    try:
        workers = [int(p) for p in proc.stdout.readline().split()]
        assert len(workers) == 2 and all(_alive(p) for p in workers)
        proc.send_signal(signal.SIGKILL)
        proc.wait(30)
        t0 = time.monotonic()
        while any(_alive(p) for p in workers) and time.monotonic() - t0 < 10:
            time.sleep(0.1)
        left = [p for p in workers if _alive(p)]
        for p in left:
            os.kill(p, signal.SIGKILL)
        assert not left, f"workers {left} outlived their killed parent"
    finally:
        if proc.poll() is None:
            proc.kill()
