"""Peak finding on computed or measured maps and higher-dimensional indexing.

:func:`find_peaks` locates local maxima of a 1-, 2- or 3-D intensity map with sub-pixel
positions. :func:`index_peaks` assigns every peak the integer indices h of a Fourier-module
vector of a :class:`~kinemap.quasi.scheme.CutProjectScheme`: the module is dense, so the
search is limited to |k⊥| ≤ kperp_max and a tolerance around the observed position; among
the candidates the one whose predicted intensity |T_W(k⊥)|² (the window transform)
best matches is chosen. An isotropic scale (a wrong edge length or wavelength) is fitted
first from the strongest peaks and refined on all of them. The result gives, for every
peak, the indices, parallel and perpendicular components, the residual of the fit and the
predicted relative intensity, as a table and a plot, and decides whether the pattern is
consistent with the quasiperiodic scheme at all: a periodic crystal's peaks either fail to
index with small k⊥ or show intensities unrelated to the window transform, and its indices
span a sub-module of too low rank. :func:`inflation_check` compares peaks related by the
inflation symmetry (positions scale by λ^p, intensities by the window-transform ratio).

The map must be given in the scheme's frame (the physical axes of the scheme are the first
d Cartesian axes of q); only an isotropic scale is fitted.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from itertools import product

import numpy as np

from ..errors import InvalidInputError
from .scheme import CutProjectScheme


# ------------------------------------------------------------------------------ peak finding
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


def _local_maxima(a: np.ndarray, r: int) -> np.ndarray:
    """Mask of strict local maxima in a (2r+1)^nd neighbourhood (plateaus: first point)."""
    nd = a.ndim
    pad = np.pad(a, r, mode="constant", constant_values=-np.inf)
    mask = np.ones(a.shape, dtype=bool)
    for off in product(range(-r, r + 1), repeat=nd):
        if not any(off):
            continue
        sl = tuple(slice(r + o, r + o + s) for o, s in zip(off, a.shape))
        nb = pad[sl]
        earlier = off < (0,) * nd  # lexicographic: strictly greater than earlier neighbours
        mask &= (a > nb) if earlier else (a >= nb)
    return mask


def _q_at(grid, qarr, shape, pix: np.ndarray) -> np.ndarray:
    """q at fractional pixel coordinates: regular grids exactly, q-arrays by interpolation."""
    if grid is not None and getattr(grid, "is_regular", False):
        return grid.origin + pix @ grid.steps
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


def find_peaks(data, grid=None, q=None, threshold: float = 1e-3, neighbourhood: int = 1,
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
    Peaks sorted by decreasing intensity.

    Notes
    -----
    Sub-pixel refinement fits a parabola through the logarithm of the three values along
    each axis (exact for Gaussian peaks), or through the values themselves when some are
    not positive.
    """
    if hasattr(data, "intensity") and hasattr(data, "grid"):
        inten = np.asarray(data.intensity, dtype=np.float64)
        grid = data.grid if grid is None else grid
    else:
        inten = np.asarray(data, dtype=np.float64)
    if inten.ndim < 1 or inten.ndim > 3:
        raise InvalidInputError(f"the map must have 1 to 3 dimensions, got shape {inten.shape}")
    if not np.isfinite(inten).all():
        raise InvalidInputError("the map has non-finite values (mask them with 0 or a small number)")
    if isinstance(neighbourhood, bool) or not isinstance(neighbourhood, (int, np.integer)) or neighbourhood < 1:
        raise InvalidInputError(f"`neighbourhood` must be an integer >= 1, got {neighbourhood!r}")
    qarr = None
    if q is not None:
        qarr = np.asarray(q, dtype=np.float64)
        if qarr.shape != inten.shape + (3,):
            raise InvalidInputError(f"`q` must have shape {inten.shape + (3,)}, got {qarr.shape}")
    elif grid is not None:
        if tuple(grid.shape) != inten.shape:
            raise InvalidInputError(f"grid shape {tuple(grid.shape)} != map shape {inten.shape}")
        if not grid.is_regular:
            qarr = grid.q.reshape(inten.shape + (3,))
        elif grid.steps.shape[0] != inten.ndim:
            raise InvalidInputError("the grid's number of axes does not match the map")
    else:
        raise InvalidInputError("give a Pattern, or the map with `grid` or `q`")
    region = inten
    if min_q > 0:
        # the threshold is relative to the strongest value outside |q| < min_q (the forward
        # beam would otherwise set it)
        qall = (qarr.reshape(-1, 3) if qarr is not None else grid.q_vectors())
        far = (np.linalg.norm(qall, axis=1) >= min_q).reshape(inten.shape)
        region = np.where(far, inten, -np.inf)
    top = float(region.max()) if inten.size else 0.0
    if not np.isfinite(top) or top <= 0:
        return Peaks(np.zeros((0, 3)), np.zeros(0), np.zeros((0, inten.ndim)))
    mask = _local_maxima(inten, int(neighbourhood)) & (inten >= threshold * top)
    if exclude_border:
        for ax, n_ax in enumerate(inten.shape):
            if n_ax > 2:
                edge = [slice(None)] * inten.ndim
                edge[ax] = 0
                mask[tuple(edge)] = False
                edge[ax] = n_ax - 1
                mask[tuple(edge)] = False
    idx = np.argwhere(mask)
    nd = inten.ndim
    pix = idx.astype(np.float64)
    height = inten[tuple(idx.T)].copy()
    logh = np.log(np.maximum(height, 1e-300))
    corr = np.zeros(len(idx))
    for ax in range(nd):
        lo_ok = idx[:, ax] > 0
        hi_ok = idx[:, ax] < inten.shape[ax] - 1
        ok = lo_ok & hi_ok
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
    height = height * np.exp(corr)
    qv = _q_at(grid, qarr, inten.shape, pix)
    keep = np.linalg.norm(qv, axis=1) >= min_q
    qv, height, pix = qv[keep], height[keep], pix[keep]
    order = np.argsort(-height, kind="stable")
    if max_peaks is not None:
        order = order[: int(max_peaks)]
    return Peaks(qv[order], height[order], pix[order])


