"""Benchmark: the same map on every executor, in one run (parallel speed-up and identity).

A cluster-mean-field map (``cmf:tri3``, hard-core triangular, t/V x mu/V), cut into chunks,
solved serially, on local processes (all cores) and on a local Dask cluster (loopback, one worker
per core); prints wall times, the speed-up over serial and whether the results are identical.
The machine is shared: compare the ratios of one run, and read them with the load printed.

    /work/venv/bin/python benchmarks/bench_executor.py
    /work/venv/bin/python benchmarks/bench_executor.py --size 12 --method mf
"""

from __future__ import annotations

import argparse
import os
import sys
import time

import numpy as np

import phasemap
from phasemap.executor import DaskExecutor, ProcessExecutor
from phasemap.scan import phase_map


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--size", type=int, default=16, help="points per axis (default 16)")
    ap.add_argument("--method", default="cmf:tri3")
    ap.add_argument("--chunk", type=int, default=16)
    ap.add_argument("--no-dask", action="store_true")
    a = ap.parse_args(argv)
    m = phasemap.Model("triangular", t=0.0, V=1.0)
    x, y = ("t", np.linspace(0, 0.4, a.size)), ("mu", np.linspace(-1, 7, a.size))
    cores = os.cpu_count() or 1
    print(f"# {a.method} map {a.size}x{a.size}, chunk {a.chunk}; {cores} cores; load average "
          f"{' '.join(f'{v:.2f}' for v in os.getloadavg())}")

    def timed(ex):
        t0 = time.perf_counter()
        ds = phase_map(m, x, y, method=a.method, refine=False, progress=False, chunk=a.chunk, executor=ex)
        return ds, time.perf_counter() - t0

    timed("serial")  # compiled kernels and caches loaded outside the timing, as for the pools below
    ref, t_serial = timed("serial")
    rows = [("serial", t_serial, True)]
    with ProcessExecutor(cores) as ex:
        timed(ex)  # start the workers (spawn, imports, compiled-kernel cache) outside the timing
        ds, t = timed(ex)
        rows.append((f"processes ({cores})", t, ref.identical(ds)))
    if not a.no_dask:
        try:
            with DaskExecutor(None, workers=cores, host="127.0.0.1") as ex:
                timed(ex)
                ds, t = timed(ex)
                rows.append((f"dask local ({cores} workers)", t, ref.identical(ds)))
        except Exception as e:  # noqa: BLE001 - optional extra
            print(f"# dask skipped: {e}")
    print(f"{'executor':28} {'wall [s]':>9} {'speed-up':>9}  identical")
    for name, t, same in rows:
        print(f"{name:28} {t:>9.2f} {t_serial / t:>8.2f}x  {'yes' if same else 'NO'}")
    print(f"# load average after: {' '.join(f'{v:.2f}' for v in os.getloadavg())}")
    return 0 if all(r[2] for r in rows) else 1


if __name__ == "__main__":
    sys.exit(main())
