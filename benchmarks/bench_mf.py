"""Benchmark: batched site-decoupled mean field vs a plain per-point reference loop.

Default (issue 2, "Speed"): a 200 x 200 hard-core triangular map, t/V in [0, 0.5], mu/V in [-1, 7],
all seeds, via ``phasemap.mf.solve_batch`` on ``phasemap.params.grid``. In the same run a plain
reference loop -- one point at a time, one seed at a time, ``scipy.linalg.eigh`` of every site's
local Hamiltonian (2 x 2 for hard-core) at every iteration, the same seeds, tolerance, mixing,
Anderson memory and stall rule -- is timed on a random sample of the same points; its per-point time
is extrapolated to the whole grid. The two must agree on the ground-state energy of every sampled
point.

    /work/venv/bin/python benchmarks/bench_mf.py                 # hard-core triangular 200 x 200
    /work/venv/bin/python benchmarks/bench_mf.py --softcore      # soft-core (U = 1), t/U x mu/U
    /work/venv/bin/python benchmarks/bench_mf.py --size 100 --sample 20
    /work/venv/bin/python benchmarks/bench_mf.py --size 400 --sample 10   # issue 11 target (<= 5 s, >= 1000x)

The same run also traces the map adaptively (``phase_map(adaptive=True, finest=2)``: classified,
every seed, about 3 % of the points solved at 400 x 400) and prints its ratio to the reference.
"""

from __future__ import annotations

import argparse
import os
import sys
import time

import numpy as np
import scipy.linalg

import phasemap
from phasemap.mf import MFOptions, solve_batch
from phasemap.params import grid
from phasemap.seeds import make_seeds


# -- plain reference -------------------------------------------------------------------------
class RefCell:
    """Neighbour lists of one seed's supercell, as plain Python lists."""

    def __init__(self, cell):
        lat = cell.lattice
        self.S = cell.n_sites
        self.plus = [list(map(int, cell.index(cell.sites + np.array(d)))) for d in lat.nn]
        self.minus = [list(map(int, cell.index(cell.sites - np.array(d)))) for d in lat.nn]
        self.nnn_plus = [list(map(int, cell.index(cell.sites + np.array(d)))) for d in lat.nnn]
        self.nnn_minus = [list(map(int, cell.index(cell.sites - np.array(d)))) for d in lat.nnn]


def ref_local(model, Phi, eps_mu):
    """Ground state of the local Hamiltonian by scipy.linalg.eigh: returns <n>, <b>, <n(n-1)>."""
    d = model.n_max + 1
    m = np.arange(d, dtype=float)
    U = 0.0 if model.hardcore else model.U
    h = np.diag(0.5 * U * m * (m - 1) + eps_mu * m)
    off = -Phi * np.sqrt(m[1:])
    h[np.arange(1, d), np.arange(d - 1)] = off
    h[np.arange(d - 1), np.arange(1, d)] = off
    w, v = scipy.linalg.eigh(h)
    g = v[:, 0]
    if g.sum() < 0:
        g = -g
    p = g * g
    return float(p @ m), float((g[1:] * g[:-1]) @ np.sqrt(m[1:])), float(p @ (m * (m - 1)))


def ref_G(model, rc, x):
    S = rc.S
    n, phi = x[:S], x[S:]
    out = np.empty(2 * S)
    nn1 = np.empty(S)
    for s in range(S):
        Phi = 0.0
        eps = -model.mu
        for f in range(len(rc.plus)):
            Phi += model.t[f] * (phi[rc.plus[f][s]] + phi[rc.minus[f][s]])
            eps += model.V[f] * (n[rc.plus[f][s]] + n[rc.minus[f][s]])
        if model.V2 != 0:
            for k in range(len(rc.nnn_plus)):
                eps += model.V2 * (n[rc.nnn_plus[k][s]] + n[rc.nnn_minus[k][s]])
        out[s], out[S + s], nn1[s] = ref_local(model, Phi, eps)
    return out, nn1


def ref_energy(model, rc, x, nn1):
    S = rc.S
    n, phi = x[:S], x[S:]
    E = 0.0
    for s in range(S):
        for f in range(len(rc.plus)):
            j = rc.plus[f][s]
            E += -2.0 * model.t[f] * phi[s] * phi[j] + model.V[f] * n[s] * n[j]
        for k in range(len(rc.nnn_plus)):
            E += model.V2 * n[s] * n[rc.nnn_plus[k][s]]
        E += (0.0 if model.hardcore else 0.5 * model.U * nn1[s]) - model.mu * n[s]
    return E / S


