"""Hostile and careless input: each case gets a clear error naming the problem (or a correct
result), and no output file is left half-written. The table is kept in docs/bad-input.md too
(a test below checks that every case is listed there).

The expected behaviour is the project's contract (DESIGN.md "Errors and bad input"); the only
outside facts used are POSIX ones (signals, file types, umask semantics).
"""

import os
import signal
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pytest

import kinemap as km
from kinemap.errors import InvalidInputError

LINE = km.QGrid.line([0.1, 0, 0], [2, 0.5, 0], 5)


def one_atom():
    return km.Model([[0.0, 0, 0]], "Fe")


# (id, call, exception, message pattern)
CASES = [
    ("threads-huge", lambda: km.scatter(one_atom(), LINE, threads=2**70), InvalidInputError, "threads per core"),
    ("threads-too-many", lambda: km.scatter(one_atom(), LINE, threads=3000), InvalidInputError, "threads per core"),
    ("threads-zero", lambda: km.scatter(one_atom(), LINE, threads=0), InvalidInputError, ">= 1"),
    ("threads-float", lambda: km.scatter(one_atom(), LINE, threads=2.0), InvalidInputError, "whole number"),
    ("tol-nan", lambda: km.scatter(one_atom(), LINE, tol=float("nan")), InvalidInputError, "finite"),
    ("tol-complex", lambda: km.scatter(one_atom(), LINE, tol=1e-6 + 0j), InvalidInputError, "real number"),
    ("chunk-bool", lambda: km.scatter(one_atom(), LINE, chunk_atoms=True), InvalidInputError, "whole number"),
    ("method-unknown", lambda: km.scatter(one_atom(), LINE, method="fast"), InvalidInputError, "`method`"),
    ("positions-complex", lambda: km.Model([[1 + 1j, 0, 0]], "Fe"), InvalidInputError, "complex"),
    ("positions-text", lambda: km.Model([["a", "b", "c"]], "Fe"), InvalidInputError, "real numbers"),
    ("positions-nan", lambda: km.Model([[0, 0, 0], [np.nan, 0, 0]], "Fe"), InvalidInputError, "atom 1"),
    ("positions-billion-rows", lambda: km.Model(np.broadcast_to(np.zeros(3), (10**9, 3)), "Fe"),
     InvalidInputError, "would need about"),
    ("supercell-fraction", lambda: km.Model([[0, 0, 0]], "Fe", cell=np.eye(3), supercell=(2, 2.5, 2)),
     InvalidInputError, "whole numbers"),
    ("supercell-no-cell", lambda: km.Model([[0, 0, 0]], "Fe", supercell=(2, 2, 2)), InvalidInputError,
     "needs a `cell`"),
    ("box-cell-disagree", lambda: km.Model([[0, 0, 0]], "Fe", cell=np.eye(3), box=np.eye(3) * 3, supercell=(2, 2, 2)),
     InvalidInputError, "is not `supercell`"),
    ("grid-complex", lambda: km.QGrid.points([[1j, 0, 0]]), InvalidInputError, "complex"),
    ("grid-bool-count", lambda: km.QGrid.line([0, 0, 0], [1, 0, 0], True), InvalidInputError, "whole number"),
    ("grid-snap-points", lambda: km.QGrid.points([[0, 0, 0]]).snapped(np.eye(3)), AttributeError, "snapped"),
    ("pattern-complex-intensity", lambda: km.Pattern(LINE, intensity=np.ones(5) * 1j), InvalidInputError, "real"),
    ("pattern-negative-sigma", lambda: km.Pattern.from_array(np.ones(5), LINE, sigma=-np.ones(5)),
     InvalidInputError, "negative at index"),
    ("pattern-mask-not-bool", lambda: km.Pattern.from_array(np.ones(5), LINE, mask=np.ones(5)),
     InvalidInputError, "boolean"),
    ("frames-split-unknown", lambda: km.average_frames([one_atom()], LINE, split="time"), InvalidInputError,
     "`split`"),
    ("frames-positional-probe", lambda: km.average_frames([one_atom()], LINE, "xray"), TypeError, "positional"),
]


