"""Frame averages: total ⟨|A|²⟩, Bragg |⟨A⟩|², diffuse = total − Bragg.

References: a NumPy direct sum over the frames; the Debye–Waller/thermal-diffuse result for
independent Gaussian displacements (Warren, "X-ray Diffraction", ch. 11 — memory; ITC Vol. C
§8.1): ⟨A⟩ = A₀ exp(−q²σ²/2), so the Bragg part is |A₀|² exp(−q²σ²), and the diffuse part
tends to N f² (1 − exp(−q²σ²)), σ² the mean-square displacement along q; a Laue sum of M
unit cells (M even) vanishes at half-integer h.
"""

import h5py
import numpy as np
import pytest
from conftest import numpy_amplitude

import kinemap as km
from kinemap.errors import InvalidInputError
from kinemap.frames import FewFramesWarning, average_frames
from kinemap.io import write_h5md


def test_averages_against_numpy(tmp_path, rng):
    n, n_frames = 300, 5
    sp = rng.choice(["Fe", "O"], n).tolist()
    frames = [km.Model(rng.uniform(0, 12, (n, 3)), sp) for _ in range(n_frames)]
    path = write_h5md(tmp_path / "traj.h5md", frames)
    grid = km.QGrid.plane([-2, -2, 0.3], [4, 0, 0], [0, 4, 0], (9, 11))
    with pytest.warns(FewFramesWarning, match="only 3 frame"):
        avg = average_frames(path, grid, frames="0:5:2", probe="xray", method="exact", remove_drift=False)
    assert avg.frames == [0, 2, 4]
    q = grid.q_vectors()
    s = np.linalg.norm(q, axis=1) / (4 * np.pi)
    probe = km.get_probe("xray")
    f = {lab: probe.scattering_factors([lab], s)[0] for lab in ("Fe", "O")}  # Waasmaier–Kirfel via periodictable
    weights = np.array([f[x] for x in sp]).T
    amps = np.array([numpy_amplitude(frames[t].positions, q, weights) for t in (0, 2, 4)])
    total = np.mean(np.abs(amps) ** 2, axis=0).reshape(grid.shape)
    mean_a = amps.mean(axis=0).reshape(grid.shape)
    scale = total.max()
    np.testing.assert_allclose(avg.total.intensity, total, rtol=1e-9, atol=1e-10 * scale)
    np.testing.assert_allclose(avg.bragg.amplitude, mean_a, rtol=1e-9, atol=1e-9 * np.sqrt(scale))
    # Unbiased split: diffuse = n/(n−1) × the sample variance of A over frames (divisor n), so
    # that it is the variance estimator with divisor n − 1 (NumPy's var with ddof=1).
    diffuse = np.var(amps, axis=0, ddof=1).reshape(grid.shape)
    np.testing.assert_allclose(avg.diffuse.intensity, diffuse, rtol=1e-7, atol=1e-9 * scale)
    np.testing.assert_allclose(avg.bragg.intensity, total - diffuse, rtol=1e-7, atol=1e-9 * scale)
    for part in (avg.total, avg.bragg, avg.diffuse):
        assert part.metadata["frames"] == [0, 2, 4]
        assert part.metadata["model"]["frames"] == [0, 2, 4]
        assert part.metadata["input_file"] == str(path)
    assert avg.total.amplitude is None and avg.diffuse.amplitude is None


def test_in_memory_frames_and_progress(rng):
    frames = [km.Model(rng.uniform(0, 5, (20, 3)), "C") for _ in range(3)]
    calls = []
    grid = km.QGrid.line([0, 0, 0], [3, 0, 0], 7)
    with pytest.warns(FewFramesWarning):
        avg = average_frames(frames, grid, probe="unit", progress=lambda d, t: calls.append((d, t)))
    assert calls == [(1, 3), (2, 3), (3, 3)]
    assert avg.frames == [0, 1, 2]
    # q = 0: every frame gives A = N exactly, so Bragg = total = N² and diffuse = 0.
    assert avg.total.intensity[0] == pytest.approx(400.0, rel=1e-14)
    assert avg.diffuse.intensity[0] == pytest.approx(0.0, abs=1e-9)


def test_a_grid_of_kind_hkl_needs_a_cell():
    # h, k, l without a cell mean nothing (this used to reach average_frames and fail there).
    with pytest.raises(InvalidInputError, match="needs the `cell`"):
        km.QGrid.regular([0, 0, 0], np.eye(3)[:2] * (2 * np.pi / 8.0), (4, 5), kind="hkl")


