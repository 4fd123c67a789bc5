"""``phasemap cluster-scaling``: a quantity for a sequence of CMF clusters, extrapolated in λ.

Examples
--------
Square-lattice n = 1 Mott lobe tip::

    phasemap cluster-scaling --lattice square --U 1 --n-max 3 --t 0.01 --quantity lobe-tip \\
        --clusters sq1,sq2x1,sq2x2,sq2x3,sq3x3 --fit-min-lambda 0.5 --out tip

Superfluid -> supersolid at half filling on the triangular lattice::

    phasemap cluster-scaling --lattice triangular --V 1 --mu 3 --t 0.1 --quantity transition \\
        --axis t --lo 0.05 --hi 0.35 --order contrast --clusters tri3-sd,tri3,tri6,tri9,tri12 \\
        --option patterns=sqrt3 --option n_random=0 --out ss

A TOML file (``--config``) may hold ``[model]`` (Model fields) and ``[scaling]`` (the option
names below without dashes, ``clusters`` as a list, ``options`` as a table).
"""

from __future__ import annotations

import argparse
import contextlib
import json
import math
import os
import sys

from ..model import ConfigError, Model, check_keys
from ._common import add_model_options, model_overrides

__all__ = ["register", "run"]

_SCALING_KEYS = ("quantity", "clusters", "axis", "lo", "hi", "order", "threshold", "xtol", "filling",
                 "fit_min_lambda", "absolute", "options", "reference")


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "cluster-scaling", help="cluster mean field for a sequence of clusters, extrapolated linearly in λ",
        description="Compute a quantity (Mott lobe tip, transition point along an axis, or an order "
                    "parameter) with cluster mean field for several clusters and extrapolate linearly in "
                    "λ = N_B/(N_C z/2) to λ = 1. The extrapolation is a heuristic; mean-field-type methods "
                    "overestimate order.",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        epilog="library clusters: " + ", ".join(_library()))
    g = p.add_argument_group("model")
    g.add_argument("--config", help="TOML file with [model] and [scaling] tables")
    add_model_options(g, overrides=True)  # only the options given override the config's [model]
    s = p.add_argument_group("scaling")
    s.add_argument("--quantity", choices=("lobe-tip", "transition", "order"), help="default: transition")
    s.add_argument("--clusters", help="comma-separated library names (default: all of the lattice up to 12 sites)")
    s.add_argument("--axis", help="transition: scan axis (t, mu, V, t_d1, ...)")
    s.add_argument("--lo", help="transition: lower end of the bracket")
    s.add_argument("--hi", help="transition: upper end of the bracket")
    s.add_argument("--order", help="transition/order: contrast, condensate, sq_max or filling (default contrast)")
    s.add_argument("--threshold", help="transition: order-parameter threshold (default 1e-3)")
    s.add_argument("--xtol", help="transition: bracket width (default 1e-3)")
    s.add_argument("--absolute", action="store_true", help="transition: bracket in absolute units, not ratios to the model scale")
    s.add_argument("--filling", help="lobe-tip: Mott filling (default 1)")
    s.add_argument("--fit-min-lambda", dest="fit_min_lambda", help="only clusters with λ >= this enter the fit")
    s.add_argument("--reference", help="outside reference value for the figure, VALUE or VALUE:LABEL")
    s.add_argument("--option", action="append", default=[], metavar="KEY=VALUE",
                   help="cluster mean-field option (CMFOptions field), repeatable")
    o = p.add_argument_group("output")
    o.add_argument("--out", help="output folder (scaling.json, scaling.csv, scaling.png, scaling.pdf)")
    o.add_argument("--json", action="store_true", help="print the result as JSON on stdout")
    from .run import add_job_options

    add_job_options(o, "cluster scaling")
    p.set_defaults(func=run)


def _library():
    from ..cmf.clusters import LIBRARY

    return list(LIBRARY)


def _num(name, v, cast=float):
    import math

    if isinstance(v, bool):
        raise ConfigError(f"{name}: expected a number, got {v!r}")
    try:
        x = cast(v)
    except (TypeError, ValueError, OverflowError):
        raise ConfigError(f"{name}: expected a{'n integer' if cast is int else ' number'}, got {v!r}") from None
    if cast is float and not math.isfinite(x):
        raise ConfigError(f"{name}: must be a finite number, got {v!r}")
    return x


