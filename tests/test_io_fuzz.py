"""A bounded, seeded fuzz run over the model-file readers.

Valid small files of every text and HDF5 format are damaged in many ways — truncated, bytes
flipped, attributes, shapes, dtypes and units replaced (through h5py, so the HDF5 structure
itself stays valid), lines of text replaced, dropped, repeated — and each damaged file goes
through ``open_model(...)``, ``describe()`` and the chunk iterator. The contract checked: each
either works or raises ModelFileError, InvalidInputError or FileNotFoundError; nothing else
escapes, and nothing hangs (a per-case alarm for Python-level loops, a process-level watchdog
for loops inside the HDF5 library).

The reference is the contract itself (docs/model-files.md, "Errors"), not the code under
test. Byte flips are applied to HDF5 files without variable-length strings: the HDF5 library
(2.0.0) can loop for ever inside its global-heap parser (H5HG__cache_heap_deserialize) on a
damaged variable-length string, which no reader on top of it can interrupt; see the report in
docs/model-files.md. For a longer search: KINEMAP_FUZZ_SCALE=30 (cases × 30) and
KINEMAP_FUZZ_SEED=1, 2, ... (other damage).
"""

from __future__ import annotations

import faulthandler
import json
import os
import shutil
import signal
from contextlib import contextmanager

import h5py
import numpy as np
import pytest

import kinemap as km
from kinemap.errors import InvalidInputError, ModelFileError

ALLOWED = (ModelFileError, InvalidInputError, FileNotFoundError)
SCALE = float(os.environ.get("KINEMAP_FUZZ_SCALE", "1"))
SEED = int(os.environ.get("KINEMAP_FUZZ_SEED", "0"))
#: Iterate chunks only of files that declare at most this many atoms (a damaged header may
#: declare 10¹² atoms in unwritten chunks: reading them all is a correct, endless job).
ITERATE_ATOMS = 100_000


class Hang(Exception):
    pass


@contextmanager
def deadline(seconds: float):
    def on_alarm(signum, frame):
        raise Hang(f"no answer within {seconds} s")

    old = signal.signal(signal.SIGALRM, on_alarm)
    signal.setitimer(signal.ITIMER_REAL, seconds)
    try:
        yield
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, old)


@pytest.fixture(autouse=True)
def watchdog():
    # A loop inside the HDF5 library never returns to Python: end the run with tracebacks.
    faulthandler.dump_traceback_later(300, exit=True)
    yield
    faulthandler.cancel_dump_traceback_later()


def exercise(path, **options) -> str:
    """open_model + describe + chunks; returns "ok" or the allowed error's class name."""
    with deadline(30):
        try:
            src = km.open_model(path, **options)
            d = src.describe()
            json.dumps(d, default=str)
            if src.n_atoms <= ITERATE_ATOMS:
                for _ in src.iter_chunks(7):
                    pass
                src.species_labels()
            if src.n_frames > 1:
                other = src.at_frame(-1)
                other.describe()
                if other.n_atoms <= ITERATE_ATOMS:
                    for _ in other.iter_chunks(64):
                        pass
            return "ok"
        except ALLOWED as exc:
            assert str(exc), "an error without a message"
            return type(exc).__name__


# ------------------------------------------------------------------------- base files
def h5md_fixed_strings(path, rng):
    """A hand-written H5MD file whose strings are all fixed-length (no global heap)."""
    n, frames = 30, 3
    with h5py.File(path, "w") as f:
        h = f.create_group("h5md")
        h.attrs["version"] = np.array([1, 1])
        h.create_group("creator").attrs["name"] = np.bytes_("fuzz")
        g = f.create_group("particles/all")
        pos = g.create_group("position")
        v = pos.create_dataset("value", data=rng.uniform(0, 10, (frames, n, 3)), chunks=(1, 8, 3))
        v.attrs["unit"] = np.bytes_("nm")
        pos.create_dataset("step", data=np.arange(frames) * 5)
        pos.create_dataset("time", data=np.arange(frames) * 0.25)
        box = g.create_group("box")
        box.attrs["dimension"] = 3
        box.attrs["boundary"] = np.array([b"periodic"] * 3)
        e = box.create_group("edges")
        e.create_dataset("value", data=np.array([np.diag([10.0, 11.0, 12.0]) * (1 + 0.01 * i) for i in range(frames)]))
        e["step"] = pos["step"]
        g.create_dataset("species", data=rng.integers(0, 2, n).astype(np.int8),
                         dtype=h5py.enum_dtype({"Fe": 0, "Ni": 1}, basetype=np.int8))
        g.create_dataset("occupancy", data=rng.uniform(0.5, 1, n))
        b = g.create_dataset("b_iso", data=rng.uniform(0, 1, n).round(1))
        b.attrs["unit"] = np.bytes_("0.01 nm+2")
        im = g.create_group("image")
        im.create_dataset("value", data=rng.integers(-1, 2, (frames, n, 3)))


