"""Small run configs (TOML text) shared by the config, CLI, lock and resume tests.

Not physics: the hard-core triangular model every software-behaviour test starts from.
"""

MODEL = """
[model]
lattice = "triangular"
t = 0.1
V = 1.0
U = "hardcore"
"""


def config(scan: str, figures: bool | None = False) -> str:
    """``[model]`` + ``[scan]`` (``scan``: its lines) + ``[output] figures = ...`` (None: no [output])."""
    out = "" if figures is None else f"\n[output]\nfigures = {str(figures).lower()}\n"
    return f"{MODEL}\n[scan]\n{scan.strip()}\n{out}"


#: a five-point filling curve, no figures
CURVE5 = config("""
kind = "curve"
x = {name = "mu", start = 0.0, stop = 4.0, num = 5}
refine = false
""")
