"""The method registry: one way in and one way out for every solver.

Every method is one module in this package that defines a subclass of :class:`Method` and an
instance ``METHOD``; the module is listed once in :data:`BUILTIN`. Everything else in
phasemap — :func:`phasemap.solve`, the scans, the TOML loader, every CLI command and the strain
workflow — asks this registry and never compares method names as strings.

A method is spelled the same way everywhere (API, TOML, CLI, strain workflow)::

    mf            site-decoupled mean field
    cmf:tri12     cluster mean field on the 12-site cluster
    ed:tri21      exact diagonalization of the 21-site periodic cluster

The part after ``:`` is the method's *argument* (a cluster or a size); :meth:`Method.parse_arg`
turns it into options.
"""

from __future__ import annotations

import dataclasses
import difflib
import importlib
from dataclasses import dataclass

from ..model import ConfigError, check_keys

__all__ = ["Method", "Capabilities", "MethodSpec", "register", "unregister", "get_method", "resolve", "check_temperature",
           "parse_spec", "parse_specs", "available", "BUILTIN"]

#: Built-in method modules, one line each (``phasemap.methods.<module>`` defines ``METHOD``).
BUILTIN = (
    "mf",
    "cmf",
    "ed",
    "qmc",
    "cmf_scaled",
)

_REGISTRY: dict[str, "Method"] = {}
_LOADED = False


@dataclass(frozen=True)
class Capabilities:
    """What a method can do.

    Attributes
    ----------
    grand_canonical : bool
        Solves at fixed chemical potential over a :class:`~phasemap.params.ParamBatch`
        (:meth:`Method.solve_batch`): usable in maps, filling curves and plateau searches.
    canonical : bool
        Works at fixed particle number (finite periodic clusters).
    temperature : bool
        Accepts a temperature ``T``.
    error_bars : bool
        Returns one-sigma statistical errors in :attr:`phasemap.Solution.errors`.
    cluster : bool
        Takes a cluster or size as the argument after ``:`` (``cmf:tri12``).
    sharp_edges : bool
        Its plateau edges are thermodynamic (grand canonical, infinite lattice), so a critical
        strain is a root of the plateau width; False for finite clusters.
    """

    grand_canonical: bool = False
    canonical: bool = False
    temperature: bool = False
    error_bars: bool = False
    cluster: bool = False
    sharp_edges: bool = False


