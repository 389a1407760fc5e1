"""The supercell workflow on the command line: the parent cell's h, k, l, the note when h, k, l
refer to the whole box, lines in h, k, l, the split over cells, and outputs that are kept.

References: the Laue function of an M-cell supercell (M·F at the parent cell's reciprocal
points, 0 at the box's other ones; docs/references.md, Crystals); the fcc structure factor
4f for unmixed h, k, l and 0 for mixed ones (Warren, ch. 4 — from memory).
"""

import numpy as np
import pytest

import kinemap as km
from kinemap.cli import main

A = 3.6
FCC = np.array([[0, 0, 0], [0, 0.5, 0.5], [0.5, 0, 0.5], [0.5, 0.5, 0]])


@pytest.fixture
def fcc_file(tmp_path):
    unit = km.Model(FCC, "Cu", cell=np.eye(3) * A, fractional=True)
    sc = unit.tiled((4, 4, 4))
    return km.write_h5md(tmp_path / "cu.h5md", sc), sc


def test_map_in_the_parent_cells_hkl(fcc_file, tmp_path, capsys):
    path, model = fcc_file
    out = tmp_path / "hk0.h5"
    assert main(["map", str(path), "--supercell", "4,4,4", "--hkl", "--h", "0:2:9", "--k", "0:2:9", "--l", "0",
                 "--probe", "unit", "-o", str(out), "--no-progress", "-q"]) == 0
    err = capsys.readouterr().err
    assert "whole box" not in err and "off the reciprocal lattice" not in err
    pat = km.load_pattern(out)
    hkl = pat.grid.hkl_values().reshape(9, 9, 3)
    n = model.n_atoms
    integer = np.all(np.abs(hkl - np.round(hkl)) < 1e-9, axis=-1)
    unmixed = integer & np.all(np.round(hkl) % 2 == np.round(hkl[..., :1]) % 2, axis=-1)
    np.testing.assert_allclose(pat.intensity[unmixed], n**2, rtol=1e-10)  # (4·64 atoms)² with f = 1
    assert pat.intensity[~unmixed].max() < 1e-18 * n**2
    np.testing.assert_allclose(pat.grid.cell, np.eye(3) * A)


def test_hkl_of_the_box_is_said_on_screen(fcc_file, tmp_path, capsys):
    path, _ = fcc_file
    assert main(["map", str(path), "--hkl", "--h", "0:8:9", "--l", "0", "--probe", "unit",
                 "-o", str(tmp_path / "box.h5"), "--no-progress", "-q"]) == 0
    err = capsys.readouterr().err
    assert "h, k, l refer to the model's whole box" in err and "--supercell" in err


def test_a_line_in_hkl_rendered_in_rlu(fcc_file, tmp_path):
    path, _ = fcc_file
    out = tmp_path / "hh0.h5"
    assert main(["map", str(path), "--supercell", "4,4,4", "--line", "0,0,0", "2,2,0", "--size", "9", "--rlu",
                 "--probe", "unit", "-o", str(out), "--no-progress", "-q"]) == 0
    pat = km.load_pattern(out)
    assert pat.grid.kind == "hkl" and pat.grid.axis_labels == ["[h h 0]"]
    np.testing.assert_allclose(pat.grid.axis_values[0], np.linspace(0, 2, 9))
    assert main(["render", str(out), "--axis-units", "rlu", "-o", str(tmp_path / "hh0.png"), "-q"]) == 0
    assert (tmp_path / "hh0.png").stat().st_size > 1000


def test_existing_output_is_kept_and_the_command_says_why(fcc_file, tmp_path, capsys):
    path, _ = fcc_file
    out = tmp_path / "kept.h5"
    out.write_bytes(b"earlier result")
    args = ["map", str(path), "--supercell", "4,4,4", "--hkl", "--h", "1", "--k", "1", "--l", "1", "--probe", "unit",
            "-o", str(out), "--no-progress", "-q"]
    assert main(args) == 3
    err = capsys.readouterr().err
    assert "already exists" in err and "--overwrite" in err
    assert out.read_bytes() == b"earlier result"
    assert main(args + ["--overwrite"]) == 0
    assert km.load_pattern(out).intensity.shape == ()


def test_split_over_cells_on_the_command_line(tmp_path, capsys):
    rng = np.random.default_rng(2)
    unit = km.Model(FCC, "Cu", cell=np.eye(3) * A, fractional=True)
    sc = unit.tiled((6, 6, 6))
    alloy = km.Model(sc.positions, np.where(rng.random(sc.n_atoms) < 0.4, "Au", "Cu"), cell=sc.cell, box=sc.box)
    path = km.write_h5md(tmp_path / "alloy.h5md", alloy)
    prefix = tmp_path / "alloy"
    assert main(["average", str(path), "--supercell", "6,6,6", "--split", "cells", "--hkl", "--h", "0:2:13",
                 "--k", "0:2:13", "--l", "0.5", "-o", str(prefix), "--no-progress", "-q"]) == 0
    diffuse = km.load_pattern(f"{prefix}_diffuse.h5")
    assert diffuse.metadata["split"] == "cells"
    assert (diffuse.intensity >= 0).all()  # l = 1/2: no integer hkl in this plane
    bragg = km.load_pattern(f"{prefix}_bragg.h5")
    assert bragg.intensity.max() < 1e-12 * diffuse.intensity.max()  # off the parent lattice
