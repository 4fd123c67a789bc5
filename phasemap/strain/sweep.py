"""Strain sweep for several methods: plateau edges, (strain, mu) phase map, critical strain, lambda scan.

:func:`strain_sweep` runs one path for every method: the method's
:meth:`~phasemap.methods.Method.strain_step` gives a :class:`~phasemap.strain.record.StepRecord`
at every strain of the path and :meth:`~phasemap.methods.Method.strain_critical` the critical
strain. Grand-canonical methods (mf, cmf:<cluster>) solve every strain on one common
chemical-potential grid in one batched call (the phase map), locate the plateau edges, and
polish the critical strain with brentq from those samples (so the sweep's critical strain *is*
the root-finding answer). Finite-lattice methods (ed:<cluster>) give the step mu-(N), mu+(N),
its gap and S(K)/N at N = f L; they have no sharp critical strain, only a labelled
steepest-drop indicator, and are never part of the band. :meth:`StrainSweep.save` writes
labelled data (NetCDF + CSV with metadata + JSON, one method dimension ``solver``) atomically;
:mod:`phasemap.strain.plots` draws it.
"""

from __future__ import annotations

import dataclasses
import json
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import xarray as xr

from ..classify import Thresholds
from ..methods import parse_specs
from .analysis import CAUTION
from .critical import coarse_strains, critical_band
from .engine import PlateauResult, default_window, fixed_filling, parse_fraction
from .melting import check_T_measure
from .sensitivity import critical_vs_lambda
from .table import StrainTable

__all__ = ["StrainSweep", "strain_sweep", "check_sweep", "sweep_checkpoint_params", "sweep_chunk", "sweep_step_chunk",
           "sweep_part_chunk", "sweep_finish_chunk"]


