"""Paper-ready figures of finite-size scaling (journal widths, PNG + PDF, error bars everywhere)."""

from __future__ import annotations

import numpy as np
from matplotlib.figure import Figure
from matplotlib.ticker import FormatStrFormatter, MaxNLocator

from ..plot import STYLE, WIDTHS

__all__ = ["plot_scaling", "plot_crossing"]


def _fig(w, h, ncols):
    import matplotlib

    matplotlib.rcParams.update(STYLE)
    fig = Figure(figsize=(w, h), constrained_layout=True)
    return fig, fig.subplots(1, ncols, squeeze=False)[0]


def plot_scaling(res) -> Figure:
    """S(K)/N and the stiffness versus 1/L**power with their fits and extrapolated values."""
    fig, axes = _fig(WIDTHS["double"], 2.4, 2)
    unit = res.model.unit or "V"
    for ax, key, lab in ((axes[0], "S(K)/N", "S(K)/N"), (axes[1], "stiffness", rf"$\rho_s$ [{unit}]")):
        d = res.extrapolations.get(key)
        p = d["power"] if d else res.settings.get("power", 1.0)
        for L, r in zip(res.sizes, res.results):
            e = r.estimates.get(key)
            if e is None:
                continue
            ok = r.decorrelated
            ax.errorbar(1.0 / L ** p, e.value, yerr=e.error, fmt="o" if ok else "x", color="k" if ok else "0.6",
                        ms=3.5, capsize=2, label=None if ok else "not decorrelated (excluded)")
        if d:
            x = np.linspace(0, 1.0 / min(res.sizes) ** p, 50)
            ax.plot(x, d["value"] + d["slope"] * x, color="C3", lw=0.8)
            ax.errorbar([0], [d["value"]], yerr=[d["error"]], fmt="s", color="C3", ms=4, capsize=2,
                        label=f"L→∞: {d['value']:.3g} ± {d['error']:.1g}")
        ax.axhline(0, color="0.7", lw=0.5)
        ax.set_xlabel("1/L" + ("" if p == 1 else f"$^{{{p:g}}}$"))
        ax.set_ylabel(lab)
        ax.set_xlim(left=-0.01)
        h, _ = ax.get_legend_handles_labels()
        if h:
            ax.legend(frameon=False)
    fig.suptitle(f"{res.model.describe()} — phase: {res.classification['phase']}", fontsize=7)
    return fig


def plot_crossing(scan) -> Figure:
    """Binder ratio and L * rho_s versus the scanned parameter, one curve per size, crossings marked."""
    fig, axes = _fig(WIDTHS["double"], 2.4, 2)
    for ax, key, lab in ((axes[0], "binder", r"$\langle|\rho_K|^4\rangle/\langle|\rho_K|^2\rangle^2$"),
                         (axes[1], "L*stiffness", r"$L\,\rho_s$")):
        v, e = scan.curves[key]
        for a, L in enumerate(scan.sizes):
            ax.errorbar(scan.values, v[a], yerr=e[a], fmt="o-", ms=3, capsize=2, lw=0.8, label=f"L = {L}")
        c = scan.combined[key]
        if c["value"] is not None:
            ax.axvline(c["value"], color="0.4", lw=0.6, ls="--")
            if c.get("bracket"):
                ax.axvspan(*c["bracket"], color="0.85", lw=0)
            elif c["stat_error"]:
                ax.axvspan(c["value"] - c["stat_error"], c["value"] + c["stat_error"], color="0.85", lw=0)
        ax.set_xlabel(scan.axis)
        ax.set_ylabel(lab)
        ax.xaxis.set_major_locator(MaxNLocator(5))  # scan values like 0.1025 would overlap
        ax.xaxis.set_major_formatter(FormatStrFormatter("%.3g"))
        ax.legend(frameon=False)
    fig.suptitle(f"{scan.model.describe()}; {scan.axis} scanned, runs not decorrelated left out", fontsize=7)
    return fig
