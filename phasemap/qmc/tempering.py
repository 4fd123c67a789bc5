r"""Replica exchange in the chemical potential and the temperature (parallel tempering), compiled.

``R`` replicas of the same torus and couplings at a ladder of points ``(mu_r, beta_r)`` (the
target point included; a mu ladder at the target beta, a beta ladder at the target mu, or any
list of pairs) each do ordinary SSE sweeps (``kernel.sweep``); after every sweep,
neighbouring replicas ``(a, a+1)`` try to exchange their configurations, even pairs on even
sweeps and odd pairs on odd sweeps. A replica *slot* keeps its mu, its loop count, its random
stream and its measurements; configurations (operator string and state) move between slots.

Swap ratio (derivation in docs/qmc.md, "Replica exchange in mu"). With a common cut-off ``M``,
the SSE weight of a configuration ``C`` (``n`` operators) under slot ``a`` is
``W_a(C) = beta^n (M - n)! / M! * prod_v w_a(v)`` over its vertices ``v``; only the diagonal
vertex weights ``w_a = C_a - E_a(n_i, n_j)`` depend on mu (through the bond share of mu *and*
the shift ``C_a``), the hopping weight ``t`` does not. Exchanging ``C_a`` and ``C_b`` is accepted
with ``min(1, W_a(C_b) W_b(C_a) / (W_a(C_a) W_b(C_b)))`` whose logarithm is

    sum_{type, code} cnt_a[type, code] (lw_b - lw_a)[type, code] + cnt_b (lw_a - lw_b),

``cnt`` the number of diagonal vertices of each code in a configuration and ``lw = ln w``; a
vertex with weight 0 under the other slot (``lw = -inf``) means rejection. The beta and
factorial factors cancel because beta, ``n`` and ``M`` are the same on both sides (the cut-off
grows only during warm-up, for all replicas together, by appending identities). Between
different temperatures the factor ``beta^n`` adds ``(n_b - n_a) (ln beta_a - ln beta_b)`` to the
log ratio (``n_a`` the operator count of the configuration in slot a).

Walker labels: ``walker[slot]`` is the index of the configuration (its starting slot) now in a
slot; they are bookkeeping only (round trips of a configuration over the ladder).
"""

from __future__ import annotations

import math

import numpy as np

from ..model import ConfigError
from .kernel import pt_block, swap_step  # compiled beside kernel.sweep (numba cache, see kernel)

__all__ = ["ladder_points", "log_weights", "pt_block", "swap_step"]


def _numbers(name, values, positive=False) -> list:
    try:
        out = [float(x) for x in values]
    except (TypeError, ValueError):
        raise ConfigError(f"{name}: expected a list of numbers, got {values!r}") from None
    if len(out) < 2 or len(set(out)) != len(out) or not all(math.isfinite(x) and (x > 0 or not positive) for x in out):
        raise ConfigError(f"{name}: need >= 2 distinct finite{' positive' if positive else ''} numbers, got {values!r}")
    return out


def _index_of(name, values, x) -> int:
    hit = [k for k, v in enumerate(values) if abs(v - x) <= 1e-12 * max(1.0, abs(x))]
    if not hit:
        raise ConfigError(f"{name}: must contain the run's value {x:g}, got {values}")
    return hit[0]


