"""TOML run configurations: parse, validate completely, and write back the resolved form.

A run config has these sections (unknown keys anywhere -> :class:`ConfigError` naming the
closest valid key)::

    [meta]        # optional: title, description, invented (bool), notes, source
    [model]       # Model fields: lattice, t, V, U (number, inf or "hardcore"), V2, mu, n_max, unit
    [scan]        # one scan; or several as [[scan]] tables, each with a distinct name
    kind = "map"                              # "map" (2D) or "curve" (n(mu))
    x = {name = "t", start = 0, stop = 0.5, num = 51}   # or {name = "t", values = [...]}
    y = {name = "mu", start = -1, stop = 7, num = 81}   # maps only
    relative = true                           # axis values in units of V (hard-core) or U
    method = "mf"                             # a grand-canonical method: "mf", "cmf" or "cmf:tri6"
    cluster = "tri3"                          # methods that take a cluster (cmf) only
    refine = true                             # bisect boundaries / plateau edges
    [thresholds]  # phasemap.classify.Thresholds fields
    [solver]      # options of the method (phasemap.mf.MFOptions / phasemap.cmf.CMFOptions)
    [output]      # folder, formats = ["png", "pdf"], width = "single" | "double" | inches, dpi

Everything is validated before anything is computed; every message names the field and its
allowed values. Running a config is :func:`phasemap.runner.run`.
"""

from __future__ import annotations

import difflib
import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .classify import Thresholds
from .methods import available, get_method, resolve
from .model import ConfigError, Model, check_keys

__all__ = ["RunConfig", "ScanSpec", "Output", "load_config", "parse_config", "dumps_toml", "MAX_POINTS"]

SECTIONS = ("meta", "model", "scan", "thresholds", "solver", "output", "run")
RUN_KEYS = ("executor", "scheduler")
META_KEYS = ("title", "description", "invented", "notes", "source")
MAP_KEYS = ("name", "kind", "x", "y", "relative", "method", "cluster", "refine", "refine_tol", "chunk", "T",
            "adaptive", "coarse", "steep", "finest")
CURVE_KEYS = ("name", "kind", "x", "relative", "method", "cluster", "refine", "edge_tol", "jump_tol", "T")
OUTPUT_KEYS = ("folder", "formats", "width", "dpi", "figures")
#: Largest number of grid points of one scan axis.
MAX_AXIS = 10001
#: Largest number of points of one map.
MAX_POINTS = 4_000_000

# allowed ranges of solver options: name -> (kind, low, high, low_open)
_SOLVER_RANGES = {
    "tol": ("float", 0.0, 1.0, True), "max_iter": ("int", 1, 10**7, False),
    "mixing": ("float", 0.0, 1.0, True), "anderson": ("int", 0, 50, False),
    "n_random": ("int", 0, 100, False), "rng": ("int", 0, 2**32 - 1, False),
    "weight_warn": ("float", 0.0, 1.0, True), "patience": ("int", 1, 10**7, False),
    "dense_max": ("int", 1, 10**5, False), "eig_tol": ("float", 0.0, 1.0, True),
    "memory_mb": ("float", 0.0, 10**7, True), "max_dim": ("int", 1, 2**31, False),
    "continuation": ("bool",), "patterns": ("strings",), "T": ("float", 0.0, 1e6, False),
    "thermal_max_dim": ("int", 1, 2**16, False), "branch_every": ("int", 0, 10**6, False),
    "symmetry": ("bool",),
}
_THRESHOLD_RANGES = {"condensate_tol": ("float", 0.0, 1.0, True), "contrast_tol": ("float", 0.0, 1.0, True),
                     "integer_tol": ("float", 0.0, 0.5, True), "max_denominator": ("int", 1, 1000, False),
                     "cluster_sublattice_tol": ("float", 0.0, 1.0, True)}


@dataclass
class Axis:
    """One scan axis: parameter ``name`` and its ``values`` (ratios when the scan is relative)."""

    name: str
    values: np.ndarray
    spec: dict


