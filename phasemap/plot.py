"""Paper-ready figures: phase maps and filling curves (matplotlib, Agg canvas, no pyplot).

Colours are categorical and fixed per phase *family* (the first word of a phase label), so a
phase keeps its colour across figures: empty (off-white), full (brown), mott (greens), solid
(oranges/reds), supersolid (purples), superfluid (blues); unconverged points are grey and
hatched. Different labels of one family (e.g. "solid 1/3", "solid 2/3") get shades of the
family colour, ordered by filling.

Figures are sized for journal columns (single 3.4 in, double 7.0 in) and written as PNG
(300 dpi) and PDF through :func:`phasemap.store.atomic_path`.
"""

from __future__ import annotations

import json
import math
import re
from fractions import Fraction
from pathlib import Path

import numpy as np
from matplotlib import colormaps, rc_context
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import BoundaryNorm, ListedColormap, to_rgb
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from .model import ConfigError
from .store import atomic_path

__all__ = ["WIDTHS", "FORMATS", "figure_width", "phase_colors", "plot_phase_map", "plot_filling_curve",
           "save_figure"]

#: Journal column widths in inches.
WIDTHS = {"single": 3.4, "double": 7.0}
#: Figure formats we write.
FORMATS = ("png", "pdf", "svg")
FAMILY_ORDER = ("empty", "mott", "solid", "supersolid", "superfluid", "normal", "full", "unconverged")
_FAMILY_RANGE = {"mott": ("Greens", 0.35, 0.75), "solid": ("YlOrRd", 0.3, 0.8),
                 "supersolid": ("Purples", 0.35, 0.75), "superfluid": ("Blues", 0.35, 0.65)}
_FIXED = {"empty": "#f5f5f0", "full": "#8c510a", "unconverged": "#bdbdbd", "normal": "#fbe3ee"}
UNCONVERGED_HATCH = "xxxx"
STYLE = {"font.size": 8, "axes.labelsize": 8, "legend.fontsize": 6.5, "xtick.labelsize": 7,
         "ytick.labelsize": 7, "axes.linewidth": 0.6, "lines.linewidth": 1.0, "pdf.fonttype": 42}


def figure_width(width) -> float:
    """Width in inches from ``"single"``, ``"double"`` or a number (1 to 12 in)."""
    if isinstance(width, str):
        if width not in WIDTHS:
            raise ConfigError(f"figure width: expected 'single', 'double' or inches, got {width!r}")
        return WIDTHS[width]
    w = float(width)
    if not (1.0 <= w <= 12.0):
        raise ConfigError(f"figure width: must be between 1 and 12 inches, got {w}")
    return w


def _family(label: str) -> str:
    return str(label).split()[0] if str(label).strip() else "unconverged"


def _fraction(label: str) -> float:
    m = re.search(r"(\d+)/(\d+)", label) or re.search(r"n=(\d+)()", label)
    if not m:
        return 0.0
    return float(Fraction(int(m.group(1)), int(m.group(2) or 1)))


def sort_labels(labels) -> list[str]:
    """Unique labels in legend order: by family (:data:`FAMILY_ORDER`), then by filling."""
    uniq = sorted(set(map(str, labels)))
    fam_rank = lambda f: FAMILY_ORDER.index(f) if f in FAMILY_ORDER else len(FAMILY_ORDER) - 1.5  # noqa: E731
    return sorted(uniq, key=lambda s: (fam_rank(_family(s)), _fraction(s), s))


def phase_colors(labels) -> dict[str, tuple]:
    """Colour (RGB) of every label, consistent per phase family."""
    labels = sort_labels(labels)
    out, by_fam = {}, {}
    for lab in labels:
        by_fam.setdefault(_family(lab), []).append(lab)
    for fam, labs in by_fam.items():
        if fam in _FIXED:
            for lab in labs:
                out[lab] = to_rgb(_FIXED[fam])
            continue
        cmap, lo, hi = _FAMILY_RANGE.get(fam, ("RdPu", 0.3, 0.6))
        shades = np.linspace(lo, hi, len(labs)) if len(labs) > 1 else [0.5 * (lo + hi)]
        for lab, s in zip(labs, shades):
            out[lab] = to_rgb(colormaps[cmap](s))
    return out


