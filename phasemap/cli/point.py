"""``phasemap point``: solve one parameter point given fully on the command line."""

from __future__ import annotations

import math

from ._common import dumps_json, finite_float, float_list, positive_int

__all__ = ["register", "model_from_args"]

HELP = "solve one parameter point and print its phase (or --json)"
EPILOG = """examples:
  phasemap point --lattice triangular --t 0.05 --V 1 --hardcore --mu 1.5
  phasemap point --lattice square --t 0.02 --U 1 --mu 0.5 --n-max 4 --json
  phasemap point --t 0.05,0.05,0.08 --V 1,1,0.8 --hardcore --mu 2 --method cmf --cluster tri3"""


def register(sub) -> None:
    """Add the ``point`` subcommand to ``sub`` (an argparse subparsers object)."""
    import argparse

    p = sub.add_parser("point", help=HELP, description="Solve the extended Bose-Hubbard model at one point "
                       "(grand canonical for mf/cmf; fixed particle number for ed).", epilog=EPILOG,
                       formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--lattice", default="triangular", choices=("triangular", "square"), help="lattice (default triangular)")
    p.add_argument("--t", type=float_list, default=0.0, metavar="T",
                   help="hopping: one value or a comma list, one per bond family (default 0)")
    p.add_argument("--V", type=float_list, default=0.0, metavar="V",
                   help="nearest-neighbour repulsion: one value or one per bond family (default 0)")
    core = p.add_mutually_exclusive_group()
    core.add_argument("--U", type=finite_float, default=None, metavar="U", help="on-site repulsion (soft-core bosons)")
    core.add_argument("--hardcore", action="store_true", help="hard-core bosons, U = inf (the default without --U)")
    p.add_argument("--V2", type=finite_float, default=0.0, help="next-nearest-neighbour repulsion (default 0)")
    p.add_argument("--mu", type=finite_float, default=0.0, help="chemical potential (default 0)")
    p.add_argument("--n-max", type=positive_int, default=None, dest="n_max",
                   help="occupation cut-off for soft-core bosons (default chosen from mu/U)")
    p.add_argument("--unit", default=None, help="energy unit label of all energies (default: V for hard-core, U for soft-core)")
    p.add_argument("--method", default="mf", choices=("mf", "cmf", "ed"),
                   help="mf: site-decoupled mean field; cmf: cluster mean field; ed: exact diagonalization")
    p.add_argument("--cluster", default=None, help="cluster name for cmf / ed (e.g. tri3, tri12, sq2x2)")
    p.add_argument("--particles", type=int, default=None, metavar="N", help="particle number (ed only; default: the N minimising E0(N) - mu N)")
    p.add_argument("--json", action="store_true", help="print the Solution as JSON")
    p.set_defaults(func=run)


def model_from_args(args):
    """The :class:`phasemap.Model` described by parsed ``point`` arguments."""
    from ..model import Model

    U = math.inf if args.U is None else args.U
    return Model(lattice=args.lattice, t=args.t, V=args.V, U=U, V2=args.V2, mu=args.mu, n_max=args.n_max,
                 unit=args.unit)


def run(args) -> int:
    """Solve and print; returns the exit code."""
    from ..api import solve
    from ..model import ConfigError

    model = model_from_args(args)
    opts = {}
    if args.method == "mf":
        if args.cluster is not None or args.particles is not None:
            raise ConfigError("--cluster/--particles: only used with --method cmf or ed")
    else:
        if args.cluster is not None:
            opts["cluster"] = args.cluster
        if args.method == "ed":
            opts["particles"] = args.particles  # None: the N that minimises E0(N) - mu N on the cluster
        elif args.particles is not None:
            raise ConfigError("--particles: only used with --method ed")
    try:
        sol = solve(model, method=args.method, **opts)
    except ImportError as e:
        raise ConfigError(f"--method {args.method}: not available in this installation ({e})") from None
    except TypeError as e:  # an option the method does not take
        raise ConfigError(f"--method {args.method}: {e}") from None
    print(dumps_json(sol.to_dict()) if args.json else sol.summary())
    return 0
