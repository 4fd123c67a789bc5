"""Slow validation: the half-filling superfluid -> supersolid transition of hard-core bosons on
the triangular lattice from quantum Monte Carlo crossings over sizes.

Reference: t/V ≈ 0.112 (S. Wessel and M. Troyer, PRL 95, 127205 (2005); D. Heidarian and
K. Damle, PRL 95, 127206 (2005); value from memory, V = nearest-neighbour repulsion, mu = 3V).

The sqrt3 x sqrt3 order appears when t/V decreases: the Binder ratio <|rho_K|^4>/<|rho_K|^2>^2
of successive L x L tori crosses at the transition (quantum scaling z = 1: beta = BETA_L * L).
The script prints the crossings of each pair of sizes with bootstrap errors and the combined
answer (a bracket when the pairs disagree), and writes the data and a figure with provenance.

    nice -n 10 python benchmarks/validate_qmc_halffilling.py --sizes 6,9,12 \\
        --t 0.10,0.105,0.11,0.115,0.12 --beta-L 10 --sweeps 24000 --bins 8 --chains 2 --workers 2 \\
        --out validate-hf        # ~800 s CPU at load 9-13; numbers, flags: docs/qmc.md

Temperature: beta V = BETA_L * L. The supersolid orders by quantum fluctuations (the t = 0
model at mu = 3V is the frustrated triangular Ising antiferromagnet, disordered at every T > 0),
so its ordering temperatures are a fraction of t: beta must be a few L / t, i.e. BETA_L ~ 10 at
t/V ~ 0.1 (beta t ~ L). BETA_L = 2 (beta t ~ 0.2 L) is far above the ordering temperature.

Every chain checkpoints into OUT/chains (``--checkpoint``); killed and restarted with the same
arguments the script resumes each chain where it stopped (finished runs are read back).
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))
sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))

from _halffilling_args import add_sampler_args, sampler_run_options  # noqa: E402

REFERENCE = 0.112  # Wessel & Troyer 2005; Heidarian & Damle 2005 (from memory)


def main(argv=None) -> int:
    import numpy as np

    from phasemap import Model
    from phasemap.cli.qmc import parse_scan
    from phasemap.qmc.scaling import scan_crossing
    from phasemap.store import atomic_write_text, dumps_json, output_lock, provenance

    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--sizes", default="6,9,12")
    p.add_argument("--t", default="0.09,0.10,0.105,0.11,0.115,0.12,0.13,0.14", help="t/V values LO:HI:COUNT or a comma list")
    p.add_argument("--beta-L", type=float, default=10.0, dest="beta_L", help="beta = BETA_L * L (1/V)")
    p.add_argument("--sweeps", type=int, default=32000)
    p.add_argument("--thermalization", type=int, default=None, help="warm-up sweeps (default sweeps // 5)")
    p.add_argument("--chains", type=int, default=1, help="independent chains per point (run one after the other)")
    p.add_argument("--checkpoint", default=None, help="chain checkpoint folder (default OUT/chains)")
    p.add_argument("--bins", type=int, default=32)
    p.add_argument("--seed", type=int, default=1)
    p.add_argument("--workers", type=int, default=None)
    p.add_argument("--out", default="validate-hf")
    add_sampler_args(p)
    a = p.parse_args(argv)
    _, tv = parse_scan(f"t={a.t}")
    m = Model("triangular", t=float(tv[0]), V=1.0, mu=3.0)
    t0, c0 = time.perf_counter(), os.times()
    with output_lock(a.out):
        ckpt = a.checkpoint or os.path.join(a.out, "chains")
        scan = scan_crossing(m, "t", tv, sizes=a.sizes, beta_L=a.beta_L, sweeps=a.sweeps, bins=a.bins, seed=a.seed,
                             workers=a.workers, thermalization=a.thermalization, chains=a.chains,
                             run_options=sampler_run_options(a, ckpt))
        wall = time.perf_counter() - t0
        c1 = os.times()
        cpu = (c1.children_user + c1.children_system + c1.user + c1.system
               - c0.children_user - c0.children_system - c0.user - c0.system)
        for L, row in zip(scan.sizes, scan.results):
            for v, r in zip(scan.values, row):
                e = r.estimates
                print(f"L={L:<3d} t/V={v:<6.4g} beta V={r.beta:<6.4g} " + "  ".join(
                    f"{k} {format(e[k])} (tau {e[k].tau:.3g})" for k in ("S(K)/N", "binder", "stiffness"))
                    + ("" if r.decorrelated else "  NOT DECORRELATED"))
        print(scan.summary())
        b = scan.combined["binder"]
        if b["value"] is not None:
            err = b["stat_error"] or 0.0
            fss = b.get("fss_error") or 0.0
            dev = abs(b["value"] - REFERENCE) / max(np.hypot(err, fss), 1e-12)
            print(f"Binder crossing t/V = {b['text']}; reference {REFERENCE} (Wessel & Troyer 2005, from memory): "
                  f"{dev:.1f} combined sigma away")
        else:
            print("no Binder crossing inside the scanned range")
        print(f"wall {wall:.0f} s, CPU {cpu:.0f} s, load {os.getloadavg()}")
        meta = provenance(m, method="qmc", command="validate_qmc_halffilling", reference=REFERENCE,
                          wall_seconds=wall, cpu_seconds=cpu, load=list(os.getloadavg()))
        os.makedirs(a.out, exist_ok=True)
        atomic_write_text(os.path.join(a.out, "crossing.json"), dumps_json({**meta, **scan.to_dict()}) + "\n")
        from phasemap.plot import save_figure
        from phasemap.qmc.plots import plot_crossing

        save_figure(plot_crossing(scan), os.path.join(a.out, "crossing"))
    json.dumps(scan.combined)
    return 0


if __name__ == "__main__":
    sys.exit(main())
