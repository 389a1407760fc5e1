"""Hostile and failing model files: each case becomes a clear error or a correct result.

The cases are those of the project's hardening issue that concern files. References: the
HDF5 behaviour each hostile file relies on (external links, external raw storage and virtual
datasets are HDF5 features that h5py writes); the H5MD 1.1 unit-attribute convention (a
unit string "factor symbol", e.g. "0.1 nm"); the LAMMPS dump layout (NUMBER OF ATOMS, BOX
BOUNDS "lo hi" per axis, from memory); POSIX RLIMIT_FSIZE semantics (writes past the limit
fail with EFBIG when SIGXFSZ is ignored); and, for the anisotropic Debye–Waller factor, an
independent NumPy sum A(q) = Σ_j exp(−½ qᵀU_j q) exp(i q·r_j) (the convention of
kinemap.model, stated in docs/model-files.md).
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import h5py
import numpy as np
import pytest

import kinemap as km
from kinemap.errors import InvalidInputError, ModelFileError
from kinemap.io import convert, open_model, write_h5md
from kinemap.io._base import DESCRIBE_SCAN_ATOMS

PYTHON_DIR = str(Path(km.__file__).resolve().parents[1])


def h5md_by_hand(path, positions, *, unit=None, edges=None, edges_unit=None, enum=None, species=None,
                 b_unit=None):
    positions = np.asarray(positions)
    with h5py.File(path, "w") as f:
        f.create_group("h5md").attrs["version"] = np.array([1, 1])
        g = f.create_group("particles/all")
        v = g.create_group("position").create_dataset("value", data=positions)
        if unit is not None:
            v.attrs["unit"] = unit
        if edges is not None:
            box = g.create_group("box")
            box.attrs["dimension"] = 3
            box.attrs["boundary"] = np.array([b"periodic"] * 3)
            e = box.create_dataset("edges", data=edges)
            if edges_unit is not None:
                e.attrs["unit"] = edges_unit
        n = positions.shape[1]
        if enum is not None:
            g.create_dataset("species", data=np.zeros(n, np.int8), dtype=h5py.enum_dtype(enum, basetype=np.int8))
        elif species is not None:
            g["species"] = np.asarray(species, dtype="S4")
        if b_unit is not None:
            b = g.create_dataset("b_iso", data=np.full(n, 0.5))
            b.attrs["unit"] = b_unit
    return path


# ------------------------------------------------------------------ a full disk
FULL_DISK_SCRIPT = r"""
import json, os, resource, signal, sys
signal.signal(signal.SIGXFSZ, signal.SIG_IGN)   # writes past the limit fail with EFBIG
import numpy as np
from kinemap.io import convert, write_h5md
import kinemap as km

src, out_dir, limits = sys.argv[1], sys.argv[2], json.loads(sys.argv[3])
soft, hard = resource.getrlimit(resource.RLIMIT_FSIZE)
results = []
for i, (how, lim) in enumerate(limits):
    out = os.path.join(out_dir, f"out{i}.h5md")
    resource.setrlimit(resource.RLIMIT_FSIZE, (lim, hard))
    try:
        if how == "write_h5md":
            m = km.Model(np.zeros((50_000, 3)), "Fe", cell=np.eye(3) * 10)
            write_h5md(out, [m, m])
        else:
            convert(src, out)
        results.append(["ok"])
    except OSError as exc:
        results.append([type(exc).__name__, exc.errno, str(exc)])
    finally:
        resource.setrlimit(resource.RLIMIT_FSIZE, (soft, hard))
    results[-1].append(sorted(os.listdir(out_dir)))
