"""``mf``: site-decoupled (Gutzwiller) mean field on the lattice's search cell.

References: D. S. Rokhsar and B. G. Kotliar, PRB 44, 10328 (1991); K. Sheshadri et al.,
EPL 22, 257 (1993) (decoupling mean field; attributions from memory).
"""

from __future__ import annotations

from ..mf import MFOptions, max_points, solve_batch, unstable_insulators
from . import Capabilities
from .grand_canonical import GrandCanonicalMethod


class SiteMeanField(GrandCanonicalMethod):
    name = "mf"
    title = "site-decoupled mean field"
    Options = MFOptions
    capabilities = Capabilities(grand_canonical=True, sharp_edges=True, temperature=True)
    caution = ("mean field overestimates the solid (site-decoupled badly so on the triangular lattice): "
               "its plateau widths and critical strains are bound-like estimates; compare cluster mean field")

    def solve_batch(self, batch, options=None, init=None):
        opt = self.options(options)
        max_points(batch.base, opt)  # refuses an n_max whose eigen-solves cannot fit in memory
        return solve_batch(batch, opt, init=init)

    def max_points(self, model, options=None):
        return max_points(model, self.options(options))

    def site_coordinates(self, batch, options=None):
        from ..lattice import search_cell

        return search_cell(batch.base.lattice).sites

    def unstable_insulators(self, result, phase, k):
        return unstable_insulators(result, phase, k)


METHOD = SiteMeanField()
