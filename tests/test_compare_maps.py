"""Measured maps from files written by h5py alone (not by kinemap), following the NeXus
NXdata rules (NeXus standard, NXdata base class: ``default`` chain, ``signal``, ``axes``,
``<axis>_indices``, ``<signal>_errors``, ``units``; NXsample ``unit_cell_abc`` and
``unit_cell_alphabetagamma``), plain HDF5 datasets and .npy volumes; and the comparison of
maps read by slabs against the same comparison in memory."""

import importlib
import os

import h5py
import numpy as np
import pytest

import kinemap as km
from kinemap.compare import BraggExclusion, open_map
from kinemap.errors import InvalidInputError, ModelFileError

STR = h5py.string_dtype()


def nexus_file(path, signal, axes, *, errors=None, units=None, names=None, indices=None, sample=None,
               extra=None, default=True, old_style=False):
    """Write an NXdata map the way a beamline program might (h5py only)."""
    names = names or [f"ax{i}" for i in range(len(axes))]
    with h5py.File(path, "w") as f:
        if default:
            f.attrs["default"] = "scan"
        e = f.create_group("scan")
        e.attrs["NX_class"] = "NXentry"
        if default:
            e.attrs["default"] = "map"
        g = e.create_group("map")
        g.attrs["NX_class"] = "NXdata"
        ds = g.create_dataset("counts", data=signal)
        if old_style:
            ds.attrs["signal"] = 1
            ds.attrs["axes"] = ":".join(names)
        else:
            g.attrs["signal"] = "counts"
            g.attrs["axes"] = np.array(names, dtype=STR)
        for i, (n, v) in enumerate(zip(names, axes)):
            a = g.create_dataset(n, data=v)
            if units is not None and units[i] is not None:
                a.attrs["units"] = units[i]
            if not old_style:
                g.attrs[f"{n}_indices"] = i if indices is None else indices[i]
        if errors is not None:
            g.create_dataset("counts_errors", data=errors)
        if sample is not None:
            s = e.create_group("sample")
            s.attrs["NX_class"] = "NXsample"
            s.create_dataset("unit_cell_abc", data=sample[:3])
            s.create_dataset("unit_cell_alphabetagamma", data=sample[3:])
        for k, v in (extra or {}).items():
            g.create_dataset(k, data=v)
    return path


def test_inverse_angstrom_axes_and_nanometres(tmp_path, rng):
    qx = np.linspace(-1.0, 1.0, 5)            # 1/angstrom
    qz_nm = np.linspace(2.0, 6.0, 3)          # 1/nm = 0.2 … 0.6 1/angstrom
    data = rng.random((5, 3))
    err = 0.1 + rng.random((5, 3))
    data[1, 2] = np.nan
    path = nexus_file(tmp_path / "m.h5", data, [qx, qz_nm], errors=err, units=["1/angstrom", "1/nm"],
                      names=["qx", "qz"])
    pat = km.load_pattern(path)
    # points: q = (qx, 0, qz) with qz converted from nm⁻¹ (1 nm⁻¹ = 0.1 Å⁻¹)
    want = np.stack(np.meshgrid(qx, qz_nm * 0.1, indexing="ij"), -1).reshape(-1, 2)
    q = pat.grid.q_vectors()
    np.testing.assert_allclose(q[:, 0], want[:, 0], atol=1e-14)
    np.testing.assert_allclose(q[:, 2], want[:, 1], atol=1e-14)
    np.testing.assert_allclose(q[:, 1], 0.0, atol=1e-15)
    np.testing.assert_array_equal(pat.intensity, data)
    np.testing.assert_array_equal(pat.sigma, err)
    assert pat.metadata["signal"] == "/scan/map/counts"