def _wrap(title: str, width_in: float) -> str:
    import textwrap

    return textwrap.fill(str(title), width=max(20, int(14 * width_in)))


def _edges(c: np.ndarray) -> np.ndarray:
    c = np.asarray(c, float)
    if len(c) == 1:
        return np.array([c[0] - 0.5, c[0] + 0.5])
    mid = 0.5 * (c[1:] + c[:-1])
    return np.concatenate([[c[0] - (mid[0] - c[0])], mid, [c[-1] + (c[-1] - mid[-1])]])


def _text_color(rgb) -> str:
    r, g, b = rgb
    return "white" if 0.299 * r + 0.587 * g + 0.114 * b < 0.45 else "black"


def _hatch_cells(ax, mask, xe, ye):
    """Hatch the grid cells where ``mask`` (shape (len(xe)-1, len(ye)-1)) is True."""
    from matplotlib.collections import PatchCollection
    from matplotlib.patches import Rectangle

    rects = [Rectangle((xe[i], ye[j]), xe[i + 1] - xe[i], ye[j + 1] - ye[j]) for i, j in zip(*np.nonzero(mask))]
    ax.add_collection(PatchCollection(rects, facecolor="none", edgecolor="0.35", linewidth=0.0,
                                      hatch=UNCONVERGED_HATCH))


def _region_labels(ax, codes, names, colors, X, Y, min_frac=0.015):
    """Write each label's name at an interior point of its largest connected region."""
    from scipy import ndimage

    total = codes.size
    for k, name in enumerate(names):
        comp, ncomp = ndimage.label(codes == k)
        if ncomp == 0:
            continue
        sizes = ndimage.sum(np.ones_like(comp), comp, index=np.arange(1, ncomp + 1))
        big = int(np.argmax(sizes)) + 1
        if sizes[big - 1] < max(3, min_frac * total):
            continue
        # the most interior cell (largest distance to the region's edge)
        # among the most interior cells (largest distance to the edge), the one nearest the centroid
        dist = ndimage.distance_transform_edt(np.pad(comp == big, 1))[1:-1, 1:-1]
        ii, jj = np.nonzero(dist >= dist.max() - 1e-9)
        ci, cj = np.nonzero(comp == big)
        k = int(np.argmin((ii - ci.mean()) ** 2 + (jj - cj.mean()) ** 2))
        i, j = ii[k], jj[k]
        frac = i / max(1, codes.shape[0] - 1)  # keep the text inside the axes near the edges
        ha = "left" if frac < 0.2 else ("right" if frac > 0.8 else "center")
        ax.text(X[i], Y[j], name, ha=ha, va="center", fontsize=5.5, color=_text_color(colors[name]),
                clip_on=True)


