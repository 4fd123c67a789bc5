"""Malformed input is a clean refusal: exit code 2, one line on stderr naming the field (and the
allowed range), no traceback, nothing written, before any work (issue 12 and more).

Source: the project's rule for bad input (DEVELOPERS.md conventions); no physics values here.
"""

import os
import stat
from pathlib import Path

import pytest
from _toml_configs import CURVE5

from phasemap.cli import main

GOOD_CFG = CURVE5

SOFT_CFG = GOOD_CFG.replace('U = "hardcore"', "U = 1.0\nn_max = NMAX").replace('lattice = "triangular"',
                                                                                'lattice = "square"')

DEMO_TABLE = (Path(__file__).resolve().parents[1] / "phasemap" / "data" / "strain_demo.csv").read_text(encoding="utf-8")

TABLE = """# unit = K
# lattice = triangular
strain,t,V
0.00,0.5,6.0
0.05,0.6,5.8
0.10,0.7,5.6
"""

NOT_WRITABLE = "/proc/phasemap-not-writable/out"  # /proc takes no new entries, even for root


def _files(tmp_path):
    """Everything in the test folder (path, size, mtime) — to prove nothing was written."""
    out = {}
    for root, dirs, files in os.walk(tmp_path):
        for n in dirs + files:
            p = Path(root) / n
            st = p.lstat()
            out[str(p.relative_to(tmp_path))] = (stat.S_IFMT(st.st_mode), st.st_size, st.st_mtime_ns)
    return out


def _inputs(d: Path) -> None:
    d.mkdir()
    (d / "good.toml").write_text(GOOD_CFG)
    (d / "afile").write_text("not a folder")
    (d / "table.csv").write_text(TABLE)
    (d / "latin1.csv").write_bytes(TABLE.replace("# lattice = triangular", "# description = Gr\xfcneisen").encode("latin-1"))
    (d / "huge_strain.csv").write_text(TABLE.replace("0.10,0.7", "1e308,0.7"))
    (d / "lattise.csv").write_text(TABLE.replace("# lattice = triangular", "# lattise = square"))
    (d / "bool_t.toml").write_text(GOOD_CFG.replace("t = 0.1", "t = true"))
    (d / "bool_V.toml").write_text(GOOD_CFG.replace("V = 1.0", "V = [1.0, false, 1.0]"))
    (d / "bool_mu.toml").write_text(GOOD_CFG.replace("V = 1.0", "V = 1.0\nmu = true"))
    (d / "nmax_huge.toml").write_text(SOFT_CFG.replace("NMAX", "100000"))
    (d / "nmax_memory.toml").write_text(SOFT_CFG.replace("NMAX", "900").replace('lattice = "square"',
                                                                               'lattice = "triangular"'))
    (d / "a_folder.toml").mkdir()
    os.mkfifo(d / "fifo.toml")
    (d / "out_is_file.toml").write_text(GOOD_CFG.replace("figures = false", 'figures = false\nfolder = "inputs/afile"'))
    (d / "table.xlsx").write_text("strain,t,V\n")
    (d / "bool_strain.toml").write_text('unit = "K"\n[[row]]\nstrain = true\nt = 0.5\nV = 6.0\n'
                                        '[[row]]\nstrain = 0.1\nt = 0.6\nV = 6.0\n')
    (d / "empty.csv").write_text("")


SWEEP = ["strain-sweep", "inputs/table.csv", "--no-figures", "--n-strain", "3", "--n-mu", "9"]
EXACT = ["exact", "--t", "0.1", "--V", "1", "--cluster", "tri9", "--no-figure"]
SCALING = ["cluster-scaling", "--lattice", "square", "--U", "1", "--n-max", "3", "--t", "0.01", "--quantity",
           "lobe-tip", "--clusters", "sq1,sq2x1"]

