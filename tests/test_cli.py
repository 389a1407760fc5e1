"""The ``kinemap`` command line, end to end through ``kinemap.cli.main`` and as a subprocess.

References: maps are checked against a NumPy direct sum (unit probe) or the library call they
wrap; the file layout against the NeXus NXdata rules (docs/references.md, File formats) read with plain h5py.
"""

import os
import subprocess
import sys

import h5py
import numpy as np
import pytest
from conftest import numpy_amplitude

import kinemap as km
from kinemap.cli import main
from kinemap.io import write_h5md

CELL = np.array([[6.0, 0.0, 0.0], [0.0, 6.0, 0.0], [0.0, 0.0, 6.0]])


@pytest.fixture
def traj(tmp_path, rng):
    sp = rng.choice(["Fe", "Ni"], 120).tolist()
    frames = [km.Model(rng.uniform(0, 6, (120, 3)), sp, cell=CELL) for _ in range(4)]
    path = write_h5md(tmp_path / "traj.h5md", frames)
    return path, frames


def _err_line(capsys):
    err = capsys.readouterr().err.strip().splitlines()
    assert err, "expected a message on stderr"
    assert "Traceback" not in "\n".join(err)
    return err[-1]


def test_map_hkl_end_to_end(tmp_path, traj, capsys):
    path, frames = traj
    out = tmp_path / "m.h5"
    rc = main(["map", str(path), "--frame", "2", "--hkl", "--h", "-2:2:9", "--k", "-1:1:5", "--l", "0.5",
               "--probe", "unit", "-o", str(out), "--png", "--no-progress"])
    assert rc == 0
    text = capsys.readouterr().out
    assert f"map written: {out}" in text and "picture written" in text
    pat = km.load_pattern(out)
    grid = km.QGrid.hkl(CELL, h=(-2, 2, 9), k=(-1, 1, 5), l=0.5)
    q = grid.q_vectors()
    ref = numpy_amplitude(frames[2].positions, q, np.ones((len(q), 120))).reshape(grid.shape)
    np.testing.assert_allclose(pat.amplitude, ref, rtol=1e-9, atol=1e-9 * np.abs(ref).max())
    with h5py.File(out) as f:  # NeXus: root default → entry default → NXdata signal
        assert f.attrs["default"] == "entry" and f["entry"].attrs["default"] == "data"
        assert f["entry/data"].attrs["NX_class"] == "NXdata"
        prov = f["entry/parameters/provenance"]
        assert prov["input_file"][()].decode() == str(path.resolve())
        assert prov["frames"][()].decode() == "[2]"
        assert prov["probe"][()].decode() == "unit"
        assert prov["method"][()].decode() == "exact"
        for key in ("grid", "tolerance", "kinemap_version", "date", "command"):
            assert key in prov
    assert (tmp_path / "m.png").stat().st_size > 1000


def test_map_plane_with_negative_vectors(tmp_path, traj):
    path, frames = traj
    out = tmp_path / "p.h5"
    assert main(["map", str(path), "--plane", "-2,-2,0", "4,0,0", "0,4,0", "--size", "7,5", "--probe", "unit",
                 "-o", str(out), "--no-progress", "-q"]) == 0
    pat = km.load_pattern(out)
    grid = km.QGrid.plane([-2, -2, 0], [4, 0, 0], [0, 4, 0], (7, 5))
    ref = numpy_amplitude(frames[0].positions, grid.q_vectors(), np.ones((35, 120))).reshape(7, 5)
    np.testing.assert_allclose(pat.intensity, np.abs(ref) ** 2, rtol=1e-9, atol=1e-9 * np.abs(ref).max() ** 2)


