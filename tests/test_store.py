"""Store: atomic writes, NetCDF/CSV round trips, resumable chunk checkpoints."""

import json
import os
import stat

import numpy as np
import pytest
import xarray as xr

from phasemap import ConfigError, Model
from phasemap.scan import phase_map
from phasemap.store import (ChunkStore, atomic_path, curve_to_dataset, load_csv, load_netcdf, save_csv,
                            save_netcdf)


def _leftovers(folder):
    return [p.name for p in folder.iterdir() if ".tmp" in p.name]


def test_atomic_path_leaves_nothing_on_error(tmp_path):
    target = tmp_path / "x.nc"
    with pytest.raises(RuntimeError):
        with atomic_path(target) as tmp:
            tmp.write_text("half")
            raise RuntimeError("crash while writing")
    assert not target.exists() and _leftovers(tmp_path) == []


def test_atomic_path_replaces_existing(tmp_path):
    target = tmp_path / "a.txt"
    target.write_text("old")
    with atomic_path(target) as tmp:
        tmp.write_text("new")
    assert target.read_text() == "new" and _leftovers(tmp_path) == []
    mask = os.umask(0)
    os.umask(mask)
    assert stat.S_IMODE(target.stat().st_mode) == 0o666 & ~mask  # not mkstemp's private 0600


def _synthetic():
    ds = xr.Dataset(
        {"label": (("t", "mu"), np.array([["empty", "solid 1/3"], ["superfluid", "unconverged"]], dtype=object)),
         "converged": (("t", "mu"), np.array([[True, True], [True, False]])),
         "energy": (("t", "mu"), np.arange(4.0).reshape(2, 2)),
         "boundary_from": ("bpoint", np.zeros(0, dtype=str))},
        coords={"t": [0.0, 0.1], "mu": [-1.0, 2.5], "site": [0, 1], "site_i": ("site", [0, 1])},
        attrs={"x_axis": "t", "y_axis": "mu", "model": json.dumps({"U": "inf"}), "flag": True,
               "extra": {"a": [1, 2]}, "none": None, "scale": 1.5})
    return ds


def test_netcdf_round_trip_keeps_coords_attrs_and_strings(tmp_path):
    ds = _synthetic()
    save_netcdf(ds, tmp_path / "s.nc")
    back = load_netcdf(tmp_path / "s.nc")
    for c in ("t", "mu", "site_i"):
        np.testing.assert_array_equal(back[c].values, ds[c].values)
    assert back["label"].values.tolist() == ds["label"].values.tolist()
    assert back["converged"].dtype == bool and back["converged"].values.tolist() == [[True, True], [True, False]]
    assert back.attrs["x_axis"] == "t" and back.attrs["scale"] == 1.5
    assert json.loads(back.attrs["extra"]) == {"a": [1, 2]} and back.attrs["flag"] == 1
    assert back.sizes["bpoint"] == 0


def test_netcdf_round_trip_of_a_real_map(tmp_path):
    m = Model(lattice="triangular", t=0.1, V=1.0)
    ds = phase_map(m, x=("t", [0.0, 0.1, 0.3]), y=("mu", [-0.5, 1.5, 4.0, 7.5]), refine=False, progress=False)
    save_netcdf(ds, tmp_path / "m.nc")
    back = load_netcdf(tmp_path / "m.nc")
    assert back.attrs == ds.attrs
    xr.testing.assert_equal(back[["t", "mu"]], ds[["t", "mu"]])
    assert back["label"].values.tolist() == ds["label"].values.tolist()
    np.testing.assert_array_equal(back["densities"].values, ds["densities"].values)


def test_load_netcdf_rejects_missing_and_garbage(tmp_path):
    with pytest.raises(ConfigError, match="does not exist"):
        load_netcdf(tmp_path / "none.nc")
    (tmp_path / "bad.nc").write_text("not netcdf")
    with pytest.raises(ConfigError, match="not a readable NetCDF"):
        load_netcdf(tmp_path / "bad.nc")