def plot_phase_map(ds, width="single", title=None, boundaries=True, region_names=True) -> Figure:
    """Phase map with categorical colours, named regions, legend and refined boundaries.

    Parameters
    ----------
    ds : xarray.Dataset
        Output of :func:`phasemap.scan.phase_map` (or its NetCDF file): needs attrs
        ``x_axis``, ``y_axis`` (and ``x_label``, ``y_label``), variable ``label``, optional
        ``converged`` and ``boundary_<x>``/``boundary_<y>``/``boundary_jump``.
    width : "single", "double" or float
        Journal column width or inches.
    title : str, optional
    boundaries : bool
        Overlay refined boundary points (filled: continuous, open red: first order).
    region_names : bool
        Write phase names inside the larger regions.

    Returns
    -------
    matplotlib.figure.Figure
    """
    try:
        xn, yn = ds.attrs["x_axis"], ds.attrs["y_axis"]
        lab = np.asarray(ds["label"].transpose(xn, yn).values).astype(str)
    except (KeyError, ValueError):
        raise ConfigError("phase map: dataset lacks x_axis/y_axis attributes or a 'label' variable "
                          "(is this a phasemap phase-map file?)") from None
    X, Y = np.asarray(ds[xn].values, float), np.asarray(ds[yn].values, float)
    names = sort_labels(lab.ravel())
    colors = phase_colors(names)
    codes = np.vectorize({n: i for i, n in enumerate(names)}.get, otypes=[int])(lab)
    w = figure_width(width)
    nleg = len(names) + (2 if boundaries else 0)
    ncol = 3 if w < 5 else 5
    legend_h = 0.14 * math.ceil(nleg / ncol) + 0.15
    with rc_context(STYLE):
        fig = Figure(figsize=(w, 0.78 * w + legend_h), layout="constrained")
        FigureCanvasAgg(fig)
        ax = fig.add_subplot()
        cmap = ListedColormap([colors[n] for n in names])
        norm = BoundaryNorm(np.arange(len(names) + 1) - 0.5, len(names))
        ax.pcolormesh(_edges(X), _edges(Y), codes.T, cmap=cmap, norm=norm, shading="flat", rasterized=True)
        if "unconverged" in colors:
            _hatch_cells(ax, lab == "unconverged", _edges(X), _edges(Y))
        cut = np.asarray(ds["cutoff"].transpose(xn, yn).values, bool) if "cutoff" in ds else None
        if cut is not None and cut.any():
            gx, gy = np.meshgrid(X, Y, indexing="ij")
            ax.plot(gx[cut], gy[cut], "+", color="#d95f02", ms=2.5, mew=0.4)
        if region_names:
            _region_labels(ax, codes, names, colors, X, Y)
        handles = [Patch(facecolor=colors[n], edgecolor="0.3", linewidth=0.3,
                         hatch=UNCONVERGED_HATCH if n == "unconverged" else None, label=n) for n in names]
        if cut is not None and cut.any():
            handles.append(Line2D([], [], ls="", marker="+", color="#d95f02", label="n_max cut-off matters"))
        bx, by = f"boundary_{xn}", f"boundary_{yn}"
        if boundaries and bx in ds and ds[bx].size:
            if "boundary_first_order" in ds:
                first = np.asarray(ds["boundary_first_order"].values, bool)
            else:  # files written before the halving test existed
                first = np.asarray(ds["boundary_jump"].values if "boundary_jump" in ds else np.zeros(ds[bx].size)) > 1e-3
            good = np.asarray(ds["boundary_converged"].values, bool) if "boundary_converged" in ds else \
                np.ones(ds[bx].size, bool)  # a bracket ending on an unconverged state is no boundary
            first &= good
            ax.plot(ds[bx].values[~first & good], ds[by].values[~first & good], ".", ms=1.2, color="k", mew=0)
            ax.plot(ds[bx].values[first], ds[by].values[first], "o", ms=1.6, mfc="none", mec="#b2182b", mew=0.4)
            handles += [Line2D([], [], ls="", marker=".", color="k", label="boundary (continuous)"),
                        Line2D([], [], ls="", marker="o", mfc="none", mec="#b2182b", label="boundary (first order)")]
        ax.set_xlim(_edges(X)[[0, -1]])
        ax.set_ylim(_edges(Y)[[0, -1]])
        ax.set_xlabel(ds.attrs.get("x_label", xn))
        ax.set_ylabel(ds.attrs.get("y_label", yn))
        if title:
            ax.set_title(_wrap(title, w), fontsize=7.5)
        fig.legend(handles=handles, loc="outside lower center", ncol=ncol, frameon=False,
                   handlelength=1.2, columnspacing=0.8, handletextpad=0.4)
    return fig


def _json_attr(ds, key):
    v = ds.attrs.get(key, "[]")
    if isinstance(v, str):
        try:
            return json.loads(v) if v else []
        except json.JSONDecodeError:
            return []
    return list(v)


def _num(v, default):
    if v is None:
        return default
    if isinstance(v, str):
        return {"inf": math.inf, "-inf": -math.inf}.get(v, default)
    return float(v)