def test_hkl_axes_in_another_order_with_the_file_cell(tmp_path, rng):
    # The file stores the volume as (l, k, h) with a cell in its NXsample; the map comes
    # back in h, k, l order on QGrid.hkl of that cell.
    h = np.linspace(-1, 1, 5)
    k = np.linspace(0, 1, 3)
    l = np.linspace(-0.5, 0.5, 4)
    data = rng.random((4, 3, 5))
    path = nexus_file(tmp_path / "hkl.h5", data, [l, k, h], names=["l", "k", "h"],
                      units=["r.l.u.", "r.l.u.", "r.l.u."], sample=np.array([4.0, 5.0, 6.0, 90.0, 90.0, 90.0]))
    pat = km.load_pattern(path)
    assert pat.grid.kind == "hkl" and pat.grid.shape == (5, 3, 4)
    np.testing.assert_allclose(pat.grid.cell, np.diag([4.0, 5.0, 6.0]), atol=1e-12)
    np.testing.assert_array_equal(pat.intensity, np.transpose(data, (2, 1, 0)))
    hkl = pat.grid.hkl_values().reshape(5, 3, 4, 3)
    np.testing.assert_allclose(hkl[2, 1, 3], [h[2], k[1], l[3]], atol=1e-12)
    # the same through the slab reader (slabs along h, which is the file's last axis)
    src = open_map(path)
    parts = [s[2] for s in src.slabs(2)]
    np.testing.assert_array_equal(np.concatenate(parts), pat.intensity)


def test_bin_edges_old_conventions_and_a_fixed_index(tmp_path, rng):
    edges = np.linspace(-1.05, 1.05, 22)   # 21 bins of 0.1 r.l.u.
    k = np.linspace(0, 2, 11)
    data = rng.random((21, 11))
    path = nexus_file(tmp_path / "hk.h5", data, [edges, k], names=["h", "k"], old_style=True, extra={"l": 0.5})
    pat = km.load_pattern(path, cell=np.eye(3) * 3.0)  # h, k named; no units; l from the scalar dataset
    np.testing.assert_allclose(pat.grid.axis_values[0], 0.5 * (edges[:-1] + edges[1:]), atol=1e-14)
    assert pat.grid.hkl_origin[2] == 0.5
    path2 = nexus_file(tmp_path / "hk2.h5", data, [edges, k], names=["h", "k"])
    with pytest.raises(InvalidInputError, match="no 'l' axis"):
        km.load_pattern(path2, cell=np.eye(3) * 3.0)
    assert km.load_pattern(path2, cell=np.eye(3) * 3.0, fixed={"l": 1.0}).grid.hkl_origin[2] == 1.0


def test_found_without_default_attributes(tmp_path, rng):
    data = rng.random(7)
    path = nexus_file(tmp_path / "nd.h5", data, [np.linspace(0.1, 0.7, 7)], units=["1/angstrom"], default=False)
    pat = km.load_pattern(path)
    np.testing.assert_allclose(pat.grid.q_vectors()[:, 0], np.linspace(0.1, 0.7, 7), atol=1e-14)


@pytest.mark.parametrize("case, error, message", [
    ("no_axes", ModelFileError, "have no axis"),
    ("uneven", ModelFileError, "not evenly spaced"),
    ("mixed", ModelFileError, "mix"),
    ("unknown_units", ModelFileError, "units 'mm'"),
    ("no_cell", InvalidInputError, "no cell"),
    ("two_nxdata", ModelFileError, "2 NXdata groups"),
    ("no_nxdata", ModelFileError, "/entry/data/intensity"),
    ("errors_shape", ModelFileError, "errors"),
])
def test_unreadable_maps_give_clear_errors(tmp_path, rng, case, error, message):
    p = tmp_path / f"{case}.h5"
    data = rng.random((4, 3))
    a0, a1 = np.linspace(0, 1, 4), np.linspace(0, 1, 3)
    if case == "no_axes":
        with h5py.File(p, "w") as f:
            g = f.create_group("d")
            g.attrs["NX_class"] = "NXdata"
            g.attrs["signal"] = "I"
            g["I"] = data
    elif case == "uneven":
        nexus_file(p, data, [np.array([0, 0.1, 0.3, 0.4]), a1], units=["1/angstrom"] * 2)
    elif case == "mixed":
        nexus_file(p, data, [a0, a1], units=["1/angstrom", "r.l.u."])
    elif case == "unknown_units":
        nexus_file(p, data, [a0, a1], units=["mm", "mm"])
    elif case == "no_cell":
        nexus_file(p, data, [a0, a1], names=["h", "k"], extra={"l": 0.0})
    elif case == "two_nxdata":
        with h5py.File(p, "w") as f:
            for name in ("a", "b"):
                g = f.create_group(name)
                g.attrs["NX_class"] = "NXdata"
    elif case == "no_nxdata":
        with h5py.File(p, "w") as f:
            f["x"] = 1
    elif case == "errors_shape":
        nexus_file(p, data, [a0, a1], units=["1/angstrom"] * 2, errors=np.ones((3, 3)))
    with pytest.raises(error, match=message):
        km.load_pattern(p)


