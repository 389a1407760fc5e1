"""H5MD 1.1 reading and writing.

The files here are written directly with h5py following the H5MD 1.1 specification
(de Buyl, Colberg & Höfling, Comput. Phys. Commun. 185 (2014) 1546; layout as summarised in
docs/references.md, File formats): ``particles/<group>/position/{step,time,value}``, ``box`` with attributes
``dimension`` and ``boundary`` and data element ``edges``, ``species`` as an enumeration or
integers. The reference for every read-back is the NumPy array the test wrote.
"""

import h5py
import numpy as np
import pytest

import kinemap as km
from kinemap.errors import InvalidInputError, ModelFileError
from kinemap.io import H5MDWriter, open_model, write_h5md
from kinemap.io.h5md import open_h5md


def write_h5md_by_hand(path, positions, species, *, edges=None, boundary=("periodic",) * 3, enum=None,
                       unit=None, edges_td=None, group="all", steps=None, image=None, species_attrs=None,
                       position_td=True):
    """A minimal H5MD file written with plain h5py (the test's own reading of the spec)."""
    positions = np.asarray(positions)
    with h5py.File(path, "w") as f:
        h = f.create_group("h5md")
        h.attrs["version"] = np.array([1, 1])
        h.create_group("author").attrs["name"] = "test"
        h.create_group("creator").attrs["name"] = "handwritten"
        g = f.create_group(f"particles/{group}")
        if position_td:
            pos = g.create_group("position")
            v = pos.create_dataset("value", data=positions)
            n_frames = positions.shape[0]
            pos.create_dataset("step", data=np.arange(n_frames) * 10 if steps is None else steps)
            pos.create_dataset("time", data=np.arange(n_frames) * 0.5)
        else:
            v = g.create_dataset("position", data=positions)
        if unit is not None:
            v.attrs["unit"] = unit
        box = g.create_group("box")
        dim = positions.shape[-1]
        box.attrs["dimension"] = dim
        box.attrs["boundary"] = np.array(list(boundary)[:dim], dtype=h5py.string_dtype())
        if edges is not None:
            e = box.create_dataset("edges", data=edges)
            if unit is not None:
                e.attrs["unit"] = unit
        if edges_td is not None:
            eg = box.create_group("edges")
            eg.create_dataset("value", data=edges_td)
            eg.create_dataset("step", data=np.arange(len(edges_td)) * 10)
        if enum is not None:
            ds = g.create_dataset("species", data=np.asarray(species, dtype=np.int8),
                                  dtype=h5py.enum_dtype(enum, basetype=np.int8))
        else:
            ds = g.create_dataset("species", data=np.asarray(species))
        for k, val in (species_attrs or {}).items():
            ds.attrs[k] = val
        if image is not None:
            ig = g.create_group("image")
            ig.create_dataset("value", data=image)
    return path


TRICLINIC = np.array([[10.0, 0.0, 0.0], [3.0, 9.0, 0.0], [1.5, -2.0, 11.0]])
CUBOID = np.array([12.0, 13.0, 14.0])


@pytest.mark.parametrize("box_kind", ["triclinic", "cuboid"])
@pytest.mark.parametrize("species_kind", ["enumeration", "integer"])
def test_read_back_exactly(tmp_path, rng, box_kind, species_kind):
    n_frames, n = 4, 1000
    pos = rng.uniform(-5, 15, (n_frames, n, 3))
    codes = rng.integers(0, 3, n)
    names = {"Fe": 0, "Ni": 1, "O": 2}
    edges = TRICLINIC if box_kind == "triclinic" else CUBOID
    path = write_h5md_by_hand(tmp_path / "t.h5", pos, codes, edges=edges,
                              enum=names if species_kind == "enumeration" else None)
    smap = None if species_kind == "enumeration" else {0: "Fe", 1: "Ni", 2: "O"}
    labels = np.array(["Fe", "Ni", "O"], dtype=object)[codes]
    expected_cell = TRICLINIC if box_kind == "triclinic" else np.diag(CUBOID)
    base = open_model(path, species_map=smap)
    assert base.n_frames == n_frames and base.n_atoms == n
    assert base.species_labels() == ["Fe", "Ni", "O"]
    for f in range(n_frames):
        src = base.at_frame(f)
        np.testing.assert_array_equal(src.cell, expected_cell)
        chunks = list(src.iter_chunks(333))  # uneven chunks: 333, 333, 333, 1
        assert [c.n_atoms for c in chunks] == [333, 333, 333, 1]
        got = np.concatenate([c.positions for c in chunks])
        np.testing.assert_array_equal(got, pos[f])  # exact: same float64 values
        np.testing.assert_array_equal(np.concatenate([c.species for c in chunks]), labels)
        d = src.describe()
        assert d["frame"] == f and d["step"] == 10 * f and d["time"] == 0.5 * f
        assert d["file"] == str(path)


