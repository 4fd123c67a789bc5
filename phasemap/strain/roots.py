"""Root finding for criteria that are costly per call but cheap per extra point in a batch.

A batched solve of 2 or 200 parameter points costs about the same, while a sequential
root-finder pays the full cost at every step. So a bracket is first narrowed by one or two
*batched multi-section* steps (all interior points of every bracket in one call), and the
final root is polished with :func:`scipy.optimize.brentq` on the narrowed bracket.
"""

from __future__ import annotations

import numpy as np
from scipy.optimize import brentq

__all__ = ["multisection", "narrowed_brentq"]


def multisection(hbatch, brackets, sections: int = 15, steps: int = 1, xtol: float = 0.0):
    """Narrow sign-change brackets ``[(a, b, ha, hb), ...]`` together.

    Parameters
    ----------
    hbatch : callable
        ``hbatch(list of (bracket index, x)) -> array of h`` evaluating every point in one call.
    brackets : list of (a, b, ha, hb)
        With ``(ha > 0) != (hb > 0)``.
    sections : int
        Interior points per bracket and step.
    steps : int
        Number of steps (each divides the bracket by ``sections + 1``).
    xtol : float
        Stop early once every bracket is narrower.

    Returns
    -------
    list of (a, b, ha, hb), int
        Narrowed brackets and the number of points evaluated.
    """
    out = [tuple(map(float, b)) for b in brackets]
    count = 0
    frac = np.arange(1, sections + 1) / (sections + 1)
    for _ in range(steps):
        live = [i for i, (a, b, _, _) in enumerate(out) if (b - a) > xtol]
        if not live:
            break
        pts = [(i, out[i][0] + (out[i][1] - out[i][0]) * f) for i in live for f in frac]
        vals = np.asarray(hbatch(pts), float)
        count += len(pts)
        for j, i in enumerate(live):
            a, b, ha, hb = out[i]
            xs = [a] + [pts[j * sections + k][1] for k in range(sections)] + [b]
            hs = [ha] + list(vals[j * sections:(j + 1) * sections]) + [hb]
            for k in range(len(xs) - 1):
                if np.isfinite(hs[k]) and np.isfinite(hs[k + 1]) and (hs[k] > 0) != (hs[k + 1] > 0):
                    out[i] = (xs[k], xs[k + 1], hs[k], hs[k + 1])
                    break
    return out, count


def narrowed_brentq(h, hbatch, a, b, ha, hb, xtol, sections: int = 15, steps: int = 1):
    """Root of ``h`` in ``[a, b]``: batched multi-section narrowing, then brentq.

    Returns
    -------
    root : float
    bracket : (float, float)
        The narrowed bracket brentq worked on.
    evaluations : int
    """
    (nb,), count = multisection(lambda pts: hbatch([x for _, x in pts]), [(a, b, ha, hb)], sections, steps,
                                xtol=4 * xtol)
    a2, b2, ha2, hb2 = nb
    calls = [0]

    def f(x):
        if x == a2:
            return ha2
        if x == b2:
            return hb2
        calls[0] += 1
        return h(x)

    root = brentq(f, a2, b2, xtol=xtol, rtol=4 * np.finfo(float).eps, maxiter=100)
    return float(root), (a2, b2), count + calls[0]
