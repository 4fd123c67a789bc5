"""Paper-ready figures: phase maps and filling curves (matplotlib, Agg canvas, no pyplot).

Phase maps are drawn as filled regions bounded by boundary *lines*: each phase's edge passes
through the bisected boundary point on every grid edge it crosses (midpoints where the map was
not refined), so a coarse map shows no staircase. First-order boundaries are thick solid lines,
continuous ones thin dashed lines. ``plot_phase_map(..., style="cells")`` shows the raw grid.

Colours are fixed per phase (:func:`phase_color` depends on the label alone, so a phase has
the same colour in every figure of the package): Okabe-Ito-derived hues with lightness that
differs between neighbouring phases, plus hatching (supersolid dotted, stripe solids hatched,
unconverged cross-hatched), readable in greyscale and by colour-blind readers. Shades within a
family (solid 1/3, 1/2, 2/3; mott n=1, 2, ...) follow the filling.

Figures are sized for journal columns (single 3.4 in, double 7.0 in) and written as PNG
(300 dpi), PDF and SVG through :func:`phasemap.store.atomic_path`.
"""

from __future__ import annotations

import json
import math
import re
from fractions import Fraction
from pathlib import Path

import numpy as np
from matplotlib import rc_context
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import BoundaryNorm, ListedColormap, to_rgb
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from .model import ConfigError
from .store import atomic_path

__all__ = ["WIDTHS", "FORMATS", "figure_width", "phase_colors", "phase_color", "grey_level", "plot_phase_map",
           "plot_filling_curve", "save_figure", "boundary_crossings", "phase_hatch"]

#: Journal column widths in inches.
WIDTHS = {"single": 3.4, "double": 7.0}
#: Figure formats we write.
FORMATS = ("png", "pdf", "svg")
FAMILY_ORDER = ("empty", "mott", "solid", "supersolid", "superfluid", "normal", "full", "unconverged")
#: One colour per phase, fixed for the package (a function of the label alone, not of which other
#: phases a figure shows). Hues from the colour-blind-safe Okabe-Ito set; the families differ in
#: lightness too (greyscale: empty 0.97, superfluid 0.80, solid 1/3 0.70, 1/2 0.60 (hatched), 2/3 0.51,
#: supersolid 0.74 (dotted), mott n=1 0.60, n=2 0.42, full 0.22, normal fluid (T > 0) 0.88,
#: unconverged grey and cross-hatched),
#: so neighbouring regions stay apart in greyscale. Shades within a family follow the filling.
_FAMILY_RANGE = {"mott": ("#b0dca0", "#001408"), "solid": ("#fde3a7", "#9a3a00"),
                 "supersolid": ("#e3a7cb", "#a8437e"), "superfluid": ("#a6d8f5", "#a6d8f5")}
_FIXED = {"empty": "#f7f7f7", "full": "#4a3222", "unconverged": "#bdbdbd", "normal": "#f2dcc8"}
#: hatch patterns per family, and per pattern word of a label (greyscale and colour-blind readers)
HATCH = {"supersolid": "..", "unconverged": "xxxx"}
HATCH_WORDS = {"stripe": "////"}


def phase_hatch(label) -> str | None:
    """Hatch pattern of one phase label (fixed for the package), or None."""
    for word, h in HATCH_WORDS.items():
        if word in str(label).split():
            return h
    return HATCH.get(_family(label))
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
    """Colour (RGB) of every label: fixed per phase, the same in every figure of the package."""
    return {lab: phase_color(lab) for lab in sort_labels(labels)}


def phase_color(label) -> tuple:
    """Colour (RGB) of one phase label (depends on the label only)."""
    fam = _family(label)
    if fam in _FIXED:
        return to_rgb(_FIXED[fam])
    lo, hi = _FAMILY_RANGE.get(fam, ("#d9d9d9", "#737373"))
    f = _fraction(label)
    s = min(max(f / 4.0 if fam == "mott" else f, 0.0), 1.0)  # shade by filling (mott: n up to 4)
    a, b = np.array(to_rgb(lo)), np.array(to_rgb(hi))
    return tuple(float(v) for v in (1 - s) * a + s * b)