class Method:
    """Base class of a registered method. Subclass, set the class attributes, instantiate once.

    Class attributes
    ----------------
    name : str
        Spelling in specs (``"mf"``).
    title : str
        Human name (``"site-decoupled mean field"``).
    Options : type
        Dataclass of the options (validated by :meth:`options`).
    capabilities : Capabilities
    default_arg : str or None
        Argument used when a spec gives none (``"tri12"``).
    caution : str
        The honest caution shown beside every result of the method.
    strain_local : bool
        :meth:`strain_step` on one strain gives that strain's row of the path's record (the
        strain sweep then runs, checkpoints and resumes one chunk per strain); False (Monte
        Carlo: one random stream and strain subsampling along the whole path): one chunk per
        method.
    """

    name: str = ""
    title: str = ""
    Options: type | None = None
    capabilities: Capabilities = Capabilities()
    default_arg: str | None = None
    caution: str = ""
    strain_local: bool = True

    # -- options ---------------------------------------------------------------------------
    def option_names(self) -> list[str]:
        return [f.name for f in dataclasses.fields(self.Options)] if self.Options else []

    def options(self, options=None):
        """Validated options object from a dict (unknown keys get the closest valid key)."""
        if self.Options is not None and isinstance(options, self.Options):
            return options
        d = dict(options or {})
        check_keys(f"{self.name} options", d, self.option_names())
        return self.Options(**d) if self.Options else d

    def parse_arg(self, arg: str | None) -> dict:
        """Options implied by the argument after ``:`` in a spec (default: the cluster)."""
        if not self.capabilities.cluster:
            if arg:
                raise ConfigError(f"method {self.name}:{arg}: {self.title} takes no cluster or size "
                                  f"(write {self.name!r})")
            return {}
        arg = (arg or "").strip() or self.default_arg
        return {"cluster": arg} if arg else {}

    def config_default_arg(self, model) -> str | None:
        """Cluster used by a TOML scan that names none (default: :attr:`default_arg`)."""
        return self.default_arg

    def check_cluster(self, cluster, model) -> None:
        """Raise ConfigError when ``cluster`` is not valid for ``model`` (methods with clusters)."""

    def short_name(self, options: dict) -> str:
        """``name`` or ``name:<cluster>`` (what a Solution's ``method`` field says)."""
        arg = dict(options).get("cluster") if self.capabilities.cluster else None
        return self.name if arg is None or not isinstance(arg, str) else f"{self.name}:{arg}"

    def spec_name(self, options: dict) -> str:
        """Canonical spelling of this method with ``options``."""
        opts = dict(options)
        arg = opts.pop("cluster", None) if self.capabilities.cluster else None
        head = self.name if arg is None else f"{self.name}:{arg}"
        return head + "".join(f",{k}={v}" for k, v in sorted(opts.items()))

    # -- solving -----------------------------------------------------------------------------
    def solve_point(self, model, **options):
        """One parameter point -> :class:`phasemap.Solution` (every method implements this)."""
        raise NotImplementedError(f"method {self.name}: solve_point is not implemented")

    def solve_batch(self, batch, options=None, init=None):
        """Grand-canonical solve of every point of ``batch`` (methods with ``grand_canonical``).

        Returns a batch result with the attributes of :class:`phasemap.mf.MFBatchResult`
        (arrays per point x seed); :func:`phasemap.api.solutions_from_batch` and
        :func:`phasemap.scan.evaluate` turn it into Solutions or labelled arrays.
        """
        raise ConfigError(f"method {self.name}: {self.title} is not grand canonical; it cannot be used in "
                          "grand-canonical scans (maps, filling curves)")

    def batch_solver(self, options=None):
        """``f(batch, init=None) -> batch result`` with validated options bound."""
        opt = self.options(options)
        return lambda batch, init=None: self.solve_batch(batch, opt, init=init)

    def site_coordinates(self, batch, options=None):
        """(N, 2) lattice coordinates of the sites of the per-site arrays of a batch result."""
        raise NotImplementedError

    def max_points(self, model, options=None) -> int | None:
        """Memory guard: most points one ``solve_batch`` call may take for ``model`` (None: no
        limit). Raises ConfigError naming the field (e.g. ``n_max``) when not even one fits.
        Scans cut their chunks to this size; run configs call it before anything is written."""
        return None

    # -- strain workflow ----------------------------------------------------------------------
    def check_setup(self, spec: "MethodSpec", models, fraction: str = "1/3") -> None:
        """Refuse (ConfigError) what this method cannot do for ``models`` before anything is solved."""

    def strain_step(self, spec: "MethodSpec", models, fraction: str, **kw):
        """The plateau (or finite-lattice step) at ``fraction`` for every model:
        a :class:`phasemap.strain.record.StepRecord`. ``kw``: the workflow's search settings
        (``mu``, ``tol``, ``width_floor``, ``jump_tol``, ``thresholds``, ``n_mu``, ...); take what applies."""
        raise ConfigError(f"method {self.name}: not available in the strain workflow")

    def strain_cost(self, spec: "MethodSpec", models) -> float:
        """Relative cost of one strain-sweep chunk of this method (only orders the chunks, costliest
        first; answers never depend on it). Default: a whole-path chunk (``strain_local`` False)
        counts as the path's length times a cluster's; a one-strain chunk as 1."""
        return 1.0 if self.strain_local else 1e6 * len(models)

    def strain_critical_parts(self, spec: "MethodSpec", table, strains, record, fraction: str, **kw) -> list:
        """Independent, costly pieces of :meth:`strain_critical` (e.g. one root search per cluster) that
        a sweep runs as chunks of their own, side by side (:meth:`strain_critical_part`); their
        results go back to ``strain_critical(..., parts={piece: result})``. Default: none."""
        return []

    def strain_critical_part(self, spec: "MethodSpec", table, strains, record, fraction: str, piece, **kw):
        """The result of one piece named by :meth:`strain_critical_parts`."""
        raise NotImplementedError(f"method {self.name}: no parts of the critical strain")

    def strain_critical(self, spec: "MethodSpec", table, strains, record, fraction: str, **kw):
        """Critical strain along the path from the records at ``strains``: a
        :class:`phasemap.strain.critical.CriticalResult` (sharp) or an
        :class:`phasemap.strain.record.IndicatorResult` (finite lattices)."""
        raise ConfigError(f"method {self.name}: not available in the strain workflow")

    def check_melting(self, spec: "MethodSpec", models) -> None:
        """Refuse (ConfigError) a melting-temperature search this method cannot do, before solving."""
        if not self.capabilities.temperature:
            raise ConfigError(f"method {self.name}: no finite-temperature mode, so no melting temperature")

    def strain_melting(self, spec: "MethodSpec", models, record, fraction: str, **kw):
        """Melting temperature of the solid at every model where ``record`` (a StepRecord) has it:
        a :class:`phasemap.strain.melting.MeltingRecord`. Finite-temperature Monte Carlo plugs in
        here (T_melt with one-sigma errors, e.g. from the sqrt3 x sqrt3 Binder-ratio crossing)."""
        raise ConfigError(f"method {self.name}: no melting temperature in the strain workflow")

    def strain_point(self, spec: "MethodSpec", model, record, mu, fraction: str, **kw) -> dict:
        """Method-specific sections of a one-strain check (``check_strain``): e.g. the state at
        ``mu``, the melt factor, the order parameter; plain JSON."""
        return {}

    def __repr__(self) -> str:
        return f"<method {self.name}: {self.title}>"


