"""``phasemap run``: execute a TOML run config (phase map or filling curve)."""

from __future__ import annotations

__all__ = ["register"]

HELP = "run a TOML config (map or curve), writing data + figures"
EPILOG = """The output folder receives NetCDF data (CSV too for curves), PNG/PDF figures and the
resolved config. An interrupted map keeps a checkpoint in OUT/.checkpoint/: rerun with --resume."""


def register(sub) -> None:
    """Add the ``run`` subcommand."""
    p = sub.add_parser("run", help=HELP, description="Run a phasemap TOML config.", epilog=EPILOG)
    p.add_argument("config", help="path to CONFIG.toml")
    p.add_argument("--out", default=None, metavar="DIR", help="output folder (default: [output] folder of the config)")
    add_job_options(p, "map or curve")
    p.set_defaults(func=run)


def add_executor_options(p) -> None:
    """--executor / --scheduler (shared by the commands that run long jobs)."""
    p.add_argument("--executor", default=None, metavar="SPEC",
                   help="where chunks run: auto (default: local processes on all cores when the job is long), "
                        "serial, processes[:N], dask (a local Dask cluster), or a Dask scheduler address; "
                        "results are identical")
    p.add_argument("--scheduler", default=None, metavar="ADDRESS",
                   help="Dask scheduler address (tcp://host:8786); needs pip install \"phasemap[dask]\"")


def add_job_options(p, what: str = "run") -> None:
    """--resume / --restart, --executor / --scheduler and --quiet of a resumable long job."""
    g = p.add_mutually_exclusive_group()
    g.add_argument("--resume", action="store_true",
                   help=f"continue an interrupted {what} from OUT/.checkpoint/ (finished chunks are kept)")
    g.add_argument("--restart", action="store_true", help="discard an existing checkpoint and start over")
    add_executor_options(p)
    p.add_argument("--quiet", action="store_true", help="no progress bar")


def job_executor(args, default: str = "auto"):
    """The executor asked for by ``--executor`` / ``--scheduler`` (validated now, before any work):
    the string ``"auto"`` (:func:`phasemap.executor.run_chunks` decides after the first chunk) or
    an :class:`~phasemap.executor.Executor`; close it with ``close_executor``."""
    from ..executor import get_executor

    spec = getattr(args, "executor", None) or default
    sched = getattr(args, "scheduler", None)
    if spec == "auto" and not sched:
        return "auto"
    return get_executor(spec, sched, "--executor")


def close_executor(ex) -> None:
    if not isinstance(ex, str):
        ex.close()


def execute(cfg, args) -> int:
    """Run ``cfg`` with the common options of ``run``/``demo``; prints the files written."""
    import sys

    from ..runner import run as run_cfg

    paths = run_cfg(cfg, out=args.out, resume=getattr(args, "resume", False),
                    restart=getattr(args, "restart", False), progress=not args.quiet,
                    log=lambda s: print(s, file=sys.stderr), executor=getattr(args, "executor", None),
                    scheduler=getattr(args, "scheduler", None))
    for p in paths:
        print(p)
    return 0


def run(args) -> int:
    from ..config import load_config

    return execute(load_config(args.config), args)
