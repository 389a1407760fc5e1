"""Plain HDF5 layout, extended XYZ, LAMMPS dump, ASE files, conversion to H5MD, open_model.

References: the arrays each test writes (read back exactly, or to the printed precision of a
text file); the LAMMPS documentation's triclinic-box convention ("Howto triclinic": a = (lx,
0, 0), b = (xy, ly, 0), c = (xz, yz, lz), bounds written as the bounding box — memory);
ASE (a general-purpose atoms library) as an outside writer of POSCAR files.
"""

import h5py
import numpy as np
import pytest

import kinemap as km
from kinemap.errors import InvalidInputError, ModelFileError
from kinemap.io import convert, detect_format, open_model, select_frames


# ------------------------------------------------------------------------ plain layout
def test_plain_layout_strings_framed_cell(tmp_path, rng):
    pos = rng.uniform(0, 10, (3, 400, 3))
    sp = rng.choice(["Fe", "Ni", "Cr"], 400)
    occ = rng.uniform(0.5, 1.0, 400)
    b = rng.uniform(0.1, 1.0, 400).round(2)
    cell = np.diag([10.0, 10.0, 10.0])
    with h5py.File(tmp_path / "m.h5", "w") as f:
        f["positions"] = pos
        f["species"] = sp.astype(h5py.string_dtype())
        f["occupancy"] = occ
        f["b_iso"] = b
        f["cell"] = cell
    src = open_model(tmp_path / "m.h5", frame=2)
    assert src.format == "hdf5" and src.n_frames == 3
    chunks = list(src.iter_chunks(150))
    np.testing.assert_array_equal(np.concatenate([c.positions for c in chunks]), pos[2])
    np.testing.assert_array_equal(np.concatenate([c.species for c in chunks]).astype(str), sp)
    np.testing.assert_array_equal(np.concatenate([c.occupancy for c in chunks]), occ)
    np.testing.assert_array_equal(np.concatenate([c.b_iso for c in chunks]), b)
    np.testing.assert_array_equal(src.cell, cell)
    assert src.species_labels() == ["Cr", "Fe", "Ni"]


def test_plain_layout_fractional_integer_codes(tmp_path, rng):
    frac = rng.uniform(0, 1, (30, 3))
    cell = np.array([[4.0, 0, 0], [1.0, 5.0, 0], [0, 0.5, 6.0]])
    with h5py.File(tmp_path / "f.h5", "w") as f:
        d = f.create_dataset("positions", data=frac)
        d.attrs["fractional"] = 1
        f["species"] = np.arange(30) % 2
        f["species_names"] = np.array(["Na", "Cl"], dtype=h5py.string_dtype())
        f["cell"] = cell
    m = open_model(tmp_path / "f.h5").read()
    np.testing.assert_allclose(m.positions, frac @ cell, rtol=1e-14)  # rows a, b, c convention
    assert list(m.species[:3]) == ["Na", "Cl", "Na"]


def test_plain_layout_custom_paths(tmp_path, rng):
    with h5py.File(tmp_path / "c.h5", "w") as f:
        f["model/xyz"] = rng.uniform(0, 1, (5, 3))
        f["model/elements"] = np.array(["O"] * 5, dtype=h5py.string_dtype())
    m = open_model(tmp_path / "c.h5", positions="model/xyz", species="/model/elements").read()
    assert m.n_atoms == 5


def test_plain_layout_missing_dataset_lists_file(tmp_path):
    with h5py.File(tmp_path / "x.h5", "w") as f:
        f["coords"] = np.zeros((4, 3))
        f["species"] = np.array(["O"] * 4, dtype=h5py.string_dtype())
    with pytest.raises(ModelFileError,
                       match=r"'/positions' \(positions\) is missing; the file has: /coords \[4, 3\], /species \[4\]"):
        open_model(tmp_path / "x.h5")