# ------------------------------------------------------------------------------ indexing
@dataclass
class IndexingResult:
    """Indexed peaks and the fit (see :func:`index_peaks`).

    Per-peak arrays (M = number of peaks; unindexed peaks have ``indexed == False`` and
    zero indices):

    Attributes
    ----------
    q_obs : ndarray (M, 3)         observed q (Å⁻¹)
    intensity_obs : ndarray (M,)   observed intensity (NaN when none given)
    indices : ndarray (M, D)       integer indices h
    indexed : ndarray (M,) bool
    q_model : ndarray (M, 3)       scale × 2πk(h) (Å⁻¹)
    k_perp : ndarray (M, e)        perpendicular components of the module vectors
    residual : ndarray (M,)        |q_obs − q_model| (Å⁻¹)
    predicted : ndarray (M,)       predicted relative intensity |T_W(k⊥)|² (1 at q = 0)
    scale : float                  fitted isotropic reciprocal scale (observed/model)
    intensity_scale : float        fitted factor c in I_obs ≈ c·predicted (median of ratios)
    """

    scheme: CutProjectScheme
    q_obs: np.ndarray
    intensity_obs: np.ndarray
    indices: np.ndarray
    indexed: np.ndarray
    q_model: np.ndarray
    k_perp: np.ndarray
    residual: np.ndarray
    predicted: np.ndarray
    scale: float
    intensity_scale: float
    tolerance: np.ndarray
    kperp_max: float
    info: dict = field(default_factory=dict)

    def __len__(self) -> int:
        return len(self.q_obs)

    @property
    def fraction_indexed(self) -> float:
        return float(self.indexed.mean()) if len(self) else 0.0

    @property
    def intensity_fraction(self) -> float:
        """Share of the observed intensity (peaks with q ≠ 0) carried by indexed peaks."""
        ok = np.linalg.norm(self.q_obs, axis=1) > 0
        io = self.intensity_obs[ok]
        if not np.isfinite(io).all() or io.sum() <= 0:
            return float("nan")
        return float(io[self.indexed[ok]].sum() / io.sum())

    @property
    def edge_length(self) -> float:
        """Edge length (Å) implied by the fitted scale: scheme edge / scale."""
        return self.scheme.edge_length / self.scale

    @property
    def agreement(self) -> float:
        """R = Σ|I_obs − c·I_pred| / Σ I_obs over indexed peaks (NaN without intensities)."""
        ok = self.indexed & np.isfinite(self.intensity_obs)
        if not ok.any():
            return float("nan")
        io = self.intensity_obs[ok]
        return float(np.abs(io - self.intensity_scale * self.predicted[ok]).sum() / io.sum())

    @property
    def rank_correlation(self) -> float:
        """Spearman rank correlation of observed and predicted intensities (indexed peaks)."""
        ok = self.indexed & np.isfinite(self.intensity_obs)
        if ok.sum() < 3:
            return float("nan")
        return _spearman(self.intensity_obs[ok], self.predicted[ok])

    @property
    def index_rank(self) -> int:
        """Rank of the Z-module spanned by the indexed peaks' module vectors.

        Computed as the real rank of the lifted vectors (k, k⊥) over the dense internal
        directions, which the module embeds into as a lattice (for Penrose indices h and
        h + (1,1,1,1,1) count once).
        """
        ok = self.indexed & (np.linalg.norm(self.q_obs, axis=1) > 0)
        if not ok.any():
            return 0
        mv = self.scheme.module(self.indices[ok])
        dense = np.array(self.scheme.window.dense, dtype=bool)
        lifted = np.hstack([mv.k_par, mv.k_perp[:, dense]])
        return int(np.linalg.matrix_rank(lifted, tol=1e-8 * max(1.0, np.abs(lifted).max())))

    @property
    def data_dim(self) -> int:
        """Dimension of the space spanned by the indexed peak positions (1 for a line scan,
        2 for a plane section, up to 3)."""
        ok = self.indexed & (np.linalg.norm(self.q_obs, axis=1) > 0)
        if not ok.any():
            return 0
        q = self.q_obs[ok]
        return int(np.linalg.matrix_rank(q, tol=1e-3 * np.abs(q).max()))

    @property
    def is_quasiperiodic(self) -> bool:
        """Whether the pattern is consistent with the scheme (see ``verdict``)."""
        return self.verdict()[0]

    @property
    def chance_matches(self) -> float:
        """Mean expected number of module vectors (|k⊥| ≤ kperp_max) inside a peak's
        tolerance ball by chance; indexing by position alone means little when it nears 1."""
        return float(self.info.get("chance_matches", float("nan")))

    def verdict(self, min_fraction: float = 0.8, min_correlation: float = 0.5,
                max_chance: float = 0.5) -> tuple[bool, str]:
        """Decide whether the peaks are those of a quasiperiodic pattern of this scheme.

        Conditions: at least `min_fraction` of the observed intensity (without intensities:
        of the peaks) indexed within tolerance with |k⊥| ≤ kperp_max and, with intensities,
        matching intensities — weak maxima from noise or finite-size ripples then matter
        little; the indexed module
        vectors span a Z-module of rank larger than the dimension of the data (the
        definition of quasiperiodicity: a periodic crystal's peaks, or any section of them,
        have rank equal to their dimension); with intensities, a rank
        correlation ≥ `min_correlation` between observed and predicted intensities; without
        intensities, fewer than `max_chance` chance matches per peak (λ = 0.5 lets a
        random pattern index about 1 − e^−λ ≈ 40 % of its peaks, well below
        `min_fraction`).

        Returns
        -------
        (bool, str): the decision and the reason.
        """
        with_i = bool(np.isfinite(self.intensity_obs).all()) and np.isfinite(self.intensity_fraction)
        if not with_i and self.chance_matches > max_chance:
            return False, (f"undecided from positions alone: {self.chance_matches:.2g} module vectors fall "
                           f"within the tolerance of a peak by chance (give intensities or lower kperp_max)")
        if with_i:
            frac = self.intensity_fraction
            if frac < min_fraction:
                return False, (f"indexed peaks carry only {frac:.0%} of the intensity "
                               f"(|k⊥| ≤ {self.kperp_max:.3g}, intensities within the allowed factor)")
        else:
            frac = self.fraction_indexed
            if frac < min_fraction:
                return False, f"only {frac:.0%} of the peaks index with |k⊥| ≤ {self.kperp_max:.3g}"
        rank, dim = self.index_rank, self.data_dim
        if rank <= dim:
            return False, (f"the indexed peaks span a module of rank {rank}, no more than the data's "
                           f"dimension ({dim}): a periodic pattern")
        rho = self.rank_correlation
        if np.isfinite(rho) and rho < min_correlation:
            return False, (f"intensities do not follow the window transform (rank correlation "
                           f"{rho:.2f} < {min_correlation})")
        extra = "" if not np.isfinite(rho) else f", intensity rank correlation {rho:.2f}"
        what = "of the intensity indexed" if with_i else "of the peaks indexed"
        return True, f"{frac:.0%} {what} ({self.fraction_indexed:.0%} of the peaks), index rank {rank}{extra}"

    def rows(self) -> list[dict]:
        """One dict per peak (indices, q_obs, |q|, q_perp, residual, intensities)."""
        out = []
        for i in range(len(self)):
            out.append({
                "indices": tuple(int(v) for v in self.indices[i]) if self.indexed[i] else None,
                "q_obs": self.q_obs[i].tolist(),
                "q_abs": float(np.linalg.norm(self.q_obs[i])),
                "k_perp": self.k_perp[i].tolist() if self.indexed[i] else None,
                "k_perp_abs": float(np.linalg.norm(self.k_perp[i])) if self.indexed[i] else float("nan"),
                "residual": float(self.residual[i]),
                "intensity_obs": float(self.intensity_obs[i]),
                "predicted": float(self.predicted[i]),
            })
        return out

    def table(self, max_rows: int | None = None) -> str:
        """A fixed-width text table of the indexed peaks."""
        d = self.scheme.lattice_dim
        top = np.nanmax(self.intensity_obs) if np.isfinite(self.intensity_obs).any() else 1.0
        head = (f"{'indices':>{4 * d + 2}}  {'|q| obs':>9}  {'|q| model':>9}  {'|k_perp|':>8}  "
                f"{'residual':>9}  {'I obs/max':>9}  {'I pred':>9}")
        lines = [f"# {self.scheme.name}: scale {self.scale:.6f} (edge {self.edge_length:.5f} Å), "
                 f"{self.fraction_indexed:.0%} indexed; q in 1/Å, k_perp in cycles per internal Å", head]
        n = len(self) if max_rows is None else min(len(self), max_rows)
        for i in range(n):
            if self.indexed[i]:
                idx = "(" + " ".join(f"{int(v):3d}" for v in self.indices[i]) + ")"
                kp = f"{np.linalg.norm(self.k_perp[i]):8.4f}"
                qm = f"{np.linalg.norm(self.q_model[i]):9.5f}"
                res = f"{self.residual[i]:9.2e}"
                pr = f"{self.predicted[i]:9.3e}"
            else:
                idx, kp, qm, res, pr = "unindexed", "-", "-", "-", "-"
            io = self.intensity_obs[i] / top if np.isfinite(self.intensity_obs[i]) else float("nan")
            lines.append(f"{idx:>{4 * d + 2}}  {np.linalg.norm(self.q_obs[i]):9.5f}  {qm:>9}  {kp:>8}  "
                         f"{res:>9}  {io:9.3e}  {pr:>9}")
        ok, why = self.verdict()
        lines.append(f"# verdict: {'quasiperiodic' if ok else 'NOT consistent with this quasiperiodic scheme'} ({why})")
        return "\n".join(lines)

    def plot(self, path, pattern=None, annotate: int = 30, log: bool = True):
        """Write a PNG: the peaks (and the map, if given) with indices annotated.

        Parameters
        ----------
        path : str or Path
            Output PNG file.
        pattern : kinemap.Pattern, optional
            A 1-D or 2-D map to draw underneath (plane or line grids).
        annotate : int
            Label the strongest this many indexed peaks.
        log : bool
            Logarithmic intensity scale.
        """
        return plot_indexed(self, path, pattern=pattern, annotate=annotate, log=log)