@pytest.mark.parametrize("case_id, call, exc, pattern", CASES, ids=[c[0] for c in CASES])
def test_bad_input_table(case_id, call, exc, pattern):
    with pytest.raises(exc, match=pattern):
        call()


def test_the_table_is_in_the_docs():
    doc = (Path(__file__).parent.parent / "docs" / "bad-input.md").read_text()
    missing = [c[0] for c in CASES if f"`{c[0]}`" not in doc]
    assert not missing, f"docs/bad-input.md does not list {missing}"


def test_numpy_scalars_are_accepted():
    m = one_atom()
    ref = km.scatter(m, LINE, probe="unit").amplitude
    got = km.scatter(m, LINE, probe="unit", tol=np.float32(1e-3), threads=np.int64(2),
                     chunk_atoms=np.int64(1000)).amplitude
    np.testing.assert_array_equal(got, ref)


# --- output files --------------------------------------------------------------------------
def small_map():
    return km.scatter(one_atom(), LINE, probe="unit")


def test_existing_output_is_kept_without_overwrite(tmp_path):
    out = tmp_path / "m.h5"
    out.write_bytes(b"precious")
    with pytest.raises(FileExistsError, match="overwrite"):
        small_map().save(out)
    assert out.read_bytes() == b"precious"
    small_map().save(out, overwrite=True)
    assert km.load_pattern(out).intensity.shape == (5,)


def test_symlink_and_device_outputs_are_refused(tmp_path):
    target = tmp_path / "target.h5"
    target.write_bytes(b"x")
    link = tmp_path / "link.h5"
    link.symlink_to(target)
    with pytest.raises(OSError, match="symbolic link"):
        small_map().save(link, overwrite=True)
    assert target.read_bytes() == b"x" and link.is_symlink()
    with pytest.raises(OSError, match="not a regular file"):
        small_map().save("/dev/null", overwrite=True)
    assert Path("/dev/null").is_char_device()


def test_output_that_is_an_input_is_refused(tmp_path):
    model = tmp_path / "run.h5md"
    km.write_h5md(model, one_atom())
    before = model.read_bytes()
    from kinemap.cli import main

    rc = main(["map", str(model), "--points", str(_points(tmp_path)), "-o", str(model), "--overwrite", "-q",
               "--no-progress"])
    assert rc == 1 and model.read_bytes() == before


def _points(tmp_path):
    p = tmp_path / "q.npy"
    np.save(p, np.array([[0.1, 0, 0]]))
    return p


def test_non_utf8_file_name_is_refused_before_work(tmp_path):
    bad = os.fsdecode(bytes(tmp_path) + b"/m\xff.h5")
    with pytest.raises(InvalidInputError, match="not valid UTF-8"):
        small_map().save(bad)
    assert list(tmp_path.iterdir()) == []


def test_files_follow_the_umask(tmp_path):
    old = os.umask(0o022)
    try:
        out = small_map().save(tmp_path / "m.h5")
    finally:
        os.umask(old)
    assert out.stat().st_mode & 0o777 == 0o644  # readable by others, as with any program's files


def test_ctrl_c_while_writing_keeps_the_old_file(tmp_path, monkeypatch):
    out = tmp_path / "m.h5"
    small_map().save(out)
    before = out.read_bytes()
    import kinemap.pattern as pattern_module

    real = pattern_module._write_params

    def interrupted(group, params):
        os.kill(os.getpid(), signal.SIGINT)  # arrives in the middle of the write
        return real(group, params)

    monkeypatch.setattr(pattern_module, "_write_params", interrupted)
    with pytest.raises(KeyboardInterrupt):
        small_map().save(out, overwrite=True)
    assert out.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["m.h5"]


KILL_SCRIPT = textwrap.dedent("""
    import sys, time, numpy as np, kinemap as km
    import kinemap.pattern as pm
    real = pm._write_params
    def slow(group, params):
        print("writing", flush=True)
        time.sleep(3)
        return real(group, params)
    pm._write_params = slow
    g = km.QGrid.line([0.1, 0, 0], [2, 0, 0], 200000)
    km.Pattern(g, intensity=np.ones(g.shape)).save(sys.argv[1], overwrite=True)
""")


