"""``kinemap demo``: files, forward-scattering check and Bragg peaks on the octagonal module.

References: at q = 0 every frame's amplitude is Σ_j f_j(0) whatever the displacements, so the
Bragg part is (N_Al f_Al(0) + N_Co f_Co(0))² and the diffuse part 0 (f0 from periodictable's
Waasmaier–Kirfel table, a general-purpose library); the octagonal Fourier module
k = ½ Σ h_j e_j∥ / edge, e_j∥ = (cos πj/4, sin πj/4) (Baake & Grimm 2013; docs/references.md).
"""

import numpy as np
import pytest

import kinemap as km
from kinemap.cli import main
from kinemap.demo import EDGE, run_demo


def test_small_demo(tmp_path):
    with pytest.warns(km.frames.FewFramesWarning):
        files = run_demo(tmp_path / "out", progress=False, quiet=True, plane_points=161, line_points=101,
                         radius=30.0, n_frames=4)
    for key in ("model", "total", "bragg", "diffuse", "total_png", "bragg_png", "diffuse_png", "profile_png", "model_png"):
        assert files[key].exists() and files[key].stat().st_size > 0, key
    src = km.open_model(files["model"])
    assert src.n_frames == 4 and src.species_labels() == ["Al", "Co"]
    counts = src.species_counts()
    bragg = km.load_pattern(files["bragg"])
    diffuse = km.load_pattern(files["diffuse"])
    assert bragg.metadata["frames"] == [0, 1, 2, 3]
    # q = 0 is the centre of the 161 × 161 plane.
    import periodictable.cromermann as cm

    f0 = {el: float(cm.fxrayatstol(el, 0.0)) for el in ("Al", "Co")}
    expected = (counts["Al"] * f0["Al"] + counts["Co"] * f0["Co"]) ** 2
    assert bragg.intensity[80, 80] == pytest.approx(expected, rel=1e-10)
    assert abs(diffuse.intensity[80, 80]) < 1e-9 * expected
    # The strongest Bragg peak away from q = 0 lies on the octagonal Fourier module.
    grid = bragg.grid
    q = grid.q_vectors().reshape(161, 161, 3)
    qn = np.linalg.norm(q, axis=-1)
    masked = np.where(qn > 1.0, bragg.intensity, 0.0)
    i, j = np.unravel_index(np.argmax(masked), masked.shape)
    peak = q[i, j, :2]
    e = np.array([[np.cos(np.pi * k / 4), np.sin(np.pi * k / 4)] for k in range(4)])
    h = np.stack(np.meshgrid(*[np.arange(-2, 3)] * 4, indexing="ij"), -1).reshape(-1, 4)
    module = 2 * np.pi * 0.5 * (h @ e) / EDGE
    step = np.linalg.norm(grid.steps[0])
    assert np.min(np.linalg.norm(module - peak, axis=1)) < step


def test_demo_command(tmp_path, capsys):
    # (Its run time is measured in benchmarks, not here: a busy machine must not fail a test.)
    assert main(["demo", "-o", str(tmp_path / "demo"), "--no-progress"]) == 0
    out = capsys.readouterr().out
    for name in ("octagonal_layer.h5md", "plane_bragg.h5", "plane_diffuse.h5", "plane_bragg.png",
                 "plane_diffuse.png", "profile_qx.png", "model.png"):
        assert (tmp_path / "demo" / name).exists()
        assert name in out
    # A second run into a file path is refused with a clear message.
    (tmp_path / "f").write_text("x")
    assert main(["demo", "-o", str(tmp_path / "f")]) == 1
    assert "is not a folder" in capsys.readouterr().err
