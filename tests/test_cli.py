"""CLI: point (--json agrees with phasemap.solve), run, replot, demo; bad input -> one line, exit 2."""

import json
import math
from pathlib import Path

import numpy as np
import pytest

import phasemap
from phasemap.cli import main

ROOT = Path(__file__).resolve().parents[1]


def call(argv, capsys):
    """Run the CLI in-process; returns (exit code, stdout, stderr)."""
    try:
        rc = main(argv)
    except SystemExit as e:  # argparse errors and --help
        rc = e.code
    out = capsys.readouterr()
    return rc, out.out, out.err


@pytest.mark.parametrize("cmd", [[], ["point"], ["run"], ["replot"], ["demo"]])
def test_help_everywhere(cmd, capsys):
    rc, out, _ = call(cmd + ["--help"], capsys)
    assert rc == 0 and "usage:" in out


@pytest.mark.parametrize("argv,model,mu", [
    (["--lattice", "triangular", "--t", "0.05", "--V", "1", "--hardcore", "--mu", "1.5"],
     dict(lattice="triangular", t=0.05, V=1.0), 1.5),
    (["--lattice", "square", "--t", "0.02", "--U", "1", "--mu", "0.5", "--n-max", "4"],
     dict(lattice="square", t=0.02, U=1.0, n_max=4), 0.5),
    (["--t", "0.04,0.04,0.08", "--V", "1,1,0.8", "--V2", "0.1", "--mu", "2.5", "--unit", "K"],
     dict(lattice="triangular", t=(0.04, 0.04, 0.08), V=(1, 1, 0.8), V2=0.1, unit="K"), 2.5),
])
def test_point_json_agrees_with_solve(argv, model, mu, capsys):
    rc, out, err = call(["point", *argv, "--json"], capsys)
    assert rc == 0, err
    d = json.loads(out)
    sol = phasemap.solve(phasemap.Model(mu=mu, **model))
    assert d["phase"] == sol.phase and d["label"] == sol.label and d["converged"] == sol.converged
    assert math.isclose(d["filling"], sol.filling, abs_tol=1e-12)
    assert math.isclose(d["energy"], sol.energy, rel_tol=1e-12, abs_tol=1e-14)
    np.testing.assert_allclose(d["densities"], sol.densities, atol=1e-12)
    np.testing.assert_allclose(d["condensate"], sol.condensate, atol=1e-12)
    assert d["model"] == json.loads(json.dumps(sol.model.to_dict())) and d["phasemap_version"] == phasemap.__version__


def test_point_summary(capsys):
    rc, out, _ = call(["point", "--t", "0", "--V", "1", "--mu", "1.5"], capsys)
    assert rc == 0 and "solid 1/3" in out and "phase" in out


