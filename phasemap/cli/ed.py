"""``phasemap exact``: exact diagonalization of a periodic cluster (staircase, S(K), gaps)."""

from __future__ import annotations

import argparse
import contextlib
import json
import math
import time
from pathlib import Path

from ._common import add_model_options, dumps_json, finite_float, model_from_args, resolve_method

__all__ = ["register"]

OBSERVABLES = ("sq", "condensate", "stiffness")
HELP = "exact diagonalization on a periodic cluster: E0(N), mu(N) staircase, gaps, S(K), stiffness"
EPILOG = """examples:
  phasemap exact --t 0.1 --V 1 --hardcore --cluster tri12 --out ed_demo
  phasemap exact --t 0.1 --V 1 --cluster tri27 --particles 9 --json
  phasemap exact --t 0.1,0.1,0.15 --V 1 --cluster tri21 --particles 0:10 --no-figure
  phasemap exact --lattice square --t 0.05 --U 1 --n-max 3 --cluster sq8 --particles 8
clusters: tri9 tri12 tri21 tri27 tri36 sq8 sq10 sq16 (=sq4x4) sq18, or vectors "2,2;-2,4"."""


def register(sub) -> None:
    """Add the ``exact`` subcommand."""
    p = sub.add_parser("exact", help=HELP, description=HELP + ". A single --particles N gives the "
                       "ground state at N (with observables); a range or no --particles gives the "
                       "canonical staircase and a figure against the mean-field filling curves.",
                       epilog=EPILOG, formatter_class=argparse.RawDescriptionHelpFormatter)
    add_model_options(p, mu_help="chemical potential included in E0")
    p.add_argument("--cluster", default="tri12", help="library name or vectors 'i1,j1;i2,j2' (default tri12)")
    p.add_argument("--particles", default=None, metavar="N|A:B",
                   help="particle number N, or inclusive range A:B (default: all N = staircase)")
    p.add_argument("--budget-gib", type=finite_float, default=None, dest="budget_gib",
                   help="memory budget per sector in GiB; bigger sectors are refused with their estimate "
                        "(default 60%% of this machine's memory, at most 16)")
    p.add_argument("--observables", default="sq", help="per-N observables in a staircase: comma list of "
                   "sq,condensate,stiffness (default sq)")
    p.add_argument("--all-momenta", action="store_true", help="diagonalise every momentum class (lists "
                   "ground-state momenta/degeneracies; default: Q=0 only, exact for t>=0 by Perron-Frobenius)")
    p.add_argument("--no-particle-hole", action="store_true", help="diagonalise every N (no hard-core mapping)")
    p.add_argument("--rep-lookup", default="auto", choices=("auto", "table", "search"), dest="rep_lookup",
                   help="hard-core space-group sectors: find a state's representative in a dense table (4 bytes "
                        "per Fock state, fastest), by a table-free search (16 bytes per sector state), or auto "
                        "(default: the table when its estimate fits --budget-gib)")
    p.add_argument("--no-figure", action="store_true", help="do not draw the staircase figure")
    p.add_argument("--mf-methods", default="mf", help="filling curves to overlay: comma list of mf,cmf "
                   "(default mf; cmf is slow; '' for none)")
    p.add_argument("--out", default=None, help="output folder for data (.nc, .csv, .json) and figure")
    p.add_argument("--json", action="store_true", help="print results as JSON")
    p.set_defaults(func=run)


def _cluster(text):
    from ..ed.clusters import CLUSTERS
    from ..model import ConfigError

    if text in CLUSTERS:
        return text
    try:
        rows = [[int(x) for x in r.split(",")] for r in text.split(";")]
    except ValueError:
        raise ConfigError(f"--cluster: unknown name {text!r}; library: {', '.join(CLUSTERS)} or vectors 'i1,j1;i2,j2'") from None
    return rows


def _particles(text):
    from ..model import ConfigError

    if text is None:
        return None, None
    if ":" in text:
        return None, text
    try:
        return int(text), None
    except ValueError:
        raise ConfigError(f"--particles: expected an integer N or a range A:B, got {text!r}") from None