print(json.dumps(results))
"""


def test_full_disk_is_an_error_not_a_crash(tmp_path, rng):
    """Issue: `convert` onto a full disk printed ENOSPC, then died with SIGSEGV leaving a
    .tmp. A file-size limit (RLIMIT_FSIZE) fails writes the same way without root; the
    limits put the failure at the start, in the middle and in the final flush of close."""
    n = 100_000
    src = tmp_path / "in.h5md"
    write_h5md(src, km.Model(rng.uniform(0, 40, (n, 3)), "Fe", cell=np.eye(3) * 40))
    full = convert(src, tmp_path / "full.h5md")
    size = full.stat().st_size  # the complete output, to aim limits at the end of the file
    out_dir = tmp_path / "out"
    out_dir.mkdir()
    limits = [("convert", lim) for lim in (4096, size // 2, 2 * size // 3, size - 4096, size - 512, size - 64)]
    limits += [("write_h5md", 4096), ("write_h5md", 1 << 20)]  # 2 frames of 50,000 atoms: 2.4 MB
    env = dict(os.environ, PYTHONPATH=PYTHON_DIR)
    proc = subprocess.run([sys.executable, "-c", FULL_DISK_SCRIPT, str(src), str(out_dir), json.dumps(limits)],
                          capture_output=True, text=True, env=env, timeout=300)
    assert proc.returncode == 0, f"the process died (return code {proc.returncode}): {proc.stderr[-2000:]}"
    results = json.loads(proc.stdout.strip().splitlines()[-1])
    for lim, res in zip(limits, results):
        assert res[0] == "OSError" and res[1] == 27, (lim, res)  # EFBIG, the system's own error
        assert "nothing was left behind" in res[2]
        assert res[-1] == [], f"leftovers after a failure at {lim} bytes: {res[-1]}"
    assert sorted(os.listdir(out_dir)) == []


# ------------------------------------------------------------- 10^12 atoms declared
def _huge(path, species_kind):
    n = 10**12
    with h5py.File(path, "w") as f:
        g = f.create_group("particles/all")
        g.create_group("position").create_dataset("value", shape=(1, n, 3), dtype="f8", chunks=(1, 1 << 16, 3))
        if species_kind == "enumeration":
            g.create_dataset("species", shape=(n,), dtype=h5py.enum_dtype({"Fe": 0, "Ni": 1}, basetype=np.int8),
                             chunks=(1 << 20,))
        else:
            g.create_dataset("species", shape=(n,), dtype="S2", chunks=(1 << 20,), fillvalue=b"Ar")
    return path


@pytest.mark.parametrize("species_kind", ["enumeration", "strings"])
def test_declared_trillion_atoms_describe_is_bounded(tmp_path, monkeypatch, species_kind):
    """Issue: a file declaring 10¹² atoms in unwritten chunks kept `info` busy for ever.
    describe() must read at most DESCRIBE_SCAN_ATOMS species (counted with a spy on
    h5py's reads, not with a clock)."""
    path = _huge(tmp_path / "huge.h5md", species_kind)
    read = []
    orig = h5py.Dataset.__getitem__

    def spy(self, key):
        out = orig(self, key)
        read.append(np.asarray(out).size)
        return out

    monkeypatch.setattr(h5py.Dataset, "__getitem__", spy)
    src = open_model(path)
    d = src.describe()
    assert d["n_atoms"] == 10**12
    assert sum(read) <= 3 * DESCRIBE_SCAN_ATOMS
    if species_kind == "enumeration":
        assert d["species"] == ["Fe", "Ni"] and "declares" in d["species_note"]
        assert src.species_labels() == ["Fe", "Ni"]  # the enumeration's labels: no scan
        assert sum(read) <= 3 * DESCRIBE_SCAN_ATOMS
    else:
        assert d["species"] == ["Ar"]
        assert d["species_note"] == f"species counted over the first {DESCRIBE_SCAN_ATOMS:,} of 1,000,000,000,000 atoms"


def test_declared_trillion_atoms_refused_where_memory_per_atom_is_needed(tmp_path):
    path = _huge(tmp_path / "huge.h5md", "enumeration")
    with pytest.raises(InvalidInputError, match=r"converting 1,000,000,000,000 atoms .* would need about"):
        convert(path, tmp_path / "out.h5md")
    with pytest.raises(InvalidInputError, match=r"more than `max_atoms`"):
        open_model(path).read()
    with pytest.raises(InvalidInputError, match=r"gives 3 labels .* 1,000,000,000,000 atoms"):
        open_model(path, species=["Fe", "Fe", "Ni"])
    assert list(tmp_path.iterdir()) == [path]


# ------------------------------------------------------------------------ units
@pytest.mark.parametrize("target, unit, message", [
    ("position", "0 nm", r"position/value attribute 'unit': unit '0 nm' has the factor 0.0"),
    ("position", "-1 nm", r"position/value attribute 'unit': unit '-1 nm' has the factor -1.0"),
    ("position", "-0.1 nm", r"factor -0.1; a unit factor must be a positive"),
    ("position", "1e999 nm", r"factor inf"),
    ("position", "1.2.3 nm", r"'1.2.3', which is not a number"),
    ("position", "nan nm", r"not a length unit"),
    ("edges", "0 nm", r"box/edges attribute 'unit': unit '0 nm' has the factor 0.0"),
    ("b_iso", "-1 nm+2", r"b_iso attribute 'unit': unit '-1 nm\+2' has the factor -1.0"),
])
def test_non_positive_unit_factors_refused(tmp_path, rng, target, unit, message):
    """Issue: units "0 nm" and "-1 nm" collapsed or mirrored the model."""
    kw = {"position": dict(unit=unit), "edges": dict(edges_unit=unit), "b_iso": dict(b_unit=unit)}[target]
    path = h5md_by_hand(tmp_path / "u.h5md", rng.uniform(0, 1, (1, 4, 3)), edges=np.array([5.0, 5, 5]),
                        enum={"Fe": 0}, **kw)
    with pytest.raises(ModelFileError, match=message):
        open_model(path)


def test_non_positive_unit_refused_in_plain_layout(tmp_path):
    with h5py.File(tmp_path / "p.h5", "w") as f:
        f["positions"] = np.zeros((2, 3))
        f["positions"].attrs["unit"] = "-1 nm"
        f["species"] = np.array([b"O", b"O"])
    with pytest.raises(ModelFileError, match=r"/positions attribute 'unit': unit '-1 nm' has the factor -1.0"):
        open_model(tmp_path / "p.h5")


@pytest.mark.parametrize("unit, angstrom_per_unit", [
    # SI: 1 nm = 10 Å; 1 pm = 0.01 Å (definitions of the prefixes and of the ångström).
    ("Angstrom", 1.0), ("angstrom", 1.0), ("A", 1.0), ("\u00c5", 1.0), ("\u212b", 1.0), ("A\u030a", 1.0),
    ("nm", 10.0), ("0.1 nm", 1.0), ("pm", 0.01), ("2 nm", 20.0),
])
def test_unit_spellings_of_other_writers(tmp_path, rng, unit, angstrom_per_unit):
    pos = rng.uniform(0, 1, (1, 6, 3))
    path = h5md_by_hand(tmp_path / "s.h5md", pos, unit=unit, enum={"Si": 0})
    np.testing.assert_allclose(open_model(path).read().positions, pos[0] * angstrom_per_unit, rtol=1e-15)


# --------------------------------------------------------------------- LAMMPS dumps
def _dump(count="4", bounds=("0 10", "0 10", "0 10"), tilt=False):
    head = "ITEM: BOX BOUNDS xy xz yz pp pp pp" if tilt else "ITEM: BOX BOUNDS pp pp pp"
    atoms = "".join(f"{i + 1} 1 {i}.0 1.0 1.0\n" for i in range(4))
    return (f"ITEM: TIMESTEP\n0\nITEM: NUMBER OF ATOMS\n{count}\n{head}\n" + "\n".join(bounds)
            + "\nITEM: ATOMS id type x y z\n" + atoms)


@pytest.mark.parametrize("text, message", [
    (_dump(count="-5"), r"line 4: NUMBER OF ATOMS is -5"),
    (_dump(bounds=("0 10", "5 -5", "0 10")), r"line 7: BOX BOUNDS: yhi = -5.0 is not above ylo = 5.0"),
    (_dump(bounds=("3 3", "0 10", "0 10")), r"line 6: BOX BOUNDS: xhi = 3.0 is not above xlo = 3.0"),
    (_dump(bounds=("0 10", "0 10", "0 nan")), r"line 8: BOX BOUNDS line has non-finite"),
    # triclinic: the bounding box 0..1 along x minus a tilt xy = 4 leaves xhi - xlo = -3
    (_dump(bounds=("0 1 4", "0 10 0", "0 10 0"), tilt=True), r"line 6: BOX BOUNDS: xhi = -3.0 is not above xlo = 0.0"),
])
def test_lammps_impossible_counts_and_boxes_refused(tmp_path, text, message):
    """Issue: `NUMBER OF ATOMS -5` or hi < lo were accepted."""
    path = tmp_path / "bad.lammpstrj"
    path.write_text(text)
    with pytest.raises(ModelFileError, match=message):
        open_model(path, species_map="1=Fe")


# ------------------------------------------------------------- other files' data
@pytest.fixture
def secret(tmp_path):
    """Another user's file that a hostile model file points at."""
    path = tmp_path / "secret.h5"
    with h5py.File(path, "w") as f:
        f["data"] = np.full((3, 3), 42.0)
        f["labels"] = np.array([b"Xx"] * 3)
    return path


def _with_position(path, make):
    with h5py.File(path, "w") as f:
        g = f.create_group("particles/all")
        make(f, g)
        g.create_dataset("species", data=np.zeros(3, np.int8), dtype=h5py.enum_dtype({"Fe": 0}, basetype=np.int8))
    return path


def test_external_link_refused_unless_allowed(tmp_path, secret):
    """Issue: external links were followed silently, so `info` printed another file's data."""
    path = _with_position(tmp_path / "link.h5md",
                          lambda f, g: g.__setitem__("position", h5py.ExternalLink(str(secret), "/data")))
    with pytest.raises(ModelFileError, match=r"/particles/all/position is an external link to '/data' in file "
                                             r".*secret\.h5.*allow_external=True \(command line --allow-external\)"):
        open_model(path)
    got = open_model(path, allow_external=True).read().positions
    np.testing.assert_array_equal(got, np.full((3, 3), 42.0))


def test_external_raw_storage_refused_unless_allowed(tmp_path):
    raw = tmp_path / "raw.bin"
    np.full((2, 3), 7.0).tofile(raw)
    path = _with_position(tmp_path / "ext.h5md", lambda f, g: g.create_group("position").create_dataset(
        "value", shape=(1, 2, 3), dtype="<f8", external=[(str(raw), 0, 48)]))
    with h5py.File(path, "r+") as f:  # two atoms, to match the external data
        del f["particles/all/species"]
        f["particles/all"].create_dataset("species", data=np.zeros(2, np.int8),
                                          dtype=h5py.enum_dtype({"Fe": 0}, basetype=np.int8))
    with pytest.raises(ModelFileError, match=r"keeps its data in external raw file\(s\) .*raw\.bin.*allow_external=True"):
        open_model(path)
    np.testing.assert_array_equal(open_model(path, allow_external=True).read().positions, np.full((2, 3), 7.0))


def test_virtual_dataset_from_another_file_refused(tmp_path, secret):
    def make(f, g):
        layout = h5py.VirtualLayout(shape=(1, 3, 3), dtype="f8")
        layout[0] = h5py.VirtualSource(str(secret), "data", shape=(3, 3))
        g.create_group("position").create_virtual_dataset("value", layout)

    path = _with_position(tmp_path / "vds.h5md", make)
    with pytest.raises(ModelFileError, match=r"virtual dataset with sources in other file\(s\) .*secret\.h5"):
        open_model(path)
    np.testing.assert_array_equal(open_model(path, allow_external=True).read().positions, np.full((3, 3), 42.0))


def test_virtual_dataset_inside_the_file_and_soft_links_are_fine(tmp_path):
    pos = np.arange(9.0).reshape(1, 3, 3)

    def make(f, g):
        f["store/pos"] = pos
        layout = h5py.VirtualLayout(shape=(1, 3, 3), dtype="f8")
        layout[:] = h5py.VirtualSource(".", "/store/pos", shape=(1, 3, 3))
        g.create_group("position").create_virtual_dataset("value", layout)
        g["velocity"] = h5py.SoftLink("/store/pos")  # an element kinemap does not read

    path = _with_position(tmp_path / "inside.h5md", make)
    np.testing.assert_array_equal(open_model(path).read().positions, pos[0])
    with h5py.File(path, "r+") as f:  # a soft link where kinemap reads: followed inside the file
        del f["particles/all/position"]
        f["particles/all/position"] = h5py.SoftLink("/store/grp")
        f.create_group("store/grp")["value"] = pos
    np.testing.assert_array_equal(open_model(path).read().positions, pos[0])


def test_soft_link_loop_refused(tmp_path):
    def make(f, g):
        g["position"] = h5py.SoftLink("/particles/all/position")

    with pytest.raises(ModelFileError, match=r"soft link in a loop"):
        open_model(_with_position(tmp_path / "loop.h5md", make))


def test_species_dataset_elsewhere_refused(tmp_path, secret):
    path = tmp_path / "p.h5"
    with h5py.File(path, "w") as f:
        f["positions"] = np.zeros((3, 3))
        f["kinds"] = h5py.ExternalLink(str(secret), "/labels")
    with pytest.raises(ModelFileError, match=r"/kinds is an external link to '/labels'"):
        open_model(path, species="/kinds")
    src = open_model(path, species="/kinds", allow_external=True)
    assert src.species_labels() == ["Xx"] and list(src.read().species) == ["Xx"] * 3


def test_listing_in_error_messages_does_not_open_other_files(tmp_path, secret):
    path = tmp_path / "nopos.h5"
    with h5py.File(path, "w") as f:
        f["elsewhere"] = h5py.ExternalLink(str(secret), "/")
    with pytest.raises(ModelFileError) as err:
        open_model(path)
    assert "[3, 3]" not in str(err.value) and "labels" not in str(err.value)  # nothing of the secret is listed


# ------------------------------------------------------------ anisotropic displacements
def test_u_aniso_written_and_read_back(tmp_path, rng):
    """Issue: write_h5md dropped u_aniso (I(0,0,6) came back as 208.6 instead of 3.2e-6)."""
    a = 4.0
    n = 8
    frac = rng.uniform(0, 1, (n, 3))
    u = np.zeros((n, 3, 3))
    u[:, 2, 2] = rng.uniform(0.15, 0.25, n)  # large motion along c only
    u[:, 0, 0] = u[:, 1, 1] = 0.005
    u[:, 0, 1] = u[:, 1, 0] = 0.001
    model = km.Model(frac, "Fe", u_aniso=u, cell=np.eye(3) * a, fractional=True)
    path = write_h5md(tmp_path / "aniso.h5md", [model, model.translated([0.1, 0, 0])])
    with h5py.File(path) as f:
        assert f["particles/all/u_aniso"].shape == (n, 3, 3)
        assert f["particles/all/u_aniso"].attrs["unit"] == "0.01 nm+2"
    back = open_model(path).read()
    np.testing.assert_array_equal(back.u_aniso, u)
    q = np.array([[0.0, 0.0, 2 * np.pi * 6 / a], [2 * np.pi * 2 / a, 0.0, 0.0], [1.0, -2.0, 0.5]])
    got = km.scatter(open_model(path), km.QGrid.points(q), probe="unit").intensity
    # Independent NumPy reference: A(q) = Σ_j exp(−½ qᵀU_j q) exp(i q·r_j).
    r = frac * a
    dw = np.exp(-0.5 * np.einsum("mi,jik,mk->mj", q, u, q))
    ref = np.abs((dw * np.exp(1j * q @ r.T)).sum(axis=1)) ** 2
    np.testing.assert_allclose(got, ref, rtol=1e-9)
    assert got[0] < 1e-3 * n**2  # damped: the dropped tensor gave ~n² here


def test_u_aniso_through_convert_and_plain_layout(tmp_path, rng):
    n = 5
    u = np.zeros((n, 3, 3))
    u[:, 0, 0], u[:, 1, 1], u[:, 2, 2] = 0.01, 0.02, 0.03
    with h5py.File(tmp_path / "p.h5", "w") as f:
        f["positions"] = rng.uniform(0, 3, (n, 3))
        f["species"] = np.array([b"Cu"] * n)
        d = f.create_dataset("u_aniso", data=u * 0.01)
        d.attrs["unit"] = "nm+2"  # 1 nm² = 100 Å²
    out = convert(tmp_path / "p.h5", tmp_path / "c.h5md")
    np.testing.assert_allclose(open_model(out).read().u_aniso, u, rtol=1e-15)


def test_u_aniso_not_positive_definite_names_atom(tmp_path):
    u = np.zeros((3, 3, 3))
    u[1] = np.diag([0.01, -0.02, 0.01])
    with h5py.File(tmp_path / "p.h5", "w") as f:
        f["positions"] = np.zeros((3, 3))
        f["species"] = np.array([b"Cu"] * 3)
        f["u_aniso"] = u
    with pytest.raises(ModelFileError, match=r"/u_aniso: u_aniso of atom 1 is not positive semi-definite"):
        open_model(tmp_path / "p.h5").read()


def test_frames_with_other_displacements_refused(tmp_path, rng):
    a = km.Model(rng.uniform(0, 1, (3, 3)), "Fe", b_iso=0.5)
    b = km.Model(a.positions, "Fe", b_iso=0.7)
    with pytest.raises(InvalidInputError, match=r"frame 1 has other b_iso values"):
        write_h5md(tmp_path / "x.h5md", [a, b])
    assert list(tmp_path.iterdir()) == []


# ------------------------------------------------------------------- file names
BAD_NAMES = ["bad-\udcff.h5md", b"bad-\xff.h5md"]


@pytest.mark.parametrize("name", BAD_NAMES)
def test_non_utf8_names_refused_up_front(tmp_path, rng, name):
    """Issue: non-UTF-8 file names failed only after the whole computation."""
    good = write_h5md(tmp_path / "good.h5md", km.Model(rng.uniform(0, 1, (4, 3)), "Fe"))
    with pytest.raises(InvalidInputError, match="not valid UTF-8"):
        open_model(name)
    with pytest.raises(InvalidInputError, match="not valid UTF-8"):
        write_h5md(os.path.join(str(tmp_path), name) if isinstance(name, str)
                   else os.path.join(os.fsencode(tmp_path), name), km.Model(np.zeros((1, 3)), "Fe"))
    with pytest.raises(InvalidInputError, match="not valid UTF-8"):
        convert(good, os.path.join(str(tmp_path), name) if isinstance(name, str)
                else os.path.join(os.fsencode(tmp_path), name))
    assert sorted(p.name for p in tmp_path.iterdir()) == ["good.h5md"]


# ------------------------------------------------------------ outputs and inputs
def test_output_that_is_the_input_refused(tmp_path, rng):
    path = write_h5md(tmp_path / "a.h5md", km.Model(rng.uniform(0, 1, (4, 3)), "Fe"))
    before = path.read_bytes()
    for overwrite in (False, True):
        with pytest.raises(InvalidInputError, match="is also an input"):
            convert(path, path, overwrite=overwrite)
        with pytest.raises(InvalidInputError, match="is also an input"):
            convert(path, tmp_path / "." / "a.h5md", overwrite=overwrite)
    with pytest.raises(InvalidInputError, match="is also an input"):
        write_h5md(path, open_model(path).read(), inputs=[path], overwrite=True)
    assert path.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.h5md"]


def test_existing_output_kept_unless_overwrite(tmp_path, rng):
    src = write_h5md(tmp_path / "a.h5md", km.Model(rng.uniform(0, 1, (4, 3)), "Fe"))
    out = tmp_path / "b.h5md"
    out.write_bytes(b"keep me")
    with pytest.raises(FileExistsError, match="overwrite=True"):
        convert(src, out)
    with pytest.raises(FileExistsError, match="overwrite=True"):
        write_h5md(out, km.Model(np.zeros((1, 3)), "Fe"))
    assert out.read_bytes() == b"keep me"
    convert(src, out, overwrite=True)
    np.testing.assert_array_equal(open_model(out).read().positions, open_model(src).read().positions)


@pytest.mark.parametrize("fail_at", [0, 3, 8, 40])
@pytest.mark.parametrize("error", ["ENOSPC", "KeyboardInterrupt"])
def test_write_failures_inside_hdf5_leave_nothing(tmp_path, rng, monkeypatch, fail_at, error):
    """A full disk (ENOSPC) or Ctrl-C at the n-th write the HDF5 library makes: the writer
    raises that error after HDF5 has closed cleanly, and no file is left. (In-process: the
    process must survive it, which the HDF5 library alone does not.)"""
    import errno

    from kinemap.io import _guarded

    real = os.pwrite
    calls = []

    def failing(fd, data, offset):
        calls.append(len(data))
        if len(calls) > fail_at:
            if error == "ENOSPC":
                raise OSError(errno.ENOSPC, "No space left on device")
            raise KeyboardInterrupt
        return real(fd, data, offset)

    monkeypatch.setattr(_guarded.os, "pwrite", failing)
    frames = [km.Model(rng.uniform(0, 10, (20_000, 3)), "Fe", cell=np.eye(3) * 10) for _ in range(3)]
    expected = OSError if error == "ENOSPC" else KeyboardInterrupt
    with pytest.raises(expected) as err:
        write_h5md(tmp_path / "out.h5md", frames)
    if error == "ENOSPC":
        assert err.value.errno == errno.ENOSPC and "nothing was left behind" in str(err.value)
    assert list(tmp_path.iterdir()) == []
    monkeypatch.undo()
    import gc

    gc.collect()  # the HDF5 objects of the failed file are freed without harm
    write_h5md(tmp_path / "again.h5md", frames)  # and the library still works
    np.testing.assert_array_equal(open_model(tmp_path / "again.h5md", frame=2).read().positions, frames[2].positions)


def test_failed_rename_leaves_nothing(tmp_path, rng, monkeypatch):
    """The last step, the rename into place, fails (e.g. the folder became read-only)."""
    from kinemap._shared import output

    def refuse(src, dst):
        raise PermissionError(13, "Permission denied", str(dst))

    monkeypatch.setattr(output.os, "replace", refuse)
    with pytest.raises(PermissionError):
        write_h5md(tmp_path / "x.h5md", km.Model(rng.uniform(0, 1, (5, 3)), "Fe"))
    assert list(tmp_path.iterdir()) == []