def _value(text: str):
    """Option value: int, float, bool, None, comma list (tuple of str) or str."""
    low = text.strip().lower()
    if low in ("true", "false"):
        return low == "true"
    if low in ("none", "null"):
        return None
    for cast in (int, float):
        try:
            return cast(text)
        except ValueError:
            pass
    if "," in text:
        return tuple(x.strip() for x in text.split(",") if x.strip())
    return text


def _gather(args):
    model_d, sc = {}, {}
    if args.config:
        import tomllib

        from ..store import read_input_text

        try:
            cfg = tomllib.loads(read_input_text(args.config, "config"))
        except tomllib.TOMLDecodeError as e:
            raise ConfigError(f"config: {args.config!r} is not valid TOML: {e}") from None
        check_keys("config", cfg, ("model", "scaling"))
        model_d = dict(cfg.get("model", {}))
        sc = dict(cfg.get("scaling", {}))
        check_keys("scaling", sc, _SCALING_KEYS)
    model_d.update(model_overrides(args))
    model = Model.from_dict(model_d)
    for k in ("quantity", "axis", "order"):
        if getattr(args, k) is not None:
            sc[k] = getattr(args, k)
    for k in ("lo", "hi", "threshold", "xtol", "fit_min_lambda"):
        if getattr(args, k) is not None:
            sc[k] = _num(k, getattr(args, k))
    if args.filling is not None:
        sc["filling"] = _num("filling", args.filling, int)
    if args.absolute:
        sc["absolute"] = True
    if args.clusters is not None:
        sc["clusters"] = [c.strip() for c in args.clusters.split(",") if c.strip()]
    if args.reference is not None:
        val, _, lab = args.reference.partition(":")
        sc["reference"] = [_num("reference", val), lab or "reference"]
    opts = dict(sc.get("options", {}))
    for item in args.option:
        key, eq, val = item.partition("=")
        if not eq:
            raise ConfigError(f"--option: expected KEY=VALUE, got {item!r}")
        opts[key.strip()] = _value(val)
    if isinstance(opts.get("patterns"), str):
        opts["patterns"] = (opts["patterns"],)
    sc["options"] = opts
    return model, sc


def _validate(model, sc):
    from ..cmf.clusters import get_cluster, library_names
    from ..cmf.scaling import ORDERS, QUANTITIES
    from ..cmf.selfconsistency import CMFOptions
    from ..params import axis_names

    q = sc.get("quantity", "transition")
    if q not in QUANTITIES:
        raise ConfigError(f"quantity: unknown {q!r}; allowed: {', '.join(QUANTITIES)}")
    clusters = sc.get("clusters") or [c for c in library_names(model.lattice)
                                      if get_cluster(c).n_sites <= 12 and not c.endswith("-sd")]
    if len(clusters) < 2:
        raise ConfigError("clusters: give at least two clusters for a fit")
    cls = [get_cluster(c, model.lattice) for c in clusters]
    check_keys("cmf options", sc["options"], CMFOptions.__dataclass_fields__)
    order = sc.get("order", "contrast")
    if order not in ORDERS:
        raise ConfigError(f"order: unknown order parameter {order!r}; allowed: {', '.join(ORDERS)}")
    if q == "transition":
        for k in ("axis", "lo", "hi"):
            if k not in sc:
                raise ConfigError(f"--{k}: required for quantity 'transition'")
        if sc["axis"] not in axis_names(model):
            raise ConfigError(f"axis: unknown {sc['axis']!r}; allowed: {', '.join(axis_names(model))}")
        if not sc["lo"] < sc["hi"]:
            raise ConfigError(f"lo, hi: need lo < hi, got {sc['lo']:g}, {sc['hi']:g}")
    if q == "lobe-tip" and model.hardcore:
        raise ConfigError("quantity lobe-tip: needs soft-core bosons (give --U and --n-max)")
    if q == "lobe-tip":
        n = sc.get("filling", 1)
        if isinstance(n, bool) or not isinstance(n, int) or not 1 <= n < model.n_max:
            raise ConfigError(f"filling: the Mott lobe filling must be an integer >= 1 and < n_max = {model.n_max} "
                              f"(the lobe n = n_max is the saturated cut-off), got {n!r}")
    for k, lo, hi in (("threshold", 0.0, math.inf), ("xtol", 0.0, math.inf), ("fit_min_lambda", -math.inf, 1.0)):
        if k in sc:
            x = _num(k, sc[k])
            if not (lo < x <= hi if k != "fit_min_lambda" else x <= hi):
                rng = f"> {lo:g}" if k != "fit_min_lambda" else f"<= {hi:g}"
                raise ConfigError(f"{k}: must be {rng}, got {x:g}")
    if q == "lobe-tip" and max(model.t) <= 0:
        raise ConfigError("quantity lobe-tip: give a nonzero --t (it fixes the hopping ratios between families)")
    from ..cmf.guard import check_budget

    budget = {k: sc["options"][k] for k in ("memory_mb", "max_dim") if k in sc["options"]}
    for c in cls:
        if q != "lobe-tip":
            check_budget(c, model.n_max, budget.get("memory_mb", CMFOptions.memory_mb),
                         budget.get("max_dim", CMFOptions.max_dim))
    return q, clusters