def grey_level(rgb) -> float:
    """Luminance (0 black .. 1 white) of a colour in greyscale print."""
    r, g, b = rgb
    return 0.299 * r + 0.587 * g + 0.114 * b


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
    return "white" if grey_level(rgb) < 0.45 else "black"


def _hatch_cells(ax, mask, xe, ye, hatch="xxxx"):
    """Hatch the grid cells where ``mask`` (shape (len(xe)-1, len(ye)-1)) is True."""
    from matplotlib.collections import PatchCollection
    from matplotlib.patches import Rectangle

    rects = [Rectangle((xe[i], ye[j]), xe[i + 1] - xe[i], ye[j + 1] - ye[j]) for i, j in zip(*np.nonzero(mask))]
    ax.add_collection(PatchCollection(rects, facecolor="none", edgecolor="0.35", linewidth=0.0,
                                      hatch=hatch))


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


def _frac_index(v, c):
    """Fractional grid index of coordinate values ``v`` on the (monotonic) axis ``c``."""
    c = np.asarray(c, float)
    if len(c) == 1:
        return np.zeros_like(np.asarray(v, float))
    if c[0] > c[-1]:
        return (len(c) - 1) - np.interp(v, c[::-1], np.arange(len(c)))
    return np.interp(v, c, np.arange(len(c)))


def boundary_crossings(ds, lab):
    """Where each phase boundary crosses each grid edge, in fractional grid indices.

    Every grid edge whose two ends carry different labels gets one crossing: the bisected
    boundary point of the dataset on that edge (``boundary_<x>``, ``boundary_<y>``) if there is
    one, else the edge's midpoint. Returns ``(pts (m, 2), pair codes (m, 2) as label strings,
    order (m,))`` with order 1 = first order, 0 = continuous, -1 = not refined (midpoint).
    """
    xn, yn = ds.attrs["x_axis"], ds.attrs["y_axis"]
    X, Y = np.asarray(ds[xn].values, float), np.asarray(ds[yn].values, float)
    known = {}
    bx, by = f"boundary_{xn}", f"boundary_{yn}"
    if bx in ds and ds[bx].size:
        fi, fj = _frac_index(ds[bx].values, X), _frac_index(ds[by].values, Y)
        if "boundary_first_order" in ds:
            first = np.asarray(ds["boundary_first_order"].values, bool)
        else:  # files written before the halving test existed
            first = np.asarray(ds["boundary_jump"].values if "boundary_jump" in ds else np.zeros(len(fi))) > 1e-3
        # a bracket ending on an unconverged state is no boundary: its edge counts as not refined
        good = np.asarray(ds["boundary_converged"].values, bool) if "boundary_converged" in ds else \
            np.ones(len(fi), bool)
        for a, b, f, ok in zip(fi, fj, first, good):
            if not ok:
                continue
            ra, rb = round(a), round(b)
            if abs(b - rb) < 1e-6:  # on an edge along the first axis
                known[(0, int(np.floor(a + 1e-9)), rb)] = (a, b, int(f))
            elif abs(a - ra) < 1e-6:
                known[(1, ra, int(np.floor(b + 1e-9)))] = (a, b, int(f))
    pts, pairs, order = [], [], []
    for axis in (0, 1):
        l1 = lab[:-1, :] if axis == 0 else lab[:, :-1]
        l2 = lab[1:, :] if axis == 0 else lab[:, 1:]
        for i, j in zip(*np.nonzero(l1 != l2)):
            hit = known.get((axis, int(i), int(j)))
            if hit is None:
                hit = (i + 0.5, j, -1) if axis == 0 else (i, j + 0.5, -1)
            pts.append(hit[:2])
            pairs.append((l1[i, j], l2[i, j]))
            order.append(hit[2])
    return np.array(pts, float).reshape(-1, 2), np.array(pairs, str).reshape(-1, 2), np.array(order, int)


