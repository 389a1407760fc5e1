"""Higher-dimensional indexing of peaks.

:func:`index_peaks` assigns every peak the integer indices h of a Fourier-module vector of a
:class:`~kinemap.quasi.scheme.CutProjectScheme`: the module is dense, so the search is
limited to |k⊥| ≤ kperp_max and a tolerance around the observed position; among the
candidates the one whose predicted intensity |T_W(k⊥)|² (the window transform) best matches
is chosen. An isotropic scale (a wrong edge length or wavelength) is fitted first from the
strongest peaks and refined on all of them. The result (:class:`IndexingResult`) gives, for
every peak, the indices, parallel and perpendicular components, the residual of the fit and
the predicted relative intensity, as a table and a plot, and decides whether the pattern is
consistent with the quasiperiodic scheme at all: a periodic crystal's peaks either fail to
index with small k⊥ or show intensities unrelated to the window transform, and its indices
span a sub-module of too low rank.

The map must be given in the scheme's frame (the physical axes of the scheme are the first
d Cartesian axes of q); only an isotropic scale is fitted.
"""

from __future__ import annotations

import math

import numpy as np

from .._shared.validate import flag, real_array, real_number, whole_number
from ..errors import InvalidInputError
from .find import Peaks
from .index_result import IndexingResult
from .scheme import CutProjectScheme


def kperp_bound(scheme: CutProjectScheme, min_predicted: float) -> float:
    """|k⊥| beyond which the window transform stays below `min_predicted` in intensity.

    From the divergence theorem, |T_W(k⊥)| ≤ S / (2π |k⊥| V) with S the boundary measure
    and V the volume of the window, so |T|² < p for |k⊥| > S / (2π V √p).
    """
    min_predicted = real_number(min_predicted, "min_predicted", minimum=0.0, exclusive_minimum=True)
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
    if not isinstance(scheme, CutProjectScheme):
        raise InvalidInputError(f"`scheme` must be a CutProjectScheme (e.g. quasi.octagonal()), got "
                                f"{type(scheme).__name__}")
    if isinstance(peaks, Peaks):
        q = peaks.q
        if intensity is None:
            intensity = peaks.intensity
    else:
        q = real_array(peaks, "peaks (peak positions q, 1/Å)", shape=(None, 3))
    m = len(q)
    if intensity is None:
        inten = np.full(m, np.nan)
    else:
        inten = real_array(np.reshape(intensity, -1) if np.ndim(intensity) else intensity, "intensity",
                           shape=(m,))
        if (inten < 0).any():
            raise InvalidInputError(f"`intensity` must be >= 0 (first negative at peak {int(np.argmax(inten < 0))})")
    scale = real_number(scale, "scale", minimum=0.0, exclusive_minimum=True)
    fit_scale = flag(fit_scale, "fit_scale")
    tolerance = real_number(tolerance, "tolerance", minimum=0.0, exclusive_minimum=True)
    search_tolerance = real_number(search_tolerance, "search_tolerance", minimum=0.0, exclusive_minimum=True)
    min_predicted = real_number(min_predicted, "min_predicted", minimum=0.0, exclusive_minimum=True)
    intensity_factor = real_number(intensity_factor, "intensity_factor", minimum=1.0, exclusive_minimum=True)
    n_seed = whole_number(n_seed, "n_seed", minimum=1)
    max_iter = whole_number(max_iter, "max_iter", minimum=1)
    d = scheme.dim
    k_obs = q / (2 * np.pi)
    k_out = np.linalg.norm(k_obs[:, d:], axis=1)  # components outside the physical space
    k_in = k_obs[:, :d]
    kabs = np.linalg.norm(k_in, axis=1)
    nonzero_mask = kabs > 1e-12
    med = float(np.median(kabs[nonzero_mask])) if nonzero_mask.any() else 1.0
    abs_tol_k = (0.2 * tolerance * med) if abs_tolerance is None else \
        real_number(abs_tolerance, "abs_tolerance", minimum=0.0) / (2 * np.pi)
    have_i = bool(np.isfinite(inten).all() and m > 0 and inten[nonzero_mask].max(initial=0) > 0)
    if kperp_max is not None:
        kpm = real_number(kperp_max, "kperp_max", minimum=0.0, exclusive_minimum=True)
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
    seeds = nonzero[: max(2, n_seed)]
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


__all__ = ["index_peaks", "kperp_bound"]
