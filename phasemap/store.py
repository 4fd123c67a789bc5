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

Provenance and output folders
-----------------------------
- :func:`provenance` is the one source of the metadata every written file carries (one version
  key ``phasemap_version``, model, method, options, table and energy unit where there is one).
- :func:`check_output_folder` refuses an unusable output path (a file, under a file, not
  writable) before any work; :func:`output_lock` makes one run the only writer of a folder: a
  second run is refused with a message naming the live one, a stale lock of a dead process is
  taken over with a note. Every long job that writes a folder takes it.
"""

from __future__ import annotations

import contextlib
import csv
import datetime
import hashlib
import io
import json
import math
import os
import socket
import sys
import tempfile
from pathlib import Path

import numpy as np
import xarray as xr

from .model import ConfigError

__all__ = ["provenance", "read_input_text", "check_output_folder", "output_lock", "LOCK_NAME", "mark_incomplete", "mark_complete", "COMPLETE_NAME", "dumps_json", "atomic_path", "atomic_write_text", "save_netcdf", "load_netcdf", "save_csv", "load_csv",
           "curve_to_dataset", "ChunkStore", "job_checkpoint", "pack_object", "unpack_object", "params_hash", "jsonable"]


# -- provenance --------------------------------------------------------------------------------
def provenance(model=None, method=None, options=None, table=None, unit=None, **extra) -> dict:
    """The metadata every file written by phasemap carries (one function for every writer).

    Parameters
    ----------
    model : phasemap.Model or dict, optional
        Stored as its parameter dict (``Model.to_dict()``); also gives ``lattice`` and the unit.
    method : str or MethodSpec, optional
        As spelled everywhere (``"mf"``, ``"cmf:tri12"``, ``"ed:tri21"``, or a comma list).
    options : dict, optional
        Method options (``method_options``).
    table : StrainTable, path or str, optional
        The parameter table the run was made from (its path, or ``"demo"``).
    unit : str, optional
        Energy unit label (``energy_unit``); default the model's / table's unit.
    **extra
        Further keys (plain values), added last.

    Returns
    -------
    dict
        Plain-JSON values: ``phasemap_version`` always; ``model`` (dict), ``lattice``,
        ``method``, ``method_options``, ``table``, ``energy_unit`` when known. NetCDF writers
        store dicts as JSON strings (:func:`save_netcdf`), CSV writers as ``# key: <json>``.
    """
    from . import __version__

    d = {"phasemap_version": __version__}
    if model is not None:
        md = model.to_dict() if hasattr(model, "to_dict") else dict(model)
        d["model"] = jsonable(md)
        d["lattice"] = md.get("lattice", "")
        if unit is None:
            unit = md.get("unit")
    if method is not None:
        d["method"] = method if isinstance(method, str) else getattr(method, "name", str(method))
    if options is not None:
        d["method_options"] = jsonable(dict(options))
    if table is not None:
        if isinstance(table, (str, Path)):
            d["table"] = str(table)
        else:
            d["table"] = str(getattr(table, "path", "") or "table")
            d.setdefault("lattice", getattr(table, "lattice", ""))
            if unit is None:
                unit = getattr(table, "unit", None)
    if unit is not None:
        d["energy_unit"] = str(unit)
    d.update(jsonable(extra))
    return d


# -- input files -------------------------------------------------------------------------------
def read_input_text(path, field: str = "input file") -> str:
    """Text of a user's input file (config, table), or :class:`ConfigError` naming ``field``.

    Refuses, with one line saying which: a missing path, a folder, anything that is not a
    regular file (a FIFO would block), an unreadable file (permissions), text that is not
    UTF-8. A UTF-8 byte-order mark is accepted (and dropped).
    """
    p = Path(path)
    if not p.exists():
        raise ConfigError(f"{field}: file {str(p)!r} does not exist")
    if p.is_dir():
        raise ConfigError(f"{field}: {str(p)!r} is a folder, not a file")
    if not p.is_file():
        raise ConfigError(f"{field}: {str(p)!r} is not a regular file (a pipe or device); give a file")
    try:
        data = p.read_bytes()
    except OSError as e:
        raise ConfigError(f"{field}: cannot read {str(p)!r} ({e.strerror or e})") from None
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError as e:
        raise ConfigError(f"{field}: {p.name} is not UTF-8 text (byte {e.start}: {data[e.start:e.start + 1]!r}); "
                          "save it as UTF-8") from None


# -- output folders: checks and the single-writer lock ----------------------------------------
LOCK_NAME = ".phasemap.lock"
_HELD: dict = {}  # resolved lock path -> nesting depth (locks held by this process)


def check_output_folder(folder, flag: str = "--out") -> Path:
    """Refuse an output folder that cannot be used, before any work; nothing is created.

    Raises :class:`ConfigError` (naming ``flag``) if the path exists and is not a folder, lies
    under a file, or is not writable (the nearest existing ancestor for a folder still to be
    created).
    """
    folder = Path(folder)
    if str(folder).strip() == "":
        raise ConfigError(f"{flag}: expected a folder path, got an empty string")
    if folder.exists() and not folder.is_dir():
        raise ConfigError(f"{flag}: {str(folder)!r} exists and is not a folder")
    probe = folder
    while not probe.exists():
        parent = probe.parent
        if parent == probe:
            break
        probe = parent
    if probe.exists() and not probe.is_dir():
        raise ConfigError(f"{flag}: {str(folder)!r} lies under {str(probe)!r}, which is a file, not a folder")
    if not _writable(probe):
        what = "is" if probe == folder else f"would be created in {str(probe)!r}, which is"
        raise ConfigError(f"{flag}: {str(folder)!r} {what} not writable")
    return folder


def _writable(folder: Path) -> bool:
    if not os.access(folder, os.W_OK | os.X_OK):
        return False
    try:  # root passes os.access everywhere; a read-only file system does not pass this
        fd, tmp = tempfile.mkstemp(prefix=".phasemap-probe.", dir=folder)
    except OSError:
        return False
    os.close(fd)
    os.unlink(tmp)
    return True


def _proc_start(pid: int):
    """Start time of process ``pid`` in clock ticks since boot (Linux), or None."""
    try:
        with open(f"/proc/{pid}/stat", encoding="ascii", errors="replace") as f:
            stat = f.read()
        return int(stat.rpartition(")")[2].split()[19])
    except (OSError, ValueError, IndexError):
        return None


def _alive(info: dict) -> bool | None:
    """Is the process that wrote a lock alive? None: cannot tell (another host)."""
    if info.get("host") != socket.gethostname():
        return None
    try:
        pid = int(info["pid"])
    except (KeyError, TypeError, ValueError):
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        pass  # exists, owned by someone else
    start = info.get("pid_start")
    now = _proc_start(pid)
    return not (start is not None and now is not None and int(start) != now)  # pid reused


def _command_line() -> str:
    prog = os.path.basename(sys.argv[0]) if sys.argv and sys.argv[0] else "python"
    prog = "phasemap" if prog in ("__main__.py", "phasemap") else prog
    return " ".join([prog] + sys.argv[1:])


def _describe(info: dict) -> str:
    return (f"pid {info.get('pid')} on host {info.get('host')}, started {info.get('started')}, "
            f"command: {info.get('command')}")


@contextlib.contextmanager
def output_lock(folder, command: str | None = None, note=None, flag: str = "--out"):
    """Hold the single-writer lock of an output folder while a job computes and writes into it.

    The lock is the file ``FOLDER/.phasemap.lock`` (JSON: pid, host, start time, command),
    created atomically (written under a temporary name, then hard-linked into place, which fails
    if a lock exists). A second job on the same folder is refused with :class:`ConfigError`
    naming the live run; a lock whose process is dead (same host) is taken over and ``note``
    (default: a warning on stderr) is told so. Re-entrant within one process. The lock is
    removed on exit, whatever the outcome.

    Parameters
    ----------
    folder : path-like
        Output folder; checked with :func:`check_output_folder` first, then created.
    command : str, optional
        What is running (default: the command line).
    note : callable, optional
        Receives a one-line message when a stale lock is taken over.
    flag : str
        Option name used in messages (``--out``, ``[output] folder``).

    Yields
    ------
    dict
        The lock record.

    Examples
    --------
    >>> with output_lock("maps/run1", "phasemap run c.toml"):    # doctest: +SKIP
    ...     compute_and_write()
    """
    folder = check_output_folder(folder, flag)
    created = not folder.exists()
    folder.mkdir(parents=True, exist_ok=True)
    lock = folder / LOCK_NAME
    key = str(lock.resolve())
    if _HELD.get(key):
        _HELD[key] += 1
        try:
            yield json.loads(lock.read_text(encoding="utf-8"))
        finally:
            _HELD[key] -= 1
        return
    info = {"pid": os.getpid(), "pid_start": _proc_start(os.getpid()), "host": socket.gethostname(),
            "started": datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds"),
            "command": command if command is not None else _command_line()}
    say = note if note is not None else (lambda m: print(f"phasemap: note: {m}", file=sys.stderr))
    fd, tmp = tempfile.mkstemp(prefix=".phasemap.lock.", dir=folder)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as f:
            json.dump(info, f)
        for _ in range(3):
            try:
                os.link(tmp, lock)
                break
            except FileExistsError:
                pass
            try:
                other = json.loads(lock.read_text(encoding="utf-8"))
            except FileNotFoundError:
                continue  # released meanwhile: try again
            except (OSError, ValueError):
                raise ConfigError(f"{flag}: {str(folder)!r} has an unreadable lock file {LOCK_NAME}; if no phasemap "
                                  "run is writing there, delete it") from None
            alive = _alive(other)
            if alive is None:
                raise ConfigError(f"{flag}: {str(folder)!r} is in use by another run ({_describe(other)}); "
                                  f"it runs on another host, so phasemap cannot check it: if it is dead, delete "
                                  f"{str(lock)!r}")
            if alive:
                raise ConfigError(f"{flag}: {str(folder)!r} is in use by a live run ({_describe(other)}); wait for "
                                  "it to finish or use another folder")
            stale = folder / f"{LOCK_NAME}.stale.{os.getpid()}"
            try:  # only one taker wins the rename
                os.rename(lock, stale)
            except FileNotFoundError:
                continue
            stale.unlink()
            say(f"{flag}: took over the stale lock of a dead run in {str(folder)!r} ({_describe(other)})")
        else:
            raise ConfigError(f"{flag}: could not take the lock of {str(folder)!r} (another run keeps taking it)")
    except BaseException:
        if created:  # refused: leave nothing behind
            with contextlib.suppress(OSError):
                os.unlink(tmp)
                folder.rmdir()
        raise
    finally:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
    _HELD[key] = 1
    try:
        yield info
    except BaseException:
        _release(lock, info)
        if created:  # a failed job that wrote nothing leaves no empty folder
            with contextlib.suppress(OSError):
                folder.rmdir()
        raise
    finally:
        _HELD.pop(key, None)
        _release(lock, info)


def _release(lock: Path, info: dict) -> None:
    try:
        mine = json.loads(lock.read_text(encoding="utf-8"))
        if mine.get("pid") == info["pid"] and mine.get("started") == info["started"]:
            lock.unlink()
    except (OSError, ValueError):
        pass


COMPLETE_NAME = "COMPLETE.json"


def mark_incomplete(folder) -> None:
    """Start (re)writing a set of files in ``folder``: remove its completion marker."""
    with contextlib.suppress(FileNotFoundError):
        (Path(folder) / COMPLETE_NAME).unlink()


def mark_complete(folder, paths, **meta) -> Path:
    """Write the completion marker ``FOLDER/COMPLETE.json`` last, after every file of the set.

    Use :func:`mark_incomplete` before writing the first file. The marker holds ``meta`` (the
    provenance) and the names of the files of the set; a folder without it holds an incomplete
    set (a job killed while writing).
    """
    names = sorted({Path(p).name for p in paths})
    return atomic_write_text(Path(folder) / COMPLETE_NAME, dumps_json({**meta, "complete": True, "files": names}) + "\n")


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


def _changed_fields(old, new, prefix: str = "") -> list[str]:
    """Dotted names of the fields that differ between two parameter dicts (for messages)."""
    if isinstance(old, dict) and isinstance(new, dict):
        out = []
        for k in sorted(set(old) | set(new), key=str):
            out += _changed_fields(old.get(k), new.get(k), f"{prefix}.{k}" if prefix else str(k))
        return out
    return [] if old == new else [f"{prefix or 'value'} ({json.dumps(old)} -> {json.dumps(new)})"]


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
    INNER = "inner"

    def __init__(self, folder, params: dict, resume: bool = True):
        self.folder = Path(folder)
        self.params = jsonable(params)
        self.hash = params_hash(params)
        man = self.folder / self.MANIFEST
        if man.is_file():
            try:
                saved = json.loads(man.read_text(encoding="utf-8"))
                old, old_params = saved.get("hash"), saved.get("params")
            except (json.JSONDecodeError, OSError, AttributeError):
                old, old_params = None, None
            if old != self.hash:
                changed = _changed_fields(old_params, self.params) if isinstance(old_params, dict) else []
                what = (f"changed: {', '.join(changed[:6])}{' ...' if len(changed) > 6 else ''}" if changed
                        else f"parameter hash {str(old)[:12]} != {self.hash[:12]}")
                raise ConfigError(
                    f"checkpoint: folder {str(self.folder)!r} holds the checkpoint of a different scan "
                    f"({what}); use another folder, --restart, or delete it")
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

    def inner(self) -> Path:
        """Folder for checkpoints *inside* unfinished chunks (e.g. Monte Carlo chains resumed
        mid-run); removed with the store."""
        return self.folder / self.INNER

    def clear(self) -> None:
        """Remove this store's chunk files, inner checkpoints and manifest (nothing else in the folder)."""
        self.discard(self.folder)

    @classmethod
    def discard(cls, folder) -> None:
        """Remove any checkpoint (chunk files, inner checkpoints, manifest) in ``folder``, whatever its scan."""
        import shutil

        folder = Path(folder)
        for p in folder.glob("chunk_*.npz"):
            p.unlink()
        for pattern in (".chunk_*.tmp.npz", f".{cls.MANIFEST}.*.tmp*"):  # atomic_path temporaries of a killed run
            for p in folder.glob(pattern):
                with contextlib.suppress(FileNotFoundError):
                    p.unlink()
        shutil.rmtree(folder / cls.INNER, ignore_errors=True)
        with contextlib.suppress(FileNotFoundError):
            (folder / cls.MANIFEST).unlink()

    def remove(self) -> None:
        """Delete the checkpoint (after the final result is safely written)."""
        self.clear()
        with contextlib.suppress(OSError):
            self.folder.rmdir()


