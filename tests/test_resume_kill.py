"""Kill-and-resume with a real SIGKILL of a running job (``phasemap run`` maps and filling curves,
``strain-sweep``, ``cluster-scaling``, ``qmc-scaling``): the rerun with ``--resume`` recomputes
none of the chunks finished before the kill and writes a result identical to an uninterrupted
run; a changed configuration is refused, naming the field; a second writer is refused by the lock.

Source: common practice, no source (software behaviour; the uninterrupted run is the reference).
"""

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
import xarray as xr
from _toml_configs import config

from phasemap.config import load_config
from phasemap.runner import CHECKPOINT_DIR, run
from phasemap.store import load_netcdf

ROOT = Path(__file__).resolve().parents[1]

MAP = config("""
kind = "map"
x = {name = "t", start = 0.0, stop = 0.5, num = 121}
y = {name = "mu", start = -1.0, stop = 7.0, num = 161}
refine = false
chunk = 600
""")

CURVE = config("""
kind = "curve"
method = "cmf:tri3"
x = {name = "mu", start = -1.0, stop = 7.0, num = 256}
refine = false
""")


def _env():
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    return env


def _strip(ds):
    ds = ds.copy()
    ds.attrs.pop("wall_time_s", None)
    return ds


def _kill_and_resume(tmp_path, text, name, min_chunks=2):
    cfg = tmp_path / f"{name}.toml"
    cfg.write_text(text)
    ref = run(load_config(cfg), out=tmp_path / "ref", progress=False, log=lambda s: None, executor="serial")
    out = tmp_path / "out"
    ck = out / CHECKPOINT_DIR / name
    killed = _cli_kill(["run", cfg, "--out", out, "--quiet", "--executor", "serial"], ck, min_chunks)
    stamps = {p.name: t for p, t in killed.items()}
    finished = sorted(stamps)
    assert finished and not (out / f"{name}.nc").exists()
    # a changed configuration is refused, naming what changed
    changed = tmp_path / "changed" / f"{name}.toml"
    changed.parent.mkdir()
    changed.write_text(text.replace("t = 0.1", "t = 0.12"))
    r = _phasemap("run", changed, "--out", out, "--resume", "--quiet", timeout=600)
    assert r.returncode == 2 and "model.t" in r.stderr, r.stderr
    # resume: the finished chunks are taken, not recomputed (files untouched), result identical
    seen = {}

    def log(s):
        seen.setdefault("log", []).append(s)
        for p in finished:  # nothing finished before the kill was rewritten during the resume
            if (ck / p).exists():
                assert (ck / p).stat().st_mtime_ns == stamps[p]

    run(load_config(cfg), out=out, resume=True, progress=False, log=log, executor="serial")
    assert any(f"resuming, {len(finished)} finished chunk(s)" in s for s in seen["log"]), seen
    a, b = load_netcdf(out / f"{name}.nc"), load_netcdf(tmp_path / "ref" / f"{name}.nc")
    xr.testing.assert_identical(_strip(a), _strip(b))
    assert not ck.exists()
    return ref


@pytest.mark.slow
def test_map_killed_and_resumed(tmp_path):
    _kill_and_resume(tmp_path, MAP, "map")


@pytest.mark.slow
def test_curve_killed_and_resumed(tmp_path):
    _kill_and_resume(tmp_path, CURVE, "curve", min_chunks=1)


def _phasemap(*args, timeout=900):
    return subprocess.run([sys.executable, "-m", "phasemap", *map(str, args)], env=_env(), capture_output=True,
                          text=True, timeout=timeout)


