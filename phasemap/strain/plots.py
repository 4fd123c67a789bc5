"""Figures of a strain sweep (matplotlib, Agg canvas), one line per method with a legend.

* :func:`plot_plateau_edges` — plateau edges versus strain, solid region shaded, critical
  strains and the band across methods;
* :func:`plot_order_parameters` — solid order parameter S(Q) and condensate versus strain at
  a fixed chemical potential, plus the plateau width relative to V;
* :func:`plot_phase_map` — (strain, mu) phase map, one panel per method;
* :func:`plot_critical_vs_lambda` — critical strain versus the interaction scale factor;
* :func:`plot_melting` — melting temperature of the solid versus strain per method, with the
  measurement temperature drawn across.

Every method is drawn from its :class:`~phasemap.strain.record.StepRecord`. Methods with sharp
edges (mf, cmf) are solid lines with the solid region shaded; finite-lattice methods (ed) are
open markers, not shaded (a finite-cluster gap is not a plateau), with S(K)/N, the indicator
threshold and gap/V; their steepest-drop strain is marked as an indicator (triangle), never as
a critical strain.

Sized for journal columns (3.4 in single, 7.0 in double), axis labels with units; written as
PNG + PDF by :func:`save_all` through :func:`phasemap.plot.save_figure` (atomic).
"""

from __future__ import annotations

import numpy as np
from matplotlib import rc_context
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import BoundaryNorm, ListedColormap
from matplotlib.figure import Figure
from matplotlib.patches import Patch

__all__ = ["plot_plateau_edges", "plot_order_parameters", "plot_phase_map", "plot_critical_vs_lambda", "plot_melting",
           "save_all",
           "method_colors"]

SINGLE, DOUBLE = 3.4, 7.0
_CYCLE = ["#1b6ca8", "#d1495b", "#2e933c", "#8f5db7", "#e08e0b", "#555555"]
_STYLES = ["-", "--", "-.", ":"]


def _style():
    try:
        from ..plot import STYLE

        return STYLE
    except ImportError:  # pragma: no cover
        return {"font.size": 8, "axes.labelsize": 8, "legend.fontsize": 6.5, "pdf.fonttype": 42}


def method_colors(names) -> dict:
    return {n: _CYCLE[i % len(_CYCLE)] for i, n in enumerate(names)}


def _finite_names(sweep) -> list:
    """Methods whose record is a finite-lattice step (no sharp edges)."""
    return [n for n in sweep.names if not sweep.records[n].sharp]


def _finite_label(sweep, n) -> str:
    info = sweep.records[n].info
    return f"{n} ({info.get('n_sites', '?')} sites, N={info.get('N', '?')})"


def _label(sweep, n) -> str:
    """Legend label; statistical methods with several sizes say which (``qmc:6+9 (6x6+9x9, L->inf)``)."""
    info = sweep.records[n].info
    return f"{n.split(',')[0]} ({info['cluster']}, L→∞)" if "sizes" in info else n  # options stay in the data


def _errorbar_lines(axes, sweep, colors, vref):
    """Methods with error bars and no grand-canonical grid (qmc): extrapolated S(K)/N, stiffness, width/V."""
    for n in sweep.names:
        r = sweep.records[n]
        if r.grid is not None or not r.sharp or "S(K)/N" not in r.errors:
            continue
        s = sweep.strains
        for ax, key, scale in ((axes[0], "S(K)/N", 1.0), (axes[1], "stiffness", 1.0), (axes[2], "width", None)):
            v = r.width if key == "width" else r.order.get(key)
            e = r.errors.get(key)
            if v is None or e is None:
                continue
            f = 1.0 / vref if scale is None else 1.0
            k = np.isfinite(v)
            lab = f"{_label(sweep, n)}: {'S(K)/N' if key == 'S(K)/N' else 'ρ_s' if key == 'stiffness' else 'width/V'}"
            ax.errorbar(s[k], (v * f)[k], yerr=(e * f)[k], fmt="s-", color=colors[n], ms=2.5, lw=0.8, capsize=1.5,
                        label=lab)
            ax.legend(frameon=False, loc="best", fontsize=5)