def register(method: Method, replace: bool = False) -> Method:
    """Add ``method`` to the registry (``replace=True`` to override a name)."""
    if not isinstance(method, Method) or not method.name:
        raise TypeError("register: expected a named phasemap.methods.Method instance")
    if ":" in method.name or "," in method.name:
        raise ValueError(f"register: method name {method.name!r} may not contain ':' or ','")
    if method.name in _REGISTRY and not replace and _REGISTRY[method.name] is not method:
        raise ValueError(f"register: a method named {method.name!r} exists (pass replace=True)")
    _REGISTRY[method.name] = method
    return method


def unregister(name: str) -> None:
    """Remove a method (used by tests that register toy methods)."""
    _REGISTRY.pop(name, None)


def _load_builtin() -> None:
    global _LOADED
    if _LOADED:
        return
    _LOADED = True
    for mod in BUILTIN:
        register(importlib.import_module(f"{__name__}.{mod}").METHOD, replace=True)


def available() -> list[str]:
    """Names of the registered methods."""
    _load_builtin()
    return list(_REGISTRY)


def get_method(name) -> Method:
    """The registered method called ``name`` (a :class:`Method` passes through)."""
    if isinstance(name, Method):
        return name
    _load_builtin()
    key = str(name).strip().lower()
    if key not in _REGISTRY:
        close = difflib.get_close_matches(key, list(_REGISTRY), n=1)
        hint = f" (did you mean {close[0]!r}?)" if close else ""
        raise ConfigError(f"method: unknown method {name!r}{hint}; allowed: {', '.join(_REGISTRY)} "
                          "(with a cluster where the method takes one, e.g. 'cmf:tri12')")
    return _REGISTRY[key]