def plot_filling_curve(ds, width="single", title=None) -> Figure:
    """Filling n(mu) with shaded, labelled plateaus and marked first-order jumps.

    Parameters
    ----------
    ds : xarray.Dataset
        ``FillingCurve.dataset`` (or its NetCDF / CSV file): coordinate ``mu``, variable
        ``filling``, optional ``converged``; attrs ``plateaus`` and ``jumps`` (JSON lists) and
        ``x_label``.
    width : "single", "double" or float
    title : str, optional

    Returns
    -------
    matplotlib.figure.Figure
    """
    if "mu" not in ds or "filling" not in ds:
        raise ConfigError("filling curve: dataset needs 'mu' and 'filling' (is this a phasemap curve file?)")
    mu = np.asarray(ds["mu"].values, float)
    n = np.asarray(ds["filling"].values, float)
    conv = np.asarray(ds["converged"].values, bool) if "converged" in ds else np.ones(len(mu), bool)
    plateaus, jumps = _json_attr(ds, "plateaus"), _json_attr(ds, "jumps")
    lo, hi = mu.min(), mu.max()
    colors = phase_colors([p.get("label", "solid") for p in plateaus])
    w = figure_width(width)
    with rc_context(STYLE):
        fig = Figure(figsize=(w, 0.72 * w), layout="constrained")
        FigureCanvasAgg(fig)
        ax = fig.add_subplot()
        for p in plateaus:
            a, b = _num(p.get("mu_lo"), lo), _num(p.get("mu_hi"), hi)
            a = _num(p.get("mu_lo_bound"), lo) if math.isnan(a) else a  # flagged edge: draw its bound
            b = _num(p.get("mu_hi_bound"), hi) if math.isnan(b) else b
            a, b = max(a, lo), min(b, hi)
            if b <= a:
                continue
            flagged = bool(p.get("flagged", False))
            ax.axvspan(a, b, color=colors.get(p.get("label"), "0.9"), alpha=0.45, lw=0,
                       hatch="////" if flagged else None)
            ax.text(0.5 * (a + b), float(p["filling"]) + 0.03 * max(1.0, n.max()),
                    p["fraction"] + ("?" if flagged else ""), ha="center", va="bottom", fontsize=6.5)
        # break the line at first-order jumps
        xs, ys = list(mu), list(n)
        for jmp in sorted(jumps, key=lambda j: -j["mu"]):
            i = int(np.searchsorted(mu, jmp["mu"]))
            if 0 < i < len(mu):
                xs.insert(i, np.nan), ys.insert(i, np.nan)
        ax.plot(xs, ys, "-", color="k", lw=1.0, label="n(μ)")
        if (~conv).any():
            ax.plot(mu[~conv], n[~conv], "x", color="0.5", ms=3, label="unconverged")
        if "cutoff" in ds and np.asarray(ds["cutoff"].values, bool).any():
            cut = np.asarray(ds["cutoff"].values, bool)
            ax.plot(mu[cut], n[cut], "+", color="#d95f02", ms=3, mew=0.5, label="n_max cut-off matters")
        jumps = [j for j in jumps if j.get("status", "found") == "found"]  # others are not results
        for k, jmp in enumerate(jumps):
            ax.plot([jmp["mu"]] * 2, [jmp["n_below"], jmp["n_above"]], ":", color="#b2182b", lw=0.9,
                    label="first-order jump" if k == 0 else None)
            ax.plot([jmp["mu"]] * 2, [jmp["n_below"], jmp["n_above"]], "o", ms=2, mfc="none", mec="#b2182b",
                    mew=0.6)
        ax.set_xlim(lo, hi)
        top = max(1.0, float(np.nanmax(n)) if len(n) else 1.0)
        ax.set_ylim(-0.04 * top, 1.12 * top)
        ax.set_xlabel(ds.attrs.get("x_label", "μ"))
        ax.set_ylabel("filling ⟨n⟩")
        if title:
            ax.set_title(_wrap(title, w), fontsize=7.5)
        ax.legend(loc="upper left", frameon=False)
    return fig


def save_figure(fig: Figure, stem, formats=("png", "pdf"), dpi: int = 300) -> list[Path]:
    """Write ``fig`` as ``stem.<fmt>`` for each format, atomically; returns the paths."""
    paths = []
    for fmt in formats:
        if fmt not in FORMATS:
            raise ConfigError(f"figure format: {fmt!r} not supported; allowed: {', '.join(FORMATS)}")
        path = Path(f"{stem}.{fmt}")
        with atomic_path(path) as tmp:
            fig.savefig(tmp, format=fmt, dpi=dpi)
        paths.append(path)
    return paths
