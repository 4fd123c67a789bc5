r"""The extended Bose-Hubbard model and its validated parameters.

.. math::

    H = -\sum_{\langle ij\rangle} t_{d(ij)} (b_i^\dagger b_j + h.c.)
        + \frac{U}{2}\sum_i n_i(n_i-1)
        + \sum_{\langle ij\rangle} V_{d(ij)} n_i n_j
        + V_2 \sum_{\langle\langle ij\rangle\rangle} n_i n_j - \mu \sum_i n_i

Note the signs: ``t > 0`` is unfrustrated hopping (uniform condensate phase); ``V > 0`` is
repulsive. ``U = inf`` means hard-core bosons (``n_max = 1``). ``t`` and ``V`` are either one
number (isotropic) or one value per bond family of the lattice (``d1, d2, d3`` on the
triangular lattice, ``x, y`` on the square lattice).
"""

from __future__ import annotations

import difflib
import math
from dataclasses import dataclass, field, fields, replace
from typing import Any

import numpy as np

from .lattice import get_lattice

__all__ = ["Model", "ConfigError", "check_keys"]


class ConfigError(ValueError):
    """Bad user input. The message names the field and the allowed values."""


def check_keys(section: str, given, allowed) -> None:
    """Reject unknown keys, suggesting the closest valid one."""
    for key in given:
        if key not in allowed:
            close = difflib.get_close_matches(str(key), list(allowed), n=1, cutoff=0.5)
            hint = f"; did you mean {close[0]!r}?" if close else ""
            raise ConfigError(
                f"{section}: unknown key {key!r}{hint} (allowed: {', '.join(sorted(allowed))})"
            )


#: Largest |energy| of a parameter (in the model's unit) and largest occupation cut-off.
MAX_ENERGY = 1e12
MAX_N_MAX = 1000


def _finite(name: str, x: float, *, lo=-math.inf, lo_open=False, allow_inf=False) -> float:
    if isinstance(x, (bool, np.bool_)):  # float(True) would silently be 1.0
        raise ConfigError(f"{name}: expected a number, got {x!r}")
    try:
        x = float(x)
    except (TypeError, ValueError):
        raise ConfigError(f"{name}: expected a number, got {x!r}") from None
    if math.isnan(x) or (math.isinf(x) and not allow_inf):
        raise ConfigError(f"{name}: must be a finite number, got {x}")
    if x < lo or (lo_open and x == lo):
        rng = f"> {lo}" if lo_open else f">= {lo}"
        raise ConfigError(f"{name}: must be {rng}, got {x}")
    if math.isfinite(x) and abs(x) > MAX_ENERGY:
        raise ConfigError(f"{name}: must be >= {-MAX_ENERGY:g} and <= {MAX_ENERGY:g}, got {x:g}")
    return x


def _per_family(name: str, value, families) -> tuple[float, ...]:
    if np.ndim(value) == 0:
        vals = [value] * len(families)
    else:
        vals = list(np.asarray(value, dtype=object).ravel())
        if len(vals) != len(families):
            raise ConfigError(
                f"{name}: expected one number or {len(families)} values (one per bond family "
                f"{', '.join(families)}), got {len(vals)}"
            )
    return tuple(_finite(f"{name}[{f}]", v) for f, v in zip(families, vals))


