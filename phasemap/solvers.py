"""Batched solver dispatch for scans: method name -> (batch, options) -> batch result."""

from __future__ import annotations

from .model import ConfigError, check_keys

__all__ = ["batch_solver", "solve_points"]


def batch_solver(method: str, options: dict | None = None):
    """Return ``f(batch, init=None) -> result`` for the grand-canonical mean-field methods."""
    options = dict(options or {})
    if method == "mf":
        from .mf import MFOptions, solve_batch

        check_keys("mf options", options, MFOptions.__dataclass_fields__)
        opt = MFOptions(**options)
        return lambda batch, init=None: solve_batch(batch, opt, init=init)
    if method == "cmf":
        from .cmf import solve_cmf_batch

        return lambda batch, init=None: solve_cmf_batch(batch, **options)
    if method == "ed":
        raise ConfigError("method: 'ed' is canonical (fixed particle number); use the exact-diagonalization "
                          "staircase commands instead of grand-canonical scans")
    raise ConfigError(f"method: unknown method {method!r}; allowed: mf, cmf")


def solve_points(batch, method="mf", options=None, thresholds=None):
    """Classified Solutions for every point of ``batch``."""
    from .api import solutions_from_batch
    from .classify import Thresholds

    res = batch_solver(method, options)(batch)
    return solutions_from_batch(res, thresholds or Thresholds(), method=method), res
