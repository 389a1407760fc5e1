"""Peak finding on computed or measured maps.

:func:`find_peaks` locates the local maxima of a 1-, 2- or 3-D intensity map (a
:class:`kinemap.Pattern` or an array with its grid or q-vectors) and refines their positions
and heights to sub-pixel precision; :func:`kinemap.quasi.index_peaks` then gives them
integer higher-dimensional indices.
"""

from __future__ import annotations

from dataclasses import dataclass
from itertools import product

import numpy as np
from scipy import ndimage

from .._shared.validate import flag, real_array, real_number, whole_number
from ..errors import InvalidInputError
from ..pattern import Pattern
from ..qgrid import QGrid, RegularGrid


@dataclass
class Peaks:
    """Peaks found on a map.

    Attributes
    ----------
    q : ndarray (M, 3)
        Sub-pixel peak positions in Å⁻¹.
    intensity : ndarray (M,)
        Interpolated peak heights (map units).
    pixel : ndarray (M, ndim)
        Fractional pixel coordinates.
    """

    q: np.ndarray
    intensity: np.ndarray
    pixel: np.ndarray

    def __len__(self) -> int:
        return len(self.q)


def local_maxima(a: np.ndarray, r: int) -> np.ndarray:
    """Mask of the local maxima of `a` in a (2r+1)^ndim neighbourhood.

    A point is kept when no neighbour is larger and no neighbour that comes earlier in C
    order is equal: of a plateau, only its first point counts. Outside the map counts as
    −∞. Both maxima come from :func:`scipy.ndimage.maximum_filter`.
    """
    size = (2 * r + 1,) * a.ndim
    around = ndimage.maximum_filter(a, size=size, mode="constant", cval=-np.inf)
    earlier = np.zeros(size, dtype=bool)
    earlier.reshape(-1)[: earlier.size // 2] = True  # offsets before the centre in C order
    before = ndimage.maximum_filter(a, footprint=earlier, mode="constant", cval=-np.inf)
    return (a >= around) & (a > before)


def _q_at(regular: tuple[np.ndarray, np.ndarray] | None, qarr: np.ndarray | None, shape,
          pix: np.ndarray) -> np.ndarray:
    """q at fractional pixel coordinates: regular grids (origin, steps) exactly, q-arrays by
    multilinear interpolation."""
    if regular is not None:
        return regular[0] + pix @ regular[1]
    assert qarr is not None
    base = np.floor(pix).astype(np.int64)
    frac = pix - base
    out = np.zeros((len(pix), 3))
    # multilinear interpolation over the 2^nd corners
    nd = pix.shape[1]
    for corner in product((0, 1), repeat=nd):
        idx = base + np.array(corner)
        idx = np.clip(idx, 0, np.array(shape) - 1)
        w = np.prod(np.where(np.array(corner)[None, :] == 1, frac, 1 - frac), axis=1)
        out += w[:, None] * qarr[tuple(idx.T)]
    return out


def _refine(inten: np.ndarray, idx: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Sub-pixel positions and heights: a parabola through the logarithm of the three values
    along each axis (exact for a Gaussian), through the values when some are not positive."""
    pix = idx.astype(np.float64)
    height = inten[tuple(idx.T)].copy()
    corr = np.zeros(len(idx))
    for ax in range(inten.ndim):
        ok = (idx[:, ax] > 0) & (idx[:, ax] < inten.shape[ax] - 1)
        if not ok.any():
            continue
        im = idx[ok].copy()
        ip = idx[ok].copy()
        im[:, ax] -= 1
        ip[:, ax] += 1
        fm = inten[tuple(im.T)]
        f0 = height[ok]
        fp = inten[tuple(ip.T)]
        pos = (fm > 0) & (f0 > 0) & (fp > 0)
        gm = np.where(pos, np.log(np.where(pos, fm, 1)), fm)
        g0 = np.where(pos, np.log(np.where(pos, f0, 1)), f0)
        gp = np.where(pos, np.log(np.where(pos, fp, 1)), fp)
        den = gm - 2 * g0 + gp
        delta = np.where(den < 0, 0.5 * (gm - gp) / np.where(den < 0, den, -1), 0.0)
        delta = np.clip(delta, -0.5, 0.5)
        pix[ok, ax] += delta
        dv = -0.25 * (gm - gp) * delta
        # accumulate the height correction in log space for positive peaks
        corr[ok] += np.where(pos, dv, 0.0)
        height[ok] = np.where(pos, height[ok], height[ok] + dv)
    return pix, height * np.exp(corr)


def find_peaks(data, grid: QGrid | None = None, q=None, *, threshold: float = 1e-3, neighbourhood: int = 1,
               max_peaks: int | None = None, min_q: float = 0.0, exclude_border: bool = True) -> Peaks:
    """Local maxima of an intensity map, with sub-pixel positions.

    Parameters
    ----------
    data : kinemap.Pattern or array_like
        A pattern (its ``intensity`` and ``grid`` are used) or an intensity array of 1–3
        dimensions.
    grid : kinemap.QGrid, optional
        The grid of `data` when it is an array (regular grids: line/plane/volume/hkl, or a
        points grid of the same shape).
    q : array_like, shape data.shape + (3,), optional
        q-vectors (Å⁻¹) of every pixel instead of a grid.
    threshold : float
        Keep maxima with intensity ≥ threshold × the largest value of the map (outside
        |q| < `min_q`).
    neighbourhood : int
        A maximum must beat all pixels within this many steps along every axis.
    max_peaks : int, optional
        Keep only the strongest ones.
    min_q : float
        Ignore peaks with |q| below this (Å⁻¹), e.g. to drop the forward beam.
    exclude_border : bool
        Drop maxima on the edge of the map (a peak just outside the map looks like one).

    Returns
    -------
    Peaks
        Sorted by decreasing intensity; empty when the map has no positive value.

    Raises
    ------
    InvalidInputError
        For maps of other dimensions, non-finite values, a grid or q-array of another shape,
        or bad options.

    Notes
    -----
    The maxima are found with :func:`scipy.ndimage.maximum_filter` (of a plateau only its
    first point in C order counts). Sub-pixel refinement fits a parabola through the
    logarithm of the three values along each axis (exact for Gaussian peaks), or through the
    values themselves when some are not positive.

    Examples
    --------
    >>> import numpy as np, kinemap as km
    >>> from kinemap import quasi
    >>> grid = km.QGrid.line([-1, 0, 0], [1, 0, 0], 201)
    >>> x = grid.q_vectors()[:, 0]
    >>> peaks = quasi.find_peaks(np.exp(-(x - 0.123) ** 2 / 0.01), grid=grid)
    >>> round(float(peaks.q[0, 0]), 6)
    0.123
    """
    if isinstance(data, Pattern):
        inten = np.asarray(data.intensity, dtype=np.float64)
        grid = data.grid if grid is None else grid
    else:
        inten = real_array(data, "data", finite=False)
    if inten.ndim < 1 or inten.ndim > 3:
        raise InvalidInputError(f"the map must have 1 to 3 dimensions, got shape {inten.shape}")
    if not np.isfinite(inten).all():
        raise InvalidInputError("the map has non-finite values (mask them with 0 or a small number)")
    threshold = real_number(threshold, "threshold", minimum=0.0)
    neighbourhood = whole_number(neighbourhood, "neighbourhood", minimum=1)
    max_peaks = None if max_peaks is None else whole_number(max_peaks, "max_peaks", minimum=1)
    min_q = real_number(min_q, "min_q", minimum=0.0)
    exclude_border = flag(exclude_border, "exclude_border")
    regular = None  # (origin, steps) of a regular grid: exact sub-pixel q
    qarr: np.ndarray | None = None  # q of every pixel, made only when needed for regular grids
    if q is not None:
        qarr = real_array(q, "q", shape=inten.shape + (3,))
    elif grid is not None:
        if not isinstance(grid, QGrid):
            raise InvalidInputError(f"`grid` must be a kinemap.QGrid, got {type(grid).__name__}")
        if tuple(grid.shape) != inten.shape:
            raise InvalidInputError(f"grid shape {tuple(grid.shape)} != map shape {inten.shape}")
        if isinstance(grid, RegularGrid):
            if grid.steps is None or grid.steps.shape[0] != inten.ndim:
                raise InvalidInputError("the grid's number of axes does not match the map")
            regular = (np.asarray(grid.origin, dtype=np.float64), grid.steps)
            if min_q > 0:
                qarr = grid.q_vectors().reshape(inten.shape + (3,))
        else:
            qarr = grid.q_vectors().reshape(inten.shape + (3,))
    else:
        raise InvalidInputError("give a Pattern, or the map with `grid` or `q`")
    region = inten
    if qarr is not None and min_q > 0:
        # the threshold is relative to the strongest value outside |q| < min_q (the forward
        # beam would otherwise set it)
        far = np.linalg.norm(qarr, axis=-1) >= min_q
        region = np.where(far, inten, -np.inf)
    top = float(region.max()) if inten.size else 0.0
    if not np.isfinite(top) or top <= 0:
        return Peaks(np.zeros((0, 3)), np.zeros(0), np.zeros((0, inten.ndim)))
    mask = local_maxima(inten, neighbourhood) & (inten >= threshold * top)
    if exclude_border:
        for ax, n_ax in enumerate(inten.shape):
            if n_ax > 2:
                edge: list = [slice(None)] * inten.ndim
                edge[ax] = 0
                mask[tuple(edge)] = False
                edge[ax] = n_ax - 1
                mask[tuple(edge)] = False
    pix, height = _refine(inten, np.argwhere(mask))
    qv = _q_at(regular, qarr, inten.shape, pix)
    keep = np.linalg.norm(qv, axis=1) >= min_q
    qv, height, pix = qv[keep], height[keep], pix[keep]
    order = np.argsort(-height, kind="stable")
    if max_peaks is not None:
        order = order[:max_peaks]
    return Peaks(qv[order], height[order], pix[order])


__all__ = ["Peaks", "find_peaks", "local_maxima"]
