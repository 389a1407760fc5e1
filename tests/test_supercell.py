"""Supercells in the parent cell's h, k, l: commensurate grids and the Bragg/diffuse splits.

Outside references:
* Laue function of an M1×M2×M3 supercell: M1·M2·M3·F(hkl) at the parent cell's reciprocal
  points, zero at the supercell's other reciprocal points (any crystallography text; see
  docs/references.md, "Crystals").
* Rocksalt structure factor F = 4(f_A + f_B) for h, k, l all even, 4(f_A − f_B) all odd
  (Warren, "X-ray Diffraction", ch. 4 — from memory), with Waasmaier–Kirfel f0 taken directly
  from periodictable (not through kinemap's probe).
* Laue monotonic scattering of a random binary alloy A_cB_(1−c): N c(1−c)|f_A − f_B|² per
  snapshot at every off-Bragg point on average (Warren 1969, the chapter on order–disorder —
  from memory); each point alone is exponentially distributed (speckle), so a mean over M
  points has a relative standard error 1/√M.
* Independent Gaussian displacements σ: Bragg N² exp(−q²σ²) (Debye–Waller), diffuse
  N(1 − exp(−q²σ²)) (ITC Vol. C §8.1 — from memory).
"""

import numpy as np
import periodictable.cromermann as wk
import pytest

import kinemap as km
from kinemap.frames import FewFramesWarning, average_frames
from kinemap.scatter import OffLatticeWarning

FCC = np.array([[0, 0, 0], [0, 0.5, 0.5], [0.5, 0, 0.5], [0.5, 0.5, 0]])


def supercell_positions(frac_basis, cell, reps):
    idx = np.stack(np.meshgrid(*[np.arange(n) for n in reps], indexing="ij"), -1).reshape(-1, 3)
    frac = (idx[:, None, :] + frac_basis[None, :, :]).reshape(-1, 3)
    return frac @ cell


def test_rocksalt_supercell_laue_function():
    a = 5.6402
    cell = np.eye(3) * a
    basis = np.vstack([FCC, FCC + [0.5, 0, 0]])
    pos = supercell_positions(basis, cell, (4, 4, 4))
    species = (["Na"] * 4 + ["Cl"] * 4) * 64
    model = km.Model(pos, species, cell=cell, supercell=(4, 4, 4))
    np.testing.assert_allclose(model.box, cell * 4)
    # Integer hkl of the parent cell: 64²·|F|², F by hand from the published form factors.
    hkl = np.array([[1, 1, 1], [2, 0, 0], [2, 2, 0], [3, 1, 1], [2, 2, 2], [4, 0, 0]])
    q = hkl @ (2 * np.pi * np.linalg.inv(cell).T)
    s = np.linalg.norm(q, axis=1) / (4 * np.pi)
    f_na, f_cl = wk.fxrayatstol("Na", s), wk.fxrayatstol("Cl", s)
    odd = hkl[:, 0] % 2 == 1
    f = np.where(odd, 4 * (f_na - f_cl), 4 * (f_na + f_cl))
    pat = km.scatter(model, km.QGrid.points(q), probe="xray", method="exact")
    np.testing.assert_allclose(pat.intensity, 64**2 * f**2, rtol=1e-10)
    # The other points of the box's reciprocal lattice: zero (Laue function).
    grid = km.QGrid.hkl(cell, h=(0, 2, 9), k=(0, 2, 9), l=0.25)
    assert grid.is_commensurate(model.box)
    other = km.scatter(model, grid, probe="xray", method="exact")
    peak = 64**2 * 85.3961**2  # 64²·F(200)², F(200) of the reference table (docs/references.md)
    assert np.abs(other.intensity).max() < 1e-20 * peak


