"""``kinemap frames``: geometry file in, frames file and PNG out, through ``kinemap.cli.main``.

References: the frames are compared with the library call the command wraps
(``km.expected_counts`` with the same geometry, which test_geometry_rotation checks against
NumPy and hand geometry); the (1 0 0) reflection of a simple cubic crystal must be reported
at the angle and pixel of Bragg's law written out here; the file layout is read with h5py.
"""

import h5py
import numpy as np
import pytest

import kinemap as km
from kinemap import cli
from kinemap.io import write_h5md

A = 4.0
THETA = np.degrees(np.arcsin(1.0 / (2 * A)))          # λ = 1 Å, d = 4 Å
X_MM = 100.0 * np.tan(np.radians(2 * THETA))          # D tan 2θ


@pytest.fixture
def main():
    return cli.main


@pytest.fixture
def crystal(tmp_path):
    n = 10
    pos = np.stack(np.meshgrid(*[np.arange(n)] * 3, indexing="ij"), -1).reshape(-1, 3) * A
    model = km.Model(pos, "Fe", cell=np.eye(3) * A)
    path = write_h5md(tmp_path / "cubic.h5md", [model])
    return path, model


GEOMETRY = f"""
[detector]
shape = [32, 32]
pixel_size_mm = 0.5
distance_mm = 100.0
beam_center_px = [16.0, {float(16.0 - X_MM / 0.5)!r}]
wavelength_angstrom = 1.0
polarization_fraction = 0.5

[rotation]
axis = [0, 1, 0]
start_deg = {float(THETA - 1.5)!r}
step_deg = 0.5
frames = 7

[computation]
pixel_subsamples = 2
angle_subsamples = 2
"""


def _write(tmp_path, text, name="geometry.toml"):
    p = tmp_path / name
    p.write_text(text)
    return p


def _err(capsys):
    err = capsys.readouterr().err
    assert "Traceback" not in err
    return err


def test_frames_rotation_series_end_to_end(tmp_path, crystal, main, capsys):
    path, model = crystal
    geo = _write(tmp_path, GEOMETRY)
    out = tmp_path / "frames.h5"
    rc = main(["frames", str(path), str(geo), "-o", str(out), "--png", "--probe", "unit", "--no-progress",
               "--reflection", "1,0,0"])
    text = capsys.readouterr().out
    assert rc == 0, text
    # the reflection is reported at θ, frame 3, row 16, column 16 (Bragg's law by hand above)
    assert f"reflection (1 0 0): angle {THETA:.3f} deg (frame 3), pixel (row 16.00, column 16.00), on the detector" in text
    assert f"frames written: {out}" in text and "picture written" in text
    assert "peak (1 0 0): row 16, column 16" in text
    stack = km.read_frames(out)
    np.testing.assert_allclose(stack.angles, THETA - 1.5 + 0.5 * np.arange(7))
    det = km.Detector(shape=(32, 32), pixel_size=0.5, distance=100.0, beam_center=(16.0, 16.0 - X_MM / 0.5),
                      wavelength=1.0)
    ref = km.expected_counts(model, det, axis=[0, 1, 0], angles=stack.angles, probe="unit", pixel_subsamples=2,
                             angle_subsamples=2)
    np.testing.assert_allclose(np.array(list(stack)), ref.intensity, rtol=1e-12)
    with h5py.File(out) as f:
        assert "geometry_file" in f["entry/parameters"]
        assert "lorentz" in f["entry/parameters/corrections"]
    png = out.with_suffix(".png")
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_frames_still_frame_and_cautions(tmp_path, crystal, main, capsys):
    path, _ = crystal
    mask = np.zeros((32, 32), dtype=np.uint8)
    mask[:, 5] = 1                                        # a module gap, from a file beside the geometry
    np.save(tmp_path / "gap.npy", mask)
    still = GEOMETRY.split("[rotation]")[0].replace("polarization_fraction = 0.5",
                                                     'polarization_fraction = 0.5\nmask_file = "gap.npy"')
    geo = _write(tmp_path, still)
    out = tmp_path / "still.h5"
    # (9 0 0): |q| = 14.1 > 4π/λ = 12.6; (0 0 1) at |q| = 1.57 is within 4π/λ but the offset
    # detector only sees |q| from about 1.3 to 1.9 ... so use (0 0 2), |q| = 3.14: out of reach
    rc = main(["frames", str(path), str(geo), "-o", str(out), "--probe", "unit", "--no-progress",
               "--reflection", "9,0,0", "--reflection", "0,0,2"])
    err = _err(capsys)
    assert rc == 0
    assert "caution: reflection (9 0 0): |q| = 14.14 1/angstrom lies beyond 4 pi/lambda = 12.57" in err
    assert "caution: reflection (0 0 2): |q| = 3.142 1/angstrom lies beyond the detector's reach" in err
    frames = km.read_frames(out)
    assert frames.n_frames == 1
    assert np.isnan(frames[0][:, 5]).all() and np.isfinite(frames[0][:, 6]).all()


@pytest.mark.parametrize("change,code,message", [
    (("distance_mm = 100.0", "distance_mm = -5.0"), 1, "[detector] (geometry): `distance` must be > 0"),
    (("pixel_size_mm = 0.5", "pixel_size_mm = 0.0"), 1, "`pixel_size` must be positive"),
    (("wavelength_angstrom = 1.0", "wavelength_angstrom = 0.0"), 1, "`wavelength` must be > 0"),
    (("[computation]", "[computation]\nthreads = 3"), 1, "unknown key(s) ['threads'] in [computation]"),
    (("[rotation]", "[sample]\norientation = [[1, 0.2, 0], [0, 1, 0], [0, 0, 1]]\n[rotation]"), 1,
     "is not a rotation matrix"),
    (("frames = 7", "frames = 0"), 1, "frames must be a whole number >= 1"),
    (("shape = [32, 32]", "shape = [32, 32"), 3, "is not valid TOML"),
])
def test_frames_bad_geometry(tmp_path, crystal, main, capsys, change, code, message):
    path, _ = crystal
    geo = _write(tmp_path, GEOMETRY.replace(*change))
    rc = main(["frames", str(path), str(geo), "-o", str(tmp_path / "x.h5"), "--probe", "unit", "--no-progress"])
    err = _err(capsys)
    assert rc == code
    assert message in err
    assert not (tmp_path / "x.h5").exists()


def test_frames_file_problems(tmp_path, crystal, main, capsys):
    path, _ = crystal
    rc = main(["frames", str(path), str(tmp_path / "none.toml"), "-o", str(tmp_path / "x.h5")])
    assert rc == 3 and "no such geometry file" in _err(capsys)
    geo = _write(tmp_path, GEOMETRY)
    out = tmp_path / "f.h5"
    out.write_text("keep me")
    rc = main(["frames", str(path), str(geo), "-o", str(out), "--probe", "unit", "--no-progress"])
    assert rc == 3 and "already exists" in _err(capsys)
    assert out.read_text() == "keep me"
    rc = main(["frames", str(path), str(geo), "-o", str(out), "--probe", "unit", "--no-progress", "--overwrite",
               "-q"])
    assert rc == 0 and km.read_frames(out).n_frames == 7
