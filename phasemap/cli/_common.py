"""Helpers shared by our CLI command modules (argument types, JSON output)."""

from __future__ import annotations

import argparse
import math

from ..store import dumps_json  # noqa: F401  (re-exported for the commands)

__all__ = ["float_list", "finite_float", "positive_int", "bounded_int", "width_arg", "dumps_json",
           "add_model_options", "model_from_args", "model_overrides", "add_method_option", "method_help",
           "resolve_method", "u_value"]


def u_value(text: str) -> float:
    """argparse type of --U: a finite number, or 'inf' / 'hardcore' for hard-core bosons."""
    if text.strip().lower() in ("inf", "hardcore", "hard-core"):
        return math.inf
    return finite_float(text)


#: Defaults of the model options (None: the Model's own default).
MODEL_DEFAULTS = {"lattice": "triangular", "t": 0.0, "V": 0.0, "U": None, "V2": 0.0, "mu": 0.0, "n_max": None,
                  "unit": None}


def add_model_options(p, mu_help: str = "chemical potential", overrides: bool = False) -> None:
    """The model options shared by every command that takes a model on the command line.

    ``overrides=True``: every default is None so that only the options given on the command
    line override a model read from a config file (:func:`model_overrides`).
    """
    d = (lambda k: None) if overrides else MODEL_DEFAULTS.get  # noqa: E731
    tail = (lambda k: "") if overrides else (lambda k: f" (default {MODEL_DEFAULTS[k]})")  # noqa: E731
    p.add_argument("--lattice", default=d("lattice"), choices=("triangular", "square"), help="lattice" + tail("lattice"))
    p.add_argument("--t", type=float_list, default=d("t"), metavar="T",
                   help="hopping: one value or a comma list, one per bond family" + tail("t"))
    p.add_argument("--V", type=float_list, default=d("V"), metavar="V",
                   help="nearest-neighbour repulsion: one value or one per bond family" + tail("V"))
    core = p.add_mutually_exclusive_group()
    core.add_argument("--U", type=u_value, default=None, metavar="U",
                      help="on-site repulsion (soft-core bosons; 'inf' = hard-core)")
    core.add_argument("--hardcore", action="store_true", help="hard-core bosons, U = inf (the default without --U)")
    p.add_argument("--V2", type=finite_float, default=d("V2"), help="next-nearest-neighbour repulsion" + tail("V2"))
    p.add_argument("--mu", type=finite_float, default=d("mu"), help=mu_help + tail("mu"))
    p.add_argument("--n-max", type=positive_int, default=None, dest="n_max",
                   help="occupation cut-off for soft-core bosons (default chosen from mu/U)")
    p.add_argument("--unit", default=None, help="energy unit label of all energies (default: V for hard-core, U for soft-core)")


def model_overrides(args) -> dict:
    """The model fields given on the command line (options of :func:`add_model_options`)."""
    d = {k: getattr(args, k) for k in MODEL_DEFAULTS if getattr(args, k, None) is not None}
    if getattr(args, "hardcore", False):
        d["U"] = math.inf
    return d


def model_from_args(args):
    """The :class:`phasemap.Model` described by the options of :func:`add_model_options`."""
    from ..model import Model

    d = {**{k: v for k, v in MODEL_DEFAULTS.items() if v is not None}, **model_overrides(args)}
    d.setdefault("U", math.inf)
    return Model(**d)


def method_help(grand_canonical_only: bool = False) -> str:
    """One line per registered method for ``--help``."""
    from ..methods import available, get_method

    items = []
    for n in available():
        m = get_method(n)
        if grand_canonical_only and not m.capabilities.grand_canonical:
            continue
        items.append(f"{n}{'[:<cluster>]' if m.capabilities.cluster else ''} ({m.title})")
    return "; ".join(items)


def resolve_method(text: str, flag: str = "--method"):
    """``(method, options)`` from a command-line spec; errors name the flag."""
    from ..methods import resolve
    from ..model import ConfigError

    try:
        return resolve(text)
    except ConfigError as e:
        raise ConfigError(f"{flag} {text}: {e}") from None