@dataclass(frozen=True)
class Model:
    """Validated parameters of the extended Bose-Hubbard model.

    Parameters
    ----------
    lattice : {"triangular", "square"}
    t : float or sequence of float
        Hopping amplitude, one number or one per bond family. Must be >= 0
        (frustrated hopping t < 0 is not supported yet).
    V : float or sequence of float, default 0
        Nearest-neighbour interaction, one number or one per bond family.
    U : float, default inf
        On-site repulsion, >= 0; ``inf`` (or the string "inf"/"hardcore") = hard-core bosons.
    V2 : float, default 0
        Next-nearest-neighbour interaction (distance sqrt(3) on the triangular lattice).
    mu : float, default 0
        Chemical potential.
    n_max : int, optional
        Occupation cut-off for soft-core bosons (>= 1). Default: ``max(3, ceil(mu/U) + 2)``.
        Solvers warn when the top occupation carries weight. Ignored (=1) for hard-core.
    unit : str, optional
        Label of the energy unit of t, V, U, V2, mu (e.g. "K", "meV"). Default: "V" for
        hard-core and "U" for soft-core bosons (dimensionless work).
    """

    lattice: str = "triangular"
    t: Any = 0.0
    V: Any = 0.0
    U: float = math.inf
    V2: float = 0.0
    mu: float = 0.0
    n_max: int | None = None
    unit: str | None = None
    _auto_n_max: bool = field(default=False, repr=False, compare=False)

    def __post_init__(self):
        try:
            lat = get_lattice(self.lattice)
        except ValueError as e:
            raise ConfigError(str(e)) from None
        set_ = lambda k, v: object.__setattr__(self, k, v)  # noqa: E731
        set_("lattice", lat.name)
        set_("t", _per_family("t", self.t, lat.families))
        if any(x < 0 for x in self.t):
            raise ConfigError(
                f"t: hopping must be >= 0 (got {self.t}); frustrated hopping t < 0 needs complex "
                "order parameters, which phasemap does not support yet"
            )
        set_("V", _per_family("V", self.V, lat.families))
        U = self.U
        if isinstance(U, str) and U.strip().lower() in ("inf", "infinity", "hardcore", "hard-core"):
            U = math.inf
        set_("U", _finite("U", U, lo=0.0, allow_inf=True))
        set_("V2", _finite("V2", self.V2))
        set_("mu", _finite("mu", self.mu))
        if self.unit is None:  # dimensionless work: energies in units of V (hard-core) or U
            set_("unit", "V" if self.hardcore else "U")
        if not isinstance(self.unit, str) or not self.unit.strip():
            raise ConfigError(f"unit: expected a non-empty label such as 'K', 'meV' or 'V', got {self.unit!r}")
        if self.hardcore:
            if self.n_max not in (None, 1):
                raise ConfigError(f"n_max: hard-core bosons (U = inf) have n_max = 1, got {self.n_max}")
            set_("n_max", 1)
        else:
            if self.U == 0:
                raise ConfigError("U: soft-core bosons need U > 0 (U = 0 is unbounded); use U = inf for hard-core")
            if self.n_max is None:
                need = max(self.mu, 0.0) / self.U
                if need > MAX_N_MAX - 2:
                    raise ConfigError(f"n_max: the default cut-off for mu/U = {need:g} would be > {MAX_N_MAX}; "
                                      f"n_max must be >= 1 and <= {MAX_N_MAX} (give n_max, or a smaller mu/U)")
                set_("n_max", self.default_n_max(self.mu, self.U))
                set_("_auto_n_max", True)
            else:
                if isinstance(self.n_max, bool) or int(self.n_max) != self.n_max or not 1 <= self.n_max <= MAX_N_MAX:
                    raise ConfigError(f"n_max: must be an integer >= 1 and <= {MAX_N_MAX}, got {self.n_max!r}")
                set_("n_max", int(self.n_max))

    # -- derived ------------------------------------------------------------------------
    @staticmethod
    def default_n_max(mu: float, U: float) -> int:
        return max(3, int(math.ceil(max(mu, 0.0) / U)) + 2)

    @property
    def hardcore(self) -> bool:
        return math.isinf(self.U)

    @property
    def families(self) -> tuple[str, ...]:
        return get_lattice(self.lattice).families

    @property
    def z(self) -> int:
        return get_lattice(self.lattice).z

    @property
    def scale(self) -> float:
        """Reference energy for ratio axes: max V for hard-core (max t if V = 0), U for soft-core."""
        if self.hardcore:
            return max(abs(v) for v in self.V) or max(self.t) or 1.0
        return self.U

    @property
    def scale_name(self) -> str:
        if self.hardcore:
            return "V" if any(self.V) else ("t" if any(self.t) else self.unit)
        return "U"

    def replace(self, **changes) -> "Model":
        """A copy with ``changes``; a default n_max is re-derived unless given."""
        if self._auto_n_max and "n_max" not in changes:
            changes["n_max"] = None
        changes.setdefault("_auto_n_max", False)
        return replace(self, **changes)

    def to_dict(self) -> dict:
        d = {f.name: getattr(self, f.name) for f in fields(self) if not f.name.startswith("_")}
        d["t"], d["V"] = list(self.t), list(self.V)
        d["U"] = "inf" if self.hardcore else self.U
        return d

    @classmethod
    def from_dict(cls, d: dict, section: str = "model") -> "Model":
        allowed = [f.name for f in fields(cls) if not f.name.startswith("_")]
        check_keys(section, d, allowed)
        return cls(**d)

    def describe(self) -> str:
        fam = lambda x: (f"{x[0]:g}" if len(set(x)) == 1 else "(" + ", ".join(f"{v:g}" for v in x) + ")")  # noqa: E731
        U = "inf (hard-core)" if self.hardcore else f"{self.U:g} (n_max={self.n_max})"
        return (f"{self.lattice} lattice, t={fam(self.t)}, V={fam(self.V)}, U={U}, V2={self.V2:g}, "
                f"mu={self.mu:g} [{self.unit}]")
