"""``kinemap compare`` on the command line: the summary it prints against the Python API,
the files it writes, and clear errors (exit codes of kinemap.cli) with nothing written.

"""

import os

import h5py
import numpy as np
import pytest

import kinemap as km
from kinemap import cli

A = 3.6


@pytest.fixture
def files(tmp_path):
    """A measured map written with h5py (NeXus NXdata in h, k, l, with a cell), a model file
    (H5MD, written by kinemap), and a second model without the alloy's disorder."""
    rng = np.random.default_rng(3)
    cells = np.stack(np.meshgrid(*[np.arange(3)] * 3, indexing="ij"), -1).reshape(-1, 3)
    fcc = np.array([[0, 0, 0], [0, .5, .5], [.5, 0, .5], [.5, .5, 0]])
    frac = (cells[:, None, :] + fcc[None]).reshape(-1, 3)
    species = np.where(rng.random(len(frac)) < 0.4, "Ni", "Fe")
    box = np.eye(3) * 3 * A
    # (H5MD stores one box per frame, which kinemap reads back as both box and cell)
    right = km.Model(frac * A, species, box=box)
    km.write_h5md(tmp_path / "right.h5md", right)
    wrong = km.Model(frac * A, "Fe", box=box)  # no Ni: no diffuse scattering
    km.write_h5md(tmp_path / "wrong.h5md", wrong)
    grid = km.QGrid.hkl(np.eye(3) * A, h=(-2, 2, 13), k=(-2, 2, 13), l=(0, 1, 4))  # box lattice steps
    assert grid.is_commensurate(km.open_model(tmp_path / "right.h5md").box)
    truth = km.scatter(right, grid).intensity
    sig = 0.02 * truth + 1.0
    meas = 0.5 * truth + 2.0 + rng.normal(size=grid.shape) * sig
    meas[6, 6, 0] = np.nan
    with h5py.File(tmp_path / "meas.h5", "w") as f:
        f.attrs["default"] = "entry"
        e = f.create_group("entry")
        e.attrs["NX_class"] = "NXentry"
        e.attrs["default"] = "data"
        g = e.create_group("data")
        g.attrs["NX_class"] = "NXdata"
        g.attrs["signal"] = "I"
        g.attrs["axes"] = np.array(["h", "k", "l"], dtype=h5py.string_dtype())
        g["I"] = meas
        g["I_errors"] = sig
        for i, name in enumerate("hkl"):
            g[name] = grid.axis_values[i]
            g[name].attrs["units"] = "r.l.u."
            g.attrs[f"{name}_indices"] = i
    return tmp_path, grid, meas, sig


def test_one_model_summary_file_and_picture(files, capsys):
    d, grid, meas, sig = files
    out = d / "cmp.h5"
    argv = ["compare", str(d / "meas.h5"), str(d / "right.h5md"), "--cell", f"{A},{A},{A},90,90,90",
            "--bragg-radius", "0.1", "--bragg-units", "r.l.u.", "--centring", "F", "-o", str(out), "--png",
            "--shells", "4", "--no-progress"]
    assert cli.main(argv) == 0
    text = capsys.readouterr().out
    ref = km.compare(km.open_model(d / "right.h5md"), km.open_map(d / "meas.h5", cell=np.eye(3) * A),
                     exclude_bragg={"radius": 0.1, "units": "r.l.u.", "centring": "F"})
    assert f"R = {ref.r_factor:.4f}" in text and f"chi2_nu = {ref.chi2:.4g}" in text
    assert "|q| from" in text and "comparison written" in text and "picture written" in text
    with h5py.File(out) as f:
        assert f["entry/figures/chi2"][()] == pytest.approx(ref.chi2, rel=1e-12)
        assert "sum w (I_o - s I_c - b)^2 / (N - p)" in f["entry/figures/chi2"].attrs["definition"]
    assert (d / "cmp.png").read_bytes()[:4] == b"\x89PNG"


