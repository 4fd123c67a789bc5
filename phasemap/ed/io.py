"""Reading and saving ED staircase data; saving goes through :mod:`phasemap.store` (atomic: temporary file + ``os.replace``)."""

from __future__ import annotations

from pathlib import Path

import numpy as np

__all__ = ["save_dataset", "filling_from_staircase", "canonical_mu"]


def save_dataset(ds, path) -> Path:
    """Write a Dataset atomically: ``.nc`` (NetCDF via :func:`phasemap.store.save_netcdf`) or
    ``.csv`` (1-D table with the attributes as a commented header, :func:`phasemap.store.save_csv`)."""
    from .. import store

    path = Path(path)
    if path.suffix == ".nc":
        return store.save_netcdf(ds, path)
    if path.suffix == ".csv":
        dims = list(ds.dims)
        if len(dims) != 1:
            raise ValueError(f"output: CSV needs a 1-D dataset, got dimensions {dims}")
        cols = {dims[0]: ds[dims[0]].values}
        cols.update({k: ds[k].values for k in ds.coords if k != dims[0]})
        cols.update({k: ds[k].values for k in ds.data_vars})
        return store.save_csv(path, cols, dict(ds.attrs))
    raise ValueError(f"output: expected a .nc or .csv file name, got {path.name!r}")


def filling_from_staircase(ds, mu) -> np.ndarray:
    """Grand-canonical filling N*(mu)/L of the cluster from a staircase Dataset.

    Only the particle numbers in ``ds`` compete (use the full range for a true staircase).
    """
    mu = np.atleast_1d(np.asarray(mu, float))
    Ec = ds["E_canonical"].values
    N = ds["N"].values
    k = np.argmin(Ec[None, :] - mu[:, None] * N[None, :], axis=1)
    return N[k] / int(ds.attrs["n_sites"])


def canonical_mu(ns, Ec):
    """Canonical chemical potentials of a staircase: ``(mu_minus, mu_plus)``.

    ``mu_minus(N) = E_c(N) - E_c(N-1)``, ``mu_plus(N) = E_c(N+1) - E_c(N)`` along the last axis of
    ``Ec`` (``E_c = E0 + mu N``) at particle numbers ``ns``; NaN where the neighbour N +- 1 is
    not in ``ns``. The one helper for every mu+-(N) (staircase, solve_ed, strain ED step).
    """
    ns = np.asarray(ns)
    Ec = np.asarray(Ec, float)
    mu_m = np.full(Ec.shape, np.nan)
    mu_p = np.full(Ec.shape, np.nan)
    step = np.diff(ns) == 1
    d = np.diff(Ec, axis=-1)
    mu_p[..., :-1] = np.where(step, d, np.nan)
    mu_m[..., 1:] = np.where(step, d, np.nan)
    return mu_m, mu_p
