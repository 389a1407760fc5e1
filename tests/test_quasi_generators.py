"""Quasicrystal generators: densities, distances, tile and vertex statistics, substitution
versus cut-and-project, streaming, approximants, decoration and bad input.

References (see docs/references.md, quasicrystal section): Baake & Grimm,
"Aperiodic Order" vol. 1 (CUP 2013); de Bruijn, Indag. Math. 43 (1981); Elser, PRB 32 (1985)
4892. Values marked "(memory)" were recalled, not read from the source. Patch-size
tolerances are the boundary layer: a fraction ≈ d·a/R of the points of a round patch of
radius R lie within one edge a of its boundary.
"""

from __future__ import annotations

import math
from itertools import combinations

import numpy as np
import pytest
from scipy.spatial import cKDTree

import kinemap as km
import kinemap.quasi as kq
from kinemap.errors import InvalidInputError
from kinemap.model import AtomSource

TAU = (1 + math.sqrt(5)) / 2


def _ball_volume(r, d):
    return {1: 2 * r, 2: math.pi * r * r, 3: 4 / 3 * math.pi * r ** 3}[d]


# --------------------------------------------------------------------------- densities
@pytest.mark.parametrize("scheme, radius, density", [
    # docs/references.md: Fibonacci τ/√5, octagonal 1.207107, Penrose 1.231073 (edge 1)
    (kq.fibonacci(), 3000.0, TAU / math.sqrt(5)),
    (kq.octagonal(), 45.0, 1.207107),
    (kq.penrose(), 45.0, 1.231073),
    # icosahedral: docs/references.md window volume 12.310734 over |det M| = 8 (unit generators
    # with MᵀM = 2I); checked independently below from tile volumes and frequencies
    (kq.icosahedral(), 11.0, 12.310734 / 8),
])
def test_density_of_generated_sets(scheme, radius, density):
    ps = scheme.points(radius)
    d = scheme.dim
    measured = len(ps) / _ball_volume(radius, d)
    # patch-size tolerance: a boundary layer of one edge, fraction d·edge/R
    tol = d * 1.0 / radius
    assert abs(measured / density - 1) < tol
    assert scheme.density == pytest.approx(density, rel=1e-6)


def test_icosahedral_density_from_rhombohedra():
    # Prolate:oblate = τ:1 (memory: Henley, in "Quasicrystals: the state of the art", 1991)
    # and rhombohedron volumes √(1 − 3c² + 2c³) with c = ±1/√5 (solid geometry) give the
    # mean cell volume; one vertex per cell for a rhombohedral tiling.
    c = 1 / math.sqrt(5)
    v_p = math.sqrt(1 - 3 * c * c + 2 * c ** 3)
    v_o = math.sqrt(1 - 3 * c * c - 2 * c ** 3)
    mean = (TAU * v_p + v_o) / (TAU + 1)
    assert kq.icosahedral().density == pytest.approx(1 / mean, rel=1e-9)


@pytest.mark.parametrize("scheme, radius, d_min", [
    (kq.fibonacci(), 500.0, 1.0),                          # short tile S = 1
    (kq.octagonal(), 30.0, 2 * math.sin(math.pi / 8)),     # 45° rhombus short diagonal
    (kq.penrose(shift=(0.013, 0.029)), 30.0, 1 / TAU),      # thin (36°) rhombus short diagonal
    # oblate rhombohedron short body diagonal √(3 − 6/√5) (geometry; memory that it is
    # the shortest vertex distance of the Ammann–Kramer tiling)
    (kq.icosahedral(), 9.0, math.sqrt(3 - 6 / math.sqrt(5))),
])
def test_minimum_distance(scheme, radius, d_min):
    p = scheme.points(radius).positions
    dist, _ = cKDTree(p).query(p, 2)
    assert dist[:, 1].min() == pytest.approx(d_min, rel=1e-9)