def test_csv_round_trip_with_metadata(tmp_path):
    cols = {"mu": np.array([-1.0, 0.5, 2.0]), "filling": np.array([0.0, 1 / 3, 0.5]),
            "label": np.array(["empty", "solid 1/3", "superfluid"]), "converged": np.array([True, True, False])}
    meta = {"model": {"lattice": "triangular", "U": "inf"}, "x_label": "μ/V", "plateaus": [{"fraction": "1/3"}]}
    save_csv(tmp_path / "c.csv", cols, meta)
    text = (tmp_path / "c.csv").read_text(encoding="utf-8")
    assert text.startswith("# model: ")
    back, m = load_csv(tmp_path / "c.csv")
    assert m == meta
    np.testing.assert_array_equal(back["mu"], cols["mu"])
    np.testing.assert_allclose(back["filling"], cols["filling"], rtol=0, atol=0)  # repr round-trips exactly
    assert back["label"].tolist() == cols["label"].tolist() and back["converged"].tolist() == [1, 1, 0]
    ds = curve_to_dataset(back, m)
    assert ds["filling"].dims == ("mu",) and json.loads(ds.attrs["plateaus"]) == [{"fraction": "1/3"}]


def test_chunkstore_save_load_and_mismatch(tmp_path):
    params = {"model": {"t": [0.1]}, "chunk": 4}
    ck = ChunkStore(tmp_path / "ck", params)
    assert ck.load(0) is None
    ck.save(0, {"x": np.arange(3.0), "label": np.array(["a", "bb", "c"], dtype=object)})
    again = ChunkStore(tmp_path / "ck", params)
    got = again.load(0)
    np.testing.assert_array_equal(got["x"], np.arange(3.0))
    assert got["label"].tolist() == ["a", "bb", "c"] and again.chunks() == [0]
    with pytest.raises(ConfigError, match="different scan"):
        ChunkStore(tmp_path / "ck", {**params, "chunk": 5})
    (tmp_path / "ck" / "chunk_00001.npz").write_bytes(b"garbage")
    assert again.load(1) is None  # unreadable chunk -> recomputed, not trusted
    ChunkStore(tmp_path / "ck", params, resume=False)
    assert again.chunks() == []


def test_chunkstore_remove_takes_the_temporaries_of_a_killed_writer(tmp_path):
    # a run SIGKILLed inside ChunkStore.save leaves atomic_path's temporary file behind; the folder must
    # still go away when the resumed run finishes (seen once in CI: tests/test_resume_kill.py)
    params = {"model": {"t": [0.1]}, "chunk": 4}
    ck = ChunkStore(tmp_path / "ck", params)
    ck.save(0, {"x": np.arange(3.0)})
    with pytest.raises(KeyboardInterrupt), atomic_path(ck.folder / "chunk_00001.npz") as tmp:
        tmp.write_bytes(b"half")
        left = tmp
        raise KeyboardInterrupt
    stale = ck.folder / left.name  # what SIGKILL would have left (atomic_path cleans up on exceptions)
    stale.write_bytes(b"half")
    assert ck.chunks() == [0]  # the temporary is not a chunk
    ck.remove()
    assert not ck.folder.exists()


class _Interrupting:
    """Checkpoint wrapper that raises after ``stop_after`` saves (a simulated crash)."""

    def __init__(self, store, stop_after=None):
        self.store, self.stop_after, self.saved, self.loaded = store, stop_after, [], []

    def load(self, i):
        part = self.store.load(i)
        if part is not None:
            self.loaded.append(i)
        return part

    def save(self, i, part):
        self.store.save(i, part)
        self.saved.append(i)
        if self.stop_after is not None and len(self.saved) >= self.stop_after:
            raise KeyboardInterrupt


def test_interrupted_scan_resumes_to_identical_result(tmp_path):
    m = Model(lattice="triangular", t=0.1, V=1.0)
    axes = dict(x=("t", [0.0, 0.1, 0.3]), y=("mu", [-0.5, 1.5, 3.0, 4.5, 7.5]))
    kw = dict(refine=False, progress=False, chunk=4)  # 15 points -> 4 chunks
    params = {"model": m.to_dict(), "axes": {k: list(v[1]) for k, v in axes.items()}, "chunk": 4}
    first = _Interrupting(ChunkStore(tmp_path / "ck", params), stop_after=2)
    with pytest.raises(KeyboardInterrupt):
        phase_map(m, **axes, checkpoint=first, **kw)
    assert first.saved == [0, 1]
    second = _Interrupting(ChunkStore(tmp_path / "ck", params, resume=True))
    resumed = phase_map(m, **axes, checkpoint=second, **kw)
    assert second.loaded == [0, 1] and second.saved == [2, 3]
    fresh = phase_map(m, **axes, **kw)
    xr.testing.assert_identical(resumed, fresh)
    with pytest.raises(ConfigError, match="different scan"):
        ChunkStore(tmp_path / "ck", {**params, "model": m.replace(t=0.2).to_dict()})