def test_off_lattice_grid_warns_and_snaps():
    cell = np.eye(3) * 3.56
    box = cell * 63
    model = km.Model(np.zeros((1, 3)), "Ni", cell=cell, box=box)
    grid = km.QGrid.hkl(cell, h=(0, 6, 1201), k=(-1, 5, 301), l=0)
    assert not grid.is_commensurate(box)
    with pytest.warns(OffLatticeWarning, match="snapped"):
        km.scatter(model, grid, probe="unit", method="exact")
    snapped = grid.snapped(box)
    assert snapped.is_commensurate(box)
    assert snapped.shape == (379, 379)  # 6·63 + 1 points: steps of 1/63 r.l.u.
    for a in range(2):
        old_step = grid.hkl_steps[a].max()
        new = snapped.axis_values[a]
        assert abs(new[0] - grid.axis_values[a][0]) < old_step
        assert abs(new[-1] - grid.axis_values[a][-1]) < snapped.hkl_steps[a].max()
    np.testing.assert_allclose(snapped.axis_values[0][1] - snapped.axis_values[0][0], 1 / 63, rtol=1e-12)


@pytest.fixture(scope="module")
def alloy():
    """Random A0.3B0.7 alloy (Fe on Ni) on an fcc lattice, 20³ cells: one snapshot."""
    rng = np.random.default_rng(7)
    a = 3.6
    cell = np.eye(3) * a
    pos = supercell_positions(FCC, cell, (20, 20, 20))
    species = np.where(rng.random(len(pos)) < 0.3, "Fe", "Ni")
    return km.Model(pos, species, cell=cell, supercell=(20, 20, 20))


def test_single_snapshot_split_over_cells(alloy):
    cell = alloy.cell
    n = alloy.n_atoms
    # Off-Bragg commensurate points (steps 1/20, l = 1/2): M = 3481 points.
    grid = km.QGrid.hkl(cell, h=(0.05, 2.95, 59), k=(0.05, 2.95, 59), l=0.5)
    avg = average_frames(alloy, grid, split="cells", probe="xray", method="exact")
    s = grid.q_norms() / (4 * np.pi)
    fa, fb = wk.fxrayatstol("Fe", s), wk.fxrayatstol("Ni", s)
    c = np.mean(alloy.species == "Fe")  # the realised composition of this snapshot
    laue = (n * c * (1 - c) * (fa - fb) ** 2).reshape(grid.shape)
    ratio = avg.diffuse.intensity / laue
    m = ratio.size
    assert m >= 500
    assert abs(ratio.mean() - 1.0) < 3 / np.sqrt(m)
    # Off the parent lattice the average structure scatters nothing: total = diffuse.
    np.testing.assert_allclose(avg.bragg.intensity, 0.0, atol=1e-18 * avg.total.intensity.max())
    np.testing.assert_allclose(avg.total.intensity, avg.bragg.intensity + avg.diffuse.intensity, rtol=1e-9)
    assert avg.split == "cells" and "A_avg" in avg.bragg.metadata["average_formula"]


def test_cells_split_at_bragg_points_and_off_the_lattice(alloy):
    cell = alloy.cell
    n = alloy.n_atoms
    # Allowed fcc reflections (all even / all odd): Bragg = N²|f̄|² with f̄ the mean factor.
    grid = km.QGrid.hkl(cell, h=(0, 2, 41), k=(0, 2, 41), l=0)
    avg = average_frames(alloy, grid, split="cells", probe="xray", method="exact")
    hkl = grid.hkl_values().reshape(grid.shape + (3,))
    integer = np.all(np.abs(hkl - np.round(hkl)) < 1e-9, axis=-1)
    allowed = integer & np.all(np.round(hkl) % 2 == np.round(hkl[..., :1]) % 2, axis=-1)
    s = grid.q_norms().reshape(grid.shape) / (4 * np.pi)
    c = np.mean(alloy.species == "Fe")
    fbar = c * wk.fxrayatstol("Fe", s) + (1 - c) * wk.fxrayatstol("Ni", s)
    np.testing.assert_allclose(avg.bragg.intensity[allowed], (n * fbar[allowed]) ** 2, rtol=1e-9)
    # One snapshot cannot tell the diffuse part at integer hkl: NaN there, finite elsewhere.
    assert np.isnan(avg.diffuse.intensity[integer]).all()
    assert np.isfinite(avg.diffuse.intensity[~integer]).all()
    # Total = Bragg + diffuse at every commensurate point where the diffuse part is known.
    known = ~integer
    np.testing.assert_allclose(avg.total.intensity[known],
                               avg.bragg.intensity[known] + avg.diffuse.intensity[known], rtol=1e-9,
                               atol=1e-12 * avg.total.intensity.max())
    # Off the box's lattice (a warned-about grid) the diffuse part stays >= 0.
    off = km.QGrid.hkl(cell, h=(0.013, 1.3, 37), k=0.31, l=0.07)
    with pytest.warns(OffLatticeWarning):
        avg_off = average_frames(alloy, off, split="cells", probe="xray", method="exact")
    assert (avg_off.diffuse.intensity >= 0).all()