def test_several_models_are_ranked(files, capsys):
    d, *_ = files
    argv = ["compare", str(d / "meas.h5"), str(d / "wrong.h5md"), str(d / "right.h5md"),
            "--cell", f"{A},{A},{A},90,90,90", "--no-progress", "--json"]
    assert cli.main(argv) == 0
    import json

    data = json.loads(capsys.readouterr().out)
    assert [r["name"] for r in data["ranking"]] == ["right.h5md[0]", "wrong.h5md[0]"]
    assert data["ranking"][0]["chi2"] < data["ranking"][1]["chi2"]
    assert "r_factor" in data["definitions"]


def test_plain_dataset_with_a_grid_and_a_map_file_as_model(files, capsys):
    d, grid, meas, sig = files
    with h5py.File(d / "plain.h5", "w") as f:
        f["vol"] = meas
    calc = km.scatter(km.open_model(d / "right.h5md"), grid)
    calc.save(d / "calc.h5")
    argv = ["compare", str(d / "plain.h5"), str(d / "calc.h5"), "--signal", "vol", "--hkl", "--h", "-2:2:13",
            "--k", "-2:2:13", "--l", "0:1:4", "--cell", f"{A},{A},{A},90,90,90", "--background", "none",
            "--no-progress"]
    assert cli.main(argv) == 0
    text = capsys.readouterr().out
    assert "no sigma" in text and "chi2_nu and R_exp: not available" in text


@pytest.mark.parametrize("extra, code, message", [
    (["--bragg-radius", "0.1", "--centring", "F"], 2, "--bragg-units"),
    (["--centring", "F"], 2, "need --bragg-radius"),
    (["--scale", "big"], 2, "--scale"),
    (["--png"], 2, "give -o"),
    (["--frames", "0:2", "{d}/wrong.h5md"], 2, "one CALC"),
    (["--mask", "{d}/nomask.npy"], 3, "no such file"),
    (["--sampling", "points"], 1, "off its box's reciprocal lattice"),
    (["--resolution", "wide"], 2, "--resolution"),
])
def test_errors_exit_with_a_message_and_write_nothing(files, capsys, extra, code, message):
    d, *_ = files
    extra = [x.format(d=d) for x in extra]
    calcs = [str(d / "right.h5md")] + [x for x in extra if x.endswith(".h5md")]
    opts = [x for x in extra if not x.endswith(".h5md")]
    before = sorted(os.listdir(d))
    argv = ["compare", str(d / "meas.h5"), *calcs, "--cell", f"{A},{A},{A},90,90,90", "-o", str(d / "x.h5"),
            "--no-progress", *opts]
    if "--png" in opts:
        argv.remove("-o")
        argv.remove(str(d / "x.h5"))
    assert cli.main(argv) == code
    err = capsys.readouterr().err
    assert err.startswith("kinemap: error: ") and message in err, err
    assert sorted(os.listdir(d)) == before


def test_a_map_without_axes_is_a_file_error(files, capsys):
    d, *_ = files
    with h5py.File(d / "noaxes.h5", "w") as f:
        g = f.create_group("data")
        g.attrs["NX_class"] = "NXdata"
        g.attrs["signal"] = "I"
        g["I"] = np.ones((3, 3))
    assert cli.main(["compare", str(d / "noaxes.h5"), str(d / "right.h5md"), "--no-progress"]) == 3
    assert "have no axis" in capsys.readouterr().err


def test_existing_output_is_kept(files, capsys):
    d, *_ = files
    (d / "x.h5").write_text("keep me")
    argv = ["compare", str(d / "meas.h5"), str(d / "right.h5md"), "--cell", f"{A},{A},{A},90,90,90",
            "-o", str(d / "x.h5"), "--no-progress"]
    assert cli.main(argv) == 3
    assert (d / "x.h5").read_text() == "keep me"
    assert cli.main(argv + ["--overwrite"]) == 0
    assert km.load_pattern(d / "x.h5").grid.shape == (13, 13, 4)