def _ranks(x: np.ndarray) -> np.ndarray:
    order = np.argsort(x, kind="stable")
    r = np.empty(len(x))
    r[order] = np.arange(len(x))
    # average ties
    xs = x[order]
    i = 0
    while i < len(xs):
        j = i
        while j + 1 < len(xs) and xs[j + 1] == xs[i]:
            j += 1
        if j > i:
            r[order[i:j + 1]] = 0.5 * (i + j)
        i = j + 1
    return r


def _spearman(a, b) -> float:
    ra, rb = _ranks(np.asarray(a, float)), _ranks(np.asarray(b, float))
    ra -= ra.mean()
    rb -= rb.mean()
    den = np.sqrt((ra * ra).sum() * (rb * rb).sum())
    return float((ra * rb).sum() / den) if den > 0 else 0.0


def kperp_bound(scheme: CutProjectScheme, min_predicted: float) -> float:
    """|k⊥| beyond which the window transform stays below `min_predicted` in intensity.

    From the divergence theorem, |T_W(k⊥)| ≤ S / (2π |k⊥| V) with S the boundary measure
    and V the volume of the window, so |T|² < p for |k⊥| > S / (2π V √p).
    """
    w = scheme.window
    return float(w.boundary_measure / (2 * np.pi * w.measure * np.sqrt(min_predicted)))


