"""Benchmark: batched cluster mean field against the per-point path, side by side in one run.

Run:  python benchmarks/bench_cmf_batch.py                 (everything, several minutes)
      python benchmarks/bench_cmf_batch.py --only map      (one part: map, cli, line; or sweep,
                                                            check: one of the two cli commands)

Parts
-----
map   tri3 hard-core 100 x 100 map (demo model, t/V in [0, 0.4], mu/V in [-1, 7]): the batched
      engine on the whole grid; the per-point path (``engine="point"``, with its continuation)
      on a random sample of 100 grid points; time per point of both, speed-up, and the
      agreement of the winning states on the sample.
cli   wall time of ``phasemap strain-check demo --strain 0.12 --method cmf:tri3`` and
      ``phasemap strain-sweep demo --methods mf,cmf:tri3,cmf:tri6`` (subprocesses, start-up
      included), for this checkout (new path; the sweep also with ``--executor serial``) and,
      side by side, for the code of ``--old-ref``
      (default 5e8036e, main before the strain-speed work: full chemical-potential grid for
      every plateau search, 31 points per edge-search step, batched multi-section before
      every brentq, full ``eigh``), unpacked with ``git archive`` into a temporary folder.
      Each command is run once untimed first (numba compiles and caches on first use), then
      timed; the CPU time of the child (user + sys) is printed next to the wall time because
      on the shared machine the wall time mostly measures the other jobs. The answers
      (plateau edges, melt factor, critical strains) of both are printed for comparison.
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


_MAP_SAMPLE = """
import os, sys, time
import numpy as np
import phasemap
from phasemap import Model
from phasemap.cmf import solve_cmf_batch
from phasemap.params import grid
n, sample = int(sys.argv[1]), int(sys.argv[2])
m = Model("triangular", t=0.6, V=(10.0, 10.0, 8.5), mu=0.0, unit="K")
batch, _ = grid(m, {"t": np.linspace(0, 0.4, n), "mu": np.linspace(-1, 7, n)}, relative=True)
solve_cmf_batch(batch.take(np.arange(4)), cluster="tri3")  # operators, imports
sub = batch.take(np.sort(np.random.default_rng(0).choice(batch.size, sample, replace=False)))
t0, c0 = time.perf_counter(), time.process_time()
r = solve_cmf_batch(sub, cluster="tri3")
assert phasemap.__file__.startswith(os.environ["PYTHONPATH"]), phasemap.__file__  # the old tree, not this checkout
print(time.perf_counter() - t0, time.process_time() - c0)
"""


def part_map(n: int = 100, sample: int = 100, old_ref: str | None = "e2c8c8a^") -> None:
    """The batched map against the per-point path of today (``engine="point"``) and, side by side,
    against the per-point path of ``old_ref`` (default: the parent of the commit that added the
    batched engine, i.e. the per-point path the issue measured), run in a subprocess on the same
    sample of points."""
    from phasemap import Model
    from phasemap.api import select_winners
    from phasemap.cmf import solve_cmf_batch
    from phasemap.params import grid

    m = Model("triangular", t=0.6, V=(10.0, 10.0, 8.5), mu=0.0, unit="K")
    batch, _ = grid(m, {"t": np.linspace(0, 0.4, n), "mu": np.linspace(-1, 7, n)}, relative=True)
    # operators, imports, and numba's compile (or cache load) of the serial and the parallel row loops
    # (the parallel one from 64 rows on) and of the per-point path, outside the timings
    solve_cmf_batch(batch.take(np.arange(4)), cluster="tri3")
    solve_cmf_batch(batch.take(np.arange(16)), cluster="tri3")
    solve_cmf_batch(batch.take(np.arange(2)), cluster="tri3", engine="point")
    print(f"[map] {load()} before")
    t0, c0 = time.perf_counter(), time.process_time()
    rb = solve_cmf_batch(batch, cluster="tri3", engine="batch")
    tb, cb = time.perf_counter() - t0, time.process_time() - c0
    print(f"[map] batched: {batch.size} points x {len(rb.seeds)} seeds in {tb:.2f} s = "
          f"{1e3 * tb / batch.size:.3f} ms/point ({cb:.2f} s CPU, both numba threads; {int(rb.iterations.sum()):,} "
          f"iterations, {1e6 * cb / rb.iterations.sum():.2f} us CPU each); converged rows {rb.converged.mean():.3f}; "
          f"{load()}")
    idx = np.sort(np.random.default_rng(0).choice(batch.size, sample, replace=False))
    sub = batch.take(idx)
    t0, c0 = time.perf_counter(), time.process_time()
    rp = solve_cmf_batch(sub, cluster="tri3", engine="point")
    tp, cp = time.perf_counter() - t0, time.process_time() - c0
    print(f"[map] per-point path: {sample} sampled points in {tp:.2f} s = {1e3 * tp / sample:.1f} ms/point "
          f"({cp:.2f} s CPU); {load()}")
    print(f"[map] speed-up per point: {tp / sample / (tb / batch.size):.0f}x over today's per-point path "
          f"(wall; CPU per point {cp / sample / (cb / batch.size):.0f}x); "
          f"estimated per-point path for the whole map: {tp / sample * batch.size:.0f} s")
    if old_ref:
        tree = _old_tree(old_ref)  # run from that folder: "python -c" puts the working directory first
        out = subprocess.run([sys.executable, "-c", _MAP_SAMPLE, str(n), str(sample)], capture_output=True, text=True,
                             env=dict(os.environ, PYTHONPATH=tree), cwd=tree)
        if out.returncode:
            print(f"[map] per-point path of {old_ref}: FAILED\n{out.stderr[-2000:]}")
        else:
            to, co = map(float, out.stdout.split()[-2:])
            print(f"[map] per-point path of {old_ref} (before the batched engine): {sample} sampled points in "
                  f"{to:.2f} s = {1e3 * to / sample:.1f} ms/point ({co:.2f} s CPU); speed-up per point "
                  f"{to / sample / (tb / batch.size):.0f}x (wall; CPU per point {co / sample / (cb / batch.size):.0f}x); "
                  f"{load()}")
    kb, okb, _, phb, _, _ = select_winners(rb)
    kp, okp, _, php, _, _ = select_winners(rp)
    eb = rb.energy[idx, kb[idx]]
    ep = rp.energy[np.arange(sample), kp]
    both = okb[idx] & okp
    d = (eb - ep)[both]
    print(f"[map] sample: same phase at {np.mean(phb[idx] == php):.3f} of the points; winning energies equal "
          f"(1e-9) at {np.sum(np.abs(d) <= 1e-9)} of {both.sum()} points converged in both, batched lower at "
          f"{np.sum(d < -1e-9)} (max {max(0.0, -d.min()):.2e}), per-point lower at {np.sum(d > 1e-9)} (max "
          f"{max(0.0, d.max()):.2e}); the per-point path continues from the previous sampled point, far away "
          f"in a random sample, so it can reach other fixed points")


def run_cli(args: list[str], path: str | None = None, keep: str | None = None):
    """Run ``python -m phasemap ARGS`` in a fresh folder; returns (wall s, cpu s, stdout) or None."""
    env = dict(os.environ)
    if path:
        env["PYTHONPATH"] = path
    with tempfile.TemporaryDirectory() as d:
        r0 = os.times()
        t0 = time.perf_counter()
        out = subprocess.run([sys.executable, "-m", "phasemap", *args], capture_output=True, text=True, cwd=d, env=env)
        dt = time.perf_counter() - t0
        r1 = os.times()
        if keep and out.returncode == 0:
            import shutil

            shutil.copytree(d, keep, dirs_exist_ok=True)
    if out.returncode != 0:
        print(out.stderr[-2000:], file=sys.stderr)
        return None
    cpu = (r1.children_user - r0.children_user) + (r1.children_system - r0.children_system)
    return dt, cpu, out.stdout


def _old_tree(ref: str) -> str:
    """The package at git ``ref`` unpacked into a temporary folder (the old path)."""
    root = subprocess.run(["git", "rev-parse", "--show-toplevel"], capture_output=True, text=True,
                          cwd=os.path.dirname(os.path.abspath(__file__))).stdout.strip()
    d = tempfile.mkdtemp(prefix="phasemap-old-")
    arch = subprocess.run(["git", "archive", ref, "phasemap"], capture_output=True, cwd=root, check=True).stdout
    subprocess.run(["tar", "-x", "-C", d], input=arch, check=True)
    return d


def _answers(args, stdout, folder):
    import json

    if args[0] == "strain-check":
        d = json.loads(stdout)
        p, m = d["plateau"], d.get("melt", {})
        return (f"mu_lo {p['mu_lo']:.6f} mu_hi {p['mu_hi']:.6f} width {p['width']:.6f} (edge precision "
                f"{p['edge_precision']:.1e}); melt factor {m.get('factor')} ({m.get('evaluations')} plateau searches)")
    d = json.load(open(os.path.join(folder, "sweep-out", "summary.json")))
    return "; ".join(f"{k} strain_c {v['strain_c']} (+-{v['xtol']:.0e}, {v['evaluations']} evaluations)"
                     for k, v in d["critical"].items())


def part_cli(sweep_only: bool = False, old_ref: str | None = "5e8036e", check_only: bool = False,
             serial: bool = True) -> None:
    cmds = ([] if sweep_only else [["strain-check", "demo", "--strain", "0.12", "--method", "cmf:tri3", "--json"]]) + (
        [] if check_only else [["strain-sweep", "demo", "--out", "sweep-out", "--methods", "mf,cmf:tri3,cmf:tri6",
                                "--no-figures"]])
    trees = [("new", None)] + ([(f"old ({old_ref})", _old_tree(old_ref))] if old_ref else [])
    for cmd in cmds:
        # the sweep of this checkout also with --executor serial: what the parallel chunks buy
        runs = [(n, p, cmd) for n, p in trees] + ([("new, --executor serial", None, [*cmd, "--executor", "serial"])]
                                                   if cmd[0] == "strain-sweep" and serial else [])
        for meth in ("mf", "cmf:tri3"):  # numba compiles and caches on first use: not timed
            for path in {p for _, p, _ in runs}:
                run_cli(["strain-check", "demo", "--strain", "0.12", "--method", meth, "--no-melt"], path)
        kept = {}
        for name, path, args in runs:
            l0 = load()
            keep = tempfile.mkdtemp()
            r = run_cli(args, path, keep=keep)
            if r is None:
                print(f"[cli] {name}: phasemap {' '.join(args)}: FAILED")
                continue
            dt, cpu, out = r
            print(f"[cli] {name}: phasemap {' '.join(args)}: {dt:.1f} s wall, {cpu:.1f} s CPU "
                  f"({l0} before, {load()} after)")
            print(f"[cli] {name}:   {_answers(args, out, keep)}")
            kept[name] = keep
        if cmd[0] == "strain-sweep" and len(kept) > 1:
            import xarray as xr

            ref_name, ref = next(iter(kept.items()))
            a = xr.load_dataset(os.path.join(ref, "sweep-out", "sweep.nc"))
            for name, keep in list(kept.items())[1:]:
                b = xr.load_dataset(os.path.join(keep, "sweep-out", "sweep.nc"))
                diff = [k for k in a.data_vars if k in b and not a[k].equals(b[k])]
                print(f"[cli] sweep.nc {ref_name} vs {name}: " + ("every variable identical (values and coordinates)"
                      if not diff and set(a.data_vars) == set(b.data_vars) else f"differ in {', '.join(diff) or 'variables'}"))


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
    p.add_argument("--only", choices=("map", "cli", "line", "sweep", "check"))
    p.add_argument("--old-ref", default="5e8036e", help="git revision of the old path for 'cli' ('' to skip)")
    p.add_argument("--no-serial", action="store_true", help="sweep: skip the run of this checkout with --executor serial")
    p.add_argument("--old-map-ref", default="e2c8c8a^",
                   help="git revision of the old per-point path for 'map' ('' to skip)")
    a = p.parse_args(argv)
    print(f"{os.cpu_count()} CPUs; {load()}")
    for name, fn in (("map", lambda: part_map(old_ref=a.old_map_ref or None)), ("line", part_line), ("cli", lambda: part_cli(old_ref=a.old_ref or None))):
        if a.only in (None, name):
            fn()
    if a.only == "sweep":
        part_cli(sweep_only=True, old_ref=a.old_ref or None, serial=not a.no_serial)
    if a.only == "check":
        part_cli(check_only=True, old_ref=a.old_ref or None)
    return 0


if __name__ == "__main__":
    sys.exit(main())
