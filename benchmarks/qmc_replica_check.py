"""Does replica exchange in mu move the particle number? One L x L triangular torus, plain chains
and replica-exchange chains with the same seed and the same measured sweeps, side by side.

Reports per run: the particle-number histogram of every chain at the target mu, S(K)/N, the
compressibility and the stiffness with their tau_int and decorrelation flags, the swap
acceptance per neighbouring pair, the particle-number histograms of every replica, wall and CPU.

    nice -n 10 python benchmarks/qmc_replica_check.py --L 12 --t 0.08 --mu 3 --beta-L 10 \\
        --sweeps 16000 --bins 8 --chains 2 --replicas 7 --mu-step 0.01 --out rx-check

Checkpoints in OUT/chains (killed and restarted with the same arguments, it resumes). ``--peek``
prints what the checkpoint files of OUT/chains hold so far (measured sweeps, particle numbers of
the target slot, sector moves, swap acceptance, S(K)/N and tau_int of the rows measured so far)
without running anything.
"""

from __future__ import annotations

import argparse
import os
import sys
import time

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))


def _line(res) -> str:
    out = []
    for k in ("S(K)/N", "compressibility", "stiffness", "energy"):
        e = res.estimates[k]
        out.append(f"{k} {e.value:.5g} ± {e.error:.2g} (tau {e.tau:.3g}{'' if e.decorrelated else ', FLAGGED'})")
    return "; ".join(out)


def peek(folder: str, replicas: int) -> None:
    import glob

    import numpy as np

    from phasemap.qmc.stats import estimate

    for f in sorted(glob.glob(os.path.join(folder, "*.npz"))):
        with np.load(f) as z:
            done = int(z["meas_done"])
            rec = z["rec"]
            rx = rec.ndim == 3
            tgt = (replicas - 1) // 2 if rx else None
            r = rec[tgt, :done] if rx else rec[:done]
            line = f"{os.path.basename(f)}: warm-up {int(z['therm_done'])}, measured {done}"
            if done >= 16:
                v, c = np.unique(r[:, 1].astype(int), return_counts=True)
                sk = estimate([r[:, 4:5]], 8, lambda m: m[0])
                line += (f", N {dict(zip(v.tolist(), c.tolist()))}, S(K)/N {sk.value:.5f} ± {sk.error:.1g} "
                         f"(tau {sk.tau:.3g}{'' if sk.decorrelated else ', flagged'})")
            if "sector_moves" in z.files:
                line += f", sector moves {np.atleast_1d(z['sector_moves']).tolist()}"
            if "swap_meas" in z.files:
                sw = z["swap_meas"]
                line += f", swap acceptance {[round(a / t, 3) if t else None for t, a in sw.tolist()]}"
        print(line)


def main(argv=None) -> int:
    from phasemap import Model
    from phasemap.qmc import run_qmc
    from phasemap.store import atomic_write_text, dumps_json

    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--L", type=int, default=12)
    p.add_argument("--t", type=float, default=0.08, help="t/V")
    p.add_argument("--mu", type=float, default=3.0, help="mu/V (target)")
    p.add_argument("--beta-L", type=float, default=10.0, dest="beta_L", help="beta V = BETA_L * L")
    p.add_argument("--sweeps", type=int, default=16000)
    p.add_argument("--thermalization", type=int, default=None)
    p.add_argument("--bins", type=int, default=8)
    p.add_argument("--chains", type=int, default=2)
    p.add_argument("--replicas", type=int, default=7)
    p.add_argument("--mu-step", type=float, default=None, dest="mu_step")
    p.add_argument("--seed", type=int, default=1)
    p.add_argument("--workers", type=int, default=None)
    p.add_argument("--skip-plain", action="store_true", help="only the replica-exchange run")
    p.add_argument("--out", default="rx-check")
    p.add_argument("--peek", action="store_true", help="only print what OUT/chains holds so far")
    a = p.parse_args(argv)
    if a.peek:
        peek(os.path.join(a.out, "chains"), a.replicas)
        return 0
    m = Model("triangular", t=a.t, V=1.0, mu=a.mu)
    os.makedirs(a.out, exist_ok=True)
    kw = dict(size=(a.L, a.L), T=1.0 / (a.beta_L * a.L), sweeps=a.sweeps, thermalization=a.thermalization,
              bins=a.bins, chains=a.chains, seed=a.seed, workers=a.workers,
              checkpoint=os.path.join(a.out, "chains"), checkpoint_interval=30.0)
    report = {}
    runs = [("replicas", {"replicas": a.replicas, "mu_step": a.mu_step})]
    if not a.skip_plain:
        runs.insert(0, ("plain", {}))
    for name, extra in runs:
        t0, c0 = time.perf_counter(), os.times()
        res = run_qmc(m, **kw, **extra)
        wall = time.perf_counter() - t0
        c1 = os.times()
        cpu = c1.children_user + c1.children_system + c1.user + c1.system - (
            c0.children_user + c0.children_system + c0.user + c0.system)
        print(f"== {name}: {a.L}x{a.L}, t/V {a.t}, mu {a.mu}, beta V {a.beta_L * a.L:g}, {a.chains} x {a.sweeps} "
              f"sweeps; wall {wall:.0f} s, CPU {cpu:.0f} s, load {os.getloadavg()}")
        print("   " + _line(res))
        print(f"   N per chain (target mu): {res.info['particle_numbers']}; sector moves per chain (and slot): "
              f"{res.info['sector_moves']}")
        if "mu_ladder" in res.info:
            print(f"   mu ladder {[round(x, 5) for x in res.info['mu_ladder']]}, swap acceptance "
                  f"{[None if x is None else round(x, 3) for x in res.info['swap_acceptance']]}")
            for rep in res.info["replicas"]:
                print(f"   mu {rep['mu']:.5f}: filling {rep['filling']['value']:.5f}, N {rep['particle_numbers']}")
        print(f"   flags: {res.flags}", flush=True)
        report[name] = {"wall_seconds": wall, "cpu_seconds": cpu, "load": list(os.getloadavg()), **res.to_dict()}
    atomic_write_text(os.path.join(a.out, "report.json"), dumps_json(report) + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
