"""Figure: the ED staircase n(mu) of a cluster over the mean-field filling curve(s).

The mean-field curves come from :func:`phasemap.scan.filling_curve` (``method="mf"``, and
``"cmf"`` when available) evaluated with absolute chemical potentials.
"""

from __future__ import annotations

import numpy as np

from .staircase import filling_from_staircase

__all__ = ["mean_field_curves", "plot_staircase"]


def mean_field_curves(model, mu, methods=("mf",)) -> tuple[dict, list]:
    """{method: (mu, filling)} for the methods that are available, and notes for the rest."""
    curves, notes = {}, []
    try:
        from ..scan import filling_curve
    except ImportError as e:
        return curves, [f"mean-field overlay unavailable (phasemap.scan.filling_curve: {e})"]
    for m in methods:
        try:
            fc = filling_curve(model, mu=np.asarray(mu, float), relative=False, method=m, refine=False)
            curves[m] = (np.asarray(fc.mu, float), np.asarray(fc.filling, float))
        except Exception as e:  # noqa: BLE001 - overlay is optional; report why it is missing
            notes.append(f"{m} filling curve unavailable: {type(e).__name__}: {e}")
    return curves, notes


def plot_staircase(ds, model, path_stem, mu=None, methods=("mf",), title=None, n_mf=161) -> tuple[list, list]:
    """Draw n(mu) of the cluster (steps) over the mean-field curves; save PNG and PDF.

    ``methods`` lists the mean-field filling curves to overlay ("mf"; "cmf" is much slower),
    evaluated on ``n_mf`` chemical potentials. Returns (written paths, notes about missing
    overlays).
    """
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    mu_p, mu_m = ds["mu_plus"].values, ds["mu_minus"].values
    finite = np.concatenate([mu_p[np.isfinite(mu_p)], mu_m[np.isfinite(mu_m)]])
    if mu is None:
        lo, hi = (finite.min(), finite.max()) if len(finite) else (-1.0, 1.0)
        pad = 0.1 * (hi - lo + 1e-9)
        mu = np.linspace(lo - pad, hi + pad, 801)
    mu = np.asarray(mu, float)
    n_ed = filling_from_staircase(ds, mu)
    mu_mf = np.linspace(mu[0], mu[-1], n_mf)
    curves, notes = mean_field_curves(model, mu_mf, methods) if methods else ({}, [])
    fig, ax = plt.subplots(figsize=(3.4, 2.6), dpi=200)
    style = {"mf": ("C0", "-", "mean field"), "cmf": ("C2", "--", "cluster mean field")}
    for m, (x, y) in curves.items():
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
    return out, notes