def test_window_measures():
    # docs/references.md: octagon area 2(1+√2), triacontahedron volume 4√(5+2√5) = 12.310734
    assert kq.octagonal().window.measure == pytest.approx(2 * (1 + math.sqrt(2)), rel=1e-12)
    assert kq.icosahedral().window.measure == pytest.approx(12.310734, abs=5e-7)
    assert kq.icosahedral().window.measure == pytest.approx(4 * math.sqrt(5 + 2 * math.sqrt(5)), rel=1e-12)
    # Penrose windows P, τP, τP, P (docs/references.md): 2|P|(1 + τ²), |P| = (5/2) sin 72°
    p_area = 2.5 * math.sin(2 * math.pi / 5)
    w = kq.penrose().window
    assert [round(p.measure / p_area, 9) for p in w.polygons] == pytest.approx([1, TAU ** 2, TAU ** 2, 1])
    # scipy's Qhull volume of the same vertices (general-purpose library)
    from scipy.spatial import ConvexHull
    tri = kq.icosahedral().window
    assert ConvexHull(tri.vertices).volume == pytest.approx(tri.measure, rel=1e-12)
    assert len(tri.faces) == 30  # rhombic triacontahedron


# --------------------------------------------------------------------------- tiles, vertices
def test_fibonacci_tile_frequencies_converge_to_tau():
    # L:S = τ:1 (docs/references.md); a chain of N tiles is within about 1/N
    ch = kq.fibonacci()
    for n in (1000, 100_000):
        counts = kq.count_tiles(ch.chain_points(0, n))
        n_s, n_l = counts[(0,)], counts[(1,)]
        assert abs(n_l / n_s - TAU) < 3.0 / n_s
    # exact integer counts of the words: F_n L and F_{n-1} S (Fibonacci numbers)
    s, l_ = ch.tile_counts(30)
    assert (s, l_) == (832040, 1346269)


@pytest.mark.parametrize("scheme, radius, v_num, v_den, ratio", [
    # rhombi (area sin 45°) : squares = √2 : 1 (memory: Baake & Grimm ch. 6)
    (kq.octagonal(), 60.0, math.sin(math.pi / 4), 1.0, math.sqrt(2)),
    # thick (sin 72°) : thin (sin 36°) = τ : 1 (memory: de Bruijn 1981)
    (kq.penrose(), 60.0, math.sin(2 * math.pi / 5), math.sin(math.pi / 5), TAU),
    # prolate : oblate rhombohedra = τ : 1 (memory); volumes √(1 − 3c² ± 2c³), c = 1/√5
    (kq.icosahedral(), 12.0, math.sqrt(0.4 + 0.4 / math.sqrt(5)), math.sqrt(0.4 - 0.4 / math.sqrt(5)), TAU),
])
def test_tile_frequencies_and_coverage(scheme, radius, v_num, v_den, ratio):
    ps = scheme.points(radius)
    counts = kq.count_tiles(ps)
    vols = kq.tile_volumes(scheme)
    n_num = sum(c for k, c in counts.items() if abs(vols[k] - v_num) < 1e-9)
    n_den = sum(c for k, c in counts.items() if abs(vols[k] - v_den) < 1e-9)
    assert all(abs(v - v_num) < 1e-9 or abs(v - v_den) < 1e-9 or v < 1e-9 for v in vols.values())
    tol = 2 * scheme.dim / radius  # boundary effects
    assert n_num / n_den == pytest.approx(ratio, rel=tol)
    # Tiles cover the patch without overlap: total tile volume ≈ ball volume (the corner
    # rule counts genuine tiles only); boundary tiles are missing, so only from below.
    covered = sum(counts[k] * vols[k] for k in counts) / _ball_volume(radius, scheme.dim)
    assert 1 - 4 * scheme.dim / radius < covered <= 1.0


