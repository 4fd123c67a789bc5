r"""Symmetries of the cluster mean-field equations, and seeds that are images of each other.

The self-consistency map :math:`x = (n, \phi) \to G(x)` of a cluster is equivariant under

* a *cluster automorphism*: a permutation :math:`\pi` of the cluster's sites that maps the
  intra-cluster bonds of every family onto bonds of the same family, the next-nearest intra
  bonds onto themselves, and the decoupled-bond counts ``M[f]``, ``M2``
  (:meth:`Cluster.inter_matrices`) onto themselves: :math:`G(\pi x) = \pi G(x)`;
* hard-core particle-hole conjugation :math:`b \to b^\dagger` (:math:`n \to 1 - n`,
  :math:`\phi \to \phi`), which maps the model at :math:`\mu` to the model at
  :math:`\sum_j V_{ij} - \mu` (every site's interaction sum, next-nearest included): a symmetry
  at :math:`\mu = \sum_j V_{ij} / 2` only (half filling of the triangular lattice at
  :math:`\mu = 3V`).

The variational energy is invariant under both. The per-point path's row rules are too:
continuation keeps a state when it kept the seed's character (spreads and maxima, invariant),
the secant predictor is affine, Anderson mixing commutes with these orthogonal-plus-shift maps,
the clipping box :math:`[0, n_{max}]` is symmetric. So when seed :math:`k'` is the image
:math:`g(k)` of an earlier seed :math:`k`, the whole line of seed :math:`k'` is the image of
seed :math:`k`'s line; :func:`seed_images` finds these pairs and the per-point path solves only
the first seed of every orbit (option ``symmetry``). Not exact in two places: inexact inner
Lanczos solves and the fixed random start vector of a restarting row are not equivariant
(differences at the inner tolerance, a relative 1e-3 of the self-consistency residual), so a
row wandering without converging may end elsewhere than its image; converged rows reach the
image state to the solver tolerance (``tests/test_cmf_symmetry.py`` compares with every seed
solved).
"""

from __future__ import annotations

import numpy as np

__all__ = ["automorphisms", "half_filling_mu", "seed_images", "apply"]


def _bond_sets(cl, fam):
    """Bond matrices of the cluster with family ``f`` relabelled ``fam[f]``."""
    S, F = cl.n_sites, cl.lattice.n_families
    intra = np.zeros((F, S, S), bool)
    for a, b, f in cl.intra:
        intra[fam[f], a, b] = intra[fam[f], b, a] = True
    intra2 = np.zeros((S, S), bool)
    for a, b in cl.intra2:
        intra2[a, b] = intra2[b, a] = True
    M, M2 = cl.inter_matrices()
    return [intra[f] for f in range(F)] + [intra2] + [M[fam.index(f)] for f in range(F)] + [M2]


def automorphisms(cl) -> list[tuple[np.ndarray, tuple]]:
    """Every ``(perm, fam)``: a site permutation (site ``a`` goes to ``perm[a]``) with a
    relabelling of the bond families (family ``f`` goes to ``fam[f]``) that maps the intra-cluster
    bonds of every family, the next-nearest bonds and the decoupled-bond counts onto themselves;
    identity first. A symmetry of the equations where ``t`` and ``V`` are equal on families that
    ``fam`` exchanges (:func:`seed_images` checks). Backtracking over the sites.
    """
    from itertools import permutations

    S, F = cl.n_sites, cl.lattice.n_families
    ref = _bond_sets(cl, list(range(F)))
    sig = lambda ms, a: tuple(sorted(tuple(np.sort(m[a])) for m in ms))  # noqa: E731
    sig_a = [sig(ref, a) for a in range(S)]
    out = []
    for fam in permutations(range(F)):
        mats = _bond_sets(cl, list(fam))  # the same bonds, families renamed
        sig_b = [sig(mats, b) for b in range(S)]
        perm = -np.ones(S, np.int64)
        used = np.zeros(S, bool)

        def ok(a):
            b = perm[a]
            return all(m[a, c] == mm[b, perm[c]] and m[c, a] == mm[perm[c], b]
                       for m, mm in zip(ref, mats) for c in range(a + 1))

        def rec(a):
            if a == S:
                out.append((perm.copy(), tuple(fam)))
                return
            for b in range(S):
                if not used[b] and sig_a[a] == sig_b[b]:
                    perm[a], used[b] = b, True
                    if ok(a):
                        rec(a + 1)
                    perm[a], used[b] = -1, False

        rec(0)
    ident = (list(range(S)), tuple(range(F)))
    out.sort(key=lambda g: ((g[0].tolist(), g[1]) != ident, g[0].tolist(), g[1]))
    return out


def half_filling_mu(cl, V, V2) -> float | None:
    """The chemical potential of the particle-hole symmetric point, ``sum_j V_ij / 2`` (the
    interaction sum of one site, intra and decoupled bonds alike), or None if it differs between
    the cluster's sites."""
    S = cl.n_sites
    z = np.zeros((len(V), S))
    for a, b, f in cl.intra:  # each intra bond once: both ends
        z[f, a] += 1.0
        z[f, b] += 1.0
    M, M2 = cl.inter_matrices()
    z += M.sum(2)
    z2 = M2.sum(1)
    for a, b in cl.intra2:
        z2[a] += 1.0
        z2[b] += 1.0
    tot = np.asarray(V, float) @ z + float(V2) * z2
    return float(tot[0]) / 2 if np.allclose(tot, tot[0], rtol=0, atol=1e-12) else None


def apply(g, n, phi, n_max: int = 1):
    """Image ``(n', phi')`` of a state under ``g = (perm, fam, ph)``: ``n'[perm[a]] = n[a]``, and
    ``n' -> n_max - n'`` when ``ph`` (hard-core only)."""
    perm, _, ph = g
    n2, phi2 = np.empty_like(n), np.empty_like(phi)
    n2[..., perm] = n
    phi2[..., perm] = phi
    if ph:
        n2 = n_max - n2
    return n2, phi2


def _maps_onto(image, seed) -> bool:
    n, phi = image
    return np.allclose(n, seed.n0, rtol=0, atol=1e-12) and np.allclose(phi, seed.phi0, rtol=0, atol=1e-12)


def seed_images(seeds, cl, batch, n_max: int):
    """For every seed, ``(k, g)`` when it is the image ``g(seed k)`` of an earlier seed ``k`` under
    a symmetry of every point of ``batch`` (None: solved itself). ``g = (perm, fam, ph)``."""
    same = lambda a, fam: np.allclose(a[:, list(fam)], a, rtol=0, atol=0)  # noqa: E731
    perms = [g for g in automorphisms(cl) if same(batch.t, g[1]) and same(batch.V, g[1])]
    ph_ok = False
    if batch.hardcore and n_max == 1:
        mus = [half_filling_mu(cl, batch.V[p], batch.V2[p]) for p in range(batch.size)]
        ph_ok = all(m is not None and abs(batch.mu[p] - m) <= 1e-12 * max(1.0, abs(m)) for p, m in enumerate(mus))
    ops = [(p, f, False) for p, f in perms] + ([(p, f, True) for p, f in perms] if ph_ok else [])
    out = [None] * len(seeds)
    for j, sj in enumerate(seeds):
        for k in range(j):
            if out[k] is not None:
                continue
            sk = seeds[k]
            hit = next((g for g in ops[1:] + ops[:1] if _maps_onto(apply(g, sk.n0, sk.phi0, n_max), sj)), None)
            if hit is not None:
                out[j] = (k, hit)
                break
    return out