def test_plain_dataset_and_npy_with_a_grid(tmp_path, rng):
    grid = km.QGrid.hkl(np.eye(3) * 4.0, h=(-1, 1, 5), k=(0, 1, 3), l=0)
    data = rng.random(grid.shape)
    err = rng.random(grid.shape) + 0.1
    with h5py.File(tmp_path / "plain.h5", "w") as f:
        f["detector/volume"] = data
        f["detector/sigma"] = err
    pat = open_map(tmp_path / "plain.h5", signal="detector/volume", errors="detector/sigma", grid=grid).read()
    np.testing.assert_array_equal(pat.intensity, data)
    np.testing.assert_array_equal(pat.sigma, err)
    np.save(tmp_path / "v.npy", data)
    np.save(tmp_path / "e.npy", err)
    src = open_map(tmp_path / "v.npy", grid=grid, errors=tmp_path / "e.npy")
    back = src.read()
    np.testing.assert_array_equal(back.intensity, data)
    np.testing.assert_array_equal(back.sigma, err)
    with pytest.raises(InvalidInputError, match="give its `grid`"):
        open_map(tmp_path / "v.npy")
    with pytest.raises(InvalidInputError, match="shape"):
        open_map(tmp_path / "v.npy", grid=km.QGrid.line([0, 0, 0], [1, 0, 0], 7))


def test_negative_sigma_in_a_file_is_refused(tmp_path):
    path = nexus_file(tmp_path / "neg.h5", np.ones(4), [np.linspace(0.1, 0.4, 4)], units=["1/angstrom"],
                      errors=np.array([1.0, 1.0, -0.5, 1.0]))
    with pytest.raises(InvalidInputError, match=r"negative at index \(2,\)"):
        km.load_pattern(path)


# ---------------------------------------------------------------------------------------
# slabs from files against maps in memory
# ---------------------------------------------------------------------------------------
@pytest.fixture
def maps(tmp_path, rng):
    """A measured map (NeXus file, h5py only) and a model map on the same hkl grid."""
    cell = np.eye(3) * 4.0
    grid = km.QGrid.hkl(cell, h=(-2, 2, 17), k=(-2, 2, 17), l=(-0.5, 0.5, 5))
    calc = 50 + 40 * np.cos(np.pi * grid.hkl_values()[:, 0]) ** 2 + rng.random(grid.size) * 10
    calc = calc.reshape(grid.shape)
    sig = 0.5 + rng.random(grid.shape)
    meas = 1.3 * calc + 4 + rng.normal(size=grid.shape) * sig
    meas[8, 8, :] = np.nan       # a beamstop
    meas[:, 3, 2] = np.nan       # a detector gap
    h, k, l = (grid.axis_values[i] for i in range(3))
    path = nexus_file(tmp_path / "meas.h5", meas, [h, k, l], names=["h", "k", "l"], errors=sig,
                      units=["r.l.u."] * 3, sample=np.array([4.0, 4, 4, 90, 90, 90]))
    calc_pat = km.Pattern(grid, intensity=calc, units="1")
    calc_path = calc_pat.save(tmp_path / "calc.h5")
    return grid, path, calc_path, calc_pat