def test_cells_split_needs_a_parent_cell():
    m = km.Model(np.zeros((2, 3)) + [[0, 0, 0], [1, 1, 1]], "Fe", box=np.eye(3) * 2)
    with pytest.raises(km.InvalidInputError, match="one parent cell"):
        average_frames(m, km.QGrid.points([[0.1, 0, 0]]), split="cells", probe="unit")
    with pytest.raises(km.InvalidInputError, match="periodic model with a box"):
        average_frames(km.Model(np.zeros((1, 3)), "Fe"), km.QGrid.points([[0.1, 0, 0]]), split="cells")


def test_thermal_model_split_both_ways():
    """Simple cubic 6³ cells, Gaussian displacements, 40 frames: frames and cells agree."""
    rng = np.random.default_rng(3)
    a, reps, sigma, n_frames = 3.0, 6, 0.12, 40
    cell = np.eye(3) * a
    ideal = supercell_positions(np.zeros((1, 3)), cell, (reps,) * 3)
    n = len(ideal)
    frames = [km.Model(ideal + rng.normal(0, sigma, ideal.shape), "X", cell=cell, supercell=(reps,) * 3)
              for _ in range(n_frames)]
    grid = km.QGrid.hkl(cell, h=(0, 3, 19), k=(0, 3, 19), l=1 / 6)  # commensurate, off-Bragg (l = 1/6)
    by_frames = average_frames(frames, grid, split="frames", probe="unit", method="exact")
    by_cells = average_frames(frames, grid, split="cells", probe="unit", method="exact")
    ratio = by_frames.diffuse.intensity.mean() / by_cells.diffuse.intensity.mean()
    assert ratio == pytest.approx(1.0, abs=0.05)  # statistical, ~1/√(points × frames)
    q2 = grid.q_norms() ** 2
    expected = n * (1 - np.exp(-q2 * sigma**2))  # diffuse of independent Gaussian displacements
    assert by_cells.diffuse.intensity.mean() / expected.mean() == pytest.approx(1.0, abs=0.05)
    # At Bragg points both give N² exp(−q²σ²) within 2 % (the frames split is unbiased, the
    # cells split differs from it by D/n).
    bragg_grid = km.QGrid.hkl(cell, h=(1, 2, 2), k=(0, 1, 2), l=1)
    bf = average_frames(frames, bragg_grid, split="frames", probe="unit", method="exact")
    bc = average_frames(frames, bragg_grid, split="cells", probe="unit", method="exact")
    dw = n**2 * np.exp(-(bragg_grid.q_norms() ** 2) * sigma**2).reshape(bragg_grid.shape)
    np.testing.assert_allclose(bf.bragg.intensity, dw, rtol=0.02)
    np.testing.assert_allclose(bc.bragg.intensity, dw, rtol=0.02)


def test_rigid_drift_is_removed():
    rng = np.random.default_rng(5)
    base = rng.uniform(0, 10, (50, 3))
    frames = [km.Model(base + t * np.array([0.37, -0.21, 0.05]), "C") for t in range(3)]
    grid = km.QGrid.line([0.2, 0.1, 0], [3, 0.4, 1], 9)
    with pytest.warns(FewFramesWarning):
        kept = average_frames(frames, grid, probe="unit")
    # A rigid translation only changes the phase: with the drift removed nothing is diffuse.
    np.testing.assert_allclose(kept.diffuse.intensity, 0.0, atol=1e-9 * kept.total.intensity.max())
    assert kept.total.metadata["drift_removed"][2] == pytest.approx([0.74, -0.42, 0.1])
    with pytest.warns(FewFramesWarning):
        moved = average_frames(frames, grid, probe="unit", remove_drift=False)
    assert moved.diffuse.intensity.max() > 1e-3 * moved.total.intensity.max()
