r"""Strain tables: model parameters tabulated at a few strains, validated and interpolated.

A table lists, for increasing strain ``s``, the hopping per bond family, the on-site
repulsion (or hard-core), the nearest-neighbour repulsion per bond family and optionally
the next-nearest-neighbour repulsion, all in one energy unit.

CSV layout (``#`` lines before the header carry ``key = value`` metadata)::

    # unit = K
    # lattice = triangular
    # description = ...
    strain,t_d1,t_d2,t_d3,V_d1,V_d2,V_d3,V2
    0.00,0.80,0.80,0.80,6.0,6.0,6.0,0.0
    ...

TOML layout::

    unit = "K"
    lattice = "triangular"
    [[row]]
    strain = 0.0
    t = 0.8          # one number = all bond families, or t_d1, t_d2, t_d3
    V = 6.0
    ...

Columns: ``strain`` (required); ``t`` or one ``t_<family>`` per bond family (required);
``V`` or one ``V_<family>`` per family (required); ``U`` (optional; missing, ``inf`` or
``hardcore`` = hard-core bosons); ``V2`` (optional, default 0). Metadata: ``unit``
(required, one of :data:`KNOWN_UNITS`), ``lattice`` (default triangular), ``description``,
``source``, ``strain_unit`` (label only: "" or "%"), and free ``note`` lines.

Between rows every column is interpolated with a shape-preserving piecewise-cubic Hermite
spline (:class:`scipy.interpolate.PchipInterpolator`): monotone data stay monotone and no
overshoot appears between rows. Evaluating outside the table is refused unless asked.
"""

from __future__ import annotations

import csv
import difflib
import io
import math
import os
import warnings
from dataclasses import dataclass, field

import numpy as np
from scipy.interpolate import PchipInterpolator

from ..lattice import get_lattice
from ..model import ConfigError, Model

__all__ = ["StrainTable", "StrainTableWarning", "read_table", "KNOWN_UNITS", "META_KEYS"]

#: Energy units a table may declare. "V" means dimensionless numbers (energies in units of
#: a reference interaction), as elsewhere in phasemap.
KNOWN_UNITS = ("K", "mK", "meV", "ueV", "eV", "GHz", "THz", "cm-1", "V")

#: Metadata keys of a table (CSV ``# key = value`` lines, TOML top-level keys).
META_KEYS = ("unit", "lattice", "description", "source", "strain_unit", "note", "invented")

_STRAIN_UNITS = ("", "fraction", "%")
#: Largest |strain| of a row (a fraction, or percent) and largest |energy| of a parameter.
MAX_STRAIN, MAX_ENERGY = 100.0, 1e12


class StrainTableWarning(UserWarning):
    """A table is usable but its rows are sparse, or extrapolation was allowed."""


def _where(path, row=None, line=None, column=None) -> str:
    bits = [os.path.basename(str(path)) if path else "table"]
    if row is not None:
        bits.append(f"row {row}" + (f" (line {line})" if line is not None else ""))
    if column is not None:
        bits.append(f"column {column!r}")
    return ", ".join(bits)


def _number(text, where: str, *, allow_inf=False) -> float:
    if isinstance(text, bool):
        raise ConfigError(f"{where}: expected a number, got {text!r}")
    if isinstance(text, str):
        s = text.strip()
        if allow_inf and s.lower() in ("inf", "infinity", "hardcore", "hard-core"):
            return math.inf
        if s == "":
            raise ConfigError(f"{where}: empty cell; every row needs a finite number here")
        try:
            x = float(s)
        except ValueError:
            raise ConfigError(f"{where}: expected a number, got {s!r}") from None
    else:
        try:
            x = float(text)
        except (TypeError, ValueError):
            raise ConfigError(f"{where}: expected a number, got {text!r}") from None
    if math.isnan(x) or (math.isinf(x) and not allow_inf):
        raise ConfigError(f"{where}: must be a finite number, got {x}")
    return x


