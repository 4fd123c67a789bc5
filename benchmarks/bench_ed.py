"""Benchmark of exact diagonalization: sector dimension, time and peak memory versus cluster size.

Each case runs in its own subprocess so that the peak resident memory (ru_maxrss) belongs to
that case alone; the load average is recorded before and after (the machine is shared).
Usage::

    python benchmarks/bench_ed.py                 # ground states tri12..tri27 + the tri27 point
    python benchmarks/bench_ed.py --tri36         # also tri36 N=12 (minutes, ~7 GiB)
    python benchmarks/bench_ed.py --translations  # also the translation-only path for comparison
    python benchmarks/bench_ed.py --one tri27 9   # one ground state (JSON)
    python benchmarks/bench_ed.py --one tri27 point9
    python benchmarks/bench_ed.py --one tri36 14 --lookup search   # force a lookup
    python benchmarks/bench_ed.py --compare-lookups tri36 10 [--strain]

Model: hard-core bosons on the triangular lattice, t/V = 0.1 (inside the 1/3-solid region),
ground state in the trivial space-group sector (Perron-Frobenius, see phasemap.ed.spacegroup).
CPU time counts all threads of the process (numba kernels use both cores).
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import time

MODEL = dict(lattice="triangular", t=0.1, V=1.0)
BUDGET_GIB = 20.0  # this machine has 23 GiB; other jobs share it


def _peak():
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20


def one(cluster: str, what: str, translations: bool = False, lookup: str = "auto") -> dict:
    from phasemap import Model
    from phasemap.ed import ground_state, solve_ed
    from phasemap.ed.clusters import get_cluster
    from phasemap.ed.groundstate import sector_estimate
    from phasemap.model import ConfigError

    m = Model(**MODEL)
    cell = get_cluster(cluster)
    L = cell.n_sites
    load0 = os.getloadavg()[0]
    t0, c0 = time.perf_counter(), time.process_time()
    if what.startswith("point"):
        N = int(what[5:])
        sol = solve_ed(m, cluster=cluster, particles=N, budget_gib=BUDGET_GIB, space_group=not translations)
        wall = time.perf_counter() - t0
        return {"case": f"{cluster} point N={N}" + (" (translations)" if translations else ""), "L": L,
                "time_s": wall, "cpu_s": time.process_time() - c0, "peak_gib": _peak(),
                "load": [load0, os.getloadavg()[0]], "energy": sol.energy, "stiffness": sol.order.get("stiffness"),
                "stiffness_error": sol.order.get("stiffness_error"), "SK": sol.order.get("S(K)/N"),
                "condensate_fraction": sol.order.get("condensate_fraction"), "gap": sol.order.get("gap"),
                "stiffness_method": sol.extra.get("stiffness_method"), "dim": sol.extra["sector_dims"]}
    N = int(what)
    est = sector_estimate(m, cell, N, BUDGET_GIB, lookup, space_group=not translations)
    try:
        gs = ground_state(m, cluster, N, budget_gib=BUDGET_GIB, space_group=not translations, rep_lookup=lookup)
    except ConfigError as e:
        return {"case": f"{cluster} N={N}", "L": L, "dim": est.sector, "refused": str(e), "est_gib": est.gib}
    wall = time.perf_counter() - t0
    sec = gs.sector
    out = {"case": f"{cluster} N={N}" + (" (translations)" if translations else ""), "L": L,
           "dim": int(gs.dims[gs.q_name]), "fock": est.fock, "e0": gs.e0,
           "build_s": gs.build_time, "lanczos_s": gs.times[gs.q_name], "time_s": wall,
           "cpu_s": time.process_time() - c0, "est_gib": est.gib, "peak_gib": _peak(),
           "load": [load0, os.getloadavg()[0]], "residual": gs.residual}
    if hasattr(sec, "group_order"):
        out.update(group=sec.group_order, nnz=sec.nnz, enum_s=sec.enum_time, lookup=sec.lookup)
    return out


def compare_lookups(cluster: str, N: int, strain: bool = False, repeat: int = 2) -> list[dict]:
    """Rank table against table-free search on the same sector, alternating, in one process."""
    from phasemap import Model
    from phasemap.ed.clusters import get_cluster
    from phasemap.ed.spacegroup import SymSector

    t = MODEL["t"]
    m = Model(MODEL["lattice"], t=(t, t, 1.2 * t) if strain else t, V=MODEL["V"])
    cell = get_cluster(cluster)
    for lk in ("table", "search"):  # load the compiled kernels
        SymSector(cell, m, 3, lookup=lk)
    rows = []
    for lk in ("table", "search") * repeat:
        c0, w0 = time.process_time(), time.perf_counter()
        s = SymSector(cell, m, N, lookup=lk)
        cb, wb = time.process_time() - c0, time.perf_counter() - w0
        c1, w1 = time.process_time(), time.perf_counter()
        e0 = float(s.solve()[0][0])
        rows.append({"lookup": lk, "N": N, "strain": strain, "dim": s.dim, "nnz": s.nnz, "build_cpu_s": cb,
                     "build_wall_s": wb, "enum_wall_s": s.enum_time, "lanczos_cpu_s": time.process_time() - c1,
                     "lanczos_wall_s": time.perf_counter() - w1, "e0": e0, "load": os.getloadavg()[0]})
        print(json.dumps(rows[-1]), flush=True)
        del s
    return rows


def run_case(cluster, what, translations=False):
    cmd = [sys.executable, __file__, "--one", cluster, str(what)] + (["--translations"] if translations else [])
    out = subprocess.run(cmd, capture_output=True, text=True)
    if out.returncode:
        return {"case": f"{cluster} {what}", "error": out.stderr.strip().splitlines()[-1:]}
    return json.loads(out.stdout.strip().splitlines()[-1])


def main(argv=None):
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--one", nargs=2, metavar=("CLUSTER", "N"))
    p.add_argument("--tri36", action="store_true", help="also tri36 N = 12")
    p.add_argument("--translations", action="store_true", help="also the translation-only path (slow)")
    p.add_argument("--compare-lookups", nargs=2, metavar=("CLUSTER", "N"),
                   help="build the same sector with the rank table and the table-free search, alternating "
                        "(CPU and wall time of build and Lanczos, one process)")
    p.add_argument("--strain", action="store_true", help="with --compare-lookups: t3 = 1.2 t (C2v kept)")
    p.add_argument("--lookup", default="auto", choices=("auto", "table", "search"),
                   help="space-group representative lookup of --one (default auto: table if it fits)")
    a = p.parse_args(argv)
    if a.one:
        print(json.dumps(one(*a.one, translations=a.translations, lookup=a.lookup)))
        return 0
    if a.compare_lookups:
        compare_lookups(a.compare_lookups[0], int(a.compare_lookups[1]), strain=a.strain)
        return 0
    run_case("tri12", 4)  # compile / load the numba kernels once
    cases = [("tri12", 4), ("tri21", 7), ("tri27", 9), ("tri27", 13), ("tri27", "point9")]
    if a.tri36:
        cases += [("tri36", 12)]
    rows = []
    for c, n in cases:
        rows.append(run_case(c, n))
        print(json.dumps(rows[-1]), file=sys.stderr, flush=True)
        if a.translations and c != "tri36":
            rows.append(run_case(c, n, translations=True))
            print(json.dumps(rows[-1]), file=sys.stderr, flush=True)
    print("| case | sites | |G| | sector dim | Fock states | hop entries | wall (s) | CPU (s) | peak RSS (GiB) "
          "| estimate (GiB) | load | notes |")
    print("|---|---|---|---|---|---|---|---|---|---|---|---|")
    for r in rows:
        load = "–".join(f"{x:.1f}" for x in r.get("load", []))
        if "error" in r:
            print(f"| {r['case']} | | | | | | | | | | | error: {r['error']} |")
        elif "refused" in r:
            print(f"| {r['case']} | {r['L']} | | {r['dim']} | | | — | — | — | {r['est_gib']:.1f} | | refused |")
        elif "stiffness" in r:
            print(f"| {r['case']} | {r['L']} | | {r['dim']} | | | {r['time_s']:.1f} | {r['cpu_s']:.1f} | "
                  f"{r['peak_gib']:.2f} | | {load} | 3 ground states + S(Q) + n(k) + stiffness "
                  f"({r['stiffness_method']}) = {r['stiffness']:.3e} ± {r['stiffness_error']:.1e} |")
        else:
            print(f"| {r['case']} | {r['L']} | {r.get('group', '')} | {r['dim']} | {r['fock']} | {r.get('nnz', '')} | "
                  f"{r['time_s']:.1f} | {r['cpu_s']:.1f} | {r['peak_gib']:.2f} | {r['est_gib']:.2f} | {load} | "
                  f"build {r['build_s']:.1f} s + Lanczos {r['lanczos_s']:.1f} s; E0={r['e0']:.8f} |")
    return 0


if __name__ == "__main__":
    sys.exit(main())
