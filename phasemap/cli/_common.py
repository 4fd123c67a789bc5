"""Helpers shared by our CLI command modules (argument types, JSON output)."""

from __future__ import annotations

import argparse
import json
import math

__all__ = ["float_list", "finite_float", "positive_int", "width_arg", "dumps_json"]


def finite_float(text: str) -> float:
    """argparse type: a finite number."""
    try:
        v = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None
    if not math.isfinite(v):
        raise argparse.ArgumentTypeError(f"must be a finite number, got {text!r}")
    return v


def float_list(text: str):
    """argparse type: one number, or a comma-separated list (one value per bond family)."""
    parts = [p.strip() for p in text.split(",")]
    if not all(parts):
        raise argparse.ArgumentTypeError(f"expected a number or a comma-separated list, got {text!r}")
    vals = [finite_float(p) for p in parts]
    return vals[0] if len(vals) == 1 else vals


def positive_int(text: str) -> int:
    """argparse type: an integer >= 1."""
    try:
        v = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected an integer >= 1, got {text!r}") from None
    if v < 1:
        raise argparse.ArgumentTypeError(f"expected an integer >= 1, got {text!r}")
    return v


def width_arg(text: str):
    """argparse type: figure width 'single', 'double' or inches."""
    if text in ("single", "double"):
        return text
    try:
        from ..plot import figure_width

        return figure_width(float(text))
    except Exception:
        raise argparse.ArgumentTypeError(f"expected 'single', 'double' or inches (1 to 12), got {text!r}") from None


def _clean(v):
    if isinstance(v, float):
        return None if math.isnan(v) else (("inf" if v > 0 else "-inf") if math.isinf(v) else v)
    if isinstance(v, dict):
        return {k: _clean(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [_clean(x) for x in v]
    return v


def dumps_json(d) -> str:
    """Strict JSON (NaN -> null, inf -> "inf"), indented."""
    from ..store import jsonable

    return json.dumps(_clean(jsonable(d)), indent=2, allow_nan=False)
