"""Strain tables: validation messages, PCHIP interpolation, extrapolation, CLI exit codes (no solver)."""

import math
import warnings

import numpy as np
import pytest

from phasemap import ConfigError
from phasemap.cli import main
from phasemap.strain import StrainTableWarning, read_table
from phasemap.strain.table import StrainTable

GOOD = """# unit = K
# lattice = triangular
strain,t_d1,t_d2,t_d3,V_d1,V_d2,V_d3
0.00,0.50,0.50,0.50,6.0,6.0,6.0
0.05,0.75,0.60,0.60,5.5,5.8,5.8
0.10,1.00,0.70,0.70,5.0,5.6,5.6
0.15,1.25,0.80,0.80,4.5,5.4,5.4
"""


def _write(tmp_path, text, name="tab.csv"):
    p = tmp_path / name
    p.write_text(text)
    return p


def test_linear_data_interpolated_exactly(tmp_path):
    # exact: a PCHIP spline reproduces data that are linear in strain (slopes agree at every row)
    tab = read_table(_write(tmp_path, GOOD))
    s = np.linspace(0, 0.15, 37)
    p = tab.params(s)
    np.testing.assert_allclose(p["t"][:, 0], 0.5 + 5.0 * s, rtol=0, atol=1e-12)
    np.testing.assert_allclose(p["t"][:, 1], 0.5 + 2.0 * s, rtol=0, atol=1e-12)
    np.testing.assert_allclose(p["V"][:, 0], 6.0 - 10.0 * s, rtol=0, atol=1e-12)
    m = tab.model(0.125)
    assert m.hardcore and m.unit == "K" and m.t[0] == pytest.approx(1.125, abs=1e-12)
    assert tab.sparsity_warnings(0.01) == []  # linear data: leave-one-out changes nothing


def test_extrapolation_refused_unless_allowed(tmp_path):
    tab = read_table(_write(tmp_path, GOOD))
    with pytest.raises(ConfigError, match=r"strain 0\.2: outside the table .*\[0, 0\.15\].*refused"):
        tab.model(0.2)
    with pytest.warns(StrainTableWarning, match="extrapolated"):
        m = tab.model(0.2, extrapolate=True)
    assert m.t[0] == pytest.approx(1.5, abs=1e-9)  # exact: linear data extrapolate linearly


def test_toml_equals_csv(tmp_path):
    toml = 'unit = "K"\n' + "".join(
        f"[[row]]\nstrain = {s}\nt_d1 = {a}\nt_d2 = {b}\nt_d3 = {b}\nV_d1 = {c}\nV_d2 = {d}\nV_d3 = {d}\n"
        for s, a, b, c, d in [(0, .5, .5, 6, 6), (.05, .75, .6, 5.5, 5.8), (.1, 1, .7, 5, 5.6)])
    t1 = read_table(_write(tmp_path, toml, "tab.toml"))
    t2 = read_table(_write(tmp_path, GOOD))
    # the rows are the same linear data, which PCHIP reproduces exactly (test above): equal to rounding
    np.testing.assert_allclose(t1.params(0.07)["t"], t2.params(0.07)["t"], rtol=0, atol=1e-12)
    np.testing.assert_allclose(t1.params(0.07)["t"][0], [0.5 + 5 * 0.07, 0.5 + 2 * 0.07, 0.5 + 2 * 0.07], rtol=0, atol=1e-12)
    np.testing.assert_allclose(t1.params(0.07)["V"][0], [6 - 10 * 0.07, 6 - 4 * 0.07, 6 - 4 * 0.07], rtol=0, atol=1e-12)
    assert t1.unit == "K" and t1.n_rows == 3