def test_vertex_degrees_ammann_beenker():
    ps = kq.octagonal().points(70.0)
    deg = kq.coordination(ps)
    inner = np.linalg.norm(ps.positions, axis=1) < 60.0
    # Euler's formula for a tiling by quadrilaterals: mean degree → 4
    assert deg[inner].mean() == pytest.approx(4.0, abs=0.02)
    # 8-fold vertices: frequency (√2 − 1)⁴ = 17 − 12√2 (memory: Baake & Grimm, AB tiling)
    assert (deg[inner] == 8).mean() == pytest.approx(17 - 12 * math.sqrt(2), abs=0.003)
    # the neighbour rule agrees with a distance search: degree = points at distance 1
    # (edges have length 1; the other short distances are 0.765 and √2)
    tree = cKDTree(ps.positions)
    near = tree.query_ball_point(ps.positions[inner][:500], 1.0 + 1e-9)
    far = tree.query_ball_point(ps.positions[inner][:500], 1.0 - 1e-9)
    k = np.array([len(a) - len(b) for a, b in zip(near, far)])
    assert np.array_equal(k, deg[inner][:500])


# --------------------------------------------------------------------------- chains
@pytest.mark.parametrize("m", [1, 2, 3])
def test_substitution_equals_cut_and_project(m):
    ch = kq.metallic_chain(m)
    for g in range(0, 9):
        sub = ch.substitution_points(g)
        cp = ch.chain_points(0, len(sub))
        assert np.array_equal(sub.indices, cp.indices)
        np.testing.assert_allclose(sub.positions, cp.positions, rtol=0, atol=1e-12 * len(sub))
    # docs/references.md closed form for Fibonacci: x_n = nS + (L − S)⌊(n+1)/τ⌋
    if m == 1:
        n = np.arange(5000)
        x = n + (TAU - 1) * np.floor((n + 1) / TAU)
        np.testing.assert_allclose(ch.chain_points(0, 5000).positions[:, 0], x, rtol=1e-13, atol=1e-9)


def test_fibonacci_words():
    ch = kq.fibonacci()
    words = ["".join("L" if v else "S" for v in ch.word(g)) for g in range(5)]
    # L → LS, S → L (docs/references.md)
    assert words == ["L", "LS", "LSL", "LSLLS", "LSLLSLSL"]
    # the word w_7 (34 tiles) as atoms: a patch over the segment [0, x_33] of the chain
    sub = ch.substitution_points(7)
    end = sub.positions[-1, 0]
    model = ch.patch(end / 2, center=end / 2, species="Al").read()
    assert model.n_atoms == 34 and model.species_labels() == ["Al"]
    np.testing.assert_allclose(np.sort(model.positions[:, 0]), sub.positions[:, 0], atol=1e-12)


def test_generic_search_equals_closed_form_and_shift():
    # the generic strip enumerator and the closed form give the same chain
    for shift in (0.0, 0.3, -0.77):
        ch = kq.fibonacci(shift=shift)
        generic = kq.CutProjectScheme("generic", ch.parallel, ch.internal, ch.window)
        a = np.sort(generic.points(150.0).positions[:, 0])
        b = np.sort(ch.points(150.0).positions[:, 0])
        np.testing.assert_array_equal(a, b)
        # every internal coordinate lies in the shifted window [−1, 1/τ) + shift
        y = ch.chain_points(-500, 500).perp[:, 0]
        assert y.min() >= -1 + shift - 1e-12 and y.max() < 1 / TAU + shift


def test_deformed_chain_keeps_sequence():
    a = kq.fibonacci().chain_points(0, 300)
    b = kq.fibonacci(short=2.0, long=3.0).chain_points(0, 300)
    np.testing.assert_array_equal(a.indices, b.indices)
    np.testing.assert_allclose(b.positions[:, 0], 2.0 * a.indices[:, 0] + 3.0 * a.indices[:, 1])


