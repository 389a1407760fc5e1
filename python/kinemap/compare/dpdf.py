"""The three-dimensional difference pair distribution function (3D-ΔPDF) of a map.

Weber & Simonov (2012) obtain the 3D-ΔPDF, a map of interatomic vectors in which the pair
correlations that differ from the average structure appear as positive and negative
peaks, as the Fourier transform of the diffuse scattering alone. kinemap's version:

1. (optional) average the map over the crystal's point group;
2. punch out the allowed Bragg reflections (and satellites): every point within a radius of
   at least one grid step — choose at least the peak or resolution width — of a reflection
   of a :class:`~kinemap.compare.BraggExclusion`;
3. fill every hole (punched, or unmeasured: NaN) from the points around it: the mean of the
   shell of points within `shell` grid steps outside the hole ("mean"), their median
   ("median"), or a least-squares plane through them ("linear"). A zero fill would leave a
   negative copy of the Bragg peaks' lattice in the ΔPDF (a negative artefact at every
   lattice vector). The mean is the default: the map of one model box is speckled (its
   intensities at the box's lattice points are exponentially distributed about the local
   mean), and the median of such values is only ln 2 ≈ 0.69 of their mean, which would bring
   back part of that artefact. The median suits measured maps whose shells still hold the
   tails of strong Bragg peaks;
4. apodise toward q_max: multiply by a window that is 1 up to (1 − taper)·q_max, falls as a
   raised cosine to 0 at q_max and is 0 beyond (q_max defaults to the radius of the largest
   sphere about q = 0 inside the grid), which keeps the cut-off from ringing;
5. Fourier transform (numpy.fft) over the grid's h, k, l axes:

       P(u) = Δh Δk Δl Σ_h I(h) exp(−2πi h·u),

   u in fractional coordinates of the cell (u, v, w along a, b, c), u_m = m/(N Δh) per axis,
   so |u| ≤ 1/(2Δh). For a lattice gas with site factors f_j the result at a lattice vector
   R is Σ_j (f_j − f̄)(f_{j+R} − f̄) = N c(1−c) Δf² α(R) for a binary alloy with Warren–Cowley
   parameter α(R), times the number of zones sampled. A plane (2-D hkl grid) gives the
   projection of the ΔPDF along the missing axis.

Model and measurement go through the same function, so their ΔPDFs differ only where the
model's correlations differ (see :meth:`kinemap.compare.Comparison.delta_pdf`).

Reference: T. Weber and A. Simonov, Z. Kristallogr. 227 (2012) 238–247 (docs/references.md).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .._shared.memory import check_fits
from .._shared.nexus import nexus_entry
from .._shared.output import atomic_write
from .._shared.validate import real_number, whole_number
from ..errors import InvalidInputError
from ..pattern import Pattern
from ..qgrid import QGrid, RegularGrid
from .bragg import BraggExclusion, bragg_mask

FILLS = ("mean", "median", "linear")
_UVW = {"h": "u", "k": "v", "l": "w"}


@dataclass
class DeltaPDF:
    """A ΔPDF map on fractional coordinates u, v, w of a cell.

    Attributes
    ----------
    values : ndarray
        P(u) (intensity units × r.l.u.^ndim), axes as `axis_names`.
    axes : list of ndarray
        Fractional coordinates of every axis (ascending; 0 included).
    axis_names : list of str
        "u", "v", "w" for the grid's h, k, l axes.
    cell : ndarray (3, 3)
    metadata : dict
        Bragg exclusion, fill, apodisation, counts of holes, imaginary fraction.
    """

    values: np.ndarray
    axes: list
    axis_names: list
    cell: np.ndarray
    metadata: dict = field(default_factory=dict)

    def index_of(self, uvw) -> tuple:
        """Indices of the grid point nearest to fractional coordinates `uvw` (one per axis)."""
        u = np.atleast_1d(np.asarray(uvw, dtype=np.float64))
        if u.shape != (len(self.axes),):
            raise InvalidInputError(f"`uvw` must have {len(self.axes)} coordinates ({', '.join(self.axis_names)}), "
                                    f"got {u.tolist()}")
        idx = []
        for x, ax, name in zip(u, self.axes, self.axis_names):
            step = ax[1] - ax[0] if len(ax) > 1 else 1.0
            i = int(round((x - ax[0]) / step))
            if not 0 <= i < len(ax):
                raise InvalidInputError(f"{name} = {x} is outside the map ({ax[0]:.4g} to {ax[-1]:.4g})")
            idx.append(i)
        return tuple(idx)

    def value_at(self, uvw) -> float:
        """P at the grid point nearest to `uvw`."""
        return float(self.values[self.index_of(uvw)])

    def minus(self, other: DeltaPDF) -> DeltaPDF:
        """The difference of two ΔPDFs on the same coordinates."""
        if self.values.shape != other.values.shape or not all(np.allclose(a, b) for a, b in zip(self.axes, other.axes)):
            raise InvalidInputError("the two ΔPDF maps are not on the same coordinates")
        return DeltaPDF(self.values - other.values, [a.copy() for a in self.axes], list(self.axis_names),
                        self.cell.copy(), {"content": "difference of two 3D-ΔPDF maps"})

    def save(self, path, *, overwrite: bool = False) -> Path:
        """Write as NeXus NXdata (signal ``delta_pdf``, axes u, v, w in fractional coordinates)."""
        import h5py

        from ..pattern import _write_params

        final = Path(path)
        with atomic_write(final, overwrite=overwrite, what="3D-ΔPDF file") as tmp, h5py.File(tmp, "w") as f:
            e = nexus_entry(f, final.name, default="delta_pdf")
            g = e.create_group("delta_pdf")
            g.attrs["NX_class"] = "NXdata"
            g.attrs["signal"] = "delta_pdf"
            g.attrs["axes"] = np.array(self.axis_names, dtype=h5py.string_dtype())
            d = g.create_dataset("delta_pdf", data=self.values)
            d.attrs["long_name"] = "3D-difference pair distribution function P(u)"
            for i, (name, ax) in enumerate(zip(self.axis_names, self.axes)):
                a = g.create_dataset(name, data=ax)
                a.attrs["units"] = "fractional coordinate"
                g.attrs[f"{name}_indices"] = i
            e.create_dataset("cell", data=self.cell).attrs["units"] = "angstrom"
            p = e.create_group("parameters")
            p.attrs["NX_class"] = "NXcollection"
            _write_params(p, self.metadata)
        return final


def _hkl_axes(grid: QGrid) -> tuple[list[str], list[float]]:
    if grid.kind != "hkl":
        raise InvalidInputError(f"a 3D-ΔPDF needs a map on an hkl grid (QGrid.hkl: axes along h, k, l), got a "
                                f"{grid.kind!r} grid")
    if not isinstance(grid, RegularGrid) or grid.hkl_steps is None:
        raise InvalidInputError("a 3D-ΔPDF needs a map on an hkl grid with a cell (QGrid.hkl); this grid of kind "
                                "'hkl' has none")
    nd = len(grid.shape)
    if nd == 0:
        raise InvalidInputError("a 3D-ΔPDF needs a map, not a single reflection")
    hs = np.asarray(grid.hkl_steps, dtype=np.float64).reshape(nd, 3)
    letters, steps = [], []
    for a in range(nd):
        nz = np.flatnonzero(np.abs(hs[a]) > 0)
        if len(nz) != 1 and grid.shape[a] > 1:
            raise InvalidInputError(f"axis {a} of the grid is not along h, k or l (step {hs[a].tolist()} r.l.u.)")
        i = int(nz[0]) if len(nz) else "hkl".index(grid.axis_names[a])
        letters.append("hkl"[i])
        steps.append(float(hs[a, i]) if len(nz) else 0.0)
    if any(s == 0 for s in steps):
        raise InvalidInputError("every axis of the map needs at least two points for a Fourier transform")
    return letters, steps


def _fill_holes(values: np.ndarray, holes: np.ndarray, method: str, shell: int) -> dict:
    """Fill `values` in place where `holes`, hole by hole, from the shell around each."""
    from scipy import ndimage

    nd = values.ndim
    struct = np.ones((3,) * nd, dtype=bool)
    labels, n = ndimage.label(holes, structure=struct)
    good = ~holes
    if not good.any():
        raise InvalidInputError("the map has no measured point left after punching the Bragg reflections")
    global_median = float(np.median(values[good]) if method == "median" else values[good].mean())
    fallback = 0
    for lab, sl in enumerate(ndimage.find_objects(labels), start=1):
        if sl is None:
            continue
        big = tuple(slice(max(0, s.start - shell), min(dim, s.stop + shell)) for s, dim in zip(sl, values.shape))
        local = labels[big] == lab
        ring = ndimage.binary_dilation(local, structure=struct, iterations=shell) & good[big]
        vals = values[big][ring]
        block = values[big]
        if vals.size == 0:
            block[local] = global_median
            fallback += 1
            continue
        if method == "linear" and vals.size > nd + 1:
            coords = np.argwhere(ring).astype(np.float64)
            a = np.column_stack([np.ones(len(coords)), coords])
            coef, *_ = np.linalg.lstsq(a, vals, rcond=None)
            inside = np.argwhere(local).astype(np.float64)
            block[local] = coef[0] + inside @ coef[1:]
        elif method == "median":
            block[local] = np.median(vals)
        else:
            block[local] = vals.mean()
    return {"holes": int(n), "holes_filled_from_the_whole_map": fallback}


def _largest_sphere(grid: RegularGrid) -> float | None:
    """Radius (Å⁻¹) of the largest sphere about q = 0 inside a regular grid, or None when
    q = 0 lies outside it."""
    nd = len(grid.shape)
    edges = np.asarray(grid.steps, dtype=np.float64).reshape(nd, 3) * (np.array(grid.shape)[:, None] - 1)
    rows = np.linalg.pinv(edges.T)  # t = rows @ (q − origin), t ∈ [0, 1]^nd inside
    t = rows @ (-grid.origin)
    if ((t < -1e-12) | (t > 1 + 1e-12)).any():
        return None
    norms = np.linalg.norm(rows, axis=1)
    return float(min(np.minimum(t, 1 - t) / norms))


def delta_pdf(pattern: Pattern, bragg, *, fill: str = "mean", shell: int = 2, apodize: bool = True,
              q_max: float | None = None, taper: float = 0.5, symmetry=None) -> DeltaPDF:
    """The 3D-ΔPDF of a map on an hkl grid (see the module notes).

    Parameters
    ----------
    pattern : Pattern
        Intensities on a ``QGrid.hkl`` grid (1 to 3 ranged axes); NaN = not measured.
    bragg : BraggExclusion or dict
        The allowed reflections to punch out and the radius (≥ one grid step).
    fill : {"mean", "median", "linear"}
        How holes are filled from the shell around them (see the module notes).
    shell : int
        Thickness of that shell in grid steps (≥ 1).
    apodize : bool
        Apply the window toward `q_max` (False: transform the filled map as it is).
    q_max : float, optional
        Å⁻¹; default the radius of the largest sphere about q = 0 inside the grid.
    taper : float
        Fraction of q_max over which the window falls from 1 to 0 (0: a sharp cut).
    symmetry : str or dict, optional
        Point group to average over first (``kinemap.symmetrize``).

    Returns
    -------
    DeltaPDF

    Raises
    ------
    InvalidInputError
        Not an hkl grid, a radius below one grid step, no point left, q = 0 outside the grid
        without `q_max`, bad options.

    Examples
    --------
    >>> import numpy as np, kinemap as km
    >>> from kinemap.compare import delta_pdf, BraggExclusion
    >>> grid = km.QGrid.hkl(np.eye(3) * 3.0, h=(-0.5, 0.4375, 16), k=(-0.5, 0.4375, 16), l=(-0.5, 0.4375, 16))
    >>> flat = km.Pattern(grid, intensity=np.ones(grid.shape))
    >>> d = delta_pdf(flat, BraggExclusion(0.07, "r.l.u.", centring="P"), apodize=False)
    >>> round(d.value_at([0, 0, 0]), 9), abs(d.value_at([1, 0, 0])) < 1e-9
    (1.0, True)
    """
    if not isinstance(pattern, Pattern):
        raise InvalidInputError(f"`pattern` must be a kinemap.Pattern, got {type(pattern).__name__}")
    if fill not in FILLS:
        raise InvalidInputError(f"`fill` must be one of {', '.join(map(repr, FILLS))}, got {fill!r}")
    shell = whole_number(shell, "shell", minimum=1)
    taper = real_number(taper, "taper", minimum=0.0, maximum=1.0)
    ex = BraggExclusion.coerce(bragg)
    if ex is None:
        raise InvalidInputError("`bragg` must say which reflections to punch out (a BraggExclusion)")
    grid = pattern.grid
    letters, steps = _hkl_axes(grid)
    assert isinstance(grid, RegularGrid) and grid.hkl_origin is not None  # checked by _hkl_axes
    if ex.units == "r.l.u.":
        need = max(abs(s) for s in steps)
    else:
        need = float(np.linalg.norm(np.asarray(grid.steps).reshape(len(grid.shape), 3), axis=1).max())
    if ex.radius < need * (1 - 1e-9):
        raise InvalidInputError(f"the punch radius {ex.radius:g} {ex.units} is below one grid step ({need:.4g}); make "
                                "it at least one step, and at least the peak or resolution width")
    check_fits(grid.size * (16 + 8 * 4), f"a 3D-ΔPDF of {grid.size:,} points")
    if symmetry is not None:
        from .measured import _symmetrize, _symmetry_spec

        pattern = _symmetrize(pattern, _symmetry_spec(symmetry))
    values = np.array(pattern.intensity, dtype=np.float64)
    unmeasured = ~np.isfinite(values)
    punched = bragg_mask(grid, ex)
    holes = unmeasured | punched
    info = _fill_holes(values, holes, fill, shell)
    qmax_used = None
    if apodize:
        if q_max is None:
            q_max = _largest_sphere(grid)
            if q_max is None:
                raise InvalidInputError("q = 0 lies outside the grid, so there is no default q_max; give `q_max`")
        qmax_used = real_number(q_max, "q_max", minimum=0.0, exclusive_minimum=True)
        q = np.linalg.norm(grid.q_vectors(), axis=1).reshape(grid.shape)
        q1 = (1.0 - taper) * qmax_used
        win = np.ones_like(q)
        if taper > 0:
            mid = (q > q1) & (q <= qmax_used)
            win[mid] = 0.5 * (1.0 + np.cos(math.pi * (q[mid] - q1) / (qmax_used - q1)))
        win[q > qmax_used] = 0.0
        values *= win
    # ascending axes, then P(u) = Π|Δh| Σ I(h) exp(−2πi h·u)
    h0 = [float(grid.hkl_origin["hkl".index(c)]) for c in letters]
    for a, s in enumerate(steps):
        if s < 0:
            values = np.flip(values, axis=a)
            h0[a] = h0[a] + s * (grid.shape[a] - 1)
            steps[a] = -s
    spec = np.fft.fftn(values)
    axes = []
    for a, (n, s) in enumerate(zip(grid.shape, steps)):
        u = np.fft.fftfreq(n, d=s)
        phase = np.exp(-2j * np.pi * h0[a] * u)
        shape = [1] * len(grid.shape)
        shape[a] = n
        spec *= phase.reshape(shape)
        axes.append(np.fft.fftshift(u))
    spec = np.fft.fftshift(spec) * float(np.prod(steps))
    re = spec.real
    imag_fraction = float(np.abs(spec.imag).max() / max(np.abs(re).max(), 1e-300))
    meta = {"content": "3D-difference pair distribution function (Weber & Simonov 2012)",
            "bragg": ex.describe(), "fill": fill, "shell": shell, "apodize": bool(apodize),
            "q_max": qmax_used if qmax_used is not None else float("nan"), "taper": taper,
            "punched_points": int(punched.sum()), "unmeasured_points": int(unmeasured.sum()),
            "imaginary_fraction": imag_fraction, "definition": "P(u) = prod|dh| sum_h I(h) exp(-2 pi i h.u)",
            "projection": "along " + ", ".join(_UVW[c] for c in "hkl" if c not in letters) if len(letters) < 3 else "",
            **info}
    return DeltaPDF(np.ascontiguousarray(re), axes, [_UVW[c] for c in letters], np.asarray(grid.cell).copy(), meta)


__all__ = ["delta_pdf", "DeltaPDF", "FILLS"]
