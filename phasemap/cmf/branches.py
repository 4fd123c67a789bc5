r"""Branch tracking along scan lines for the per-point cluster mean-field path.

The per-point path with continuation (:func:`phasemap.cmf.selfconsistency._solve_points`)
solves every seed at every point: a seed continues its own converged state of the previous
point when that state kept the seed's character, otherwise it starts again from the seed.
Along a line most seeds land on one of a few distinct states (branches), and the seeds that
lost their character (a solid seed in the superfluid) restart from scratch at every point and
wander until the stall test stops them — most of the cost on tri12.

Here (option ``branch_every = K > 0``) the full seed set runs only at *full points*; in between
only one row per distinct branch of the last full point is solved (the branch's lowest seed
that keeps its character, continued with that seed's own history: the same start as the
per-point path gives it), and its end state is reported for every seed of the branch. A
point is a full point when

* it starts the batch, or K points passed since the last full point;
* the line bends: the parameter step to it differs from the step before (new scan line of
  a map, or any change of direction or length);
* a branch is lost: its row did not converge, lost the character of every seed on it, or
  landed on another branch;
* the lowest branch changes (first-order crossing of two tracked branches);
* the lowest branch has no condensate: a zero-field state (insulator, solid) stays a fixed
  point of the iteration past its instability, where the full path's condensed seeds leave it.

After a full point that follows branch-only points, if the full seed set found a state lower
than every tracked branch's row there, a new state appeared somewhere since the last full
point: those points are solved again with the full seed set (rewind), so the crossing is
placed where the full path places it.

Not solved rows (seeds that restarted from their seed between full points) are reported with
``iterations = 0``, ``converged = False``, energy ``inf`` and NaN densities and condensates.

What it cannot see: a state that appears and disappears again between two full points
without ever winning at a full point. ``tests/test_cmf_branches.py`` checks winning energies
and phase labels against the full seed set on lines through solid, supersolid and superfluid,
across first-order solid-superfluid transitions (common practice of continuation methods,
no source).
"""

from __future__ import annotations

import numpy as np

__all__ = ["track_branches", "SAME_STATE", "ZERO_FIELD"]

#: two converged rows are one branch when their (n, phi) agree to this and energies to 1e-9
SAME_STATE = 1e-6
#: a lowest branch whose condensates are all below this is not tracked (full seed set)
ZERO_FIELD = 1e-6


def _state(row):
    return np.concatenate([row["n"], row["phi"]])


def _same(a, b) -> bool:
    return (abs(a["energy"] - b["energy"]) <= 1e-9 * max(1.0, abs(a["energy"]))
            and float(np.abs(_state(a) - _state(b)).max()) <= SAME_STATE)


def _group(rows):
    """Branches of one point: lists of seed indices whose converged rows are one state."""
    out = []
    for k, r in enumerate(rows):
        if r is None or not r["converged"]:
            continue
        for b in out:
            if _same(rows[b[0]], r):
                b.append(k)
                break
        else:
            out.append([k])
    return out


def _lost(res, members, keeps, seeds):
    """Why the branch rows of a point cannot stand for the full seed set (None: they can)."""
    if not res or any(not r["converged"] for r in res):
        return "unconverged branch"
    if any(not any(keeps(seeds[k], r["n"], r["phi"]) for k in m) for r, m in zip(res, members)):
        return "branch lost its character"
    if any(_same(res[i], res[j]) for i in range(len(res)) for j in range(i)):
        return "branches merged"
    return None


def _winner(rows, etol=1e-10):
    """Seed index of the lowest converged row (ties to the earliest), -1 if none: ``MFBatchResult.best``."""
    E = np.array([r["energy"] if r is not None and r["converged"] else np.inf for r in rows])
    if not np.isfinite(E).any():
        return -1
    e0 = E.min()
    return int(np.argmax(E <= e0 + etol * max(1.0, abs(e0))))


def _bends(batch, p, step) -> bool:
    if p < 2:
        return False
    s1, s2 = step(batch, p, p - 1), step(batch, p - 1, p - 2)
    return bool(np.abs(s1 - s2).max() > 1e-9 * max(np.abs(s1).max(), np.abs(s2).max(), 1e-300))