@dataclass
class StrainSweep:
    """Everything a strain sweep computed (see :func:`strain_sweep`)."""

    table: StrainTable
    methods: list  # MethodSpec of every method, in the order given
    fraction: str
    strains: np.ndarray
    mu: np.ndarray
    records: dict  # method name -> StepRecord along the path
    critical: dict  # method name -> CriticalResult (sharp) or IndicatorResult (finite lattice)
    band: dict
    lambdas: dict = field(default_factory=dict)  # method name -> LambdaScan
    seconds: dict = field(default_factory=dict)
    notes: list = field(default_factory=list)
    melting: dict = field(default_factory=dict)  # method name -> MeltingRecord (finite-temperature methods)
    T_measure: float | None = None  # the user's measurement temperature (table unit)

    @property
    def names(self) -> list[str]:
        return [m.name for m in self.methods]

    @property
    def sharp_names(self) -> list[str]:
        """Methods with thermodynamic plateau edges (their critical strains form the band)."""
        return [n for n in self.names if self.records[n].sharp]

    @property
    def grid_names(self) -> list[str]:
        """Methods that computed the (strain, mu) map."""
        return [n for n in self.names if self.records[n].grid is not None]

    def vref(self) -> np.ndarray:
        return np.abs(self.table.params(self.strains)["V"]).max(1)

    def plateau_table(self) -> dict:
        """Long-format columns: one row per (method, strain); columns a method lacks are empty/NaN."""
        nan = float("nan")
        order_keys = sorted({k for r in self.records.values() for k in r.order})
        err_keys = sorted({k for r in self.records.values() for k in r.errors})
        cols = {k: [] for k in ("method", "sharp", "strain", "t_over_V", "mu_lo", "mu_hi", "width", "width_over_V",
                                "plateau", "converged", "fixed_filling_state", "fixed_filling_label",
                                "lower_edge_jump", "upper_edge_jump", "cluster", "n_sites", "N")}
        cols.update({f"order_{k}": [] for k in order_keys})
        cols.update({f"error_{k}": [] for k in err_keys})
        ratio = self.table.ratio(self.strains)
        vref = self.vref()
        for name in self.names:
            r = self.records[name]
            d = r.detail
            for i, s in enumerate(self.strains):
                ff = fixed_filling(d, i) if isinstance(d, PlateauResult) else {}  # grand-canonical plateau search
                row = {"method": name, "sharp": bool(r.sharp), "strain": float(s), "t_over_V": float(ratio[i]),
                       "mu_lo": float(r.mu_lo[i]), "mu_hi": float(r.mu_hi[i]), "width": float(r.width[i]),
                       "width_over_V": float(r.width[i] / vref[i]) if vref[i] > 0 else nan,
                       "plateau": bool(r.exists[i]), "converged": bool(r.converged[i]),
                       "fixed_filling_state": ff.get("state", ""), "fixed_filling_label": ff.get("label", ""),
                       "lower_edge_jump": float(d.jump_lo[i]) if r.sharp else nan,
                       "upper_edge_jump": float(d.jump_hi[i]) if r.sharp else nan,
                       "cluster": str(r.info.get("cluster", "")), "n_sites": int(r.info.get("n_sites", 0)),
                       "N": int(r.info.get("N", -1))}
                row.update({f"order_{k}": float(r.order[k][i]) if k in r.order else nan for k in order_keys})
                row.update({f"error_{k}": float(r.errors[k][i]) if k in r.errors else nan for k in err_keys})
                for k, v in row.items():
                    cols[k].append(v)
        return cols

    def provenance(self, **extra) -> dict:
        """The provenance every file of the sweep carries (:func:`phasemap.store.provenance`)."""
        from ..store import provenance

        # per method its options; a method with statistical settings (qmc: sizes, T, sweeps, seed, ...)
        # reports the full settings it ran with (StepRecord.info["settings"]), so the files say how it was made
        opts = {m.name: self.records[m.name].info.get("settings", m.option_dict) if m.name in self.records
                else m.option_dict for m in self.methods}
        return provenance(method=",".join(self.names), options=opts, table=self.table, unit=self.table.unit, **extra)

    def metadata(self) -> dict:
        return {
            **self.provenance(),
            "title": f"phasemap strain sweep, {self.fraction} plateau",
            "table": self.table.path or "", "table_description": self.table.meta.get("description", ""),
            "table_invented": self.table.meta.get("invented", ""), "energy_unit": self.table.unit,
            "lattice": self.table.lattice, "hardcore": int(self.table.hardcore), "fraction": self.fraction,
            "methods": json.dumps(self.names),
            "band_lo": self.band["lo"] if self.band["lo"] is not None else float("nan"),
            "band_hi": self.band["hi"] if self.band["hi"] is not None else float("nan"),
            "band_text": self.band["text"], "caution": CAUTION,
            "method_cautions": json.dumps({m.name: m.impl.caution for m in self.methods}),
        }

    def to_dataset(self) -> xr.Dataset:
        """Labelled arrays with one method dimension, ``solver`` (every method of the sweep; not
        called "method" because ``Dataset.sel(method=...)`` is xarray's interpolation keyword): the
        (solver, strain, mu) map of the methods that computed one, and the (solver, strain)
        plateau record of every method."""
        from ..api import phase_codes

        codes = phase_codes()
        names = self.names
        A, S_, M = len(names), len(self.strains), len(self.mu)
        u = self.table.unit
        nanmap = lambda: np.full((A, S_, M), np.nan)  # noqa: E731
        fill, sq, cond = nanmap(), nanmap(), nanmap()
        conv = np.zeros((A, S_, M), bool)
        comp = np.zeros((A, S_, M), bool)
        code = np.full((A, S_, M), -1, np.int8)
        label = np.full((A, S_, M), "", dtype=object)
        per = {k: np.full((A, S_), np.nan) for k in ("mu_lo", "mu_hi", "width", "jump_lo", "jump_hi")}
        exists = np.zeros((A, S_), bool)
        rconv = np.zeros((A, S_), bool)
        order_keys = sorted({k for r in self.records.values() for k in r.order})
        err_keys = sorted({k for r in self.records.values() for k in r.errors})
        order = {k: np.full((A, S_), np.nan) for k in order_keys}
        errs = {k: np.full((A, S_), np.nan) for k in err_keys}
        ecan = np.full((A, S_, 3), np.nan)
        for a, n in enumerate(names):
            r = self.records[n]
            if r.grid is not None:
                g = r.grid
                fill[a], sq[a], cond[a] = g["filling"], g["sq_max"], g["condensate_max"]
                conv[a] = g["converged"]
                comp[a] = g.get("computed", True)
                code[a] = np.vectorize(lambda x: codes.get(x, -1))(g["phase"])
                label[a] = g["label"]
            per["mu_lo"][a], per["mu_hi"][a], per["width"][a] = r.mu_lo, r.mu_hi, r.width
            if r.sharp:
                per["jump_lo"][a], per["jump_hi"][a] = r.detail.jump_lo, r.detail.jump_hi
            if getattr(r.detail, "e_canonical", None) is not None:
                ecan[a] = r.detail.e_canonical
            exists[a], rconv[a] = r.exists, r.converged
            for k in r.order:
                order[k][a] = r.order[k]
            for k in r.errors:
                errs[k][a] = r.errors[k]
        p = self.table.params(self.strains)
        m3, m2 = ("solver", "strain", "mu"), ("solver", "strain")
        data = {
            "filling": (m3, fill, {"long_name": "filling per site (methods with a grand-canonical map)"}),
            "sq_max": (m3, sq, {"long_name": "largest S(Q) at nonzero Q (solid order)"}),
            "condensate_max": (m3, cond, {"long_name": "max |<b>| (condensate)"}),
            "converged": (m3, conv),
            "computed": (m3, comp, {"long_name": "map point solved (cmf maps solve every other mu of the grid; "
                                    "the plateau edges are searched to the same tolerance regardless)"}),
            "phase_code": (m3, code, {"flag_values": list(codes.values()), "flag_meanings": " ".join(codes)}),
            "label": (m3, label.astype(str)),
            "mu_lo": (m2, per["mu_lo"], {"units": u, "long_name": f"{self.fraction} plateau lower edge "
                                         "(finite lattice: mu-(N) = E_c(N) - E_c(N-1))"}),
            "mu_hi": (m2, per["mu_hi"], {"units": u, "long_name": f"{self.fraction} plateau upper edge "
                                         "(finite lattice: mu+(N) = E_c(N+1) - E_c(N))"}),
            "width": (m2, per["width"], {"units": u, "long_name": "plateau width (finite lattice: charge gap, never "
                                         "exactly 0)"}),
            "width_over_V": (m2, per["width"] / self.vref()[None, :], {"long_name": "width / max V"}),
            "jump_lo": (m2, per["jump_lo"], {"long_name": "filling jump at the lower edge (sharp methods)"}),
            "jump_hi": (m2, per["jump_hi"], {"long_name": "filling jump at the upper edge (sharp methods)"}),
            "plateau": (m2, exists, {"long_name": "plateau present (sharp) / density order indicated (finite lattice)"}),
            "plateau_converged": (m2, rconv),
            "E_canonical": (("solver", "strain", "dN"), ecan,
                            {"units": u, "long_name": "E0 + mu N at N-1, N, N+1 (canonical methods)"}),
            "t": (("strain", "family"), p["t"], {"units": u, "long_name": "hopping (PCHIP)"}),
            "V": (("strain", "family"), p["V"], {"units": u, "long_name": "NN repulsion (PCHIP)"}),
            "V2": (("strain",), p["V2"], {"units": u}),
            "t_over_V": (("strain",), self.table.ratio(self.strains), {"long_name": "max t / max V"}),
        }
        for k in order_keys:
            data[f"order_{_var(k)}"] = (m2, order[k], {"long_name": f"{k} at the plateau"})
        crit = [self.critical[n].to_dict() for n in names]
        num = lambda x: float("nan") if x is None else float(x)  # noqa: E731
        data.update({
            "strain_c": (("solver",), [num(c.get("strain_c")) for c in crit],
                         {"long_name": "critical strain (NaN: none in the table, or a finite lattice)"}),
            "strain_c_xtol": (("solver",), [num(c.get("xtol")) for c in crit], {"long_name": "root-finding tolerance"}),
            "critical_status": (("solver",), [str(c["status"]) for c in crit]),
            "in_band": (("solver",), [bool(self.critical[n].in_band) for n in names]),
            "table_strain": (("row",), self.table.strain, {"long_name": "strain of the table rows (input)"}),
        })
        for k, v in self.table.columns().items():
            data[f"table_{k}"] = (("row",), v, {"units": u, "long_name": f"{k} of the table rows (input)"})
        for k in err_keys:
            data[f"error_{_var(k)}"] = (m2, errs[k], {"long_name": f"one-sigma statistical error of {k}"})
        if self.melting:
            tm = np.full((A, S_), np.nan)
            fo = np.zeros((A, S_), bool)
            tme = np.full((A, S_), np.nan)
            for a, n in enumerate(names):
                if n in self.melting:
                    r = self.melting[n]
                    tm[a], fo[a] = r.T_melt, r.first_order
                    if "T_melt" in r.errors:
                        tme[a] = r.errors["T_melt"]
            data["T_melt"] = (m2, tm, {"units": u, "long_name": f"melting temperature of the {self.fraction} solid at "
                                       "the plateau centre (NaN: not computed or no solid at T = 0; inf: above T_max)"})
            data["T_melt_first_order"] = (m2, fo, {"long_name": "melting is first order (jump survives bisection)"})
            data["error_T_melt"] = (m2, tme, {"units": u, "long_name": "one-sigma error of T_melt (Monte Carlo)"})
        info = lambda k, d: [self.records[n].info.get(k, d) for n in names]  # noqa: E731
        coords = {"strain": self.strains, "mu": self.mu, "family": list(self.table.families), "solver": names,
                  "dN": [-1, 0, 1], "sharp": ("solver", [bool(self.records[n].sharp) for n in names]),
                  "cluster": ("solver", [str(x) for x in info("cluster", "")]),
                  "n_sites": ("solver", info("n_sites", 0)), "N": ("solver", info("N", -1))}
        ds = xr.Dataset(data, coords=coords, attrs=self.metadata())
        if self.T_measure is not None:
            ds.attrs["T_measure"] = self.T_measure
        ds["mu"].attrs["units"] = u
        ds["strain"].attrs["long_name"] = self.table.strain_label
        return ds

    def lambda_dataset(self) -> xr.Dataset | None:
        if not self.lambdas:
            return None
        names = [n for n in self.names if n in self.lambdas]
        lam = self.lambdas[names[0]].lambdas
        sc = np.array([self.lambdas[n].strain_c for n in names])
        unc = np.array([self.lambdas[n].uncertainty for n in names])
        return xr.Dataset({"strain_c": (("solver", "lambda"), sc), "uncertainty": (("solver", "lambda"), unc)},
                          coords={"solver": names, "lambda": lam},
                          attrs={**self.provenance(fraction=self.fraction), "param": self.lambdas[names[0]].param,
                                 "scans": json.dumps({n: self.lambdas[n].to_dict() for n in names})})

    def summary(self) -> dict:
        """Plain-JSON summary (critical strains, band, lambda scans, timings)."""
        return {
            **self.provenance(),
            "table": self.table.path, "unit": self.table.unit, "fraction": self.fraction, "methods": self.names,
            "critical": {k: v.to_dict() for k, v in self.critical.items()},
            "band": self.band,
            "lambda": {k: v.to_dict() for k, v in self.lambdas.items()},
            "notes": list(self.notes), "seconds": self.seconds, "caution": CAUTION,
            "method_cautions": {m.name: m.impl.caution for m in self.methods},
            **({"melting": {k: v.to_dict() for k, v in self.melting.items()}, "T_measure": self.T_measure,
                "survives_at_T_measure": self.survival()} if self.melting else {}),
        }

    def survival(self) -> dict:
        """Per method: strains where the solid exists at T = 0 and melts above the measurement T."""
        if self.T_measure is None:
            return {}
        return {n: [float(s) for s in self.strains[r.survives(self.T_measure)]] for n, r in self.melting.items()}

    def melting_text(self) -> list[str]:
        lines = []
        for n, r in self.melting.items():
            ok = np.isfinite(r.T_melt)
            if not ok.any():
                lines.append(f"{n}: no solid at T = 0 along the path, so no melting temperature")
                continue
            fo = "first order" if r.first_order[ok].all() else ("continuous" if not r.first_order[ok].any() else
                                                               "first order at some strains")
            lines.append(f"{n}: T_melt from {np.nanmin(r.T_melt):.3g} to {np.nanmax(r.T_melt):.3g} {self.table.unit} "
                         f"along the path ({fo})")
            if self.T_measure is not None:
                surv = self.strains[r.survives(self.T_measure)]
                where = (f"survives at strains {surv.min():g} .. {surv.max():g}" if surv.size else "melts at every strain")
                lines.append(f"  at the measurement temperature {self.T_measure:g} {self.table.unit} the solid {where}")
        return lines

    def text(self) -> str:
        lines = [f"strain sweep of {self.table.path or 'table'} ({self.table.describe()})"]
        for n in self.names:
            lines.append("  " + self.critical[n].summary())
            if n in self.lambdas:
                lines.append("  " + self.lambdas[n].summary())
        lines.append("  " + self.band["text"])
        for x in self.melting_text():
            lines.append("  " + x)
        for x in self.notes:
            lines.append(f"  note: {x}")
        shown = set()
        for m in self.methods:
            if m.impl.caution not in shown:
                shown.add(m.impl.caution)
                lines.append(f"  caution ({m.impl.name}): {m.impl.caution}")
        return "\n".join(lines)

    def save(self, outdir, figures: bool = True, formats=("png", "pdf")) -> list[Path]:
        """Write sweep.nc, plateau.csv, critical.csv, summary.json (+ lambda.csv/nc, figures) atomically,
        then the completion marker COMPLETE.json last (a folder without it holds an incomplete set)."""
        from ..store import atomic_write_text, dumps_json, mark_complete, mark_incomplete, save_csv, save_netcdf

        out = Path(outdir)
        mark_incomplete(out)
        paths = [save_netcdf(self.to_dataset(), out / "sweep.nc")]
        meta = dict(self.metadata())
        paths.append(save_csv(out / "plateau.csv", self.plateau_table(), meta))
        nan = float("nan")
        crit = {k: [] for k in ("method", "status", "strain_c", "xtol", "interpolation_uncertainty", "t_over_V_c",
                                "closest_strain", "closest_width", "band_lo", "band_hi", "in_band",
                                "indicator_SK_drop_strain", "indicator_SK_drop_resolution",
                                "indicator_gap_drop_strain", "indicator_gap_drop_resolution")}
        band = {"band_lo": self.band["lo"] if self.band["lo"] is not None else nan,
                "band_hi": self.band["hi"] if self.band["hi"] is not None else nan}
        for n in self.names:
            d = self.critical[n].to_dict()
            row = {"method": n, "status": d["status"], "in_band": bool(self.critical[n].in_band), **band}
            sc = d.get("strain_c")
            row.update(strain_c=sc if sc is not None else nan, xtol=d.get("xtol", nan),
                       interpolation_uncertainty=d.get("interpolation_uncertainty") or nan,
                       t_over_V_c=d.get("t_over_V_c") if d.get("t_over_V_c") is not None else nan)
            close = d.get("closest") or {}
            gap = d.get("smallest_gap") or {}
            row["closest_strain"] = close.get("strain", gap.get("strain", nan))
            row["closest_width"] = close.get("value", gap.get("gap", nan))
            for tag, key in (("SK", "indicator_SK_drop"), ("gap", "indicator_gap_drop")):
                ind = d.get(key)
                row[f"indicator_{tag}_drop_strain"] = ind["strain"] if ind else nan
                row[f"indicator_{tag}_drop_resolution"] = ind["resolution"] if ind else nan
            for k in crit:
                crit[k].append(row[k])
        paths.append(save_csv(out / "critical.csv", crit, meta))
        lds = self.lambda_dataset()
        if lds is not None:
            paths.append(save_netcdf(lds, out / "lambda.nc"))
            cols = {"method": [], "lambda": [], "strain_c": [], "uncertainty": []}
            sc, un = lds["strain_c"].values, lds["uncertainty"].values
            for a, n in enumerate(lds["solver"].values):
                for j, x in enumerate(lds["lambda"].values):
                    cols["method"].append(str(n))
                    cols["lambda"].append(float(x))
                    cols["strain_c"].append(float(sc[a, j]))
                    cols["uncertainty"].append(float(un[a, j]))
            paths.append(save_csv(out / "lambda.csv", cols, {**meta, "param": lds.attrs["param"]}))
        if self.melting:
            cols = {k: [] for k in ("method", "strain", "mu", "T_melt", "error_T_melt", "first_order", "jump",
                                    "converged", "T_measure", "survives_at_T_measure")}
            for n, r in self.melting.items():
                surv = r.survives(self.T_measure) if self.T_measure is not None else np.zeros(len(self.strains), bool)
                err = r.errors.get("T_melt", np.full(len(self.strains), np.nan))
                for i, s in enumerate(self.strains):
                    for k, v in (("method", n), ("strain", float(s)), ("mu", float(r.mu[i])),
                                 ("T_melt", float(r.T_melt[i])), ("error_T_melt", float(err[i])),
                                 ("first_order", bool(r.first_order[i])), ("jump", float(r.jump[i])),
                                 ("converged", bool(r.converged[i])),
                                 ("T_measure", self.T_measure if self.T_measure is not None else nan),
                                 ("survives_at_T_measure", bool(surv[i]))):
                        cols[k].append(v)
            paths.append(save_csv(out / "melting.csv", cols, meta))
        paths.append(atomic_write_text(out / "summary.json", dumps_json(self.summary()) + "\n"))
        if figures:
            from .plots import save_all

            paths += save_all(self, out, formats=formats)
        paths.append(mark_complete(out, paths, **self.provenance(fraction=self.fraction)))
        return paths