def ref_iterate(model, rc, x0, opt: MFOptions, anderson=True):
    """Linear mixing + Anderson (type II) acceleration, one point, one seed. -> (E, converged, iters)."""
    x = x0.copy()
    S = rc.S
    mmem = opt.anderson if anderson else 0
    mixing = opt.mixing if anderson else (1.0 if model.hardcore else 0.7)
    max_iter = opt.max_iter if anderson else 10 * opt.max_iter
    hx, hf = [], []
    px = pf = None
    best_r, last_gain = np.inf, 0
    conv = False
    for it in range(1, max_iter + 1):
        gx, _ = ref_G(model, rc, x)
        f = gx - x
        r = np.abs(f).max()
        if r < 0.999 * best_r:
            best_r, last_gain = r, it
        if r < opt.tol:
            x, conv = gx, True
            break
        if it - last_gain > opt.patience:
            break
        xnew = x + mixing * f
        if mmem and px is not None:
            hx.append(x - px)
            hf.append(f - pf)
            hx, hf = hx[-mmem:], hf[-mmem:]
            dX, dF = np.array(hx).T, np.array(hf).T
            A = dF.T @ dF
            reg = 1e-10 * max(np.trace(A), 1e-30)
            gam = np.linalg.solve(A + reg * np.eye(len(hx)), dF.T @ f)
            step = xnew - (dX + mixing * dF) @ gam
            if np.all(np.isfinite(step)):
                xnew = step
        px, pf = x, f
        xnew[:S] = np.clip(xnew[:S], 0.0, model.n_max)
        xnew[S:] = np.clip(xnew[S:], 0.0, None)
        x = xnew
    gx, nn1 = ref_G(model, rc, x)
    return ref_energy(model, rc, gx, nn1), conv, it, gx


def ref_point(model, seeds, rcs, opt: MFOptions):
    """Lowest converged energy over all seeds at one point (plain loop)."""
    best = np.inf
    for seed, rc in zip(seeds, rcs):
        x0 = np.concatenate([seed.n0, seed.phi0]).astype(float)
        E, conv, it, x = ref_iterate(model, rc, x0, opt)
        # a condensed seed that Anderson parked on the phi = 0 fixed point: redo with plain mixing
        if conv and x[rc.S:].max() < 1e-8 and seed.phi0.max() > 0 and max(model.t) > 0:
            E2, conv2, _, _ = ref_iterate(model, rc, x0, opt, anderson=False)
            if conv2:
                E = min(E, E2)
        if conv:
            best = min(best, E)
    return best