@dataclass
class ScanSpec:
    """One validated scan of a run (a phase map or a filling curve)."""

    name: str
    kind: str
    x: Axis
    y: Axis | None = None
    relative: bool = True
    method: str = "mf"
    cluster: object = None
    refine: bool = True
    refine_tol: float = 1e-4
    chunk: int | None = None
    edge_tol: float = 1e-6
    jump_tol: float = 1e-3
    T: float | None = None  # temperature of this scan (same units as the axes: ratio when relative)
    adaptive: bool = False
    coarse: int = 8
    steep: float = 0.05
    finest: int = 1

    def to_dict(self) -> dict:
        d = {"name": self.name, "kind": self.kind, "x": self.x.spec}
        if self.kind == "map":
            d.update(y=self.y.spec, relative=self.relative, method=self.method, refine=self.refine,
                     refine_tol=self.refine_tol, chunk=self.chunk)
            if self.adaptive:
                d.update(adaptive=True, coarse=self.coarse, steep=self.steep, finest=self.finest)
        else:
            d.update(relative=self.relative, method=self.method, refine=self.refine, edge_tol=self.edge_tol,
                     jump_tol=self.jump_tol)
        if self.cluster is not None:
            d["cluster"] = self.cluster
        if self.T is not None:
            d["T"] = self.T
        return d


@dataclass
class Output:
    """Validated [output] section."""

    folder: str = "phasemap_out"
    formats: tuple = ("png", "pdf")
    width: object = "single"
    dpi: int = 300
    figures: bool = True

    def to_dict(self) -> dict:
        return {"folder": self.folder, "formats": list(self.formats), "width": self.width, "dpi": self.dpi,
                "figures": self.figures}


@dataclass
class RunConfig:
    """A fully validated run: model, scans, thresholds, solver options, output, metadata."""

    name: str
    model: Model
    scans: list
    thresholds: Thresholds = field(default_factory=Thresholds)
    solver: dict = field(default_factory=dict)
    output: Output = field(default_factory=Output)
    meta: dict = field(default_factory=dict)
    source: str = ""
    executor: str = "auto"  # [run] executor: where chunks run (phasemap.executor); not part of results
    scheduler: str | None = None  # [run] scheduler: Dask scheduler address

    def options(self, scan: ScanSpec) -> dict:
        """Method options of ``scan``: [solver] plus ``cluster`` for methods that take one."""
        opts = dict(self.solver)
        if scan.cluster is not None:
            opts["cluster"] = scan.cluster
        if scan.T is not None:  # [scan] T (ratio to the model's scale when relative) overrides [solver] T
            opts["T"] = scan.T * (self.model.scale if scan.relative else 1.0)
        return opts

    def to_dict(self) -> dict:
        """The resolved configuration (all defaults filled in), TOML-ready."""
        d = {}
        if self.meta:
            d["meta"] = dict(self.meta)
        md = self.model.to_dict()
        if self.model._auto_n_max or self.model.hardcore:
            md.pop("n_max")
        d["model"] = md
        d["scan"] = [s.to_dict() for s in self.scans]
        d["thresholds"] = self.thresholds.to_dict()
        d["solver"] = dict(self.solver)
        d["output"] = self.output.to_dict()
        d["run"] = {"executor": self.executor}
        if self.scheduler:
            d["run"]["scheduler"] = self.scheduler
        return d


# -- small validators ----------------------------------------------------------------------------
def _number(where: str, v, lo=-math.inf, hi=math.inf, lo_open=False, integer=False):
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        kind = "an integer" if integer else "a number"
        raise ConfigError(f"{where}: expected {kind}, got {v!r}")
    if integer and (not float(v).is_integer()):
        raise ConfigError(f"{where}: expected an integer, got {v!r}")
    if math.isnan(v) or math.isinf(v):
        raise ConfigError(f"{where}: must be a finite number, got {v}")
    if v < lo or v > hi or (lo_open and v == lo):
        lo_s = f"> {lo:g}" if lo_open else f">= {lo:g}"
        rng = lo_s if hi == math.inf else f"{lo_s} and <= {hi:g}"
        raise ConfigError(f"{where}: must be {rng}, got {v!r}")
    return int(v) if integer else float(v)