@dataclass
class StrainTable:
    """Validated model parameters versus strain, with PCHIP interpolation.

    Build with :func:`read_table` (file) or :meth:`from_columns` (Python).

    Attributes
    ----------
    strain : ndarray, shape (R,)
        Strictly increasing strains of the rows.
    t, V : ndarray, shape (R, F)
        Hopping and nearest-neighbour repulsion per bond family (order of
        ``Model.families``), in ``unit``.
    U : ndarray, shape (R,)
        On-site repulsion (``inf`` for hard-core; all rows hard-core or none).
    V2 : ndarray, shape (R,)
        Next-nearest-neighbour repulsion.
    unit : str
        Energy unit, one of :data:`KNOWN_UNITS`.
    lattice : str
    meta : dict
        Description, source and notes from the file.
    path : str or None
        Where the table was read from.
    """

    strain: np.ndarray
    t: np.ndarray
    V: np.ndarray
    U: np.ndarray
    V2: np.ndarray
    unit: str
    lattice: str = "triangular"
    meta: dict = field(default_factory=dict)
    path: str | None = None
    lines: list | None = None  # file line of each row (for messages)

    # -- construction -----------------------------------------------------------------
    @classmethod
    def from_columns(cls, columns: dict, unit: str, lattice: str = "triangular", meta: dict | None = None,
                     path: str | None = None, lines=None) -> "StrainTable":
        """Validate a column dictionary (names as in the CSV header) into a table.

        Parameters
        ----------
        columns : dict of str -> sequence
            ``strain``, ``t`` or ``t_<family>``, ``V`` or ``V_<family>``, optional ``U``, ``V2``.
            Values may be numbers or strings (``"inf"`` for U).
        unit : str
            One of :data:`KNOWN_UNITS`.

        Raises
        ------
        ConfigError
            Naming the row and column of the first problem and the allowed values.
        """
        meta = dict(meta or {})
        try:
            lat = get_lattice(lattice)
        except ValueError as e:
            raise ConfigError(f"{_where(path)}: lattice: {e}") from None
        fams = lat.families
        if not isinstance(unit, str) or unit.strip() not in KNOWN_UNITS:
            close = difflib.get_close_matches(str(unit), KNOWN_UNITS, n=1, cutoff=0.4)
            hint = f"; did you mean {close[0]!r}?" if close else ""
            raise ConfigError(f"{_where(path)}: unit: unknown energy unit {unit!r}{hint} "
                              f"(allowed: {', '.join(KNOWN_UNITS)}; 'V' = dimensionless)")
        unit = unit.strip()
        su = str(meta.get("strain_unit", "")).strip()
        if su not in _STRAIN_UNITS:
            raise ConfigError(f"{_where(path)}: strain_unit: {su!r} not allowed (allowed: '', 'fraction', '%')")
        allowed = ["strain", "t", "V", "U", "V2"] + [f"{b}_{f}" for b in ("t", "V") for f in fams]
        for name in columns:
            if name not in allowed:
                close = difflib.get_close_matches(str(name), allowed, n=1, cutoff=0.5)
                hint = f"; did you mean {close[0]!r}?" if close else ""
                raise ConfigError(f"{_where(path, column=name)}: unknown column{hint} "
                                  f"(allowed: {', '.join(allowed)})")
        if "strain" not in columns:
            raise ConfigError(f"{_where(path, column='strain')}: missing column (every table needs 'strain')")
        R = len(columns["strain"])
        for name, vals in columns.items():
            if len(vals) != R:
                raise ConfigError(f"{_where(path, column=name)}: {len(vals)} values but {R} strains; "
                                  "every column needs one value per row")
        if R < 2:
            raise ConfigError(f"{_where(path, column='strain')}: need at least 2 rows to interpolate, got {R}")
        line = (lambda r: lines[r]) if lines is not None else (lambda r: None)  # noqa: E731

        def col(name, allow_inf=False):
            v = np.array([_number(x, _where(path, r + 1, line(r), name), allow_inf=allow_inf)
                          for r, x in enumerate(columns[name])], float)
            big = np.isfinite(v) & (np.abs(v) > MAX_ENERGY)
            if name != "strain" and big.any():
                r = int(np.argmax(big))
                raise ConfigError(f"{_where(path, r + 1, line(r), name)}: must be >= {-MAX_ENERGY:g} and <= "
                                  f"{MAX_ENERGY:g} (in {unit}), got {v[r]:g}")
            return v

        strain = col("strain")
        for r in range(R):
            if abs(strain[r]) > MAX_STRAIN:
                raise ConfigError(f"{_where(path, r + 1, line(r), 'strain')}: strain must be >= {-MAX_STRAIN:g} and "
                                  f"<= {MAX_STRAIN:g} (a fraction, or percent), got {strain[r]:g}")
        for r in range(1, R):
            if not strain[r] > strain[r - 1]:
                raise ConfigError(f"{_where(path, r + 1, line(r), 'strain')}: strain must be strictly increasing "
                                  f"(got {strain[r]:g} after {strain[r - 1]:g} in row {r})")

        def per_family(base):
            fam_cols = [f"{base}_{f}" for f in fams]
            have = [c for c in fam_cols if c in columns]
            if base in columns and have:
                raise ConfigError(f"{_where(path, column=base)}: give either {base!r} (all bond families) or "
                                  f"{', '.join(fam_cols)}, not both (found {', '.join(have)})")
            if base in columns:
                v = col(base)
                return np.repeat(v[:, None], len(fams), axis=1)
            if not have:
                raise ConfigError(f"{_where(path, column=base)}: missing column; give {base!r} (isotropic) or "
                                  f"one column per bond family: {', '.join(fam_cols)}")
            if len(have) != len(fams):
                miss = [c for c in fam_cols if c not in columns]
                raise ConfigError(f"{_where(path, column=miss[0])}: missing column; with per-family columns every "
                                  f"family needs one ({', '.join(fam_cols)}; have {', '.join(have)})")
            return np.stack([col(c) for c in fam_cols], axis=1)

        t = per_family("t")
        for r in range(R):
            for k, f in enumerate(fams):
                if t[r, k] < 0:
                    name = "t" if "t" in columns else f"t_{f}"
                    raise ConfigError(f"{_where(path, r + 1, line(r), name)}: hopping must be >= 0, got {t[r, k]:g} "
                                      "(frustrated t < 0 needs complex order parameters, not supported)")
        V = per_family("V")
        U = col("U", allow_inf=True) if "U" in columns else np.full(R, math.inf)
        hard = np.isinf(U)
        for r in range(R):
            if not hard[r] and U[r] <= 0:
                raise ConfigError(f"{_where(path, r + 1, line(r), 'U')}: U must be > 0 (or inf / hardcore), got {U[r]:g}")
        if hard.any() and not hard.all():
            r = int(np.argmax(hard != hard[0]))
            raise ConfigError(f"{_where(path, r + 1, line(r), 'U')}: rows mix hard-core (inf) and finite U; "
                              "a table must be all hard-core or all soft-core")
        V2 = col("V2") if "V2" in columns else np.zeros(R)
        tab = cls(strain=strain, t=t, V=V, U=U, V2=V2, unit=unit, lattice=lat.name, meta=meta, path=path,
                  lines=list(lines) if lines is not None else None)
        tab._columns_given = [c for c in columns]
        return tab

    # -- derived ----------------------------------------------------------------------
    @property
    def families(self) -> tuple[str, ...]:
        return get_lattice(self.lattice).families

    @property
    def hardcore(self) -> bool:
        return bool(np.isinf(self.U).all())

    @property
    def span(self) -> tuple[float, float]:
        return float(self.strain[0]), float(self.strain[-1])

    @property
    def n_rows(self) -> int:
        return len(self.strain)

    @property
    def strain_label(self) -> str:
        su = self.meta.get("strain_unit", "")
        return "strain" + (f" [{su}]" if su in ("%",) else "")

    def columns(self) -> dict:
        """The parameter columns of the table rows: t_<family>, V_<family>, V2 (and U for soft-core)."""
        d = {f"t_{f}": self.t[:, k] for k, f in enumerate(self.families)}
        d.update({f"V_{f}": self.V[:, k] for k, f in enumerate(self.families)})
        d["V2"] = self.V2
        if not self.hardcore:
            d["U"] = self.U
        return d

    def _splines(self) -> dict:
        sp = getattr(self, "_spl", None)
        if sp is None:
            sp = {k: PchipInterpolator(self.strain, v, extrapolate=True) for k, v in self.columns().items()}
            self._spl = sp
        return sp

    def check_range(self, strain, extrapolate: bool = False) -> np.ndarray:
        """Return ``strain`` as an array; raise if outside the table unless ``extrapolate``."""
        s = np.atleast_1d(np.asarray(strain, float))
        if s.size == 0 or not np.all(np.isfinite(s)):
            raise ConfigError(f"strain: expected finite numbers, got {strain!r}")
        lo, hi = self.span
        eps = 1e-12 * max(1.0, abs(lo), abs(hi))
        out = (s < lo - eps) | (s > hi + eps)
        if out.any():
            bad = float(s[out][0])
            if not extrapolate:
                raise ConfigError(f"strain {bad:g}: outside the table {_where(self.path)} "
                                  f"(allowed range [{lo:g}, {hi:g}]); extrapolation beyond the rows is refused "
                                  "unless allowed (extrapolate=True, CLI --extrapolate)")
            reach = hi - lo  # extrapolation reaches at most one table span beyond the rows
            far = (s < lo - reach) | (s > hi + reach)
            if far.any():
                raise ConfigError(f"strain {float(s[far][0]):g}: too far outside the table {_where(self.path)} to "
                                  f"extrapolate (allowed with extrapolation: [{lo - reach:g}, {hi + reach:g}], one "
                                  "table span beyond the rows)")
            warnings.warn(f"strain {bad:g} is outside the table range [{lo:g}, {hi:g}]: parameters are "
                          "extrapolated from the end rows and may be meaningless", StrainTableWarning, stacklevel=3)
        return np.clip(s, lo, hi) if not extrapolate else s

    def params(self, strain, extrapolate: bool = False) -> dict:
        """Interpolated parameters at ``strain`` (scalar or array).

        Returns
        -------
        dict
            ``t`` and ``V`` of shape (S, F), ``U``, ``V2`` of shape (S,).
        """
        s = self.check_range(strain, extrapolate)
        sp = self._splines()
        fams = self.families
        t = np.stack([sp[f"t_{f}"](s) for f in fams], axis=1)
        V = np.stack([sp[f"V_{f}"](s) for f in fams], axis=1)
        t = np.maximum(t, 0.0)  # PCHIP keeps t >= 0 inside the rows; guard rounding and extrapolation
        U = sp["U"](s) if "U" in sp else np.full(len(s), math.inf)
        return {"strain": s, "t": t, "V": V, "U": U, "V2": sp["V2"](s)}

    def model(self, strain: float, mu: float = 0.0, extrapolate: bool = False, n_max=None) -> Model:
        """The :class:`~phasemap.model.Model` at one strain."""
        p = self.params(float(strain), extrapolate)
        kw = dict(lattice=self.lattice, t=tuple(p["t"][0]), V=tuple(p["V"][0]), V2=float(p["V2"][0]),
                  mu=float(mu), unit=self.unit)
        if not self.hardcore:
            kw["U"] = float(p["U"][0])
            kw["n_max"] = n_max
        return Model(**kw)

    def models(self, strains, mu: float = 0.0, extrapolate: bool = False, n_max=None) -> list[Model]:
        return [self.model(s, mu, extrapolate, n_max) for s in np.atleast_1d(strains)]

    def ratio(self, strain, extrapolate: bool = False) -> np.ndarray:
        """Largest hopping over largest |V| at ``strain`` (t/V, the controlling ratio)."""
        p = self.params(strain, extrapolate)
        v = np.abs(p["V"]).max(1)
        return np.where(v > 0, p["t"].max(1) / np.where(v > 0, v, 1.0), np.inf)

    def scaled(self, t: float = 1.0, V: float = 1.0, U: float = 1.0, V2: float | None = None) -> "StrainTable":
        """A copy with every row's t, V, U (and V2, default scaled like V) multiplied by factors."""
        for name, f in (("t", t), ("V", V), ("U", U)):
            if not (np.isfinite(f) and f > 0):
                raise ConfigError(f"scale factor {name}: must be a finite number > 0, got {f!r}")
        v2 = V if V2 is None else V2
        meta = dict(self.meta)
        meta["scaled"] = f"t x{t:g}, V x{V:g}, U x{U:g}, V2 x{v2:g}"
        tab = StrainTable(strain=self.strain.copy(), t=self.t * t, V=self.V * V, U=self.U * U, V2=self.V2 * v2,
                          unit=self.unit, lattice=self.lattice, meta=meta, path=self.path, lines=self.lines)
        return tab

    # -- sparsity -----------------------------------------------------------------------
    def leave_one_out(self) -> dict:
        """Relative change of each interior row's values when that row is dropped.

        For every interior row k the columns are re-interpolated from the other rows and
        compared at ``strain[k]``: a practical estimate of the interpolation error between
        rows (common practice, no source). Returns ``{column: ndarray (R,)}`` with zeros at the
        end rows (which cannot be dropped without extrapolating).
        """
        out = {}
        R = self.n_rows
        arrays = self.columns()
        arrays["t/V"] = self.t.max(1) / np.where(np.abs(self.V).max(1) > 0, np.abs(self.V).max(1), 1.0)
        for name, v in arrays.items():
            err = np.zeros(R)
            if R >= 3:
                for k in range(1, R - 1):
                    keep = np.arange(R) != k
                    est = PchipInterpolator(self.strain[keep], v[keep])(self.strain[k])
                    ref = max(abs(v[k]), np.abs(v).max() * 1e-12, 1e-300)
                    err[k] = abs(est - v[k]) / ref
            out[name] = err
        return out

    def sparsity_warnings(self, precision: float = 0.01) -> list[str]:
        """Messages (and :class:`StrainTableWarning`) when rows are too sparse for ``precision``.

        ``precision`` is the relative accuracy wanted of the interpolated parameters; a row
        whose omission changes a column by more than that means the rows around it are too
        far apart. Fewer than 4 rows is always reported (PCHIP then cannot be checked).
        """
        if not (np.isfinite(precision) and precision > 0):
            raise ConfigError(f"precision: must be a number > 0, got {precision!r}")
        msgs = []
        if self.n_rows < 4:
            msgs.append(f"{_where(self.path)}: only {self.n_rows} rows; the interpolation between them cannot be "
                        "checked (add rows)")
        loo = self.leave_one_out()
        for name, err in loo.items():
            if len(err) and err.max() > precision:
                k = int(np.argmax(err))
                msgs.append(f"{_where(self.path, k + 1, self.lines[k] if self.lines else None, name)}: rows too "
                            f"sparse for {precision:.2g} relative precision — dropping this row changes the "
                            f"interpolated {name} by {err[k]:.1%} at strain {self.strain[k]:g}")
        for m in msgs:
            warnings.warn(m, StrainTableWarning, stacklevel=2)
        return msgs

    # -- output -----------------------------------------------------------------------
    def to_dict(self) -> dict:
        d = {"unit": self.unit, "lattice": self.lattice, "strain": self.strain.tolist()}
        for k, v in self.columns().items():
            d[k] = v.tolist()
        d["hardcore"] = self.hardcore
        d["meta"] = {k: v for k, v in self.meta.items()}
        d["path"] = self.path
        return d

    def describe(self) -> str:
        lo, hi = self.span
        r = self.ratio(self.strain)
        kind = "hard-core" if self.hardcore else "soft-core"
        return (f"{self.n_rows} rows, strain {lo:g}..{hi:g}, {self.lattice} lattice, {kind}, unit {self.unit}, "
                f"t/V {r[0]:.3g}..{r[-1]:.3g}")