def test_average_end_to_end(tmp_path, traj, capsys):
    path, frames = traj
    rc = main(["average", str(path), "--frames", "1:4", "--line", "0,0,0", "3,1,0", "--size", "12",
               "--probe", "unit", "-o", str(tmp_path / "run"), "--png", "--no-progress", "--keep-drift"])
    assert rc == 0
    names = sorted(p.name for p in tmp_path.iterdir())
    assert names == ["run_bragg.h5", "run_bragg.png", "run_diffuse.h5", "run_diffuse.png", "run_total.h5",
                     "run_total.png", "traj.h5md"]
    grid = km.QGrid.line([0, 0, 0], [3, 1, 0], 12)
    amps = np.array([numpy_amplitude(frames[t].positions, grid.q_vectors(), np.ones((12, 120))) for t in (1, 2, 3)])
    total = np.mean(np.abs(amps) ** 2, axis=0)
    diffuse = np.var(amps, axis=0, ddof=1)  # unbiased variance over the frames (NumPy)
    d = km.load_pattern(tmp_path / "run_diffuse.h5")
    np.testing.assert_allclose(d.intensity, diffuse, rtol=1e-8, atol=1e-9 * total.max())
    assert d.metadata["frames"] == [1, 2, 3] and d.metadata["provenance"]["frames"] == [1, 2, 3]
    out = capsys.readouterr()
    assert "averaged 3 frame(s)" in out.out
    assert "caution: the Bragg/diffuse split over frames uses only 3 frame(s)" in out.err


def test_convert_info_render(tmp_path, rng, capsys):
    xyz = tmp_path / "a.xyz"
    with open(xyz, "w") as fh:
        for t in range(2):
            fh.write('3\nLattice="4 0 0 0 4 0 0 0 4" Properties=species:S:1:pos:R:3\n')
            for j, s in enumerate(["Cu", "Cu", "Au"]):
                fh.write(f"{s} {j + 0.1 * t} 1 1\n")
    assert main(["convert", str(xyz), "-o", str(tmp_path / "a.h5md"), "--no-progress"]) == 0
    assert "2 frame(s) of 3 atoms" in capsys.readouterr().out
    assert main(["info", str(tmp_path / "a.h5md"), "--frame", "1", "--count", "--json"]) == 0
    import json

    info = json.loads(capsys.readouterr().out)
    assert info["n_atoms"] == 3 and info["frame"] == 1 and info["species_counts"] == {"Au": 1, "Cu": 2}
    assert info["cell"] == [[4, 0, 0], [0, 4, 0], [0, 0, 4]]
    assert main(["map", str(tmp_path / "a.h5md"), "--hkl", "--h", "0:2:5", "--k", "0:2:5", "-o",
                 str(tmp_path / "m.h5"), "--no-progress", "-q"]) == 0
    assert main(["info", str(tmp_path / "m.h5")]) == 0
    out = capsys.readouterr().out
    assert "content" in out and "map" in out and "[5, 5]" in out
    assert main(["render", str(tmp_path / "m.h5"), "--scale", "linear", "--dpi", "20", "--size", "4,3"]) == 0
    import matplotlib.image as mpimg

    assert mpimg.imread(tmp_path / "m.png").shape[:2] == (60, 80)


def test_electron_cautions_printed(tmp_path, traj, capsys):
    path, _ = traj
    rc = main(["map", str(path), "--line", "0,0,0", "1,0,0", "--size", "3", "--probe", "electron",
               "--voltage", "300", "-o", str(tmp_path / "e.h5"), "--no-progress"])
    assert rc == 0
    err = capsys.readouterr().err
    assert "kinemap: caution:" in err
    pat = km.load_pattern(tmp_path / "e.h5")
    assert pat.metadata["cautions"] and pat.metadata["cautions"][0] in err


# ------------------------------------------------------------------------ bad input
def _h5_missing_position(p):
    with h5py.File(p, "w") as f:
        f.create_group("h5md")
        f.create_dataset("particles/all/species", data=np.zeros(3, int))


def _h5_mismatch(p):
    with h5py.File(p, "w") as f:
        f["particles/all/position/value"] = np.zeros((2, 5, 3))
        f["particles/all/species"] = np.zeros(4, int)


def _h5_unknown_code(p):
    with h5py.File(p, "w") as f:
        f["particles/all/position/value"] = np.zeros((1, 5, 3))
        f.create_dataset("particles/all/species", data=np.array([0, 0, 1, 7, 0], dtype=np.int8),
                         dtype=h5py.enum_dtype({"Fe": 0, "Ni": 1}, basetype=np.int8))


