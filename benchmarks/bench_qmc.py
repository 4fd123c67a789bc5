"""Speed of the QMC engine (stochastic series expansion, directed loops).

Prints, with the machine load (``os.getloadavg``) at the start and the end:

1. loop vertex visits per second per core (goal >= 1e7);
2. time per sweep versus N and beta (should grow as beta N);
3. integrated autocorrelation times of S(K)/N and of the winding stiffness in the solid,
   supersolid and superfluid (triangular, half filling / 1/3 filling);
4. 12x12 triangular at beta t = 24 with 1e4 sweeps (goal <= 2 min on one core);
5. parallel speed-up over chains (2 chains on 1 vs 2 worker processes).

Usage::

    python benchmarks/bench_qmc.py            # everything (several minutes)
    python benchmarks/bench_qmc.py --quick    # smaller sizes and sweep counts

Numbers are wall-clock seconds of the measurement sweeps (thermalization excluded unless
stated) on one process per chain; the first call compiles the kernel (cached afterwards).
"""

from __future__ import annotations

import argparse
import os
import time

from phasemap import Model
from phasemap.qmc import run_qmc


def load() -> str:
    return "load %.2f %.2f %.2f" % os.getloadavg()


def visits_rate(res) -> tuple[float, float]:
    """Loop vertex visits per wall second and per CPU second of the measurement sweeps."""
    v = res.info["vertex_visits"]
    return v / max(sum(res.info["measure_seconds"]), 1e-12), v / max(sum(res.info["measure_cpu_seconds"]), 1e-12)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--quick", action="store_true")
    ap.add_argument("--skip", default="", help="comma-separated section numbers to skip")
    a = ap.parse_args(argv)
    skip = {s.strip() for s in a.skip.split(",") if s.strip()}
    q = a.quick
    print(f"# bench_qmc  ({load()}, {os.cpu_count()} cores)")
    # warm-up compile
    run_qmc(Model("triangular", t=0.2, V=1.0, mu=3.0), cluster="tri9", T=1.0, sweeps=200, bins=10)

    if "1" not in skip:
        m = Model("triangular", t=0.1, V=1.0, mu=3.0)
        r = run_qmc(m, size=(12, 12), T=0.1 / 12, sweeps=300 if q else 1000, bins=10, seed=1)
        wall, cpu = visits_rate(r)
        print(f"1. loop vertex visits (12x12, beta t = 12): {wall:.3g} per wall second, {cpu:.3g} per CPU second "
              f"(<n_ops> = {r['n_ops'].value:.0f}, loops/sweep = {r.info['loops_per_sweep'][0]}, {load()})")

    if "2" not in skip:
        print("2. CPU time per measured sweep vs N and beta (t = 0.1, V = 1, mu = 3; ms/sweep and us per beta N)")
        m = Model("triangular", t=0.1, V=1.0, mu=3.0)
        for L in ((6, 12) if q else (6, 12, 18)):
            for beta in (10, 20, 40):
                sw = 300 if q else 1000
                r = run_qmc(m, size=(L, L), T=1.0 / beta, sweeps=sw, bins=10, seed=2)
                ms = 1e3 * sum(r.info["measure_cpu_seconds"]) / sw
                print(f"   N = {L * L:4d}  beta = {beta:3d}  {ms:8.3f} ms/sweep   {1e3 * ms / (beta * L * L):7.3f} "
                      f"us/(beta N)   <n_ops> = {r['n_ops'].value:8.0f}")
        print(f"   ({load()})")

    if "3" not in skip:
        print("3. integrated autocorrelation times (sweeps), 12x12 triangular, beta V = 20")
        pts = {"solid 1/3 (t/V=0.05, mu=1.5V)": (0.05, 1.5), "supersolid (t/V=0.08, mu=3V)": (0.08, 3.0),
               "superfluid (t/V=0.2, mu=3V)": (0.2, 3.0)}
        for name, (t, mu) in pts.items():
            r = run_qmc(Model("triangular", t=t, V=1.0, mu=mu), size=(12, 12), T=0.05, sweeps=1000 if q else 4000,
                        bins=20, seed=3)
            e = r.estimates
            print(f"   {name:32s} tau S(K)/N = {e['S(K)/N'].tau:6.2f}  tau stiffness = {e['stiffness'].tau:6.2f}  "
                  f"S(K)/N = {e['S(K)/N']:.4g}  rho = {e['stiffness']:.4g}  n = {e['filling']:.4g}")
        print(f"   ({load()})")

    if "4" not in skip:
        m = Model("triangular", t=0.1, V=1.0, mu=3.0)
        sw = 2000 if q else 10000
        t0, c0 = time.perf_counter(), time.process_time()
        r = run_qmc(m, size=(12, 12), T=0.1 / 24, sweeps=sw, thermalization=sw // 5, bins=20, seed=4)
        wall, cpu = time.perf_counter() - t0, time.process_time() - c0
        print(f"4. 12x12 triangular, beta t = 24 (t/V = 0.1, half filling), {sw} sweeps + {sw // 5} thermalization: "
              f"{wall:.1f} s wall, {cpu:.1f} s CPU, one process ({load()}); energy {r.energy}, S(K)/N {r['S(K)/N']}, "
              f"rho {r['stiffness']}, decorrelated {r.decorrelated}")

    if "5" not in skip:
        m = Model("triangular", t=0.1, V=1.0, mu=3.0)
        sw = 1000 if q else 3000
        times = {}
        for w in (1, 2):
            t0 = time.perf_counter()
            run_qmc(m, size=(9, 9), T=0.05, sweeps=sw, bins=10, seed=5, chains=2, workers=w)
            times[w] = time.perf_counter() - t0  # wall: includes process start-up and kernel loading
        print(f"5. 2 chains x {sw} sweeps (9x9, beta V = 20): 1 worker {times[1]:.1f} s, 2 workers {times[2]:.1f} s, "
              f"speed-up {times[1] / times[2]:.2f} ({load()})")


if __name__ == "__main__":
    main()