def run(args) -> int:
    from ..store import check_output_folder, output_lock

    if args.out:
        check_output_folder(args.out)  # before any work
    model, sc = _gather(args)
    q, clusters = _validate(model, sc)
    with output_lock(args.out) if args.out else contextlib.nullcontext():
        return _run(args, model, sc, q, clusters)


def _checkpoint(args, model, clusters, q, kw):
    """Per-cluster checkpoint in OUT/.checkpoint/scaling (None without --out)."""
    if not args.out:
        return None
    from .. import __version__
    from ..store import job_checkpoint

    params = {"model": model.to_dict(), "clusters": [str(c) for c in clusters], "quantity": q, "options": kw,
              "version": __version__}
    ck = job_checkpoint(os.path.join(args.out, ".checkpoint", "scaling"), params, args.resume, args.restart)
    if ck.chunks():
        print(f"cluster scaling: resuming, {len(ck.chunks())} finished cluster(s) taken from the checkpoint",
              file=sys.stderr)
    return ck


def _run(args, model, sc, q, clusters) -> int:
    from ..cmf.scaling import cluster_scaling, plot_scaling

    kw = dict(sc["options"])
    if q == "transition":
        kw.update(axis=sc["axis"], lo=sc["lo"], hi=sc["hi"], order=sc.get("order", "contrast"),
                  threshold=sc.get("threshold", 1e-3), xtol=sc.get("xtol", 1e-3),
                  relative=not sc.get("absolute", False))
    elif q == "order":
        kw["order"] = sc.get("order", "contrast")
    else:
        kw["filling"] = sc.get("filling", 1)
    ref = sc.get("reference")
    ck = _checkpoint(args, model, clusters, q, kw)
    from .run import close_executor, job_executor

    ex = job_executor(args)
    try:
        res = cluster_scaling(model, clusters, q, fit_min_lambda=sc.get("fit_min_lambda"),
                              reference=tuple(ref) if ref else None, executor=ex, checkpoint=ck,
                              progress=not (args.quiet or args.json), **kw)
    finally:
        close_executor(ex)
    from ..store import atomic_write_text, dumps_json, provenance, save_csv

    prov = provenance(model, "cmf", sc["options"], quantity=q, clusters=list(res.clusters))
    d = {**prov, **res.to_dict(), "model": prov["model"]}
    if args.json:
        json.dump(d, sys.stdout, indent=2)
        sys.stdout.write("\n")
    else:
        print(f"model: {model.describe()}")
        print(res.table())
    if args.out:
        os.makedirs(args.out, exist_ok=True)
        base = os.path.join(args.out, "scaling")
        atomic_write_text(base + ".json", dumps_json(d) + "\n")
        save_csv(base + ".csv", {"cluster": list(res.clusters) + ["lambda->1"],
                                 "lambda": [float(x) for x in res.lam] + [1.0],
                                 res.label: [float(x) for x in res.values] + [float(res.extrapolated)],
                                 "in_fit": [str(int(m)) for m in res.fit_mask] + [""]}, prov)
        plot_scaling(res, base)
        if ck is not None:
            ck.remove()
            with contextlib.suppress(OSError):
                os.rmdir(os.path.join(args.out, ".checkpoint"))
        if not args.json:
            print(f"wrote {base}.json, .csv, .png, .pdf")
    return 0
