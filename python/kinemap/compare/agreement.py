"""Scale, background and agreement factors between observed and calculated intensities.

Nothing here knows about grids: the functions take arrays of any shape (a 3-D map, a
powder pattern, a list of reflections) and, optionally, |q| of every point for a
background polynomial in |q| and for figures per |q| shell.

The model of the observation is I_o ≈ s·I_c + b(|q|), with b = 0 ("none"), a constant
("flat") or a polynomial in |q| of order 1–3 ("linear", "quadratic", "cubic"). The scale s
(unless fixed) and the background coefficients are found by weighted linear least squares,
minimising Σ w (I_o − s I_c − b)² with

    w = 1 / (σ_o² + s² σ_c²)

(σ_o the uncertainty of the observation, σ_c the model's own noise, e.g. the speckle of one
snapshot; w = 1 when the observation has no σ). Because w depends on s when σ_c is given,
the fit is repeated with the weights of the last s until s changes by less than 1e-10
relatively (iteratively reweighted least squares; at most 100 rounds).

Figures (sums over the points used; definitions also stored in every output file):

    R       = Σ|I_o − (s I_c + b)| / Σ|I_o|
    R_b     = Σ|I_o − (s I_c + b)| / Σ|I_o − b|        (background fitted only)
    wR      = sqrt(Σ w (I_o − s I_c − b)² / Σ w I_o²)
    χ²_ν    = Σ w (I_o − s I_c − b)² / (N − p)          (NaN without σ_o)
    R_exp   = sqrt(2/π) Σ σ / Σ|I_o|,  σ = sqrt(σ_o² + s² σ_c²)

R_exp is the R that Gaussian noise of standard deviation σ alone would give (the mean of
|x| for x ~ N(0, σ²) is sqrt(2/π)·σ). p counts the fitted parameters (scale, background
coefficients, and any extra, such as a fitted resolution width). After symmetry averaging
only N_ind of the N points are independent: χ²_ν then uses (N_ind/N)·Σ w r² / (N_ind − p).

The sums are accumulated block by block (the points of a block are used once per pass), so
maps larger than memory are handled by feeding blocks read from a file; the result does not
depend on how the points are split into blocks beyond rounding.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass

import numpy as np

from ..errors import InvalidInputError
from .figures import DEFINITIONS, N_FINE_BINS, Agreement, ShellTable, _figures

#: Background models: name → polynomial order in |q| (−1 = no background).
BACKGROUNDS = {"none": -1, "flat": 0, "linear": 1, "quadratic": 2, "cubic": 3}

#: Points per block when arrays in memory are split for the sums.
BLOCK_POINTS = 1 << 20

_MAX_ROUNDS = 100
_S_TOL = 1e-10

class FitWarning(RuntimeWarning):
    """The reweighted fit of scale and background did not settle."""


@dataclass
class Block:
    """Points that take part in the sums (already filtered), as 1-D float64 arrays."""

    obs: np.ndarray
    calc: np.ndarray
    sigma_obs: np.ndarray | None = None
    sigma_calc: np.ndarray | None = None
    q: np.ndarray | None = None


# ---------------------------------------------------------------------------------------
# the fit
# ---------------------------------------------------------------------------------------
def _check_scale(scale) -> float | None:
    if isinstance(scale, str):
        if scale != "fit":
            raise InvalidInputError(f"`scale` must be 'fit' or a number (a fixed scale), got {scale!r}")
        return None
    if isinstance(scale, (bool, np.bool_)) or not isinstance(scale, (int, float, np.integer, np.floating)):
        raise InvalidInputError(f"`scale` must be 'fit' or a number (a fixed scale), got {scale!r}")
    if not math.isfinite(float(scale)):
        raise InvalidInputError(f"`scale` must be finite, got {scale!r}")
    return float(scale)


def check_background(background) -> int:
    """The polynomial order of a background name (−1 for "none")."""
    if background is None:
        background = "none"
    if not isinstance(background, str) or background not in BACKGROUNDS:
        raise InvalidInputError(f"`background` must be one of {', '.join(map(repr, BACKGROUNDS))}, got {background!r}")
    return BACKGROUNDS[background]


def _weights(b: Block, s: float) -> np.ndarray | None:
    if b.sigma_obs is None:
        return None
    var = b.sigma_obs * b.sigma_obs
    if b.sigma_calc is not None and s != 0.0:
        var = var + (s * s) * (b.sigma_calc * b.sigma_calc)
    return 1.0 / var


def _basis(b: Block, order: int, q_ref: float) -> list[np.ndarray]:
    if order < 0:
        return []
    cols = [np.ones_like(b.obs)]
    if order >= 1:
        if b.q is None:
            raise InvalidInputError("a background above flat needs |q| of every point")
        x = b.q / q_ref
        p = np.ones_like(x)
        for _ in range(order):
            p = p * x
            cols.append(p)
    return cols


def _normal_pass(blocks, s_fixed, s_weights, order, q_ref):
    """Σ w a_i a_j and Σ w a_i y over all blocks; also N and the |q| range."""
    m = None
    v = None
    n = 0
    qlo, qhi = math.inf, -math.inf
    for b in blocks():
        if b.obs.size == 0:
            continue
        n += b.obs.size
        if b.q is not None:
            qlo = min(qlo, float(b.q.min()))
            qhi = max(qhi, float(b.q.max()))
        w = _weights(b, s_weights)
        cols = ([] if s_fixed is not None else [b.calc]) + _basis(b, order, q_ref)
        y = b.obs if s_fixed is None else b.obs - s_fixed * b.calc
        if not cols:
            continue
        a = np.stack(cols)                       # (p, n)
        aw = a if w is None else a * w
        mm = aw @ a.T
        vv = aw @ y
        m = mm if m is None else m + mm
        v = vv if v is None else v + vv
    return m, v, n, (qlo, qhi)


def _solve(m: np.ndarray, v: np.ndarray, scale_fitted: bool) -> np.ndarray:
    d = np.diag(m).copy()
    if scale_fitted and d[0] <= 0:
        raise InvalidInputError("the model intensities are zero at every point used: the scale cannot be fitted")
    if (d <= 0).any():
        raise InvalidInputError("the fit has a parameter that no point constrains (all weights zero)")
    e = 1.0 / np.sqrt(d)
    me = m * e[:, None] * e[None, :]
    cond = np.linalg.cond(me)
    if not np.isfinite(cond) or cond > 1e12:
        what = ("the model map is (nearly) a constant or a polynomial in |q| over the points used, so its scale "
                "and the background cannot be told apart; fix the scale or choose a lower-order background") \
            if scale_fitted else "the background polynomial is degenerate over the points used; choose a lower order"
        raise InvalidInputError(f"cannot fit: {what} (condition number {cond:.3g})")
    return e * np.linalg.solve(me, e * v)


def fit_blocks(blocks: Callable[[], Iterable[Block]], *, scale="fit", background="flat",
               q_ref: float | None = None, weighted: bool, with_sigma_calc: bool = False,
               extra_params: int = 0, independent_fraction: float = 1.0) -> Agreement:
    """Fit scale and background and accumulate the figures over blocks of points.

    Parameters
    ----------
    blocks : callable
        Returns a fresh iterator of :class:`Block` (it is called once per pass).
    scale, background
        As in :func:`agreement`.
    q_ref : float, optional
        |q| that normalises the polynomial basis (the largest |q| of the map); needed when
        the background is above flat.
    weighted : bool
        Whether the blocks carry σ of the observation.
    with_sigma_calc : bool
        Whether they carry σ of the model (reweighted fit).
    extra_params : int
        Parameters fitted elsewhere (e.g. a resolution width), added to p.
    independent_fraction : float
        N_ind/N after symmetry averaging (1 otherwise).

    Returns
    -------
    Agreement
    """
    s_fixed = _check_scale(scale)
    order = check_background(background)
    bg_kind = "none" if background is None else background
    if order >= 1 and (q_ref is None or not q_ref > 0):
        raise InvalidInputError(f"a {bg_kind!r} background needs |q| of every point")
    q_ref = float(q_ref) if q_ref else 1.0
    p_fit = (0 if s_fixed is not None else 1) + (order + 1)
    n_params = p_fit + int(extra_params)

    s_w = s_fixed if s_fixed is not None else 0.0
    rounds = 0
    coef = np.zeros(0)
    n, qr = 0, (math.inf, -math.inf)
    while True:
        rounds += 1
        m, v, n, qr = _normal_pass(blocks, s_fixed, s_w if with_sigma_calc else 0.0, order, q_ref)
        if n == 0:
            raise InvalidInputError("no points are left to compare (every point is unmeasured, masked or excluded)")
        n_ind = independent_fraction * n
        if n_ind - n_params <= 0 and weighted:
            raise InvalidInputError(f"{int(round(n_ind))} independent point(s) are too few for {n_params} fitted "
                                    "parameter(s)")
        if n <= p_fit:
            raise InvalidInputError(f"{n} point(s) are too few to fit {p_fit} parameter(s)")
        coef = _solve(m, v, s_fixed is None) if m is not None else np.zeros(0)
        s_new = s_fixed if s_fixed is not None else float(coef[0])
        if not (with_sigma_calc and weighted and s_fixed is None):
            s_w = s_new
            break
        done = abs(s_new - s_w) <= _S_TOL * max(abs(s_new), 1e-300)
        s_w = s_new
        if done:
            break
        if rounds >= _MAX_ROUNDS:
            warnings.warn(f"the reweighted fit of the scale did not settle in {_MAX_ROUNDS} rounds "
                          f"(last s = {s_new:.10g})", FitWarning, stacklevel=3)
            break
    s = s_w
    bcoef = coef[(0 if s_fixed is not None else 1):] if order >= 0 else np.zeros(0)
    absolute = np.array([c / q_ref**k for k, c in enumerate(bcoef)])

    has_q = qr[0] <= qr[1]
    q_range = (qr[0], qr[1]) if has_q else None
    bins = _figure_pass(blocks, s, bcoef, order, q_ref, q_range, weighted, with_sigma_calc)
    tot = {k: float(v.sum()) for k, v in bins.items()}
    if tot["abs_obs"] == 0.0:
        raise InvalidInputError("the measured intensities are all zero at the points used; R is undefined")
    ag = Agreement(scale=float(s), background=absolute, background_kind=bg_kind, scale_fitted=s_fixed is None,
                   r_factor=0.0, r_factor_bg=0.0, wr_factor=0.0, chi2=0.0, r_exp=0.0, n_points=int(n),
                   n_independent=int(round(independent_fraction * n)), n_params=n_params, weighted=weighted,
                   iterations=rounds, q_range=q_range, independent_fraction=float(independent_fraction),
                   weighted_sum=tot["w_res2"], _bins=bins if has_q else {})
    figs = _figures({k: np.float64(v) for k, v in tot.items()}, ag)
    for k, val in figs.items():
        setattr(ag, k, float(val))
    return ag


def _figure_pass(blocks, s, bcoef, order, q_ref, q_range, weighted, with_sigma_calc) -> dict:
    names = ("n", "abs_res", "abs_obs", "abs_obs_bg", "w_res2", "w_obs2", "sigma")
    nb = N_FINE_BINS if q_range is not None else 1
    acc = {k: np.zeros(nb) for k in names}
    for b in blocks():
        if b.obs.size == 0:
            continue
        cols = _basis(b, order, q_ref)
        bg = sum(c * x for c, x in zip(bcoef, cols)) if cols else 0.0
        res = b.obs - s * b.calc - bg
        w = _weights(b, s if with_sigma_calc else 0.0)
        if q_range is not None and b.q is not None and q_range[1] > q_range[0]:
            idx = ((b.q - q_range[0]) * (nb / (q_range[1] - q_range[0]))).astype(np.int64)
            np.clip(idx, 0, nb - 1, out=idx)
        else:
            idx = np.zeros(b.obs.size, dtype=np.int64)
        vals = {
            "n": None,
            "abs_res": np.abs(res),
            "abs_obs": np.abs(b.obs),
            "abs_obs_bg": np.abs(b.obs - bg),
            "w_res2": res * res if w is None else w * res * res,
            "w_obs2": b.obs * b.obs if w is None else w * b.obs * b.obs,
            "sigma": None if w is None else np.sqrt(1.0 / w),
        }
        for k, x in vals.items():
            if k == "sigma" and x is None:
                continue
            acc[k] += np.bincount(idx, weights=x, minlength=nb)
    return acc


# ---------------------------------------------------------------------------------------
# arrays in memory
# ---------------------------------------------------------------------------------------
def _as_real(x, name: str, shape) -> np.ndarray:
    a = np.asarray(x)
    if a.dtype.kind == "c":
        raise InvalidInputError(f"`{name}` must be real, got a complex array (pass intensities, not amplitudes)")
    if a.dtype.kind not in "biuf":
        raise InvalidInputError(f"`{name}` must hold real numbers, got dtype {a.dtype}")
    if shape is not None and a.shape != shape:
        raise InvalidInputError(f"`{name}` has shape {a.shape}, but `i_obs` has shape {shape}")
    return a.astype(np.float64, copy=False)


def check_sigma(sigma: np.ndarray, name: str) -> None:
    """Refuse negative uncertainties (naming the first index)."""
    neg = sigma < 0
    if neg.any():
        j = np.unravel_index(int(np.flatnonzero(neg)[0]), sigma.shape)
        raise InvalidInputError(f"`{name}` is negative at index {tuple(int(i) for i in j)}: {float(sigma[j])!r}; "
                                "uncertainties are >= 0 (mark unmeasured points with NaN intensity)")


def usable(obs, calc, sigma_obs=None, sigma_calc=None, mask=None) -> np.ndarray:
    """True where a point takes part: finite I_o and I_c, σ_o finite and > 0 (when given),
    σ_c finite (when given), not masked."""
    keep = np.isfinite(obs) & np.isfinite(calc)
    if sigma_obs is not None:
        keep &= np.isfinite(sigma_obs) & (sigma_obs > 0)
    if sigma_calc is not None:
        keep &= np.isfinite(sigma_calc)
    if mask is not None:
        keep &= ~mask
    return keep


def array_blocks(obs, calc, sigma_obs, sigma_calc, q, keep) -> Callable[[], Iterator[Block]]:
    """Blocks of at most BLOCK_POINTS points of flattened arrays, filtered by `keep`."""
    flat_obs, flat_calc = np.ravel(obs), np.ravel(calc)
    flat = [None if a is None else np.ravel(a) for a in (sigma_obs, sigma_calc, q)]
    kf = np.ravel(keep)
    total = kf.size

    def gen():
        for i in range(0, total, BLOCK_POINTS):
            sl = slice(i, min(total, i + BLOCK_POINTS))
            k = kf[sl]
            so, sc, qq = (None if a is None else a[sl][k] for a in flat)
            yield Block(flat_obs[sl][k], flat_calc[sl][k], so, sc, qq)

    return gen


def agreement(i_obs, i_calc, sigma_obs=None, sigma_calc=None, *, scale="fit", background="flat",
              q=None, mask=None, extra_params: int = 0, independent_fraction: float = 1.0) -> Agreement:
    """Fit scale and background of a calculated set of intensities to an observed one and
    compute the agreement factors; arrays of any shape (maps, powder patterns, lists).

    Parameters
    ----------
    i_obs, i_calc : array_like
        Observed and calculated intensities, the same shape. NaN/inf marks points that are
        left out.
    sigma_obs : array_like, optional
        Standard uncertainties of `i_obs` (same shape). Points with σ = 0 or non-finite σ
        are left out; negative σ is refused. Without it the fit is unweighted (w = 1) and
        χ²_ν and R_exp are NaN.
    sigma_calc : array_like, optional
        The calculated map's own noise σ_c (e.g. frame-to-frame or cell-to-cell spread);
        enters the weights as s²σ_c². Used only together with `sigma_obs`.
    scale : "fit" or float
        Fit s, or keep it fixed at the given value.
    background : {"none", "flat", "linear", "quadratic", "cubic"}
        b = 0, a constant, or a polynomial of that order in |q|.
    q : array_like, optional
        |q| of every point (Å⁻¹), same shape: needed for a background above "flat" and for
        figures per shell (:meth:`Agreement.shells`).
    mask : array_like of bool, optional
        True where a point must be left out.
    extra_params : int
        Parameters fitted elsewhere (e.g. a resolution width), counted in p.
    independent_fraction : float
        N_ind/N when the maps were symmetry-averaged (χ²_ν then counts independent points).

    Returns
    -------
    Agreement
        ``scale``, ``background`` (polynomial coefficients, constant first), ``r_factor``,
        ``r_factor_bg``, ``wr_factor``, ``chi2``, ``r_exp``, ``n_points``, ``shells(n)``.

    Raises
    ------
    InvalidInputError
        Shapes that differ, complex input, negative σ, no point left, fewer points than
        parameters, a model map that cannot be told apart from the background.

    Notes
    -----
    See the module notes and :data:`DEFINITIONS`: R = Σ|I_o − (sI_c + b)|/Σ|I_o|,
    R_b = Σ|I_o − (sI_c + b)|/Σ|I_o − b|, wR = sqrt(Σw(I_o − sI_c − b)²/Σw I_o²),
    χ²_ν = Σw(I_o − sI_c − b)²/(N − p), R_exp = sqrt(2/π)·Σσ/Σ|I_o|,
    w = 1/(σ_o² + s²σ_c²).

    Examples
    --------
    >>> import numpy as np
    >>> from kinemap.compare import agreement
    >>> calc = np.array([1.0, 2.0, 3.0, 4.0])
    >>> a = agreement(2 * calc + 0.5, calc)
    >>> round(a.scale, 12), round(float(a.background[0]), 12), a.r_factor < 1e-12
    (2.0, 0.5, True)
    """
    obs = _as_real(i_obs, "i_obs", None)
    shape = obs.shape
    calc = _as_real(i_calc, "i_calc", shape)
    so = None if sigma_obs is None else _as_real(sigma_obs, "sigma_obs", shape)
    sc = None if sigma_calc is None else _as_real(sigma_calc, "sigma_calc", shape)
    if so is not None:
        check_sigma(so, "sigma_obs")
    if sc is not None:
        check_sigma(sc, "sigma_calc")
    qa = None if q is None else _as_real(q, "q", shape)
    m = None
    if mask is not None:
        m = np.asarray(mask)
        if m.dtype != bool:
            raise InvalidInputError(f"`mask` must be a boolean array (True = leave out), got dtype {m.dtype}")
        if m.shape != shape:
            raise InvalidInputError(f"`mask` has shape {m.shape}, but `i_obs` has shape {shape}")
    if so is None:
        sc = None
    keep = usable(obs, calc, so, sc, m)
    if qa is not None:
        keep &= np.isfinite(qa)
    if obs.size == 0:
        raise InvalidInputError("`i_obs` holds no points")
    q_ref = float(np.max(np.abs(qa[keep]))) if qa is not None and keep.any() else None
    return fit_blocks(array_blocks(obs, calc, so, sc, qa, keep), scale=scale, background=background,
                      q_ref=q_ref, weighted=so is not None, with_sigma_calc=sc is not None,
                      extra_params=extra_params, independent_fraction=independent_fraction)


__all__ = ["agreement", "Agreement", "ShellTable", "Block", "fit_blocks", "array_blocks", "usable",
           "check_sigma", "check_background", "BACKGROUNDS", "DEFINITIONS", "FitWarning", "N_FINE_BINS"]