def _parse_meta_line(text: str, meta: dict, path=None):
    body = text.lstrip("#").strip()
    eq = "=" in body
    if eq:
        k, v = body.split("=", 1)
    elif ":" in body:
        k, v = body.split(":", 1)
    else:
        if body:
            meta.setdefault("notes", []).append(body)
        return
    k, v = k.strip().lower(), v.strip()
    if k in META_KEYS:
        if k == "note":
            meta.setdefault("notes", []).append(v)
        else:
            meta[k] = v
    elif eq and k.replace("_", "").replace("-", "").isalnum():
        # a '# key = value' line with an unknown key is a mistake, not a note (TOML tables refuse too);
        # free text stays a note ('# note = ...', '# Source: ...', lines without '=')
        close = difflib.get_close_matches(k, list(META_KEYS), n=1, cutoff=0.5)
        hint = f"; did you mean {close[0]!r}?" if close else ""
        raise ConfigError(f"{_where(path)}: unknown metadata key {k!r} in line {text.strip()!r}{hint} "
                          f"(allowed: {', '.join(META_KEYS)}; free text: '# note = ...')")
    else:
        meta.setdefault("notes", []).append(body)


def _read_csv(path: str, text: str) -> StrainTable:
    meta: dict = {}
    lines = text.splitlines()
    header, header_line, data, data_lines = None, None, [], []
    for ln, raw in enumerate(lines, start=1):
        s = raw.strip()
        if not s:
            continue
        if s.startswith("#"):
            if header is None:
                _parse_meta_line(s, meta, path)
            continue
        row = next(csv.reader(io.StringIO(raw)))
        row = [c.strip() for c in row]
        if header is None:
            header, header_line = row, ln
            continue
        data.append(row)
        data_lines.append(ln)
    if header is None:
        raise ConfigError(f"{_where(path)}: no header line (expected e.g. 'strain,t,V')")
    seen = set()
    for c in header:
        if c == "":
            raise ConfigError(f"{_where(path)}: empty column name in the header (line {header_line})")
        if c in seen:
            raise ConfigError(f"{_where(path, column=c)}: column appears twice in the header (line {header_line})")
        seen.add(c)
    for r, (row, ln) in enumerate(zip(data, data_lines), start=1):
        if len(row) != len(header):
            raise ConfigError(f"{_where(path, r, ln)}: {len(row)} fields but the header (line {header_line}) "
                              f"has {len(header)} columns ({', '.join(header)})")
    if "unit" not in meta:
        raise ConfigError(f"{_where(path)}: unit: missing; add a line '# unit = K' before the header "
                          f"(allowed: {', '.join(KNOWN_UNITS)})")
    cols = {c: [row[i] for row in data] for i, c in enumerate(header)}
    return StrainTable.from_columns(cols, unit=meta.pop("unit"), lattice=meta.pop("lattice", "triangular"),
                                    meta=meta, path=path, lines=data_lines)


