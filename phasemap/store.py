"""Results on disk: atomic NetCDF / CSV writes, loaders, and resumable scan checkpoints.

Every writer goes through :func:`atomic_path`: the file is written under a temporary name in
the destination folder and moved into place with :func:`os.replace`, so a reader (or a crash)
never sees a half-written result.

Formats
-------
- Labelled grids (phase maps, filling curves): NetCDF-4 via xarray with the ``h5netcdf``
  engine. Attributes that NetCDF cannot hold (dicts, lists, booleans, None) are stored as
  JSON strings / integers; :func:`load_netcdf` returns them as stored (JSON strings).
- 1-D curves and tables: CSV with a commented header (``# key: <json value>``) carrying the
  metadata, then one header row of column names.
- Checkpoints of long scans: :class:`ChunkStore`, a folder of per-chunk ``.npz`` files plus a
  ``manifest.json`` holding a hash of the scan's parameters.
"""

from __future__ import annotations

import contextlib
import csv
import hashlib
import io
import json
import math
import os
import tempfile
from pathlib import Path

import numpy as np
import xarray as xr

from .model import ConfigError

__all__ = ["dumps_json", "atomic_path", "atomic_write_text", "save_netcdf", "load_netcdf", "save_csv", "load_csv",
           "curve_to_dataset", "ChunkStore", "params_hash", "jsonable"]