def _has_melting(spec) -> bool:
    """The method has a finite-temperature mode and implements the strain_melting hook."""
    from ..methods import Method

    return (spec.capabilities.temperature and type(spec.impl).strain_melting is not Method.strain_melting
            and not getattr(spec.impl, "MELTING_UNAVAILABLE", None))


def _var(key: str) -> str:
    """A NetCDF-safe variable name for an order-parameter key (``S(K)/N`` -> ``SK_per_site``)."""
    return {"S(K)/N": "SK_per_site"}.get(key, "".join(c if c.isalnum() or c == "_" else "_" for c in key))


def strain_sweep(table: StrainTable, methods="mf", strains=None, n_strain: int | None = None, mu=None,
                 n_mu: int = 121, fraction="1/3", lambdas=None, param: str = "V", xtol: float | None = None,
                 width_floor: float = 1e-3, thresholds=Thresholds(), ed_thresholds=None, melting: bool = False,
                 T_measure: float | None = None, T_max: float | None = None, executor=None, checkpoint=None,
                 progress: bool = False, **locate_kw) -> StrainSweep:
    """Sweep the strain path for every method (one path: each method's strain hooks).

    Parameters
    ----------
    table : StrainTable
    methods : str or list
        ``"mf,cmf:tri12,ed:tri21"`` or a list of names / :class:`MethodSpec`. Finite-lattice
        methods (ed) give the finite-cluster step and S(K)/N per strain (no critical strain,
        not in the band).
    strains : array, optional
        Strain path (default :func:`~phasemap.strain.critical.coarse_strains`).
    mu : array, optional
        Common absolute chemical-potential grid of the grand-canonical maps (default ``n_mu``
        points over the union of the default windows along the path).
    lambdas : array or str, optional
        Also scan the critical strain versus the scale factor of ``param`` (sharp methods).
    melting : bool
        Also compute the solid's melting temperature at every strain for each method with a
        finite-temperature mode (:meth:`~phasemap.methods.Method.strain_melting`; implied by
        ``T_measure``). Methods without one get a note.
    T_measure : float, optional
        The measurement temperature (table unit), drawn across the T_melt(strain) figure.
    T_max : float, optional
        Top of the melting search (default max V).
    executor : Executor or str, optional
        Where the chunks run (:func:`phasemap.executor.run_chunks`; default serial; ``"auto"``:
        local processes on all cores when the first chunk says the sweep is long). Chunks: one
        per method and strain (``Method.strain_local``; one per method otherwise), costliest
        method first (``Method.strain_cost``), then per method the independent pieces of its
        critical strain (``Method.strain_critical_parts``: cmf-scaled's per-cluster root searches)
        and one chunk for its critical strain, lambda scan and melting, started as soon as what they
        need is done (beside the other methods' chunks). The result is the same for every executor.
    checkpoint : phasemap.store.ChunkStore, optional
        Finished chunks are saved as they arrive and taken from it on a rerun
        (:func:`sweep_checkpoint_params` is what its ``params`` must hold).
    progress : bool
        One progress bar for the whole sweep.

    Returns
    -------
    StrainSweep
    """
    from ..executor import Executor, get_executor, run_chunks
    from ..store import unpack_object

    specs, lab, S, models, melting, T_measure = check_sweep(table, methods, strains, n_strain, fraction, melting,
                                                            T_measure)
    f = parse_fraction(lab)[1]
    if mu is None:
        w = np.array([default_window(m, f) for m in models])
        mu = np.linspace(w[:, 0].min(), w[:, 1].max(), int(n_mu))
    mu = np.asarray(mu, float)
    kw = dict(width_floor=width_floor, thresholds=thresholds, ed_thresholds=ed_thresholds, **locate_kw)
    # stage 1: the plateau record of every method at every strain
    steps, where = {}, {}  # key -> task; key -> (method index, strain slice)
    for a, sp in enumerate(specs):
        rows = [slice(i, i + 1) for i in range(len(S))] if sp.impl.strain_local else [slice(0, len(S))]
        for sl in rows:
            k = len(steps)
            inner = str(checkpoint.inner() / f"step{k}") if hasattr(checkpoint, "inner") else None
            where[k] = (a, sl)
            steps[k] = (sp, models[sl], lab, mu, kw, inner)
    weights = {k: sl.stop - sl.start for k, (a, sl) in where.items()}
    finish_keys = {a: len(steps) + a for a in range(len(specs))}
    weights.update({k: len(S) for k in finish_keys.values()})
    bar = None
    if progress:
        from tqdm.auto import tqdm

        bar = tqdm(total=sum(weights.values()), desc="strain sweep", unit="strain", leave=False)
    # one executor for both stages ("auto": decided on the first chunk computed, the pool then kept)
    ex = executor if isinstance(executor, Executor) else get_executor(executor)
    # costliest chunks first (keys keep the path order, so checkpoints are read the same): the
    # workers' tail is short, and "auto" times a representative chunk
    cost = {a: sp.impl.strain_cost(sp, models) for a, sp in enumerate(specs)}
    order = sorted(steps, key=lambda k: (-cost[where[k][0]], k))
    recs, secs, left = {}, {}, {a: {k for k in steps if where[k][0] == a} for a in range(len(specs))}
    parts, pieces = {}, {}  # stage-1 results; key of a critical-strain piece -> (method index, piece)
    got_pieces = {a: {} for a in range(len(specs))}

    def finish_task(a, solved=None):
        sp = specs[a]
        return {finish_keys[a]: ("finish", {"spec": sp, "table": table, "strains": S, "record": recs[sp.name],
                                            "fraction": lab, "xtol": xtol, "kw": kw, "lambdas": lambdas, "param": param,
                                            "n_strain": n_strain, "melting": melting, "T_max": T_max,
                                            "parts": solved})}

    def unlock(key, part):
        # stage 2 of a method as soon as its last stage-1 chunk is in, beside the other methods' stage-1
        # chunks: first the independent pieces of its critical strain (Method.strain_critical_parts, one
        # chunk each), then its critical strain from the whole path, lambda scan and melting
        if key in pieces:
            a, piece = pieces[key]
            d = unpack_object(part)
            got_pieces[a][piece] = d["result"]
            secs[specs[a].name] += d["seconds"]
            want = [p for k, (b, p) in pieces.items() if b == a]
            return finish_task(a, {p: got_pieces[a][p] for p in want}) if len(got_pieces[a]) == len(want) else {}
        if key not in where:
            return {}
        a = where[key][0]
        parts[key] = part
        left[a].discard(key)
        if left[a]:
            return {}
        sp = specs[a]
        got = [unpack_object(parts[k]) for k in steps if where[k][0] == a]
        recs[sp.name] = _concat([g["record"] for g in got])
        secs[sp.name] = float(sum(g["seconds"] for g in got))
        todo = sp.impl.strain_critical_parts(sp, table, S, recs[sp.name], lab, xtol=xtol, **kw)
        if not todo:
            return finish_task(a)
        if len(todo) > 64:
            raise ValueError(f"{sp.name}: more than 64 parts of the critical strain")
        new = {}
        for j, piece in enumerate(todo):  # keys after every step and finish key, 64 per method
            k = len(steps) + len(specs) + 64 * a + j
            pieces[k] = (a, piece)
            new[k] = ("part", {"spec": sp, "table": table, "strains": S, "record": recs[sp.name], "fraction": lab,
                               "piece": piece, "kw": dict(kw, xtol=xtol)})
        return new

    try:
        done = run_chunks(sweep_chunk, {k: ("step", steps[k]) for k in order}, ex, store=checkpoint, weights=weights,
                          bar=bar, more=unlock)
    finally:
        if bar is not None:
            bar.close()
        if ex is not executor:
            ex.close()
    crit, lams, notes, melts = {}, {}, [], {}
    for a, sp in enumerate(specs):
        d = unpack_object(done[finish_keys[a]])
        crit[sp.name] = d["critical"]
        if "lambda" in d:
            lams[sp.name] = d["lambda"]
        if "melting" in d:
            melts[sp.name] = d["melting"]
        notes += d["notes"]
        secs[sp.name] += d["seconds"].pop(sp.name)
        secs.update(d["seconds"])
    sharp = [crit[sp.name] for sp in specs if recs[sp.name].sharp]
    band = critical_band(sharp)
    if not sharp:
        band["text"] = "no method with sharp plateau edges (mf, cmf) in the sweep, so no critical-strain band"
    excluded = [sp.name for sp in specs if not recs[sp.name].sharp]
    if excluded:
        band["text"] += (f"; {', '.join(excluded)} not in the band (finite cluster: no sharp "
                         "transition; steepest-drop strains are indicators only)")
        band["excluded"] = excluded
    return StrainSweep(table=table, methods=specs, fraction=lab, strains=S, mu=mu, records=recs, critical=crit,
                       band=band, lambdas=lams, seconds=secs, notes=notes, melting=melts, T_measure=T_measure)


