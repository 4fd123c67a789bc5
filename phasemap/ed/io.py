"""Saving ED results through :mod:`phasemap.store` (atomic: temporary file + ``os.replace``)."""

from __future__ import annotations

from pathlib import Path

__all__ = ["save_dataset"]


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
