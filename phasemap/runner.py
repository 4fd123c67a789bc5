"""Execute a validated run config: compute every scan, then write data, figures and config.

Output folder layout for a scan named ``NAME`` of a config ``CFG.toml``::

    NAME.nc              labelled data (maps and curves), NetCDF-4
    NAME.csv             curves only: one row per chemical potential, metadata in the header
    NAME_plateaus.csv    curves only: plateau table (fraction, label, mu_lo, mu_hi, width, edge statuses:
                         refined / grid / unbounded / beyond the window / next to an unconverged
                         point; bounds and ``flagged`` for edges that are not results)
    NAME_jumps.csv       curves only: jumps (mu, n_below, n_above, from, to, status: found or not)
    NAME.png, NAME.pdf   figures
    CFG.config.toml      the resolved configuration (all defaults filled in)
    .checkpoint/NAME/    per-chunk checkpoint of an unfinished map or curve (removed when done)

All scans are computed before the first file is written, and each file is written atomically,
so a failed run leaves no half-written results.
"""

from __future__ import annotations

import json
import time
from pathlib import Path

import numpy as np

from .config import RunConfig, ScanSpec, dumps_toml
from .store import atomic_write_text, check_output_folder, job_checkpoint, output_lock, save_csv, save_netcdf

__all__ = ["run", "checkpoint_params", "curve_tables"]

CHECKPOINT_DIR = ".checkpoint"


def checkpoint_params(cfg: RunConfig, scan: ScanSpec) -> dict:
    """Everything that fixes a map's per-chunk results (hashed by :class:`ChunkStore`)."""
    from . import __version__

    return {"model": cfg.model.to_dict(), "scan": scan.to_dict(), "solver": cfg.options(scan),
            "thresholds": cfg.thresholds.to_dict(), "version": __version__}


def _run_attrs(cfg: RunConfig, scan: ScanSpec) -> dict:
    attrs = {"scan_name": scan.name, "config_name": cfg.name,
             "run_config": dumps_toml(cfg.to_dict())}
    for k, v in cfg.meta.items():
        attrs[f"meta_{k}"] = int(v) if isinstance(v, bool) else v
    if cfg.meta.get("invented"):
        attrs["invented"] = 1
        attrs["caution_invented"] = "INVENTED scenario: parameters are not from any real material"
    return attrs


#: points per checkpoint chunk of a filling curve (any value gives the same result)
CURVE_CHUNK = 64


def _compute(cfg: RunConfig, scan: ScanSpec, out: Path, resume: bool, restart: bool, progress: bool, executor,
             log=None):
    from .scan import filling_curve, phase_map

    opts = cfg.options(scan)
    folder = out / CHECKPOINT_DIR / scan.name
    ck = job_checkpoint(folder, checkpoint_params(cfg, scan), resume, restart)
    done = ck.chunks()
    if done and log is not None:
        log(f"{scan.name}: resuming, {len(done)} finished chunk(s) taken from the checkpoint")
    if scan.kind == "curve":
        curve = filling_curve(cfg.model, mu=scan.x.values, relative=scan.relative, method=scan.method,
                              options=opts, thresholds=cfg.thresholds, refine=scan.refine,
                              tol=scan.edge_tol, jump_tol=scan.jump_tol, progress=progress, executor=executor,
                              checkpoint=ck, chunk=CURVE_CHUNK)
        return curve.dataset, curve, ck
    ds = phase_map(cfg.model, x=(scan.x.name, scan.x.values), y=(scan.y.name, scan.y.values),
                   relative=scan.relative, method=scan.method, options=opts, thresholds=cfg.thresholds,
                   refine=scan.refine, refine_tol=scan.refine_tol, progress=progress, checkpoint=ck,
                   chunk=scan.chunk, adaptive=scan.adaptive, coarse=scan.coarse, steep=scan.steep,
                   finest=scan.finest, executor=executor)
    return ds, None, ck


def curve_tables(ds) -> tuple[dict, dict, dict]:
    """Columns of the per-point, plateau and jump CSV tables of a filling-curve Dataset."""
    point_cols = {"mu": ds["mu"].values}
    for k in ("filling", "energy", "label", "phase_code", "converged", "condensate_max", "contrast", "sq_max",
              "iterations", "residual", "top_weight", "cutoff"):
        if k in ds:
            point_cols[k] = ds[k].values
    plateaus = json.loads(ds.attrs.get("plateaus", "[]"))
    jumps = json.loads(ds.attrs.get("jumps", "[]"))
    pl_keys = ("fraction", "filling", "label", "mu_lo", "mu_hi", "width", "lo_status", "hi_status", "mu_lo_bound",
               "mu_hi_bound", "width_at_least", "flagged")
    text = ("fraction", "label", "lo_status", "hi_status")
    pl = {k: np.array([p.get(k, "") for p in plateaus], dtype=object if k in text else float) for k in pl_keys}
    j_keys = ("mu", "n_below", "n_above", "from", "to", "status")
    jm = {k: np.array([j.get(k, "found") for j in jumps], dtype=object if k in ("from", "to", "status") else float)
          for k in j_keys}
    return point_cols, pl, jm


def _csv_meta(attrs: dict) -> dict:
    meta = {}
    for k, v in attrs.items():
        if k == "run_config":
            continue  # multi-line; the resolved config is written beside the data
        if isinstance(v, str) and v[:1] in "[{":
            try:
                v = json.loads(v)
            except json.JSONDecodeError:
                pass
        meta[k] = v
    return meta