def check_sweep(table: StrainTable, methods="mf", strains=None, n_strain: int | None = None, fraction="1/3",
                melting: bool = False, T_measure: float | None = None):
    """Refuse what a sweep cannot do before anything is solved or written (strains in the table,
    each method's cluster, filling, bonds, memory guard, melting). Returns ``(specs, fraction
    label, strains, models, melting, T_measure)``.

    Raises
    ------
    ConfigError
        Naming the option or method and the allowed values.
    """
    specs = parse_specs(methods)
    lab, _ = parse_fraction(fraction)
    S = coarse_strains(table, n_strain) if strains is None else np.asarray(strains, float)
    table.check_range(S)
    models = table.models(S)
    T_measure = check_T_measure(T_measure)
    melting = melting or T_measure is not None
    for sp in specs:
        sp.impl.check_setup(sp, models, lab)
        if melting and _has_melting(sp):
            sp.impl.check_melting(sp, models)
    return specs, lab, S, models, melting, T_measure


def sweep_checkpoint_params(table: StrainTable, methods, fraction, **settings) -> dict:
    """Everything that fixes a sweep's chunks, for :class:`phasemap.store.ChunkStore`: the table
    row by row (a changed cell is named ``table.rows.strain=0.04.V_a``), the method specs with
    their options, the filling and every other setting (plain values), the package version."""
    from .. import __version__

    cols = table.columns()
    rows = {f"strain={s:g}": {k: float(v[i]) for k, v in cols.items()} for i, s in enumerate(table.strain)}
    specs = parse_specs(methods)
    return {"table": {"unit": table.unit, "lattice": table.lattice, "hardcore": bool(table.hardcore), "rows": rows},
            "methods": {sp.name: {"method": sp.method, "options": dict(sp.options)} for sp in specs},
            "fraction": str(fraction), "settings": settings, "version": __version__}


