"""Files from other writers: species supplied from outside, the cell of h, k, l, supercells,
boxes that change, and H5MD trajectories written by a general-purpose MD library.

References: the arrays each test writes; MDAnalysis (a general-purpose MD analysis library,
installed as a test dependency) as an outside writer of H5MD files and, through
``MDAnalysis.lib.mdamath.triclinic_vectors``, as an outside conversion of cell parameters to
box vectors; the analytic lattice sum |Σ exp(2πi h·x)|² = N² for N atoms on the points of a
lattice at an integer h, and 0 at the other points of the box's reciprocal lattice (the sum
of the roots of unity).
"""

from __future__ import annotations

import h5py
import numpy as np
import pytest

import kinemap as km
from kinemap.errors import InvalidInputError, ModelFileError
from kinemap.io import convert, open_model, write_h5md


def h5md_without_species(path, positions, edges=None, *, extra=None):
    """H5MD as tools that keep the topology elsewhere write it: no species."""
    positions = np.asarray(positions)
    with h5py.File(path, "w") as f:
        f.create_group("h5md").attrs["version"] = np.array([1, 1])
        g = f.create_group("particles/all")
        pos = g.create_group("position")
        pos["value"] = positions
        pos["step"] = np.arange(len(positions))
        if edges is not None:
            box = g.create_group("box")
            box.attrs["dimension"] = 3
            box.attrs["boundary"] = np.array(["periodic"] * 3, dtype=h5py.string_dtype())
            if np.ndim(edges) == 3:
                e = box.create_group("edges")
                e["value"] = edges
                e["step"] = pos["step"]
            else:
                box["edges"] = edges
        for name, data in (extra or {}).items():
            g[name] = data
    return path


# ----------------------------------------------------------------- files without species
def test_file_without_species_opens_and_says_what_is_missing(tmp_path, rng):
    pos = rng.uniform(0, 5, (2, 6, 3))
    path = h5md_without_species(tmp_path / "nosp.h5md", pos, np.diag([5.0, 5, 5]))
    src = open_model(path)
    d = src.describe()
    assert d["species"] is None and d["n_atoms"] == 6 and d["n_frames"] == 2
    assert "no 'species'" in d["missing"][0] and "species=... (command line --species)" in d["missing"][0]
    for needs_atoms in (src.species_labels, src.read, lambda: km.scatter(src, km.QGrid.points([[0.0, 0, 0]]))):
        with pytest.raises(ModelFileError, match=r"has no 'species'.*species=\.\.\. \(command line --species\)"):
            needs_atoms()
    got = open_model(path, frame=1, species="Ar")
    np.testing.assert_array_equal(got.read().positions, pos[1])
    assert got.species_labels() == ["Ar"] and got.describe()["species_note"] == "from species='Ar' (one label for all atoms)"
    assert got.at_frame(0).species_labels() == ["Ar"]  # other frames keep the option


@pytest.mark.parametrize("given", ["list", "tuple", "array"])
def test_one_label_per_atom(tmp_path, rng, given):
    labels = ["Fe", "Ni", "Ni", "Fe", "Cr", "Fe"]
    pos = rng.uniform(0, 5, (1, 6, 3))
    path = h5md_without_species(tmp_path / "s.h5md", pos)
    species = {"list": labels, "tuple": tuple(labels), "array": np.array(labels)}[given]
    m = open_model(path, species=species).read()
    assert list(m.species) == labels
    assert open_model(path, species=species).species_labels() == ["Cr", "Fe", "Ni"]


def test_label_count_must_match(tmp_path, rng):
    path = h5md_without_species(tmp_path / "s.h5md", rng.uniform(0, 5, (1, 4, 3)))
    with pytest.raises(InvalidInputError, match=r"`species` gives 3 labels \(a list of 3 labels\) but .*s\.h5md has 4 atoms"):
        open_model(path, species=["Fe", "Fe", "Ni"])
    txt = tmp_path / "labels.txt"
    txt.write_text("Fe Fe\nNi\n")
    with pytest.raises(InvalidInputError, match=r"gives 3 labels \(file '.*labels\.txt'\) but .* has 4 atoms"):
        open_model(path, species=str(txt))


@pytest.mark.parametrize("bad, message", [
    (["Fe", "", "Ni", "Fe"], r"atom 1 has an empty species label|label of atom 1"),
    (["Fe", 3.5, "Ni", "Fe"], r"label of atom 1 must be a non-empty string"),
    ("Fe Ni", r"is not one label"),
    ("", r"`species` is empty"),
    ([1, 2, 1, 1], r"integer codes; give their labels with species_map"),
    (42, r"`species` must be a label"),
])
def test_bad_species_arguments(tmp_path, rng, bad, message):
    path = h5md_without_species(tmp_path / "s.h5md", rng.uniform(0, 5, (1, 4, 3)))
    with pytest.raises(InvalidInputError, match=message):
        open_model(path, species=bad)