def test_bragg_diffuse_split_of_jittered_crystal(rng):
    """Simple cubic 8×8×8 crystal, independent Gaussian displacements σ per axis, 24 frames."""
    a, m_cells, sigma, n_frames = 3.0, 8, 0.1, 24
    idx = np.stack(np.meshgrid(*[np.arange(m_cells)] * 3, indexing="ij"), -1).reshape(-1, 3)
    ideal = idx * a
    n = len(ideal)
    frames = [km.Model(ideal + rng.normal(0, sigma, ideal.shape), "X") for _ in range(n_frames)]
    cell = np.eye(3) * a
    # For independent atoms the variance of A over frames is N(1 − exp(−q²σ²)) at every q.
    # The points are 1/8 r.l.u. apart (the crystal's Fourier resolution) with 8 distinct
    # fractional parts per axis, so many independent displacement modes fall in each bin.
    half = km.QGrid.hkl(cell, h=(0.0625, 3.9375, 32), k=(0.0625, 3.9375, 32), l=(0.0625, 3.9375, 32))
    avg = average_frames(frames, half, probe="unit")
    q2 = np.sum(half.q_vectors() ** 2, axis=1).reshape(half.shape)
    expected = n * (1 - np.exp(-q2 * sigma**2))  # the split is unbiased (n/(n−1) correction)
    bins = np.quantile(q2, [0, 0.25, 0.5, 0.75, 1.0])
    for lo, hi in zip(bins[:-1], bins[1:]):
        sel = (q2 >= lo) & (q2 <= hi)
        ratio = avg.diffuse.intensity[sel].mean() / expected[sel].mean()
        assert ratio == pytest.approx(1.0, abs=0.04), (lo, hi, ratio)
    means = [avg.diffuse.intensity[(q2 >= lo) & (q2 <= hi)].mean() for lo, hi in zip(bins[:-1], bins[1:])]
    assert np.all(np.diff(means) > 0)  # the diffuse part rises with q
    # Integer h, k, l: Bragg = N² exp(−q²σ²) (Debye–Waller).
    bragg = km.QGrid.hkl(cell, h=(1, 3, 3), k=(0, 2, 3), l=1)
    avg_b = average_frames(frames, bragg, probe="unit")
    q2b = np.sum(bragg.q_vectors() ** 2, axis=1).reshape(bragg.shape)
    np.testing.assert_allclose(avg_b.bragg.intensity, n**2 * np.exp(-q2b * sigma**2), rtol=0.01)


def test_save_writes_three_files_together(tmp_path, rng, monkeypatch):
    frames = [km.Model(rng.uniform(0, 5, (10, 3)), "C") for _ in range(2)]
    grid = km.QGrid.line([0, 0, 0], [3, 0, 0], 5)
    with pytest.warns(FewFramesWarning):
        avg = average_frames(frames, grid, probe="unit")
    paths = avg.save(tmp_path / "run", extra={"provenance": {"frames": [0, 1]}})
    assert sorted(p.name for p in tmp_path.iterdir()) == ["run_bragg.h5", "run_diffuse.h5", "run_total.h5"]
    back = km.load_pattern(paths["diffuse"])
    np.testing.assert_array_equal(back.intensity, avg.diffuse.intensity)
    assert back.metadata["average"] == "diffuse" and back.metadata["frames"] == [0, 1]
    with h5py.File(paths["bragg"]) as f:
        assert "amplitude" in f["entry/data"] and f["entry/data"].attrs["signal"] == "intensity"

    # Interrupted while writing the third file: nothing new appears, no temporary is left.
    import kinemap.frames as fr

    calls = {"n": 0}
    real = fr.save_pattern

    def flaky(*args, **kwargs):
        calls["n"] += 1
        if calls["n"] == 3:
            raise KeyboardInterrupt
        return real(*args, **kwargs)

    monkeypatch.setattr(fr, "save_pattern", flaky)
    with pytest.raises(KeyboardInterrupt):
        avg.save(tmp_path / "second")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["run_bragg.h5", "run_diffuse.h5", "run_total.h5"]


def test_electron_probe_warns_once(rng):
    frames = [km.Model(rng.uniform(0, 5, (10, 3)), "Si") for _ in range(3)]
    with pytest.warns(FewFramesWarning), pytest.warns(km.KinematicApproximationWarning) as rec:
        avg = average_frames(frames, km.QGrid.line([0, 0, 0], [2, 0, 0], 4), probe="electron")
    assert sum(issubclass(r.category, km.KinematicApproximationWarning) for r in rec) == 1
    assert avg.total.metadata["cautions"] and avg.total.units == "angstrom"


def test_bad_arguments(rng):
    frames = [km.Model(rng.uniform(0, 5, (10, 3)), "C")]
    grid = km.QGrid.line([0, 0, 0], [1, 0, 0], 3)
    with pytest.raises(InvalidInputError, match="`grid` must be a kinemap.QGrid"):
        average_frames(frames, "plane")
    with pytest.raises(InvalidInputError, match="frame 4 is out of range"):
        average_frames(frames, grid, frames=[4], probe="unit")
    with pytest.raises(InvalidInputError, match="holds no frames"):
        average_frames([], grid)


def test_progress_bar_runs(rng, capsys):
    frames = [km.Model(rng.uniform(0, 5, (10, 3)), "C") for _ in range(2)]
    with pytest.warns(FewFramesWarning):
        avg = average_frames(frames, km.QGrid.line([0, 0, 0], [1, 0, 0], 5), probe="unit", progress=True)
    # q = 0: A = N for every frame (the sum of ten unit scatterers).
    assert avg.bragg.intensity[0] == pytest.approx(100.0, rel=1e-14)
    assert "frame 2/2" in capsys.readouterr().err