def _concat(parts: list):
    """Join the records of consecutive strain chunks into the record of the whole path: arrays
    and lists (one entry per model, leading axis) are concatenated, dicts and dataclasses
    joined field by field, everything else (method, cluster, thresholds) taken from the first."""
    a = parts[0]
    if len(parts) == 1:
        return a
    if dataclasses.is_dataclass(a) and not isinstance(a, type):
        return dataclasses.replace(a, **{f.name: _concat([getattr(p, f.name) for p in parts])
                                         for f in dataclasses.fields(a) if f.init})
    if isinstance(a, dict):
        keys = list(a)
        for p in parts[1:]:
            if list(p) != keys:
                raise ValueError(f"strain sweep: chunks disagree on keys {keys} vs {list(p)}")
        return {k: _concat([p[k] for p in parts]) for k in keys}
    if isinstance(a, np.ndarray) and a.ndim >= 1:
        return np.concatenate(parts, axis=0)
    if isinstance(a, list):
        return [x for p in parts for x in p]
    return a


def sweep_chunk(task) -> dict:
    """A sweep chunk ``(stage, task)``: ``"step"`` (:func:`sweep_step_chunk`), ``"part"``
    (:func:`sweep_part_chunk`) or ``"finish"`` (:func:`sweep_finish_chunk`)."""
    stage, task = task
    return {"step": sweep_step_chunk, "part": sweep_part_chunk, "finish": sweep_finish_chunk}[stage](task)


