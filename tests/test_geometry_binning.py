"""Frames into maps, and frame files.

References: synthetic rotation series made here from a known map with the flat-detector
geometry written out by hand (pixel centre ((j − x0)s_x, (i − y0)s_y, D), q = k(p̂ − ẑ),
rotations from scipy.spatial.transform, ΔΩ = s_x s_y D/r³ and the unpolarised factor
(1 + cos²2θ)/2); binning them back must return the map where pixels landed and NaN where none
did. Frame files are written with h5py, NumPy and fabio themselves and read back.
"""

import h5py
import numpy as np
import pytest
from scipy.spatial.transform import Rotation

import kinemap as km
from kinemap.errors import InvalidInputError, ModelFileError
from kinemap.geometry import write_frames

A = 5.0
LAM = 1.0
SHAPE = (40, 40)
PIX = 1.0
DIST = 60.0
CENTRE = (20.0, 20.0)
AXIS = np.array([0.0, 1.0, 0.0])


def _hand_geometry():
    """Pixel-centre q_lab, solid angle and unpolarised factor of the untilted detector."""
    k = 2 * np.pi / LAM
    i, j = np.meshgrid(np.arange(SHAPE[0]), np.arange(SHAPE[1]), indexing="ij")
    p = np.stack([(j - CENTRE[1]) * PIX, (i - CENTRE[0]) * PIX, np.full(SHAPE, DIST)], axis=-1)
    r = np.linalg.norm(p, axis=-1)
    q_lab = k * (p / r[..., None] - [0, 0, 1])
    omega = PIX * PIX * DIST / r**3
    cos2t = DIST / r
    pol = (1 + cos2t**2) / 2
    return q_lab, omega, pol


def _synthetic(known, lo, step, angles, monitor, efficiency, scale=1e6):
    """Frames whose pixels carry scale·monitor·ΔΩ·P·eff·known[nearest voxel], and the
    voxels hit, the Σcounts and Σnorm per voxel (test-side bookkeeping)."""
    q_lab, omega, pol = _hand_geometry()
    shape = known.shape
    frames, hit = [], np.zeros(shape, dtype=bool)
    sums = np.zeros(shape), np.zeros(shape)
    for n, phi in enumerate(angles):
        rot = Rotation.from_rotvec(np.radians(phi) * AXIS).as_matrix()
        q_s = q_lab @ rot                                   # Rᵀ q_lab, row vectors
        hkl = q_s * A / (2 * np.pi)                         # cubic cell: h = q·a/2π
        idx = np.rint((hkl - lo) / step).astype(int)
        inside = ((idx >= 0) & (idx < np.array(shape))).all(axis=-1)
        norm = monitor[n] * omega * pol * efficiency
        frame = np.full(SHAPE, 7.0)                         # pixels off the grid: anything
        vals = known[idx[inside, 0], idx[inside, 1], idx[inside, 2]]
        frame[inside] = scale * vals * norm[inside]
        hit[idx[inside, 0], idx[inside, 1], idx[inside, 2]] = True
        np.add.at(sums[0], tuple(idx[inside].T), frame[inside])
        np.add.at(sums[1], tuple(idx[inside].T), norm[inside])
        frames.append(frame)
    return np.array(frames), hit, sums


@pytest.fixture
def series(rng):
    n_frames = 46
    angles = np.arange(n_frames) * 2.0
    monitor = rng.uniform(0.8, 1.2, n_frames)
    eff = rng.uniform(0.9, 1.0, SHAPE)
    grid = km.QGrid.hkl(np.eye(3) * A, h=(-2, 2, 9), k=(-2, 2, 9), l=(-2, 2, 9))
    known = rng.uniform(1.0, 2.0, grid.shape)
    frames, hit, sums = _synthetic(known, -2.0, 0.5, angles, monitor, eff)
    det = km.Detector(shape=SHAPE, pixel_size=PIX, distance=DIST, beam_center=CENTRE, wavelength=LAM)
    return dict(angles=angles, monitor=monitor, eff=eff, grid=grid, known=known, frames=frames, hit=hit, sums=sums,
                det=det)


def test_binning_reproduces_the_map_where_covered(series):
    s = series
    pat = km.bin_frames(s["frames"], s["det"], grid=s["grid"], axis=AXIS, angles=s["angles"], monitor=s["monitor"],
                        efficiency=s["eff"])
    covered = np.isfinite(pat.intensity)
    assert (covered == s["hit"]).all()
    assert 0.2 < covered.mean() < 0.9          # a real mix of covered and uncovered voxels
    np.testing.assert_allclose(pat.intensity[covered], 1e6 * s["known"][covered], rtol=1e-10)
    assert np.isnan(pat.sigma[~covered]).all()
    # Poisson: σ = √Σcounts / Σnorm
    c, nrm = s["sums"]
    np.testing.assert_allclose(pat.sigma[covered], np.sqrt(c[covered]) / nrm[covered], rtol=1e-10)
    assert pat.metadata["voxels_covered"] == int(s["hit"].sum())
    assert pat.metadata["corrections"]["solid_angle"] == "applied"


