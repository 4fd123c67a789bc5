"""``phasemap point``: solve one parameter point given fully on the command line."""

from __future__ import annotations

from ._common import (SAMPLER_OPTIONS, add_method_option, add_model_options, add_sampler_options, dumps_json,
                      model_from_args, resolve_method)

__all__ = ["register"]

HELP = "solve one parameter point and print its phase (or --json)"
EPILOG = """examples:
  phasemap point --lattice triangular --t 0.05 --V 1 --hardcore --mu 1.5
  phasemap point --lattice square --t 0.02 --U 1 --mu 0.5 --n-max 4 --json
  phasemap point --lattice triangular --t 0 --V 1 --hardcore --mu 1.5 --T 0.6
  phasemap point --t 0.05,0.05,0.08 --V 1,1,0.8 --hardcore --mu 2 --method cmf --cluster tri3
  phasemap point --t 0.1 --V 1 --hardcore --mu 1.5 --method qmc:tri12 --T 0.1 --sweeps 20000 --seed 1 --json"""


def register(sub) -> None:
    """Add the ``point`` subcommand to ``sub`` (an argparse subparsers object)."""
    import argparse

    p = sub.add_parser("point", help=HELP, description="Solve the extended Bose-Hubbard model at one point "
                       "(grand canonical for mf/cmf; fixed particle number for ed).", epilog=EPILOG,
                       formatter_class=argparse.RawDescriptionHelpFormatter)
    add_model_options(p)
    add_method_option(p)
    p.add_argument("--cluster", default=None, help="cluster of a method that takes one (e.g. tri3, tri12, sq2x2); "
                   "same as writing --method cmf:tri12")
    p.add_argument("--particles", type=int, default=None, metavar="N",
                   help="particle number (canonical methods such as ed; default: the N minimising E0(N) - mu N)")
    p.add_argument("--T", type=float, default=None, metavar="T",
                   help="temperature in the model's energy unit (methods with a finite-temperature mode: "
                        "mf, cmf, qmc); default 0 = ground state (qmc: beta doubled until observables settle)")
    p.add_argument("--no-stiffness", action="store_true",
                   help="ed: skip the superfluid stiffness; it needs one more ground state and a linear solve in the "
                        "sector of a smaller symmetry group (several times larger) and is the dominant cost of an ED "
                        "point (on tri36 that sector exceeds the default memory budget and is skipped with a flag)")
    p.add_argument("--json", action="store_true", help="print the Solution as JSON")
    g = p.add_argument_group("Monte Carlo methods (qmc)")
    g.add_argument("--sweeps", type=int, default=None, help="measured sweeps per chain")
    g.add_argument("--thermalization", type=int, default=None, help="warm-up sweeps per chain")
    g.add_argument("--bins", type=int, default=None, help="equal bins per chain for the error analysis")
    g.add_argument("--seed", type=int, default=None, help="random seed (same seed, same numbers)")
    g.add_argument("--chains", type=int, default=None, help="independent chains, run in parallel processes")
    g.add_argument("--checkpoint", default=None, metavar="DIR", help="folder for resumable chain checkpoints")
    add_sampler_options(g)
    p.set_defaults(func=run)


def run(args) -> int:
    """Solve and print; returns the exit code."""
    import contextlib

    from ..api import solve
    from ..model import ConfigError
    from ..store import check_output_folder, output_lock

    if args.checkpoint is not None:  # the output path first (DEVELOPERS.md conventions); one writer per folder
        check_output_folder(args.checkpoint, "--checkpoint")
    model = model_from_args(args)
    impl, opts = resolve_method(args.method)
    if args.cluster is not None:
        if not impl.capabilities.cluster:
            raise ConfigError(f"--cluster: {impl.name} ({impl.title}) takes no cluster")
        if ":" in args.method:
            raise ConfigError(f"--cluster: --method {args.method} already names the cluster; give one of the two")
        opts["cluster"] = args.cluster
    if args.T is not None:
        opts["T"] = args.T
    if args.particles is not None:
        if not impl.capabilities.canonical:
            raise ConfigError(f"--particles: only used with a canonical method such as ed ({impl.name} is grand canonical)")
        opts["particles"] = args.particles
    caps = impl.capabilities
    for flag, allowed in (("sweeps", caps.error_bars), ("thermalization", caps.error_bars),
                          ("bins", caps.error_bars), ("seed", caps.error_bars), ("chains", caps.error_bars),
                          ("checkpoint", caps.error_bars)) + tuple((k, caps.error_bars) for k in SAMPLER_OPTIONS):
        value = getattr(args, flag)
        if value is None:
            continue
        if not allowed:
            raise ConfigError(f"--{flag.replace('_', '-')}: only used with a Monte Carlo method such as qmc "
                              f"({impl.name} is deterministic)")
        opts[flag] = value
    if args.no_stiffness:
        if impl.name != "ed":
            raise ConfigError(f"--no-stiffness: only used with --method ed ({impl.name} computes no stiffness)")
        opts["observables"] = ("sq", "condensate")
    lock = (output_lock(args.checkpoint, flag="--checkpoint") if args.checkpoint is not None
            else contextlib.nullcontext())
    try:
        with lock:
            sol = solve(model, method=impl.name, **opts)
    except ImportError as e:
        raise ConfigError(f"--method {args.method}: not available in this installation ({e})") from None
    except TypeError as e:  # an option the method does not take
        raise ConfigError(f"--method {args.method}: {e}") from None
    print(dumps_json(sol.to_dict()) if args.json else sol.summary())
    return 0