def test_plain_layout_mismatch_and_bad_occupancy(tmp_path):
    with h5py.File(tmp_path / "mm.h5", "w") as f:
        f["positions"] = np.zeros((4, 3))
        f["species"] = np.array(["O"] * 3, dtype=h5py.string_dtype())
    with pytest.raises(ModelFileError, match=r"/species has shape \[3\].*mismatched"):
        open_model(tmp_path / "mm.h5")
    with h5py.File(tmp_path / "occ.h5", "w") as f:
        f["positions"] = np.zeros((4, 3))
        f["species"] = np.array(["O"] * 4, dtype=h5py.string_dtype())
        f["occupancy"] = np.array([1.0, 1.0, 1.5, 1.0])
    with pytest.raises(ModelFileError, match=r"occupancy of atom 2 is 1.5"):
        open_model(tmp_path / "occ.h5").read()


def test_plain_layout_integer_codes_need_names(tmp_path):
    with h5py.File(tmp_path / "n.h5", "w") as f:
        f["positions"] = np.zeros((2, 3))
        f["species"] = np.array([0, 1])
    src = open_model(tmp_path / "n.h5")  # opens: species are needed only when atoms are read
    assert "no /species_names" in src.describe()["missing"][0]
    with pytest.raises(ModelFileError, match="no /species_names"):
        src.species_labels()
    assert open_model(tmp_path / "n.h5", species_map={0: "C", 1: "O"}).species_labels() == ["C", "O"]


# ---------------------------------------------------------------------- extended XYZ
def _write_xyz(path, frames, species, cells=None, extra=""):
    with open(path, "w") as fh:
        for i, p in enumerate(frames):
            fh.write(f"{len(p)}\n")
            lat = "" if cells is None else 'Lattice="' + " ".join(f"{x:.17g}" for x in cells[i].ravel()) + '" '
            fh.write(f'{lat}Properties=species:S:1:pos:R:3{extra} pbc="T T T" Time={0.25 * i}\n')
            for s, r in zip(species, p):
                fh.write(f"{s} {r[0]:.17g} {r[1]:.17g} {r[2]:.17g}\n")


def test_extxyz_frames_and_lattice(tmp_path, rng):
    frames = rng.uniform(-3, 3, (3, 100, 3))
    sp = rng.choice(["Si", "O"], 100)
    cells = np.array([TRI * (1 + 0.1 * i) for i in range(3)])
    _write_xyz(tmp_path / "a.xyz", frames, sp, cells)
    base = open_model(tmp_path / "a.xyz")
    assert base.format == "extxyz" and base.n_frames == 3
    for i in range(3):
        src = base.at_frame(i)
        got = np.concatenate([c.positions for c in src.iter_chunks(37)])
        np.testing.assert_array_equal(got, frames[i])  # %.17g round-trips float64 exactly
        np.testing.assert_array_equal(src.cell, cells[i])
        assert src.describe()["time"] == 0.25 * i
    assert base.species_labels() == ["O", "Si"]


TRI = np.array([[5.0, 0.0, 0.0], [1.0, 6.0, 0.0], [0.5, 0.7, 7.0]])


def test_plain_xyz_without_properties(tmp_path):
    (tmp_path / "p.xyz").write_text("2\nwater-ish\nO 0 0 0\nH 0.9572 0 0\n")
    m = open_model(tmp_path / "p.xyz").read()
    assert m.cell is None and list(m.species) == ["O", "H"]
    np.testing.assert_array_equal(m.positions[1], [0.9572, 0, 0])


@pytest.mark.parametrize("text, message", [
    ("3\ncomment\nFe 0 0 0\nFe 1 1 1\n", r"line 5: the file ends inside frame 0 \(2 of 3 atom lines present\)"),
    ("2\ncomment\nFe 0 0 0\nFe 1 x 1\n", r"line 4: coordinates \['1', 'x', '1'\] are not numbers"),
    ("2\ncomment\nFe 0 0 0\nFe 1 1\n", r"line 4: expected 4 columns, got 3"),
    ("two\ncomment\n", r"line 1: expected the atom count of frame 0"),
])
def test_extxyz_bad_input_names_line(tmp_path, text, message):
    (tmp_path / "bad.xyz").write_text(text)
    with pytest.raises(ModelFileError, match=message):
        open_model(tmp_path / "bad.xyz").read()