def test_units_nm_converted_to_angstrom(tmp_path, rng):
    # H5MD unit attribute "nm"; 1 nm = 10 Å (SI definition of the ångström).
    pos = rng.uniform(0, 2, (1, 50, 3))
    path = write_h5md_by_hand(tmp_path / "nm.h5", pos, np.zeros(50, int), edges=np.array([2.0, 2.0, 2.0]),
                              enum={"Si": 0}, unit="nm")
    src = open_model(path)
    np.testing.assert_allclose(src.read().positions, pos[0] * 10.0, rtol=1e-15)
    np.testing.assert_allclose(src.cell, np.diag([20.0, 20.0, 20.0]), rtol=1e-15)


def test_time_dependent_box_and_2d(tmp_path, rng):
    pos2 = rng.uniform(0, 5, (3, 20, 2))
    edges_td = np.array([np.diag([5.0, 6.0]) * (1 + 0.01 * i) for i in range(3)])
    path = write_h5md_by_hand(tmp_path / "td.h5", pos2, np.zeros(20, int), edges_td=edges_td, enum={"C": 0})
    src = open_model(path, frame=2)
    m = src.read()
    np.testing.assert_array_equal(m.positions[:, :2], pos2[2])
    np.testing.assert_array_equal(m.positions[:, 2], 0.0)
    np.testing.assert_allclose(src.cell[:2, :2], edges_td[2])
    np.testing.assert_array_equal(src.cell[2], [0, 0, 1])


def test_time_independent_position_and_string_species(tmp_path, rng):
    pos = rng.uniform(0, 5, (30, 3))
    sp = np.array(["Fe", "O"] * 15, dtype=h5py.string_dtype())
    path = write_h5md_by_hand(tmp_path / "ti.h5", pos, sp, edges=CUBOID, position_td=False)
    src = open_model(path)
    assert src.n_frames == 1
    m = src.read()
    np.testing.assert_array_equal(m.positions, pos)
    assert list(m.species) == ["Fe", "O"] * 15


def test_integer_species_names_attribute(tmp_path, rng):
    path = write_h5md_by_hand(tmp_path / "names.h5", rng.uniform(0, 1, (1, 4, 3)), [0, 1, 1, 0], edges=CUBOID,
                              species_attrs={"names": np.array(["Na", "Cl"], dtype=h5py.string_dtype())})
    assert list(open_model(path).read().species) == ["Na", "Cl", "Cl", "Na"]


def test_unwrap_with_image_flags(tmp_path, rng):
    pos = rng.uniform(0, 10, (2, 10, 3))
    img = rng.integers(-2, 3, (2, 10, 3))
    path = write_h5md_by_hand(tmp_path / "img.h5", pos, np.zeros(10, int), edges=TRICLINIC, enum={"Ar": 0}, image=img)
    got = open_model(path, frame=1, unwrap=True).read().positions
    # r_unwrapped = r + n·(rows a, b, c): H5MD 1.1 image convention.
    np.testing.assert_allclose(got, pos[1] + img[1] @ TRICLINIC, rtol=0, atol=1e-12)
    np.testing.assert_array_equal(open_model(path, frame=1).read().positions, pos[1])


def test_scatter_streams_the_same_as_in_memory(tmp_path, rng):
    """scatter() on a streamed source equals the NumPy direct sum on the same atoms."""
    from conftest import numpy_amplitude

    pos = rng.uniform(0, 20, (2, 700, 3))
    codes = rng.integers(0, 2, 700)
    path = write_h5md_by_hand(tmp_path / "s.h5", pos, codes, edges=np.array([20.0, 20, 20]), enum={"A": 0, "B": 1})
    grid = km.QGrid.points(rng.uniform(-3, 3, (40, 3)))
    pat = km.scatter(open_model(path, frame=1, species_map={0: "A", 1: "B"}), grid, probe="unit", chunk_atoms=128)
    ref = numpy_amplitude(pos[1], grid.q, np.ones((40, 700)))
    np.testing.assert_allclose(pat.amplitude, ref, rtol=1e-10, atol=1e-9 * np.abs(ref).max())
    assert pat.metadata["model"]["file"] == str(path) and pat.metadata["model"]["frame"] == 1