def test_streamed_comparison_equals_the_one_in_memory(maps, monkeypatch, tmp_path):
    grid, mpath, cpath, calc = maps
    mask = np.zeros(grid.shape, bool)
    mask[0, :, :] = True
    opts = dict(background="linear", mask=mask, exclude_bragg=BraggExclusion(0.15, "r.l.u.", centring="F"))
    mem = km.compare(calc, km.load_pattern(mpath), **opts)
    monkeypatch.setattr(importlib.import_module("kinemap.compare.maps"), "SLAB_POINTS", 3 * 17 * 5)  # 3 rows
    streamed = km.compare(cpath, mpath, stream=True, **opts)
    assert streamed.metadata["streamed"] and not mem.metadata["streamed"]
    for k in ("scale", "r_factor", "r_factor_bg", "wr_factor", "chi2", "r_exp"):
        assert getattr(streamed, k) == pytest.approx(getattr(mem, k), rel=1e-11), k
    np.testing.assert_allclose(streamed.background_coefficients, mem.background_coefficients, rtol=1e-10)
    assert streamed.n_points == mem.n_points and streamed.excluded == mem.excluded
    assert mem.excluded["unmeasured"] == 5 + 17 and mem.excluded["user_mask"] > 0 and mem.excluded["bragg"] > 0
    np.testing.assert_allclose(streamed.shells(5).r_factor, mem.shells(5).r_factor, rtol=1e-10)
    a = streamed.save(tmp_path / "s.h5")
    b = mem.save(tmp_path / "m.h5")
    with h5py.File(a) as fa, h5py.File(b) as fb:
        for name in ("measured/intensity", "model/intensity", "residual/intensity", "residual/used"):
            # residuals are differences of numbers ~100: compare to rounding of those
            np.testing.assert_allclose(fa["entry/" + name][()], fb["entry/" + name][()], rtol=1e-12, atol=1e-10,
                                       equal_nan=True)


def test_streaming_refuses_what_needs_the_whole_map(maps):
    grid, mpath, cpath, calc = maps
    with pytest.raises(InvalidInputError, match="symmetry averaging needs the whole map"):
        km.compare(cpath, mpath, stream=True, symmetry="m-3m")
    with pytest.raises(InvalidInputError, match="resolution convolution needs the maps in memory"):
        km.compare(cpath, mpath, stream=True, resolution=0.1)
    model = km.Model([[0, 0, 0]], "Fe", box=np.eye(3) * 4.0)
    with pytest.raises(InvalidInputError, match="cannot be compared with a streamed map"):
        km.compare(model, mpath, stream=True)
    with pytest.raises(InvalidInputError, match="already in memory"):
        km.compare(calc, calc, stream=True)


def test_files_are_not_modified_and_outputs_are_new(maps, tmp_path):
    grid, mpath, cpath, calc = maps
    before = os.stat(mpath).st_mtime_ns
    cmp = km.compare(cpath, mpath)
    with pytest.raises(InvalidInputError, match="also an input"):
        cmp.save(mpath, overwrite=True)
    assert os.stat(mpath).st_mtime_ns == before


def test_large_file_maps_stream_unless_something_needs_them_whole(maps, monkeypatch):
    # Left to decide (stream=None), maps read from files go by slabs when they would not fit
    # comfortably in memory; a model to compute on the grid needs the map whole.
    grid, mpath, cpath, calc = maps
    maps_mod = importlib.import_module("kinemap.compare.maps")
    monkeypatch.setattr(maps_mod, "available_memory", lambda: 4 * grid.size * 8)  # "too small"
    assert km.compare(cpath, mpath).metadata["streamed"]
    model = km.Model(np.zeros((1, 3)), "Fe", box=np.eye(3) * 4.0)
    assert not km.compare(model, mpath, background="none").metadata["streamed"]
    assert not km.compare(cpath, mpath, stream=False).metadata["streamed"]