# --------------------------------------------------------------------------- streaming
def test_streaming_chunks_match_one_shot():
    sch = kq.icosahedral()
    full = sch.points(7.0)
    parts = list(sch.iter_points(7.0, chunk_points=500))
    assert len(parts) > 2
    streamed = np.concatenate([p.positions for p in parts])
    assert len(streamed) == len(full)
    key = lambda p: np.lexsort(np.round(p.T, 9))  # noqa: E731
    np.testing.assert_allclose(streamed[key(streamed)], full.positions[key(full.positions)], atol=1e-12)
    # an off-centre patch only holds points within the radius
    c = np.array([3.0, -2.0, 1.0])
    off = sch.points(4.0, center=c)
    assert (np.linalg.norm(off.positions - c, axis=1) <= 4.0 + 1e-9).all() and len(off) > 100


def test_patch_is_an_atom_source_and_streams_into_the_engine():
    sch = kq.octagonal()
    patch = sch.patch(25.0)
    assert isinstance(patch, AtomSource) and isinstance(patch, kq.Patch)
    assert patch.box is None and patch.cell is None  # a round patch of a quasicrystal
    whole = patch.read()
    assert whole.n_atoms == patch.n_atoms == len(sch.points(25.0))
    d = patch.describe()
    assert d["n_atoms"] == whole.n_atoms and d["box"] is None and d["radius"] == 25.0
    # chunks of at most chunk_atoms that join to the whole patch
    chunks = list(patch.iter_chunks(300))
    assert len(chunks) > 5 and max(c.n_atoms for c in chunks) <= 300
    np.testing.assert_array_equal(np.concatenate([c.positions for c in chunks]), whole.positions)
    q = sch.module([[1, 0, 0, 0], [1, 1, 0, 0]]).q
    in_memory = km.scatter(whole, km.QGrid.points(q), probe="unit").amplitude
    streamed = km.scatter(patch, km.QGrid.points(q), probe="unit", chunk_atoms=300).amplitude
    np.testing.assert_allclose(streamed, in_memory, rtol=1e-12, atol=1e-9)
    # the gridded (FFT) engine takes the same streamed source; it promises a relative
    # accuracy `tol`, checked here against the exact sums with a margin
    grid = km.QGrid.plane([-6, -6, 0], [12, 0, 0], [0, 12, 0], (48, 48))
    exact = km.scatter(patch, grid, probe="unit", method="exact").amplitude
    fast = km.scatter(patch, grid, probe="unit", method="gridded", tol=1e-6).amplitude
    assert np.abs(fast - exact).max() <= 1e-4 * np.abs(exact).max()


def test_patch_with_species_rule_and_debye_waller():
    sch = kq.octagonal()

    def rule(points):
        return kq.species_by_perp(points, radii=[0.8], labels=["Mn", "Al"])

    patch = sch.patch(20.0, species=rule, b_iso={"Mn": 0.5, "Al": 1.0})
    assert patch.species_labels() == ["Al", "Mn"]
    model = patch.read()
    ps = sch.points(20.0)
    r = np.linalg.norm(ps.perp, axis=1)  # window centre at the origin
    assert (model.species == "Mn").sum() == (r < 0.8).sum() > 0
    np.testing.assert_array_equal(model.b_iso, np.where(model.species == "Mn", 0.5, 1.0))
    # a rule sees one chunk at a time and decides each point alone: chunking changes nothing
    small = kq.Patch(sch, 20.0, species=rule)
    joined = np.concatenate([c.species for c in small.iter_chunks(97)])
    np.testing.assert_array_equal(joined, model.species)
    # Debye–Waller through the patch: B = 1 Å² for Al and 0.5 Å² for Mn, exp(−B s²) per
    # atom (ITC Vol. C §8.1), against a NumPy sum
    q = sch.module([[1, 0, 0, 0], [2, 1, 0, -1]]).q
    s2 = (np.linalg.norm(q, axis=1) / (4 * np.pi)) ** 2
    ref = (np.exp(-np.outer(s2, model.b_iso)) * np.exp(1j * q @ model.positions.T)).sum(axis=1)
    np.testing.assert_allclose(km.scatter(patch, km.QGrid.points(q), probe="unit").amplitude, ref,
                               rtol=1e-12, atol=1e-9)