# (argv, words that must appear in the one-line message)
CASES = {
    # --out unusable, for every command that writes a folder (checked before any work)
    **{f"{name}-out-{kind}": (argv + ["--out", out], ["--out", why])
       for name, argv in (("sweep", SWEEP), ("run", ["run", "inputs/good.toml", "--quiet"]),
                          ("demo", ["demo", "--points", "2", "--quiet"]), ("exact", EXACT), ("scaling", SCALING))
       for kind, out, why in (("file", "inputs/afile", "not a folder"), ("under-file", "inputs/afile/sub", "file"),
                              ("not-writable", NOT_WRITABLE, "not writable"))},
    # the output path is checked first, before the inputs are read
    "sweep-out-checked-first": (["strain-sweep", "inputs/latin1.csv", "--out", "inputs/afile"], ["--out", "not a folder"]),
    "exact-out-checked-first": (EXACT + ["--mf-methods", "foo", "--out", "inputs/afile"], ["--out", "not a folder"]),
    "scaling-out-checked-first": (SCALING + ["--filling", "-1", "--out", "inputs/afile"], ["--out", "not a folder"]),
    "run-output-folder-is-file": (["run", "inputs/out_is_file.toml", "--quiet"], ["[output] folder", "not a folder"]),
    # configs that cannot be read, or are not files
    "config-is-folder": (["run", "inputs/a_folder.toml"], ["config", "folder"]),
    "config-is-fifo": (["run", "inputs/fifo.toml"], ["config", "not a regular file"]),
    "config-missing": (["run", "inputs/nope.toml"], ["config", "does not exist"]),
    "scaling-config-is-folder": (["cluster-scaling", "--config", "inputs/a_folder.toml"], ["config", "folder"]),
    "table-is-folder": (["strain-check", "inputs/a_folder.toml", "--strain", "0"], ["table", "folder"]),
    "table-is-fifo": (["strain-check", "inputs/fifo.toml", "--strain", "0"], ["table", "not a regular file"]),
    "table-not-utf8": (["strain-check", "inputs/latin1.csv", "--strain", "0.05"], ["latin1.csv", "UTF-8"]),
    "table-unknown-format": (["strain-check", "inputs/table.xlsx", "--strain", "0"], ["table", ".csv, .toml"]),
    "table-empty": (["strain-check", "inputs/empty.csv", "--strain", "0"], ["empty.csv"]),
    # numbers out of range or of the wrong kind
    "table-strain-1e308": (["strain-check", "inputs/huge_strain.csv", "--strain", "0.05"], ["strain", "<="]),
    "strain-1e308-extrapolated": (["strain-check", "inputs/table.csv", "--strain", "1e308", "--extrapolate"],
                                  ["strain", "extrapolat"]),
    "table-strain-bool": (["strain-check", "inputs/bool_strain.toml", "--strain", "0.05"], ["strain", "number"]),
    "model-t-bool": (["run", "inputs/bool_t.toml"], ["[model]", "t", "number", "True"]),
    "model-V-bool": (["run", "inputs/bool_V.toml"], ["[model]", "V", "number"]),
    "model-mu-bool": (["run", "inputs/bool_mu.toml"], ["[model]", "mu", "number"]),
    "n_max-100000-run": (["run", "inputs/nmax_huge.toml", "--out", "o"], ["n_max", "<="]),
    "n_max-900-memory-estimate": (["run", "inputs/nmax_memory.toml", "--out", "o"], ["n_max", "GiB", "<="]),
    "strain-check-mu-1e300": (["strain-check", "inputs/table.csv", "--strain", "0.05", "--mu", "1e300"], ["--mu", "<="]),
    "mu-1e308": (["point", "--U", "1", "--mu", "1e308"], ["mu", "<="]),
    "t-1e308": (["point", "--t", "1e308", "--V", "1"], ["t", "<="]),
    "default-n_max-from-tiny-U": (["point", "--U", "1e-300", "--mu", "1"], ["n_max", "<="]),
    "n_max-100000-point": (["point", "--lattice", "square", "--U", "1", "--n-max", "100000", "--t", "0.01"],
                           ["n_max", "<="]),
    "table-unknown-meta": (["strain-check", "inputs/lattise.csv", "--strain", "0.05"], ["lattise", "lattice"]),
    "exact-mf-methods-unknown": (EXACT + ["--mf-methods", "foo"], ["--mf-methods", "foo"]),
    "fraction-1.5-hardcore": (["strain-check", "inputs/table.csv", "--strain", "0.05", "--fraction", "1.5"],
                              ["fraction", "hard-core", "< 1"]),
    "fraction-2-hardcore": (["strain-check", "inputs/table.csv", "--strain", "0.05", "--fraction", "2"],
                            ["fraction", "< 1"]),
    "fraction-2-sweep": (SWEEP + ["--out", "o", "--fraction", "2"], ["fraction", "< 1"]),
    "fraction-0": (["strain-check", "inputs/table.csv", "--strain", "0.05", "--fraction", "0"], ["fraction", "> 0"]),
    "lambda-empty-item": (SWEEP + ["--out", "o", "--lambda", "0.8,,1.2"], ["lambda", "empty"]),
    "lambda-huge-count": (SWEEP + ["--out", "o", "--lambda", "0.8:1.2:1000000"], ["lambda", "<="]),
    "lambda-zero-count": (SWEEP + ["--out", "o", "--lambda", "0.8:1.2:0"], ["lambda"]),
    "sweep-n-mu-huge": (SWEEP[:-2] + ["--n-mu", "100000000", "--out", "o"], ["--n-mu", "<="]),
    "sweep-n-strain-huge": (SWEEP[:3] + ["--n-strain", "100000000", "--out", "o"], ["--n-strain", "<="]),
    "scaling-filling-negative": (SCALING + ["--filling", "-1"], ["filling", ">= 1"]),
    "scaling-filling-at-cutoff": (SCALING + ["--filling", "3"], ["filling", "n_max"]),
    "exact-budget-negative": (EXACT + ["--budget-gib", "-1"], ["--budget-gib", "> 0"]),
    "exact-observable-unknown": (EXACT + ["--observables", "sq,foo"], ["--observables", "foo"]),
    "point-cluster-unknown": (["point", "--method", "cmf", "--cluster", "tri999"], ["tri999"]),
    # cmf-scaled (cluster mean field extrapolated in λ): refused before any cluster is solved
    "cmf-scaled-one-cluster": (["strain-check", "inputs/table.csv", "--strain", "0.05", "--method", "cmf-scaled:3"],
                               ["cmf-scaled:3", "two clusters", "λ"]),
    "cmf-scaled-same-lambda": (["strain-check", "inputs/table.csv", "--strain", "0.05", "--method",
                                "cmf-scaled:12+15"], ["two clusters", "different λ"]),
    "cmf-scaled-site-decoupled": (["strain-check", "inputs/table.csv", "--strain", "0.05", "--method",
                                   "cmf-scaled:tri3-sd+tri3"], ["tri3-sd", "λ = 0"]),
    "cmf-scaled-twice": (SWEEP + ["--out", "o", "--methods", "cmf-scaled:3+6+3"], ["cmf-scaled", "twice"]),
    "cmf-scaled-unknown-cluster": (SWEEP + ["--out", "o", "--methods", "mf,cmf-scaled:3+999"], ["tri999"]),
    "cmf-scaled-point": (["point", "--method", "cmf-scaled"], ["cmf-scaled", "strain workflow"]),
}