def _signed_distance(inside, pts):
    """Distance (grid steps) to the nearest of ``pts``, positive inside, negative outside."""
    from scipy.spatial import cKDTree

    big = float(sum(inside.shape))
    if len(pts) == 0:
        return np.where(inside, big, -big)
    ii, jj = np.meshgrid(np.arange(inside.shape[0]), np.arange(inside.shape[1]), indexing="ij")
    d, _ = cKDTree(pts).query(np.stack([ii.ravel(), jj.ravel()], 1))
    return np.where(inside, 1.0, -1.0) * np.maximum(d.reshape(inside.shape), 1e-3)


def _to_axes(pts, X, Y):
    """Fractional grid indices -> axis coordinates."""
    xi = np.interp(pts[:, 0], np.arange(len(X)), X) if len(X) > 1 else np.full(len(pts), X[0])
    yi = np.interp(pts[:, 1], np.arange(len(Y)), Y) if len(Y) > 1 else np.full(len(pts), Y[0])
    return np.stack([xi, yi], 1)


def _smooth_regions(ax, lab, names, colors, X, Y, crossings):
    """Fill each phase as areas bounded by the boundary lines; return the lines per order."""
    import contourpy
    from matplotlib.patches import PathPatch
    from matplotlib.path import Path as MPath
    from scipy.spatial import cKDTree

    pts, pairs, order = crossings
    tree = cKDTree(pts) if len(pts) else None
    lines = {1: [], 0: [], -1: []}
    ii = np.arange(len(X), dtype=float)
    jj = np.arange(len(Y), dtype=float)
    gens = {}
    for name in names:
        inside = lab == name
        mine = np.any(pairs == name, axis=1) if len(pts) else np.zeros(0, bool)
        d = _signed_distance(inside, pts[mine])
        gens[name] = contourpy.contour_generator(ii, jj, d.T, fill_type="OuterCode", line_type="Separate")
    # two layers: regions widened by half a grid step underneath (fills the slivers the
    # distance fields leave open where three phases meet), the exact regions on top
    for level, hatch in ((-0.5, False), (-0.02, True)):
        for name in names:
            polys, codes = gens[name].filled(level, np.inf)
            for poly, code in zip(polys, codes):
                ax.add_patch(PathPatch(MPath(_to_axes(poly, X, Y), code), facecolor=colors[name],
                                       edgecolor="none", lw=0, hatch=phase_hatch(name) if hatch else None))
    for name in names:
        gen = gens[name]
        if tree is None:
            continue
        for line in gen.lines(0.0):
            if len(line) < 2:
                continue
            _, k = tree.query(line)
            own = np.array([min(p[0], p[1]) == name for p in pairs[k]])  # each boundary drawn once
            kind = order[k]
            start = 0
            for m in range(1, len(line) + 1):
                if m == len(line) or own[m] != own[start] or kind[m] != kind[start]:
                    if own[start] and m - start >= 1:
                        seg = line[start:min(m + 1, len(line))]
                        if len(seg) >= 2:
                            lines[int(kind[start])].append(_to_axes(seg, X, Y))
                    start = m
    return lines


LINE_STYLE = {1: dict(color="k", lw=1.1, ls="-"), 0: dict(color="k", lw=0.5, ls=(0, (3, 1.5))),
              -1: dict(color="0.35", lw=0.4, ls="-")}
LINE_NAME = {1: "first-order boundary", 0: "continuous boundary", -1: "boundary (not refined)"}