# -- atomic writes -----------------------------------------------------------------------------
@contextlib.contextmanager
def atomic_path(path):
    """Context manager yielding a temporary path next to ``path``; moved into place on success.

    The temporary file keeps the suffix of ``path`` (writers that infer the format from the
    suffix, e.g. matplotlib, keep working). On an exception the temporary file is removed and
    ``path`` is left untouched.

    Examples
    --------
    >>> with atomic_path("out/map.nc") as tmp:          # doctest: +SKIP
    ...     ds.to_netcdf(tmp, engine="h5netcdf")
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=f".tmp{path.suffix}", dir=path.parent)
    os.close(fd)
    try:
        yield Path(tmp)
        os.chmod(tmp, 0o666 & ~_umask())  # mkstemp makes 0600 files; results get the usual mode
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def atomic_write_text(path, text: str) -> Path:
    """Write ``text`` (UTF-8) to ``path`` atomically; returns the path."""
    with atomic_path(path) as tmp:
        tmp.write_text(text, encoding="utf-8")
    return Path(path)


# -- JSON helpers ------------------------------------------------------------------------------
def jsonable(v):
    """Plain-JSON version of ``v``: numpy scalars/arrays -> Python, NaN -> None, inf -> "inf"."""
    if isinstance(v, dict):
        return {str(k): jsonable(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [jsonable(x) for x in v]
    if isinstance(v, np.ndarray):
        return jsonable(v.tolist())
    if isinstance(v, (bool, np.bool_)):
        return bool(v)
    if isinstance(v, (np.integer,)):
        return int(v)
    if isinstance(v, (float, np.floating)):
        v = float(v)
        if math.isnan(v):
            return None
        return ("inf" if v > 0 else "-inf") if math.isinf(v) else v
    if isinstance(v, Path):
        return str(v)
    return v


def _attr_value(v):
    """An attribute value NetCDF can hold."""
    if isinstance(v, (bool, np.bool_)):
        return int(v)
    if v is None:
        return ""
    if isinstance(v, (dict, list, tuple)):
        return json.dumps(jsonable(v))
    if isinstance(v, np.ndarray) and v.dtype.kind in "OUSb":
        return json.dumps(jsonable(v))
    if isinstance(v, (str, int, float, np.integer, np.floating, np.ndarray)):
        return v
    return str(v)


# -- NetCDF ------------------------------------------------------------------------------------
def _prepare(ds: xr.Dataset) -> xr.Dataset:
    ds = ds.copy()
    ds.attrs = {k: _attr_value(v) for k, v in ds.attrs.items()}
    for name in list(ds.variables):
        var = ds[name]
        if var.dtype.kind == "O":  # object arrays (e.g. Python strings) -> fixed unicode
            ds[name] = var.astype(str)
        ds[name].attrs = {k: _attr_value(v) for k, v in var.attrs.items()}
        if ds[name].dtype.kind == "U" and ds[name].size == 0:
            # empty unicode arrays have itemsize 0, which HDF5 cannot store
            ds[name] = ds[name].astype("<U1")
    return ds


def save_netcdf(ds: xr.Dataset, path) -> Path:
    """Write ``ds`` to ``path`` (NetCDF-4, h5netcdf engine) atomically.

    Object and string variables are written as strings; dict/list/bool attributes as JSON
    strings / integers.

    Returns
    -------
    pathlib.Path
    """
    ds = _prepare(ds)
    with atomic_path(path) as tmp:
        ds.to_netcdf(tmp, engine="h5netcdf", invalid_netcdf=False)
    return Path(path)


def load_netcdf(path) -> xr.Dataset:
    """Load a Dataset written by :func:`save_netcdf` fully into memory (the file is closed)."""
    path = Path(path)
    if not path.is_file():
        raise ConfigError(f"input file: {str(path)!r} does not exist")
    try:
        ds = xr.load_dataset(path, engine="h5netcdf")
    except Exception as e:  # not a NetCDF file, or damaged
        raise ConfigError(f"input file: {str(path)!r} is not a readable NetCDF file ({e})") from None
    for name in list(ds.variables):  # strings come back as object arrays
        if ds[name].dtype.kind == "O":
            ds[name] = ds[name].astype(str)
    return ds


# -- CSV ---------------------------------------------------------------------------------------
def _cell(v):
    if isinstance(v, (float, np.floating)):
        return repr(float(v))
    if isinstance(v, (bool, np.bool_)):
        return "1" if v else "0"
    return str(v)


def save_csv(path, columns: dict, meta: dict | None = None) -> Path:
    """Write equal-length 1-D ``columns`` as CSV with a commented metadata header, atomically.

    Parameters
    ----------
    path : path-like
    columns : dict of str -> 1-D array-like
        Column name -> values (numbers, booleans as 0/1, or strings).
    meta : dict, optional
        Written as ``# key: <json>`` lines before the column names.

    Returns
    -------
    pathlib.Path
    """
    cols = {k: np.asarray(v) for k, v in columns.items()}
    lengths = {len(v) for v in cols.values()}
    if len(lengths) > 1:
        raise ValueError(f"save_csv: columns differ in length: { {k: len(v) for k, v in cols.items()} }")
    buf = io.StringIO()
    for k, v in (meta or {}).items():
        buf.write(f"# {k}: {json.dumps(jsonable(v), ensure_ascii=False)}\n")
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(list(cols))
    n = lengths.pop() if lengths else 0
    for i in range(n):
        w.writerow([_cell(v[i]) for v in cols.values()])
    return atomic_write_text(path, buf.getvalue())


def _parse(s: str):
    try:
        return int(s)
    except ValueError:
        pass
    try:
        return float(s)
    except ValueError:
        return s


def load_csv(path) -> tuple[dict, dict]:
    """Read a CSV written by :func:`save_csv`.

    Returns
    -------
    columns : dict of str -> ndarray
        Numeric columns as float arrays, others as string arrays.
    meta : dict
        The decoded ``# key: <json>`` header.
    """
    path = Path(path)
    if not path.is_file():
        raise ConfigError(f"input file: {str(path)!r} does not exist")
    meta, rows = {}, []
    with open(path, encoding="utf-8", newline="") as f:
        body = []
        for line in f:
            if line.startswith("#"):
                key, _, val = line[1:].strip().partition(":")
                try:
                    meta[key.strip()] = json.loads(val)
                except json.JSONDecodeError:
                    meta[key.strip()] = val.strip()
            else:
                body.append(line)
    rows = list(csv.reader(body))
    if not rows:
        raise ConfigError(f"input file: {str(path)!r} has no column header")
    names, data = rows[0], rows[1:]
    cols = {}
    for j, name in enumerate(names):
        vals = [_parse(r[j]) for r in data]
        if all(isinstance(v, (int, float)) for v in vals):
            cols[name] = np.asarray(vals, float)
        else:
            cols[name] = np.asarray([str(v) for v in vals])
    return cols, meta


def curve_to_dataset(columns: dict, meta: dict) -> xr.Dataset:
    """Rebuild a 1-D filling-curve Dataset (dimension ``mu``) from :func:`load_csv` output."""
    if "mu" not in columns:
        raise ConfigError("input file: a filling-curve CSV needs a 'mu' column")
    mu = columns["mu"]
    data = {k: ("mu", v) for k, v in columns.items() if k != "mu"}
    attrs = {k: (json.dumps(v) if isinstance(v, (list, dict)) else v) for k, v in meta.items()}
    return xr.Dataset(data, coords={"mu": mu}, attrs=attrs)


# -- checkpoints -------------------------------------------------------------------------------
def params_hash(params: dict) -> str:
    """SHA-256 of the canonical JSON of ``params`` (sorted keys, numpy converted)."""
    blob = json.dumps(jsonable(params), sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(blob.encode()).hexdigest()


class ChunkStore:
    """Per-chunk checkpoints of a scan, for :func:`phasemap.scan.evaluate` (``checkpoint=``).

    Parameters
    ----------
    folder : path-like
        Checkpoint folder (created). Holds ``manifest.json`` and ``chunk_00000.npz`` ...
    params : dict
        Everything that determines the scan's result (model, axes, method, options,
        thresholds, chunk size, package version). Its hash is stored in the manifest.
    resume : bool, default True
        Reuse chunks already in ``folder``. With ``False`` existing chunk files are removed.

    Raises
    ------
    ConfigError
        The folder holds the checkpoint of a different scan (parameter hash mismatch).

    Notes
    -----
    A chunk file that cannot be read (e.g. a crash during a write on a file system without
    atomic rename) is recomputed rather than trusted.
    """

    MANIFEST = "manifest.json"

    def __init__(self, folder, params: dict, resume: bool = True):
        self.folder = Path(folder)
        self.params = jsonable(params)
        self.hash = params_hash(params)
        man = self.folder / self.MANIFEST
        if man.is_file():
            try:
                old = json.loads(man.read_text(encoding="utf-8")).get("hash")
            except (json.JSONDecodeError, OSError):
                old = None
            if old != self.hash:
                raise ConfigError(
                    f"checkpoint: folder {str(self.folder)!r} holds the checkpoint of a different scan "
                    f"(parameter hash {str(old)[:12]} != {self.hash[:12]}); use another folder or delete it")
            if not resume:
                self.clear()
        self.folder.mkdir(parents=True, exist_ok=True)
        atomic_write_text(man, json.dumps({"hash": self.hash, "params": self.params}, indent=1))

    def _file(self, i: int) -> Path:
        return self.folder / f"chunk_{int(i):05d}.npz"

    def chunks(self) -> list[int]:
        """Indices of the chunks saved so far."""
        return sorted(int(p.stem.split("_")[1]) for p in self.folder.glob("chunk_*.npz"))

    def load(self, i: int) -> dict | None:
        """The arrays of chunk ``i``, or None if not saved (or unreadable)."""
        f = self._file(i)
        if not f.is_file():
            return None
        try:
            with np.load(f, allow_pickle=False) as z:
                return {k: z[k] for k in z.files}
        except Exception:
            return None

    def save(self, i: int, part: dict) -> None:
        """Save the dict of arrays of chunk ``i`` atomically."""
        arrays = {k: np.asarray(v) for k, v in part.items()}
        for k, v in arrays.items():
            if v.dtype.kind == "O":
                arrays[k] = v.astype(str)
        with atomic_path(self._file(i)) as tmp:
            with open(tmp, "wb") as fh:
                np.savez(fh, **arrays)

    def clear(self) -> None:
        """Remove this store's chunk files and manifest (nothing else in the folder)."""
        self.discard(self.folder)

    @classmethod
    def discard(cls, folder) -> None:
        """Remove any checkpoint (chunk files and manifest) in ``folder``, whatever its scan."""
        folder = Path(folder)
        for p in folder.glob("chunk_*.npz"):
            p.unlink()
        with contextlib.suppress(FileNotFoundError):
            (folder / cls.MANIFEST).unlink()

    def remove(self) -> None:
        """Delete the checkpoint (after the final result is safely written)."""
        self.clear()
        with contextlib.suppress(OSError):
            self.folder.rmdir()


def _clean(v):
    if isinstance(v, float):
        return None if math.isnan(v) else (("inf" if v > 0 else "-inf") if math.isinf(v) else v)
    if isinstance(v, dict):
        return {k: _clean(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [_clean(x) for x in v]
    return v


def dumps_json(d) -> str:
    """Strict JSON (NaN -> null, inf -> "inf"), indented."""
    return json.dumps(_clean(jsonable(d)), indent=2, allow_nan=False)
