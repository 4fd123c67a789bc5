"""Shared behaviour of grand-canonical mean-field-type methods (site-decoupled and cluster).

A grand-canonical method solves many points x seeds at once over a
:class:`~phasemap.params.ParamBatch`; one point is a batch of one (plus two neighbours in mu for
the compressibility), and the strain workflow locates plateaus with batched searches in mu
(:func:`phasemap.strain.engine.locate_plateaus`).
"""

from __future__ import annotations

import numpy as np

from ..classify import Thresholds
from ..model import ConfigError, Model, check_keys
from ..params import ParamBatch
from . import Method

__all__ = ["GrandCanonicalMethod"]


def _thresholds(th) -> Thresholds:
    if isinstance(th, dict):
        check_keys("thresholds", th, Thresholds.__dataclass_fields__)
        th = Thresholds(**th)
    if not isinstance(th, Thresholds):
        raise ConfigError(f"thresholds: expected phasemap.classify.Thresholds or a dict, got {type(th).__name__}")
    return th


class GrandCanonicalMethod(Method):
    """Base of ``mf`` and ``cmf``: batched solve, point solve with dn/dmu, plateau search."""

    def site_orbits(self, result):
        """Groups of sites that must agree for a uniform state (None: all sites of a periodic cell)."""
        return None

    def unstable_insulators(self, result, phase, k):
        """Points whose insulating winner is linearly unstable (None: no such test for this method)."""
        return None

    # -- strain workflow ----------------------------------------------------------------------
    _LOCATE = ("mu", "n_mu", "tol", "width_floor", "filling_tol", "jump_tol", "sections", "thresholds", "keep_grid",
               "grid_every")

    #: search points per bracket and step of the plateau-edge search (``locate_plateaus``
    #: ``sections``). A batch of many points costs little more than one for site-decoupled mean
    #: field; methods whose cost grows with the points take fewer per step.
    edge_sections = 31
    #: batched multi-section points before brentq on the critical strain (0: brentq only)
    root_sections = 15
    #: a cheaper method whose plateau hints where to look (``locate_plateaus`` ``hint``) when
    #: no full chemical-potential map is kept; None: no hint
    hint_method: str | None = None
    #: grid points kept on either side of the hint in the critical strain's plateau searches (the
    #: hint there is the method's own edges at the nearest solved strains; a search whose
    #: sub-grid does not bracket falls back to the full grid, so the pad changes cost, not answers)
    root_hint_pad = 12
    #: the sweep's (strain, mu) map solves every ``map_every``-th chemical potential of the common
    #: grid (and the last); the plateau edges are then refined from the wider brackets to the same
    #: tolerance, only the kept map is coarser
    map_every = 1

    def strain_step(self, spec, models, fraction, **kw):
        from ..strain.engine import locate_plateaus

        kw = {k: v for k, v in kw.items() if k in self._LOCATE or k in ("hint", "hint_pad")}
        if self.hint_method and kw.get("mu") is None and not kw.get("keep_grid") and kw.get("hint") is None:
            h = locate_plateaus(models, fraction, self.hint_method,
                                **{k: v for k, v in kw.items() if k not in ("sections",)})
            kw["hint"] = np.stack([h.mu_lo, h.mu_hi], axis=1)
        if kw.get("keep_grid"):
            kw.setdefault("grid_every", self.map_every)
        return locate_plateaus(models, fraction, spec, **kw).to_record(spec.name)

    def strain_critical(self, spec, table, strains, record, fraction, xtol=None, width_floor=1e-3, **kw):
        import numpy as np

        from ..strain.critical import critical_strain

        models = table.models(strains)
        floor = np.array([width_floor * m.scale for m in models])
        r = record.detail
        H = np.where(r.reached, r.width, 0.0) - floor
        kw = {k: v for k, v in kw.items() if k in self._LOCATE and k not in ("mu", "keep_grid", "grid_every")}
        return critical_strain(table, spec, fraction, "width", coarse=(np.asarray(strains, float), H, r), xtol=xtol,
                               width_floor=width_floor, sections=self.root_sections, **kw)

    def strain_melting(self, spec, models, record, fraction, T_max=None, n_T=10, tol=1e-3, thresholds=None, **kw):
        from ..strain.melting import mean_field_melting

        self.check_melting(spec, models)
        return mean_field_melting(spec, models, record, T_max=T_max, n_T=n_T, tol=tol, thresholds=thresholds)

    def strain_point(self, spec, model, record, mu, fraction, melt=True, melt_max=10.0, thresholds=None,
                     width_floor=1e-3, jump_tol=1e-3, n_mu=121, **kw):
        from ..strain.analysis import grand_canonical_report

        return grand_canonical_report(spec, model, record.detail, mu, fraction, melt=melt, melt_max=melt_max,
                                      thresholds=thresholds or Thresholds(), width_floor=width_floor,
                                      jump_tol=jump_tol, n_mu=n_mu)

    def solve_point(self, model: Model, **options):
        from ..api import solutions_from_batch

        th = _thresholds(options.pop("thresholds", Thresholds()))
        compress = options.pop("compressibility", True)
        dmu = options.pop("dmu", 1e-4 * model.scale)
        models = [model] + ([model.replace(mu=model.mu - dmu), model.replace(mu=model.mu + dmu)] if compress else [])
        res = self.batch_solver(options)(ParamBatch.from_models(models))
        sols = solutions_from_batch(res, th, method=self.short_name(options), models=models)
        sol = sols[0]
        if compress:
            if all(s.converged for s in sols):
                sol.compressibility = (sols[2].filling - sols[1].filling) / (2 * dmu)
            else:
                sol.flags.append("compressibility-unavailable")
        return sol