def add_method_option(p, flag: str = "--method", default: str = "mf", extra: str = "") -> None:
    """The method option, spelled as everywhere: ``mf``, ``cmf:tri12``, ``ed:tri21``."""
    p.add_argument(flag, default=default, help=f"{method_help()}{extra} (default {default})")


def finite_float(text: str) -> float:
    """argparse type: a finite number."""
    try:
        v = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None
    if not math.isfinite(v):
        raise argparse.ArgumentTypeError(f"must be a finite number, got {text!r}")
    return v


def float_list(text: str):
    """argparse type: one number, or a comma-separated list (one value per bond family)."""
    parts = [p.strip() for p in text.split(",")]
    if not all(parts):
        raise argparse.ArgumentTypeError(f"expected a number or a comma-separated list, got {text!r}")
    vals = [finite_float(p) for p in parts]
    return vals[0] if len(vals) == 1 else vals


def positive_int(text: str) -> int:
    """argparse type: an integer >= 1."""
    try:
        v = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected an integer >= 1, got {text!r}") from None
    if v < 1:
        raise argparse.ArgumentTypeError(f"expected an integer >= 1, got {text!r}")
    return v


def bounded_int(lo: int, hi: int):
    """argparse type: an integer in [lo, hi] (the message gives the range)."""
    def parse(text: str) -> int:
        try:
            v = int(text)
        except ValueError:
            v = None
        if v is None or not lo <= v <= hi:
            raise argparse.ArgumentTypeError(f"expected an integer >= {lo} and <= {hi}, got {text!r}")
        return v
    return parse


def width_arg(text: str):
    """argparse type: figure width 'single', 'double' or inches."""
    if text in ("single", "double"):
        return text
    try:
        from ..plot import figure_width

        return figure_width(float(text))
    except Exception:
        raise argparse.ArgumentTypeError(f"expected 'single', 'double' or inches (1 to 12), got {text!r}") from None


def number_list(text: str) -> list:
    """argparse type: a comma-separated list of finite numbers."""
    parts = [p.strip() for p in text.split(",")]
    if not all(parts):
        raise argparse.ArgumentTypeError(f"expected a comma-separated list of numbers, got {text!r}")
    return [finite_float(p) for p in parts]


#: sampler options of the qmc method: replica exchange (phasemap.qmc.tempering) and the fixed particle
#: number (canonical sampling), argparse dest = option name
SAMPLER_OPTIONS = ("replicas", "mu_step", "T_hot", "mu_ladder", "T_ladder", "fixed_filling")


def add_sampler_options(g, ladders: bool = True) -> None:
    """--fixed-filling, --replicas, --mu-step, --T-hot (and the explicit --mu-ladder, --T-ladder) of qmc."""
    g.add_argument("--fixed-filling", type=finite_float, default=None, dest="fixed_filling", metavar="FILLING",
                   help="qmc: sample at the fixed particle number nearest to FILLING x sites (canonical ensemble; "
                        "e.g. 0.5 for the half-filled lattice, where grand-canonical chains move slowly between "
                        "particle numbers); mu then only shifts the energy")
    g.add_argument("--replicas", type=positive_int, default=None,
                   help="qmc: replica exchange with this many replicas per chain, at mu + MU_STEP (k - (R-1)//2) "
                        "(or, with --T-hot, at temperatures from T to T_HOT); default 1 = off (docs/qmc.md)")
    g.add_argument("--mu-step", type=finite_float, default=None, dest="mu_step",
                   help="qmc: spacing of the mu ladder (default 1/sqrt(beta N / largest coupling))")
    g.add_argument("--T-hot", type=finite_float, default=None, dest="T_hot",
                   help="qmc: hottest temperature of a temperature ladder (geometric from T)")
    if ladders:
        g.add_argument("--mu-ladder", type=number_list, default=None, dest="mu_ladder", metavar="MU,MU,...",
                       help="qmc: explicit chemical potentials of the replicas (must contain --mu)")
        g.add_argument("--T-ladder", type=number_list, default=None, dest="T_ladder", metavar="T,T,...",
                       help="qmc: explicit temperatures of the replicas (must contain --T); with --mu-ladder: pairs")
