"""Benchmark of the cluster mean-field solver: time per converged point and memory vs cluster size.

Run:  python benchmarks/bench_cmf.py            (full table, ~ a few minutes)
      python benchmarks/bench_cmf.py --quick    (up to 12 sites)

Each cluster is measured in a fresh subprocess (peak RSS is per process). For every cluster:
operator build time, one *cold* converged point (seed "supersolid sqrt3 1/3", no warm start),
and the mean time per point along a 6-point scan in t with continuation (each point starts
from the previous points' converged states and ground-state vector). Hard-core:
t = 0.1 (+ steps of 0.002), V = 1, mu = 3 (half filling); soft-core (n_max = 2): t = 0.05
(+ steps of 0.001), U = 1, V = 0.3, mu = 0.9; both triangular. Timings depend on the load
of the machine: the script prints the load average.
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import time


def one(cluster: str, n_max: int) -> dict:
    import numpy as np

    from phasemap import Model
    from phasemap.cmf import cluster_seeds, estimate_cost, get_cluster, solve_cmf_batch
    from phasemap.cmf.hamiltonian import cluster_operators
    from phasemap.cmf.threads import blas_threads
    from phasemap.params import ParamBatch

    if n_max == 1:
        base, dt = Model("triangular", t=0.1, V=1.0, mu=3.0), 0.002
    else:
        base, dt = Model("triangular", t=0.05, V=0.3, U=1.0, mu=0.9, n_max=n_max), 0.001
    cl = get_cluster(cluster)
    seeds = [s for s in cluster_seeds(base, cl, n_random=0, patterns=("sqrt3",)) if s.name.startswith("supersolid sqrt3 1/3")][:1]
    rss0 = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    t0 = time.perf_counter()
    with blas_threads(1):
        cluster_operators(cl, n_max)
    build = time.perf_counter() - t0
    b1 = ParamBatch.from_models([base])
    t0 = time.perf_counter()
    r = solve_cmf_batch(b1, cluster=cl, seeds=seeds)
    cold = time.perf_counter() - t0
    scan = ParamBatch.from_models([base.replace(t=base.t[0] + k * dt) for k in range(6)])
    t0 = time.perf_counter()
    rs = solve_cmf_batch(scan, cluster=cl, seeds=seeds)
    warm_total = time.perf_counter() - t0
    # the first scan point is cold; report the mean of the warm-started ones from the per-point split
    t0 = time.perf_counter()
    solve_cmf_batch(scan.take([0]), cluster=cl, seeds=seeds)
    first = time.perf_counter() - t0
    warm = (warm_total - first) / 5
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    est = estimate_cost(cl, n_max, n_rows=len(seeds))
    ops = cluster_operators(cl, n_max)
    return {"cluster": cluster, "n_sites": cl.n_sites, "lambda": cl.lam, "n_max": n_max, "dim": ops.dim,
            "nnz": ops.nnz, "build_s": build, "cold_s": cold, "cold_iter": int(r.iterations[0, 0]),
            "cold_converged": bool(r.converged[0, 0]), "warm_s": warm,
            "warm_iter": float(np.mean(rs.iterations[1:, 0])), "warm_converged": bool(rs.converged.all()),
            "peak_rss_mb": rss / 1024, "rss_growth_mb": (rss - rss0) / 1024, "estimate_mb": est.memory_mb}


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    p.add_argument("--one", nargs=2, metavar=("CLUSTER", "NMAX"), help=argparse.SUPPRESS)
    p.add_argument("--quick", action="store_true", help="clusters up to 12 sites only")
    p.add_argument("--json", help="also write the rows to this JSON file")
    a = p.parse_args(argv)
    if a.one:
        print(json.dumps(one(a.one[0], int(a.one[1]))))
        return 0
    hard = ["tri3", "tri6", "tri9", "tri12"] + ([] if a.quick else ["tri15", "tri18"])
    soft = ["tri3", "tri6", "tri9"]
    import os

    load0 = os.getloadavg()
    rows = []
    for n_max, names in ((1, hard), (2, soft)):
        for c in names:
            out = subprocess.run([sys.executable, __file__, "--one", c, str(n_max)], capture_output=True, text=True)
            if out.returncode != 0:
                print(f"{c} n_max={n_max}: failed\n{out.stderr[-2000:]}", file=sys.stderr)
                continue
            rows.append(json.loads(out.stdout.strip().splitlines()[-1]))
            r = rows[-1]
            print(f"done {c} n_max={n_max}: cold {r['cold_s']:.3f} s, warm {r['warm_s']:.3f} s", file=sys.stderr, flush=True)
    import os

    print(f"load average before/after: {load0} / {os.getloadavg()}; {os.cpu_count()} CPUs")
    hdr = ("| cluster | N_C | λ | n_max | dim | nnz | build (s) | cold point (s) [iter] | warm point (s) [iter] "
           "| peak RSS (MiB) | estimate (MiB) |")
    print(hdr)
    print("|" + "---|" * 11)
    for r in rows:
        print(f"| {r['cluster']} | {r['n_sites']} | {r['lambda']:.3f} | {r['n_max']} | {r['dim']:,} | {r['nnz']:,} | "
              f"{r['build_s']:.2f} | {r['cold_s']:.3f} [{r['cold_iter']}] | {r['warm_s']:.3f} [{r['warm_iter']:.0f}] | "
              f"{r['peak_rss_mb']:.0f} | {r['estimate_mb']:.0f} |")
    if a.json:
        with open(a.json, "w") as f:
            json.dump(rows, f, indent=1)
    return 0


if __name__ == "__main__":
    sys.exit(main())
