"""Model validation: bad input fails with a ConfigError that names the offending field.

Source for all checks here: issue 2, item 2 (input validation contract) -- common practice, no
published source.
"""

import math

import pytest

import phasemap
from phasemap.model import ConfigError, Model


def _raises(field, **kw):
    with pytest.raises(ConfigError) as e:
        Model(**kw)
    msg = str(e.value)
    assert msg.startswith(field) or f"{field}:" in msg or f"{field}[" in msg, msg
    return msg


def test_config_error_is_value_error():
    # common practice, no source: callers catching ValueError still catch bad input
    assert issubclass(ConfigError, ValueError)


def test_negative_U_names_U():
    msg = _raises("U", lattice="square", t=0.1, U=-1.0)
    assert "-1" in msg


@pytest.mark.parametrize("field", ["t", "V", "mu", "V2", "U"])
def test_nan_names_field(field):
    kw = dict(lattice="triangular", t=0.1, V=1.0, U=5.0)
    kw[field] = math.nan
    _raises(field, **kw)


def test_nan_inside_per_family_list_names_family():
    msg = _raises("V", lattice="triangular", t=0.1, V=[1.0, math.nan, 1.0])
    assert "d2" in msg


@pytest.mark.parametrize("lattice,values", [("triangular", [1.0, 2.0]), ("triangular", [1, 1, 1, 1]),
                                             ("square", [1.0, 1.0, 1.0])])
@pytest.mark.parametrize("field", ["t", "V"])
def test_wrong_number_of_bond_values(lattice, values, field):
    kw = dict(lattice=lattice, t=0.1, V=1.0)
    kw[field] = values
    msg = _raises(field, **kw)
    nfam = {"triangular": 3, "square": 2}[lattice]
    assert str(nfam) in msg and str(len(values)) in msg, msg


@pytest.mark.parametrize("n_max", [0, -1, 2.5])
def test_n_max_below_one_or_not_integer(n_max):
    _raises("n_max", lattice="square", t=0.1, U=1.0, n_max=n_max)


def test_hardcore_with_n_max_above_one_rejected():
    _raises("n_max", lattice="square", t=0.1, n_max=3)


def test_negative_hopping_rejected_with_reason():
    msg = _raises("t", lattice="triangular", t=-0.1, V=1.0)
    assert "frustrated" in msg or ">= 0" in msg


def test_unknown_lattice_lists_allowed():
    msg = _raises("lattice", lattice="hexagonal", t=0.1)
    assert "triangular" in msg and "square" in msg


@pytest.mark.parametrize("bad,good", [("n_mx", "n_max"), ("latice", "lattice"), ("Vv2", "V2"), ("unti", "unit")])
def test_unknown_key_suggests_closest(bad, good):
    d = {"lattice": "triangular", "t": 0.1, "V": 1.0, bad: 1}
    with pytest.raises(ConfigError) as e:
        Model.from_dict(d)
    msg = str(e.value)
    assert repr(bad) in msg and f"did you mean {good!r}" in msg, msg


def test_valid_model_keeps_values():
    # common practice, no source: isotropic scalars expand to one value per bond family
    m = Model(lattice="triangular", t=0.1, V=[1.0, 1.0, 0.8], U="inf", mu=2.0)
    assert m.t == (0.1, 0.1, 0.1) and m.V == (1.0, 1.0, 0.8)
    assert m.hardcore and m.n_max == 1 and m.z == 6
    assert Model(lattice="square", t=0.1).z == 4
    assert Model.from_dict(m.to_dict()) == m


def test_solve_rejects_non_model_and_unknown_method():
    with pytest.raises(ConfigError, match="model"):
        phasemap.solve({"lattice": "square"})
    with pytest.raises(ConfigError, match="method"):
        phasemap.solve(Model(lattice="square", t=0.1), method="dmrg")