def test_reads_are_bounded_hyperslabs(tmp_path, rng, monkeypatch):
    """Every read of the position dataset returns at most one chunk of atoms."""
    n = 5000
    path = write_h5md_by_hand(tmp_path / "b.h5", rng.uniform(0, 1, (2, n, 3)), np.zeros(n, int),
                              edges=CUBOID, enum={"Cu": 0})
    sizes = []
    orig = h5py.Dataset.__getitem__

    def spy(self, key):
        out = orig(self, key)
        if self.name.endswith("position/value"):
            sizes.append(np.asarray(out).shape)
        return out

    monkeypatch.setattr(h5py.Dataset, "__getitem__", spy)
    src = open_model(path, frame=1)
    total = sum(c.n_atoms for c in src.iter_chunks(700))
    assert total == n
    assert sizes and max(s[0] for s in sizes) == 700 and all(len(s) == 2 for s in sizes)


# ---------------------------------------------------------------------------- writer
def test_writer_round_trip_and_layout(tmp_path, rng):
    cell = TRICLINIC
    sp = rng.choice(["Fe", "Ni"], 200).tolist()
    frames = [km.Model(rng.uniform(0, 10, (200, 3)), sp, cell=cell, b_iso=0.5) for _ in range(3)]
    path = write_h5md(tmp_path / "w.h5md", frames, steps=[0, 100, 200])
    with h5py.File(path) as f:  # the spec's layout, read with plain h5py
        assert list(f["h5md"].attrs["version"]) == [1, 1]
        assert f["particles/all/position/value"].shape == (3, 200, 3)
        assert list(f["particles/all/position/step"][()]) == [0, 100, 200]
        assert h5py.check_enum_dtype(f["particles/all/species"].dtype) == {"Fe": 0, "Ni": 1}
        assert [b.decode() if isinstance(b, bytes) else b for b in f["particles/all/box"].attrs["boundary"]] == ["periodic"] * 3
        np.testing.assert_array_equal(f["particles/all/box/edges"][()], cell)
    for i in range(3):
        m = open_model(path, frame=i).read()
        np.testing.assert_array_equal(m.positions, frames[i].positions)
        np.testing.assert_array_equal(m.species, frames[i].species)
        np.testing.assert_array_equal(m.b_iso, 0.5)


def test_writer_interrupted_leaves_nothing(tmp_path):
    out = tmp_path / "x.h5md"
    with pytest.raises(KeyboardInterrupt):
        with H5MDWriter(out, 10, ["Fe"]) as w:
            w.add_frame(np.zeros((10, 3)))
            raise KeyboardInterrupt
    assert list(tmp_path.iterdir()) == []


def test_writer_refuses_changing_atom_count(tmp_path):
    a = km.Model(np.zeros((3, 3)), "Fe")
    b = km.Model(np.zeros((4, 3)), "Fe")
    with pytest.raises(InvalidInputError, match="frame 1 has 4 atoms"):
        write_h5md(tmp_path / "bad.h5md", [a, b])
    assert list(tmp_path.iterdir()) == []


# ---------------------------------------------------------------------------- bad input
def test_missing_position_lists_contents(tmp_path):
    with h5py.File(tmp_path / "m.h5", "w") as f:
        f.create_group("h5md")
        f.create_dataset("particles/all/species", data=np.zeros(3, int))
    with pytest.raises(ModelFileError, match=r"'/particles/all/position' is missing; /particles/all has: species"):
        open_model(tmp_path / "m.h5")


def test_missing_particles_lists_contents(tmp_path):
    with h5py.File(tmp_path / "p.h5", "w") as f:
        f.create_group("h5md")
        f.create_dataset("observables/energy", data=np.zeros(3))
    with pytest.raises(ModelFileError, match=r"no '/particles' group.*/observables/energy"):
        open_h5md(tmp_path / "p.h5")