def plot_phase_map(ds, width="single", title=None, boundaries=True, region_names=True,
                   style="smooth") -> Figure:
    """Phase map: filled phase regions bounded by the refined boundary lines, named, with legend.

    Parameters
    ----------
    ds : xarray.Dataset
        Output of :func:`phasemap.scan.phase_map` (or its NetCDF file): needs attrs
        ``x_axis``, ``y_axis`` (and ``x_label``, ``y_label``), variable ``label``, optional
        ``boundary_<x>``/``boundary_<y>``/``boundary_first_order`` (the bisected boundary points).
    width : "single", "double" or float
        Journal column width or inches.
    title : str, optional
    boundaries : bool
        Draw the boundary lines: first order solid and thick, continuous dashed and thin (grey
        where the map was not refined).
    region_names : bool
        Write phase names inside the larger regions.
    style : {"smooth", "cells"}
        "smooth" (default): each phase is a filled area whose edge passes through the bisected
        boundary point on every grid edge it crosses (the zero line of a signed distance to
        those points), so boundaries are lines, not staircases. "cells": one coloured cell per
        grid point (the raw grid).

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
    if style not in ("smooth", "cells"):
        raise ConfigError(f"phase map style: expected 'smooth' or 'cells', got {style!r}")
    X, Y = np.asarray(ds[xn].values, float), np.asarray(ds[yn].values, float)
    names = sort_labels(lab.ravel())
    colors = phase_colors(names)
    codes = np.vectorize({n: i for i, n in enumerate(names)}.get, otypes=[int])(lab)
    smooth = style == "smooth" and len(X) > 1 and len(Y) > 1
    w = figure_width(width)
    crossings = boundary_crossings(ds, lab) if (smooth or boundaries) else None
    kinds = sorted(set(crossings[2].tolist()), reverse=True) if crossings is not None and boundaries else []
    nleg = len(names) + len(kinds)
    ncol = 3 if w < 5 else 5
    legend_h = 0.14 * math.ceil(nleg / ncol) + 0.15
    with rc_context({**STYLE, "hatch.linewidth": 0.35, "hatch.color": "0.25"}):
        fig = Figure(figsize=(w, 0.78 * w + legend_h), layout="constrained")
        FigureCanvasAgg(fig)
        ax = fig.add_subplot()
        handles = [Patch(facecolor=colors[n], edgecolor="0.3", linewidth=0.3,
                         hatch=phase_hatch(n), label=n) for n in names]
        if smooth:
            lines = _smooth_regions(ax, lab, names, colors, X, Y, crossings)
            # a hair beyond the data: ticks at the very edge are otherwise left out of the layout
            ex, ey = 1e-6 * np.ptp(X), 1e-6 * np.ptp(Y)
            ax.set_xlim(X.min() - ex, X.max() + ex)
            ax.set_ylim(Y.min() - ey, Y.max() + ey)
        else:
            cmap = ListedColormap([colors[n] for n in names])
            norm = BoundaryNorm(np.arange(len(names) + 1) - 0.5, len(names))
            ax.pcolormesh(_edges(X), _edges(Y), codes.T, cmap=cmap, norm=norm, shading="flat", rasterized=True)
            for n in names:
                if phase_hatch(n):
                    _hatch_cells(ax, lab == n, _edges(X), _edges(Y), phase_hatch(n))
            ax.set_xlim(_edges(X)[[0, -1]])
            ax.set_ylim(_edges(Y)[[0, -1]])
            lines = None
        if boundaries and crossings is not None:
            if lines is not None:
                from matplotlib.collections import LineCollection

                for kind in (-1, 0, 1):
                    if lines[kind]:
                        ax.add_collection(LineCollection(lines[kind], **LINE_STYLE[kind], capstyle="round"))
            else:
                xy = _to_axes(crossings[0], X, Y)
                for kind in (-1, 0, 1):
                    sel = crossings[2] == kind
                    ax.plot(xy[sel, 0], xy[sel, 1], ".", ms=1.5, mew=0, color=LINE_STYLE[kind]["color"])
            handles += [Line2D([], [], **LINE_STYLE[k], label=LINE_NAME[k]) for k in kinds]
        cut = np.asarray(ds["cutoff"].transpose(xn, yn).values, bool) if "cutoff" in ds else None
        if cut is not None and cut.any():
            gx, gy = np.meshgrid(X, Y, indexing="ij")
            ax.plot(gx[cut], gy[cut], "+", color="#d95f02", ms=2.5, mew=0.4)
            handles.append(Line2D([], [], ls="", marker="+", color="#d95f02", label="n_max cut-off matters"))
        if region_names:
            _region_labels(ax, codes, names, colors, X, Y)
        ax.set_xlabel(ds.attrs.get("x_label", xn))
        ax.set_ylabel(ds.attrs.get("y_label", yn))
        if title:
            ax.set_title(_wrap(title, w), fontsize=7.5)
        fig.legend(handles=handles, loc="outside lower center", ncol=ncol, frameon=False,
                   handlelength=1.6, columnspacing=0.8, handletextpad=0.4)
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