def test_binning_streams_frames_and_ignores_bad_pixels(series):
    s = series
    mask = np.zeros(SHAPE, dtype=bool)
    mask[:, 25:27] = True
    det = km.Detector(shape=SHAPE, pixel_size=PIX, distance=DIST, beam_center=CENTRE, wavelength=LAM, mask=mask)
    frames = s["frames"].copy()
    frames[:, mask] = 1e30                           # garbage behind the mask
    frames[5, 3, 3] = np.nan                         # flagged pixels
    frames[6, 4, 4] = -2.0
    gen = (f for f in frames)                        # a generator: frame by frame
    pat = km.bin_frames(gen, det, grid=s["grid"], axis=AXIS, angles=s["angles"], monitor=s["monitor"],
                        efficiency=s["eff"])
    covered = np.isfinite(pat.intensity)
    np.testing.assert_allclose(pat.intensity[covered], 1e6 * s["known"][covered], rtol=1e-10)
    assert pat.metadata["pixels_left_out"]["nan_or_negative"] == 2


def test_binning_into_a_plane_with_thickness(series):
    s = series
    plane = km.QGrid.hkl(np.eye(3) * A, h=(-2, 2, 9), k=(-2, 2, 9), l=0.0)
    pat = km.bin_frames(s["frames"], s["det"], grid=plane, axis=AXIS, angles=s["angles"], monitor=s["monitor"],
                        efficiency=s["eff"], thickness=0.5)
    # the slab |l| ≤ 0.25 is the l = 0 layer of the volume (index 4)
    covered = np.isfinite(pat.intensity)
    assert (covered == s["hit"][:, :, 4]).all()
    np.testing.assert_allclose(pat.intensity[covered], 1e6 * s["known"][:, :, 4][covered], rtol=1e-10)
    with pytest.raises(InvalidInputError, match="needs `thickness`"):
        km.bin_frames(s["frames"], s["det"], grid=plane, axis=AXIS, angles=s["angles"])


def test_binning_into_the_same_voxels_given_in_inverse_angstrom(series):
    # The fixture's hkl volume (cubic cell: q = 2π h / A) given as a volume in Å⁻¹ must
    # reproduce the synthetic map where covered, binned in Å⁻¹.
    s = series
    to_q = 2 * np.pi / A
    grid = km.QGrid.regular(np.full(3, -2.0 * to_q), np.eye(3) * 0.5 * to_q, (9, 9, 9))
    assert grid.cell is None and grid.kind == "volume"
    pat = km.bin_frames(s["frames"], s["det"], grid=grid, axis=AXIS, angles=s["angles"], monitor=s["monitor"],
                        efficiency=s["eff"])
    covered = np.isfinite(pat.intensity)
    assert (covered == s["hit"]).all()
    np.testing.assert_allclose(pat.intensity[covered], 1e6 * s["known"][covered], rtol=1e-10)
    assert pat.metadata["thickness_units"] == "1/angstrom"


def test_binning_bad_input(series):
    s = series
    det, grid, frames, angles = s["det"], s["grid"], s["frames"], s["angles"]
    with pytest.raises(InvalidInputError, match="46 frames but 45 angles"):
        km.bin_frames(frames, det, grid=grid, axis=AXIS, angles=angles[:-1])
    with pytest.raises(InvalidInputError, match="frames outnumber the 45 angles"):
        km.bin_frames((f for f in frames), det, grid=grid, axis=AXIS, angles=angles[:-1])
    with pytest.raises(InvalidInputError, match="44 frames but 46 angles"):
        km.bin_frames((f for f in frames[:44]), det, grid=grid, axis=AXIS, angles=angles)
    with pytest.raises(InvalidInputError, match="frame 0 has shape"):
        km.bin_frames(frames[:, :10], det, grid=grid, axis=AXIS, angles=angles)
    with pytest.raises(InvalidInputError, match="regular grid"):
        km.bin_frames(frames, det, grid=km.QGrid.points([[0, 0, 1.0]]), axis=AXIS, angles=angles)
    with pytest.raises(InvalidInputError, match="give `angles`"):
        km.bin_frames(frames, det, grid=grid, axis=AXIS)
    with pytest.raises(InvalidInputError, match="monitor"):
        km.bin_frames(frames, det, grid=grid, axis=AXIS, angles=angles, monitor=np.zeros(46))