# --------------------------------------------------------------------------- approximants
@pytest.mark.parametrize("p, q", [(2, 1), (3, 2), (5, 3), (8, 5)])
def test_fibonacci_approximants(p, q):
    ch = kq.fibonacci()
    ap = ch.approximant((p, q))
    uc = ap.unit_cell()
    # period: q short and p long tiles, length q + pτ
    assert len(uc) == p + q
    assert ap.cell()[0, 0] == pytest.approx(q + p * TAU, rel=1e-12)
    block = ap.approximant_block([2])
    order = np.argsort(block.positions[:, 0])
    steps = np.diff(block.indices[order], axis=0)  # (1, 0): short tile, (0, 1): long tile
    assert {tuple(s) for s in steps} <= {(1, 0), (0, 1)}
    seq = "".join("L" if s[1] else "S" for s in steps[: p + q])
    assert seq.count("L") == p and seq.count("S") == q
    # one period's tile sequence is a cyclic rotation of a Fibonacci word w_n
    # (memory: rational approximants of Sturmian words are conjugates of standard words)
    seq = "".join("L" if s[1] else "S" for s in steps[: p + q])
    g = {(2, 1): 2, (3, 2): 3, (5, 3): 4, (8, 5): 5}[(p, q)]
    w = "".join("L" if v else "S" for v in ch.word(g))
    assert len(w) == p + q and seq in (w + w)


@pytest.mark.parametrize("p, q", [(1, 1), (2, 1), (3, 2)])
def test_icosahedral_cubic_approximants(p, q):
    ap = kq.icosahedral(shift=(0.01, 0.02, 0.03)).approximant((p, q))
    cell = ap.cell()
    # cubic edge 2(pτ + q)/√(2+τ) for edge 1 (memory);
    # the 1/1 (and every p+q-even) approximant lattice is body-centred: primitive vectors
    # (±a/2, ±a/2, ±a/2)
    a = 2 * (p * TAU + q) / math.sqrt(2 + TAU)
    if (p + q) % 2 == 0:
        np.testing.assert_allclose(np.abs(cell), a / 2, rtol=1e-12)
    else:
        np.testing.assert_allclose(cell, a * np.eye(3), atol=1e-12)
    uc = ap.unit_cell()
    vol = abs(np.linalg.det(cell))
    # exactly periodic: translates of the cell's points by each period stay in the set
    for t in ap.periods:
        _, y = ap.lift(uc.indices + t)
        assert ap.window.contains(y).all()
    # points per cell ≈ QC density × cell volume, closer for higher approximants
    tol = {(1, 1): 0.01, (2, 1): 0.001, (3, 2): 0.0002}[(p, q)]
    assert len(uc) / vol == pytest.approx(kq.icosahedral().density, rel=tol)


def test_octagonal_and_penrose_approximants():
    sch = kq.octagonal()
    for n in (2, 3, 4):
        p, q = kq.pell_ratio(n)
        ap = sch.approximant((p, q))
        cell = ap.cell()
        area = abs(np.linalg.det(cell))
        # square cells (the octagonal approximants are tetragonal)
        assert np.linalg.norm(cell[0]) == pytest.approx(np.linalg.norm(cell[1]), rel=1e-12)
        assert abs(cell[0] @ cell[1]) < 1e-9
        uc = ap.unit_cell()
        assert abs(len(uc) - area * sch.density) < 1.0
    pen = kq.penrose(shift=(0.01, 0.02))
    for n in (2, 3, 4):
        ap = pen.approximant(kq.fibonacci_ratio(n))
        cell = ap.cell()
        assert abs(cell[0] @ cell[1]) < 1e-9  # rectangular
        uc = ap.unit_cell()
        area = abs(np.linalg.det(cell))
        assert abs(len(uc) / area / pen.density - 1) < 0.06
        # periodicity
        for t in ap.periods:
            _, y = ap.lift(uc.indices + t)
            assert ap.window.contains(y).all()