def track_branches(batch, seeds, every: int, solve, start, keeps, step):
    """Rows ``rows[p][k]`` (end-state dicts or None = not solved) along ``batch``.

    Parameters
    ----------
    batch : ParamBatch
    seeds : list of Seed
    every : int
        Full seed set at least every ``every`` points.
    solve : callable ``(jobs) -> rows``
        Solves jobs ``(p, k, x0, v0)`` (the per-point path's row solver).
    start : callable ``(sd, p, prev, pp, k) -> (x0, v0)``
        The per-point path's start of seed ``sd`` at point ``p`` after its rows ``prev``, ``pp``.
    keeps : callable ``(sd, n, phi) -> bool``
        Whether a state kept the seed's character (continuation rule of the per-point path).
    step : callable ``(batch, p, q) -> array``
        Parameter step from point ``q`` to ``p``.

    Returns
    -------
    rows, stats
        ``stats``: points solved with the full seed set (``full``, rewound ones counted again)
        and with branch rows (``branch``), ``rewinds``, rows and iterations solved, and the
        count of each reason for an unscheduled full point.
    """
    P, K = batch.size, len(seeds)
    rows: list[list] = [[None] * K for _ in range(P)]
    stats = {"full": 0, "branch": 0, "rewinds": 0, "rows": 0, "iterations": 0}

    def solve_counted(jobs):
        res = list(solve(jobs))
        stats["rows"] += len(res)
        stats["iterations"] += int(sum(r["iterations"] for r in res))
        return res

    def prev_rows(p, k):
        prev = rows[p - 1][k] if p >= 1 else None
        pp = rows[p - 2][k] if p >= 2 else None
        return prev, pp

    def run_full(p):
        jobs = [(p, k, *start(sd, p, *prev_rows(p, k), k)) for k, sd in enumerate(seeds)]
        rows[p] = solve_counted(jobs)
        stats["full"] += 1

    def continued(p, k):
        """Whether seed k continues its state of point p - 1 (the per-point path's rule)."""
        prev = rows[p - 1][k] if p >= 1 else None
        return prev is not None and prev["converged"] and keeps(seeds[k], prev["n"], prev["phi"])

    last_full, branches, win_branch = -1, None, -1  # branches of the last full point; index of the lowest
    redo_until = -1  # rewind: points up to here are solved with the full seed set
    p = 0
    while p < P:
        full = branches is None or p - last_full >= every or p <= redo_until
        if not full and _bends(batch, p, step):
            full = True
            stats["line bend"] = stats.get("line bend", 0) + 1
        if not full:
            # one row per branch: its lowest seed that still continues the branch
            reps, members, index = [], [], []
            for i, b in enumerate(branches):
                live = [k for k in b if continued(p, k)]
                if live:
                    reps.append(live[0])
                    members.append(live)
                    index.append(i)
            jobs = [(p, k, *start(seeds[k], p, *prev_rows(p, k), k)) for k in reps]
            res = solve_counted(jobs) if jobs else []
            reason = _lost(res, members, keeps, seeds)
            if reason is None:
                for r, m in zip(res, members):
                    for k in m:
                        rows[p][k] = r
                kw = _winner(rows[p])  # ties to the earliest seed, as the full path's winner
                w = next(j for j, m in enumerate(members) if kw in m)
                # the lowest branch changed (full seed set here), or it carries no condensate: a
                # zero-field state stays a fixed point past its instability, where the full path's
                # condensed seeds already leave it
                if index[w] != win_branch:
                    reason = "winner"
                elif float(np.max(res[w]["phi"])) < ZERO_FIELD:
                    reason = "zero-field winner"
            if reason is None:
                stats["branch"] += 1
                p += 1
                continue
            rows[p] = [None] * K
            stats[reason] = stats.get(reason, 0) + 1
        after_branch_points = last_full >= 0 and last_full < p - 1 and p > redo_until
        run_full(p)
        if after_branch_points:
            # would the branch rows have given this point's answer? (their start here is the
            # full path's start of each branch's lowest continuing seed)
            reps = [live[0] for live in ([k for k in b if continued(p, k)] for b in branches) if live]
            tracked = min((rows[p][k]["energy"] for k in reps if rows[p][k]["converged"]), default=np.inf)
            kw = _winner(rows[p])
            if kw >= 0 and rows[p][kw]["energy"] < tracked - 1e-10 * max(1.0, abs(tracked)):
                stats["rewinds"] += 1
                redo_until = p
                p = last_full + 1
                continue
        last_full = p
        branches = _group(rows[p])
        kw = _winner(rows[p])
        win_branch = next((i for i, b in enumerate(branches) if kw in b), -1)
        p += 1
    return rows, stats