def test_hdf5_stack_any_dataset_path(tmp_path, series):
    s = series
    path = tmp_path / "scan.h5"
    with h5py.File(path, "w") as f:
        f.create_dataset("measurement/pilatus/images", data=s["frames"].astype(np.float32))
        f.create_dataset("measurement/phi", data=s["angles"])
        f.create_dataset("instrument/flatfield", data=np.ones(SHAPE))
    stack = km.read_frames(path, dataset="/measurement/pilatus/images", angles_dataset="/measurement/phi")
    assert stack.n_frames == 46 and stack.shape == SHAPE
    np.testing.assert_array_equal(stack.angles, s["angles"])
    np.testing.assert_array_equal(stack[7], s["frames"][7].astype(np.float32))
    auto = km.read_frames(path, angles=s["angles"])               # the only 3-D dataset
    assert auto.source.endswith(":/measurement/pilatus/images")
    pat = km.bin_frames(stack, s["det"], grid=s["grid"], axis=AXIS, monitor=s["monitor"], efficiency=s["eff"])
    covered = np.isfinite(pat.intensity)
    np.testing.assert_allclose(pat.intensity[covered], 1e6 * s["known"][covered], rtol=1e-5)   # float32 frames
    with pytest.raises(ModelFileError, match="no dataset '/measurement/nothing'"):
        km.read_frames(path, dataset="/measurement/nothing")
    with pytest.raises(InvalidInputError, match="46 frames but 3 angles"):
        km.read_frames(path, angles=[0.0, 1.0, 2.0])
    with pytest.raises(InvalidInputError, match="has 46 frames but '/measurement/phi' holds 40"):
        with h5py.File(path, "a") as f:
            del f["measurement/phi"]
            f.create_dataset("measurement/phi", data=np.arange(40.0))
        km.read_frames(path, angles_dataset="/measurement/phi")
    with h5py.File(path, "a") as f:
        f.create_dataset("measurement/other", data=np.zeros((2, 3, 4)))
    with pytest.raises(ModelFileError, match="cannot tell which dataset"):
        km.read_frames(path)
    with pytest.raises(FileNotFoundError):
        km.read_frames(tmp_path / "missing.h5")


def test_npy_stack_and_single_frame(tmp_path, series):
    s = series
    np.save(tmp_path / "stack.npy", s["frames"][:5])
    stack = km.read_frames(tmp_path / "stack.npy", angles=s["angles"][:5])
    assert stack.n_frames == 5
    np.testing.assert_array_equal(np.array(list(stack)), s["frames"][:5])
    np.save(tmp_path / "one.npy", s["frames"][0])
    one = km.read_frames(tmp_path / "one.npy")
    assert one.n_frames == 1 and one.angles is None
    np.save(tmp_path / "bad.npy", np.zeros((2, 2, 2, 2)))
    with pytest.raises(ModelFileError, match="shape"):
        km.read_frames(tmp_path / "bad.npy")


def test_written_frames_read_back_with_their_angles(tmp_path, series):
    s = series
    path = write_frames(tmp_path / "out.h5", s["frames"][:4], s["angles"][:4], detector=s["det"],
                        metadata={"note": "test"})
    stack = km.read_frames(path)
    np.testing.assert_array_equal(stack.angles, s["angles"][:4])
    np.testing.assert_array_equal(stack[3], s["frames"][3])
    with h5py.File(path) as f:      # NeXus: NXdata with signal and the angle axis
        assert f["entry/data"].attrs["signal"] == "counts"
        assert f["entry/data/angle"].attrs["units"] == "degree"
        assert f["entry/instrument/detector/distance_mm"][()] == DIST
    with pytest.raises(FileExistsError):
        write_frames(path, s["frames"][:4], s["angles"][:4])


def test_fabio_images(tmp_path, series):
    fabio = pytest.importorskip("fabio", reason="fabio (the optional 'images' extra) is not installed; "
                                                "only this fabio-specific reader test is skipped")
    from fabio.edfimage import EdfImage

    s = series
    names = []
    for n in range(3):
        name = tmp_path / f"img_{n:04d}.edf"
        EdfImage(data=s["frames"][n].astype(np.float32)).write(str(name))
        names.append(name)
    stack = km.read_frames(names, angles=s["angles"][:3])
    assert stack.n_frames == 3 and stack.shape == SHAPE
    for n in range(3):
        np.testing.assert_array_equal(stack[n], s["frames"][n].astype(np.float32))
    single = km.read_frames(names[1])
    np.testing.assert_array_equal(single[0], s["frames"][1].astype(np.float32))
    assert fabio.version
    with pytest.raises(InvalidInputError, match="3 frames but 2 angles"):
        km.read_frames(names, angles=[0.0, 1.0])
