"""Phase-map figures: smooth boundaries through the bisected points, fixed phase colours.

The boundary check is geometric and exact: a synthetic map whose two phases meet on a known
straight line (not through grid points), with the boundary points given on that line; the
drawn boundary must follow the line (a cell picture is off by up to half a grid step).
"""

import numpy as np
import xarray as xr

from phasemap.plot import (_smooth_regions, boundary_crossings, grey_level, phase_color, phase_colors,
                           phase_hatch, plot_phase_map, save_figure)


def _line_map(n=21, first_order=True):
    X = np.linspace(0.0, 1.0, n)
    Y = np.linspace(0.0, 2.0, n)
    a, b = 0.37, 0.77  # boundary y = a + b x (exact)
    xx, yy = np.meshgrid(X, Y, indexing="ij")
    lab = np.where(yy < a + b * xx, "solid 1/3", "superfluid")
    bx, by = [], []
    for j, y in enumerate(Y):  # crossings of the edges along x: x = (y - a) / b
        x = (y - a) / b
        if X[0] < x < X[-1]:
            bx.append(x), by.append(y)
    for x in X:  # crossings of the edges along y
        y = a + b * x
        if Y[0] < y < Y[-1]:
            bx.append(x), by.append(y)
    ds = xr.Dataset({"label": (("t", "mu"), lab),
                     "boundary_t": ("bpoint", np.array(bx)), "boundary_mu": ("bpoint", np.array(by)),
                     "boundary_first_order": ("bpoint", np.full(len(bx), first_order))},
                    coords={"t": X, "mu": Y}, attrs={"x_axis": "t", "y_axis": "mu"})
    return ds, (a, b), X, Y


def _drawn_lines(ds):
    import matplotlib.figure

    lab = ds["label"].values.astype(str)
    names = sorted(set(lab.ravel()))
    ax = matplotlib.figure.Figure().add_subplot()
    return _smooth_regions(ax, lab, names, phase_colors(names), ds["t"].values, ds["mu"].values,
                           boundary_crossings(ds, lab))


def test_boundary_line_follows_bisected_points():
    ds, (a, b), X, Y = _line_map()
    lines = _drawn_lines(ds)
    assert lines[1] and not lines[0]  # first order only, drawn once
    pts = np.concatenate(lines[1])
    dist = np.abs(pts[:, 1] - (a + b * pts[:, 0])) / np.hypot(1, b)
    step = Y[1] - Y[0]
    # exact up to the linear interpolation of the distance field between crossing points
    assert dist.max() < 0.05 * step
    # and it spans the map: from the lower edge to the right edge
    assert pts[:, 0].min() < X[1] and pts[:, 0].max() > X[-2]


def test_unrefined_edges_fall_back_to_midpoints():
    ds, _, _, _ = _line_map()
    ds = ds.drop_vars(["boundary_t", "boundary_mu", "boundary_first_order"])
    pts, pairs, order = boundary_crossings(ds, ds["label"].values.astype(str))
    assert len(pts) and np.all(order == -1)
    assert np.all((pts % 1 == 0.5).any(axis=1))


def test_continuous_lines_distinct(tmp_path):
    ds, _, _, _ = _line_map(first_order=False)
    lines = _drawn_lines(ds)
    assert lines[0] and not lines[1]
    paths = save_figure(plot_phase_map(ds), tmp_path / "m", formats=("png", "pdf", "svg"))
    assert all(p.stat().st_size > 0 for p in paths)
    assert paths[1].stat().st_size < 100_000  # small vector output (a 21 x 21 map)


def test_colours_fixed_per_phase():
    """A phase has one colour whatever else is in the figure (common practice, no source)."""
    alone = phase_colors(["solid 2/3"])["solid 2/3"]
    crowd = phase_colors(["solid 1/3", "solid 1/2 stripe", "solid 2/3", "superfluid", "empty"])["solid 2/3"]
    assert alone == crowd == phase_color("solid 2/3")


def test_greyscale_readable():
    """Phases that meet in the hard-core triangular maps differ in grey level or in hatch."""
    labels = ["empty", "solid 1/3", "solid 1/2 stripe", "solid 2/3", "supersolid", "superfluid", "full", "normal",
              "mott n=1", "mott n=2", "unconverged"]
    for i, p in enumerate(labels):
        for q in labels[i + 1:]:
            dg = abs(grey_level(phase_color(p)) - grey_level(phase_color(q)))
            assert dg >= 0.07 or phase_hatch(p) != phase_hatch(q), (p, q, dg)