def resolve(method, options=None) -> tuple[Method, dict]:
    """``(method object, options dict)`` from ``"cmf:tri6"``, a :class:`MethodSpec` or a name plus options.

    The argument after ``:`` (or an explicit ``cluster`` option, or the method's default) is
    merged into the options; the options are not validated here.
    """
    options = dict(options or {})
    if isinstance(method, MethodSpec):
        impl, options = method.impl, {**method.option_dict, **options}
        check_temperature(impl, options.get("T"))
        return impl, options
    head, _, arg = str(method).partition(":")
    impl = get_method(head)
    if impl.capabilities.cluster:
        options.update(impl.parse_arg(arg or options.get("cluster")))
    else:
        impl.parse_arg(arg)
    check_temperature(impl, options.get("T"))
    return impl, options


def check_temperature(method, T) -> None:
    """ConfigError when a temperature ``T`` (a number, an array or None) is given to a method
    without ``capabilities.temperature`` (T = 0 / None is always accepted)."""
    import numpy as np

    if T is None or method.capabilities.temperature:
        return
    try:
        hot = bool(np.any(np.asarray(T, float) != 0))
    except (TypeError, ValueError):
        hot = True
    if hot:
        ok = [n for n in available() if get_method(n).capabilities.temperature]
        raise ConfigError(f"T: method {method.name!r} ({method.title}) has no finite-temperature mode; "
                          f"use one of {', '.join(ok)} (or T = 0)")


@dataclass(frozen=True)
class MethodSpec:
    """A method with its options, spelled ``"mf"``, ``"cmf:tri12"``, ``"ed:tri21"``.

    Parameters
    ----------
    method : str
        Registered method name.
    options : tuple of (key, value)
        Options in hashable form (``cluster`` for methods that take one).
    """

    method: str = "mf"
    options: tuple = ()

    @property
    def impl(self) -> Method:
        return get_method(self.method)

    @property
    def name(self) -> str:
        return self.impl.spec_name(dict(self.options))

    @property
    def option_dict(self) -> dict:
        return dict(self.options)

    @property
    def capabilities(self) -> Capabilities:
        return self.impl.capabilities

    @classmethod
    def parse(cls, text, **options) -> "MethodSpec":
        """``"mf"``, ``"cmf"`` (default cluster), ``"cmf:tri6"``, ``"ed:tri21"``; extra ``options`` merged."""
        if isinstance(text, MethodSpec):
            return text if not options else cls(text.method, tuple(sorted({**text.option_dict, **options}.items())))
        s = str(text).strip()
        head, _, arg = s.partition(":")
        m = get_method(head)
        opts = m.parse_arg(arg if arg else (options.get("cluster") if m.capabilities.cluster else None))
        opts.update({k: v for k, v in options.items() if v is not None})
        m.options(opts)  # validate now (unknown keys, types) before any work
        return cls(m.name, tuple(sorted(opts.items(), key=lambda kv: kv[0])))

    def __str__(self) -> str:
        return self.name


def parse_spec(text, **options) -> MethodSpec:
    """One method spec (see :class:`MethodSpec`)."""
    return MethodSpec.parse(text, **options)


def parse_specs(text) -> list[MethodSpec]:
    """Comma-separated specs (``"mf,cmf:tri12"``) or a list -> list of :class:`MethodSpec`."""
    items = list(text) if isinstance(text, (list, tuple)) else str(text).split(",")
    if not any(str(x).strip() for x in items):
        raise ConfigError("methods: give at least one method (e.g. 'mf' or 'mf,cmf:tri12')")
    if any(not str(x).strip() for x in items):
        raise ConfigError(f"methods: {text!r} has an empty item; give a comma list such as 'mf,cmf:tri12'")
    specs = [MethodSpec.parse(x) for x in items]
    names = [s.name for s in specs]
    if len(set(names)) != len(names):
        raise ConfigError(f"methods: {','.join(names)} lists a method twice")
    return specs