@pytest.mark.parametrize("text, pattern", [
    # missing column: names the column and the alternatives
    (GOOD.replace(",t_d3", "").replace(",0.50,6.0", ",6.0", 1).replace("0.60,5.5", "5.5")
     .replace("0.70,5.0", "5.0").replace("0.80,4.5", "4.5"), r"column 't_d3': missing column"),
    # unsorted strain: names row 3 (file line 6) and column strain
    (GOOD.replace("0.10,1.00", "0.04,1.00"), r"row 3 \(line 6\), column 'strain': strain must be strictly increasing"),
    # NaN: names row and column
    (GOOD.replace("0.05,0.75", "0.05,nan"), r"row 2 \(line 5\), column 't_d1': must be a finite number"),
    # wrong unit: names the field and the allowed units
    (GOOD.replace("unit = K", "unit = kelvin"), r"unit: unknown energy unit 'kelvin'.*allowed: K, mK, meV"),
    # missing unit
    (GOOD.replace("# unit = K\n", ""), r"unit: missing"),
    # negative hopping
    (GOOD.replace("0.15,1.25", "0.15,-1.25"), r"row 4 \(line 7\), column 't_d1': hopping must be >= 0"),
    # ragged row
    (GOOD.replace("0.05,0.75,0.60", "0.05,0.75"), r"row 2 \(line 5\): 6 fields but the header"),
    # unknown column with suggestion
    (GOOD.replace("V_d3", "V_d4"), r"column 'V_d4': unknown column; did you mean 'V_d3'"),
    # empty cell
    (GOOD.replace("0.05,0.75,0.60,0.60,5.5", "0.05,0.75,0.60,0.60,"), r"row 2 \(line 5\), column 'V_d1': empty cell"),
])
def test_malformed_tables_name_row_and_column(tmp_path, text, pattern):
    with pytest.raises(ConfigError, match=pattern):
        read_table(_write(tmp_path, text))


def test_mixed_hardcore_rejected():
    with pytest.raises(ConfigError, match=r"row 2, column 'U': rows mix hard-core"):
        StrainTable.from_columns({"strain": [0, 1], "t": [1, 1], "V": [1, 1], "U": ["inf", 5]}, unit="K")


def test_sparse_rows_warned():
    # common practice, no source: a row whose omission changes the interpolant by more than the
    # wanted precision means the rows around it are too far apart
    tab = StrainTable.from_columns({"strain": [0, 1, 2, 3, 4], "t": [0.1, 0.1, 0.5, 0.5, 0.5], "V": [1] * 5},
                                   unit="V")
    with pytest.warns(StrainTableWarning, match="too sparse"):
        msgs = tab.sparsity_warnings(0.01)
    assert any("column 't_d1'" in m for m in msgs)


@pytest.mark.parametrize("bad", [
    GOOD.replace("0.10,1.00", "0.04,1.00"),
    GOOD.replace("unit = K", "unit = furlong"),
    GOOD.replace("0.05,0.75", "0.05,nan"),
])
def test_cli_bad_table_exit_2_nothing_written(tmp_path, capsys, bad):
    tab = _write(tmp_path, bad)
    out = tmp_path / "out"
    assert main(["strain-sweep", str(tab), "--out", str(out)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("phasemap: error:") and "tab.csv" in err[0]
    assert not out.exists()
    assert main(["strain-check", str(tab), "--strain", "0.05"]) == 2
    assert capsys.readouterr().out == ""


def test_cli_strain_outside_table_exit_2(tmp_path, capsys):
    tab = _write(tmp_path, GOOD)
    assert main(["strain-check", str(tab), "--strain", "0.5"]) == 2
    err = capsys.readouterr().err
    assert "outside the table" in err and "[0, 0.15]" in err
    assert main(["strain-check", str(tab), "--strain", "0.1", "--method", "xyz"]) == 2
    assert main(["strain-sweep", str(tab), "--out", str(tmp_path / "o"), "--lambda", "1:0.5:x"]) == 2
    assert not (tmp_path / "o").exists()


def test_demo_table_ships_and_is_labelled_invented():
    tab = read_table("demo")
    assert "INVENTED" in " ".join(tab.meta.get("notes", [])) and tab.meta.get("invented", "").startswith("yes")
    assert tab.unit == "K" and tab.n_rows >= 8 and tab.hardcore
    assert math.isclose(tab.span[0], 0.0)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert tab.sparsity_warnings(0.02) == []