def test_labels_from_text_and_npy_files(tmp_path, rng):
    pos = rng.uniform(0, 5, (1, 5, 3))
    path = h5md_without_species(tmp_path / "s.h5md", pos)
    txt = tmp_path / "labels.txt"
    txt.write_text("# one label per atom\nO  O\nH  # water\nH\nO\n")
    assert list(open_model(path, species=str(txt)).read().species) == ["O", "O", "H", "H", "O"]
    assert list(open_model(path, species=txt).read().species) == ["O", "O", "H", "H", "O"]  # a Path
    np.save(tmp_path / "s.npy", np.array(["Na", "Cl", "Na", "Cl", "Na"]))
    assert list(open_model(path, species=str(tmp_path / "s.npy")).read().species) == ["Na", "Cl", "Na", "Cl", "Na"]
    np.save(tmp_path / "codes.npy", np.array([1, 2, 2, 1, 1]))
    m = open_model(path, species=str(tmp_path / "codes.npy"), species_map="1=Si,2=O").read()
    assert list(m.species) == ["Si", "O", "O", "Si", "Si"]
    with pytest.raises(FileNotFoundError, match="missing.txt"):
        open_model(path, species="missing.txt")


def test_labels_from_a_dataset_of_the_file(tmp_path, rng):
    pos = rng.uniform(0, 5, (2, 4, 3))
    path = h5md_without_species(tmp_path / "s.h5md", pos, extra={"type": np.array([1, 2, 2, 1])})
    src = open_model(path, species="/particles/all/type", species_map={1: "Fe", 2: "Al"})
    assert list(src.read().species) == ["Fe", "Al", "Al", "Fe"]
    assert src.describe()["species_note"] == "from dataset /particles/all/type"
    with pytest.raises(ModelFileError, match=r"integer species codes without names"):
        open_model(path, species="/particles/all/type").read()
    with pytest.raises(ModelFileError, match=r"'/particles/all/nothing' is neither a dataset of .* nor a file of labels"):
        open_model(path, species="/particles/all/nothing")
    # the plain layout: labels kept as strings under another name
    with h5py.File(tmp_path / "p.h5", "w") as f:
        f["positions"] = pos[0]
        f["model/elements"] = np.array([b"C", b"N", b"C", b"O"])
    assert list(open_model(tmp_path / "p.h5", species="/model/elements").read().species) == ["C", "N", "C", "O"]
    # a time-dependent element: value [frame][N], one set of labels per frame
    with h5py.File(path, "r+") as f:
        g = f["particles/all"].create_group("kind")
        g["value"] = np.array([[b"A", b"A", b"B", b"B"], [b"B", b"B", b"A", b"A"]])
    src = open_model(path, frame=1, species="/particles/all/kind")
    assert list(src.read().species) == ["B", "B", "A", "A"]
    assert list(src.at_frame(0).read().species) == ["A", "A", "B", "B"]


def test_species_override_the_file(tmp_path, rng):
    m = km.Model(rng.uniform(0, 3, (4, 3)), "Fe", cell=np.eye(3) * 3)
    path = write_h5md(tmp_path / "fe.h5md", m)
    assert open_model(path, species="Ni").species_labels() == ["Ni"]
    xyz = tmp_path / "a.xyz"
    xyz.write_text("2\nProperties=species:S:1:pos:R:3\nX 0 0 0\nX 1 1 1\n")
    assert list(open_model(xyz, species=["Au", "Ag"]).read().species) == ["Au", "Ag"]


def test_convert_with_species_writes_them(tmp_path, rng):
    pos = rng.uniform(0, 5, (3, 4, 3))
    path = h5md_without_species(tmp_path / "s.h5md", pos, np.diag([5.0, 5, 5]))
    out = convert(path, tmp_path / "labelled.h5md", species=["K", "Cl", "K", "Cl"])
    src = open_model(out, frame=2)
    assert list(src.read().species) == ["K", "Cl", "K", "Cl"]
    np.testing.assert_array_equal(src.read().positions, pos[2])


# --------------------------------------------------------------------- cell, supercell
def _lattice_points(a, n):
    g = np.arange(n)
    return np.stack(np.meshgrid(g, g, g, indexing="ij"), -1).reshape(-1, 3) * a


