"""Kill-and-resume with a real SIGKILL of a running ``phasemap run`` (maps and filling curves):
the rerun with ``--resume`` recomputes none of the chunks finished before the kill and writes a
result identical to an uninterrupted run; a changed configuration is refused, naming the field.

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

from phasemap.config import load_config
from phasemap.runner import CHECKPOINT_DIR, run
from phasemap.store import load_netcdf

ROOT = Path(__file__).resolve().parents[1]

MAP = """
[model]
lattice = "triangular"
t = 0.1
V = 1.0
U = "hardcore"

[scan]
kind = "map"
x = {name = "t", start = 0.0, stop = 0.5, num = 121}
y = {name = "mu", start = -1.0, stop = 7.0, num = 161}
refine = false
chunk = 600

[output]
figures = false
"""

CURVE = """
[model]
lattice = "triangular"
t = 0.1
V = 1.0
U = "hardcore"

[scan]
kind = "curve"
method = "cmf:tri3"
x = {name = "mu", start = -1.0, stop = 7.0, num = 256}
refine = false

[output]
figures = false
"""


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
    cmd = [sys.executable, "-m", "phasemap", "run", str(cfg), "--out", str(out), "--quiet", "--executor", "serial"]
    proc = subprocess.Popen(cmd, env=_env(), stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        t0 = time.monotonic()
        while len(list(ck.glob("chunk_*.npz"))) < min_chunks:
            assert proc.poll() is None, f"finished before it could be killed: {proc.stderr.read()}"
            assert time.monotonic() - t0 < 600
            time.sleep(0.02)
        proc.send_signal(signal.SIGKILL)
        proc.wait(60)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait(60)
    finished = sorted(p.name for p in ck.glob("chunk_*.npz"))
    stamps = {p: (ck / p).stat().st_mtime_ns for p in finished}
    assert finished and not (out / f"{name}.nc").exists()
    # a changed configuration is refused, naming what changed
    changed = tmp_path / "changed" / f"{name}.toml"
    changed.parent.mkdir()
    changed.write_text(text.replace("t = 0.1", "t = 0.12"))
    r = subprocess.run([sys.executable, "-m", "phasemap", "run", str(changed), "--out", str(out), "--resume",
                        "--quiet"], env=_env(), capture_output=True, text=True, timeout=600)
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


@pytest.mark.slow
def test_cluster_scaling_killed_and_resumed(tmp_path):
    args = ["cluster-scaling", "--lattice", "square", "--U", "1", "--n-max", "3", "--t", "0.01",
            "--quantity", "lobe-tip", "--clusters", "sq1,sq2-sd,sq2x1", "--quiet"]
    ref = subprocess.run([sys.executable, "-m", "phasemap", *args, "--out", str(tmp_path / "ref")], env=_env(),
                         capture_output=True, text=True, timeout=900)
    assert ref.returncode == 0, ref.stderr
    out = tmp_path / "out"
    ck = out / CHECKPOINT_DIR / "scaling"
    proc = subprocess.Popen([sys.executable, "-m", "phasemap", *args, "--out", str(out)], env=_env(),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        t0 = time.monotonic()
        while not list(ck.glob("chunk_*.npz")):
            assert proc.poll() is None, f"finished before it could be killed: {proc.stderr.read()}"
            assert time.monotonic() - t0 < 600
            time.sleep(0.02)
        proc.send_signal(signal.SIGKILL)
        proc.wait(60)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait(60)
    finished = sorted(ck.glob("chunk_*.npz"))
    stamps = {p: p.stat().st_mtime_ns for p in finished}
    assert finished and not (out / "scaling.json").exists()
    r = subprocess.run([sys.executable, "-m", "phasemap", *args, "--out", str(out)], env=_env(),
                       capture_output=True, text=True, timeout=900)
    assert r.returncode == 2 and "--resume" in r.stderr, r.stderr  # an unfinished run is not silently reused
    changed = [a if a != "0.01" else "0.02" for a in args]
    r = subprocess.run([sys.executable, "-m", "phasemap", *changed, "--out", str(out), "--resume"], env=_env(),
                       capture_output=True, text=True, timeout=900)
    assert r.returncode == 2 and "model.t" in r.stderr, r.stderr
    for p in finished:
        assert p.stat().st_mtime_ns == stamps[p]
    r = subprocess.run([sys.executable, "-m", "phasemap", *args, "--out", str(out), "--resume"], env=_env(),
                       capture_output=True, text=True, timeout=900)
    assert r.returncode == 0, r.stderr
    assert f"resuming, {len(finished)} finished cluster(s)" in r.stderr
    assert (out / "scaling.json").read_text() == (tmp_path / "ref" / "scaling.json").read_text()
    assert (out / "scaling.csv").read_text() == (tmp_path / "ref" / "scaling.csv").read_text()
    assert not ck.exists()
