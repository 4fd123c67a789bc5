"""Maps and filling curves with quantum Monte Carlo: one run per point, all points in parallel.

:func:`phasemap.scan.phase_map` and :func:`phasemap.scan.filling_curve` call
:func:`evaluate_points` for ``method="qmc:..."``. Every point carries its one-sigma errors
(``error_filling``, ``error_energy``, ``error_SK_per_site``, ``error_stiffness``, ...) and its
integrated autocorrelation times; a point whose bins did not decorrelate is ``unconverged``
(``decorrelated`` False) and never classified. No boundary bisection: the grid is the answer.
"""

from __future__ import annotations

import numpy as np

__all__ = ["evaluate_points", "POINT_KEYS"]

#: Monte Carlo estimates stored per point (value, error_<key>, tau_<key>).
POINT_KEYS = ("energy", "filling", "compressibility", "S(K)/N", "binder", "stiffness")


def _var(k: str) -> str:
    return {"S(K)/N": "SK_per_site"}.get(k, k)


def evaluate_points(method, batch, options: dict, thresholds=None, executor=None, checkpoint=None,
                    progress: bool = False) -> dict:
    """Flat per-point arrays (keys of ``phasemap.scan.evaluate``) from one QMC run per point
    (one chunk per point: ``executor``, ``checkpoint``, ``progress`` as in
    :func:`phasemap.qmc.scaling.run_many`; seeds from the point index, so any executor and a
    resumed run give the same numbers)."""
    from .scaling import job_seed, run_many

    d = dict(options)
    workers = d.pop("workers", None)
    seed = int(d.pop("seed", 0) or 0)
    if d.get("cluster") is None and d.get("size") is None:
        d["cluster"] = method.config_default_arg(batch.model(0))
    if isinstance(d.get("cluster"), str) and "x" in d["cluster"]:
        d.update(method.parse_arg(d.pop("cluster")))
    Tb = None if batch.T is None else np.asarray(batch.T, float)
    jobs = []
    for p in range(batch.size):
        kw = {k: v for k, v in d.items() if v is not None}
        if Tb is not None and Tb[p] > 0:
            kw["T"] = float(Tb[p])
        kw["seed"] = job_seed(seed, p)
        jobs.append((batch.model(p), kw))
    results = run_many(jobs, workers, executor, checkpoint, progress, desc="Monte Carlo points")
    sols = [r.to_solution(thresholds) for r in results]
    P = batch.size
    out = {
        "energy": np.array([s.energy for s in sols]), "filling": np.array([s.filling for s in sols]),
        "densities": np.array([s.densities for s in sols]), "condensate": np.array([s.condensate for s in sols]),
        "converged": np.array([s.converged for s in sols]), "iterations": np.array([s.iterations for s in sols]),
        "residual": np.array([s.residual for s in sols]), "seed": np.array([job_seed(seed, p) for p in range(P)]),
        "phase": np.array([s.phase for s in sols]).astype(str), "label": np.array([s.label for s in sols]).astype(str),
        "pattern": np.array([s.pattern for s in sols]).astype(str),
        "sq_max": np.array([s.order.get("sq_max", np.nan) for s in sols]),
        "condensate_max": np.full(P, np.nan), "contrast": np.zeros(P),
        "top_weight": np.full(P, np.nan), "gap_to_next_branch": np.full(P, np.nan),
        "cutoff": np.zeros(P, bool),  # hard-core only: no occupation cut-off
        "decorrelated": np.array([bool(r.decorrelated) for r in results]),
        "T": np.array([r.T for r in results]), "n_sites": np.array([r.n_sites for r in results]),
    }
    for k in POINT_KEYS:
        est = [r.estimates.get(k) for r in results]
        out[_var(k) if k != "energy" and k != "filling" and k != "compressibility" else f"qmc_{k}"] = \
            np.array([e.value if e else np.nan for e in est])
        out[f"error_{_var(k)}"] = np.array([e.error if e else np.nan for e in est])
        out[f"tau_{_var(k)}"] = np.array([e.tau if e else np.nan for e in est])
    for k in ("qmc_energy", "qmc_filling"):
        out.pop(k, None)
    out["compressibility_qmc"] = out.pop("qmc_compressibility")
    return out