def index_peaks(scheme: CutProjectScheme, peaks, intensity=None, *, scale: float = 1.0, fit_scale: bool = True,
                tolerance: float = 0.01, abs_tolerance: float | None = None, search_tolerance: float = 0.04,
                intensity_factor: float = 10.0, kperp_max: float | None = None, min_predicted: float = 1e-2,
                n_seed: int = 12, max_iter: int = 10) -> IndexingResult:
    """Index peaks with integer higher-dimensional indices.

    Parameters
    ----------
    scheme : CutProjectScheme
        The model (Fourier module and window transform).
    peaks : Peaks or array_like (M, 3)
        Peak positions q in Å⁻¹ (in the scheme's frame).
    intensity : array_like (M,), optional
        Peak intensities (taken from `peaks` when it is a :class:`Peaks`). With
        intensities, a candidate must also match in intensity (see `intensity_factor`).
    scale : float
        Starting guess of the observed/model reciprocal scale (model edge / true edge).
    fit_scale : bool
        Refine the scale by least squares.
    tolerance : float
        Accept a module vector within ``tolerance·|q| + abs_tolerance`` of a peak.
    abs_tolerance : float, optional
        Absolute part of the tolerance in Å⁻¹ (default 0.2 × tolerance × the median |q|).
    search_tolerance : float
        Relative tolerance of the first pass on the strongest peaks; it must cover the
        error of the scale guess.
    intensity_factor : float
        Largest accepted ratio (either way) between the observed intensity and the fitted
        prediction c·|T_W(k⊥)|². Decoration, Debye–Waller factors and noise make real
        intensities differ from the bare window transform; 10 is permissive.
    kperp_max : float, optional
        Largest |k⊥| searched. Default: where the window transform's bound falls below the
        weakest observed relative intensity divided by `intensity_factor` (or below
        `min_predicted` without intensities); see :func:`kperp_bound`.
    min_predicted : float
        Weakest predicted intensity |T_W|² considered when no intensities are given
        (positions alone: a small value lets chance matches in, see
        :attr:`IndexingResult.chance_matches`).
    n_seed : int
        Number of strongest peaks used to fit the scale first.
    max_iter : int
        Iterations of (assign, refit) until the assignment is stable.

    Returns
    -------
    IndexingResult

    Notes
    -----
    Pass 1: the `n_seed` strongest peaks are given, within `search_tolerance`, the module
    vector of largest predicted intensity; the scale is their least-squares ratio and the
    intensity scale c the median of I_obs/|T|². Pass 2 (iterated): every peak gets, among
    the module vectors within `tolerance` whose intensities agree within `intensity_factor`,
    the one minimising (residual/tolerance)² + (ln(I_obs/(c|T|²)) / ln factor)²; then scale
    and c are refitted. Without intensities the largest predicted intensity wins.
    """
    if isinstance(peaks, Peaks):
        q = peaks.q
        if intensity is None:
            intensity = peaks.intensity
    else:
        q = np.asarray(peaks, dtype=np.float64)
    if q.ndim != 2 or q.shape[1] != 3 or not np.isfinite(q).all():
        raise InvalidInputError(f"peak positions must be a finite (M, 3) array of q (1/Å), got shape {q.shape}")
    m = len(q)
    if intensity is None:
        inten = np.full(m, np.nan)
    else:
        inten = np.asarray(intensity, dtype=np.float64).reshape(-1)
        if inten.shape != (m,):
            raise InvalidInputError(f"`intensity` must have {m} values, got {inten.shape}")
        if (inten < 0).any() or not np.isfinite(inten).all():
            raise InvalidInputError("`intensity` must be finite and >= 0")
    for name, val in (("scale", scale), ("tolerance", tolerance), ("search_tolerance", search_tolerance),
                      ("min_predicted", min_predicted)):
        if not (isinstance(val, (int, float, np.floating)) and np.isfinite(val) and val > 0):
            raise InvalidInputError(f"`{name}` must be a number > 0, got {val!r}")
    if not (np.isfinite(intensity_factor) and intensity_factor > 1):
        raise InvalidInputError(f"`intensity_factor` must be > 1, got {intensity_factor!r}")
    d = scheme.dim
    k_obs = q / (2 * np.pi)
    k_out = np.linalg.norm(k_obs[:, d:], axis=1)  # components outside the physical space
    k_in = k_obs[:, :d]
    kabs = np.linalg.norm(k_in, axis=1)
    nonzero_mask = kabs > 1e-12
    med = float(np.median(kabs[nonzero_mask])) if nonzero_mask.any() else 1.0
    abs_tol_k = (0.2 * tolerance * med) if abs_tolerance is None else float(abs_tolerance) / (2 * np.pi)
    have_i = bool(np.isfinite(inten).all() and m > 0 and inten[nonzero_mask].max(initial=0) > 0)
    if kperp_max is not None:
        kpm = float(kperp_max)
        if not (np.isfinite(kpm) and kpm > 0):
            raise InvalidInputError(f"`kperp_max` must be > 0, got {kperp_max!r}")
    elif have_i:
        pos = inten[nonzero_mask]
        dyn = max(float(pos[pos > 0].min() / pos.max()) if (pos > 0).any() else min_predicted, 1e-8)
        # bounded below: beyond |T|² ~ 1e-3 the search grows like kperp_max^e while only
        # the weakest peaks could still be explained (they count little in the verdict)
        kpm = kperp_bound(scheme, min(max(dyn / intensity_factor, 1e-3), 0.5))
    else:
        kpm = kperp_bound(scheme, min_predicted)
    log_f = float(np.log(intensity_factor))
    cache: dict = {}

    def candidates(i: int, sc: float, rel: float):
        key = (i, sc, rel)
        if key not in cache:
            tol_i = rel * kabs[i] + abs_tol_k
            if k_out[i] > tol_i:
                cache[key] = None
            else:
                mv = scheme.search_module(k_in[i] / sc, tol_i / sc, kpm)
                if len(mv) == 0:
                    cache[key] = None
                else:
                    pred = np.abs(scheme.window.transform(mv.k_perp)) ** 2
                    res = np.linalg.norm(sc * mv.k_par - k_in[i], axis=1)
                    cache[key] = (mv, pred, res, tol_i)
        return cache[key]

    def choose(i, sc, rel, c_int):
        cand = candidates(i, sc, rel)
        if cand is None:
            return None
        mv, pred, res, tol_i = cand
        if have_i and c_int is not None:
            ratio = np.log(np.maximum(inten[i], 1e-300) / np.maximum(c_int * pred, 1e-300))
            ok = np.abs(ratio) <= log_f
            if not ok.any():
                return None
            cost = np.where(ok, (res / tol_i) ** 2 + (ratio / log_f) ** 2, np.inf)
            j = int(np.argmin(cost))
        else:
            j = int(np.lexsort((res, -pred))[0])
        return mv.indices[j], mv.k_par[j], mv.k_perp[j], pred[j], res[j]

    order = np.argsort(-inten) if have_i else np.argsort(kabs)
    nonzero = [int(i) for i in order if kabs[i] > 1e-12]
    sc = float(scale)
    c_int = None
    seeds = nonzero[: max(2, int(n_seed))]
    # pass 1: the strongest peaks with a loose tolerance fix the scale (and c)
    for _ in range(4):
        picks = [(i, choose(i, sc, search_tolerance, None)) for i in seeds]
        picks = [(i, p) for i, p in picks if p is not None]
        if not picks:
            break
        if have_i:
            lr = [np.log(inten[i] / p[3]) for i, p in picks if inten[i] > 0 and p[3] > 0]
            c_int = float(np.exp(np.median(lr))) if lr else None
        if not fit_scale:
            break
        num = sum(float(k_in[i] @ p[1]) for i, p in picks)
        den = sum(float(p[1] @ p[1]) for _, p in picks)
        new = num / den if den > 0 else sc
        done = abs(new - sc) < 1e-12 * sc
        sc = new
        if done:
            break
    # pass 2: all peaks, final tolerance; iterate assignment and refits
    big_d = scheme.lattice_dim
    e = scheme.internal_dim
    prev = None
    for _ in range(max_iter):
        idx = np.zeros((m, big_d), dtype=np.int64)
        ok = np.zeros(m, dtype=bool)
        kpar = np.zeros((m, d))
        kperp = np.zeros((m, e))
        pred = np.zeros(m)
        for i in range(m):
            if kabs[i] <= 1e-12:
                ok[i] = True
                pred[i] = 1.0
                continue
            p = choose(i, sc, tolerance, c_int)
            if p is None:
                continue
            idx[i], kpar[i], kperp[i], pred[i], _ = p
            ok[i] = True
        use = ok & nonzero_mask
        if fit_scale and use.any():
            den = float((kpar[use] * kpar[use]).sum())
            if den > 0:
                sc = float((k_in[use] * kpar[use]).sum()) / den
        if have_i and use.any():
            lr = np.log(np.maximum(inten[use], 1e-300) / np.maximum(pred[use], 1e-300))
            c_int = float(np.exp(np.median(lr)))
        state = (idx.tobytes(), ok.tobytes())
        if state == prev:
            break
        prev = state
    q_model = np.zeros((m, 3))
    q_model[:, :d] = 2 * np.pi * sc * kpar
    residual = np.linalg.norm(q - q_model, axis=1)
    residual[~ok] = np.nan
    tol_q = 2 * np.pi * (tolerance * kabs + abs_tol_k)
    # expected number of module vectors inside a peak's tolerance ball by chance: the dual
    # lattice has |det M| points per unit (k, k⊥) volume (discrete level directions: one
    # representative per unit length)
    dense = np.array(scheme.window.dense, dtype=bool)
    n_dense = int(dense.sum())
    tol_k = (tolerance * kabs + abs_tol_k) / sc
    chance = (abs(np.linalg.det(scheme.embedding)) * _ball_volume(kpm, n_dense)
              * _ball_volume(tol_k, d))
    return IndexingResult(scheme=scheme, q_obs=q, intensity_obs=inten, indices=idx, indexed=ok, q_model=q_model,
                          k_perp=kperp, residual=residual, predicted=pred, scale=sc,
                          intensity_scale=float(c_int) if c_int is not None else float("nan"),
                          tolerance=tol_q, kperp_max=kpm,
                          info={"chance_matches": float(np.mean(chance[nonzero_mask])) if nonzero_mask.any() else 0.0})


