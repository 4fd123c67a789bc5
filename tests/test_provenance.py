"""Files say what they are: every file phasemap writes carries the same provenance (one version key,
model or table, method, energy unit) from phasemap.store.provenance; a strain sweep's file set is
marked complete only by a marker written last.

Source: software behaviour (common practice, no source).
"""

import json
from pathlib import Path

import pytest

import phasemap
from phasemap.cli import main
from phasemap.store import COMPLETE_NAME, load_csv, load_netcdf, provenance

KEY = "phasemap_version"


def _check(meta: dict, method: str, unit: str, model=True, table=False):
    assert meta[KEY] == phasemap.__version__ and "version" not in meta, meta.keys()
    assert meta["method"] == method and meta["energy_unit"] == unit
    if model:
        m = meta["model"]
        m = json.loads(m) if isinstance(m, str) else m
        assert m["lattice"] == meta["lattice"]
    if table:
        assert meta["table"]


def test_provenance_function():
    m = phasemap.Model(t=0.1, V=1.0, unit="K")
    p = provenance(m, "cmf:tri12", {"cluster": "tri12"}, extra_key=1.5)
    assert p == {KEY: phasemap.__version__, "model": json.loads(json.dumps(m.to_dict())), "lattice": "triangular",
                 "method": "cmf:tri12", "method_options": {"cluster": "tri12"}, "energy_unit": "K", "extra_key": 1.5}
    assert provenance() == {KEY: phasemap.__version__}


def test_run_files(tmp_path):
    from phasemap.config import parse_config
    from phasemap.runner import run

    cfg = parse_config({"model": {"lattice": "triangular", "t": 0.1, "V": 1.0, "U": "hardcore", "unit": "K"},
                        "scan": {"kind": "curve", "x": {"name": "mu", "start": 0.0, "stop": 4.0, "num": 5},
                                 "refine": False},
                        "output": {"figures": False}}, name="c")
    run(cfg, out=tmp_path, progress=False, log=lambda s: None)
    _check(load_netcdf(tmp_path / "c.nc").attrs, "mf", "K")
    for f in ("c.csv", "c_plateaus.csv", "c_jumps.csv"):
        _check(load_csv(tmp_path / f)[1], "mf", "K")
    head = (tmp_path / "c.config.toml").read_text()
    assert f'# {KEY}: "{phasemap.__version__}"' in head and '# method: "mf"' in head


def test_exact_files(tmp_path, capsys):
    out = tmp_path / "ed"
    rc = main(["exact", "--t", "0.1", "--V", "1", "--cluster", "tri9", "--particles", "2:4", "--no-figure",
               "--out", str(out)])
    assert rc == 0, capsys.readouterr().err
    _check(load_netcdf(out / "staircase.nc").attrs, "ed", "V")
    _check(load_csv(out / "staircase.csv")[1], "ed", "V")
    _check(json.loads((out / "summary.json").read_text()), "ed", "V")


def test_cluster_scaling_files(tmp_path, capsys):
    out = tmp_path / "sc"
    rc = main(["cluster-scaling", "--lattice", "square", "--U", "1", "--n-max", "3", "--t", "0.01", "--quantity",
               "lobe-tip", "--clusters", "sq1,sq2x1", "--out", str(out)])
    assert rc == 0, capsys.readouterr().err
    _check(json.loads((out / "scaling.json").read_text()), "cmf", "U")
    cols, meta = load_csv(out / "scaling.csv")
    _check(meta, "cmf", "U")
    assert list(cols["cluster"]) == ["sq1", "sq2x1", "lambda->1"]


@pytest.fixture(scope="module")
def sweep():
    from phasemap.strain import read_table
    from phasemap.strain.sweep import strain_sweep

    return strain_sweep(read_table("demo"), "mf", n_strain=3, n_mu=9)


def test_strain_sweep_files_and_completion_marker(sweep, tmp_path, monkeypatch):
    out = tmp_path / "sw"
    paths = sweep.save(out, figures=False)
    assert Path(paths[-1]).name == COMPLETE_NAME
    _check(load_netcdf(out / "sweep.nc").attrs, "mf", "K", model=False, table=True)
    for f in ("plateau.csv", "critical.csv"):
        _check(load_csv(out / f)[1], "mf", "K", model=False, table=True)
    _check(json.loads((out / "summary.json").read_text()), "mf", "K", model=False, table=True)
    done = json.loads((out / COMPLETE_NAME).read_text())
    assert done["complete"] and set(done["files"]) == {p.name for p in map(Path, paths[:-1])}
    # a sweep killed while writing leaves no marker: the set is visibly incomplete
    import phasemap.store as store

    real = store.save_csv

    def killed(path, *a, **k):
        if Path(path).name == "critical.csv":
            raise KeyboardInterrupt
        return real(path, *a, **k)

    monkeypatch.setattr(store, "save_csv", killed)
    with pytest.raises(KeyboardInterrupt):
        sweep.save(out, figures=False)
    assert not (out / COMPLETE_NAME).exists() and (out / "sweep.nc").exists()
