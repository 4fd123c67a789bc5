"""Figure: the ED staircase n(mu) of a cluster over the mean-field filling curve(s).

The figure never solves: it is handed the mean-field curves as data
(``{method: (mu, filling)}``, e.g. from :func:`phasemap.scan.filling_curves`).
"""

from __future__ import annotations

import numpy as np

from .io import filling_from_staircase

__all__ = ["plot_staircase", "overlay_grid"]


def overlay_grid(ds, mu=None, n_mf=161):
    """``(mu, mu_mf)``: the chemical potentials of the staircase figure and of its overlays."""
    mu_p, mu_m = ds["mu_plus"].values, ds["mu_minus"].values
    finite = np.concatenate([mu_p[np.isfinite(mu_p)], mu_m[np.isfinite(mu_m)]])
    if mu is None:
        lo, hi = (finite.min(), finite.max()) if len(finite) else (-1.0, 1.0)
        pad = 0.1 * (hi - lo + 1e-9)
        mu = np.linspace(lo - pad, hi + pad, 801)
    mu = np.asarray(mu, float)
    return mu, np.linspace(mu[0], mu[-1], n_mf)


def plot_staircase(ds, model, path_stem, curves=None, mu=None, title=None) -> list:
    """Draw n(mu) of the cluster (steps) over the given filling curves; save PNG and PDF.

    ``curves`` is ``{method: (mu, filling)}`` (data, computed by the caller); ``mu`` the
    chemical potentials of the steps (default :func:`overlay_grid`). Returns the written paths.
    """
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    mu, _ = overlay_grid(ds, mu)
    n_ed = filling_from_staircase(ds, mu)
    fig, ax = plt.subplots(figsize=(3.4, 2.6), dpi=200)
    style = {"mf": ("C0", "-", "mean field"), "cmf": ("C2", "--", "cluster mean field")}
    for m, (x, y) in (curves or {}).items():
        c, ls, lab = style.get(m, ("C3", ":", m))
        ax.plot(x, y, color=c, ls=ls, lw=1.2, label=lab)
    L = int(ds.attrs["n_sites"])
    ax.step(mu, n_ed, where="post", color="k", lw=1.0, label=f"ED, {L} sites")
    ax.set_xlabel(f"$\\mu$ [{model.unit}]")
    ax.set_ylabel("filling $n$")
    ax.set_ylim(-0.02, model.n_max + 0.02 if not model.hardcore else 1.02)
    ax.legend(fontsize=6, frameon=False, loc="upper left")
    if title:
        import textwrap

        ax.set_title("\n".join(textwrap.wrap(title, 60)), fontsize=5.5)
    fig.tight_layout()
    out = []
    for ext in ("png", "pdf"):
        p = f"{path_stem}.{ext}"
        fig.savefig(p)
        out.append(p)
    plt.close(fig)
    return out