def run(args) -> int:
    from ..ed.guard import DEFAULT_BUDGET_GIB
    from ..model import ConfigError
    from ..store import check_output_folder, output_lock

    if args.budget_gib is None:
        args.budget_gib = DEFAULT_BUDGET_GIB

    if args.out:
        check_output_folder(args.out)  # before any solving
    model = model_from_args(args)
    if not args.budget_gib > 0:
        raise ConfigError(f"--budget-gib: must be > 0, got {args.budget_gib:g}")
    obs = tuple(x.strip() for x in args.observables.split(",") if x.strip())
    for o in obs:
        if o not in OBSERVABLES:
            raise ConfigError(f"--observables: unknown {o!r} (allowed: {', '.join(OBSERVABLES)})")
    cluster = _cluster(args.cluster)
    N, rng = _particles(args.particles)
    overlay = tuple(m.strip() for m in args.mf_methods.split(",") if m.strip())
    for m in overlay:  # refuse before any solving
        impl, _ = resolve_method(m, "--mf-methods")
        if not impl.capabilities.grand_canonical:
            raise ConfigError(f"--mf-methods {m}: {impl.title} is not grand canonical; overlays need a "
                              "filling curve (e.g. mf, cmf:tri3)")
    out = Path(args.out) if args.out else None
    with output_lock(out) if out else contextlib.nullcontext():
        return _run(args, model, cluster, N, rng, overlay, out)


def _run(args, model, cluster, N, rng, overlay, out) -> int:
    from ..ed import save_dataset, solve_ed, staircase
    from ..store import atomic_write_text

    if N is not None:
        t0 = time.perf_counter()
        sol = solve_ed(model, cluster=cluster, particles=N, budget_gib=args.budget_gib, all_momenta=args.all_momenta,
                       rep_lookup=args.rep_lookup)
        d = sol.to_dict()
        d["wall_time_s"] = time.perf_counter() - t0
        if out:
            atomic_write_text(out / f"ed_N{N}.json", dumps_json(d) + "\n")
        print(dumps_json(d) if args.json else sol.summary() + "\nsectors  : " + ", ".join(
            f"{k}: E0={v:.10g} (dim {sol.extra['sector_dims'][k]}, {sol.extra['sector_times_s'][k]:.2f} s)"
            for k, v in sol.extra["sector_e0"].items()))
        return 0
    obs = tuple(x.strip() for x in args.observables.split(",") if x.strip())
    t0 = time.perf_counter()
    log = (lambda n, dt: None) if args.json else (lambda n, dt: print(f"  N={n:3d} solved in {dt:7.2f} s", flush=True))
    ds = staircase(model, cluster, n_range=rng, particle_hole=not args.no_particle_hole, observables=obs,
                   budget_gib=args.budget_gib, all_momenta=args.all_momenta, progress=log, rep_lookup=args.rep_lookup)
    wall = time.perf_counter() - t0
    files, notes = [], []
    if out:
        files += [str(save_dataset(ds, out / "staircase.nc")), str(save_dataset(ds, out / "staircase.csv"))]
        if not args.no_figure:
            from ..ed.plot import overlay_grid, plot_staircase
            from ..scan import filling_curves

            curves, notes = filling_curves(model, overlay_grid(ds)[1], overlay)
            figs = plot_staircase(ds, model, str(out / "staircase"), curves, title=f"{model.describe()}")
            files += figs
    elif not args.no_figure:
        notes.append("no --out folder: figure not drawn")
    L = int(ds.attrs["n_sites"])
    from ..store import provenance

    summary = {
        **provenance(model, "ed"), "cluster": json.loads(ds.attrs["cluster"]), "n_sites": L,
        "N": ds["N"].values.tolist(), "E0": ds["E0"].values.tolist(), "mu_plus": ds["mu_plus"].values.tolist(),
        "mu_minus": ds["mu_minus"].values.tolist(), "q_name": ds["q_name"].values.tolist(),
        "gap_1_3": ds.attrs["gap_1_3"], "gap_2_3": ds.attrs["gap_2_3"], "wall_time_s": wall,
        "files": files, "notes": notes,
    }
    if "SK_per_site" in ds:
        summary["SK_per_site"] = ds["SK_per_site"].values.tolist()
    if out:
        atomic_write_text(out / "summary.json", dumps_json(summary) + "\n")
    if args.json:
        print(dumps_json(summary))
        return 0
    print(f"ED staircase on {L} sites, {model.describe()}  ({wall:.1f} s)")
    print("   N   filling          E0        mu-        mu+     Q      S(K)/N")
    sk = ds["SK_per_site"].values if "SK_per_site" in ds else [math.nan] * len(ds["N"])
    for a, n in enumerate(ds["N"].values):
        print(f" {n:3d}  {n / L:7.4f}  {ds['E0'].values[a]:11.6f} {ds['mu_minus'].values[a]:10.5f} "
              f"{ds['mu_plus'].values[a]:10.5f} {ds['q_name'].values[a]:>6s}  {sk[a]:8.5f}")
    print(f"charge gap at n=1/3: {ds.attrs['gap_1_3']:.6g}, at n=2/3: {ds.attrs['gap_2_3']:.6g} [{model.unit}]")
    for f in files:
        print(f"wrote {f}")
    for n in notes:
        print(f"note: {n}")
    return 0