def _ball_volume(r, dim: int):
    return np.pi ** (dim / 2) / math.gamma(dim / 2 + 1) * np.asarray(r, dtype=np.float64) ** dim


# ------------------------------------------------------------------------------ inflation
@dataclass
class InflationCheck:
    """Pairs of observed peaks related by the inflation symmetry h ↦ S h.

    Attributes
    ----------
    factor : float            λ^p
    power : int               p
    pairs : list of tuple     (i, j) row numbers of the peaks h and S h
    position_ratio : ndarray  |q_j| / |q_i| (should equal λ^p)
    intensity_ratio : ndarray I_j / I_i observed
    predicted_ratio : ndarray |T(k⊥_j)|² / |T(k⊥_i)|²
    """

    factor: float
    power: int
    pairs: list
    position_ratio: np.ndarray
    intensity_ratio: np.ndarray
    predicted_ratio: np.ndarray

    def table(self) -> str:
        lines = [f"# inflation λ^{self.power} = {self.factor:.6f}",
                 f"{'pair':>12}  {'|q| ratio':>10}  {'I ratio obs':>12}  {'I ratio pred':>12}"]
        for (i, j), pr, io, ip in zip(self.pairs, self.position_ratio, self.intensity_ratio, self.predicted_ratio):
            lines.append(f"{i:>5} ->{j:>4}  {pr:10.6f}  {io:12.4e}  {ip:12.4e}")
        return "\n".join(lines)


