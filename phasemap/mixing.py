r"""Fixed-point acceleration shared by the self-consistent solvers: batched Anderson mixing.

For a map :math:`x \to G(x)` with residual :math:`f = G(x) - x`, Anderson (type II) mixing
keeps the last ``m`` differences :math:`\Delta x_i, \Delta f_i` of iterates and residuals and
proposes

.. math::

    x_{\rm new} = x + \beta f - (\Delta X + \beta\,\Delta F)\,\gamma,\qquad
    \gamma = \arg\min_\gamma \|f - \Delta F\,\gamma\|^2

(normal equations with a Tikhonov term :math:`10^{-10}\,{\rm tr}(\Delta F^T\Delta F)`),
with :math:`\beta` the linear mixing. A row whose Anderson step is not finite falls back to
plain linear mixing. Every row of the batch (one parameter point x one seed) has its own
history; finished rows are dropped with :meth:`Anderson.keep`.

Users: :mod:`phasemap.mf` (NumPy engine), :mod:`phasemap.cmf` (both the batched and the
per-point paths). The compiled hard-core/soft-core mean-field kernel
(:mod:`phasemap.mf_kernel`) keeps its own inlined copy of the same update because a numba
``prange`` loop cannot call this Python object; ``tests/test_mixing.py`` checks that the two
produce the same iterates.

References
----------
D. G. Anderson, J. ACM 12, 547 (1965); H. F. Walker, P. Ni, SIAM J. Numer. Anal. 49, 1715
(2011) (type II formulation; attribution from memory).
"""

from __future__ import annotations

import numpy as np

__all__ = ["Anderson", "anderson_update", "StallWatch"]


def anderson_update(x, f, dX, dF, mixing: float):
    """One Anderson step for every row.

    Parameters
    ----------
    x, f : (R, D) arrays
        Current iterates and residuals ``G(x) - x``.
    dX, dF : (R, D, k) arrays
        Histories of iterate and residual differences (any column order).
    mixing : float
        Linear mixing ``beta``.

    Returns
    -------
    (R, D) array
        Proposed next iterates (rows with a non-finite step get ``x + beta f``).
    """
    lin = x + mixing * f
    k = dX.shape[2]
    if k == 0:
        return lin
    A = np.einsum("rdk,rdl->rkl", dF, dF)
    b = np.einsum("rdk,rd->rk", dF, f)
    reg = 1e-10 * np.maximum(np.trace(A, axis1=1, axis2=2), 1e-30)[:, None, None]
    with np.errstate(all="ignore"):
        try:
            gam = np.linalg.solve(A + reg * np.eye(k), b[..., None])[..., 0]
        except np.linalg.LinAlgError:  # pragma: no cover - regularised, should not happen
            return lin
        step = lin - np.einsum("rdk,rk->rd", dX + mixing * dF, gam)
    ok = np.all(np.isfinite(step), axis=1)
    return np.where(ok[:, None], step, lin)


class Anderson:
    """Anderson mixing with a separate history per row of a batch.

    Parameters
    ----------
    rows, dim : int
        Number of rows (independent fixed-point problems) and unknowns per row.
    memory : int
        History length ``m`` (0: plain linear mixing).
    mixing : float
        Linear mixing ``beta``.

    Examples
    --------
    >>> mix = Anderson(rows, dim, memory=5, mixing=0.6)   # doctest: +SKIP
    >>> x_new = mix.step(x, G(x) - x)                       # doctest: +SKIP
    >>> mix.keep(still_running)                             # doctest: +SKIP
    """

    def __init__(self, rows: int, dim: int, memory: int, mixing: float):
        self.m = max(int(memory), 0)
        self.mixing = float(mixing)
        self.hx = np.zeros((self.m, rows, dim))
        self.hf = np.zeros((self.m, rows, dim))
        self.count = 0  # history entries written so far (ring buffer position)
        self.px = self.pf = None

    def step(self, x, f):
        """Record ``(x, f)`` and return the proposed next iterate of every row."""
        x = np.asarray(x, float)
        f = np.asarray(f, float)
        k = 0
        if self.m > 0 and self.px is not None:
            slot = self.count % self.m
            self.hx[slot] = x - self.px
            self.hf[slot] = f - self.pf
            self.count += 1
            k = min(self.count, self.m)
        self.px, self.pf = x.copy(), f.copy()
        if k == 0:
            return x + self.mixing * f
        dX = self.hx[:k].transpose(1, 2, 0)
        dF = self.hf[:k].transpose(1, 2, 0)
        return anderson_update(x, f, dX, dF, self.mixing)

    def keep(self, mask) -> None:
        """Keep only the rows where ``mask`` is true (drop finished rows)."""
        mask = np.asarray(mask)
        self.hx, self.hf = self.hx[:, mask], self.hf[:, mask]
        if self.px is not None:
            self.px, self.pf = self.px[mask], self.pf[mask]


class StallWatch:
    """Per-row stopping rule of the batched fixed-point loops (mean field and cluster mean field).

    A row is done when its residual is below ``tol``; it is stalled (stopped, unconverged) when its
    best residual has not fallen below ``drop`` times itself (default 0.999: a 0.1 % gain) for more
    than ``patience`` iterations. ``keep`` drops finished rows together with the loop's other
    compacted arrays.
    """

    def __init__(self, rows: int, tol: float, patience: int, drop: float = 0.999):
        self.best = np.full(rows, np.inf)
        self.last = np.zeros(rows, int)
        self.tol, self.patience, self.drop = tol, patience, drop

    def update(self, r, it: int, live):
        """``(done, stalled)`` masks after iteration ``it`` with residuals ``r`` of the rows."""
        gain = r < self.drop * self.best
        self.best = np.where(gain, r, self.best)
        self.last = np.where(gain, it, self.last)
        done = live & (r < self.tol)
        stalled = live & ~done & ((it - self.last) > self.patience)
        return done, stalled

    def keep(self, mask) -> None:
        self.best, self.last = self.best[mask], self.last[mask]