def _truncated(p):
    with h5py.File(p, "w") as f:
        f["particles/all/position/value"] = np.zeros((1, 20000, 3))
        f["particles/all/species"] = np.zeros(20000, int)
    data = p.read_bytes()
    p.write_bytes(data[: len(data) // 3])


@pytest.mark.parametrize("make, code, message", [
    (_h5_missing_position, 3, r"'/particles/all/position' is missing; /particles/all has: species"),
    (_h5_mismatch, 3, r"species has shape \[4\].*5 atoms.*mismatched"),
    (_h5_unknown_code, 3, r"atom 3 \(frame 0\) has species code 7"),
    (_truncated, 3, r"bad\.h5"),
])
def test_bad_model_files(tmp_path, capsys, make, code, message):
    import re

    bad = tmp_path / "bad.h5"
    make(bad)
    before = sorted(os.listdir(tmp_path))
    rc = main(["map", str(bad), "--line", "0,0,0", "1,0,0", "--size", "3", "--probe", "unit",
               "-o", str(tmp_path / "out.h5"), "--no-progress"])
    assert rc == code
    line = _err_line(capsys)
    assert line.startswith("kinemap: error: ") and re.search(message, line), line
    assert sorted(os.listdir(tmp_path)) == before  # nothing half-written


@pytest.mark.parametrize("output", ["missing_dir/x.h5", "is_a_dir", "a_file.txt/x.h5"])
def test_unwritable_output(tmp_path, traj, capsys, output):
    path, _ = traj
    (tmp_path / "is_a_dir").mkdir()
    (tmp_path / "a_file.txt").write_text("x")
    before = sorted(os.listdir(tmp_path))
    rc = main(["map", str(path), "--line", "0,0,0", "1,0,0", "--size", "3", "-o", str(tmp_path / output),
               "--no-progress"])
    assert rc == 3
    line = _err_line(capsys)
    assert line.startswith("kinemap: error: ") and output.split("/")[0] in line
    assert sorted(os.listdir(tmp_path)) == before


@pytest.mark.parametrize("argv, code, message", [
    (["map", "{m}", "-o", "{d}/x.h5"], 2, "choose a grid"),
    (["map", "{m}", "--plane", "0,0", "1,0,0", "0,1,0", "--size", "3,3", "-o", "{d}/x.h5"], 2, "must be 3 finite numbers"),
    (["map", "{m}", "--line", "0,0,0", "1,0,0", "-o", "{d}/x.h5"], 2, "--line needs --size"),
    (["map", "{m}", "--frame", "9", "--line", "0,0,0", "1,0,0", "--size", "3", "-o", "{d}/x.h5"], 1, "`frame` 9 is out of range"),
    (["map", "{m}", "--probe", "gamma", "--line", "0,0,0", "1,0,0", "--size", "3", "-o", "{d}/x.h5"], 1, "unknown probe 'gamma'"),
    (["average", "{m}", "--frames", "0:2:0", "--line", "0,0,0", "1,0,0", "--size", "3", "-o", "{d}/x"], 1,
     "the step cannot be 0"),
    (["info", "{d}/nothing.h5"], 3, "no such file"),
    (["render", "{m}"], 3, "is not a kinemap map"),
    (["map", "{m}", "--voltage", "200", "--line", "0,0,0", "1,0,0", "--size", "3", "-o", "{d}/x.h5"], 2, "--voltage"),
    (["shred", "{m}"], 2, "invalid choice"),
])
def test_usage_and_input_errors(tmp_path, traj, capsys, argv, code, message):
    path, _ = traj
    argv = [a.format(m=path, d=tmp_path) for a in argv]
    before = sorted(os.listdir(tmp_path))
    assert main(argv) == code
    line = _err_line(capsys)
    assert line.startswith("kinemap: error: ") and message in line, line
    assert sorted(os.listdir(tmp_path)) == before


def test_interrupt_leaves_nothing(tmp_path, traj, capsys, monkeypatch):
    path, _ = traj
    import kinemap.pattern as pattern_mod

    def boom(*a, **k):
        raise KeyboardInterrupt

    monkeypatch.setattr(pattern_mod, "_write_params", boom)  # dies half-way through the HDF5 write
    before = sorted(os.listdir(tmp_path))
    rc = main(["map", str(path), "--line", "0,0,0", "1,0,0", "--size", "3", "-o", str(tmp_path / "x.h5"),
               "--no-progress"])
    assert rc == 130
    assert "interrupted" in _err_line(capsys)
    assert sorted(os.listdir(tmp_path)) == before


def test_help_and_version(capsys):
    assert main(["--help"]) == 0
    out = capsys.readouterr().out
    for word in ("map", "average", "convert", "render", "info", "demo", "kinemap demo"):
        assert word in out
    assert main(["map", "--help"]) == 0
    assert "--plane ORIGIN U V --size NU,NV" in capsys.readouterr().out
    assert main(["--version"]) == 0
    assert km.__version__ in capsys.readouterr().out


def test_subprocess(tmp_path, traj):
    path, _ = traj
    env = dict(os.environ, MPLBACKEND="Agg")
    ok = subprocess.run([sys.executable, "-m", "kinemap", "map", str(path), "--hkl", "--h", "-1:1:3", "--k", "0",
                         "--probe", "unit", "-o", str(tmp_path / "s.h5"), "--no-progress"],
                        capture_output=True, text=True, env=env, timeout=120)
    assert ok.returncode == 0, ok.stderr
    assert km.load_pattern(tmp_path / "s.h5").intensity.shape == (3,)
    bad = subprocess.run([sys.executable, "-m", "kinemap", "info", str(tmp_path / "none.h5md")],
                         capture_output=True, text=True, env=env, timeout=120)
    assert bad.returncode == 3
    assert bad.stderr.strip() == f"kinemap: error: no such file: {str(tmp_path / 'none.h5md')!r}"


def test_points_files_and_volume_slice(tmp_path, traj, capsys):
    path, frames = traj
    q = np.array([[0.0, 0.0, 0.0], [1.0, 0.5, -0.2], [-2.0, 0.1, 0.3]])
    np.save(tmp_path / "q.npy", q)
    np.savetxt(tmp_path / "q.txt", q)
    ref = numpy_amplitude(frames[0].positions, q, np.ones((3, 120)))
    for name in ("q.npy", "q.txt"):
        out = tmp_path / f"{name}.h5"
        assert main(["map", str(path), "--points", str(tmp_path / name), "--probe", "unit", "-o", str(out),
                     "--no-progress", "-q"]) == 0
        np.testing.assert_allclose(km.load_pattern(out).amplitude, ref, rtol=1e-10, atol=1e-9 * np.abs(ref).max())
    assert main(["map", str(path), "--points", str(tmp_path / "q.npy"), "--png", "-o", str(tmp_path / "x.h5")]) == 2
    assert "--png needs a regular grid" in _err_line(capsys)
    vol = tmp_path / "v.h5"
    assert main(["map", str(path), "--volume", "0,0,0", "1,0,0", "0,1,0", "0,0,1", "--size", "4,5,6",
                 "-o", str(vol), "--no-progress", "-q"]) == 0
    assert main(["render", str(vol), "--slice-axis", "u", "--slice-index", "-1", "-o", str(tmp_path / "v.png"),
                 "-q"]) == 0
    assert (tmp_path / "v.png").exists()
    assert main(["map", str(path), "--line", "0,0,0", "1,0,0", "--size", "3", "--threads", "0",
                 "-o", str(tmp_path / "t.h5"), "--no-progress"]) == 1
    assert "`threads` must be a whole number >= 1" in _err_line(capsys)


@pytest.mark.parametrize("text", ["3,4,5,80,95,105", "3,3,5,90,90,120"])
def test_cell_from_lengths_and_angles(text):
    from kinemap.cli._args import cell as parse_cell

    a, b, c, al, be, ga = (float(x) for x in text.split(","))
    cell = parse_cell(text)
    # Metric tensor G_ij = a_i·a_j (International Tables Vol. A/B, standard definition).
    cos = np.cos(np.radians([al, be, ga]))
    g = np.array([[a * a, a * b * cos[2], a * c * cos[1]],
                  [a * b * cos[2], b * b, b * c * cos[0]],
                  [a * c * cos[1], b * c * cos[0], c * c]])
    np.testing.assert_allclose(cell @ cell.T, g, atol=1e-12)