def _bool(where: str, v) -> bool:
    if not isinstance(v, bool):
        raise ConfigError(f"{where}: expected true or false, got {v!r}")
    return v


def _table(where: str, v) -> dict:
    if not isinstance(v, dict):
        raise ConfigError(f"{where}: expected a table, got {type(v).__name__} {v!r}")
    return v


def _ranged(where: str, v, rule):
    kind = rule[0]
    if kind == "bool":
        return _bool(where, v)
    if kind == "strings":
        if not isinstance(v, list) or not all(isinstance(s, str) for s in v):
            raise ConfigError(f"{where}: expected a list of names, got {v!r}")
        return v
    _, lo, hi, lo_open = rule
    return _number(where, v, lo, hi, lo_open, integer=(kind == "int"))


# -- sections --------------------------------------------------------------------------------------
def _model(d) -> Model:
    d = _table("[model]", d)
    check_keys("[model]", d, [k for k in Model.__dataclass_fields__ if not k.startswith("_")])
    if isinstance(d.get("n_max"), float) and d["n_max"].is_integer():
        d = {**d, "n_max": int(d["n_max"])}
    try:
        return Model(**d)
    except ConfigError as e:
        raise ConfigError(f"[model] {e}") from None


def _axis(where: str, spec, model: Model, default_name=None) -> Axis:
    from .params import axis_names

    spec = _table(where, spec)
    check_keys(where, spec, ("name", "start", "stop", "num", "values"))
    name = spec.get("name", default_name)
    if not isinstance(name, str):
        raise ConfigError(f"{where}.name: expected a parameter name such as 't' or 'mu', got {name!r}")
    allowed = axis_names(model)
    if name not in allowed:
        close = difflib.get_close_matches(name, allowed, n=1, cutoff=0.5)
        hint = f"; did you mean {close[0]!r}?" if close else ""
        raise ConfigError(f"{where}.name: unknown parameter {name!r}{hint} (allowed: {', '.join(allowed)})")
    has_range = any(k in spec for k in ("start", "stop", "num"))
    if "values" in spec and has_range:
        raise ConfigError(f"{where}: give either values = [...] or start/stop/num, not both")
    if "values" in spec:
        vals = spec["values"]
        if not isinstance(vals, list) or len(vals) < 2:
            raise ConfigError(f"{where}.values: expected a list of at least 2 numbers, got {vals!r}")
        if len(vals) > MAX_AXIS:
            raise ConfigError(f"{where}.values: at most {MAX_AXIS} values, got {len(vals)}")
        arr = np.array([_number(f"{where}.values[{i}]", v) for i, v in enumerate(vals)])
        if np.any(np.diff(arr) <= 0):
            raise ConfigError(f"{where}.values: must be strictly increasing")
        out = {"name": name, "values": arr.tolist()}
    else:
        missing = [k for k in ("start", "stop", "num") if k not in spec]
        if missing:
            raise ConfigError(f"{where}: missing {', '.join(missing)} (give start, stop, num or values = [...])")
        start = _number(f"{where}.start", spec["start"])
        stop = _number(f"{where}.stop", spec["stop"])
        num = _number(f"{where}.num", spec["num"], 2, MAX_AXIS, integer=True)
        if not stop > start:
            raise ConfigError(f"{where}: stop must be > start, got start = {start:g}, stop = {stop:g}")
        arr = np.linspace(start, stop, num)
        out = {"name": name, "start": start, "stop": stop, "num": num}
    return Axis(name, arr, out)


