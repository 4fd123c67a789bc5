"""phasemap: ground-state phase diagrams of extended Bose-Hubbard models.

Front door: :func:`phasemap.solve` (one point, any method), the scan functions in
:mod:`phasemap.scan` (maps, filling curves), results as labelled data (:mod:`phasemap.store`).
"""

__version__ = "0.1.0"

from .model import Model, ConfigError  # noqa: E402
from .lattice import Supercell, get_lattice  # noqa: E402
from .solution import Solution, PHASES  # noqa: E402

__all__ = ["Model", "ConfigError", "Supercell", "get_lattice", "Solution", "PHASES", "__version__"]

from .api import solve  # noqa: E402

__all__ += ["solve"]
