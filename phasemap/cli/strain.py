"""``phasemap strain-check`` and ``phasemap strain-sweep``: the strain workflow on the command line.

Bad input (table, strain outside the table, unknown method, malformed lambda range) -> one
line naming the row/column or option and the allowed values, exit code 2, nothing written.
"""

from __future__ import annotations

import argparse
import contextlib
import os
import sys

from ._common import bounded_int, finite_float

__all__ = ["register"]

CHECK_EPILOG = """examples:
  phasemap strain-check demo --strain 0.08
  phasemap strain-check examples/strain_demo.csv --strain 0.08 --mu 8 --json
  phasemap strain-check examples/strain_demo.csv --strain 0.1 --method cmf --cluster tri12
  phasemap strain-check examples/strain_demo.csv --strain 0.1 --method ed:tri21 --mu 8
  phasemap strain-check demo --strain 0.1 --method cmf-scaled:3+6+9 --mu 8"""

SWEEP_EPILOG = """examples:
  phasemap strain-sweep examples/strain_demo.csv --out strain-out
  phasemap strain-sweep examples/strain_demo.csv --out strain-out --methods mf,cmf:tri6 --lambda 0.7:1.0:4
  phasemap strain-sweep examples/strain_demo.csv --out strain-out --methods mf,ed:tri21
  phasemap strain-sweep demo --out strain-out --methods mf,cmf:tri3 --T-measure 2.0
  phasemap strain-sweep demo --out strain-out --methods mf,cmf:tri12,qmc
  phasemap strain-sweep demo --out strain-out --methods qmc:6+9+12 --qmc sweeps=4000 --qmc every=1
  phasemap strain-sweep demo --out strain-out --methods mf,cmf-scaled      (tri3, tri6, tri9 -> lambda = 1)"""


#: checkpoint folder inside --out (as for maps and curves)
CHECKPOINT_DIR = ".checkpoint"

#: Bounds of the sweep's grid (each strain x mu point is solved for every seed).
MAX_STRAINS, MAX_MU = 1001, 10001



QMC_HELP = ("quantum Monte Carlo setting for qmc methods, repeatable: sizes=6+9+12, T_over_V, T, sweeps, "
            "order_sweeps, bins, rounds, span, every (1: every strain), refine (0: do not measure the skipped "
            "strains at the closing), retry (sweeps factor of the one repeat of a run that did not "
            "decorrelate; 1: none), seed, workers (defaults: "
            "phasemap.strain.qmc_method.QMC_STRAIN_DEFAULTS)")


def _with_qmc(specs, items):
    """Merge ``--qmc KEY=VALUE`` settings into the specs of methods with error bars (qmc); print
    the settings every qmc spec will use (what the user can ask more of)."""
    from ..methods import MethodSpec
    from ..model import ConfigError

    extra = {}
    if items:
        for it in items:
            k, eq, v = it.partition("=")
            if not eq or not k.strip():
                raise ConfigError(f"--qmc: expected KEY=VALUE, got {it!r}")
            k, v = k.strip(), v.strip()
            if k == "sizes":
                extra[k] = v
                continue
            for cast in (int, float):
                try:
                    v = cast(v)
                    break
                except ValueError:
                    pass
            extra[k] = v
    out = []
    for sp in specs:
        if sp.capabilities.error_bars and sp.capabilities.temperature:
            if extra:
                sp = MethodSpec.parse(sp, **extra)
            from ..strain.qmc_method import strain_settings

            st = strain_settings(sp)
            print(f"phasemap: {sp.name}: sizes {'+'.join(f'{L}x{L}' for L in st['sizes'])}, "
                  + (f"T = {st['T']:g}" if st["T"] is not None else f"T = {st['T_over_V']:g} x max V")
                  + f", {st['sweeps']} sweeps per edge run, {st['order_sweeps']} per order run, {st['rounds']} "
                  f"bisection rounds, every {st['every']} strain(s)"
                  + (" (+ the skipped strains at the closing)" if st["refine"] and st["every"] > 1 else "")
                  + (f", runs that do not decorrelate repeated with {st['retry']}x the sweeps" if st["retry"] > 1 else "")
                  + f", seed {st['seed']} (more: --qmc KEY=VALUE)",
                  file=sys.stderr)
        out.append(sp)
    if extra and not any(sp.capabilities.error_bars for sp in specs):
        raise ConfigError("--qmc: only with a qmc method in --method/--methods")
    return out


