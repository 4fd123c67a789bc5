"""Benchmark: cluster mean field on a Lanczos-size cluster (default tri12 hard-core, 4,096 states)
along a line, the Python per-point path against the compiled rows, side by side in one run.

Run:  python benchmarks/bench_cmf_line.py                 (tri12, t-line at mu = 3V, 12 points)
      python benchmarks/bench_cmf_line.py --cluster tri9 --points 20

Both paths use continuation along the line (each seed starts from its own converged state at
the previous point, secant predictor from the two before). The first point of the line is
cold and is reported separately; "warm point" is the mean over the other points. Two cases:
one seed ("supersolid sqrt3 1/3", as in bench_cmf.py) and every seed of the cluster (18 on
tri12: what a map or strain point solves). Prints the load average next to the timings, the
CPU time of the process (the compiled rows run the seeds of a point on all numba threads),
and the largest difference of energies, densities and condensates between the two paths.

With every seed, a third row runs the compiled rows with branch tracking
(``branch_every = K``, ``--branch-every``; :mod:`phasemap.cmf.branches`): the full seed set at
the first point and at most every K points, one row per distinct branch in between. "warm
point" there is the mean over the line after its first point, full-seed points included; the
winning energy and phase label of every point are compared with the full seed set.
"""

from __future__ import annotations

import argparse
import os
import sys
import time

import numpy as np


def _run(batch, cl, seeds, compiled, every=0):
    from phasemap.cmf import solve_cmf_batch

    t0, c0 = time.perf_counter(), time.process_time()
    first = solve_cmf_batch(batch.take([0]), cluster=cl, seeds=seeds, compiled=compiled)
    t1, c1 = time.perf_counter(), time.process_time()
    r = solve_cmf_batch(batch, cluster=cl, seeds=seeds, compiled=compiled, branch_every=every)
    t2, c2 = time.perf_counter(), time.process_time()
    P = batch.size
    warm, warm_cpu = ((t2 - t1) - (t1 - t0)) / (P - 1), ((c2 - c1) - (c1 - c0)) / (P - 1)
    return r, dict(cold=t1 - t0, warm=warm, warm_cpu=warm_cpu, it_cold=first.iterations.sum(),
                   it_warm=r.iterations[1:].sum() / (P - 1), conv=r.converged.mean())


def _winners(r):
    from phasemap.api import select_winners

    k, ok, _, _, label, _ = select_winners(r)
    return r.energy[np.arange(len(k)), k], ok, list(label)


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    p.add_argument("--cluster", default="tri12")
    p.add_argument("--points", type=int, default=12)
    p.add_argument("--dt", type=float, default=0.002)
    p.add_argument("--branch-every", type=int, default=10, help="K of the branch-tracking row (0: skip it)")
    a = p.parse_args(argv)
    import numba

    from phasemap import Model
    from phasemap.cmf import cluster_seeds, get_cluster, solve_cmf_batch
    from phasemap.params import ParamBatch

    base = Model("triangular", t=0.1, V=1.0, mu=3.0)
    cl = get_cluster(a.cluster)
    line = ParamBatch.from_models([base.replace(t=0.1 + k * a.dt) for k in range(a.points)])
    every = cluster_seeds(base, cl, n_random=1)
    one = [s for s in every if s.name == "supersolid sqrt3 1/3"]
    solve_cmf_batch(line.take([0]), cluster=cl, seeds=one)  # operators built, kernels compiled/loaded
    print(f"{cl.name}: {len(every)} seeds, t = 0.1 + k {a.dt} (k < {a.points}), V = 1, mu = 3, hard-core; "
          f"{os.cpu_count()} CPUs, {numba.get_num_threads()} numba threads")
    print(f"load average before: {os.getloadavg()}")
    print("| seeds | path | cold point (s) [iter] | warm point (s) | warm CPU (s) | iter per warm point | converged |")
    print("|---|---|---|---|---|---|---|")
    for label, seeds in (("1", one), (str(len(every)), every)):
        res = {}
        for compiled, name in ((False, "Python per-point"), (True, "compiled rows")):
            r, m = _run(line, cl, seeds, compiled)
            res[compiled] = r
            print(f"| {label} | {name} | {m['cold']:.3f} [{m['it_cold']}] | {m['warm']:.3f} | {m['warm_cpu']:.3f} | "
                  f"{m['it_warm']:.0f} | {m['conv']:.2f} |", flush=True)
        ref, new = res[False], res[True]
        both = ref.converged & new.converged
        d = {k: float(np.abs(getattr(ref, k) - getattr(new, k))[both].max()) for k in ("energy", "n", "phi")}
        print(f"|   | max difference (rows converged in both, tol 1e-9) | energy {d['energy']:.1e}, n {d['n']:.1e}, "
              f"phi {d['phi']:.1e} | | | | |")
        if a.branch_every > 0 and len(seeds) > 1:
            r, m = _run(line, cl, seeds, True, a.branch_every)
            solved = r.iterations > 0
            print(f"| {label} | compiled rows, branch tracking (K = {a.branch_every}) | {m['cold']:.3f} | {m['warm']:.3f} | "
                  f"{m['warm_cpu']:.3f} | {(r.branch_stats['iterations'] - m['it_cold']) / (line.size - 1):.0f} | "
                  f"{r.converged[solved].mean():.2f} of solved rows |", flush=True)
            e0, ok0, l0 = _winners(new)
            e1, ok1, l1 = _winners(r)
            st = r.branch_stats
            print(f"|   | branch tracking vs full seed set: winning energy max difference {np.abs(e1 - e0).max():.1e}, "
                  f"same phase label at {sum(x == y for x, y in zip(l0, l1))} of {len(l0)} points, same converged flags "
                  f"{bool(np.array_equal(ok0, ok1))}; {st} | | | | |", flush=True)
    print(f"load average after: {os.getloadavg()}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
