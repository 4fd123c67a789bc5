"""`phasemap exact`: one command gives the staircase, S(K), data files and the figure."""

import json

import numpy as np
import pytest

import phasemap
from _ed_dense import dense_hamiltonian

from phasemap.cli import main


def test_exact_single_sector_json(capsys):
    rc = main(["exact", "--t", "0.1", "--V", "1", "--hardcore", "--cluster", "tri9", "--particles", "3", "--json"])
    assert rc == 0
    d = json.loads(capsys.readouterr().out)
    assert d["method"] == "ed:tri9" and abs(d["filling"] - 1 / 3) < 1e-12
    assert d["extra"]["N"] == 3 and "S(K)/N" in d["order"]


def test_exact_staircase_writes_data_and_figure(tmp_path, capsys):
    out = tmp_path / "ed"
    rc = main(["exact", "--t", "0.1", "--V", "1", "--cluster", "tri9", "--out", str(out), "--json"])
    assert rc == 0
    d = json.loads(capsys.readouterr().out)
    assert d["N"] == list(range(10))
    # independent dense diagonalisation of the same 9-site torus (tests/_ed_dense.py): E0(N) for
    # every N and the 1/3 charge gap E0(4) + E0(2) - 2 E0(3) (mu = 0)
    e0 = [np.linalg.eigvalsh(dense_hamiltonian("triangular", ((3, 0), (0, 3)), N, (0.1,) * 3, (1.0,) * 3))[0]
          for N in range(10)]
    assert d["E0"] == pytest.approx(e0, abs=1e-9)
    assert d["gap_1_3"] == pytest.approx(e0[4] + e0[2] - 2 * e0[3], abs=1e-9)
    assert d["gap_2_3"] == pytest.approx(e0[7] + e0[5] - 2 * e0[6], abs=1e-9)
    for name in ("staircase.nc", "staircase.csv", "staircase.png", "staircase.pdf", "summary.json"):
        assert (out / name).exists(), name
    import xarray as xr

    ds = xr.load_dataset(out / "staircase.nc")
    assert ds.attrs["method"] == "ed" and "model" in ds.attrs and ds.attrs["phasemap_version"] == phasemap.__version__


def test_exact_bad_input_exit_2(capsys):
    assert main(["exact", "--t", "0.1", "--V", "1", "--cluster", "tri13"]) == 2
    assert "cluster" in capsys.readouterr().err
    assert main(["exact", "--t", "0.1", "--V", "1", "--cluster", "tri12", "--particles", "20"]) == 2
    assert "particles" in capsys.readouterr().err
    assert main(["exact", "--t", "0.1", "--V", "1", "--cluster", "tri36", "--particles", "18", "--budget-gib", "2"]) == 2
    assert "GiB" in capsys.readouterr().err


def test_scan_ed_dataset_matches_direct_solves():
    from phasemap import Model
    from phasemap.ed import scan_ed, solve_ed

    m = Model("triangular", t=0.2, V=1.0)
    ds = scan_ed(m, "V", [0.0, 1.0, 2.0], cluster="tri9", particles=3, neighbors=False)
    assert list(ds["V"].values) == [0.0, 1.0, 2.0] and ds.attrs["method"] == "ed"
    direct = solve_ed(m.replace(V=2.0), cluster="tri9", particles=3, neighbors=False)
    assert abs(ds["energy"].values[-1] - direct.energy) < 1e-12
    assert abs(ds["SK_per_site"].values[-1] - direct.order["S(K)/N"]) < 1e-12
