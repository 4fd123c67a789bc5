"""Benchmark: batched cluster mean field against the per-point path, side by side in one run.

Run:  python benchmarks/bench_cmf_batch.py                 (everything, several minutes)
      python benchmarks/bench_cmf_batch.py --only map      (one part: map, cli, line)

Parts
-----
map   tri3 hard-core 100 x 100 map (demo model, t/V in [0, 0.4], mu/V in [-1, 7]): the batched
      engine on the whole grid; the per-point path (``engine="point"``, with its continuation)
      on a random sample of 100 grid points; time per point of both, speed-up, and the
      agreement of the winning states on the sample.
cli   wall time of ``phasemap strain-check demo --strain 0.12 --method cmf:tri3`` and
      ``phasemap strain-sweep demo --methods mf,cmf:tri3,cmf:tri6`` (subprocesses, start-up
      included).
line  tri12 hard-core, warm-started along a line in t (per-point path with continuation):
      mean time per point.

Timings depend on the load of the shared machine: the script prints ``uptime`` load averages
next to every number.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time

import numpy as np


def load() -> str:
    return "load %.2f %.2f %.2f" % os.getloadavg()


def part_map(n: int = 100, sample: int = 100) -> None:
    from phasemap import Model
    from phasemap.api import select_winners
    from phasemap.cmf import solve_cmf_batch
    from phasemap.params import grid

    m = Model("triangular", t=0.6, V=(10.0, 10.0, 8.5), mu=0.0, unit="K")
    batch, _ = grid(m, {"t": np.linspace(0, 0.4, n), "mu": np.linspace(-1, 7, n)}, relative=True)
    solve_cmf_batch(batch.take(np.arange(4)), cluster="tri3")  # operators, imports
    print(f"[map] {load()} before")
    t0 = time.perf_counter()
    rb = solve_cmf_batch(batch, cluster="tri3", engine="batch")
    tb = time.perf_counter() - t0
    print(f"[map] batched: {batch.size} points x {len(rb.seeds)} seeds in {tb:.2f} s = "
          f"{1e3 * tb / batch.size:.3f} ms/point; converged rows {rb.converged.mean():.3f}; {load()}")
    idx = np.sort(np.random.default_rng(0).choice(batch.size, sample, replace=False))
    sub = batch.take(idx)
    t0 = time.perf_counter()
    rp = solve_cmf_batch(sub, cluster="tri3", engine="point")
    tp = time.perf_counter() - t0
    print(f"[map] per-point path: {sample} sampled points in {tp:.2f} s = {1e3 * tp / sample:.1f} ms/point; {load()}")
    print(f"[map] speed-up per point: {tp / sample / (tb / batch.size):.0f}x; "
          f"estimated per-point path for the whole map: {tp / sample * batch.size:.0f} s")
    kb, okb, _, phb, _, _ = select_winners(rb)
    kp, okp, _, php, _, _ = select_winners(rp)
    eb = rb.energy[idx, kb[idx]]
    ep = rp.energy[np.arange(sample), kp]
    both = okb[idx] & okp
    print(f"[map] sample: same phase at {np.mean(phb[idx] == php):.3f} of the points; winning energies "
          f"max |dE| = {np.abs(eb - ep)[both].max():.2e} over {both.sum()} points converged in both")


def run_cli(args: list[str]) -> float | None:
    with tempfile.TemporaryDirectory() as d:
        t0 = time.perf_counter()
        out = subprocess.run([sys.executable, "-m", "phasemap", *args], capture_output=True, text=True, cwd=d)
        dt = time.perf_counter() - t0
    if out.returncode != 0:
        print(out.stderr[-2000:], file=sys.stderr)
        return None
    return dt


def part_cli(sweep_only: bool = False) -> None:
    for args in ([] if sweep_only else [["strain-check", "demo", "--strain", "0.12", "--method", "cmf:tri3"]]) + [
                 ["strain-sweep", "demo", "--out", "sweep-out", "--methods", "mf,cmf:tri3,cmf:tri6"]]:
        l0 = load()
        dt = run_cli(args)
        took = "FAILED" if dt is None else f"{dt:.1f} s wall"
        print(f"[cli] phasemap {' '.join(args)}: {took} ({l0} before, {load()} after)")


def part_line(points: int = 8, dt: float = 0.002) -> None:
    from phasemap import Model
    from phasemap.cmf import cluster_seeds, get_cluster, solve_cmf_batch
    from phasemap.params import ParamBatch

    base = Model("triangular", t=0.1, V=1.0, mu=3.0)
    cl = get_cluster("tri12")
    seeds = [s for s in cluster_seeds(base, cl, n_random=0, patterns=("sqrt3",))
             if s.name.startswith("supersolid sqrt3 1/3")][:1]
    line = ParamBatch.from_models([base.replace(t=0.1 + k * dt) for k in range(points)])
    solve_cmf_batch(line.take([0]), cluster=cl, seeds=seeds, engine="point")  # operators
    l0 = load()
    t0 = time.perf_counter()
    r0 = solve_cmf_batch(line.take([0]), cluster=cl, seeds=seeds, engine="point")
    cold = time.perf_counter() - t0
    t0 = time.perf_counter()
    r = solve_cmf_batch(line, cluster=cl, seeds=seeds, engine="point")
    total = time.perf_counter() - t0
    warm = (total - cold) / (points - 1)
    print(f"[line] tri12 hard-core, one seed: cold point {cold:.3f} s [{int(r0.iterations[0, 0])} it], warm point "
          f"{warm:.3f} s [{np.mean(r.iterations[1:, 0]):.0f} it] ({l0} before, {load()} after)")


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    p.add_argument("--only", choices=("map", "cli", "line", "sweep"))
    a = p.parse_args(argv)
    print(f"{os.cpu_count()} CPUs; {load()}")
    for name, fn in (("map", part_map), ("line", part_line), ("cli", part_cli)):
        if a.only in (None, name):
            fn()
    if a.only == "sweep":
        part_cli(sweep_only=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
