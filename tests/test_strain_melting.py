"""Melting temperature of the 1/3 solid versus strain (strain workflow at T > 0).

* t = 0 table with V(s) = 1 + s: mf heats the solid at the plateau centre mu = 1.5 V (plateau
  [0, 3V], exact t = 0 limit); the site-decoupled grand potential scales as
  Omega(V, mu, T) = V Omega(1, mu/V, T/V), so T_melt(s) = V(s) T*(mu/V = 1.5), with T* from the
  independent scipy minimisation of the three-sublattice grand potential (test_mf_thermal.py);
  first order (cubic Landau invariant).
* The measurement temperature splits the strains into survives / melts consistently with T_melt;
  files and the figure are written; methods without a melting hook get a note; a cluster too
  large for full diagonalisation and a negative --T-measure are refused before solving.
"""

import numpy as np
import pytest

from phasemap.cli import main
from phasemap.methods import Capabilities, register, unregister
from phasemap.methods.mf import SiteMeanField
from phasemap.model import ConfigError
from phasemap.strain.sweep import strain_sweep
from phasemap.strain.table import StrainTable

from test_mf_thermal import _sqrt3_first_order_reference


def _t0_table():
    s = np.linspace(0.0, 0.4, 5)
    return StrainTable.from_columns({"strain": s, "t": np.zeros(5), "V": 1.0 + s}, unit="K")


@pytest.mark.slow
def test_mf_melting_temperature_t0_scaling_and_measurement_line(tmp_path):
    tab = _t0_table()
    Tstar, _ = _sqrt3_first_order_reference(1.5)
    S = np.array([0.0, 0.2, 0.4])
    T_meas = 0.8  # between T*V(0) = 0.68 and T*V(0.4) = 0.96
    sw = strain_sweep(tab, "mf", strains=S, n_mu=31, T_measure=T_meas)
    r = sw.melting["mf"]
    V = 1.0 + S
    assert r.mu == pytest.approx(1.5 * V, abs=1e-3)  # plateau centre (edges 0 and 3V)
    assert r.T_melt == pytest.approx(Tstar * V, abs=2e-3 * V.max())
    assert r.first_order.all() and r.converged.all()
    assert list(r.survives(T_meas)) == list(Tstar * V > T_meas)
    paths = sw.save(tmp_path / "out", formats=("png",))
    names = {p.name for p in paths}
    assert {"melting.csv", "strain_melting.png"} <= names
    text = (tmp_path / "out" / "melting.csv").read_text()
    assert "survives_at_T_measure" in text
    assert sw.to_dataset()["T_melt"].sel(solver="mf").values == pytest.approx(r.T_melt)
    assert "measurement temperature 0.8 K" in sw.text()


class _Ground(SiteMeanField):  # the same solver without a finite-temperature mode
    name, title = "mfground", "ground-state-only mean field"
    capabilities = Capabilities(grand_canonical=True, sharp_edges=True)


@pytest.mark.slow
def test_melting_refusals_and_notes(tmp_path):
    tab = _t0_table()
    register(_Ground(), replace=True)
    try:
        sw = strain_sweep(tab, "mf,mfground", strains=np.array([0.0, 0.4]), n_mu=21, melting=True)
    finally:
        unregister("mfground")
    assert "mf" in sw.melting and "mfground" not in sw.melting
    assert any("no melting temperature for mfground" in n for n in sw.notes)
    with pytest.raises(ConfigError, match="thermal_max_dim"):
        strain_sweep(tab, "cmf:tri12", strains=np.array([0.0]), melting=True)
    assert main(["strain-sweep", "demo", "--out", str(tmp_path / "x"), "--T-measure", "-1"]) == 2
    assert not (tmp_path / "x").exists() or not any((tmp_path / "x").iterdir())
