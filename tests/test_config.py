"""Run configs: packaged demo, reference configs, validation of bad input, resolved round trip."""

import tomllib
from pathlib import Path

import pytest
from _toml_configs import config

from phasemap import ConfigError
from phasemap.config import dumps_toml, load_config, parse_config

ROOT = Path(__file__).resolve().parents[1]

GOOD = config("""
kind = "map"
x = {name = "t", start = 0.0, stop = 0.3, num = 4}
y = {name = "mu", start = -1.0, stop = 7.0, num = 5}
""", figures=None)


def _parse(text):
    return parse_config(tomllib.loads(text), name="t")


def test_demo_config_identical_to_packaged_copy():
    assert (ROOT / "configs" / "demo.toml").read_bytes() == (ROOT / "phasemap" / "data" / "demo.toml").read_bytes()


def test_demo_is_labelled_invented():
    cfg = load_config(ROOT / "phasemap" / "data" / "demo.toml")
    assert cfg.meta["invented"] is True and "invented" in cfg.meta["title"].lower()
    assert {s.kind for s in cfg.scans} == {"map", "curve"}


@pytest.mark.parametrize("name", ["demo.toml", "triangular_hardcore_map.toml", "square_softcore_lobes.toml"])
def test_shipped_configs_validate_and_round_trip(name):
    cfg = load_config(ROOT / "configs" / name)
    again = parse_config(tomllib.loads(dumps_toml(cfg.to_dict())), name=cfg.name)
    assert again.to_dict() == cfg.to_dict()


def test_reference_config_ranges():
    tri = load_config(ROOT / "configs" / "triangular_hardcore_map.toml").scans[0]
    assert (tri.x.name, tri.x.values[0], tri.x.values[-1]) == ("t", 0.0, 0.5)
    assert (tri.y.name, tri.y.values[0], tri.y.values[-1]) == ("mu", -1.0, 7.0)
    sq = load_config(ROOT / "configs" / "square_softcore_lobes.toml")
    assert sq.model.lattice == "square" and not sq.model.hardcore


def test_good_config_defaults():
    cfg = _parse(GOOD)
    s = cfg.scans[0]
    assert s.relative and s.method == "mf" and s.refine and cfg.output.formats == ("png", "pdf")
    assert len(s.x.values) == 4 and s.x.values[-1] == 0.3 and s.chunk >= 1


# (replacement applied to GOOD, expected words in the message)
BAD = [
    (("[model]", "[modle]"), ["modle", "did you mean 'model'"]),
    (("lattice =", "latice ="), ["latice", "did you mean 'lattice'"]),
    (('kind = "map"', 'kind = "map"\nrefien = true'), ["refien", "did you mean 'refine'"]),
    (("t = 0.1", "t = nan"), ["t", "finite"]),
    (('U = "hardcore"', "U = -1.0"), ["U", ">= 0"]),
    (("t = 0.1", "t = [0.1, 0.2]"), ["t", "3 values"]),
    (('U = "hardcore"', "U = 1.0\nn_max = 0"), ["n_max", ">= 1"]),
    (("stop = 0.3", "stop = -0.3"), ["x", "stop must be > start"]),
    (("num = 4", "num = 1"), ["x.num", ">= 2"]),
    (("num = 4", "num = 2.5"), ["x.num", "integer"]),
    (('x = {name = "t", start = 0.0, stop = 0.3, num = 4}', 'x = {name = "t", values = [0.1, 0.0]}'),
     ["x.values", "increasing"]),
    (('name = "t"', 'name = "tt"'), ["x.name", "did you mean 't'"]),
    (('kind = "map"', 'kind = "line"'), ["kind", "'map' or 'curve'"]),
    (('kind = "map"', 'kind = "map"\nmethod = "ed"'), ["method", "not grand canonical", "mf, cmf"]),
    (('kind = "map"', 'kind = "map"\nrefine_tol = 0.5'), ["refine_tol", "<= 0.1"]),
    (("[scan]", "[solver]\nmax_itr = 10\n[scan]"), ["max_itr", "did you mean 'max_iter'"]),
    (("[scan]", "[solver]\nmixing = 1.5\n[scan]"), ["mixing", "<= 1"]),
    (("[scan]", "[thresholds]\ncondensate_tol = -1.0\n[scan]"), ["condensate_tol", "> 0"]),
    (("[scan]", "[output]\nwidth = \"triple\"\n[scan]"), ["width", "single"]),
    (("[scan]", "[output]\nformats = [\"gif\"]\n[scan]"), ["formats", "png"]),
    (('y = {name = "mu"', 'y = {name = "t"'), ["x and y"]),
    (('t = 0.1', 't = -0.1'), ["t", ">= 0"]),
]


@pytest.mark.parametrize("change,words", BAD, ids=[w[0] for _, w in BAD])
def test_bad_config_names_the_field(change, words):
    old, new = change
    assert old in GOOD
    with pytest.raises(ConfigError) as err:
        _parse(GOOD.replace(old, new, 1))
    msg = str(err.value)
    assert "\n" not in msg
    for w in words:
        assert w in msg, msg


def test_bad_branch_every_names_the_field():
    text = GOOD.replace('kind = "map"', 'kind = "map"\nmethod = "cmf:tri3"').replace("[scan]", "[solver]\nbranch_every = -2\n[scan]", 1)
    with pytest.raises(ConfigError) as err:
        _parse(text)
    assert "branch_every" in str(err.value) and ">= 0" in str(err.value), str(err.value)


def test_bad_symmetry_names_the_field():
    text = GOOD.replace('kind = "map"', 'kind = "map"\nmethod = "cmf:tri3"').replace("[scan]", '[solver]\nsymmetry = "yes"\n[scan]', 1)
    with pytest.raises(ConfigError) as err:
        _parse(text)
    assert "symmetry" in str(err.value), str(err.value)


def test_curve_must_scan_mu():
    text = GOOD.replace('kind = "map"', 'kind = "curve"').replace(
        'y = {name = "mu", start = -1.0, stop = 7.0, num = 5}\n', "")
    with pytest.raises(ConfigError, match="scans 'mu'"):
        _parse(text)
    with pytest.raises(ConfigError, match="unknown key 'y'"):
        _parse(GOOD.replace('kind = "map"', 'kind = "curve"'))


def test_invalid_toml_and_missing_file(tmp_path):
    (tmp_path / "bad.toml").write_text("[model\n")
    with pytest.raises(ConfigError, match="not valid TOML"):
        load_config(tmp_path / "bad.toml")
    with pytest.raises(ConfigError, match="does not exist"):
        load_config(tmp_path / "none.toml")