def _write(cfg: RunConfig, scan: ScanSpec, ds, out: Path) -> list[Path]:
    from .plot import plot_filling_curve, plot_phase_map, save_figure

    stem = out / scan.name
    paths = [save_netcdf(ds, stem.with_suffix(".nc"))]
    title = cfg.meta.get("title")
    if scan.kind == "curve":
        pts, pl, jm = curve_tables(ds)
        meta = _csv_meta(ds.attrs)
        paths.append(save_csv(stem.with_suffix(".csv"), pts, meta))
        paths.append(save_csv(out / f"{scan.name}_plateaus.csv", pl, {"table": "plateaus", **meta}))
        paths.append(save_csv(out / f"{scan.name}_jumps.csv", jm, {"table": "first-order jumps", **meta}))
    if cfg.output.figures:
        if scan.kind == "map":
            fig = plot_phase_map(ds, width=cfg.output.width, title=title)
        else:
            fig = plot_filling_curve(ds, width=cfg.output.width, title=title)
        paths += save_figure(fig, stem, cfg.output.formats, cfg.output.dpi)
    return paths


def _summary(scan: ScanSpec, ds, curve) -> str:
    from .scan import plateau_text

    flags = json.loads(ds.attrs.get("flags", "[]"))
    tail = "".join(f"\n  FLAG: {f}" for f in flags)
    if curve is not None:
        pl = ", ".join(plateau_text(p) for p in curve.plateaus)
        found = len(curve.found_jumps)
        odd = len(curve.jumps) - found
        jumps = f"{found} first-order jump(s)" + (f" (+{odd} next to unconverged points: not found)" if odd else "")
        return f"{scan.name}: {len(curve.mu)} points; plateaus {pl or 'none'}; {jumps}{tail}"
    labels, counts = np.unique(ds["label"].values, return_counts=True)
    parts = ", ".join(f"{lab} {c}" for lab, c in sorted(zip(labels, counts), key=lambda x: -x[1]))
    nb = ds.sizes.get("bpoint", 0)
    return f"{scan.name}: {ds['label'].size} points ({parts}); {nb} refined boundary points{tail}"


def run(cfg: RunConfig, out=None, resume: bool = False, restart: bool = False, progress: bool = True,
        log=print, command: str | None = None, executor: str | None = None, scheduler: str | None = None) -> list[Path]:
    """Compute every scan of ``cfg`` and write results into the output folder.

    Parameters
    ----------
    cfg : RunConfig
        Validated configuration (:func:`phasemap.config.load_config`).
    out : path-like, optional
        Output folder (default: ``cfg.output.folder``, relative to the working directory).
    resume : bool
        Continue a map from the checkpoint of an interrupted run with identical parameters.
    restart : bool
        Discard an existing checkpoint and start over.
    progress : bool
        tqdm progress bars on stderr.
    log : callable
        Receives one-line progress/summary messages.
    command : str, optional
        Recorded in the folder's lock (default: the command line); see
        :func:`phasemap.store.output_lock`.
    executor, scheduler : str, optional
        Override ``[run] executor`` / ``[run] scheduler`` (:mod:`phasemap.executor`); results
        are identical whatever runs the chunks.

    Returns
    -------
    list of pathlib.Path
        Every file written.

    Raises
    ------
    ConfigError
        Output folder unusable or in use by a live run (single-writer lock), or a checkpoint of
        a different/unfinished scan in the way.
    """
    flag = "--out" if out is not None else "[output] folder"
    out = check_output_folder(out if out is not None else cfg.output.folder, flag)
    with output_lock(out, command, flag=flag):
        from .executor import get_executor

        spec = executor or cfg.executor
        sched = scheduler or cfg.scheduler
        ex = spec if (spec == "auto" and not sched) else get_executor(spec, sched, "--executor")
        try:
            if not isinstance(ex, str):
                log(f"executor: {ex.describe()}")
            return _run_locked(cfg, out, resume, restart, progress, log, ex)
        finally:
            if not isinstance(ex, str):
                ex.close()


def _run_locked(cfg, out, resume, restart, progress, log, executor="auto"):
    results = []
    for scan in cfg.scans:
        t0 = time.perf_counter()
        ds, curve, ck = _compute(cfg, scan, out, resume, restart, progress, executor, log)
        ds.attrs.update(_run_attrs(cfg, scan))
        ds.attrs["wall_time_s"] = round(time.perf_counter() - t0, 3)
        log(_summary(scan, ds, curve) + f" ({time.perf_counter() - t0:.1f} s)")
        results.append((scan, ds, ck))
    paths = []
    for scan, ds, ck in results:
        paths += _write(cfg, scan, ds, out)
    from .store import provenance

    prov = provenance(cfg.model, ",".join(dict.fromkeys(s.method for s in cfg.scans)))
    header = (f"resolved configuration written by phasemap (source: {cfg.source or cfg.name})\n"
              + "".join(f"{k}: {json.dumps(v)}\n" for k, v in prov.items() if k != "model")
              + ("INVENTED scenario: not a real material\n" if cfg.meta.get("invented") else ""))
    paths.append(atomic_write_text(out / f"{cfg.name}.config.toml", dumps_toml(cfg.to_dict(), header)))
    for _, _, ck in results:
        if ck is not None:
            ck.remove()
    try:
        (out / CHECKPOINT_DIR).rmdir()
    except OSError:
        pass
    return paths