def _fig(w, h):
    fig = Figure(figsize=(w, h), constrained_layout=True)
    FigureCanvasAgg(fig)
    return fig


def _mark_critical(ax, sweep, colors):
    b = sweep.band
    if b["lo"] is not None and b["hi"] is not None and b["hi"] > b["lo"]:
        ax.axvspan(b["lo"], b["hi"], color="0.85", zorder=0, lw=0, label="band across methods")
    for n in sweep.names:
        c = sweep.critical[n]
        if c.in_band:
            ax.axvline(c.strain_c, color=colors[n], ls=":", lw=0.9)


def plot_plateau_edges(sweep) -> Figure:
    """Plateau edges mu_lo, mu_hi versus strain for every method; the solid region shaded."""
    with rc_context(_style()):
        fig = _fig(SINGLE, 2.6)
        ax = fig.add_subplot()
        colors = method_colors(sweep.names)
        _mark_critical(ax, sweep, colors)
        s = sweep.strains
        for i, n in enumerate(sweep.sharp_names):
            r = sweep.records[n]
            ok = r.exists & np.isfinite(r.mu_lo) & np.isfinite(r.mu_hi)
            lo = np.where(ok, r.mu_lo, np.nan)
            hi = np.where(ok, r.mu_hi, np.nan)
            ls = _STYLES[i % len(_STYLES)]
            ax.fill_between(s, lo, hi, where=ok, color=colors[n], alpha=0.18, lw=0)
            ax.plot(s, lo, ls=ls, color=colors[n], marker=".", ms=3, label=_label(sweep, n))
            ax.plot(s, hi, ls=ls, color=colors[n], marker=".", ms=3)
            for j, (lab, keys) in enumerate(r.info.get("components", {}).items()):
                # a method built from several systems (cmf-scaled: every cluster) draws each one thin
                for key in keys:
                    v = r.order[key]
                    k = np.isfinite(v)
                    ax.plot(s[k], v[k], ls=_STYLES[(j + 1) % len(_STYLES)], color=colors[n], lw=0.6, alpha=0.55,
                            marker=".", ms=2, label=lab if key == keys[0] else None)
            if "mu_lo" in r.errors:  # statistical methods: one-sigma error bars, every computed strain
                for edge in ("mu_lo", "mu_hi"):
                    v = getattr(r, edge)
                    k = np.isfinite(v)
                    ax.errorbar(s[k], v[k], yerr=r.errors[edge][k], fmt="none", ecolor=colors[n], elinewidth=0.7,
                                capsize=1.5)
                    ax.plot(s[k], v[k], ls=ls, color=colors[n], lw=0.9)  # joined across strains not computed
            c = sweep.critical[n]
            if c.in_band:
                ax.plot([], [], color=colors[n], ls=":", lw=0.9, label=f"{n}: $s_c$ = {c.strain_c:.4g}")
        for n in _finite_names(sweep):
            e = sweep.records[n]
            ax.plot(s, e.mu_lo, ls="--", color=colors[n], marker="o", mfc="none", ms=3, lw=0.9,
                    label=f"{_finite_label(sweep, n)}: μ∓(N)")
            ax.plot(s, e.mu_hi, ls="--", color=colors[n], marker="o", mfc="none", ms=3, lw=0.9)
        ax.set_xlabel(sweep.table.strain_label)
        ax.set_ylabel(f"μ [{sweep.table.unit}]")
        fin = _finite_names(sweep)
        title = f"{sweep.fraction} plateau (shaded: solid)"
        if fin:
            title = f"{sweep.fraction} plateau (shaded: solid; open markers: finite-cluster step)"
        ax.set_title(title, fontsize=8 if not fin else 7)
        ax.legend(frameon=False, loc="best", fontsize=5 if fin else None)
    return fig