# ------------------------------------------------------------------------ LAMMPS dump
def _dump(path, frames, types, ids, box_lines, header="id type x y z", scaled_cell=None):
    with open(path, "w") as fh:
        for t, p in enumerate(frames):
            fh.write(f"ITEM: TIMESTEP\n{100 * t}\nITEM: NUMBER OF ATOMS\n{len(p)}\n")
            fh.write(box_lines)
            fh.write(f"ITEM: ATOMS {header}\n")
            order = ids[t]
            for j in order:
                r = p[j]
                fh.write(f"{j + 1} {types[j]} {r[0]:.17g} {r[1]:.17g} {r[2]:.17g}\n")


def test_lammps_triclinic_box(tmp_path, rng):
    xy, xz, yz = 1.5, -0.5, 0.8
    lo = np.array([-1.0, -2.0, 0.5])
    lx, ly, lz = 10.0, 11.0, 12.0
    # LAMMPS writes the bounding box: xlo_bound = xlo + min(0, xy, xz, xy+xz), etc.
    xlb = lo[0] + min(0, xy, xz, xy + xz)
    xhb = lo[0] + lx + max(0, xy, xz, xy + xz)
    ylb = lo[1] + min(0, yz)
    yhb = lo[1] + ly + max(0, yz)
    box = (f"ITEM: BOX BOUNDS xy xz yz pp pp pp\n{xlb} {xhb} {xy}\n{ylb} {yhb} {xz}\n"
           f"{lo[2]} {lo[2] + lz} {yz}\n")
    pos = rng.uniform(0, 8, (2, 50, 3))
    types = rng.integers(1, 3, 50)
    ids = [np.arange(50)] * 2
    _dump(tmp_path / "t.lammpstrj", pos, types, ids, box)
    src = open_model(tmp_path / "t.lammpstrj", frame=1, species_map="1=Fe,2=Ni")
    assert src.format == "lammps-dump"
    np.testing.assert_allclose(src.cell, [[lx, 0, 0], [xy, ly, 0], [xz, yz, lz]], atol=1e-12)
    m = src.read()
    np.testing.assert_array_equal(m.positions, pos[1])
    np.testing.assert_array_equal(m.species, np.where(types == 1, "Fe", "Ni"))
    assert src.describe()["step"] == 100 and src.describe()["boundary"] == ["periodic"] * 3


def test_lammps_scaled_coordinates_and_elements(tmp_path):
    text = ("ITEM: TIMESTEP\n0\nITEM: NUMBER OF ATOMS\n2\nITEM: BOX BOUNDS pp pp ff\n0 4\n1 6\n-2 2\n"
            "ITEM: ATOMS id element xs ys zs\n1 Cu 0.5 0.5 0.5\n2 Zn 0 0.25 1\n")
    (tmp_path / "s.dump").write_text(text)
    src = open_model(tmp_path / "s.dump")
    m = src.read()
    # r = lo + s·(box lengths): the LAMMPS scaled-coordinate convention (memory).
    np.testing.assert_allclose(m.positions, [[2.0, 3.5, 0.0], [0.0, 2.25, 2.0]])
    assert list(m.species) == ["Cu", "Zn"]
    assert src.describe()["boundary"] == ["periodic", "periodic", "none"]


def test_lammps_types_need_map(tmp_path, rng):
    _dump(tmp_path / "n.lammpstrj", rng.uniform(0, 1, (1, 4, 3)), [1, 2, 1, 3], [np.arange(4)],
          "ITEM: BOX BOUNDS pp pp pp\n0 1\n0 1\n0 1\n")
    with pytest.raises(ModelFileError, match=r"integer types .*species-map"):
        open_model(tmp_path / "n.lammpstrj").species_labels()
    with pytest.raises(ModelFileError, match=r"atom 3 \(frame 0\) has species code 3"):
        open_model(tmp_path / "n.lammpstrj", species_map="1=Fe,2=Ni").read()