def plain_fixed_strings(path, rng):
    n, frames = 25, 2
    with h5py.File(path, "w") as f:
        f.create_dataset("positions", data=rng.uniform(0, 8, (frames, n, 3)), chunks=(1, 10, 3))
        f["species"] = rng.choice([b"Si", b"O"], n).astype("S2")
        f["occupancy"] = rng.uniform(0.5, 1, n)
        f["u_aniso"] = np.broadcast_to(np.diag([0.01, 0.02, 0.03]), (n, 3, 3)).copy()
        c = f.create_dataset("cell", data=np.array([np.eye(3) * 8, np.eye(3) * 8.1]))
        c.attrs["unit"] = np.bytes_("angstrom")


def kinemap_h5md(path, rng):
    m = km.Model(rng.uniform(0, 9, (20, 3)), rng.choice(["Al", "Co"], 20).tolist(), cell=np.eye(3) * 9,
                 b_iso=0.4)
    km.write_h5md(path, [m, m.translated([0.5, 0, 0])])


def xyz_text(rng) -> bytes:
    out = []
    for t in range(3):
        out.append("4\n")
        out.append('Lattice="6 0 0 0 6 0 0 0 6" Properties=species:S:1:pos:R:3:occupancy:R:1 pbc="T T T" '
                   f"Time={t}\n")
        for s in ("Cu", "Au", "Cu", "Cu"):
            x = rng.uniform(0, 6, 3)
            out.append(f"{s} {x[0]:.6f} {x[1]:.6f} {x[2]:.6f} {rng.uniform(0.5, 1):.3f}\n")
    return "".join(out).encode()


def lammps_text(rng) -> bytes:
    out = []
    for t in range(2):
        out += ["ITEM: TIMESTEP\n", f"{100 * t}\n", "ITEM: NUMBER OF ATOMS\n", "4\n",
                "ITEM: BOX BOUNDS xy xz yz pp pp pp\n", "0 10.5 0.5\n", "0 9 0\n", "0 8 0\n",
                "ITEM: ATOMS id type xs ys zs\n"]
        for i in range(4):
            x = rng.uniform(0, 1, 3)
            out.append(f"{i + 1} {1 + i % 2} {x[0]:.5f} {x[1]:.5f} {x[2]:.5f}\n")
    return "".join(out).encode()


# ------------------------------------------------------------------------- mutations
ATTR_VALUES = ["", "0 nm", "-1 nm", "1e999 nm", "nan nm", "furlong", "0.1 nm+2", "periodic", b"\xff\xfe",
               5, -3, 0, 2.5, np.nan, np.array([1, 2, 3]), np.array([b"none", b"periodic"]), np.zeros((2, 2)),
               np.array([1 + 2j]), np.array(["nm", "nm"], dtype=h5py.string_dtype())]
DTYPES = [np.float32, np.int8, np.uint64, np.complex128, np.bool_, "S3", h5py.string_dtype(),
          np.dtype([("a", "f8"), ("b", "i4")])]


def _objects(f):
    names = []
    f.visit(names.append)
    return names