def _mu_index(sweep, mu):
    if not sweep.grid_names:
        return None, mu
    if mu is None:
        r = sweep.records[sweep.grid_names[0]]
        ok = r.exists & np.isfinite(r.mu_lo) & np.isfinite(r.mu_hi)
        mu = 0.5 * (r.mu_lo[ok][0] + r.mu_hi[ok][0]) if ok.any() else sweep.mu[len(sweep.mu) // 2]
    return int(np.argmin(np.abs(sweep.mu - mu))), mu


def _computed_columns(g) -> np.ndarray:
    """Chemical-potential columns of a method's map that were solved (cmf solves every other one)."""
    c = g.get("computed")
    return np.arange(g["label"].shape[1]) if c is None else np.nonzero(np.asarray(c).all(0))[0]


def _computed_index(g, k: int) -> int:
    """The solved column of the map nearest to column ``k``."""
    cols = _computed_columns(g)
    return int(cols[np.argmin(np.abs(cols - k))])


def plot_order_parameters(sweep, mu=None) -> Figure:
    """S(Q) and condensate at a fixed mu (grid point nearest to ``mu``), and width/V, versus strain."""
    k, mu = _mu_index(sweep, mu)
    mu_k = float(sweep.mu[k]) if k is not None else None
    u = sweep.table.unit
    vref = np.abs(sweep.table.params(sweep.strains)["V"]).max(1)
    with rc_context(_style()):
        fig = _fig(SINGLE, 4.2)
        axes = fig.subplots(3, 1, sharex=True)
        colors = method_colors(sweep.names)
        for i, n in enumerate(sweep.grid_names):
            g = sweep.records[n].grid
            ls = _STYLES[i % len(_STYLES)]
            kn = _computed_index(g, k)
            conv = g["converged"][:, kn]
            sq = np.where(conv, g["sq_max"][:, kn], np.nan)
            cd = np.where(conv, g["condensate_max"][:, kn], np.nan)
            axes[0].plot(sweep.strains, sq, ls=ls, color=colors[n], marker=".", ms=3, label=n)
            axes[1].plot(sweep.strains, cd, ls=ls, color=colors[n], marker=".", ms=3, label=n)
            r = sweep.records[n]
            axes[2].plot(sweep.strains, r.width / vref, ls=ls, color=colors[n], marker=".", ms=3, label=n)
            if (~conv).any():
                axes[0].plot(sweep.strains[~conv], np.zeros((~conv).sum()), "x", color=colors[n], ms=4,
                             label=f"{n}: not converged")
        eds = _finite_names(sweep)
        for n in eds:
            e = sweep.records[n]
            sk = e.order.get("S(K)/N", np.full(len(sweep.strains), np.nan))
            axes[0].plot(sweep.strains, sk, ls="--", color=colors[n], marker="o", mfc="none", ms=3, lw=0.9,
                         label=f"{_finite_label(sweep, n)}: S(K)/N")
            axes[2].plot(sweep.strains, e.width / vref, ls="--", color=colors[n], marker="o", mfc="none", ms=3, lw=0.9,
                         label=f"{n}: gap/V")
            d = sweep.critical[n].to_dict().get("indicator_SK_drop")
            if d:
                axes[0].plot([d["strain"]], [np.interp(d["strain"], sweep.strains, sk)], marker="v", color=colors[n],
                             ms=5, ls="none", label=f"{n}: steepest S(K)/N drop {d['strain']:.3g} (indicator)")
        thr = [sweep.records[n].info["SK_threshold"] for n in eds if "SK_threshold" in sweep.records[n].info]
        if thr:
            axes[0].axhline(thr[0], color="0.4", lw=0.6, ls=":", label=f"finite-cluster order indicator {thr[0]:g}")
        _errorbar_lines(axes, sweep, colors, vref)
        for ax in axes:
            _mark_critical(ax, sweep, colors)
        axes[0].set_ylabel("S(Q) (solid order)" if not eds else "S(Q), ED: S(K)/N")
        has_rho = any("stiffness" in sweep.records[n].errors for n in sweep.names)
        axes[1].set_ylabel("max |⟨b⟩|" + (f", QMC ρ_s [{u}]" if has_rho else ""))
        axes[2].set_ylabel("plateau width / V" if not eds else "width / V (ED: gap / V)")
        axes[2].set_xlabel(sweep.table.strain_label)
        if mu_k is not None:
            title = f"order parameters at μ = {mu_k:.3g} {u}" + ("; ED at N = f L" if eds else "")
        else:
            title = "ED: order at N = f L"
        axes[0].set_title(title, fontsize=8)
        axes[0].legend(frameon=False, loc="best", fontsize=5 if eds else None)
        if eds:
            axes[2].legend(frameon=False, loc="best", fontsize=5)
    return fig


def plot_phase_map(sweep) -> Figure:
    """(strain, mu) phase map, one panel per method, with the plateau edges overlaid."""
    from ..plot import phase_colors, sort_labels

    names = sweep.grid_names
    if not names:
        return None  # finite-lattice methods only: no (strain, mu) map
    grids = {n: sweep.records[n].grid for n in names}
    labels = sort_labels(np.unique(np.concatenate([g["label"][:, _computed_columns(g)].ravel() for g in grids.values()])))
    colors = phase_colors(labels)
    idx = {lab: i for i, lab in enumerate(labels)}
    cmap = ListedColormap([colors[lab] for lab in labels])
    norm = BoundaryNorm(np.arange(len(labels) + 1) - 0.5, len(labels))
    w = SINGLE if len(names) == 1 else DOUBLE
    with rc_context(_style()):
        fig = _fig(w, 2.8)
        axes = np.atleast_1d(fig.subplots(1, len(names), sharey=True))
        s, mu = sweep.strains, sweep.mu
        for ax, n in zip(axes, names):
            cols = _computed_columns(grids[n])  # a coarser map (cmf) is drawn on its own mu points
            codes = np.vectorize(idx.get)(grids[n]["label"][:, cols])
            ax.pcolormesh(_edges(s), _edges(mu[cols]), codes.T, cmap=cmap, norm=norm, shading="flat", rasterized=True)
            r = sweep.records[n]
            ok = r.exists
            ax.plot(s[ok], r.mu_lo[ok], "k-", lw=0.7)
            ax.plot(s[ok], r.mu_hi[ok], "k-", lw=0.7)
            c = sweep.critical[n]
            if c.in_band:
                ax.axvline(c.strain_c, color="k", ls=":", lw=0.8)
            ax.set_title(n, fontsize=8)
            ax.set_xlabel(sweep.table.strain_label)
        axes[0].set_ylabel(f"μ [{sweep.table.unit}]")
        handles = [Patch(facecolor=colors[lab], edgecolor="0.4", lw=0.3, label=lab) for lab in labels]
        fig.legend(handles=handles, loc="outside right upper", frameon=False, fontsize=6)
    return fig


def _edges(c):
    c = np.asarray(c, float)
    if len(c) == 1:
        return np.array([c[0] - 0.5, c[0] + 0.5])
    mid = 0.5 * (c[1:] + c[:-1])
    return np.concatenate([[c[0] - (mid[0] - c[0])], mid, [c[-1] + (c[-1] - mid[-1])]])


def plot_critical_vs_lambda(sweep) -> Figure | None:
    """Critical strain versus lambda for every method; the region outside the table hatched."""
    if not sweep.lambdas:
        return None
    lo, hi = sweep.table.span
    with rc_context(_style()):
        fig = _fig(SINGLE, 2.6)
        ax = fig.add_subplot()
        colors = method_colors(sweep.names)
        for i, n in enumerate(sweep.names):
            L = sweep.lambdas.get(n)
            if L is None:
                continue
            ax.errorbar(L.lambdas, L.strain_c, yerr=L.uncertainty, color=colors[n], ls=_STYLES[i % len(_STYLES)],
                        marker="o", ms=3, capsize=1.5, label=n)
            for e in L.entry:
                ax.plot([e["lambda"]], [e["strain"]], marker="*", color=colors[n], ms=6)
        ax.axhline(lo, color="0.5", lw=0.6)
        ax.axhline(hi, color="0.5", lw=0.6)
        ax.set_ylim(lo - 0.05 * (hi - lo), hi + 0.05 * (hi - lo))
        p = next(iter(sweep.lambdas.values())).param
        what = "V, V₂" if p == "V" else p
        ax.set_xlabel(f"λ ({what} → λ·{what})")
        ax.set_ylabel(f"critical {sweep.table.strain_label}")
        ax.set_title("critical strain vs interaction scale (★: crosses table end)", fontsize=7)
        ax.legend(frameon=False, loc="best")
    return fig


def plot_melting(sweep) -> Figure | None:
    """Melting temperature of the solid versus strain, one line per method with a finite-temperature
    mode (open circles: first-order melting; error bars: Monte Carlo), the measurement
    temperature drawn across."""
    if not sweep.melting:
        return None
    with rc_context(_style()):
        fig = _fig(SINGLE, 2.6)
        ax = fig.add_subplot()
        colors = method_colors(sweep.names)
        s = sweep.strains
        top = 0.0
        for i, n in enumerate(sweep.names):
            r = sweep.melting.get(n)
            if r is None:
                continue
            T = np.where(np.isfinite(r.T_melt), r.T_melt, np.nan)
            err = r.errors.get("T_melt")
            ax.errorbar(s, T, yerr=err, color=colors[n], ls=_STYLES[i % len(_STYLES)], marker=".", ms=3, capsize=1.5,
                        label=n)
            fo = r.first_order & np.isfinite(T)
            if fo.any():
                ax.plot(s[fo], T[fo], "o", mfc="none", color=colors[n], ms=4)
            if np.isfinite(T).any():
                top = max(top, float(np.nanmax(T)))
        if any(r.first_order.any() for r in sweep.melting.values()):
            ax.plot([], [], "o", mfc="none", color="0.3", ms=4, label="first-order melting")
        if sweep.T_measure is not None:
            ax.axhline(sweep.T_measure, color="k", lw=0.9, ls="--",
                       label=f"measurement T = {sweep.T_measure:g} {sweep.table.unit}")
            top = max(top, sweep.T_measure)
        ax.set_ylim(0, 1.1 * top if top > 0 else 1.0)
        ax.set_xlabel(sweep.table.strain_label)
        ax.set_ylabel(f"$T_{{melt}}$ [{sweep.table.unit}]")
        ax.set_title(f"melting of the {sweep.fraction} solid (mean field overestimates it)", fontsize=7)
        ax.legend(frameon=False, loc="best")
    return fig


def save_all(sweep, outdir, formats=("png", "pdf")) -> list:
    """Write every figure of ``sweep`` into ``outdir`` (PNG + PDF); returns the paths."""
    from pathlib import Path

    from ..plot import save_figure

    out = Path(outdir)
    paths = []
    figs = {"plateau_edges": plot_plateau_edges(sweep), "order_parameters": plot_order_parameters(sweep),
            "phase_map": plot_phase_map(sweep), "critical_vs_lambda": plot_critical_vs_lambda(sweep),
            "melting": plot_melting(sweep)}
    for n in sweep.names:  # a critical result may bring its own figure (cmf-scaled: critical strain versus λ)
        make = getattr(sweep.critical[n], "figure", None)
        if callable(make):
            figs[f"critical_scaling_{''.join(c if c.isalnum() else '_' for c in n)}"] = make()
    for name, fig in figs.items():
        if fig is not None:
            paths += save_figure(fig, out / f"strain_{name}", formats=formats)
    return paths
