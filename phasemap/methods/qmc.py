"""``qmc:<cluster>`` / ``qmc:<L1>x<L2>``: stochastic series expansion quantum Monte Carlo.

Statistically exact thermal averages of hard-core bosons (t >= 0) on one periodic torus at
temperature ``T`` (or a ground state approached by doubling beta), with one-sigma errors in
``Solution.errors``. See docs/qmc.md and :func:`phasemap.qmc.run_qmc`.
References: A. W. Sandvik, PRB 59, R14157 (1999); O. F. Syljuåsen and A. W. Sandvik, PRE 66,
046701 (2002); F. Alet, S. Wessel and M. Troyer, PRE 71, 036706 (2005).
"""

from __future__ import annotations

import re
from dataclasses import dataclass, fields

from ..model import ConfigError
from . import Capabilities, Method

_SIZE = re.compile(r"^\s*(\d+)\s*[x×]\s*(\d+)\s*$")


@dataclass
class QMCOptions:
    """Options of :func:`phasemap.qmc.run_qmc` (same names and defaults) plus ``thresholds``
    (:class:`phasemap.qmc.classify.QMCThresholds` or dict) for the phase indicator."""

    cluster: object = None
    size: object = None
    T: float | None = None
    sweeps: int = 10000
    thermalization: int | None = None
    bins: int = 32
    seed: int = 0
    chains: int = 1
    checkpoint: str | None = None
    workers: int | None = None
    slices: int = 4
    epsilon: float | None = None
    checkpoint_interval: float = 5.0
    beta0: float | None = None
    beta_max: float | None = None
    replicas: int = 1
    mu_step: float | None = None
    T_hot: float | None = None
    mu_ladder: object = None
    T_ladder: object = None
    fixed_filling: float | None = None
    thresholds: object = None


