"""CLI ``phasemap cluster-scaling``: output files, JSON, and exit code 2 on bad input.

Source for the checked number: single-site Mott-lobe tip (zt/U)_c = 3 - 2 sqrt(2)
(Fisher, Weichman, Grinstein, Fisher, PRB 40, 546 (1989)).
"""

import json
import math

import pytest

from phasemap.cli import main


def test_help(capsys):
    with pytest.raises(SystemExit) as e:
        main(["cluster-scaling", "--help"])
    assert e.value.code == 0
    assert "λ" in capsys.readouterr().out


def test_lobe_tip_json_and_files(tmp_path, capsys):
    out = tmp_path / "tip"
    rc = main(["cluster-scaling", "--lattice", "square", "--U", "1", "--n-max", "3", "--t", "0.01",
               "--quantity", "lobe-tip", "--clusters", "sq1,sq2x1", "--json", "--out", str(out)])
    assert rc == 0
    d = json.loads(capsys.readouterr().out)
    assert abs(d["clusters"][0]["value"] * 4 - (3 - 2 * math.sqrt(2))) < 1e-6
    assert d["clusters"][1]["value"] > d["clusters"][0]["value"]
    for ext in ("json", "csv", "png", "pdf"):
        assert (out / f"scaling.{ext}").stat().st_size > 0


@pytest.mark.parametrize("argv, msg", [
    (["--lattice", "square", "--quantity", "lobe-tip", "--clusters", "sq1,sq2x2"], "soft-core"),
    (["--lattice", "square", "--U", "1", "--t", "0.01", "--quantity", "lobe-tip", "--clusters", "sq1,sq9"], "sq9"),
    (["--lattice", "square", "--U", "1", "--t", "0.01", "--quantity", "lobe-tip", "--clusters", "sq1,sq2x2",
      "--option", "tolx=1"], "tolx"),
    (["--V", "1", "--mu", "3", "--quantity", "transition", "--axis", "t", "--lo", "0.3", "--hi", "0.1",
      "--clusters", "tri3,tri6"], "lo < hi"),
    (["--V", "1", "--quantity", "transition", "--axis", "tt", "--lo", "0.1", "--hi", "0.3",
      "--clusters", "tri3,tri6"], "axis"),
    (["--V", "1", "--quantity", "order", "--clusters", "tri3,tri21", "--option", "memory_mb=50"], "too large"),
    (["--t", "abc"], "expected a number"),
])
def test_bad_input_exit_2_nothing_written(tmp_path, capsys, argv, msg):
    out = tmp_path / "o"
    assert main(["cluster-scaling", *argv, "--out", str(out)]) == 2
    assert msg in capsys.readouterr().err
    assert not out.exists()