def _read_toml(path: str, text: str) -> StrainTable:
    import tomllib

    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as e:
        raise ConfigError(f"{_where(path)}: not valid TOML: {e}") from None
    rows = doc.pop("row", None)
    for k in doc:
        if k not in META_KEYS:
            close = difflib.get_close_matches(k, list(META_KEYS) + ["row"], n=1, cutoff=0.5)
            hint = f"; did you mean {close[0]!r}?" if close else ""
            raise ConfigError(f"{_where(path)}: unknown top-level key {k!r}{hint} "
                              f"(allowed: {', '.join(META_KEYS)}, [[row]])")
    if not isinstance(rows, list) or not rows or not all(isinstance(r, dict) for r in rows):
        raise ConfigError(f"{_where(path)}: expected the rows as [[row]] tables (strain = ..., t = ..., V = ...)")
    keys = list(rows[0])
    for r, row in enumerate(rows, start=1):
        missing = [k for k in keys if k not in row]
        extra = [k for k in row if k not in keys]
        if missing or extra:
            c = (missing or extra)[0]
            what = "missing" if missing else "not in row 1"
            raise ConfigError(f"{_where(path, r, column=c)}: column {what}; every row needs the same keys "
                              f"({', '.join(keys)})")
    cols = {k: [row[k] for row in rows] for k in keys}
    meta = {k: v for k, v in doc.items()}
    if "unit" not in meta:
        raise ConfigError(f"{_where(path)}: unit: missing; add unit = \"K\" at the top "
                          f"(allowed: {', '.join(KNOWN_UNITS)})")
    return StrainTable.from_columns(cols, unit=meta.pop("unit"), lattice=meta.pop("lattice", "triangular"),
                                    meta=meta, path=path)


