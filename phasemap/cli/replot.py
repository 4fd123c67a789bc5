"""``phasemap replot``: re-draw figures from saved NetCDF / CSV results."""

from __future__ import annotations

from ._common import width_arg

__all__ = ["register", "load_result"]

HELP = "re-plot saved results (NetCDF maps/curves, CSV curves)"


def register(sub) -> None:
    """Add the ``replot`` subcommand."""
    p = sub.add_parser("replot", help=HELP, description="Re-draw the figure of each saved result file "
                       "(phase map or filling curve), next to it or into --out.")
    p.add_argument("files", nargs="+", metavar="FILE", help=".nc (map or curve) or .csv (curve) written by phasemap")
    p.add_argument("--out", default=None, metavar="DIR", help="folder for the figures (default: beside each file)")
    p.add_argument("--formats", default="png,pdf", help="comma list of png, pdf, svg (default png,pdf)")
    p.add_argument("--width", type=width_arg, default="single", help="'single' (3.4 in), 'double' (7 in) or inches")
    p.add_argument("--dpi", type=int, default=300, help="PNG resolution (default 300)")
    p.add_argument("--title", default=None, help="figure title (default: the run's meta title, if any)")
    p.add_argument("--suffix", default="", help="appended to the figure file names (e.g. _double)")
    p.set_defaults(func=run)


def load_result(path):
    """(Dataset, kind) of a saved result; kind is "map" or "curve"."""
    from pathlib import Path

    from ..model import ConfigError
    from ..store import curve_to_dataset, load_csv, load_netcdf

    path = Path(path)
    if path.suffix == ".csv":
        ds = curve_to_dataset(*load_csv(path))
        return ds, "curve"
    if path.suffix != ".nc":
        raise ConfigError(f"input file: {str(path)!r}: expected a .nc or .csv file written by phasemap")
    ds = load_netcdf(path)
    if "strain" in ds.dims:
        raise ConfigError(f"input file: {str(path)!r} is a strain sweep; its figures are written by "
                          "'phasemap strain-sweep' (replot draws phase maps and filling curves)")
    if "y_axis" in ds.attrs:
        return ds, "map"
    if "mu" in ds.dims and "filling" in ds:
        return ds, "curve"
    raise ConfigError(f"input file: {str(path)!r} is neither a phasemap phase map nor a filling curve")


def run(args) -> int:
    from pathlib import Path

    from ..model import ConfigError
    from ..plot import FORMATS, plot_filling_curve, plot_phase_map, save_figure

    formats = [f.strip() for f in args.formats.split(",") if f.strip()]
    bad = [f for f in formats if f not in FORMATS]
    if bad or not formats:
        raise ConfigError(f"--formats: expected a comma list from {', '.join(FORMATS)}, got {args.formats!r}")
    if not 50 <= args.dpi <= 1200:
        raise ConfigError(f"--dpi: must be between 50 and 1200, got {args.dpi}")
    loaded = [(Path(f), *load_result(f)) for f in args.files]  # validate every input before writing
    for path, ds, kind in loaded:
        title = args.title if args.title is not None else ds.attrs.get("meta_title")
        plot = plot_phase_map if kind == "map" else plot_filling_curve
        fig = plot(ds, width=args.width, title=title)
        folder = Path(args.out) if args.out else path.parent
        for p in save_figure(fig, folder / f"{path.stem}{args.suffix}", formats, args.dpi):
            print(p)
    return 0
