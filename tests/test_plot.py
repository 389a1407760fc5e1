"""Pictures: PNG files of the expected pixel size (matplotlib: pixels = inches × dpi), axes
labels and colour limits from the data (NumPy), clear errors, no partial files."""

import matplotlib

matplotlib.use("Agg")

import matplotlib.image as mpimg
import matplotlib.pyplot as plt
import numpy as np
import pytest

import kinemap as km
from kinemap.errors import InvalidInputError
from kinemap.plot import plot_map, plot_profile, plot_slice, render


@pytest.fixture
def model(rng):
    return km.Model(rng.uniform(0, 8, (40, 3)), rng.choice(["Fe", "O"], 40).tolist())


@pytest.mark.parametrize("size, dpi", [((4.0, 3.0), 50), ((6.4, 5.2), 100)])
def test_plane_png_has_expected_size(tmp_path, model, size, dpi):
    pat = km.scatter(model, km.QGrid.plane([-2, -2, 0], [4, 0, 0], [0, 4, 0], (30, 20)))
    out = render(pat, tmp_path / "p.png", dpi=dpi, size=size)
    img = mpimg.imread(out)
    assert img.shape[:2] == (round(size[1] * dpi), round(size[0] * dpi))
    assert [p.name for p in tmp_path.iterdir()] == ["p.png"]


def test_profile_png(tmp_path, model):
    pat = km.scatter(model, km.QGrid.line([0, 0, 0], [4, 1, 0], 50))
    out = render(pat, tmp_path / "line.png", dpi=40, size=(5, 2.5), scale="linear")
    assert mpimg.imread(out).shape[:2] == (100, 200)
    fig = plot_profile(pat)
    assert "Å⁻¹" in fig.axes[0].get_xlabel() and fig.axes[0].get_yscale() == "log"
    plt.close(fig)


def test_hkl_map_in_rlu_and_log_limits(model):
    cell = np.diag([4.0, 5.0, 6.0])
    pat = km.scatter(model, km.QGrid.hkl(cell, h=(-2, 2, 21), k=(-1, 3, 17), l=0.5))
    fig = plot_map(pat)  # auto → r.l.u. for hkl grids
    ax = fig.axes[0]
    assert ax.get_xlabel() == "h (r.l.u.)" and ax.get_ylabel() == "k (r.l.u.)"
    mesh = ax.collections[0]
    assert mesh.norm.vmax == pytest.approx(pat.intensity.max())
    # The documented automatic log floor: the 0.5 % quantile of the positive values, not below
    # 1e-12 of the maximum.
    pos = pat.intensity[pat.intensity > 0]
    assert mesh.norm.vmin == pytest.approx(max(np.quantile(pos, 0.005), 1e-12 * pos.max()))
    assert "(h k 0.5) plane" in ax.get_title()
    assert "electrons²" in fig.axes[1].get_ylabel()  # colour bar label with units
    plt.close(fig)
    fig = plot_map(pat, axis_units="inv-angstrom", scale="linear")
    assert "Å⁻¹" in fig.axes[0].get_xlabel()
    plt.close(fig)


def test_volume_slice(tmp_path, model):
    pat = km.scatter(model, km.QGrid.volume([0, 0, 0], [2, 0, 0], [0, 2, 0], [0, 0, 2], (8, 9, 10)))
    fig = plot_slice(pat, slice_axis="w", slice_index=3)
    assert "q along [0 0 1] = 0.6667" in fig.axes[0].get_title()
    z = fig.axes[0].collections[0].get_array()
    np.testing.assert_allclose(np.sort(np.asarray(z).ravel()), np.sort(pat.intensity[:, :, 3].ravel()))
    plt.close(fig)
    with pytest.raises(InvalidInputError, match=r"`slice_index` 12 is outside 0..9"):
        plot_slice(pat, slice_axis=2, slice_index=12)
    render(pat, tmp_path / "v.png", dpi=30, size=(3, 3))