def test_supercell_gives_the_parent_cell_and_bragg_sums(tmp_path):
    a, n = 3.0, 3
    pos = _lattice_points(a, n)[None]
    path = h5md_without_species(tmp_path / "sc.h5md", pos, np.diag([a * n] * 3))
    src = open_model(path, species="Ar", supercell=(n, n, n))
    np.testing.assert_allclose(src.cell, np.eye(3) * a, rtol=1e-15)
    np.testing.assert_array_equal(src.box, np.eye(3) * a * n)  # the file's box stays the box
    assert src.describe()["cell_note"] == "box / supercell (supercell=...)"
    grid = km.QGrid.hkl(src.cell, h=(0, 1, 4), k=0, l=0)  # h = 0, 1/3, 2/3, 1 of the parent cell
    inten = km.scatter(src, grid, probe="unit").intensity
    n_atoms = n**3
    # N² at integer h; 0 at the other points of the box's reciprocal lattice (roots of unity)
    np.testing.assert_allclose(inten[[0, 3]], n_atoms**2, rtol=1e-12)
    assert np.all(inten[[1, 2]] < 1e-20 * n_atoms**2)


@pytest.mark.parametrize("cell", ["3,3,3,90,90,90", "3 3 3", (3, 3, 3), np.eye(3) * 3, [3, 3, 3, 90, 90, 90]])
def test_cell_forms(tmp_path, cell):
    path = h5md_without_species(tmp_path / "c.h5md", _lattice_points(3.0, 2)[None], np.diag([6.0] * 3))
    src = open_model(path, species="Ar", cell=cell)
    np.testing.assert_allclose(src.cell, np.eye(3) * 3.0, atol=1e-14)
    np.testing.assert_array_equal(src.box, np.eye(3) * 6.0)
    assert open_model(path, species="Ar", cell=cell, supercell="2,2,2").cell is not None  # consistent


def test_supercell_matrix_and_refusals(tmp_path):
    parent = np.array([[3.0, 0, 0], [1.0, 3.5, 0], [0, 0, 4.0]])
    p = np.array([[1, 1, 0], [-1, 1, 0], [0, 0, 2]])
    box = p @ parent  # box = P·cell, rows
    path = h5md_without_species(tmp_path / "m.h5md", np.zeros((1, 2, 3)), box)
    np.testing.assert_allclose(open_model(path, species="C", supercell=p).cell, parent, atol=1e-13)
    np.testing.assert_allclose(open_model(path, species="C", supercell="1,1,0,-1,1,0,0,0,2").cell, parent, atol=1e-13)
    with pytest.raises(InvalidInputError, match=r"`supercell` must hold whole numbers"):
        open_model(path, species="C", supercell=(2.5, 3, 3))
    with pytest.raises(InvalidInputError, match=r"`supercell` is singular"):
        open_model(path, species="C", supercell=[[1, 1, 0], [1, 1, 0], [0, 0, 1]])
    with pytest.raises(InvalidInputError, match=r"frame 0: `box` .* is not `supercell` × `cell`"):
        open_model(path, species="C", cell=parent, supercell=(2, 2, 2))
    with pytest.raises(InvalidInputError, match=r"`cell` must be a 3x3 array"):
        open_model(path, species="C", cell=[1, 2])


def test_file_without_box(tmp_path):
    path = h5md_without_species(tmp_path / "open.h5md", np.zeros((1, 2, 3)))
    src = open_model(path, species="C", cell=(2, 2, 2))
    assert src.box is None
    np.testing.assert_allclose(src.cell, np.eye(3) * 2)
    src = open_model(path, species="C", cell=(2, 2, 2), supercell=(3, 3, 3))
    np.testing.assert_allclose(src.box, np.eye(3) * 6)  # box = P·cell when the file has none
    with pytest.raises(InvalidInputError, match=r"`supercell` needs a `cell`"):
        open_model(path, species="C", supercell=(3, 3, 3))


def test_box_that_changes_at_constant_pressure(tmp_path, rng):
    n_frames, a, n = 4, 3.0, 2
    scale = 1 + 0.01 * np.arange(n_frames)
    edges = np.array([np.eye(3) * a * n * s for s in scale])
    pos = np.array([_lattice_points(a * s, n) for s in scale])
    path = h5md_without_species(tmp_path / "npt.h5md", pos, edges)
    base = open_model(path, species="Ar", supercell=(n, n, n))
    for f in range(n_frames):  # each frame's own box, and the cell scaled with it
        src = base.at_frame(f)
        np.testing.assert_allclose(src.box, edges[f], rtol=1e-15)
        np.testing.assert_allclose(src.cell, edges[f] / n, rtol=1e-15)
        inten = km.scatter(src, km.QGrid.hkl(src.cell, h=1, k=1, l=0), probe="unit").intensity
        np.testing.assert_allclose(inten, (n**3) ** 2, rtol=1e-12)  # on the Bragg point in every frame
    fixed = open_model(path, species="Ar", cell=(a, a, a))
    np.testing.assert_allclose(fixed.at_frame(3).cell, np.eye(3) * a, atol=1e-14)  # a given cell stays as given
    both = open_model(path, species="Ar", cell=(a, a, a), supercell=(n, n, n))
    with pytest.raises(InvalidInputError, match=r"frame 2: `box` .* is not `supercell` × `cell`"):
        both.at_frame(2)


