"""Slow validation: hard-core bosons on the triangular lattice at half filling (mu = 3V) are a
supersolid at t/V = 0.08: S(K)/N and the stiffness both extrapolate to non-zero values.

Reference: supersolid for t/V below ≈ 0.112 at half filling (S. Wessel and M. Troyer, PRL 95,
127205 (2005); D. Heidarian and K. Damle, PRL 95, 127206 (2005); from memory).

Too long for the slow test suite: in the supersolid the integrated autocorrelation time of S(K)/N
is ~160 sweeps on 6x6, ~640 on 9x9 and ~380 on 12x12 (measured, docs/qmc.md), and a run is
decorrelated only if every bin holds more than 8 tau_int (docs/qmc.md, Errors), so each size
needs ~10^5 sweeps. The runs sample the fixed particle number N = N_sites/2 (9x9: 41), the
ensemble of mu = 3V (particle-hole symmetry); grand-canonical loops do not move N between
|N - N_sites/2| sectors at these temperatures (``--grand-canonical``, docs/qmc.md). Temperature:
beta V = BETA_L * L (z = 1, fixed aspect ratio; BETA_L = 10 gives beta t = 0.8 L at t/V = 0.08),
so the fits a + b/L approach T = 0 and L = infinity together.

    python benchmarks/validate_qmc_supersolid.py --sizes 6,9,12 --beta-L 10 \\
        --sweeps 128000 --bins 8 --chains 2 --workers 2 --out validate-ss   # ~27 min of chain time at load 4-6

Every chain checkpoints into OUT/chains: killed and restarted with the same arguments, the script
resumes where it stopped. Exit code 0 if the phase is "supersolid", 1 otherwise.
"""

from __future__ import annotations

import argparse
import os
import sys
import time

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))
sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))

from _halffilling_args import add_sampler_args, sampler_run_options  # noqa: E402


def main(argv=None) -> int:
    from phasemap import Model
    from phasemap.qmc.scaling import finite_size_scaling
    from phasemap.store import atomic_write_text, dumps_json, output_lock, provenance

    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--t", type=float, default=0.08, help="t/V (default 0.08)")
    p.add_argument("--sizes", default="6,9,12")
    p.add_argument("--beta-L", type=float, default=10.0, dest="beta_L", help="beta = BETA_L * L (1/V)")
    p.add_argument("--sweeps", type=int, default=64000, help="measured sweeps per chain")
    p.add_argument("--thermalization", type=int, default=None, help="warm-up sweeps (default sweeps // 5)")
    p.add_argument("--bins", type=int, default=8, help="bins per chain")
    p.add_argument("--chains", type=int, default=2)
    p.add_argument("--seed", type=int, default=1)
    p.add_argument("--workers", type=int, default=None)
    p.add_argument("--out", default="validate-ss")
    add_sampler_args(p)
    a = p.parse_args(argv)
    m = Model("triangular", t=a.t, V=1.0, mu=3.0)
    t0, c0 = time.perf_counter(), os.times()
    with output_lock(a.out):
        res = finite_size_scaling(m, sizes=a.sizes, beta_L=a.beta_L, sweeps=a.sweeps, thermalization=a.thermalization,
                                  bins=a.bins, chains=a.chains, seed=a.seed, workers=a.workers,
                                  run_options=sampler_run_options(a, os.path.join(a.out, "chains")))
        wall = time.perf_counter() - t0
        c1 = os.times()
        cpu = (c1.children_user + c1.children_system + c1.user + c1.system
               - c0.children_user - c0.children_system - c0.user - c0.system)
        print(res.summary())
        for L, r in zip(res.sizes, res.results):
            taus = ", ".join(f"{k} {r.estimates[k].tau:.3g}" for k in ("energy", "filling", "S(K)/N", "stiffness"))
            print(f"L={L}: tau_int (sweeps) {taus}; chains {r.info['chain_seconds']} s")
            print(f"   particle numbers per chain {r.info['particle_numbers']}; sector moves {r.info['sector_moves']}"
                  + (f"; swap acceptance {[round(x, 3) for x in r.info['swap_acceptance']]}"
                     if "swap_acceptance" in r.info else ""))
        print(f"wall {wall:.0f} s, CPU {cpu:.0f} s, load {os.getloadavg()}")
        meta = provenance(m, method="qmc", command="validate_qmc_supersolid", wall_seconds=wall, cpu_seconds=cpu,
                          load=list(os.getloadavg()))
        atomic_write_text(os.path.join(a.out, "scaling.json"), dumps_json({**meta, **res.to_dict()}) + "\n")
    return 0 if res.classification["phase"] == "supersolid" else 1


if __name__ == "__main__":
    sys.exit(main())