def mutate_hdf5(path, rng) -> str:
    """One structural change made with h5py; returns a description for failure messages."""
    with h5py.File(path, "r+") as f:
        names = _objects(f)
        name = names[rng.integers(len(names))]
        obj = f[name]
        kind = rng.integers(7)
        if kind == 0:  # an attribute replaced or added
            key = ["unit", "boundary", "dimension", "version", "names", "codes", "fractional", "offset", "name"][
                rng.integers(9)]
            val = ATTR_VALUES[rng.integers(len(ATTR_VALUES))]
            obj.attrs[key] = val
            return f"attribute {name}@{key} = {val!r}"
        if kind == 1 and isinstance(obj, h5py.Dataset):  # another dtype, same shape
            dt = DTYPES[rng.integers(len(DTYPES))]
            shape, attrs = obj.shape, dict(obj.attrs)
            del f[name]
            chunks = tuple(max(1, min(n, 4)) for n in shape) if shape and np.prod(shape, dtype=float) > 1e5 else None
            ds = f.create_dataset(name, shape=shape, dtype=dt, chunks=chunks)  # unwritten: fill values
            for k, v in attrs.items():
                ds.attrs[k] = v
            return f"dtype of {name} -> {dt}"
        if kind == 2 and isinstance(obj, h5py.Dataset):  # another shape
            shape = list(obj.shape) or [1]
            op = rng.integers(4)
            if op == 0:
                shape = shape[1:] or [0]
            elif op == 1:
                shape = shape + [2]
            elif op == 2:
                shape[rng.integers(len(shape))] = int(rng.integers(0, 5))
            else:  # a huge declared size in unwritten chunks
                shape[rng.integers(len(shape))] = 10**12
            del f[name]
            f.create_dataset(name, shape=tuple(shape), dtype="f8", chunks=tuple(max(1, min(s, 4)) for s in shape))
            return f"shape of {name} -> {shape}"
        if kind == 3 and isinstance(obj, h5py.Dataset) and obj.dtype.kind in "fiu" and 0 < obj.size < 10**5:
            data = np.asarray(obj[()], dtype=np.float64)
            flat = data.reshape(-1)
            flat[rng.integers(flat.size)] = [np.nan, np.inf, -1e300, -7, 1e18][rng.integers(5)]
            try:
                with np.errstate(invalid="ignore", over="ignore"):
                    obj[...] = data.astype(obj.dtype)
            except (ValueError, TypeError, OverflowError):
                pass
            return f"a value of {name}"
        if kind == 4:  # removed
            del f[name]
            return f"removed {name}"
        if kind == 5:  # a group becomes a dataset or a dataset a group
            del f[name]
            if isinstance(obj, h5py.Dataset):
                f.create_group(name)
            else:
                f[name] = np.arange(3.0)
            return f"kind of {name} changed"
        # links: a loop of soft links or an external link to a missing file
        del f[name]
        if rng.integers(2):
            f[name] = h5py.SoftLink("/" + name)
            return f"{name} a soft link to itself"
        f[name] = h5py.ExternalLink("missing-file.h5", "/x")
        return f"{name} an external link"


def flip_bytes(data: bytes, rng) -> bytes:
    d = bytearray(data)
    op = rng.integers(3)
    if op == 0:
        return bytes(d[: rng.integers(0, len(d))])
    if op == 1:
        for _ in range(rng.integers(1, 12)):
            d[rng.integers(len(d))] ^= 1 << int(rng.integers(8))
        return bytes(d)
    a = int(rng.integers(len(d)))
    n = min(int(rng.integers(1, 48)), len(d) - a)
    d[a:a + n] = rng.integers(0, 256, n, dtype=np.uint8).tobytes()
    return bytes(d)


TOKENS = ["0", "-5", "3", "1e999", "nan", "inf", "-1", "Fe", "ITEM: ATOMS id type x y z", "ITEM: NUMBER OF ATOMS",
          "ITEM: BOX BOUNDS pp pp pp", "10 0", "5 2", 'Lattice="0 0 0 0 0 0 0 0 0"', "Properties=pos:R:3",
          "Properties=species:S:1:pos:R:2", "\xff\xfe", "x" * 300, "1 2", "1 2 3 4 5 6 7", ""]


