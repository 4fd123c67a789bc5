"""``cmf:<cluster>``: cluster mean field (a cluster solved exactly, bonds leaving it decoupled).

References: D. Yamamoto, I. Danshita, C. A. R. Sá de Melo, PRA 85, 021601(R) (2012)
(attribution from memory). See docs/cmf.md.
"""

from __future__ import annotations

from dataclasses import fields

from ..cmf import CMFOptions, get_cluster, solve_cmf_batch
from ..model import ConfigError
from . import Capabilities
from .grand_canonical import GrandCanonicalMethod


class ClusterMeanField(GrandCanonicalMethod):
    name = "cmf"
    title = "cluster mean field"
    capabilities = Capabilities(grand_canonical=True, cluster=True, sharp_edges=True, temperature=True)
    default_arg = "tri12"
    caution = ("cluster mean field still overestimates the solid, less so for larger clusters: compare "
               "clusters (phasemap cluster-scaling) before trusting a critical strain")
    # every row costs (dense eigensolves per iteration): bisection on the plateau edges, brentq
    # alone on the critical strain with its plateau searches looking only next to the edges of
    # the nearest solved strains, and a one-strain search looks first where mf finds the plateau
    edge_sections = 1
    root_sections = 0
    root_hint_pad = 2
    map_every = 2  # the sweep's (strain, mu) map on every other mu of the common grid (docs/strain.md)
    hint_method = "mf"

    def option_names(self):
        return ["cluster"] + [f.name for f in fields(CMFOptions)]

    def options(self, options=None):
        d = super().options(options)
        if d.get("patterns") is not None:
            d["patterns"] = tuple(d["patterns"])
        return d

    def config_default_arg(self, model):
        return "tri3" if model.lattice == "triangular" else "sq2x2"

    def check_melting(self, spec, models):
        super().check_melting(spec, models)
        opts = self.options(spec.option_dict)
        cl = get_cluster(opts.get("cluster", self.default_arg), models[0].lattice)
        limit = opts.get("thermal_max_dim", CMFOptions.thermal_max_dim)
        dim = (max(m.n_max for m in models) + 1) ** cl.n_sites
        if dim > limit:
            raise ConfigError(f"{spec.name}: the melting temperature needs cluster mean field at T > 0 (full "
                              f"diagonalisation); cluster {cl.name!r} has Hilbert dimension {dim:,} > "
                              f"thermal_max_dim = {limit:,} (use e.g. cmf:tri3, cmf:tri6 or cmf:tri9)")

    def strain_cost(self, spec, models):
        """The cluster's Hilbert dimension (a dense eigensolve per row and iteration grows with it)."""
        cl = get_cluster(self.options(spec.option_dict).get("cluster", self.default_arg), models[0].lattice)
        return float((max(m.n_max for m in models) + 1) ** cl.n_sites)

    def check_cluster(self, cluster, model):
        get_cluster(cluster, model.lattice)

    def solve_batch(self, batch, options=None, init=None):
        return solve_cmf_batch(batch, init=init, **self.options(options))

    def site_coordinates(self, batch, options=None):
        return get_cluster((options or {}).get("cluster", self.default_arg), batch.base.lattice).cell.sites

    def site_orbits(self, result):
        from ..lattice import tile_orbits

        return tile_orbits(result.cell, result.batch.t, result.batch.V)


METHOD = ClusterMeanField()