# ------------------------------------------------------ H5MD of a general-purpose MD tool
def mdanalysis_trajectory(path, positions, dimensions, unit):
    mda = pytest.importorskip("MDAnalysis")
    n_frames, n = positions.shape[:2]
    u = mda.Universe.empty(n, trajectory=True, velocities=True, forces=True)
    rng = np.random.default_rng(5)
    with mda.Writer(str(path), n_atoms=n, lengthunit=unit, timeunit="ps", velocityunit="A/ps",
                    forceunit="kJ/(mol*Angstrom)") as w:
        for i in range(n_frames):
            u.atoms.positions = positions[i]
            u.atoms.velocities = rng.normal(size=(n, 3))
            u.atoms.forces = rng.normal(size=(n, 3))
            u.dimensions = dimensions[i]
            u.trajectory.ts.data["step"] = 100 * i
            u.trajectory.ts.data["energy"] = -1.5 * i
            u.trajectory.ts.time = 0.5 * i
            w.write(u)
    return path


@pytest.mark.parametrize("unit", ["Angstrom", "nm"])
def test_mdanalysis_h5md_trajectory_reads_with_species(tmp_path, rng, unit):
    from MDAnalysis.lib.mdamath import triclinic_vectors

    n_frames, n = 3, 7
    positions = rng.uniform(0, 10, (n_frames, n, 3)).astype(np.float32)
    dims = np.array([[10 + i, 11, 12 - 0.5 * i, 80, 90, 100 + i] for i in range(n_frames)], dtype=np.float32)
    path = mdanalysis_trajectory(tmp_path / "md.h5md", positions, dims, unit)
    labels = ["O", "H", "H", "O", "H", "H", "Na"]

    bare = open_model(path)  # what `kinemap info` shows: everything, and what is missing
    d = bare.describe()
    assert d["n_frames"] == n_frames and d["n_atoms"] == n and d["species"] is None
    assert d["group"] == "trajectory" and d["creator"] == "MDAnalysis"
    assert {"velocity", "force"} <= set(d["elements"]) and d["other_groups"] == ["observables"]
    assert "species=" in d["missing"][0]

    base = open_model(path, species=labels)
    assert base.n_frames == n_frames
    for i in range(n_frames):
        src = base.at_frame(i)
        m = src.read()
        assert list(m.species) == labels
        # MDAnalysis stores float32 (in nm for unit="nm"): equal to float32 rounding
        np.testing.assert_allclose(m.positions, positions[i], rtol=2e-7, atol=2e-6)
        np.testing.assert_allclose(src.box, triclinic_vectors(dims[i]), rtol=2e-7, atol=2e-6)
        d = src.describe()
        assert d["step"] == 100 * i and d["time"] == pytest.approx(0.5 * i)
    out = convert(path, tmp_path / "km.h5md", species=labels)  # and on to kinemap's own layout
    np.testing.assert_allclose(open_model(out, frame=2).read().positions, positions[2], rtol=2e-7, atol=2e-6)


def test_describe_reports_problems_instead_of_failing(tmp_path, rng):
    pos = rng.uniform(0, 5, (1, 50, 3))
    codes = np.zeros(50, int)
    codes[37] = 5
    path = h5md_without_species(tmp_path / "bad.h5md", pos, extra={"species": codes})
    src = open_model(path, species_map="0=Fe")
    d = src.describe()
    assert d["species"] is None and "atom 37 (frame 0) has species code 5" in d["problems"][0]
    with pytest.raises(ModelFileError, match=r"atom 37 \(frame 0\) has species code 5"):
        src.read()
    lammps = tmp_path / "types.lammpstrj"
    lammps.write_text("ITEM: TIMESTEP\n0\nITEM: NUMBER OF ATOMS\n1\nITEM: BOX BOUNDS pp pp pp\n0 1\n0 1\n0 1\n"
                      "ITEM: ATOMS id type x y z\n1 1 0 0 0\n")
    d = open_model(lammps).describe()
    assert d["species"] is None and "--species-map" in d["missing"][0] and "--species" in d["missing"][0]