def sweep_part_chunk(task: dict) -> dict:
    """One piece of a method's critical strain (:meth:`~phasemap.methods.Method.strain_critical_part`)."""
    from ..store import pack_object
    from .engine import clear_cache

    clear_cache()
    t0 = time.perf_counter()
    sp = task["spec"]
    r = sp.impl.strain_critical_part(sp, task["table"], task["strains"], task["record"], task["fraction"],
                                     task["piece"], **task["kw"])
    return pack_object({"result": r, "seconds": time.perf_counter() - t0})


def sweep_step_chunk(task) -> dict:
    """Chunk of stage 1: ``(spec, models, fraction, mu, kw, inner)`` -> the packed ``StepRecord``
    and its seconds (``inner``: folder for the chain checkpoints of Monte Carlo runs in the step) (the evaluation cache is cleared first: the result depends on the task
    alone, in any process, resumed or not)."""
    from .engine import clear_cache

    from ..store import pack_object

    from ..qmc.scaling import chain_checkpoints

    spec, models, lab, mu, kw, inner = task
    clear_cache()
    t0 = time.perf_counter()
    with chain_checkpoints(inner):  # Monte Carlo runs inside the step resume from their chains' files
        rec = spec.impl.strain_step(spec, models, lab, mu=mu, keep_grid=True, **kw)
    return pack_object({"record": rec, "seconds": time.perf_counter() - t0})