def test_convert_lammps_with_shuffled_ids_to_h5md(tmp_path, rng):
    n = 300
    pos = rng.uniform(0, 9, (3, n, 3))
    types = rng.integers(1, 3, n)
    ids = [rng.permutation(n) for _ in range(3)]  # each frame lists atoms in another order
    _dump(tmp_path / "sh.lammpstrj", pos, types, ids, "ITEM: BOX BOUNDS pp pp pp\n0 9\n0 9\n0 9\n")
    out = convert(tmp_path / "sh.lammpstrj", tmp_path / "sh.h5md", species_map={1: "Al", 2: "Mg"})
    for t in range(3):
        m = open_model(out, frame=t).read()
        np.testing.assert_array_equal(m.positions, pos[t])  # rows in id order
        np.testing.assert_array_equal(m.species, np.where(types == 1, "Al", "Mg"))
    assert open_model(out, frame=2).describe()["step"] == 200


def test_convert_lammps_refuses_ids_in_some_frames_only(tmp_path, rng):
    # Frame 0 orders the atoms by id; a later frame without ids cannot be put in that order
    # (this used to end in a TypeError inside NumPy).
    pos = rng.uniform(0, 9, (4, 3))
    text = ""
    for t, header in enumerate(["id type x y z", "type x y z"]):
        text += f"ITEM: TIMESTEP\n{100 * t}\nITEM: NUMBER OF ATOMS\n4\nITEM: BOX BOUNDS pp pp pp\n0 9\n0 9\n0 9\n"
        text += f"ITEM: ATOMS {header}\n"
        for j, r in enumerate(pos):
            text += (f"{j + 1} " if header.startswith("id") else "") + f"1 {r[0]} {r[1]} {r[2]}\n"
    (tmp_path / "mixed.lammpstrj").write_text(text)
    with pytest.raises(ModelFileError, match="frame 1 has no atom ids but frame 0 has them"):
        convert(tmp_path / "mixed.lammpstrj", tmp_path / "mixed.h5md", species_map={1: "Al"})
    assert not (tmp_path / "mixed.h5md").exists()


def test_convert_xyz_selected_frames_float32(tmp_path, rng):
    frames = rng.uniform(0, 5, (4, 60, 3))
    sp = rng.choice(["C", "H"], 60)
    _write_xyz(tmp_path / "c.xyz", frames, sp, np.array([TRI] * 4))
    out = convert(tmp_path / "c.xyz", tmp_path / "c.h5md", frames="1:4:2", position_dtype=np.float32)
    src = open_model(out)
    assert src.n_frames == 2
    np.testing.assert_array_equal(src.at_frame(1).read().positions, frames[3].astype(np.float32).astype(np.float64))
    np.testing.assert_array_equal(src.cell, TRI)


def test_convert_refuses_species_change(tmp_path):
    text = "1\n\nFe 0 0 0\n1\n\nNi 0 0 0\n"
    (tmp_path / "ch.xyz").write_text(text)
    with pytest.raises(ModelFileError, match=r"species 'Ni'.*frame 0 does not have"):
        convert(tmp_path / "ch.xyz", tmp_path / "ch.h5md")
    assert not (tmp_path / "ch.h5md").exists()
    assert [p.name for p in tmp_path.iterdir()] == ["ch.xyz"]  # no temporary left


