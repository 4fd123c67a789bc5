"""Benchmark: site-decoupled mean field at T > 0 versus T = 0 on the same grid, and the
ordering-temperature search.

    /work/venv/bin/python benchmarks/bench_thermal.py             # 200 x 200 hard-core triangular (t/V, mu/V)
    /work/venv/bin/python benchmarks/bench_thermal.py --softcore  # soft-core square (U = 1, n_max = 4)
    /work/venv/bin/python benchmarks/bench_thermal.py --size 100

Prints wall times of ``solve_batch`` at T = 0 and at T = 0.2 (in units of V or U) on the same
points (compile time excluded by a warm-up), and the time of ``transition_temperatures`` along
a line of 10 chemical potentials. Report the load (``uptime``) beside the numbers.
"""

from __future__ import annotations

import argparse
import os
import time

import numpy as np

import phasemap
from phasemap.mf import MFOptions, solve_batch
from phasemap.params import grid
from phasemap.thermal import transition_temperatures


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--size", type=int, default=200)
    ap.add_argument("--softcore", action="store_true")
    ap.add_argument("--T", type=float, default=0.2)
    a = ap.parse_args()
    if a.softcore:
        m = phasemap.Model(lattice="square", t=0.02, U=1.0, mu=0.5, n_max=4)
        ax = {"t": np.linspace(0, 0.1, a.size), "mu": np.linspace(-0.5, 3, a.size)}
        line = {"t": np.full(10, 0.03), "mu": np.linspace(0.1, 0.9, 10)}
    else:
        m = phasemap.Model(lattice="triangular", t=0.05, V=1.0, mu=1.0)
        ax = {"t": np.linspace(0, 0.5, a.size), "mu": np.linspace(-1, 7, a.size)}
        line = {"t": np.full(10, 0.05), "mu": np.linspace(0.5, 2.5, 10)}
    b, _ = grid(m, ax, relative=True)
    bw, _ = grid(m, {k: v[:3] for k, v in ax.items()}, relative=True)
    for T in (0.0, a.T):  # warm-up (numba compile / cache load)
        solve_batch(bw, MFOptions(T=T * m.scale))
    print(f"load: {os.getloadavg()[0]:.2f}; {m.describe()}; grid {a.size} x {a.size}")
    for T in (0.0, a.T):
        t0 = time.perf_counter()
        r = solve_batch(b, MFOptions(T=T * m.scale))
        dt = time.perf_counter() - t0
        print(f"T = {T:g} x scale: {dt:7.2f} s wall, {r.converged.mean():.4f} of rows converged, "
              f"median iterations {np.median(r.iterations):.0f}")
    t0 = time.perf_counter()
    ds = transition_temperatures(m, line, T_max=1.5 if not a.softcore else 0.5, n_T=12)
    print(f"transition_temperatures along 10 points: {time.perf_counter() - t0:.2f} s wall; "
          f"Tc(density) = {np.round(ds['Tc_density'].values, 4)}; "
          f"Tc(condensate) = {np.round(ds['Tc_condensate'].values, 4)}")


if __name__ == "__main__":
    main()