def ladder_points(mu: float, beta: float, fixed_T: bool, replicas=1, mu_step=None, T_hot=None, mu_ladder=None,
                  T_ladder=None, n_sites: int = 1, scale: float = 1.0):
    """Points ``[(mu_r, beta_r)]`` of the replica ladder in swap order and the index of the
    run's own ``(mu, beta)``; ``None`` without replica exchange.

    * ``mu_ladder`` and/or ``T_ladder`` (explicit lists; both: pairs of equal length, sorted as
      given) must contain the run's mu / temperature;
    * else ``replicas`` > 1 points: ``mu + mu_step (k - (replicas - 1) // 2)`` at the run's beta,
      default ``mu_step = 1 / sqrt(beta N / scale)`` (``scale`` the largest coupling: neighbours
      differ by about one standard deviation of the particle number for a compressibility
      ~ 1/scale; common practice, no source); or, with ``T_hot``, temperatures geometric from
      the run's T (index 0) to ``T_hot`` at the run's mu.
    """
    if isinstance(replicas, bool) or not isinstance(replicas, (int, np.integer)) or not 1 <= replicas <= 64:
        raise ConfigError(f"replicas: expected an integer in [1, 64], got {replicas!r}")
    if (T_ladder is not None or T_hot is not None) and not fixed_T:
        raise ConfigError("T_ladder/T_hot: a temperature ladder needs the run's temperature T (not the ground-state "
                          "search)")
    if mu_ladder is not None or T_ladder is not None:
        if mu_step is not None or T_hot is not None:
            raise ConfigError("mu_step/T_hot: only with replicas=, not with an explicit mu_ladder/T_ladder")
        mus = _numbers("mu_ladder", mu_ladder) if mu_ladder is not None else None
        Ts = _numbers("T_ladder", T_ladder, positive=True) if T_ladder is not None else None
        if mus is not None and Ts is not None:
            if len(mus) != len(Ts):
                raise ConfigError(f"mu_ladder/T_ladder: pairs need equal lengths, got {len(mus)} and {len(Ts)}")
            hit = [k for k in range(len(mus)) if abs(mus[k] - mu) <= 1e-12 * max(1.0, abs(mu))
                   and abs(Ts[k] * beta - 1) <= 1e-12]
            if not hit:
                raise ConfigError(f"mu_ladder/T_ladder: must contain the run's (mu, T) = ({mu:g}, {1 / beta:g})")
            pts, k = [(m, 1.0 / T) for m, T in zip(mus, Ts)], hit[0]
        elif mus is not None:
            mus = sorted(mus)
            k = _index_of("mu_ladder", mus, mu)
            pts = [(m, beta) for m in mus]
        else:
            Ts = sorted(Ts)
            k = _index_of("T_ladder", Ts, 1.0 / beta)
            pts = [(mu, 1.0 / T) for T in Ts]
        pts[k] = (float(mu), float(beta))
        return pts, k
    if replicas == 1:
        if mu_step is not None or T_hot is not None:
            raise ConfigError("mu_step/T_hot: only with replicas > 1")
        return None
    if T_hot is not None:
        if mu_step is not None:
            raise ConfigError("mu_step/T_hot: give one of them (a mu ladder or a temperature ladder)")
        T_hot = positive("T_hot", T_hot)
        if not T_hot * beta > 1:
            raise ConfigError(f"T_hot: must exceed the run's temperature {1 / beta:g}, got {T_hot:g}")
        ratio = (T_hot * beta) ** (1.0 / (replicas - 1))
        return [(float(mu), float(beta) / ratio ** k) for k in range(replicas)], 0
    step = 1.0 / math.sqrt(beta * n_sites / scale) if mu_step is None else positive("mu_step", mu_step)
    c = (int(replicas) - 1) // 2
    return [(float(mu) + step * (k - c), float(beta)) for k in range(int(replicas))], c


def positive(name, x, noun: str = "") -> float:
    """``float(x)`` for a field that must be > 0 and finite, else a ConfigError naming ``name``."""
    try:
        x = float(x)
    except (TypeError, ValueError):
        raise ConfigError(f"{name}: expected a positive number, got {x!r}") from None
    if not (x > 0 and math.isfinite(x)):
        raise ConfigError(f"{name}: {noun + ' ' if noun else ''}must be > 0 and finite, got {x}")
    return x


def log_weights(wtab: np.ndarray) -> np.ndarray:
    """``ln wtab`` with ``-inf`` for forbidden vertices (module notes)."""
    w = np.asarray(wtab, float)
    out = np.full_like(w, -np.inf)
    ok = w > 0
    out[ok] = np.log(w[ok])
    return out
