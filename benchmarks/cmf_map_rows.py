"""Where the tri3 map's iterations go, and what stop rules or seed pruning would change (docs/cmf.md).

Run:  python benchmarks/cmf_map_rows.py [--n 100]

Solves the demo map of ``bench_cmf_batch.py --only map`` (tri3 hard-core, n x n, 8 seeds) with the
compiled dense rows (:func:`phasemap.cmf.kernel.iterate_dense_rows`), recording every row's residual
for the first ``--keep`` iterations; it checks that iteration counts and flags equal the map's. A stop rule only truncates a row's
trajectory, so replaying the recorded residuals gives its exact effect on this map: the
iterations left, the converged rows lost and the points whose winning energy (lowest converged
energy) changes. Also printed: the points whose winner comes only from rows converging after the
patience window, whether unconverged rows cycle, and an upper bound for dropping duplicate seeds.
Counts, not timings: independent of the machine's load.
"""

from __future__ import annotations

import argparse

import numpy as np

from phasemap import Model
from phasemap.cmf import cluster_seeds, get_cluster, solve_cmf_batch
from phasemap.cmf.batch import BatchProblem, _reference_vector
from phasemap.cmf.hamiltonian import cluster_operators
from phasemap.cmf.kernel import iterate_dense_rows
from phasemap.cmf.selfconsistency import CMFOptions
from phasemap.params import grid


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    p.add_argument("--n", type=int, default=100, help="map size n x n (default 100)")
    p.add_argument("--keep", type=int, default=300, help="iterations of residual history kept per row")
    a = p.parse_args(argv)
    m = Model("triangular", t=0.6, V=(10.0, 10.0, 8.5), mu=0.0, unit="K")
    batch, _ = grid(m, {"t": np.linspace(0, 0.4, a.n), "mu": np.linspace(-1, 7, a.n)}, relative=True)
    ref = solve_cmf_batch(batch, cluster="tri3", engine="batch")
    cl = get_cluster("tri3")
    ops = cluster_operators(cl, 1)
    seeds = cluster_seeds(m, cl)
    P, K, S = batch.size, len(seeds), cl.n_sites
    x0 = np.ascontiguousarray(np.broadcast_to(np.stack([np.concatenate([s.n0, s.phi0]) for s in seeds])[None],
                                              (P, K, 2 * S)).reshape(P * K, 2 * S))
    rep = lambda v: np.repeat(np.asarray(v), K, axis=0)  # noqa: E731
    prob = BatchProblem(cl, ops, rep(batch.t), rep(batch.V), rep(batch.U), rep(batch.V2), rep(batch.mu), True)
    opt = CMFOptions()
    R = P * K
    H = np.full((R, a.keep), np.inf)
    _, it, _, c, _ = iterate_dense_rows(prob, x0, opt, 1, _reference_vector(ops.dim), history=H)
    assert np.array_equal(it, ref.iterations.ravel()) and np.array_equal(c, ref.converged.ravel()), "rows != map"
    E = ref.energy.ravel()
    tot = it.sum()
    print(f"{R:,} rows, {tot:,} iterations; converged rows {c.mean():.3f} take {it[c].sum() / tot:.3f} of the "
          f"iterations, unconverged {it[~c].sum() / tot:.3f}")
    print("unconverged rows by end iteration:", dict(zip(["81-99", "100-199", "200-399", "400-1999", "2000"],
          np.histogram(it[~c], [81, 100, 200, 400, 2000, 2001])[0].tolist())))

    def lowest(conv):
        return np.where(conv.reshape(P, K), E.reshape(P, K), np.inf).min(1)

    e0 = lowest(c)
    itr, cr, Er = it.reshape(P, K), c.reshape(P, K), np.where(c, E, np.inf).reshape(P, K)
    win = cr & (Er <= e0[:, None] + 1e-9)
    late = win.any(1) & ~(win & (itr <= opt.patience)).any(1)
    print(f"points whose winner comes only from rows converging after {opt.patience} iterations: {late.sum()} "
          f"(their iterations {sorted(itr[win & late[:, None]].tolist())})")
    # cycles: an unconverged residual history that repeats with a period <= 40 (1e-9 relative) at its end
    cyc = 0
    for r in np.flatnonzero(~c & (it <= a.keep)):
        h = H[r, :it[r]]
        for per in range(1, 41):
            tail = max(2 * per, 10)
            if len(h) < per + tail:
                break
            if np.all(np.abs(h[-tail:] - h[-tail - per:-per]) <= 1e-9 * np.abs(h[-tail - per:-per])):
                cyc += 1
                break
    print(f"unconverged rows whose residual history ends in a cycle of period <= 40: {cyc} of "
          f"{int((~c & (it <= a.keep)).sum())}")
    # duplicates: every converged row beyond the fastest one of its energy group (1e-9) at its point
    dup = 0
    for p in range(P):
        ks = np.flatnonzero(cr[p])
        order = ks[np.argsort(Er[p, ks])]
        start = 0
        for j in range(1, len(order) + 1):
            if j == len(order) or Er[p, order[j]] - Er[p, order[start]] > 1e-9:
                grp = itr[p, order[start:j]]
                dup += grp.sum() - grp.min()
                start = j
    print(f"upper bound for dropping duplicate converged seeds at their first iteration: {dup / tot:.3f} of the "
          f"iterations")
    print("stop rule: best residual of the last W iterations not below F x the best before them")
    run = np.minimum.accumulate(H, axis=1)
    for W, Fr in [(20, 0.5), (30, 0.5), (40, 0.5), (40, 0.9), (60, 0.5), (60, 0.9)]:
        recent = np.lib.stride_tricks.sliding_window_view(H, W, axis=1).min(-1)  # window ending at i = W..keep
        i = np.arange(W + 1, a.keep + 1)  # 1-based iteration after which the rule is checked
        bad = (recent[:, 1:] >= Fr * run[:, i - W - 1]) & (i[None, :] <= np.minimum(it, a.keep)[:, None])
        bad &= ~(c[:, None] & (i[None, :] == it[:, None]))  # a row converging at i is not stopped at i
        first = np.where(bad.any(1), i[np.argmax(bad, axis=1)], np.iinfo(np.int64).max)
        stop = np.minimum(it, first)
        lost = c & (stop < it)
        e1 = lowest(c & ~lost)
        both = np.isfinite(e0) & np.isfinite(e1)
        d = np.abs(e1[both] - e0[both])
        print(f"  W={W} F={Fr}: iterations left {stop.sum() / tot:.3f}; converged rows lost {lost.sum()}; points "
              f"losing every converged seed {int((np.isfinite(e0) & ~np.isfinite(e1)).sum())}; winning energy "
              f"changed (> 1e-9) at {int((d > 1e-9).sum())} points, max {d.max():.2e}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