def inflation_check(result: IndexingResult, power: int | None = None) -> InflationCheck:
    """Find indexed peaks related by the inflation symmetry and compare with theory.

    Parameters
    ----------
    result : IndexingResult
    power : int, optional
        Power p of the inflation factor (default: the smallest with an integer matrix,
        e.g. τ³ for the primitive icosahedral module).

    Returns
    -------
    InflationCheck
    """
    sch = result.scheme
    if power is None:
        p, lam, s_mat, _ = sch.inflation()
    else:
        r = sch.inflation_matrix(int(power))
        if r is None:
            raise InvalidInputError(f"the module of {sch.name!r} is not invariant under λ^{power}")
        p, lam, s_mat = int(power), float(sch.inflation_factor) ** int(power), r[0]
    ok = np.flatnonzero(result.indexed & (np.linalg.norm(result.q_obs, axis=1) > 0))
    if len(ok) == 0:
        return InflationCheck(lam, p, [], np.zeros(0), np.zeros(0), np.zeros(0))
    kpar = sch.module(result.indices[ok]).k_par
    pairs, pr, ir, pp = [], [], [], []
    for a, i in enumerate(ok):
        target = sch.module((s_mat @ result.indices[i])[None, :]).k_par[0]
        dist = np.linalg.norm(kpar - target, axis=1)
        b = int(np.argmin(dist))
        if dist[b] < 1e-9 * max(1.0, np.linalg.norm(target)):
            j = ok[b]
            pairs.append((int(i), int(j)))
            pr.append(np.linalg.norm(result.q_obs[j]) / np.linalg.norm(result.q_obs[i]))
            ir.append(result.intensity_obs[j] / result.intensity_obs[i] if result.intensity_obs[i] > 0 else np.nan)
            pp.append(result.predicted[j] / result.predicted[i] if result.predicted[i] > 0 else np.nan)
    return InflationCheck(lam, p, pairs, np.array(pr), np.array(ir), np.array(pp))