def test_bad_requests(tmp_path, model):
    grid = km.QGrid.plane([0, 0, 0], [1, 0, 0], [0, 1, 0], (4, 4))
    zero = km.Pattern(grid, intensity=np.zeros((4, 4)))
    with pytest.raises(InvalidInputError, match="log scale needs positive values"):
        render(zero, tmp_path / "z.png")
    render(zero, tmp_path / "z.png", scale="linear")
    with pytest.raises(InvalidInputError, match="needs an amplitude"):
        plot_map(zero, quantity="phase")
    pts = km.scatter(model, km.QGrid.points(np.zeros((2, 3, 3))))
    with pytest.raises(InvalidInputError, match="arbitrary q-points"):
        render(pts, tmp_path / "pts.png")
    with pytest.raises(InvalidInputError, match="a profile needs a 1-D line or hkl grid"):
        render(km.scatter(model, km.QGrid.points(np.zeros((3, 3)))), tmp_path / "pts.png")
    with pytest.raises(InvalidInputError, match="`scale` must be one of"):
        plot_map(zero, scale="sqrt")
    with pytest.raises(InvalidInputError, match="reciprocal-lattice units need an hkl grid"):
        plot_map(zero, axis_units="rlu", scale="linear")
    with pytest.raises(OSError, match="does not exist"):
        render(zero, tmp_path / "no" / "z.png", scale="linear")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["z.png"]


def test_interrupted_render_leaves_nothing(tmp_path, model, monkeypatch):
    pat = km.scatter(model, km.QGrid.plane([0, 0, 0], [1, 0, 0], [0, 1, 0], (5, 5)))

    def broken(self, fname, **kw):
        with open(fname, "wb") as fh:
            fh.write(b"\x89PNG partial")
        raise KeyboardInterrupt

    monkeypatch.setattr(matplotlib.figure.Figure, "savefig", broken)
    with pytest.raises(KeyboardInterrupt):
        render(pat, tmp_path / "i.png")
    assert list(tmp_path.iterdir()) == []


def test_default_slice_goes_through_zero(model):
    # An even-sized volume from −1 to +1.2 Å⁻¹ along w: 12 points, one of them at w = 0.
    pat = km.scatter(model, km.QGrid.volume([-1, -1, -1], [2, 0, 0], [0, 2, 0], [0, 0, 2.2], (6, 6, 12)))
    fig = plot_slice(pat, slice_axis="w")
    assert "= 0 Å⁻¹ (slice 5 of 12)" in fig.axes[0].get_title()
    plt.close(fig)


def test_single_point_peaks_stay_visible_and_data_unchanged():
    # A 1201 × 1201 map with one nonzero point: drawn 640 pixels wide it would vanish.
    g = km.QGrid.plane([-1, -1, 0], [2, 0, 0], [0, 2, 0], (1201, 1201))
    inten = np.full(g.shape, 1e-6)
    inten[600, 600] = 1.0
    pat = km.Pattern(g, intensity=inten)
    fig = plot_map(pat)
    shown = np.asarray(fig.axes[0].collections[0].get_array()).reshape(g.shape)
    assert (shown >= 1.0).sum() >= 25  # widened to at least 5 × 5 points
    assert pat.intensity[600, 600] == 1.0 and (pat.intensity == 1.0).sum() == 1
    assert "widened" in fig.axes[0].texts[0].get_text()
    plt.close(fig)


def test_all_nan_map_is_refused_clearly(tmp_path):
    g = km.QGrid.plane([0, 0, 0], [1, 0, 0], [0, 1, 0], (4, 4))
    pat = km.Pattern(g, intensity=np.full(g.shape, np.nan))
    with pytest.raises(km.InvalidInputError, match="no finite values"):
        render(pat, tmp_path / "x.png", scale="linear")
    assert list(tmp_path.iterdir()) == []
