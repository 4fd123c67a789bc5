"""``phasemap demo``: run the built-in demo config (an INVENTED scenario) with no arguments."""

from __future__ import annotations

__all__ = ["register", "demo_config"]

HELP = "run the built-in demo (invented scenario): a phase map and a filling curve"


def register(sub) -> None:
    """Add the ``demo`` subcommand."""
    p = sub.add_parser("demo", help=HELP, description="Run the packaged demo config "
                       "(phasemap/data/demo.toml): a hypothetical hard-core adsorbate on a triangular "
                       "substrate with modest anisotropy. The scenario is invented, and labelled so in "
                       "every output file.")
    p.add_argument("--out", default=None, metavar="DIR", help="output folder (default ./phasemap_demo)")
    p.add_argument("--points", type=_points, default=None, metavar="N",
                   help="override the number of points of every scan axis (a quick look: e.g. 9)")
    p.add_argument("--show-config", action="store_true", help="print the demo config and exit")
    from .run import add_executor_options

    add_executor_options(p)
    p.add_argument("--quiet", action="store_true", help="no progress bars")
    p.set_defaults(func=run)


def _points(text):
    import argparse

    try:
        v = int(text)
    except ValueError:
        v = 0
    if not 2 <= v <= 1001:
        raise argparse.ArgumentTypeError(f"expected an integer between 2 and 1001, got {text!r}")
    return v


def demo_text() -> str:
    """The packaged demo config (TOML text)."""
    from importlib.resources import files

    return files("phasemap").joinpath("data/demo.toml").read_text(encoding="utf-8")


def demo_config(points: int | None = None):
    """The demo :class:`phasemap.config.RunConfig`, optionally with ``points`` per scan axis."""
    import tomllib

    from ..config import parse_config

    data = tomllib.loads(demo_text())
    if points is not None:
        for scan in data["scan"]:
            for ax in ("x", "y"):
                if ax in scan and "num" in scan[ax]:
                    scan[ax]["num"] = points
    return parse_config(data, name="demo", source="phasemap/data/demo.toml (packaged)")


def run(args) -> int:
    from .run import execute

    if args.show_config:
        print(demo_text(), end="")
        return 0
    return execute(demo_config(args.points), args)