# -- driver ----------------------------------------------------------------------------------
def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--size", type=int, default=200, help="grid points per axis (default 200)")
    ap.add_argument("--sample", type=int, default=50, help="points for the reference loop (default 50)")
    ap.add_argument("--softcore", action="store_true", help="soft-core bosons, U = 1 (axes t/U, mu/U)")
    ap.add_argument("--lattice", default="triangular", choices=["triangular", "square"])
    ap.add_argument("--V", type=float, default=None,
                    help="NN repulsion (default 1 hard-core; 0 soft-core, in units of U)")
    ap.add_argument("--n-max", type=int, default=4, help="soft-core occupation cut-off (default 4)")
    ap.add_argument("--seed", type=int, default=1, help="random sample seed")
    ap.add_argument("--etol", type=float, default=1e-8, help="energy agreement tolerance")
    a = ap.parse_args(argv)

    opt = MFOptions()
    if a.softcore:
        V = 0.0 if a.V is None else a.V
        model = phasemap.Model(lattice=a.lattice, t=0.0, V=V, U=1.0, n_max=a.n_max)
        tmax = 0.1 if a.lattice == "square" else 0.07
        axes = {"t": np.linspace(0.0, tmax, a.size), "mu": np.linspace(-0.5, 3.0, a.size)}
        desc = f"soft-core {a.lattice}, U=1, V/U={V:g}, n_max={a.n_max}, t/U 0..{tmax:g} x mu/U -0.5..3"
    else:
        V = 1.0 if a.V is None else a.V
        model = phasemap.Model(lattice=a.lattice, t=0.0, V=V)
        axes = {"t": np.linspace(0.0, 0.5, a.size), "mu": np.linspace(-1.0, 7.0, a.size)}
        desc = f"hard-core {a.lattice}, V={V:g}, t/V 0..0.5 x mu/V -1..7"
    batch, shape = grid(model, axes, relative=True)
    seeds = make_seeds(batch.base, n_random=opt.n_random, rng=opt.rng)
    P, K = batch.size, len(seeds)
    print(f"# {desc}: {shape[0]} x {shape[1]} = {P} points, {K} seeds, tol {opt.tol:g}")
    print(f"# numpy {np.__version__}, scipy {scipy.__version__}, phasemap {phasemap.__version__}, "
          f"{os.cpu_count()} cores, load average {os.getloadavg()[0]:.2f}")

    # warm-up (JIT compilation, cell tables) on a tiny batch, timed separately
    t0 = time.perf_counter()
    solve_batch(batch.take(np.arange(min(4, P))), opt, seeds=seeds)
    t_warm = time.perf_counter() - t0

    t0, c0 = time.perf_counter(), time.process_time()
    res = solve_batch(batch, opt, seeds=seeds)
    t_batch, c_batch = time.perf_counter() - t0, time.process_time() - c0
    best = res.best()
    n_unconv = int((best < 0).sum())
    E_batch = np.where(best >= 0, res.energy[np.arange(P), np.maximum(best, 0)], np.inf)

    # the same map traced adaptively (phasemap.adaptive), labelled and classified, every seed
    from phasemap.scan import phase_map

    xs, ys = list(axes.items())
    t0, c0 = time.perf_counter(), time.process_time()
    traced = phase_map(model, xs, ys, relative=True, refine=False, progress=False, adaptive=True, finest=2)
    t_trace, c_trace = time.perf_counter() - t0, time.process_time() - c0
    frac = float(traced["solved"].values.mean())

    rng = np.random.default_rng(a.seed)
    sample = np.sort(rng.choice(P, size=min(a.sample, P), replace=False))
    rcs = [RefCell(s.cell) for s in seeds]
    t0, c0 = time.perf_counter(), time.process_time()
    E_ref = np.array([ref_point(batch.model(int(p)), seeds, rcs, opt) for p in sample])
    t_ref, c_ref = time.perf_counter() - t0, time.process_time() - c0

    per_batch = t_batch / P
    per_ref = t_ref / len(sample)
    extrap = per_ref * P
    dE = np.abs(E_ref - E_batch[sample])
    both = np.isfinite(E_ref) & np.isfinite(E_batch[sample])
    agree = both & (dE <= a.etol * np.maximum(1.0, np.abs(E_ref)))

    w = 44
    print()
    print(f"{'':{w}} {'points':>7} {'wall [s]':>10} {'CPU [s]':>9} {'per point [ms]':>15} {'full grid [s]':>14}")
    print(f"{'solve_batch (all points, all seeds)':{w}} {P:>7} {t_batch:>10.2f} {c_batch:>9.2f} "
          f"{1e3 * per_batch:>15.4f} {t_batch:>14.2f}")
    print(f"{'  first call / warm-up (4 points)':{w}} {min(4, P):>7} {t_warm:>10.2f} {'':>9} {'':>15} {'':>14}")
    print(f"{'reference loop (scipy eigh per site/iter)':{w}} {len(sample):>7} {t_ref:>10.2f} {c_ref:>9.2f} "
          f"{1e3 * per_ref:>15.2f} {extrap:>14.1f} (extrapolated)")
    print(f"{'adaptive phase_map (finest 2, classified)':{w}} {P:>7} {t_trace:>10.2f} {c_trace:>9.2f} "
          f"{1e3 * t_trace / P:>15.4f} {t_trace:>14.2f} ({100 * frac:.1f}% of points solved)")
    print()
    print(f"speed-up (reference per point / batched per point): {per_ref / per_batch:,.0f}x")
    print(f"speed-up of the adaptive map over the reference loop (whole grid): {extrap / t_trace:,.0f}x wall, "
          f"{(c_ref / len(sample)) * P / c_trace:,.0f}x CPU")
    if not a.softcore and a.size == 400 and a.lattice == "triangular":
        print(f"issue 11 target, 400 x 400 hard-core map <= 5 s wall and >= 1000x: "
              f"{'yes' if t_trace <= 5 and extrap / t_trace >= 1000 else 'NO'} ({t_trace:.2f} s wall, "
              f"{c_trace:.2f} s CPU, load average {os.getloadavg()[0]:.2f})")
    if not a.softcore and a.size == 200 and a.lattice == "triangular":
        print(f"issue 2 target, 200 x 200 hard-core map under 10 s: {'yes' if t_batch < 10 else 'NO'} "
              f"({t_batch:.2f} s wall, {c_batch:.2f} s CPU)")
    print(f"speed-up on CPU time: {(c_ref / len(sample)) / (c_batch / P):,.0f}x "
          "(wall times suffer when other jobs share the cores)")
    print(f"points with no converged seed (batched): {n_unconv} of {P}")
    print(f"energy agreement on the sample: {int(agree.sum())}/{len(sample)} within {a.etol:g} "
          f"(max |dE| over points both converged: {dE[both].max() if both.any() else float('nan'):.2e})")
    bad = np.nonzero(~agree)[0]
    for i in bad[:10]:
        p = int(sample[i])
        m = batch.model(p)
        print(f"  disagree: t={m.t[0]:.4g} mu={m.mu:.4g}  E_batch={E_batch[p]:.12g}  E_ref={E_ref[i]:.12g}")
    return 0 if agree.all() else 1


if __name__ == "__main__":
    sys.exit(main())