def mutate_text(data: bytes, rng) -> bytes:
    lines = data.split(b"\n")
    op = rng.integers(6)
    i = int(rng.integers(len(lines)))
    if op == 0:
        del lines[i]
    elif op == 1:
        lines.insert(i, lines[int(rng.integers(len(lines)))])
    elif op == 2:
        k = int(rng.integers(1, 4))
        lines[i] = " ".join(TOKENS[int(rng.integers(len(TOKENS)))] for _ in range(k)).encode("utf-8", "surrogateescape")
    elif op == 3:
        j = int(rng.integers(len(lines)))
        lines[i], lines[j] = lines[j], lines[i]
    elif op == 4:
        return flip_bytes(data, rng)
    else:
        words = lines[i].split()
        if words:
            words[int(rng.integers(len(words)))] = TOKENS[int(rng.integers(len(TOKENS)))].encode("utf-8", "surrogateescape")
            lines[i] = b" ".join(words)
    return b"\n".join(lines)


# ------------------------------------------------------------------------------ tests
def _cases(n):
    return max(1, int(round(n * SCALE)))


@pytest.mark.parametrize("maker, suffix, flips", [
    (h5md_fixed_strings, ".h5md", True),
    (plain_fixed_strings, ".h5", True),
    (kinemap_h5md, ".h5md", False),
])
def test_fuzz_hdf5_readers(tmp_path, maker, suffix, flips):
    rng = np.random.default_rng(2024 + SEED)
    base = tmp_path / f"base{suffix}"
    maker(base, rng)
    assert exercise(base) == "ok"
    outcomes = {}
    for case in range(_cases(40)):
        path = tmp_path / f"case{case}{suffix}"
        shutil.copyfile(base, path)
        what = "structure"
        try:
            for _ in range(int(rng.integers(1, 3))):
                what = mutate_hdf5(path, rng)
        except (OSError, KeyError, ValueError, TypeError):
            continue  # h5py could not make this change: nothing to test
        if flips and rng.integers(3) == 0:
            path.write_bytes(flip_bytes(path.read_bytes(), rng))
            what += " + damaged bytes"
        try:
            outcome = exercise(path)
        except Exception as exc:
            raise AssertionError(f"case {case} ({what}): {type(exc).__name__}: {exc}") from exc
        outcomes[outcome] = outcomes.get(outcome, 0) + 1
        path.unlink()
    assert outcomes.get("ModelFileError", 0) > 0  # the damage was seen


@pytest.mark.parametrize("maker, suffix", [(xyz_text, ".xyz"), (lammps_text, ".lammpstrj")])
def test_fuzz_text_readers(tmp_path, maker, suffix):
    rng = np.random.default_rng(7 + SEED)
    base = maker(rng)
    path = tmp_path / f"base{suffix}"
    path.write_bytes(base)
    assert exercise(path, species_map="1=Fe,2=Ni") == "ok"
    outcomes = {}
    for case in range(_cases(120)):
        data = base
        for _ in range(int(rng.integers(1, 4))):
            data = mutate_text(data, rng)
        path.write_bytes(data)
        try:
            outcome = exercise(path, species_map="1=Fe,2=Ni")
        except Exception as exc:
            raise AssertionError(f"case {case}: {type(exc).__name__}: {exc}\n--- file ---\n"
                                 f"{data[:2000].decode('utf-8', 'replace')}") from exc
        outcomes[outcome] = outcomes.get(outcome, 0) + 1
    assert outcomes.get("ok", 0) > 0 and outcomes.get("ModelFileError", 0) > 0


def test_fuzz_byte_flips_of_hdf5_without_variable_strings(tmp_path):
    rng = np.random.default_rng(11 + SEED)
    base = tmp_path / "base.h5md"
    h5md_fixed_strings(base, rng)
    data = base.read_bytes()
    path = tmp_path / "case.h5md"
    outcomes = {}
    for case in range(_cases(60)):
        path.write_bytes(flip_bytes(data, rng))
        try:
            outcome = exercise(path)
        except Exception as exc:
            raise AssertionError(f"case {case}: {type(exc).__name__}: {exc}") from exc
        outcomes[outcome] = outcomes.get(outcome, 0) + 1
    assert outcomes.get("ModelFileError", 0) > 0
