"""Benchmark: cluster mean field on a Lanczos-size cluster (default tri12 hard-core, 4,096 states)
along a line: the old full-seed path (git ``--old-ref``, run in a subprocess on the same line)
against today's, side by side in one run.

Run:  python benchmarks/bench_cmf_line.py                 (tri12, t-line at mu = 3V, 12 points)
      python benchmarks/bench_cmf_line.py --cluster tri9 --points 20 --mu 2.5

Every path uses continuation along the line (each seed starts from its own converged state at
the previous point, secant predictor from the two before) and the compiled Lanczos rows. The
first point of the line is cold and is reported separately; "warm point" is the mean over the
other points (wall and process CPU, numba threads included). Rows:

* one seed ("supersolid sqrt3 1/3", as in bench_cmf.py), today's code;
* every seed of the cluster (18 on tri12: what a map or strain point solves) with the code of
  ``--old-ref`` (default abd3255: before seed symmetry images and warm first inner solves);
* every seed, today's default (seeds that are symmetry images of earlier seeds are not solved,
  :mod:`phasemap.cmf.symmetry`);
* every seed, today's code with branch tracking (``branch_every = K``, ``--branch-every``,
  opt-in; :mod:`phasemap.cmf.branches`); "warm point" there is the mean over the line after
  its first point, full-seed points included;
* with ``--python``: the Python per-row loop (``compiled=False``), the reference of the rows.

The winning energy and phase label of every point of the new rows are compared with the old
path's. Prints the load average before and after.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))


def _line(cluster, points, dt, mu):
    from phasemap import Model
    from phasemap.cmf import cluster_seeds, get_cluster
    from phasemap.params import ParamBatch

    base = Model("triangular", t=0.1, V=1.0, mu=mu)
    cl = get_cluster(cluster)
    line = ParamBatch.from_models([base.replace(t=0.1 + k * dt) for k in range(points)])
    return line, cl, cluster_seeds(base, cl, n_random=1)


def _run(batch, cl, seeds, **kw):
    from phasemap.cmf import solve_cmf_batch

    t0, c0 = time.perf_counter(), time.process_time()
    first = solve_cmf_batch(batch.take([0]), cluster=cl, seeds=seeds, **kw)
    t1, c1 = time.perf_counter(), time.process_time()
    r = solve_cmf_batch(batch, cluster=cl, seeds=seeds, **kw)
    t2, c2 = time.perf_counter(), time.process_time()
    P = batch.size
    warm, warm_cpu = ((t2 - t1) - (t1 - t0)) / (P - 1), ((c2 - c1) - (c1 - c0)) / (P - 1)
    st = getattr(r, "branch_stats", None)
    own = np.ones(len(seeds), bool) if getattr(r, "seed_images", None) is None else r.seed_images < 0
    it_all = st["iterations"] if st else int(r.iterations[:, own].sum())  # rows solved, not images
    return r, dict(cold=t1 - t0, warm=warm, warm_cpu=warm_cpu, it_cold=int(first.iterations.sum()),
                   it_warm=(it_all - int(first.iterations[:, own].sum())) / (P - 1))


def _winners(r):
    from phasemap.api import select_winners

    k, ok, _, _, label, _ = select_winners(r)
    return r.energy[np.arange(len(k)), k], ok, [str(x) for x in label]


def child(args: list[str]) -> None:
    """Old path (run with the old package first on sys.path): the full seed set, JSON on stdout."""
    cluster, points, dt, mu = args[0], int(args[1]), float(args[2]), float(args[3])
    from phasemap.cmf import solve_cmf_batch

    line, cl, seeds = _line(cluster, points, dt, mu)
    solve_cmf_batch(line.take([0]), cluster=cl, seeds=seeds[:1])  # compile / load the kernels
    r, m = _run(line, cl, seeds)
    e, ok, lab = _winners(r)
    print(json.dumps(dict(m, energy=e.tolist(), ok=ok.tolist(), label=lab)))


def _old_tree(ref: str) -> str:
    sys.path.insert(0, HERE)
    from bench_cmf_batch import _old_tree as tree

    return tree(ref)


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    p.add_argument("--cluster", default="tri12")
    p.add_argument("--points", type=int, default=12)
    p.add_argument("--dt", type=float, default=0.002)
    p.add_argument("--mu", type=float, default=3.0)
    p.add_argument("--branch-every", type=int, default=10, help="K of the branch-tracking row (0: skip it)")
    p.add_argument("--old-ref", default="abd3255", help="git revision of the old path ('' to skip)")
    p.add_argument("--python", action="store_true", help="also the Python per-row loop (slow)")
    a = p.parse_args(argv)
    import numba

    from phasemap.cmf import solve_cmf_batch

    line, cl, every = _line(a.cluster, a.points, a.dt, a.mu)
    one = [s for s in every if s.name == "supersolid sqrt3 1/3"]
    solve_cmf_batch(line.take([0]), cluster=cl, seeds=one)  # operators built, kernels compiled/loaded
    print(f"{cl.name}: {len(every)} seeds, t = 0.1 + k {a.dt} (k < {a.points}), V = 1, mu = {a.mu}, hard-core; "
          f"{os.cpu_count()} CPUs, {numba.get_num_threads()} numba threads")
    print(f"load average before: {os.getloadavg()}")
    print("| seeds | path | cold point (s) [iter] | warm point (s) | warm CPU (s) | iter per warm point | vs old path |")
    print("|---|---|---|---|---|---|---|")

    def row(label, name, m, cmp=""):
        print(f"| {label} | {name} | {m['cold']:.3f} [{m['it_cold']}] | {m['warm']:.3f} | {m['warm_cpu']:.3f} | "
              f"{m['it_warm']:.0f} | {cmp} |", flush=True)

    _, m = _run(line, cl, one)
    row("1", "today, compiled rows", m)
    old = None
    if a.old_ref:
        tree = _old_tree(a.old_ref)
        code = f"import sys; sys.path.insert(1, {HERE!r}); import bench_cmf_line as b; b.child(sys.argv[1:])"
        out = subprocess.run([sys.executable, "-c", code, a.cluster, str(a.points), str(a.dt), str(a.mu)],
                             capture_output=True, text=True, env=dict(os.environ, PYTHONPATH=tree), cwd=tree)
        if out.returncode:
            print(f"| {len(every)} | old path ({a.old_ref}): FAILED {out.stderr[-1500:]} |")
        else:
            old = json.loads(out.stdout.strip().splitlines()[-1])
            row(len(every), f"old path ({a.old_ref}), full seed set", old)

    def cmp(r):
        if old is None:
            return ""
        e, ok, lab = _winners(r)
        d = np.abs(e - np.array(old["energy"]))[np.array(old["ok"]) & ok]
        return (f"winning energy max diff {d.max() if d.size else 0:.1e}, same label at "
                f"{sum(x == y for x, y in zip(lab, old['label']))} of {len(lab)}, same converged flags "
                f"{bool(np.array_equal(ok, old['ok']))}")

    r, m = _run(line, cl, every)
    images = 0 if r.seed_images is None else int((r.seed_images >= 0).sum())
    row(len(every), f"today's default (full seed set, {images} seeds as symmetry images)", m, cmp(r))
    if a.branch_every > 0:
        r, m = _run(line, cl, every, branch_every=a.branch_every)
        row(len(every), f"today, branch tracking K = {a.branch_every} (opt-in)", m, cmp(r) + f"; {r.branch_stats}")
    if a.python:
        r, m = _run(line, cl, every, compiled=False)
        row(len(every), "today, Python per-row loop", m, cmp(r))
    print(f"load average after: {os.getloadavg()}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