def read_table(path) -> StrainTable:
    """Read and validate a strain table (``.csv`` or ``.toml``).

    Parameters
    ----------
    path : str or path-like
        A CSV file with ``# key = value`` metadata and a header line, or a TOML file with
        top-level metadata and ``[[row]]`` tables. ``"demo"`` reads the invented demo
        table shipped with the package.

    Returns
    -------
    StrainTable

    Raises
    ------
    ConfigError
        Unreadable file, unknown format, or invalid content; the message names the row
        (and file line) and the column, and the allowed values.
    """
    p = str(path)
    if p == "demo":
        from importlib.resources import files

        p = str(files("phasemap") / "data" / "strain_demo.csv")
    from ..store import read_input_text

    ext = os.path.splitext(p)[1].lower()
    if ext not in (".csv", ".toml") and not os.path.isdir(p):
        raise ConfigError(f"table {p!r}: unknown format {ext!r} (allowed: .csv, .toml)")
    text = read_input_text(p, "table")  # missing, folder, pipe, unreadable, not UTF-8 (a BOM is fine)
    if ext == ".csv":
        return _read_csv(p, text)
    if ext == ".toml":
        return _read_toml(p, text)
    raise ConfigError(f"table {p!r}: unknown format {ext!r} (allowed: .csv, .toml)")