class QuantumMonteCarlo(Method):
    name = "qmc"
    title = "quantum Monte Carlo (stochastic series expansion)"
    Options = QMCOptions
    strain_local = False  # one seed counter and "every" subsampling along the whole strain path
    capabilities = Capabilities(canonical=False, grand_canonical=False, temperature=True, error_bars=True,
                                cluster=True)
    default_arg = None  # solve_point falls back to tri12 (square: sq16) when neither cluster nor size is given
    caution = ("quantum Monte Carlo is statistically exact for one finite torus at one temperature; a phase needs "
               "S(K)/N and the stiffness extrapolated over several sizes, and low temperatures for ground-state claims")

    def parse_arg(self, arg):
        arg = (arg or "").strip()
        if not arg:
            return {}
        m = _SIZE.match(arg)
        if m:
            return {"size": (int(m.group(1)), int(m.group(2)))}
        if "+" in arg:  # "qmc:6+9+12": the L x L sizes of the strain workflow / finite-size scaling
            from ..strain.qmc_method import _sizes

            return {"sizes": _sizes(arg)}
        return {"cluster": arg}

    #: options used only by the strain workflow (phasemap.strain.qmc_method)
    STRAIN_ONLY = ("sizes", "T_over_V", "order_sweeps", "rounds", "span", "every", "refine", "retry")

    def option_names(self):
        return [f.name for f in fields(QMCOptions)] + list(self.STRAIN_ONLY)

    def options(self, options=None):
        from ..model import check_keys

        d = dict(options or {})
        check_keys("qmc options", d, self.option_names())
        return d

    def config_default_arg(self, model):
        return "tri12" if model.lattice == "triangular" else "sq16"

    def check_cluster(self, cluster, model):
        from ..ed.clusters import get_cluster

        if not (isinstance(cluster, str) and _SIZE.match(cluster)):
            get_cluster(cluster, model.lattice)

    def short_name(self, options):
        d = dict(options)
        if d.get("size") is not None:
            L1, L2 = d["size"]
            return f"qmc:{L1}x{L2}"
        c = d.get("cluster")
        return f"qmc:{c}" if isinstance(c, str) else "qmc"

    def spec_name(self, options):
        d = dict(options)
        sizes = d.pop("sizes", None)
        if sizes is None:
            return super().spec_name(d)
        return f"qmc:{'+'.join(str(L) for L in sizes)}" + "".join(f",{k}={v}" for k, v in sorted(d.items()))

    def solve_point(self, model, **options):
        from ..qmc import run_qmc

        d = self.options(options)
        strain_only = sorted(k for k in self.STRAIN_ONLY if d.get(k) is not None)
        if strain_only:
            raise ConfigError(f"qmc options {strain_only}: only for the strain workflow (strain-check/strain-sweep); "
                              "for one point use cluster=/size=, T=, sweeps=")
        d = {k: v for k, v in d.items() if k not in self.STRAIN_ONLY}
        th = d.pop("thresholds", None)
        if isinstance(d.get("cluster"), str) and _SIZE.match(d["cluster"]):
            d["size"] = self.parse_arg(d.pop("cluster"))["size"]
        if d.get("cluster") is None and d.get("size") is None:
            d["cluster"] = self.config_default_arg(model)
        try:
            res = run_qmc(model, **d)
        except TypeError as e:
            raise ConfigError(f"qmc options: {e}") from None
        return res.to_solution(th)


    # -- maps and filling curves (phasemap.scan.evaluate) ---------------------------------------
    def evaluate_points(self, batch, options=None, thresholds=None, executor=None, checkpoint=None,
                        progress=False):
        """Every point of ``batch`` as one QMC run (one chunk each: processes, Dask, checkpoint and
        resume mid-chain, :func:`phasemap.qmc.scaling.run_many`): flat arrays like
        ``phasemap.scan.evaluate`` plus ``error_<key>``, ``tau_<key>`` and ``decorrelated``.
        A point that is not decorrelated is phase ``unconverged`` (never classified)."""
        from ..qmc.maps import evaluate_points

        d = self.options(options)
        th = d.pop("thresholds", None)  # the mean-field Thresholds of a scan do not apply (QMCThresholds)
        return evaluate_points(self, batch, d, th, executor=executor, checkpoint=checkpoint, progress=progress)

    def site_coordinates(self, batch, options=None):
        from ..qmc.geometry import resolve_cell

        d = dict(options or {})
        model = batch.model(0)
        if d.get("cluster") is None and d.get("size") is None:
            d["cluster"] = self.config_default_arg(model)
        cell, _ = resolve_cell(model, d.get("cluster"), d.get("size"))
        return cell.sites

    # -- strain workflow (phasemap/strain/qmc_method.py) ------------------------------------
    def check_setup(self, spec, models, fraction="1/3"):
        from ..strain.qmc_method import qmc_setup

        qmc_setup(spec, models, fraction)

    def strain_step(self, spec, models, fraction, **kw):
        from ..strain.qmc_method import qmc_plateaus, qmc_setup, to_record

        qmc_setup(spec, models, fraction)
        return to_record(qmc_plateaus(models, spec, fraction), spec, fraction)

    def strain_critical(self, spec, table, strains, record, fraction, **kw):
        from ..strain.qmc_method import qmc_critical

        return qmc_critical(spec, table, strains, record, fraction)

    #: Why there is no qmc melting temperature in the strain workflow (the sweep prints it as a note,
    #: :meth:`strain_melting` raises it): it is meaningful for QMC, but not implemented.
    MELTING_UNAVAILABLE = (
        "not implemented: a QMC melting temperature is the crossing of the sqrt3 x sqrt3 Binder ratios of two or "
        "more sizes along T at the plateau centre (a finite-size-scaling scan in T per strain, ~10 temperatures x "
        "sizes x strains runs), and phasemap has no validated reference for it yet; the mean-field methods (mf, "
        "cmf) give T_melt; at one strain, `phasemap qmc-scaling --T T ...` tells whether the solid survives at T")

    def strain_melting(self, spec, models, record, fraction, **kw):
        raise ConfigError(f"method {spec.name}: no melting temperature in the strain workflow: "
                          f"{self.MELTING_UNAVAILABLE}")

    def strain_point(self, spec, model, record, mu, fraction, **kw):
        from ..strain.qmc_method import qmc_report

        return qmc_report(model, record, mu, fraction)


METHOD = QuantumMonteCarlo()