def test_mismatched_species_shape(tmp_path, rng):
    path = write_h5md_by_hand(tmp_path / "mm.h5", rng.uniform(0, 1, (2, 10, 3)), np.zeros(9, int),
                              edges=CUBOID, enum={"Fe": 0})
    with pytest.raises(ModelFileError, match=r"/particles/all/species has shape \[9\].*10 atoms.*mismatched"):
        open_model(path)


def test_mismatched_box_frames(tmp_path, rng):
    path = write_h5md_by_hand(tmp_path / "mb.h5", rng.uniform(0, 1, (3, 5, 3)), np.zeros(5, int),
                              edges_td=np.array([np.eye(3)] * 2), enum={"Fe": 0})
    with pytest.raises(ModelFileError, match=r"box/edges/value has 2 frames.*has 3.*mismatched"):
        open_model(path)


def test_mismatched_step_count(tmp_path, rng):
    path = write_h5md_by_hand(tmp_path / "ms.h5", rng.uniform(0, 1, (3, 5, 3)), np.zeros(5, int),
                              edges=CUBOID, enum={"Fe": 0}, steps=np.arange(2))
    with pytest.raises(ModelFileError, match=r"position/step has 2 entries.*3 frames"):
        open_model(path)


def test_unknown_species_code_names_atom(tmp_path, rng):
    codes = np.zeros(50, int)
    codes[37] = 5
    path = write_h5md_by_hand(tmp_path / "u.h5", rng.uniform(0, 1, (1, 50, 3)), codes, edges=CUBOID)
    src = open_model(path, species_map="0=Fe")
    with pytest.raises(ModelFileError, match=r"/particles/all/species: atom 37 .*species code 5"):
        src.species_labels()
    with pytest.raises(ModelFileError, match=r"atom 37"):
        km.scatter(src, km.QGrid.points([[0.0, 0, 0]]))


def test_integer_species_without_map(tmp_path, rng):
    path = write_h5md_by_hand(tmp_path / "i.h5", rng.uniform(0, 1, (1, 5, 3)), np.array([1, 2, 1, 1, 2]), edges=CUBOID)
    with pytest.raises(ModelFileError, match=r"integer species codes .*species-map"):
        open_model(path).species_labels()


def test_non_finite_position_names_atom(tmp_path, rng):
    pos = rng.uniform(0, 1, (2, 20, 3))
    pos[1, 13, 2] = np.nan
    path = write_h5md_by_hand(tmp_path / "nan.h5", pos, np.zeros(20, int), edges=CUBOID, enum={"Fe": 0})
    with pytest.raises(ModelFileError, match=r"position/value: atom 13, frame 1 has non-finite"):
        open_model(path, frame=1).read()


@pytest.mark.parametrize("damage", ["truncate", "garbage", "empty"])
def test_corrupt_or_truncated_file(tmp_path, rng, damage):
    path = write_h5md_by_hand(tmp_path / "c.h5", rng.uniform(0, 1, (2, 20000, 3)), np.zeros(20000, int),
                              edges=CUBOID, enum={"Fe": 0})
    data = path.read_bytes()
    if damage == "truncate":
        path.write_bytes(data[: len(data) // 2])
    elif damage == "garbage":
        path.write_bytes(b"\x89HDF\r\n\x1a\n" + bytes(range(256)) * 4)
    else:
        path.write_bytes(b"")
    with pytest.raises(ModelFileError, match=r"c\.h5"):
        src = open_model(path, frame=1)
        for _ in src.iter_chunks(1000):
            pass


def test_frame_out_of_range(tmp_path, rng):
    path = write_h5md_by_hand(tmp_path / "f.h5", rng.uniform(0, 1, (2, 5, 3)), np.zeros(5, int), edges=CUBOID, enum={"Fe": 0})
    with pytest.raises(InvalidInputError, match=r"`frame` 5 is out of range.*2 frame"):
        open_model(path, frame=5)
    assert open_model(path, frame=-1).frame == 1


def test_unknown_unit(tmp_path, rng):
    path = write_h5md_by_hand(tmp_path / "uu.h5", rng.uniform(0, 1, (1, 5, 3)), np.zeros(5, int),
                              edges=CUBOID, enum={"Fe": 0}, unit="furlong")
    with pytest.raises(ModelFileError, match=r"unit 'furlong'"):
        open_model(path)
