"""Strain sweep for several methods: plateau edges, (strain, mu) phase map, critical strain, lambda scan.

:func:`strain_sweep` solves, per method, every strain of the path on one common chemical-
potential grid in one batched call (the phase map), locates the plateau edges at every
strain, and polishes the critical strain with brentq from those samples (so the sweep's
critical strain *is* the root-finding answer). ED methods (``ed:<cluster>``, canonical) give
the finite-cluster step mu-(N), mu+(N), its charge gap and S(K)/N at N = f L at every strain
of the path (:mod:`phasemap.strain.ed_method`); they have no sharp critical strain, only a
labelled steepest-drop indicator, and are never part of the band. :meth:`StrainSweep.save` writes labelled
data (NetCDF + CSV with metadata + JSON) atomically; :mod:`phasemap.strain.plots` draws it.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import xarray as xr

from ..classify import Thresholds
from .analysis import CAUTION
from .ed_method import ED_CAUTION
from .critical import coarse_strains, critical_band, critical_strain
from ..methods import parse_specs as parse_methods
from .engine import default_window, fixed_filling, locate_plateaus, parse_fraction
from .sensitivity import critical_vs_lambda
from .table import StrainTable

__all__ = ["StrainSweep", "strain_sweep"]


@dataclass
class StrainSweep:
    """Everything a strain sweep computed (see :func:`strain_sweep`)."""

    table: StrainTable
    methods: list
    fraction: str
    strains: np.ndarray
    mu: np.ndarray
    plateaus: dict  # method name -> PlateauResult (with grid)
    critical: dict  # method name -> CriticalResult
    band: dict
    lambdas: dict = field(default_factory=dict)  # method name -> LambdaScan
    seconds: dict = field(default_factory=dict)
    ed_methods: list = field(default_factory=list)  # MethodSpec of the ED methods
    ed: dict = field(default_factory=dict)  # ED method name -> EDPlateau
    ed_critical: dict = field(default_factory=dict)  # ED method name -> indicator dict (no sharp transition)
    notes: list = field(default_factory=list)

    @property
    def names(self) -> list[str]:
        """Grand-canonical methods (mf, cmf:<cluster>)."""
        return [m.name for m in self.methods]

    @property
    def ed_names(self) -> list[str]:
        return [m.name for m in self.ed_methods]

    @property
    def all_names(self) -> list[str]:
        return self.names + self.ed_names

    def vref(self) -> np.ndarray:
        return np.abs(self.table.params(self.strains)["V"]).max(1)

    def ed_table(self) -> dict:
        """Long-format ED columns: one row per (ED method, strain)."""
        cols = {k: [] for k in ("method", "cluster", "n_sites", "N", "strain", "t_over_V", "mu_minus", "mu_plus",
                                "gap", "mu_minus_over_V", "mu_plus_over_V", "gap_over_V", "SK_per_site",
                                "SK_above_indicator", "sq_max", "q_max", "residual")}
        ratio = self.table.ratio(self.strains)
        vref = self.vref()
        for name in self.ed_names:
            e = self.ed[name]
            for i, s in enumerate(self.strains):
                for k, v in (("method", name), ("cluster", e.cluster), ("n_sites", e.n_sites), ("N", e.N),
                             ("strain", float(s)), ("t_over_V", float(ratio[i])),
                             ("mu_minus", float(e.mu_minus[i])), ("mu_plus", float(e.mu_plus[i])),
                             ("gap", float(e.gap[i])), ("mu_minus_over_V", float(e.mu_minus[i] / vref[i])),
                             ("mu_plus_over_V", float(e.mu_plus[i] / vref[i])), ("gap_over_V", float(e.gap[i] / vref[i])),
                             ("SK_per_site", float(e.sk[i])), ("SK_above_indicator", bool(e.ordered[i])),
                             ("sq_max", float(e.sq_max[i])), ("q_max", str(e.q_max[i])),
                             ("residual", float(e.residual[i]))):
                    cols[k].append(v)
        return cols

    def plateau_table(self) -> dict:
        """Long-format columns: one row per (method, strain)."""
        cols = {k: [] for k in ("method", "strain", "t_over_V", "mu_lo", "mu_hi", "width", "width_over_V",
                                "plateau", "fixed_filling_state", "fixed_filling_label", "lower_edge_jump",
                                "upper_edge_jump", "converged")}
        ratio = self.table.ratio(self.strains)
        vref = np.abs(self.table.params(self.strains)["V"]).max(1)
        for name in self.names:
            r = self.plateaus[name]
            for i, s in enumerate(self.strains):
                ff = fixed_filling(r, i)
                cols["method"].append(name)
                cols["strain"].append(float(s))
                cols["t_over_V"].append(float(ratio[i]))
                cols["mu_lo"].append(float(r.mu_lo[i]))
                cols["mu_hi"].append(float(r.mu_hi[i]))
                cols["width"].append(float(r.width[i]))
                cols["width_over_V"].append(float(r.width[i] / vref[i]) if vref[i] > 0 else float("nan"))
                cols["plateau"].append(bool(r.exists[i]))
                cols["fixed_filling_state"].append(ff.get("state", ""))
                cols["fixed_filling_label"].append(ff.get("label", ""))
                cols["lower_edge_jump"].append(float(r.jump_lo[i]))
                cols["upper_edge_jump"].append(float(r.jump_hi[i]))
                cols["converged"].append(bool(r.ok(i)))
        return cols

    def metadata(self) -> dict:
        from .. import __version__

        return {
            "title": f"phasemap strain sweep, {self.fraction} plateau",
            "table": self.table.path or "", "table_description": self.table.meta.get("description", ""),
            "table_invented": self.table.meta.get("invented", ""), "energy_unit": self.table.unit,
            "lattice": self.table.lattice, "hardcore": int(self.table.hardcore), "fraction": self.fraction,
            "methods": json.dumps(self.names), "critical": json.dumps({k: v.to_dict() for k, v in self.critical.items()}),
            "band": json.dumps(self.band), "caution": CAUTION, "phasemap_version": __version__,
            "ed_methods": json.dumps(self.ed_names), "ed_critical": json.dumps(self.ed_critical),
            "ed_caution": ED_CAUTION if self.ed_names else "",
            "table_rows": json.dumps(self.table.to_dict()),
        }

    def to_dataset(self) -> xr.Dataset:
        """Labelled arrays: (method, strain, mu) map and (method, strain) plateau data."""
        from ..api import phase_codes

        codes = phase_codes()
        names = self.names
        shp = (len(names), len(self.strains), len(self.mu))
        fill = np.full(shp, np.nan)
        sq = np.full(shp, np.nan)
        cond = np.full(shp, np.nan)
        conv = np.zeros(shp, bool)
        code = np.full(shp, -1, np.int8)
        label = np.empty(shp, dtype=object)
        per = {k: np.full(shp[:2], np.nan) for k in ("mu_lo", "mu_hi", "width", "jump_lo", "jump_hi")}
        exists = np.zeros(shp[:2], bool)
        for a, n in enumerate(names):
            r = self.plateaus[n]
            g = r.grid
            fill[a], sq[a], cond[a] = g["filling"], g["sq_max"], g["condensate_max"]
            conv[a] = g["converged"]
            code[a] = np.vectorize(lambda x: codes.get(x, -1))(g["phase"])
            label[a] = g["label"]
            for k in per:
                per[k][a] = getattr(r, k)
            exists[a] = r.exists
        p = self.table.params(self.strains)
        fams = list(self.table.families)
        u = self.table.unit
        gc = {
                "filling": (("solver", "strain", "mu"), fill, {"long_name": "filling per site"}),
                "sq_max": (("solver", "strain", "mu"), sq, {"long_name": "largest S(Q) at nonzero Q (solid order)"}),
                "condensate_max": (("solver", "strain", "mu"), cond, {"long_name": "max |<b>| (condensate)"}),
                "converged": (("solver", "strain", "mu"), conv),
                "phase_code": (("solver", "strain", "mu"), code,
                               {"flag_values": list(codes.values()), "flag_meanings": " ".join(codes)}),
                "label": (("solver", "strain", "mu"), label.astype(str)),
                "mu_lo": (("solver", "strain"), per["mu_lo"], {"units": u, "long_name": f"{self.fraction} plateau lower edge"}),
                "mu_hi": (("solver", "strain"), per["mu_hi"], {"units": u, "long_name": f"{self.fraction} plateau upper edge"}),
                "width": (("solver", "strain"), per["width"], {"units": u, "long_name": "plateau width"}),
                "jump_lo": (("solver", "strain"), per["jump_lo"], {"long_name": "filling jump at the lower edge"}),
                "jump_hi": (("solver", "strain"), per["jump_hi"], {"long_name": "filling jump at the upper edge"}),
                "plateau": (("solver", "strain"), exists),
        } if names else {}
        common = {
                "t": (("strain", "family"), p["t"], {"units": u, "long_name": "hopping (PCHIP)"}),
                "V": (("strain", "family"), p["V"], {"units": u, "long_name": "NN repulsion (PCHIP)"}),
                "V2": (("strain",), p["V2"], {"units": u}),
                "t_over_V": (("strain",), self.table.ratio(self.strains), {"long_name": "max t / max V"}),
        }
        coords = {"strain": self.strains, "mu": self.mu, "family": fams}
        if names:
            coords["solver"] = names
        ed = {}
        if self.ed_names:
            E = [self.ed[n] for n in self.ed_names]
            vref = self.vref()
            st = lambda f: np.array([f(e) for e in E], float)  # noqa: E731
            ed = {
                "ed_mu_minus": (("ed_solver", "strain"), st(lambda e: e.mu_minus),
                                {"units": u, "long_name": "ED canonical mu-(N) = E_c(N) - E_c(N-1), N = f L"}),
                "ed_mu_plus": (("ed_solver", "strain"), st(lambda e: e.mu_plus),
                               {"units": u, "long_name": "ED canonical mu+(N) = E_c(N+1) - E_c(N), N = f L"}),
                "ed_gap": (("ed_solver", "strain"), st(lambda e: e.gap),
                           {"units": u, "long_name": "ED charge gap mu+ - mu- (finite cluster: never exactly 0)"}),
                "ed_gap_over_V": (("ed_solver", "strain"), st(lambda e: e.gap / vref), {"long_name": "ED gap / max V"}),
                "ed_SK_per_site": (("ed_solver", "strain"), st(lambda e: e.sk),
                                   {"long_name": "ED S(K)/N = <|rho_K|^2> at N = f L (perfect 1/3 solid: 1/9)",
                                    "indicator_threshold": E[0].threshold}),
                "ed_sq_max": (("ed_solver", "strain"), st(lambda e: e.sq_max), {"long_name": "ED max S(Q)/L, Q != 0"}),
                "ed_E_canonical": (("ed_solver", "strain", "dN"), st(lambda e: e.e_canonical),
                                   {"units": u, "long_name": "E0 + mu N at N-1, N, N+1"}),
            }
            coords.update({"ed_solver": self.ed_names, "dN": [-1, 0, 1],
                           "ed_cluster": ("ed_solver", [e.cluster for e in E]),
                           "ed_n_sites": ("ed_solver", [e.n_sites for e in E]),
                           "ed_N": ("ed_solver", [e.N for e in E])})
        ds = xr.Dataset({**gc, **common, **ed}, coords=coords, attrs=self.metadata())
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
                          attrs={"param": self.lambdas[names[0]].param,
                                 "scans": json.dumps({n: self.lambdas[n].to_dict() for n in names})})

    def summary(self) -> dict:
        """Plain-JSON summary (critical strains, band, lambda scans, timings)."""
        return {
            "table": self.table.path, "unit": self.table.unit, "fraction": self.fraction, "methods": self.all_names,
            "critical": {**{k: v.to_dict() for k, v in self.critical.items()}, **self.ed_critical},
            "band": self.band,
            "lambda": {k: v.to_dict() for k, v in self.lambdas.items()},
            "ed_methods": self.ed_names, "notes": list(self.notes),
            "seconds": self.seconds, "caution": CAUTION, **({"ed_caution": ED_CAUTION} if self.ed_names else {}),
        }

    def text(self) -> str:
        lines = [f"strain sweep of {self.table.path or 'table'} ({self.table.describe()})"]
        for n in self.names:
            lines.append("  " + self.critical[n].summary())
            if n in self.lambdas:
                lines.append("  " + self.lambdas[n].summary())
        for n in self.ed_names:
            lines.append("  " + self.ed_critical[n]["text"])
        lines.append("  " + self.band["text"])
        for x in self.notes:
            lines.append(f"  note: {x}")
        lines.append(f"  caution: {CAUTION}")
        if self.ed_names:
            lines.append(f"  caution (ED): {ED_CAUTION}")
        return "\n".join(lines)

    def save(self, outdir, figures: bool = True, formats=("png", "pdf")) -> list[Path]:
        """Write sweep.nc, plateau.csv, critical.csv, summary.json (+ lambda.csv/nc, figures) atomically."""
        from ..store import atomic_write_text, save_csv, save_netcdf
        from ..store import dumps_json

        out = Path(outdir)
        paths = [save_netcdf(self.to_dataset(), out / "sweep.nc")]
        meta = {k: v for k, v in self.metadata().items() if k not in ("critical", "table_rows", "ed_critical")}
        if self.names:
            paths.append(save_csv(out / "plateau.csv", self.plateau_table(), meta))
        if self.ed_names:
            paths.append(save_csv(out / "ed_plateau.csv", self.ed_table(), meta))
        crit = {k: [] for k in ("method", "status", "strain_c", "xtol", "interpolation_uncertainty", "t_over_V_c",
                                "closest_strain", "closest_width", "band_lo", "band_hi", "in_band",
                                "indicator_SK_drop_strain", "indicator_SK_drop_resolution",
                                "indicator_gap_drop_strain", "indicator_gap_drop_resolution")}
        nan = float("nan")
        for n in self.names:
            c = self.critical[n]
            crit["method"].append(n)
            crit["status"].append(c.status)
            crit["strain_c"].append(c.strain_c if c.strain_c is not None else float("nan"))
            crit["xtol"].append(c.xtol)
            crit["interpolation_uncertainty"].append(c.interpolation_uncertainty or float("nan"))
            crit["t_over_V_c"].append(c.t_over_V_c if c.t_over_V_c is not None else float("nan"))
            crit["closest_strain"].append(c.closest["strain"])
            crit["closest_width"].append(c.closest["value"])
            crit["band_lo"].append(self.band["lo"] if self.band["lo"] is not None else float("nan"))
            crit["band_hi"].append(self.band["hi"] if self.band["hi"] is not None else float("nan"))
            crit["in_band"].append(c.strain_c is not None)
            for k in ("indicator_SK_drop_strain", "indicator_SK_drop_resolution", "indicator_gap_drop_strain",
                      "indicator_gap_drop_resolution"):
                crit[k].append(nan)
        for n in self.ed_names:
            c = self.ed_critical[n]
            row = {"method": n, "status": c["status"], "strain_c": nan, "xtol": nan,
                   "interpolation_uncertainty": nan, "t_over_V_c": nan, "closest_strain": c["smallest_gap"]["strain"],
                   "closest_width": c["smallest_gap"]["gap"],
                   "band_lo": self.band["lo"] if self.band["lo"] is not None else nan,
                   "band_hi": self.band["hi"] if self.band["hi"] is not None else nan, "in_band": False}
            for tag, key in (("SK", "indicator_SK_drop"), ("gap", "indicator_gap_drop")):
                d = c[key]
                row[f"indicator_{tag}_drop_strain"] = d["strain"] if d else nan
                row[f"indicator_{tag}_drop_resolution"] = d["resolution"] if d else nan
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
        paths.append(atomic_write_text(out / "summary.json", dumps_json(self.summary()) + "\n"))
        if figures:
            from .plots import save_all

            paths += save_all(self, out, formats=formats)
        return paths


def strain_sweep(table: StrainTable, methods="mf", strains=None, n_strain: int | None = None, mu=None,
                 n_mu: int = 121, fraction="1/3", lambdas=None, param: str = "V", xtol: float | None = None,
                 width_floor: float = 1e-3, thresholds=Thresholds(), ed_thresholds=None, **locate_kw) -> StrainSweep:
    """Sweep the strain path for every method.

    Parameters
    ----------
    table : StrainTable
    methods : str or list
        ``"mf,cmf:tri12,ed:tri21"`` or a list of names / :class:`MethodSpec`. ED methods give the
        finite-cluster step and S(K)/N per strain (no critical strain, not in the band).
    strains : array, optional
        Strain path (default :func:`~phasemap.strain.critical.coarse_strains`).
    mu : array, optional
        Common absolute chemical-potential grid (default ``n_mu`` points over the union of
        the default windows along the path).
    lambdas : array or str, optional
        Also scan the critical strain versus the scale factor of ``param``.

    Returns
    -------
    StrainSweep
    """
    import time

    from .ed_method import ed_indicator, ed_plateaus, ed_setup

    specs = parse_methods(methods)
    lab, f = parse_fraction(fraction)
    S = coarse_strains(table, n_strain) if strains is None else np.asarray(strains, float)
    table.check_range(S)
    models = table.models(S)
    ed_specs = [sp for sp in specs if not sp.capabilities.grand_canonical]
    specs = [sp for sp in specs if sp.capabilities.grand_canonical]
    for sp in ed_specs:  # refuse before anything is solved (cluster, filling, bonds, memory guard)
        ed_setup(sp, models, lab)
    if mu is None:
        w = np.array([default_window(m, f) for m in models])
        mu = np.linspace(w[:, 0].min(), w[:, 1].max(), int(n_mu))
    mu = np.asarray(mu, float)
    plate, crit, lams, secs = {}, {}, {}, {}
    for sp in specs:
        t0 = time.perf_counter()
        r = locate_plateaus(models, lab, sp, mu=mu, keep_grid=True, width_floor=width_floor, thresholds=thresholds,
                            **locate_kw)
        floor = np.array([width_floor * m.scale for m in models])
        H = np.where(r.reached, r.width, 0.0) - floor
        plate[sp.name] = r
        crit[sp.name] = critical_strain(table, sp, lab, "width", coarse=(S, H, r), xtol=xtol,
                                        width_floor=width_floor, thresholds=thresholds, **locate_kw)
        secs[sp.name] = time.perf_counter() - t0
        if lambdas is not None:
            t1 = time.perf_counter()
            lams[sp.name] = critical_vs_lambda(table, sp, lambdas, param, lab, n_strain=n_strain,
                                               width_floor=width_floor, thresholds=thresholds, **locate_kw)
            secs[f"{sp.name} lambda"] = time.perf_counter() - t1
    ed, ed_crit, notes = {}, {}, []
    vref = np.abs(table.params(S)["V"]).max(1)
    for sp in ed_specs:
        t0 = time.perf_counter()
        e = ed_plateaus(models, sp, lab, thresholds=ed_thresholds)
        ed[sp.name] = e
        ed_crit[sp.name] = ed_indicator(S, e, vref, table.unit)
        secs[sp.name] = time.perf_counter() - t0
    if ed_specs and lambdas is not None:
        notes.append(f"lambda scan not done for {', '.join(sp.name for sp in ed_specs)}: ED has no sharp critical strain")
    band = critical_band(list(crit.values()))
    if not specs:
        band["text"] = "no grand-canonical method (mf, cmf) in the sweep, so no critical-strain band"
    if ed_specs:
        band["text"] += (f"; {', '.join(sp.name for sp in ed_specs)} not in the band (finite cluster: no sharp "
                         "transition; steepest-drop strains are indicators only)")
        band["excluded"] = [sp.name for sp in ed_specs]
    return StrainSweep(table=table, methods=specs, fraction=lab, strains=S, mu=mu, plateaus=plate, critical=crit,
                       band=band, lambdas=lams, seconds=secs, ed_methods=ed_specs, ed=ed,
                       ed_critical=ed_crit, notes=notes)