def register(sub) -> None:
    """Add ``strain-check`` and ``strain-sweep`` to ``sub`` (argparse subparsers)."""
    fmt = argparse.RawDescriptionHelpFormatter
    c = sub.add_parser("strain-check", help="does the commensurate solid survive at a given strain? (verdict)",
                       description="Plateau extent, phase at fixed filling, margins and a plain-language verdict "
                       "at one strain of a parameter table.", epilog=CHECK_EPILOG, formatter_class=fmt)
    c.add_argument("table", help="strain table (.csv or .toml), or 'demo' for the invented demo table")
    c.add_argument("--strain", type=finite_float, required=True, help="strain at which to judge")
    c.add_argument("--mu", type=finite_float, default=None, help="chemical potential (table unit) to report the phase at")
    c.add_argument("--method", default="mf", help="mf, cmf[:<cluster>] or ed[:<cluster>] (exact diagonalization, canonical finite cluster "
                   "containing K: tri12 (default, no V2), tri21, tri27, tri36), qmc[:6+9], cmf-scaled[:3+6+9+12] (cluster "
                   "mean field extrapolated in lambda) (default mf)")
    c.add_argument("--cluster", default=None, help="cluster for cmf (e.g. tri3, tri6, tri12) or ed (tri12, tri21, tri27, tri36)")
    c.add_argument("--fraction", default="1/3", help="plateau filling (default 1/3)")
    c.add_argument("--no-melt", action="store_true", help="skip the melt-factor root-finding (faster; ED has none)")
    c.add_argument("--melt-max", type=finite_float, default=10.0, help="largest t/V growth factor searched (default 10)")
    c.add_argument("--extrapolate", action="store_true", help="allow a strain outside the table (warned)")
    c.add_argument("--json", action="store_true", help="print the answer as JSON (same data as the text)")
    c.add_argument("--qmc", action="append", default=[], metavar="KEY=VALUE", help=QMC_HELP)
    c.set_defaults(func=run_check)

    s = sub.add_parser("strain-sweep", help="critical strain per method, band, lambda scan, data and figures",
                       description="Sweep the strain path of a table for one or more methods; write labelled "
                       "data (NetCDF, CSV, JSON) and figures into --out.", epilog=SWEEP_EPILOG, formatter_class=fmt)
    s.add_argument("table", help="strain table (.csv or .toml), or 'demo'")
    s.add_argument("--out", required=True, help="output folder (created; files written atomically)")
    s.add_argument("--methods", default="mf", help="comma list: mf, cmf:<cluster>, ed:<cluster>, qmc[:6+9] (quantum Monte Carlo on "
                   "L x L tori, extrapolated), cmf-scaled[:3+6+9+12] (cluster mean field on several clusters, "
                   "extrapolated in lambda) (default mf)")
    s.add_argument("--lambda", dest="lambdas", default=None,
                   help="also scan interactions V -> lambda V: start:stop:count or comma list (e.g. 0.7:1.0:4)")
    s.add_argument("--scale", default="V", choices=("V", "t", "U", "V2"),
                   help="what --lambda scales (V: V and V2 together; default V)")
    s.add_argument("--fraction", default="1/3", help="plateau filling (default 1/3)")
    s.add_argument("--n-strain", type=bounded_int(2, MAX_STRAINS), default=None, dest="n_strain",
                   help=f"strains on the path, 2 to {MAX_STRAINS} (default: rows and midpoints, >= 9)")
    s.add_argument("--n-mu", type=bounded_int(3, MAX_MU), default=121, dest="n_mu",
                   help=f"chemical potentials of the map, 3 to {MAX_MU} (default 121)")
    s.add_argument("--T-measure", dest="T_measure", type=finite_float, default=None, metavar="T",
                   help="measurement temperature (table unit): compute the solid's melting temperature versus "
                        "strain for each method with a finite-temperature mode (mf, cmf on small clusters) and "
                        "draw T across the T_melt(strain) figure")
    s.add_argument("--melting", action="store_true", help="compute T_melt(strain) without a measurement temperature")
    s.add_argument("--no-figures", action="store_true", help="write data only")
    s.add_argument("--json", action="store_true", help="print the summary as JSON")
    s.add_argument("--qmc", action="append", default=[], metavar="KEY=VALUE", help=QMC_HELP)
    from .run import add_job_options

    add_job_options(s, "sweep")
    s.set_defaults(func=run_sweep)


def _spec(method: str, cluster):
    from ..methods import MethodSpec, get_method
    from ..model import ConfigError

    if cluster is not None:
        if ":" in method or not get_method(method).capabilities.cluster:
            raise ConfigError(f"--cluster: only with a method that takes a cluster, e.g. --method cmf "
                              f"(got --method {method!r})")
        method = f"{method.strip().lower()}:{cluster}"
    return MethodSpec.parse(method)


