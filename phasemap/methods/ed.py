"""``ed:<cluster>``: exact diagonalization of a periodic cluster at fixed particle number.

Canonical: it answers E0(N), mu+-(N), gaps, S(Q), stiffness on one finite torus (docs/ed.md).
References: A. Weiße and H. Fehske, Lect. Notes Phys. 739, 529 (2008); P. Weinberg and
M. Bukov, SciPost Phys. 7, 020 (2019) (QuSpin).
"""

from __future__ import annotations

from ..ed.solve import ED_OPTIONS, solve_ed
from . import Capabilities, Method


class ExactDiagonalization(Method):
    name = "ed"
    title = "exact diagonalization of a periodic cluster"
    capabilities = Capabilities(canonical=True, cluster=True)
    default_arg = "tri12"
    caution = ("exact diagonalization is canonical on a finite periodic cluster: mu-(N) and mu+(N) bound the "
               "cluster's step at N = f L and their difference is the charge gap, which never closes exactly on "
               "a finite cluster, so ED gives no sharp critical strain; only the scaling with cluster size "
               "(tri12, tri21, tri27, tri36) tells a plateau from a compressible phase, and S(K)/N above the indicator "
               "threshold is a finite-size indicator of density order, not a thermodynamic statement")

    def option_names(self):
        return ["cluster", "particles"] + sorted(ED_OPTIONS)

    def solve_point(self, model, **options):
        return solve_ed(model, **self.options(options))

    def check_setup(self, spec, models, fraction="1/3"):
        from ..strain.ed_method import ed_setup

        ed_setup(spec, models, fraction)

    def strain_step(self, spec, models, fraction, ed_thresholds=None, **kw):
        from ..strain.ed_method import ed_plateaus

        return ed_plateaus(models, spec, fraction, thresholds=ed_thresholds).to_record()

    def strain_critical(self, spec, table, strains, record, fraction, **kw):
        import numpy as np

        from ..strain.ed_method import ed_indicator
        from ..strain.record import IndicatorResult

        vref = np.abs(table.params(strains)["V"]).max(1)
        return IndicatorResult(spec.name, ed_indicator(strains, record.detail, vref, table.unit))

    def strain_point(self, spec, model, record, mu, fraction, **kw):
        from ..strain.ed_method import ed_report

        return ed_report(model, record.detail, mu)


METHOD = ExactDiagonalization()
