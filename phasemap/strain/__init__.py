"""Strain workflow: parameter tables versus strain -> plateau, verdict, critical strain, sensitivity.

Modules
-------
table
    Read and validate strain tables (CSV / TOML), PCHIP interpolation, sparsity warnings.
engine
    Batched location of the commensurate plateau edges for many models at once.
analysis
    One strain: plateau extent, phase at mu, phase at fixed filling, margins, verdict.
critical
    Critical strain by brentq along the interpolated path, band across methods.
sensitivity
    Interactions scaled (V -> lambda V, optionally t, U): critical strain versus lambda,
    local derivatives of the plateau width.
ed_method
    Exact diagonalization (``ed:<cluster>``, canonical): finite-cluster step mu-(N), mu+(N),
    charge gap and S(K)/N at N = f L; no sharp critical strain (indicators only).
sweep
    Strain sweep for several methods: labelled data on disk.
plots
    Figures of a sweep.

Caution: mean-field methods overestimate the solid; their critical strains are bound-like.
"""

from .table import KNOWN_UNITS, StrainTable, StrainTableWarning, read_table
from ..methods import MethodSpec, parse_specs as parse_methods
from .engine import PlateauResult, locate_plateaus
from .analysis import StrainCheck, check_strain, melt_factor, strain_filling_curve
from .critical import CriticalResult, critical_band, critical_strain

__all__ = ["StrainTable", "StrainTableWarning", "read_table", "KNOWN_UNITS", "MethodSpec", "parse_methods",
           "PlateauResult", "locate_plateaus", "StrainCheck", "check_strain", "melt_factor",
           "strain_filling_curve", "CriticalResult", "critical_strain", "critical_band"]
