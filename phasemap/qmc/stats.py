r"""Error analysis: equal-length bins, jackknife for functions of means, tau_int, decorrelation.

For an estimator ``f(<x_1>, ..., <x_k>)`` of per-sweep series ``x`` (all chains pooled):

* the sweeps of every chain are cut into bins of equal length ``L`` (the leading remainder
  is dropped); bins of different chains are independent;
* the value is ``f`` of the overall means; its one-sigma error is the jackknife error over
  the bins (for a linear ``f`` this is the standard error of the bin means);
* the integrated autocorrelation time is ``tau_int = sigma_L^2 / (2 sigma_1^2)`` with
  ``sigma_1`` the error obtained treating every sweep as independent (so ``tau_int = 1/2`` for
  uncorrelated sweeps);
* the run is **not decorrelated** for ``f`` when the error still grows with bin length —
  ``sigma_L / sigma_{L/2} - 1`` exceeds twice the relative statistical uncertainty of
  ``sigma_L`` (``1/sqrt(2 (n_bins - 1))``) — or when a bin is shorter than 8 ``tau_int`` —
  or, with several chains, when the chains disagree: every chain's own estimate and binning
  error give ``chi^2 = sum_c (f_c - fbar)^2 / sigma_c^2`` (``fbar`` the error-weighted mean),
  and a chi-square tail probability below ``CHAIN_P`` = 1e-6 with ``n_chains - 1`` degrees of
  freedom (or chains that differ while their own errors vanish: each chain frozen at its own
  value, e.g. stuck in different particle-number sectors) flags the run (a between-chain check
  in the spirit of A. Gelman and D. B. Rubin, Statist. Sci. 7, 457 (1992)). A single chain whose
  series never changes has error 0 and is not flagged: a frozen quantity inside a gapped plateau
  is physics, and one chain cannot tell it from a frozen sampler — run several chains.

References: H. Flyvbjerg and H. G. Petersen, J. Chem. Phys. 91, 461 (1989) (blocking);
B. Efron, *The Jackknife, the Bootstrap and Other Resampling Plans* (SIAM, 1982);
A. D. Sokal, in *Functional Integration* (Plenum, 1997) (integrated autocorrelation time).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Estimate", "estimate", "bin_means", "vector_estimate"]


@dataclass(frozen=True)
class Estimate:
    """A Monte Carlo number: ``value`` +- ``error`` (one sigma), ``tau`` (integrated
    autocorrelation time in sweeps), ``decorrelated`` (False: the error is not trustworthy)."""

    value: float
    error: float
    tau: float
    decorrelated: bool = True

    def __iter__(self):
        yield from (self.value, self.error)

    def __format__(self, spec):
        return f"{format(self.value, spec or '.6g')} ± {format(self.error, '.2g')}"

    def to_dict(self) -> dict:
        return {"value": float(self.value), "error": float(self.error), "tau": float(self.tau),
                "decorrelated": bool(self.decorrelated)}


def bin_means(series: list[np.ndarray], length: int) -> np.ndarray:
    """(n_bins_total, k) bin means of every chain's (n_sweeps, k) series, bins of ``length``."""
    out = []
    for x in series:
        x = np.asarray(x, float)
        nb = x.shape[0] // length
        if nb == 0:
            continue
        x = x[x.shape[0] - nb * length:]
        out.append(x.reshape(nb, length, *x.shape[1:]).mean(1))
    return np.concatenate(out) if out else np.zeros((0,) + np.shape(series[0])[1:])


def _jackknife(B: np.ndarray, f) -> tuple[float, float]:
    nb = B.shape[0]
    tot = B.sum(0)
    value = f(tot / nb)
    if nb < 2:
        return value, np.nan
    jk = np.asarray(f(((tot[None, :] - B) / (nb - 1)).T), float)  # all leave-one-out means at once
    err = np.sqrt((nb - 1) / nb * np.sum((jk - jk.mean()) ** 2))
    return float(value), float(err)


def estimate(series: list[np.ndarray], bins: int, f=None) -> Estimate:
    """Value, error, tau_int and decorrelation flag of ``f(means)`` (see module notes).

    ``series``: per chain an (n_sweeps, k) array; ``bins``: bins per chain; ``f`` maps the
    (k,) vector of means (or a (k, m) array of m mean vectors) to a scalar (or (m,)); default
    the mean of column 0.
    """
    f = f or (lambda m: m[0])
    n = min(np.asarray(x).shape[0] for x in series)
    L = max(1, n // bins)
    value, err = _jackknife(bin_means(series, L), f)
    _, err1 = _jackknife(bin_means(series, 1), f)
    tau = 0.5 * (err / err1) ** 2 if err1 > 0 else 0.0
    ok = True
    if L >= 2 and err > 0:
        _, err_half = _jackknife(bin_means(series, L // 2), f)
        nb = bins * len(series)
        if err_half > 0 and err / err_half - 1.0 > 2.0 / np.sqrt(2.0 * max(nb - 1, 1)):
            ok = False
    if tau * 8 > L:
        ok = False
    if not np.isfinite(err):
        ok = False
    if len(series) > 1 and not _chains_agree(series, L, f):
        ok = False
    return Estimate(float(value), float(err), float(tau), ok)


#: Tail probability below which independent chains are taken to disagree (module notes).
CHAIN_P = 1e-6


def _chains_agree(series: list[np.ndarray], L: int, f) -> bool:
    """Do the chains' own estimates agree within their own binning errors (module notes)?"""
    from scipy.stats import chi2

    est = np.array([_jackknife(bin_means([x], L), f) for x in series])
    v, e = est[:, 0], est[:, 1]
    if not np.all(np.isfinite(v)) or np.ptp(v) <= 1e-12 * max(1.0, float(np.max(np.abs(v)))):
        return True
    if np.any(~np.isfinite(e)) or np.any(e <= 0):
        return False  # chains that differ while (some of) their own errors vanish: frozen at different values
    w = 1.0 / e**2
    vbar = np.sum(w * v) / np.sum(w)
    return bool(chi2.sf(np.sum(w * (v - vbar) ** 2), len(v) - 1) >= CHAIN_P)


def vector_estimate(bins_list: list[np.ndarray]) -> tuple[np.ndarray, np.ndarray]:
    """Mean and standard error of per-bin vectors (every chain's (n_bins, m) array pooled)."""
    B = np.concatenate([np.asarray(b, float) for b in bins_list])
    nb = B.shape[0]
    return B.mean(0), (B.std(0, ddof=1) / np.sqrt(nb) if nb > 1 else np.full(B.shape[1:], np.nan))