def sweep_finish_chunk(task: dict) -> dict:
    """Chunk of stage 2 (one method): critical strain from the whole path's record, the lambda
    scan (sharp methods) and the melting temperatures (finite-temperature methods)."""
    from ..store import pack_object
    from .engine import clear_cache

    clear_cache()
    sp, table, S, rec, lab, kw = (task[k] for k in ("spec", "table", "strains", "record", "fraction", "kw"))
    out = {"seconds": {}, "notes": []}
    t0 = time.perf_counter()
    solved = {"parts": task["parts"]} if task.get("parts") else {}  # pieces computed by their own chunks
    out["critical"] = sp.impl.strain_critical(sp, table, S, rec, lab, xtol=task["xtol"], **solved, **kw)
    out["seconds"][sp.name] = time.perf_counter() - t0
    if task["lambdas"] is not None:
        if rec.sharp and sp.capabilities.grand_canonical:
            t1 = time.perf_counter()
            locate = {k: v for k, v in kw.items() if k not in ("width_floor", "thresholds", "ed_thresholds")}
            out["lambda"] = critical_vs_lambda(table, sp, task["lambdas"], task["param"], lab, n_strain=task["n_strain"],
                                               width_floor=kw["width_floor"], thresholds=kw["thresholds"], **locate)
            out["seconds"][f"{sp.name} lambda"] = time.perf_counter() - t1
        elif not rec.sharp:
            out["notes"].append(f"lambda scan not done for {sp.name}: a finite lattice has no sharp critical strain")
        else:
            out["notes"].append(f"lambda scan not done for {sp.name}: it needs a grand-canonical batch solver "
                                "(mf, cmf:<cluster>)")
    if task["melting"]:
        if _has_melting(sp):
            t1 = time.perf_counter()
            out["melting"] = sp.impl.strain_melting(sp, table.models(S), rec, lab, T_max=task["T_max"],
                                                    thresholds=kw["thresholds"])
            out["seconds"][f"{sp.name} melting"] = time.perf_counter() - t1
        else:
            why = ("has no finite-temperature mode" if not sp.capabilities.temperature else
                   getattr(sp.impl, "MELTING_UNAVAILABLE", None) or "does not provide Method.strain_melting yet")
            out["notes"].append(f"no melting temperature for {sp.name}: {sp.impl.title} {why}")
    return pack_object(out)
