"""``phasemap qmc-scaling``: quantum Monte Carlo on several L x L tori, extrapolated to L -> infinity.

Examples
--------
One point, sizes 6, 9, 12 at T = 0.02 V (in parallel over the cores)::

    phasemap qmc-scaling --t 0.08 --V 1 --mu 3 --sizes 6,9,12 --T 0.02 --sweeps 20000 --out ss

A transition along t from Binder-ratio and L*rho_s crossings, beta = 2 L / V::

    phasemap qmc-scaling --t 0.1 --V 1 --mu 3 --sizes 6,9,12 --beta-L 2 --scan t=0.09:0.14:6 --out hf
"""

from __future__ import annotations

import argparse
import sys

from ..model import ConfigError
from ._common import add_model_options, add_sampler_options, finite_float, model_from_args, positive_int

__all__ = ["register", "run"]


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "qmc-scaling", help="quantum Monte Carlo on several sizes: extrapolation to L -> inf, crossings",
        description="Run stochastic series expansion QMC on L x L tori for several L in parallel, "
                    "extrapolate S(K)/N and the stiffness to L -> infinity (weighted fit in 1/L with fit "
                    "uncertainties) and classify with the error bars; with --scan, locate a transition from the "
                    "crossings of the Binder ratio and of L*rho_s of successive sizes.",
        formatter_class=argparse.RawDescriptionHelpFormatter, epilog=__doc__.split("Examples\n--------\n")[1])
    add_model_options(p)
    s = p.add_argument_group("scaling")
    s.add_argument("--sizes", default="6,9,12", help="L of the L x L tori, comma list (default 6,9,12)")
    s.add_argument("--T", type=finite_float, default=None, help="temperature (model unit), the same for every size")
    s.add_argument("--beta-L", type=finite_float, default=None, dest="beta_L",
                   help="instead of --T: beta = BETA_L * L (quantum scaling, z = 1)")
    s.add_argument("--scan", default=None, metavar="AXIS=LO:HI:COUNT",
                   help="scan a model parameter (t, mu, V, t_d1, ...) and locate crossings, e.g. t=0.09:0.14:6 "
                        "or t=0.1,0.11,0.12")
    s.add_argument("--power", type=finite_float, default=1.0, help="fit a + b/L^POWER (default 1)")
    s.add_argument("--nsigma", type=finite_float, default=2.0, help="error bars a signal must clear (default 2)")
    r = p.add_argument_group("Monte Carlo")
    r.add_argument("--sweeps", type=positive_int, default=5000, help="measured sweeps per chain (default 5000)")
    r.add_argument("--thermalization", type=positive_int, default=None, help="warm-up sweeps (default sweeps/5)")
    r.add_argument("--bins", type=positive_int, default=32, help="bins per chain (default 32)")
    r.add_argument("--chains", type=positive_int, default=1, help="independent chains per run (default 1)")
    r.add_argument("--seed", type=int, default=0, help="seed (same seed, same numbers)")
    r.add_argument("--workers", type=positive_int, default=None, help="processes (default: cores)")
    add_sampler_options(r, ladders=False)
    o = p.add_argument_group("output")
    o.add_argument("--out", default=None, help="folder: scaling.json/.csv (or crossing.*), figure .png/.pdf")
    o.add_argument("--json", action="store_true", help="print the result as JSON")
    from .run import add_job_options

    add_job_options(o, "run (finished runs kept, unfinished chains resume mid-chain)")
    p.set_defaults(func=run)


def sampler_options(args) -> dict:
    """--replicas/--mu-step/--T-hot/--fixed-filling as run_qmc options (empty for the default sampler)."""
    return {k: getattr(args, k) for k in ("replicas", "mu_step", "T_hot", "fixed_filling")
            if getattr(args, k, None) is not None}


def parse_scan(text: str):
    """``"t=0.09:0.14:6"`` or ``"t=0.1,0.12"`` -> (axis, values)."""
    import numpy as np

    axis, eq, rest = text.partition("=")
    if not eq or not axis.strip() or not rest.strip():
        raise ConfigError(f"--scan: expected AXIS=LO:HI:COUNT or AXIS=v1,v2,..., got {text!r}")
    try:
        if ":" in rest:
            lo, hi, n = rest.split(":")
            n = int(n)
            if n < 2:
                raise ValueError
            vals = np.linspace(float(lo), float(hi), n)
        else:
            vals = np.array([float(x) for x in rest.split(",")])
    except ValueError:
        raise ConfigError(f"--scan: expected AXIS=LO:HI:COUNT (COUNT >= 2) or AXIS=v1,v2,..., got {text!r}") from None
    if len(vals) < 2:
        raise ConfigError(f"--scan: need at least two values, got {text!r}")
    return axis.strip(), vals


