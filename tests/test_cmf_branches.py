"""Branch tracking along lines (``branch_every``) gives the full seed set's answers.

Reference: the per-point path of the same package with every seed at every point
(``branch_every=0``, continuation on), which is what a line costs without tracking. Branch
tracking runs the full seed set only at some points and one row per distinct branch in
between (:mod:`phasemap.cmf.branches`); on lines through the 1/3 and 2/3 solids, the
supersolid and the superfluid, across first-order solid-superfluid jumps, the winning energy
of every point must agree to 1e-9 and every phase label must be the same (continuation
practice, no source). A line on which it does not (tri6, a one-point sliver of solid) is
described in docs/cmf.md: the option is not the default.
"""

import numpy as np
import pytest

from phasemap import Model
from phasemap.api import select_winners
from phasemap.cmf import solve_cmf_batch
from phasemap.model import ConfigError
from phasemap.params import ParamBatch

LINES = {
    # t at the 1/3 plateau: solid 1/3 -> superfluid
    "t, mu = 1.5": [Model("triangular", t=0.01 + 0.01 * k, V=1.0, mu=1.5) for k in range(30)],
    # mu at t = 0.15: superfluid, solid 1/3 (first order: the filling jumps from 0.17 to 1/3
    # between neighbouring points; solid-superfluid below 1/3 is first order, Wessel & Troyer,
    # PRL 95, 127205 (2005)), supersolid, solid 2/3
    "mu, t = 0.15": [Model("triangular", t=0.15, V=1.0, mu=-0.5 + 0.15 * k) for k in range(40)],
    # mu at t = 0.08: empty, superfluid, solid 1/3, supersolid, solid 2/3
    "mu, t = 0.08": [Model("triangular", t=0.08, V=1.0, mu=-0.5 + 0.15 * k) for k in range(40)],
    # t at half filling: supersolid -> superfluid
    "t, mu = 3": [Model("triangular", t=0.05 + 0.01 * k, V=1.0, mu=3.0) for k in range(30)],
}


def _pair(models, cluster="tri3", every=6, **kw):
    batch = ParamBatch.from_models(models)
    kw = {"cluster": cluster, "engine": "point", **kw}
    ref = solve_cmf_batch(batch, **kw)
    new = solve_cmf_batch(batch, branch_every=every, **kw)
    return batch, ref, new


def _winners(res):
    k, ok, _, _, label, _ = select_winners(res)
    P = np.arange(len(k))
    return res.energy[P, k], ok, label


@pytest.mark.parametrize("line", list(LINES))
def test_branch_tracking_equals_full_seed_set_along_lines(line):
    batch, ref, new = _pair(LINES[line])
    e0, ok0, lab0 = _winners(ref)
    e1, ok1, lab1 = _winners(new)
    assert ok0.all() and np.array_equal(ok0, ok1)
    assert np.abs(e1 - e0).max() < 1e-9
    assert list(lab0) == list(lab1)
    st = new.branch_stats
    assert st["branch"] > 0 and (new.iterations == 0).any()  # it did skip seeds somewhere
    if line.startswith("mu"):  # the line crosses a first-order superfluid -> solid jump
        fill = ref.n[np.arange(batch.size), ref.best()].mean(1)
        labs = list(lab0)
        i = next(j for j in range(1, len(labs)) if labs[j - 1] == "superfluid" and labs[j] == "solid 1/3")
        assert fill[i] - fill[i - 1] > 0.15
    phases = {str(s).split()[0] for s in lab0}
    assert phases <= {"empty", "superfluid", "solid", "supersolid"}


def test_not_solved_rows_are_marked():
    _, _, new = _pair(LINES["t, mu = 3"])
    skip = new.iterations == 0
    assert skip.any()
    assert not new.converged[skip].any() and np.isinf(new.energy[skip]).all() and np.isnan(new.n[skip]).all()


def test_line_bend_forces_the_full_seed_set():
    # two lines in one batch (a map's rows): the first point of the second line is a full point
    a = [Model("triangular", t=0.05 + 0.01 * k, V=1.0, mu=3.0) for k in range(8)]
    b = [Model("triangular", t=0.05 + 0.01 * k, V=1.0, mu=4.0) for k in range(8)]
    _, ref, new = _pair(a + b, every=100)
    assert (new.iterations[8] > 0).all()  # every seed solved at the bend
    assert new.branch_stats.get("line bend", 0) >= 1
    e0, _, lab0 = _winners(ref)
    e1, _, lab1 = _winners(new)
    assert np.abs(e1 - e0).max() < 1e-9 and list(lab0) == list(lab1)


@pytest.mark.slow
def test_branch_tracking_tri12_benchmark_line():
    # the line of benchmarks/bench_cmf_line.py (tri12 hard-core, compiled Lanczos rows), all seeds
    models = [Model("triangular", t=0.1 + 0.002 * k, V=1.0, mu=3.0) for k in range(12)]
    _, ref, new = _pair(models, cluster="tri12", every=10, engine="auto")
    e0, ok0, lab0 = _winners(ref)
    e1, ok1, lab1 = _winners(new)
    assert np.array_equal(ok0, ok1) and np.abs(e1 - e0).max() < 1e-9 and list(lab0) == list(lab1)


@pytest.mark.parametrize("bad", [-1, 1.5, True, "3"])
def test_bad_branch_every_is_a_config_error(bad):
    batch = ParamBatch.from_models([Model("triangular", t=0.1, V=1.0, mu=3.0)])
    with pytest.raises(ConfigError, match="branch_every"):
        solve_cmf_batch(batch, cluster="tri3", branch_every=bad)


def test_lowest_branch_change_forces_the_full_seed_set():
    # mu line through half filling at t = 0.1 V: the supersolids below and above 1/2 (particle-hole
    # images of each other, exact for hard-core bosons at mu = 3 V) are both tracked as condensed
    # branches and cross at mu = 3 V (first-order jump of the filling, 0.42 -> 0.60); the point
    # where the lowest branch changes must be solved with the full seed set (a new state may win
    # there), and the answers must equal the full seed set's everywhere (continuation practice,
    # no source)
    models = [Model("triangular", t=0.1, V=1.0, mu=2.53 + 0.08 * k) for k in range(13)]
    batch, ref, new = _pair(models, every=100)
    e0, ok0, lab0 = _winners(ref)
    e1, ok1, lab1 = _winners(new)
    assert ok0.all() and np.array_equal(ok0, ok1) and np.abs(e1 - e0).max() < 1e-9 and list(lab0) == list(lab1)
    k0 = ref.best()
    P = np.arange(batch.size)
    fill = ref.n[P, k0].mean(1)
    jump = next(p for p in range(1, batch.size) if fill[p] - fill[p - 1] > 0.1)  # first order at mu = 3 V
    assert batch.mu[jump - 1] < 3.0 < batch.mu[jump] and ref.phi[jump - 1, k0[jump - 1]].max() > 1e-3 \
        and ref.phi[jump, k0[jump]].max() > 1e-3  # supersolid -> supersolid, both condensed
    assert new.branch_stats.get("winner", 0) >= 1
    assert (new.iterations[jump] > 0).all()  # every seed solved where the lowest branch changed
