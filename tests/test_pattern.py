"""Map files: NeXus NXdata layout (NeXus standard: NX_class, default, signal, axes,
<axis>_indices, units) and atomic writes."""

import os

import h5py
import numpy as np
import pytest

import kinemap as km
from kinemap.errors import ModelFileError


def small_pattern(grid):
    m = km.Model([[0, 0, 0], [1.1, 0.4, 0.2], [2.0, 2.0, 1.0]], ["Fe", "O", "O"], b_iso=0.5)
    return km.scatter(m, grid)


@pytest.mark.parametrize("grid", [
    km.QGrid.plane([0.1, 0, 0], [3, 0, 0], [0, 2, 0.2], (5, 6)),
    km.QGrid.hkl(np.diag([3.0, 4.0, 5.0]), h=(0, 2, 3), k=(-1, 1, 4), l=1),
    km.QGrid.points(np.arange(24.0).reshape(2, 4, 3) / 10),
])
def test_round_trip_and_nexus_layout(tmp_path, grid):
    pat = small_pattern(grid)
    path = pat.save(tmp_path / "map.h5")
    back = km.load_pattern(path)
    assert np.array_equal(back.amplitude, pat.amplitude)
    assert np.array_equal(back.intensity, pat.intensity)
    assert back.grid.kind == grid.kind and back.grid.shape == grid.shape
    np.testing.assert_array_equal(back.grid.q_vectors(), grid.q_vectors())
    assert back.units == "electrons"
    assert back.metadata["probe"]["probe"] == "xray"
    assert back.metadata["kinemap_version"] == km.__version__
    with h5py.File(path) as f:
        assert f.attrs["default"] == "entry"
        assert f["entry"].attrs["NX_class"] == "NXentry" and f["entry"].attrs["default"] == "data"
        data = f["entry/data"]
        assert data.attrs["NX_class"] == "NXdata" and data.attrs["signal"] == "intensity"
        axes = [a.decode() if isinstance(a, bytes) else a for a in data.attrs["axes"]]
        assert len(axes) == max(len(grid.shape), 1)
        for i, name in enumerate(a for a in axes if a != "."):
            assert data.attrs[f"{name}_indices"] == i and "units" in data[name].attrs
    assert [p.name for p in tmp_path.iterdir()] == ["map.h5"]


def test_failed_write_leaves_nothing(tmp_path, monkeypatch):
    pat = small_pattern(km.QGrid.line([0, 0, 0], [1, 0, 0], 4))

    def boom(*a, **k):
        raise RuntimeError("disk full (simulated)")

    monkeypatch.setattr("kinemap.pattern._write_params", boom)
    with pytest.raises(RuntimeError, match="simulated"):
        pat.save(tmp_path / "map.h5")
    assert os.listdir(tmp_path) == []


def test_unwritable_and_foreign_files(tmp_path):
    pat = small_pattern(km.QGrid.line([0, 0, 0], [1, 0, 0], 4))
    with pytest.raises(OSError, match="does not exist"):
        pat.save(tmp_path / "nowhere" / "map.h5")
    other = tmp_path / "other.h5"
    with h5py.File(other, "w") as f:
        f["x"] = 1
    with pytest.raises(ModelFileError, match="/entry/data/intensity"):
        km.load_pattern(other)
    junk = tmp_path / "junk.h5"
    junk.write_bytes(b"not hdf5 at all")
    with pytest.raises(ModelFileError, match="HDF5"):
        km.load_pattern(junk)


def test_to_xarray_coordinates_and_units():
    # Coordinates checked against the grid definition q = 2π(h a* + k b* + l c*) (docs/references.md,
    # Conventions), computed here with NumPy's inverse.
    cell = np.diag([3.0, 4.0, 5.0])
    grid = km.QGrid.hkl(cell, h=(-1, 1, 5), k=(0, 2, 3), l=0.5)
    pat = km.scatter(km.Model([[0.0, 0, 0], [1.5, 0, 0]], "C"), grid, probe="unit")
    da = pat.to_xarray()
    assert da.dims == ("h", "k") and da.shape == (5, 3)
    np.testing.assert_allclose(da["h"].values, np.linspace(-1, 1, 5))
    assert da["h"].attrs["units"] == "r.l.u." and da.attrs["units"] == "1"
    qx = 2 * np.pi * np.linalg.inv(cell).T[0, 0] * da["h"].values
    np.testing.assert_allclose(da["qx"].values[:, 0], qx)
    np.testing.assert_allclose(da.sel(h=0.5, k=1.0).values, pat.intensity[3, 1])
    amp = pat.to_xarray("amplitude")
    assert amp.dtype == np.complex128
    with pytest.raises(km.InvalidInputError, match="no sigma"):
        pat.to_xarray("sigma")