# ------------------------------------------------------------------------ ASE files
def test_ase_poscar(tmp_path):
    pytest.importorskip("ase", reason="ASE is the optional extra for crystal files")
    import ase.io
    from ase.build import bulk

    atoms = bulk("NaCl", "rocksalt", a=5.6402) * (2, 1, 1)
    ase.io.write(tmp_path / "POSCAR", atoms, format="vasp")
    src = open_model(tmp_path / "POSCAR")
    assert src.format == "ase" and src.n_atoms == 4
    np.testing.assert_allclose(src.cell, atoms.cell[:], atol=1e-6)
    m = src.read()
    np.testing.assert_allclose(np.sort(m.positions, axis=0), np.sort(atoms.positions, axis=0), atol=1e-6)
    assert src.species_labels() == ["Cl", "Na"]
    out = convert(src, tmp_path / "nacl.h5md")
    assert open_model(out).n_atoms == 4
    _ = ase


# ------------------------------------------------------------------------ open_model
def test_detect_format(tmp_path):
    (tmp_path / "a.xyz").write_text("1\n\nFe 0 0 0\n")
    (tmp_path / "noext").write_text("ITEM: TIMESTEP\n0\n")
    (tmp_path / "weird.bin").write_bytes(b"\x00\x01garbage")
    with h5py.File(tmp_path / "h.dat", "w") as f:
        f["positions"] = np.zeros((1, 3))
    assert detect_format(tmp_path / "a.xyz") == "extxyz"
    assert detect_format(tmp_path / "noext") == "lammps-dump"
    assert detect_format(tmp_path / "h.dat") == "hdf5"  # HDF5 signature, no particles group
    with pytest.raises(ModelFileError, match="cannot tell the format"):
        detect_format(tmp_path / "weird.bin")
    with pytest.raises(FileNotFoundError, match="no such file"):
        open_model(tmp_path / "missing.h5md")
    with pytest.raises(InvalidInputError, match="unknown `format`"):
        open_model(tmp_path / "a.xyz", format="pdbx")
    with pytest.raises(InvalidInputError, match="apply to the plain HDF5 layout only"):
        open_model(tmp_path / "a.xyz", positions="x")


@pytest.mark.parametrize("sel, expected", [
    (None, [0, 1, 2, 3, 4, 5]), ("all", [0, 1, 2, 3, 4, 5]), ("0:6:2", [0, 2, 4]), ("-2:", [4, 5]),
    ("1,3", [1, 3]), (-1, [5]), (slice(1, 3), [1, 2]), ([0, -1], [0, 5]),
])
def test_select_frames(sel, expected):
    assert select_frames(sel, 6) == expected  # Python slice semantics (language reference)


@pytest.mark.parametrize("sel", ["7", "0:2:0", "a:b", "4:2", [9]])
def test_select_frames_bad(sel):
    with pytest.raises(InvalidInputError):
        select_frames(sel, 6)


def test_chunk_species_groups_match_model(tmp_path, rng):
    """A streamed chunk's fast grouping agrees with kinemap.Model's general one."""
    with h5py.File(tmp_path / "g.h5", "w") as f:
        f["positions"] = rng.uniform(0, 1, (100, 3))
        f["species"] = rng.choice(["Fe", "Ni", "O"], 100).astype(h5py.string_dtype())
    chunk = next(open_model(tmp_path / "g.h5").iter_chunks(60))
    g1 = chunk.groups()
    g2 = km.Model(chunk.positions, list(chunk.species)).groups()
    assert [g1.labels[i] for i in g1.index] == [g2.labels[i] for i in g2.index]


def test_convert_refuses_changing_atom_count(tmp_path):
    (tmp_path / "n.xyz").write_text("1\n\nFe 0 0 0\n2\n\nFe 0 0 0\nFe 1 1 1\n")
    with pytest.raises(ModelFileError, match=r"frame 1 has 2 atoms but frame 0 has 1"):
        convert(tmp_path / "n.xyz", tmp_path / "n.h5md")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["n.xyz"]
    # Averaging does not need equal counts: each frame is its own sum.
    with pytest.warns(km.frames.FewFramesWarning):
        avg = km.average_frames(tmp_path / "n.xyz", km.QGrid.points([[0.0, 0, 0]]), probe="unit")
    assert avg.total.intensity[0] == pytest.approx((1 + 4) / 2)  # (|1|² + |2|²)/2 at q = 0