def test_approximant_block_is_periodic_with_its_box():
    ap = kq.octagonal().approximant((3, 2))
    block = ap.patch(cells=(2, 3), species="Al")
    assert isinstance(block, AtomSource)
    n_cell = len(ap.unit_cell())
    assert block.n_atoms == 6 * n_cell
    cell = ap.cell3()
    np.testing.assert_allclose(block.cell, cell)
    np.testing.assert_allclose(block.box, np.diag([2.0, 3.0, 1.0]) @ cell)
    model = block.read()
    assert model.n_atoms == 6 * n_cell
    np.testing.assert_allclose(model.box, block.box)
    chunks = list(block.iter_chunks(n_cell - 3))  # chunks that split cells
    np.testing.assert_array_equal(np.concatenate([c.positions for c in chunks]), model.positions)
    # Laue function of the block (docs/references.md, crystals): 6 × F_cell at the cell's
    # reciprocal points, 0 at the box's other reciprocal points
    recip_box = 2 * np.pi * np.linalg.inv(block.box).T
    hk = np.array([[2, 0, 0], [0, 3, 0], [2, 3, 0], [1, 0, 0], [0, 1, 0], [1, 2, 0]])
    amp = km.scatter(block, km.QGrid.points(hk @ recip_box), probe="unit").amplitude
    cell_only = kq.Patch(ap, cells=(1, 1)).read()
    f_cell = km.scatter(cell_only, km.QGrid.points(hk[:3] @ recip_box), probe="unit").amplitude
    np.testing.assert_allclose(amp[:3], 6 * f_cell, rtol=1e-10, atol=1e-8)
    assert np.abs(amp[3:]).max() < 1e-8 * block.n_atoms
    # a round patch of an approximant: not periodic, but h, k, l refer to its cell
    round_patch = ap.patch(10.0)
    assert round_patch.box is None
    np.testing.assert_allclose(round_patch.cell, cell)


# --------------------------------------------------------------------------- decoration
def test_species_by_perp_and_vertex_type():
    ps = kq.octagonal().points(20.0)
    lab = kq.species_by_perp(ps, radii=[0.8], labels=["Mn", "Al"])
    r = np.linalg.norm(ps.perp, axis=1)
    assert set(lab[r < 0.8]) == {"Mn"} and set(lab[r >= 0.8]) == {"Al"}
    model = km.Model(ps.positions, lab)
    assert model.species_labels() == ["Al", "Mn"]
    by_deg = kq.species_by_coordination(ps, {8: "Cu"}, default="Al")
    assert (by_deg == "Cu").sum() == (kq.coordination(ps) == 8).sum() > 0
    with pytest.raises(InvalidInputError, match="vertex .* edges"):
        kq.species_by_coordination(ps, {8: "Cu"})
    with pytest.raises(InvalidInputError, match="labels"):
        kq.species_by_perp(ps, radii=[0.5, 1.0], labels=["A"])


def test_phason_jitter_is_local_and_reproducible():
    sch = kq.octagonal()
    a = kq.phason_jitter_points(sch, 25.0, sigma=0.1, seed=7)
    b = kq.phason_jitter_points(sch, 25.0, sigma=0.1, seed=7)
    c = kq.phason_jitter_points(sch, 30.0, sigma=0.1, seed=7)
    np.testing.assert_array_equal(a.indices, b.indices)
    # the jitter of a lattice point depends only on its indices: the larger patch contains
    # the smaller one's points
    ka = {tuple(r) for r in a.indices}
    kc = {tuple(r) for r in c.indices}
    assert ka <= kc
    plain = {tuple(r) for r in sch.points(25.0).indices}
    flipped = len(ka ^ plain)
    assert 0 < flipped < 0.5 * len(plain)
    # zero jitter reproduces the perfect set
    z = kq.phason_jitter_points(sch, 25.0, sigma=0.0, seed=7)
    assert {tuple(r) for r in z.indices} == plain