# ------------------------------------------------------------------------------ plotting
def plot_indexed(result: IndexingResult, path, pattern=None, annotate: int = 30, log: bool = True):
    """Write a PNG of the indexed peaks with their indices (see :meth:`IndexingResult.plot`).

    Returns
    -------
    pathlib.Path of the written file.
    """
    from pathlib import Path

    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    path = Path(path)
    if path.suffix.lower() != ".png":
        raise InvalidInputError(f"`path` must end in .png, got {str(path)!r}")
    d = result.scheme.dim
    fig = Figure(figsize=(7, 6) if d >= 2 else (9, 4))
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    inten = result.intensity_obs
    have_i = np.isfinite(inten).all() and len(inten) and inten.max() > 0
    rel = inten / inten.max() if have_i else np.ones(len(result))
    if d == 1:
        if pattern is not None:
            qq = pattern.grid.q_vectors()[:, 0]
            y = pattern.intensity.reshape(-1)
            ax.plot(qq, np.log10(np.maximum(y / y.max(), 1e-12)) if log else y / y.max(), lw=0.6, color="0.5")
        x = result.q_obs[:, 0]
        yv = np.log10(np.maximum(rel, 1e-12)) if log else rel
        ax.plot(x[result.indexed], yv[result.indexed], "o", ms=4, color="tab:blue", label="indexed")
        ax.plot(x[~result.indexed], yv[~result.indexed], "x", ms=5, color="tab:red", label="unindexed")
        ax.set_xlabel("q (1/Å)")
        ax.set_ylabel("log10 I/I_max" if log else "I/I_max")
        strongest = np.argsort(-rel)
        shown = 0
        for i in strongest:
            if shown >= annotate:
                break
            if result.indexed[i]:
                ax.annotate("(" + ",".join(str(int(v)) for v in result.indices[i]) + ")", (x[i], yv[i]),
                            fontsize=6, rotation=60, xytext=(0, 4), textcoords="offset points")
                shown += 1
    else:
        if pattern is not None and getattr(pattern.grid, "kind", "") in ("plane", "hkl") and pattern.intensity.ndim == 2:
            g = pattern.grid
            qv = g.q_vectors().reshape(pattern.intensity.shape + (3,))
            img = pattern.intensity / pattern.intensity.max()
            img = np.log10(np.maximum(img, 1e-8)) if log else img
            ax.pcolormesh(qv[..., 0], qv[..., 1], img, shading="auto", cmap="Greys")
        x, y = result.q_obs[:, 0], result.q_obs[:, 1]
        size = 4 + 60 * np.sqrt(rel)
        ax.scatter(x[result.indexed], y[result.indexed], s=size[result.indexed], facecolors="none",
                   edgecolors="tab:blue", label="indexed")
        ax.scatter(x[~result.indexed], y[~result.indexed], s=20, marker="x", color="tab:red", label="unindexed")
        strongest = np.argsort(-rel)
        shown = 0
        for i in strongest:
            if shown >= annotate:
                break
            if result.indexed[i] and np.linalg.norm(result.q_obs[i]) > 0:
                ax.annotate("".join(f"{int(v):d} " for v in result.indices[i]).strip(), (x[i], y[i]),
                            fontsize=5, xytext=(3, 3), textcoords="offset points", color="tab:blue")
                shown += 1
        ax.set_aspect("equal")
        ax.set_xlabel("q_x (1/Å)")
        ax.set_ylabel("q_y (1/Å)")
    ok, why = result.verdict()
    ax.set_title(f"{result.scheme.name}: {result.fraction_indexed:.0%} indexed, "
                 f"scale {result.scale:.4f}\n{'quasiperiodic' if ok else 'not quasiperiodic'}: {why}", fontsize=8)
    ax.legend(fontsize=7, loc="best")
    fig.tight_layout()
    tmp = path.with_name(path.name + ".part")
    try:
        fig.savefig(tmp, dpi=150, format="png")
        tmp.replace(path)
    finally:
        if tmp.exists():
            tmp.unlink()
    return path


__all__ = ["Peaks", "find_peaks", "IndexingResult", "index_peaks", "InflationCheck", "inflation_check",
           "plot_indexed", "kperp_bound"]