@pytest.mark.parametrize("argv,word", [
    (["point", "--t", "abc"], "--t"),
    (["point", "--t", "0.1,0.2", "--V", "1"], "t"),
    (["point", "--U", "-1"], "U"),
    (["point", "--U", "nan"], "--U"),
    (["point", "--U", "1", "--n-max", "0"], "--n-max"),
    (["point", "--U", "1", "--hardcore"], "--hardcore"),
    (["point", "--t", "-0.1"], "t"),
    (["point", "--method", "nope"], "--method"),
    (["point", "--particles", "3"], "--particles"),
    (["point", "--lattice", "hexagon"], "--lattice"),
    (["nosuchcommand"], "invalid choice"),
    (["demo", "--points", "1"], "--points"),
    (["replot", "missing.nc"], "missing.nc"),
    (["replot", "x.nc", "--formats", "gif"], "--formats"),
    (["run", "missing.toml"], "missing.toml"),
])
def test_bad_arguments_one_line_exit_2(argv, word, capsys, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    rc, out, err = call(argv, capsys)
    assert rc == 2
    assert err.count("\n") == 1 and "error" in err and word in err, err
    assert out == "" and list(tmp_path.iterdir()) == []


BAD_CONFIGS = {
    "unknown_key": ('lattice = "triangular"', 'lattise = "triangular"'),
    "nan": ("t = 0.1", "t = nan"),
    "negative_U": ('U = "hardcore"', "U = -2.0"),
    "bond_values": ("V = 1.0", "V = [1.0, 1.0]"),
    "n_max": ('U = "hardcore"', "U = 1.0\nn_max = 0"),
    "scan_range": ("num = 4", "num = 0"),
}


@pytest.mark.parametrize("case", sorted(BAD_CONFIGS))
def test_run_bad_config_writes_nothing(case, capsys, tmp_path):
    from test_config import GOOD

    old, new = BAD_CONFIGS[case]
    cfg = tmp_path / "bad.toml"
    cfg.write_text(GOOD.replace(old, new, 1))
    out_dir = tmp_path / "out"
    rc, out, err = call(["run", str(cfg), "--out", str(out_dir), "--quiet"], capsys)
    assert rc == 2 and err.count("\n") == 1 and err.startswith("phasemap: error:"), err
    assert not out_dir.exists() and sorted(p.name for p in tmp_path.iterdir()) == ["bad.toml"]


def test_run_refuses_unfinished_checkpoint_without_resume(capsys, tmp_path):
    from test_config import GOOD

    cfg = tmp_path / "c.toml"
    cfg.write_text(GOOD)
    ck = tmp_path / "out" / ".checkpoint" / "c"
    ck.mkdir(parents=True)
    (ck / "manifest.json").write_text('{"hash": "x"}')
    rc, _, err = call(["run", str(cfg), "--out", str(tmp_path / "out"), "--quiet"], capsys)
    assert rc == 2 and "--resume" in err
    rc, _, err = call(["run", str(cfg), "--out", str(tmp_path / "out"), "--quiet", "--resume"], capsys)
    assert rc == 2 and "different scan" in err


def test_demo_end_to_end_tiny_and_replot(capsys, tmp_path):
    out_dir = tmp_path / "demo"
    rc, out, err = call(["demo", "--out", str(out_dir), "--points", "6", "--quiet"], capsys)
    assert rc == 0, err
    names = {p.name for p in out_dir.iterdir()}
    for f in ("demo_map.nc", "demo_map.png", "demo_map.pdf", "demo_curve.nc", "demo_curve.csv",
              "demo_curve_plateaus.csv", "demo_curve_jumps.csv", "demo_curve.png", "demo_curve.pdf",
              "demo.config.toml"):
        assert f in names, names
    assert ".checkpoint" not in names and not any(".tmp" in n for n in names)
    from phasemap.store import load_csv, load_netcdf

    ds = load_netcdf(out_dir / "demo_map.nc")
    assert ds.attrs["invented"] == 1 and "INVENTED" in ds.attrs["caution_invented"]
    assert ds.attrs["method"] == "mf" and ds.attrs["phasemap_version"] == phasemap.__version__
    assert ds.sizes["t"] == 6 and ds.sizes["mu"] == 6
    _, meta = load_csv(out_dir / "demo_curve.csv")
    assert meta["invented"] == 1 and meta["model"]["unit"] == "K"
    assert "INVENTED" in (out_dir / "demo.config.toml").read_text()
    # re-plot both kinds into another folder
    rp = tmp_path / "replot"
    rc, out, err = call(["replot", str(out_dir / "demo_map.nc"), str(out_dir / "demo_curve.csv"),
                         "--out", str(rp), "--formats", "png", "--width", "double"], capsys)
    assert rc == 0, err
    assert {p.name for p in rp.iterdir()} == {"demo_map.png", "demo_curve.png"}
    # the resolved config is a valid config describing the same run
    from phasemap.cli.demo import demo_config
    from phasemap.config import load_config

    resolved = load_config(out_dir / "demo.config.toml").to_dict()
    assert resolved == demo_config(6).to_dict()