def _cli_kill(args, ck, min_chunks=1, while_paused=None, ready=None):
    """Start ``phasemap ARGS``, wait for ``min_chunks`` checkpoint chunks in ``ck`` (and ``ready()``), SIGSTOP it and
    call ``while_paused()`` (the job is alive and holds its folder), then SIGKILL it. Returns the
    modification stamps of the chunks finished before the kill."""
    proc = subprocess.Popen([sys.executable, "-m", "phasemap", *map(str, args)], env=_env(),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        t0 = time.monotonic()
        while len(list(ck.glob("chunk_*.npz"))) < min_chunks or (ready is not None and not ready()):
            assert proc.poll() is None, f"finished before it could be killed: {proc.stderr.read()}"
            assert time.monotonic() - t0 < 600
            time.sleep(0.02)
        proc.send_signal(signal.SIGSTOP)
        if while_paused is not None:
            while_paused()
        proc.send_signal(signal.SIGKILL)
        proc.wait(60)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait(60)
    return {p: p.stat().st_mtime_ns for p in ck.glob("chunk_*.npz")}


def _resume_in_process(args, stamps, monkeypatch, capsys):
    """Run ``phasemap ARGS --resume`` in this process, noting every chunk it saves: none of the
    chunks finished before the kill may be saved again (that would be a recomputation), and those
    files stay untouched until the finished result removes the checkpoint."""
    from phasemap.cli import main
    from phasemap.store import ChunkStore

    finished = {int(p.stem.split("_")[1]) for p in stamps}
    saved = []
    save = ChunkStore.save

    def spy(self, i, part):
        for p, t in stamps.items():
            assert p.stat().st_mtime_ns == t
        saved.append(int(i))
        save(self, i, part)

    monkeypatch.setattr(ChunkStore, "save", spy)
    code = main([*map(str, args), "--resume"])
    err = capsys.readouterr().err
    assert code == 0, err
    assert saved and not finished & set(saved), (finished, saved)
    return err


def _second_writer_refused(args):
    def check():
        r = _phasemap(*args)
        assert r.returncode == 2 and "in use" in r.stderr, r.stderr
    return check


def _job_killed_and_resumed(tmp_path, monkeypatch, capsys, args, ck_name, min_chunks, changed, field, unit, result,
                            files, ready=None):
    """The whole kill-and-resume story of one CLI job writing ``files``: reference run; the job killed
    after ``min_chunks`` chunks (a second writer refused meanwhile); rerun without ``--resume``
    refused; rerun with ``changed`` arguments refused naming ``field``; resume in this process
    recomputes no finished chunk ("resuming, K finished <unit>"), writes ``result`` (absent before),
    gives the reference text ``files`` and removes the checkpoint. Returns (out, ref, stamps)."""
    ref, out = tmp_path / "ref", tmp_path / "out"
    r = _phasemap(*args, "--out", ref)
    assert r.returncode == 0, r.stderr
    ck = out / CHECKPOINT_DIR / ck_name
    stamps = _cli_kill([*args, "--out", out], ck, min_chunks, _second_writer_refused([*args, "--out", out, "--resume"]),
                       ready=ready)
    assert stamps and not (out / result).exists()
    r = _phasemap(*args, "--out", out)
    assert r.returncode == 2 and "--resume" in r.stderr, r.stderr  # an unfinished run is not silently reused
    r = _phasemap(*changed, "--out", out, "--resume")
    assert r.returncode == 2 and field in r.stderr, r.stderr
    err = _resume_in_process([*args, "--out", out], stamps, monkeypatch, capsys)
    assert f"resuming, {len(stamps)} finished {unit}" in err
    for f in files:
        assert (out / f).read_text() == (ref / f).read_text(), f
    assert (out / result).exists() and not ck.exists()
    return out, ref, stamps


@pytest.mark.slow
def test_strain_sweep_killed_and_resumed(tmp_path, monkeypatch, capsys):
    demo = (ROOT / "phasemap" / "data" / "strain_demo.csv").read_text()
    table = tmp_path / "table.csv"
    table.write_text(demo)
    args = ["strain-sweep", table, "--methods", "mf", "--n-strain", "9", "--n-mu", "61", "--no-figures", "--quiet",
            "--executor", "serial"]
    changed = tmp_path / "changed" / "table.csv"
    changed.parent.mkdir()
    changed.write_text(demo.replace("0.04,0.8272,0.7084,0.7084,5.6472", "0.04,0.8272,0.7084,0.7084,5.6400"))
    out, ref, stamps = _job_killed_and_resumed(
        tmp_path, monkeypatch, capsys, args, "sweep", 2, [changed if a == table else a for a in args],
        "table.rows.strain=0.04.V_d1", "chunk(s)", "sweep.nc", ["plateau.csv", "critical.csv"])
    assert len(stamps) >= 2
    xr.testing.assert_identical(load_netcdf(out / "sweep.nc"), load_netcdf(ref / "sweep.nc"))


@pytest.mark.slow
def test_cluster_scaling_killed_and_resumed(tmp_path, monkeypatch, capsys):
    args = ["cluster-scaling", "--lattice", "square", "--U", "1", "--n-max", "3", "--t", "0.01",
            "--quantity", "lobe-tip", "--clusters", "sq1,sq2-sd,sq2x1", "--quiet", "--executor", "serial"]
    _job_killed_and_resumed(tmp_path, monkeypatch, capsys, args, "scaling", 1,
                            [a if a != "0.01" else "0.02" for a in args], "model.t", "cluster(s)",
                            "scaling.json", ["scaling.json", "scaling.csv"])


@pytest.mark.slow
def test_qmc_scaling_killed_and_resumed(tmp_path, monkeypatch, capsys):
    # two Monte Carlo runs (3x3, 6x6), killed after the first run finished and after the second
    # run's chain wrote its own mid-run checkpoint (every 5 s of work): the resume keeps the first
    # run, continues the chain from its checkpoint, and gives the uninterrupted numbers
    args = ["qmc-scaling", "--t", "0.1", "--V", "1", "--mu", "3", "--sizes", "3,6", "--T", "0.3", "--sweeps",
            "100000", "--quiet", "--executor", "serial"]
    chain = tmp_path / "out" / CHECKPOINT_DIR / "qmc" / "inner" / "1"
    _, _, stamps = _job_killed_and_resumed(tmp_path, monkeypatch, capsys, args, "qmc", 1,
                                           [a if a != "0.3" else "0.31" for a in args], "runs.T", "run(s)",
                                           "scaling.json", ["scaling.json", "scaling.csv"], ready=lambda: any(chain.glob("*.npz")))
    assert [p.name for p in stamps] == ["chunk_00000.npz"]


@pytest.mark.slow
def test_qmc_strain_sweep_killed_mid_chain_and_resumed(tmp_path):
    # a Monte Carlo strain step is one chunk made of many runs: killed inside it, the rerun replays
    # the finished runs from their chain checkpoints (ChunkStore.inner) and gives the same numbers
    args = ["strain-sweep", "demo", "--methods", "qmc:6+9", "--qmc", "sweeps=300", "--qmc", "order_sweeps=300",
            "--qmc", "rounds=2", "--qmc", "every=1", "--n-strain", "3", "--no-figures", "--quiet",
            "--executor", "serial"]
    ref = _phasemap(*args, "--out", tmp_path / "ref")
    assert ref.returncode == 0, ref.stderr
    out = tmp_path / "out"
    chains = out / CHECKPOINT_DIR / "sweep" / "inner" / "step0"
    _cli_kill([*args, "--out", out], out / CHECKPOINT_DIR / "sweep", 0, ready=lambda: len(list(chains.glob("*.npz"))) >= 10)
    assert len(list(chains.glob("*.npz"))) >= 10 and not (out / "sweep.nc").exists()
    r = _phasemap(*args, "--out", out, "--resume")
    assert r.returncode == 0, r.stderr
    xr.testing.assert_identical(load_netcdf(out / "sweep.nc"), load_netcdf(tmp_path / "ref" / "sweep.nc"))
    for f in ("plateau.csv", "critical.csv"):
        assert (out / f).read_text() == (tmp_path / "ref" / f).read_text()
    assert not (out / CHECKPOINT_DIR).exists()