def pack_object(obj) -> dict:
    """A checkpoint chunk holding any picklable result (:class:`ChunkStore` stores arrays: the
    pickle goes in as bytes). Only for this package's own checkpoint folders."""
    import pickle

    return {"pickle": np.frombuffer(pickle.dumps(obj, protocol=pickle.HIGHEST_PROTOCOL), np.uint8)}


def unpack_object(part: dict):
    """The object of a :func:`pack_object` chunk."""
    import pickle

    return pickle.loads(np.asarray(part["pickle"], np.uint8).tobytes())


def job_checkpoint(folder, params: dict, resume: bool = False, restart: bool = False) -> ChunkStore:
    """The checkpoint of a long job in ``folder`` (the one rule of every resumable command).

    ``restart`` discards whatever is there; an unfinished run found without ``resume`` is
    refused (never silently reused or overwritten); with ``resume`` a checkpoint of different
    parameters is refused naming the changed fields (:class:`ChunkStore`).

    Raises
    ------
    ConfigError
        Unfinished run without ``--resume``, or parameters changed since the checkpoint.
    """
    folder = Path(folder)
    if restart:
        ChunkStore.discard(folder)
    elif not resume and (folder / ChunkStore.MANIFEST).is_file():
        raise ConfigError(f"checkpoint: {str(folder)!r} holds an unfinished run; pass --resume to continue it "
                          "or --restart to discard it")
    return ChunkStore(folder, params, resume=True)


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
