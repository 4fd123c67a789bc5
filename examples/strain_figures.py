"""Reproduce every strain figure from the Python API (invented demo table).

    /work/venv/bin/python examples/strain_figures.py [OUTDIR] [METHODS]

METHODS defaults to "mf"; e.g. "mf,cmf:tri3" adds cluster mean field (much slower; its melting
temperature too, at T > 0 only on clusters small enough for full diagonalisation), and
"mf,ed:tri21" adds the exact-diagonalization finite-cluster step (no critical strain; the demo
table has V2 != 0, which tri12 cannot hold).
The demo numbers are INVENTED (see the header of examples/strain_demo.csv).
"""

import sys

from phasemap.strain import check_strain, read_table
from phasemap.strain.plots import (plot_critical_vs_lambda, plot_melting, plot_order_parameters, plot_phase_map,
                                   plot_plateau_edges)
from phasemap.strain.sweep import strain_sweep
from phasemap.plot import save_figure


def main(outdir="strain-figures", methods="mf"):
    table = read_table("demo")  # the invented table shipped with the package
    print(table.describe())
    # T_measure: an invented measurement temperature (K) drawn across the melting figure
    sweep = strain_sweep(table, methods, lambdas="0.8:1.2:5", T_measure=2.0)
    print(sweep.text())
    for name, fig in [("strain_plateau_edges", plot_plateau_edges(sweep)),
                      ("strain_order_parameters", plot_order_parameters(sweep)),
                      ("strain_phase_map", plot_phase_map(sweep)),
                      ("strain_critical_vs_lambda", plot_critical_vs_lambda(sweep)),
                      ("strain_melting", plot_melting(sweep))]:
        for p in save_figure(fig, f"{outdir}/{name}"):
            print("wrote", p)
    print(check_strain(table, 0.08, sweep.names[0], mu=8.0).verdict())


if __name__ == "__main__":
    main(*sys.argv[1:3])
