"""Benchmark of exact diagonalization: dimension, time and peak memory versus cluster size.

Each case runs in its own subprocess so that the peak resident memory (ru_maxrss) belongs to
that case alone. Usage::

    python benchmarks/bench_ed.py            # all cases, prints a markdown table
    python benchmarks/bench_ed.py --quick    # skip the 27-site staircase
    python benchmarks/bench_ed.py --one tri27 9

Model: hard-core bosons on the triangular lattice, t/V = 0.1 (inside the 1/3-solid region),
ground state at Q = 0 (Perron-Frobenius, see phasemap.ed.groundstate).
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import time

MODEL = dict(lattice="triangular", t=0.1, V=1.0)
BUDGET_GIB = 24.0  # machine memory; the 36-site case is refused if its estimate exceeds it


def one(cluster: str, N: str) -> dict:
    from phasemap import Model
    from phasemap.ed import ground_state, staircase
    from phasemap.ed.clusters import get_cluster
    from phasemap.ed.groundstate import n_hop_dirs
    from phasemap.ed.guard import estimate
    from phasemap.model import ConfigError

    m = Model(**MODEL)
    L = get_cluster(cluster).n_sites
    t0 = time.perf_counter()
    if N == "all":
        ds = staircase(m, cluster, observables=("sq",), budget_gib=BUDGET_GIB)
        wall = time.perf_counter() - t0
        k = int(L // 2)
        return {"case": f"{cluster} staircase N=0..{L}", "L": L, "dim": int(ds["dim"].values.max()),
                "time_s": wall, "peak_gib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20,
                "gap_1_3": ds.attrs["gap_1_3"], "gap_2_3": ds.attrs["gap_2_3"],
                "SK_1_3": float(ds["SK_per_site"].values[L // 3]) if L % 3 == 0 else None,
                "per_N_s": {int(n): float(x) for n, x in zip(ds["N"].values, ds["time_s"].values)},
                "E0_half": float(ds["E0"].values[k])}
    N = int(N)
    est = estimate(L, N, 1, n_hop_dirs(m))
    try:
        gs = ground_state(m, cluster, N, budget_gib=BUDGET_GIB)
    except ConfigError as e:
        return {"case": f"{cluster} N={N}", "L": L, "dim": est.sector, "refused": str(e), "est_gib": est.gib}
    wall = time.perf_counter() - t0
    return {"case": f"{cluster} N={N}", "L": L, "dim": gs.dims["Gamma"], "fock": est.fock, "e0": gs.e0,
            "build_s": gs.build_time, "lanczos_s": gs.times["Gamma"], "time_s": wall, "est_gib": est.gib,
            "peak_gib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20, "hops": len(gs.sector.hop_amp),
            "lookup": gs.sector.lookup}


def run_case(cluster, N):
    out = subprocess.run([sys.executable, __file__, "--one", cluster, str(N)], capture_output=True, text=True)
    if out.returncode:
        return {"case": f"{cluster} N={N}", "error": out.stderr.strip().splitlines()[-1:]}
    return json.loads(out.stdout.strip().splitlines()[-1])


def main(argv=None):
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--one", nargs=2, metavar=("CLUSTER", "N"))
    p.add_argument("--quick", action="store_true")
    a = p.parse_args(argv)
    if a.one:
        print(json.dumps(one(*a.one)))
        return 0
    cases = [("tri12", 4), ("tri21", 7), ("tri27", 9), ("tri27", 13), ("tri36", 12)]
    if not a.quick:
        cases.append(("tri27", "all"))
    rows = []
    for c, n in cases:
        r = run_case(c, n)
        rows.append(r)
        print(json.dumps(r), file=sys.stderr, flush=True)
    print("| case | sites | dim (Q=0 sector) | Fock states | time (s) | peak RSS (GiB) | estimate (GiB) | notes |")
    print("|---|---|---|---|---|---|---|---|")
    for r in rows:
        if "error" in r:
            print(f"| {r['case']} | | | | | | | error: {r['error']} |")
        elif "refused" in r:
            print(f"| {r['case']} | {r['L']} | {r['dim']:.3g} | | — | — | {r['est_gib']:.0f} | refused by the guard (> {BUDGET_GIB:g} GiB) |")
        elif "per_N_s" in r:
            print(f"| {r['case']} | {r['L']} | {r['dim']} (max) | | {r['time_s']:.1f} | {r['peak_gib']:.2f} | | "
                  f"gap(1/3)={r['gap_1_3']:.4f}, gap(2/3)={r['gap_2_3']:.4f}, S(K)/N(1/3)={r['SK_1_3']:.4f} |")
        else:
            print(f"| {r['case']} | {r['L']} | {r['dim']} | {r['fock']} | {r['time_s']:.1f} | {r['peak_gib']:.2f} | "
                  f"{r['est_gib']:.2f} | build {r['build_s']:.1f} s + Lanczos {r['lanczos_s']:.1f} s; E0={r['e0']:.8f} |")
    return 0


if __name__ == "__main__":
    sys.exit(main())
