"""Starting points of the self-consistency: one per competing order.

A seed is a supercell plus initial site densities ``n0`` and condensate amplitudes ``phi0``.
For every named pattern of the lattice (DESIGN.md §3) we start a *solid* (``phi0 = 0``)
and a *supersolid* (``phi0 > 0``) from each inequivalent choice of "high" sublattices; plus
uniform Mott / empty / full and superfluid seeds, plus random seeds on the search cell
(commensurate with all named patterns). Translations map equivalent sublattice choices into
each other, so one representative per number of high sublattices suffices.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .lattice import Supercell, patterns_for, search_cell

__all__ = ["Seed", "make_seeds"]


@dataclass
class Seed:
    name: str
    cell: Supercell
    n0: np.ndarray
    phi0: np.ndarray


def _levels(model) -> list[tuple[float, float]]:
    """(high, low) density pairs for density-wave seeds."""
    if model.hardcore:
        return [(1.0, 0.0)]
    nm = model.n_max
    pairs = [(l + 1.0, float(l)) for l in range(nm)] + [(l + 2.0, float(l)) for l in range(nm - 1)]
    return pairs


def make_seeds(model, n_random: int = 2, rng: int | np.random.Generator | None = 0,
               patterns=None) -> list[Seed]:
    """All seeds for ``model``.

    Parameters
    ----------
    n_random : int
        Number of random seeds on the search cell.
    rng : int or Generator
        Random state (seeded by default: results are reproducible).
    patterns : iterable of str, optional
        Restrict density-wave seeds to these named patterns (default: all of the lattice).
    """
    rng = np.random.default_rng(rng)
    pats = patterns_for(model.lattice)
    seeds: list[Seed] = []
    uni = pats["uniform"].supercell()
    nm = model.n_max
    amp = 0.3 if model.hardcore else 0.5
    # uniform: every integer filling (insulators) and a superfluid
    for k in range(nm + 1):
        seeds.append(Seed(f"uniform n={k}", uni, np.full(1, float(k)), np.zeros(1)))
    seeds.append(Seed("superfluid", uni, np.full(1, 0.5 if model.hardcore else 1.0), np.full(1, amp)))
    interacting = any(v != 0 for v in model.V) or model.V2 != 0
    if interacting:
        for name, pat in pats.items():
            if name == "uniform" or (patterns is not None and name not in patterns):
                continue
            cell = pat.supercell()
            sub = pat.sublattice(cell)
            ks = range(1, pat.n_sub)
            if name == "2x2":
                ks = (1, pat.n_sub - 1)  # two high sublattices of 2x2 are the stripes
            for k in ks:
                high = sub < k
                for hi, lo in _levels(model):
                    n0 = np.where(high, hi, lo)
                    tag = f"{name} {k}/{pat.n_sub}" + ("" if model.hardcore else f" ({hi:g},{lo:g})")
                    seeds.append(Seed(f"solid {tag}", cell, n0, np.zeros(cell.n_sites)))
                    nss = np.clip(n0, 0.1, nm - 0.1) if model.hardcore else n0
                    seeds.append(Seed(f"supersolid {tag}", cell, nss, np.full(cell.n_sites, amp)))
    big = search_cell(model.lattice)
    for r in range(n_random):
        n0 = rng.uniform(0, nm, big.n_sites)
        phi0 = rng.uniform(0, amp, big.n_sites)
        seeds.append(Seed(f"random {r}", big, n0, phi0))
    return seeds