#: checkpoint folder inside --out (as for every resumable job)
CHECKPOINT_DIR = ".checkpoint"


def _checkpoint(args, model, sizes, kw):
    """OUT/.checkpoint/qmc: one chunk per finished run, chains of unfinished runs inside."""
    import os

    from .. import __version__
    from ..store import job_checkpoint

    params = {"model": model.to_dict(), "sizes": list(sizes), "scan": args.scan, "version": __version__,
              "runs": {k: kw[k] for k in ("T", "beta_L", "sweeps", "thermalization", "bins", "chains", "seed")}}
    rx = sampler_options(args)
    if rx:  # runs with replica exchange or a fixed filling are other runs (older checkpoints stay valid)
        params["runs"]["replica_exchange"] = rx
    ck = job_checkpoint(os.path.join(args.out, CHECKPOINT_DIR, "qmc"), params, args.resume, args.restart)
    if ck.chunks():
        print(f"qmc-scaling: resuming, {len(ck.chunks())} finished run(s) taken from the checkpoint",
              file=sys.stderr)
    return ck


def run(args) -> int:
    import contextlib
    from pathlib import Path

    from ..qmc.scaling import finite_size_scaling, parse_sizes, scan_crossing
    from ..store import (check_output_folder, dumps_json, mark_complete, mark_incomplete, output_lock,
                         provenance, save_csv)
    from ..store import atomic_write_text

    if args.T is not None and args.beta_L is not None:
        raise ConfigError("--T and --beta-L: give one of them, not both")
    if args.T is None and args.beta_L is None:
        raise ConfigError("--T / --beta-L: give a temperature (--T) or beta per size (--beta-L)")
    if args.out:
        check_output_folder(args.out)
    model = model_from_args(args)
    sizes = parse_sizes(args.sizes)
    scan = parse_scan(args.scan) if args.scan else None
    kw = dict(sizes=sizes, T=args.T, beta_L=args.beta_L, sweeps=args.sweeps, thermalization=args.thermalization,
              bins=args.bins, chains=args.chains, seed=args.seed, workers=args.workers, nsigma=args.nsigma)
    from ..qmc.geometry import torus

    for L in sizes:  # refuse bad models/sizes before any sampling
        torus(model, size=(L, L))
    print(f"qmc-scaling: sizes {', '.join(f'{L}x{L}' for L in sizes)}, "
          + (f"T = {args.T:g}" if args.T is not None else f"beta = {args.beta_L:g} L")
          + f", {args.sweeps} sweeps x {args.chains} chain(s), seed {args.seed}", file=sys.stderr)
    from .run import close_executor, job_executor

    ex = job_executor(args, None) if (args.executor or args.scheduler) else None  # default: --workers processes
    with output_lock(args.out) if args.out else contextlib.nullcontext(), contextlib.ExitStack() as stack:
        if ex is not None:
            stack.callback(close_executor, ex)
        ck = _checkpoint(args, model, sizes, kw) if args.out else None
        run_kw = dict(kw, executor=ex, checkpoint=ck, progress=not (args.quiet or args.json),
                      run_options=sampler_options(args) or None)
        if scan is None:
            res = finite_size_scaling(model, power=args.power, **run_kw)
            stem, table = "scaling", res.table()
        else:
            res = scan_crossing(model, scan[0], scan[1], **run_kw)
            stem = "crossing"
            table = {"L": [], scan[0]: []}
            for a, L in enumerate(res.sizes):
                for b, x in enumerate(res.values):
                    table["L"].append(L)
                    table[scan[0]].append(float(x))
                    for name, (v, e) in res.curves.items():
                        table.setdefault(name, []).append(float(v[a, b]))
                        table.setdefault(f"{name}_error", []).append(float(e[a, b]))
        data = res.to_dict()
        meta = provenance(model, method="qmc", options={**{k: v for k, v in kw.items() if k != "sizes"},
                                                        **sampler_options(args)},
                          command="qmc-scaling", sizes=sizes, scan=args.scan)
        if args.out:
            out = Path(args.out)
            mark_incomplete(out)
            paths = [atomic_write_text(out / f"{stem}.json", dumps_json({**meta, **data}) + "\n"),
                     save_csv(out / f"{stem}.csv", table, meta)]
            from ..plot import save_figure
            from ..qmc.plots import plot_crossing, plot_scaling

            fig = plot_scaling(res) if scan is None else plot_crossing(res)
            paths += save_figure(fig, out / stem)
            mark_complete(out, paths, **meta)
            ck.remove()
            with contextlib.suppress(OSError):
                (out / CHECKPOINT_DIR).rmdir()
    if args.json:
        print(dumps_json(data))
    else:
        print(res.summary())
        if args.out:
            print(f"wrote {len(paths)} files to {args.out}")
    return 0