@pytest.mark.parametrize("case", sorted(CASES))
def test_refused_cleanly(case, tmp_path, monkeypatch, capsys):
    argv, words = CASES[case]
    monkeypatch.chdir(tmp_path)
    _inputs(tmp_path / "inputs")
    before = _files(tmp_path)
    try:
        rc = main(argv)
    except SystemExit as e:
        rc = e.code
    cap = capsys.readouterr()
    err = cap.err
    assert rc == 2, (rc, err)
    assert err.count("\n") == 1 and err.startswith("phasemap"), err
    assert "Traceback" not in err and cap.out == "", (cap.out, err)
    for w in words:
        assert w in err, (w, err)
    assert _files(tmp_path) == before  # nothing written, nothing created


def test_unreadable_config_is_refused(tmp_path, monkeypatch, capsys):
    # root reads every file, so the permission error is simulated where the file is read
    cfg = tmp_path / "c.toml"
    cfg.write_text(GOOD_CFG)

    def deny(self, *a, **k):
        raise PermissionError(13, "Permission denied", str(self))

    monkeypatch.setattr(Path, "read_text", deny)
    monkeypatch.setattr(Path, "read_bytes", deny)
    rc = main(["run", str(cfg), "--out", str(tmp_path / "o")])
    err = capsys.readouterr().err
    assert rc == 2 and err.count("\n") == 1 and "config" in err and "Permission denied" in err, err
    assert not (tmp_path / "o").exists()


@pytest.mark.parametrize("name,text", [("t.csv", TABLE), ("t.toml", 'unit = "K"\n[[row]]\nstrain = 0.0\nt = 0.5\nV = 6.0\n'
                                                                    '[[row]]\nstrain = 0.1\nt = 0.6\nV = 6.0\n')])
def test_byte_order_mark_is_accepted_in_tables(tmp_path, name, text):
    from phasemap.strain import read_table

    p = tmp_path / name
    p.write_bytes(b"\xef\xbb\xbf" + text.encode())
    t = read_table(p)
    assert t.unit == "K" and t.n_rows in (2, 3)


def test_byte_order_mark_is_accepted_in_configs(tmp_path):
    from phasemap.config import load_config

    p = tmp_path / "bom.toml"
    p.write_bytes(b"\xef\xbb\xbf" + GOOD_CFG.encode())
    assert load_config(p).model.t == (0.1, 0.1, 0.1)


def test_resume_refusal_names_the_changed_field(tmp_path, capsys):
    import tomllib

    from phasemap.config import parse_config
    from phasemap.runner import checkpoint_params
    from phasemap.store import ChunkStore

    doc = tomllib.loads(GOOD_CFG.replace('kind = "curve"', 'kind = "map"').replace(
        "refine = false", 'y = {name = "t", start = 0.0, stop = 0.2, num = 3}\nrefine = false'))
    cfg = parse_config(doc, name="m")
    ChunkStore(tmp_path / ".checkpoint" / "m", checkpoint_params(cfg, cfg.scans[0]))
    doc["model"]["V"] = 2.0
    p = tmp_path / "m.toml"
    from phasemap.config import dumps_toml

    p.write_text(dumps_toml(doc))
    rc = main(["run", str(p), "--out", str(tmp_path), "--resume", "--quiet"])
    err = capsys.readouterr().err
    assert rc == 2 and err.count("\n") == 1 and "model.V" in err and "2.0" in err, err