@pytest.mark.parametrize("sig", [signal.SIGTERM, signal.SIGKILL])
def test_killed_while_writing(tmp_path, sig):
    out = tmp_path / "m.h5"
    small_map().save(out)
    before = out.read_bytes()
    with subprocess.Popen([sys.executable, "-c", KILL_SCRIPT, str(out)], stdout=subprocess.PIPE, text=True) as proc:
        try:
            assert proc.stdout.readline().strip() == "writing"
            proc.send_signal(sig)
            proc.wait(timeout=60)
        finally:
            if proc.poll() is None:
                proc.kill()
    assert proc.returncode == -sig
    assert out.read_bytes() == before  # the old output is intact
    left = [p.name for p in tmp_path.iterdir() if p.name != "m.h5"]
    if sig == signal.SIGTERM:
        assert left == []  # SIGTERM is held until the temporary file is removed
    else:
        assert len(left) == 1  # SIGKILL cannot be caught: the next write into the folder cleans up
        small_map().save(tmp_path / "other.h5")
        assert sorted(p.name for p in tmp_path.iterdir()) == ["m.h5", "other.h5"]


MEMORY_SCRIPT = textwrap.dedent("""
    import resource, numpy as np, kinemap as km
    from kinemap.errors import InvalidInputError
    resource.setrlimit(resource.RLIMIT_AS, (1 << 30, 1 << 30))
    try:
        km.scatter(km.Model([[0.0, 0, 0]], "Fe"), km.QGrid.plane([0, 0, 0], [1, 0, 0], [0, 1, 0], (6000, 6000)))
    except InvalidInputError as exc:
        print("refused:", exc)
""")


def test_map_beyond_the_address_space_limit_is_refused_up_front():
    # 6000 × 6000 points need ~1.4 GB of outputs: more than a 1 GiB `ulimit -v` allows.
    res = subprocess.run([sys.executable, "-c", MEMORY_SCRIPT], capture_output=True, text=True, timeout=120)
    assert res.returncode == 0, res.stderr
    assert "refused:" in res.stdout and "ulimit -v" in res.stdout


def test_map_file_without_optional_datasets_loads(tmp_path):
    import h5py

    out = small_map().save(tmp_path / "m.h5")
    with h5py.File(out, "a") as f:
        for name in ("axis_names", "axis_units", "hkl_origin"):
            if name in f["entry/grid"]:
                del f["entry/grid"][name]
    back = km.load_pattern(out)
    np.testing.assert_allclose(back.grid.q_vectors(), LINE.q_vectors())
    pts = km.scatter(one_atom(), km.QGrid.points([[0.1, 0, 0]]), probe="unit").save(tmp_path / "p.h5")
    with h5py.File(pts, "a") as f:
        del f["entry/data/q"]
    with pytest.raises(km.ModelFileError, match="/entry/data/q"):
        km.load_pattern(pts)


def test_unaligned_arrays_are_accepted():
    # Arrays rebuilt from pickled buffers (as on a Dask worker) can be unaligned views; the
    # result must equal the one of aligned copies of the same numbers.
    def unaligned(values):
        raw = b"\0" + np.ascontiguousarray(values, dtype=np.float64).tobytes()
        return np.frombuffer(raw, dtype=np.float64, offset=1).reshape(np.shape(values))

    rng = np.random.default_rng(9)
    pos, q = rng.uniform(0, 10, (7, 3)), rng.uniform(-2, 2, (5, 3))
    assert not unaligned(q).flags["ALIGNED"]
    ref = km.scatter(km.Model(pos, "Fe"), km.QGrid.points(q), method="exact").amplitude
    got = km.scatter(km.Model(unaligned(pos), "Fe"), km.QGrid.points(unaligned(q)), method="exact").amplitude
    np.testing.assert_array_equal(got, ref)