def _check_fraction(fraction, table) -> None:
    """A plateau filling the table's bosons can have: 0 < f < 1 hard-core (0 and 1 are the empty and
    full states, which have no upper/lower plateau edge), 0 < f for soft-core."""
    from ..model import ConfigError
    from ..strain.engine import parse_fraction

    lab, f = parse_fraction(fraction)
    if f <= 0:
        raise ConfigError(f"--fraction {fraction}: must be > 0 (a solid or Mott plateau filling such as 1/3)")
    if table.hardcore and f >= 1:
        raise ConfigError(f"--fraction {fraction}: hard-core bosons (the table has no U) need 0 < fraction < 1, "
                          "e.g. 1/3, 1/2, 2/3")


def run_check(args) -> int:
    import warnings

    from ..strain import check_strain, read_table
    from ..strain.engine import parse_fraction
    from ._common import dumps_json

    spec = _with_qmc([_spec(args.method, args.cluster)], args.qmc)[0]
    parse_fraction(args.fraction)
    table = read_table(args.table)
    _check_fraction(args.fraction, table)
    if args.mu is not None:  # the same bound as every model energy
        from ..model import MAX_ENERGY, ConfigError

        if abs(args.mu) > MAX_ENERGY:
            raise ConfigError(f"--mu: must be >= {-MAX_ENERGY:g} and <= {MAX_ENERGY:g} ({table.unit}), got {args.mu:g}")
    table.check_range(args.strain, args.extrapolate)  # refuse before any solving
    spec.impl.check_setup(spec, [table.model(args.strain, extrapolate=args.extrapolate)], args.fraction)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        res = check_strain(table, args.strain, spec, mu=args.mu, fraction=args.fraction,
                           extrapolate=args.extrapolate, melt=not args.no_melt, melt_max=args.melt_max)
    for w in caught:
        print(f"phasemap: warning: {w.message}", file=sys.stderr)
    if args.json:
        print(dumps_json(res.data))
    else:
        print(res.verdict())
    return 0


def _sweep_checkpoint(args, table, specs, settings):
    """The sweep's checkpoint, OUT/.checkpoint/sweep (``--resume`` / ``--restart``)."""
    from ..store import job_checkpoint
    from ..strain.sweep import sweep_checkpoint_params

    params = sweep_checkpoint_params(table, specs, args.fraction, **settings)
    ck = job_checkpoint(os.path.join(args.out, CHECKPOINT_DIR, "sweep"), params, args.resume, args.restart)
    if ck.chunks():
        print(f"strain sweep: resuming, {len(ck.chunks())} finished chunk(s) taken from the checkpoint",
              file=sys.stderr)
    return ck


def run_sweep(args) -> int:
    import time
    import warnings

    from ..strain import read_table
    from ..methods import parse_specs
    from ..strain.engine import parse_fraction
    from ..strain.sensitivity import parse_lambdas
    from ..strain.sweep import strain_sweep
    from ._common import dumps_json

    from ..model import ConfigError
    from ..store import check_output_folder, output_lock

    check_output_folder(args.out)  # before anything is read or computed
    specs = _with_qmc(parse_specs(args.methods), args.qmc)
    parse_fraction(args.fraction)
    from ..strain.melting import check_T_measure

    check_T_measure(args.T_measure)
    lam = parse_lambdas(args.lambdas) if args.lambdas is not None else None
    table = read_table(args.table)
    _check_fraction(args.fraction, table)
    if args.scale == "U" and table.hardcore and lam is not None:
        raise ConfigError("--scale U: the table is hard-core (U = inf); scale V or t instead")
    from ..strain.sweep import check_sweep

    check_sweep(table, specs, n_strain=args.n_strain, fraction=args.fraction, melting=args.melting,
                T_measure=args.T_measure)  # before the folder, its lock and checkpoint are made
    t0 = time.perf_counter()
    from .run import close_executor, job_executor

    ex = job_executor(args)
    try:
        with output_lock(args.out):
            settings = dict(n_strain=args.n_strain, n_mu=args.n_mu, lambdas=lam, param=args.scale,
                            melting=args.melting, T_measure=args.T_measure)
            ck = _sweep_checkpoint(args, table, specs, settings)
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always")
                table.sparsity_warnings()
                sw = strain_sweep(table, specs, fraction=args.fraction, executor=ex, checkpoint=ck,
                                  progress=not (args.quiet or args.json), **settings)
            for w in caught:
                print(f"phasemap: warning: {w.message}", file=sys.stderr)
            sw.seconds["total"] = time.perf_counter() - t0
            paths = sw.save(args.out, figures=not args.no_figures)
            ck.remove()
            with contextlib.suppress(OSError):
                os.rmdir(os.path.join(args.out, CHECKPOINT_DIR))
    finally:
        close_executor(ex)
    if args.json:
        print(dumps_json({**sw.summary(), "files": [str(p) for p in paths]}))
    else:
        print(sw.text())
        print(f"  wrote {len(paths)} files to {args.out} in {sw.seconds['total']:.1f} s")
    return 0