def _cluster(where, v, model: Model, impl):
    if v is None:
        return impl.config_default_arg(model)
    if not isinstance(v, (str, dict)):
        raise ConfigError(f"{where}: expected a cluster name or a table {{vectors, sites}}, got {v!r}")
    try:
        impl.check_cluster(v, model)
    except ConfigError as e:
        raise ConfigError(f"{where}: {e}") from None
    except (ValueError, TypeError, KeyError) as e:
        raise ConfigError(f"{where}: invalid cluster {v!r} ({e})") from None
    return v


def _scan(where: str, d, model: Model, default_name: str) -> ScanSpec:
    from .params import grid

    d = _table(where, d)
    kind = d.get("kind", "map")
    if kind not in ("map", "curve"):
        raise ConfigError(f"{where}.kind: expected 'map' or 'curve', got {kind!r}")
    check_keys(where, d, MAP_KEYS if kind == "map" else CURVE_KEYS)
    name = d.get("name", default_name)
    if not isinstance(name, str) or not name or not all(c.isalnum() or c in "-_." for c in name):
        raise ConfigError(f"{where}.name: expected a file-name-safe word (letters, digits, - _ .), got {name!r}")
    if "x" not in d:
        raise ConfigError(f"{where}.x: missing; give {{name, start, stop, num}} or {{name, values}}")
    s = ScanSpec(name=name, kind=kind, x=_axis(f"{where}.x", d["x"], model, "mu" if kind == "curve" else None))
    s.relative = _bool(f"{where}.relative", d.get("relative", True))
    raw = d.get("method", "mf")
    if not isinstance(raw, str):
        raise ConfigError(f"{where}.method: expected a method name such as 'mf' or 'cmf:tri6', got {raw!r}")
    try:
        impl, opts = resolve(raw.split(":")[0])
        if ":" in raw:
            opts = impl.parse_arg(raw.partition(":")[2])
    except ConfigError as e:
        raise ConfigError(f"{where}.{e}") from None
    if not impl.capabilities.grand_canonical and not hasattr(impl, "evaluate_points"):
        gc = [n for n in available() if get_method(n).capabilities.grand_canonical
              or hasattr(get_method(n), "evaluate_points")]
        raise ConfigError(f"{where}.method: {impl.name!r} ({impl.title}) is not grand canonical; maps and curves "
                          f"need one of {', '.join(gc)} (use the method's own commands)")
    s.method = impl.name
    if "cluster" in d and not impl.capabilities.cluster:
        raise ConfigError(f"{where}.cluster: only used with a method that takes a cluster (method is {s.method!r})")
    if "cluster" in d and ":" in raw:
        raise ConfigError(f"{where}.cluster: the method {raw!r} already names its cluster; give one of the two")
    if impl.capabilities.cluster:
        s.cluster = _cluster(f"{where}.cluster", d.get("cluster", opts.get("cluster")), model, impl)
    s.refine = _bool(f"{where}.refine", d.get("refine", True))
    if "T" in d:
        s.T = _number(f"{where}.T", d["T"], 0.0, 1e6)
    axes = {s.x.name: s.x.values}
    if kind == "map":
        if "y" not in d:
            raise ConfigError(f"{where}.y: missing; a map needs x and y axes")
        s.y = _axis(f"{where}.y", d["y"], model)
        if s.y.name == s.x.name:
            raise ConfigError(f"{where}: x and y must scan different parameters (both {s.x.name!r})")
        if len(s.x.values) * len(s.y.values) > MAX_POINTS:
            raise ConfigError(f"{where}: at most {MAX_POINTS} map points, got {len(s.x.values) * len(s.y.values)}")
        s.refine_tol = _number(f"{where}.refine_tol", d.get("refine_tol", 1e-4), 0.0, 0.1, lo_open=True)
        P = len(s.x.values) * len(s.y.values)
        auto = int(min(4096, max(256, P // 20)))
        s.chunk = _number(f"{where}.chunk", d.get("chunk", auto), 1, 10**6, integer=True)
        s.adaptive = _bool(f"{where}.adaptive", d.get("adaptive", False))
        s.coarse = _number(f"{where}.coarse", d.get("coarse", 8), 2, 1000, integer=True)
        s.steep = _number(f"{where}.steep", d.get("steep", 0.05), 0.0, 10.0, lo_open=True)
        s.finest = _number(f"{where}.finest", d.get("finest", 1), 1, 2, integer=True)
        axes[s.y.name] = s.y.values
    else:
        if s.x.name != "mu":
            raise ConfigError(f"{where}.x.name: a filling curve scans 'mu', got {s.x.name!r}")
        s.edge_tol = _number(f"{where}.edge_tol", d.get("edge_tol", 1e-6), 0.0, 1.0, lo_open=True)
        s.jump_tol = _number(f"{where}.jump_tol", d.get("jump_tol", 1e-3), 0.0, 1.0, lo_open=True)
    batch, _ = grid(model, axes, relative=s.relative)  # every scanned point is a valid model (raises ConfigError)
    if (s.T or "T" in axes) and not impl.capabilities.temperature:
        ok = [n for n in available() if get_method(n).capabilities.temperature]
        raise ConfigError(f"{where}: a temperature (T) needs a method with a finite-temperature mode "
                          f"({', '.join(ok)}); {impl.name!r} has none")
    try:  # memory guard before anything is written (e.g. a huge n_max)
        impl.max_points(batch.base, {"cluster": s.cluster} if s.cluster is not None else None)
    except ConfigError as e:
        raise ConfigError(f"[model] {e} (scan {s.name})") from None
    return s


def _solver(d, methods) -> dict:
    d = dict(_table("[solver]", d))
    sets = [set(get_method(m).option_names()) - {"cluster"} for m in methods]
    allowed = set.intersection(*sets)  # options shared by every method of the run
    check_keys(f"[solver] (method {'/'.join(sorted(methods))})", d, sorted(allowed))
    for k, v in d.items():
        rule = _SOLVER_RANGES.get(k)
        d[k] = _ranged(f"[solver] {k}", v, rule) if rule else v
    return d


def _thresholds(d) -> Thresholds:
    d = dict(_table("[thresholds]", d))
    check_keys("[thresholds]", d, Thresholds.__dataclass_fields__)
    return Thresholds(**{k: _ranged(f"[thresholds] {k}", v, _THRESHOLD_RANGES[k]) for k, v in d.items()})


def _output(d) -> Output:
    from .plot import FORMATS, figure_width

    d = _table("[output]", d)
    check_keys("[output]", d, OUTPUT_KEYS)
    o = Output()
    if "folder" in d:
        if not isinstance(d["folder"], str) or not d["folder"].strip():
            raise ConfigError(f"[output] folder: expected a path, got {d['folder']!r}")
        o.folder = d["folder"]
    if "formats" in d:
        f = d["formats"]
        if not isinstance(f, list) or not f or any(x not in FORMATS for x in f):
            raise ConfigError(f"[output] formats: expected a non-empty list from {list(FORMATS)}, got {f!r}")
        o.formats = tuple(dict.fromkeys(f))
    if "width" in d:
        w = d["width"]
        if isinstance(w, bool) or not isinstance(w, (str, int, float)):
            raise ConfigError(f"[output] width: expected 'single', 'double' or inches (1 to 12), got {w!r}")
        try:
            figure_width(w)
        except (ConfigError, ValueError):
            raise ConfigError(f"[output] width: expected 'single', 'double' or inches (1 to 12), got {w!r}") from None
        o.width = w
    if "dpi" in d:
        o.dpi = _number("[output] dpi", d["dpi"], 50, 1200, integer=True)
    if "figures" in d:
        o.figures = _bool("[output] figures", d["figures"])
    return o


def _meta(d) -> dict:
    d = _table("[meta]", d)
    check_keys("[meta]", d, META_KEYS)
    for k, v in d.items():
        if k == "invented":
            _bool("[meta] invented", v)
        elif not isinstance(v, str):
            raise ConfigError(f"[meta] {k}: expected a string, got {v!r}")
    return dict(d)


def parse_config(data: dict, name: str = "run", source: str = "") -> RunConfig:
    """Validate a parsed TOML document; returns a :class:`RunConfig`.

    Raises
    ------
    ConfigError
        On the first problem found, naming the section, field and allowed values.
    """
    check_keys("config", data, SECTIONS)
    if "model" not in data:
        raise ConfigError("config: missing [model] section")
    if "scan" not in data:
        raise ConfigError("config: missing [scan] section (or [[scan]] tables)")
    model = _model(data["model"])
    raw = data["scan"]
    raw = [raw] if isinstance(raw, dict) else raw
    if not isinstance(raw, list) or not raw:
        raise ConfigError("[scan]: expected a table or a list of [[scan]] tables")
    single = len(raw) == 1
    scans = []
    for i, d in enumerate(raw):
        where = "[scan]" if single else f"[[scan]] #{i + 1}"
        scans.append(_scan(where, d, model, name if single else f"{name}_{i + 1}"))
    names = [s.name for s in scans]
    if len(set(names)) != len(names):
        raise ConfigError(f"[[scan]] name: every scan needs a distinct name, got {names}")
    return RunConfig(
        name=name, model=model, scans=scans, thresholds=_thresholds(data.get("thresholds", {})),
        solver=_solver(data.get("solver", {}), {s.method for s in scans}),
        output=_output(data.get("output", {})), meta=_meta(data.get("meta", {})), source=source,
        **_run(data.get("run", {})),
    )


def _run(d) -> dict:
    """[run] section: executor ("auto", "serial", "processes[:N]", "dask", scheduler address) and
    scheduler (Dask scheduler address); validated here, connected only when the run starts."""
    from .executor import EXECUTORS

    if not isinstance(d, dict):
        raise ConfigError("[run]: expected a table")
    check_keys("[run]", d, RUN_KEYS)
    ex = d.get("executor", "auto")
    ok = isinstance(ex, str) and (ex in ("auto", "serial", "processes", "dask", "dask:local")
                                  or (ex.startswith("processes:") and ex[10:].isdigit() and 1 <= int(ex[10:]) <= 1024)
                                  or ex.startswith(("dask://", "tcp://")))
    if not ok:
        raise ConfigError(f"[run] executor: expected one of {', '.join(EXECUTORS)} (N = 1..1024), got {ex!r}")
    sch = d.get("scheduler")
    if sch is not None and (not isinstance(sch, str) or not sch.strip()):
        raise ConfigError(f"[run] scheduler: expected a Dask scheduler address such as 'tcp://host:8786', got {sch!r}")
    return {"executor": ex, "scheduler": sch}


def load_config(path) -> RunConfig:
    """Read and validate the TOML run config at ``path``."""
    from .store import read_input_text

    path = Path(path)
    try:
        data = tomllib.loads(read_input_text(path, "config"))
    except tomllib.TOMLDecodeError as e:
        raise ConfigError(f"config: {path.name} is not valid TOML ({e})") from None
    return parse_config(data, name=path.stem, source=str(path))


# -- TOML writer (tomllib reads only) --------------------------------------------------------------
def _toml_value(v) -> str:
    import json

    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        return json.dumps(v, ensure_ascii=False)
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{k} = {_toml_value(x)}" for k, x in v.items() if x is not None) + "}"
    if isinstance(v, (np.integer, np.floating)):
        return _toml_value(v.item())
    raise TypeError(f"cannot write {type(v).__name__} to TOML")


def dumps_toml(doc: dict, header: str = "") -> str:
    """TOML text of a two-level document (tables of values; a list of tables -> ``[[name]]``)."""
    lines = [f"# {h}" for h in header.splitlines()] + ([""] if header else [])
    for sec, body in doc.items():
        tables = body if isinstance(body, list) else [body]
        for tab in tables:
            lines.append(f"[[{sec}]]" if isinstance(body, list) else f"[{sec}]")
            lines += [f"{k} = {_toml_value(v)}" for k, v in tab.items() if v is not None]
            lines.append("")
    return "\n".join(lines)