# --------------------------------------------------------------------------- bad input
@pytest.mark.parametrize("call, match", [
    (lambda: kq.octagonal(edge=-1), "edge"),
    (lambda: kq.octagonal(edge=True), "edge"),
    (lambda: kq.octagonal(shift=(0, 0, 0)), "shift"),
    (lambda: kq.icosahedral().points(float("nan")), "radius"),
    (lambda: kq.icosahedral().points("3"), "radius"),
    (lambda: kq.icosahedral().points(3.0, center=(0, 0)), "center"),
    (lambda: kq.fibonacci(short=0), "short"),
    (lambda: kq.metallic_chain(0), "metallic"),
    (lambda: kq.metallic_chain(2.0), "metallic"),
    (lambda: kq.fibonacci().module([[1, 2, 3]]), "indices"),
    (lambda: kq.fibonacci().module([[1.5, 2]]), "indices"),
    (lambda: kq.fibonacci().word(80), "too many"),
    (lambda: kq.fibonacci().word(True), "generation"),
    (lambda: kq.octagonal().approximant("x"), "ratio"),
    (lambda: kq.octagonal().approximant(1.5), "ratio"),
    (lambda: kq.octagonal().cell(), "not periodic"),
    (lambda: list(kq.octagonal().iter_points(5.0, chunk_points=0)), "chunk_points"),
    (lambda: kq.phason_jitter_points(kq.octagonal(), 5.0, sigma=-1), "sigma"),
    (lambda: kq.phason_jitter_points(kq.octagonal(), 5.0, sigma=0.1, seed=1.5), "seed"),
    (lambda: kq.icosahedral().points(5000.0), "stream it in chunks"),  # refused before allocating
    (lambda: kq.fibonacci().chain_points(0, 10 ** 13), "stream it in chunks"),
    (lambda: kq.pell_ratio(0), "`n`"),
    # patches
    (lambda: kq.octagonal().patch(), "either `radius`"),
    (lambda: kq.octagonal().approximant((3, 2)).patch(5.0, cells=(1, 1)), "either `radius`"),
    (lambda: kq.octagonal().patch(cells=(2, 2)), "periodic"),
    (lambda: kq.octagonal().approximant((3, 2)).patch(cells=(2,)), "cells"),
    (lambda: kq.octagonal().approximant((3, 2)).patch(cells=(2, 0)), "cells"),
    (lambda: kq.octagonal().approximant((3, 2)).patch(cells=(1, 1), center=(0, 0)), "center"),
    (lambda: kq.octagonal().patch(5.0, species=""), "species"),
    (lambda: kq.octagonal().patch(5.0, species=3), "species"),
    (lambda: kq.octagonal().patch(5.0, b_iso={"B": 1.0}), "names species"),
    (lambda: kq.octagonal().patch(5.0, b_iso=-1.0), "b_iso"),
    (lambda: kq.octagonal().patch(5.0, occupancy=1.5), "occupancy"),
    (lambda: kq.octagonal().patch(5.0, species=lambda p: ["A"]).n_atoms, "one per point"),
    (lambda: kq.octagonal().patch(5.0, species=lambda p: ["A"] * len(p), b_iso={"B": 1.0}).species_labels(),
     "names species"),
    (lambda: list(kq.octagonal().patch(5.0).iter_chunks(0)), "chunk_atoms"),
    (lambda: kq.Patch("octagonal", 5.0), "CutProjectScheme"),
    (lambda: kq.icosahedral().patch(3000.0).read(), "stream it in chunks"),  # refused before generating
])
def test_bad_input_raises_clear_errors(call, match):
    with pytest.raises(InvalidInputError, match=match):
        call()


def test_pointset_requires_indices_for_tiles():
    ps = kq.octagonal().points(5.0, with_indices=False)
    with pytest.raises(InvalidInputError, match="indices"):
        kq.count_tiles(ps)


def test_all_index_sets_of_tiles_listed():
    vols = kq.tile_volumes(kq.penrose())
    assert set(vols) == set(combinations(range(5), 2))
