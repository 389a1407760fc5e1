"""Measured powder patterns and pair distribution functions beside computed ones.

* :func:`read_profile` reads a measured 1-D pattern: a text file of two or three columns
  (x, y[, σ]; ``#`` comments and header lines skipped), a ``.npy`` array of that shape, or a
  one-dimensional NeXus NXdata group (signal over its axis, with ``<signal>_errors``).
* :func:`compare_powder` puts a computed I(Q) (or a model, computed at the measured Q with
  :func:`kinemap.powder`) beside a measured one and fits scale and background by the same
  weighted least squares as maps (:func:`kinemap.compare`): R, R_b, wR, χ²_ν and R_exp,
  overall and per Q shell, the residual, a file and a picture.
* :func:`compare_pdf` does the same for G(r) (:func:`kinemap.pair_distribution` at the
  measured r), with the agreement factors of :func:`kinemap.compare.agreement` (by default
  a scale only: G(r) has no constant background).

A measured pattern given against 2θ is turned into Q = 4π sin θ/λ with the wavelength.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .._shared.validate import real_number
from ..errors import InvalidInputError, ModelFileError
from ..model import AtomSource, Model
from ..pattern import Pattern
from ._results import PairDistribution, PowderPattern, q_grid

X_KINDS = ("q", "two_theta", "r")


def _text_columns(path: Path) -> np.ndarray:
    rows: list[list[float]] = []
    with open(path, encoding="utf-8", errors="replace") as fh:
        for n, line in enumerate(fh, start=1):
            text = line.split("#", 1)[0].replace(",", " ").strip()
            if not text:
                continue
            try:
                vals = [float(x) for x in text.split()]
            except ValueError:
                if rows:
                    raise ModelFileError(f"{str(path)!r}, line {n}: {line.strip()!r} is not a row of numbers") from None
                continue  # a header line before the data
            rows.append(vals)
    if not rows:
        raise ModelFileError(f"{str(path)!r} holds no rows of numbers")
    widths = {len(r) for r in rows}
    if len(widths) != 1:
        raise ModelFileError(f"{str(path)!r}: rows have different numbers of columns ({sorted(widths)})")
    return np.array(rows, dtype=np.float64)


def _nexus_1d(path: Path) -> tuple[np.ndarray, np.ndarray, np.ndarray | None, str]:
    import h5py

    with h5py.File(path, "r") as f:
        g = f
        for _ in range(3):  # root -> NXentry -> NXdata by the 'default' attributes
            name = g.attrs.get("default")
            if name is None:
                break
            name = name.decode() if isinstance(name, bytes) else str(name)
            if name not in g:
                raise ModelFileError(f"{str(path)!r}: 'default' names {name!r}, which is not in {g.name}")
            g = g[name]
        sig_name = g.attrs.get("signal")
        if sig_name is None:
            raise ModelFileError(f"{str(path)!r}: no NXdata group with a 'signal' attribute reached from the root")
        sig_name = sig_name.decode() if isinstance(sig_name, bytes) else str(sig_name)
        axes = g.attrs.get("axes")
        axes = [a.decode() if isinstance(a, bytes) else str(a) for a in np.atleast_1d(axes)] if axes is not None else []
        if not axes or axes[0] in (".", ""):
            raise ModelFileError(f"{str(path)!r}: {g.name} names no axis for its signal")
        y = np.asarray(g[sig_name][()], dtype=np.float64)
        x_ds = g[axes[0]]
        x = np.asarray(x_ds[()], dtype=np.float64)
        units = x_ds.attrs.get("units", "")
        units = units.decode() if isinstance(units, bytes) else str(units)
        err = g.get(f"{sig_name}_errors")
        sigma = None if err is None else np.asarray(err[()], dtype=np.float64)
    if y.ndim != 1:
        raise ModelFileError(f"{str(path)!r}: the signal has shape {y.shape}; a powder pattern or G(r) is 1-D")
    return x, y, sigma, units


def read_profile(source, *, x: str = "q", wavelength: float | None = None) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
    """A measured 1-D pattern as (x, y, σ or None), x sorted increasing.

    Parameters
    ----------
    source : str, path-like or tuple
        A text file of columns x, y[, σ], a ``.npy`` array (N, 2 or 3), a NeXus/HDF5 file with
        a 1-D NXdata group, or a tuple of arrays ``(x, y)`` or ``(x, y, σ)``.
    x : {"q", "two_theta", "r"}
        What the first column is: |Q| in Å⁻¹, 2θ in degrees (converted to Q with
        `wavelength`), or r in Å (for G(r)).
    wavelength : float, optional
        Å, needed for ``x="two_theta"``.

    Raises
    ------
    ModelFileError
        Unreadable files, rows that are not numbers, wrong shapes.
    InvalidInputError
        Bad options, non-finite x, negative σ.
    """
    if x not in X_KINDS:
        raise InvalidInputError(f"`x` must be one of {X_KINDS}, got {x!r}")
    if isinstance(source, tuple):
        cols = [np.asarray(c, dtype=np.float64).reshape(-1) for c in source]
        if len(cols) not in (2, 3) or len({len(c) for c in cols}) != 1:
            raise InvalidInputError("a measured pattern given as arrays must be (x, y) or (x, y, sigma) of one length")
        xs, ys, ss = cols[0], cols[1], (cols[2] if len(cols) == 3 else None)
    else:
        p = Path(source)
        if not p.exists():
            raise FileNotFoundError(f"no such file: {str(p)!r}")
        with open(p, "rb") as fh:
            head = fh.read(8)
        if head == b"\x89HDF\r\n\x1a\n":
            xs, ys, ss, _units = _nexus_1d(p)
        else:
            arr = np.load(p, allow_pickle=False) if p.suffix.lower() == ".npy" else _text_columns(p)
            if arr.ndim != 2 or arr.shape[1] not in (2, 3):
                raise ModelFileError(f"{str(p)!r} must hold 2 or 3 columns (x, y[, sigma]), got shape {arr.shape}")
            xs, ys, ss = arr[:, 0], arr[:, 1], (arr[:, 2] if arr.shape[1] == 3 else None)
    if not np.isfinite(xs).all():
        raise InvalidInputError("the measured pattern has non-finite x values")
    if ss is not None and (ss < 0).any():
        raise InvalidInputError(f"the measured pattern has a negative sigma at row {int(np.flatnonzero(ss < 0)[0])}")
    if x == "two_theta":
        if wavelength is None:
            raise InvalidInputError("a pattern against 2θ needs the `wavelength` (Å) to give Q")
        lam = real_number(wavelength, "wavelength", minimum=0.0, exclusive_minimum=True)
        if (xs <= 0).any() or (xs >= 180).any():
            raise InvalidInputError("2θ must lie between 0 and 180 degrees")
        xs = 4.0 * np.pi * np.sin(np.radians(xs) / 2.0) / lam
    order = np.argsort(xs, kind="stable")
    return xs[order], ys[order], None if ss is None else ss[order]


def _measured_pattern(measured, x: str, wavelength) -> Pattern:
    if isinstance(measured, Pattern):
        return measured
    q, y, s = read_profile(measured, x=x, wavelength=wavelength)
    if (q <= 0).any():
        raise InvalidInputError("powder patterns need |Q| > 0")
    return Pattern.from_array(y, q_grid(q), sigma=s, metadata={"source": str(measured) if not isinstance(
        measured, tuple) else "arrays"})


def compare_powder(calc, measured, *, x: str = "q", wavelength: float | None = None, scale="fit",
                   background: str = "flat", mask=None, probe="xray", **powder_options):
    """A computed powder pattern beside a measured one: scale, background and agreement factors.

    Parameters
    ----------
    calc : PowderPattern, Model or atom source
        A pattern from :func:`kinemap.powder` at the measured Q, or a model, which is then
        computed at the measured Q (`probe` and `powder_options` go to :func:`kinemap.powder`).
    measured : path, tuple or Pattern
        See :func:`read_profile`; a Pattern must hold the same |Q| points as `calc`.
    x, wavelength
        How to read the measured x values (Q, or 2θ with the wavelength).
    scale, background, mask
        As in :func:`kinemap.compare` (background: none, flat or a polynomial in |Q|).

    Returns
    -------
    kinemap.compare.Comparison
        With ``scale``, ``background``, ``r_factor``, ``wr_factor``, ``chi2``, ``r_exp``,
        ``shells(n)``, ``residual``, ``save(path)`` and ``plot(path)``.
    """
    from .. import compare
    from .debye import powder

    meas = _measured_pattern(measured, x, wavelength)
    q_meas = meas.grid.q_vectors()[:, 0]
    if isinstance(calc, PowderPattern):
        if calc.q.shape != q_meas.shape or not np.allclose(calc.q, q_meas, rtol=1e-9, atol=1e-12):
            raise InvalidInputError("the computed pattern is not at the measured Q values; pass the model instead, "
                                    "or compute it with kinemap.powder(model, q_measured)")
        pattern = calc
    elif isinstance(calc, (Model, AtomSource)):
        pattern = powder(calc, q_meas, probe=probe, **powder_options)
    else:
        raise InvalidInputError(f"`calc` must be a PowderPattern, a Model or an atom source, got {type(calc).__name__}")
    calc_pat = Pattern(meas.grid, intensity=pattern.intensity, metadata=pattern.metadata, units=pattern.units)
    return compare(calc_pat, meas, scale=scale, background=background, mask=mask)


def compare_pdf(calc, measured, *, scale="fit", background: str = "none", mask=None, **pdf_options):
    """A computed G(r) beside a measured one: a fitted scale (and optional background) and the
    agreement factors of :func:`kinemap.compare.agreement` (R, wR, χ²_ν with σ).

    Parameters
    ----------
    calc : PairDistribution, Model or atom source
        G(r) from :func:`kinemap.pair_distribution` at the measured r, or a model (computed
        there with `pdf_options`).
    measured : path, tuple
        Columns r (Å), G(r) [, σ]; see :func:`read_profile`.

    Returns
    -------
    (Agreement, ndarray, ndarray)
        The figures, the measured r, and the computed G(r) at those r.
    """
    from ..compare import agreement
    from .pdf import pair_distribution

    r, g_obs, sigma = read_profile(measured, x="r")
    if isinstance(calc, PairDistribution):
        if calc.r.shape != r.shape or not np.allclose(calc.r, r, rtol=1e-9, atol=1e-12):
            raise InvalidInputError("the computed G(r) is not at the measured r values; pass the model instead")
        g_calc = calc.G
    elif isinstance(calc, (Model, AtomSource)):
        g_calc = pair_distribution(calc, r, **pdf_options).G
    else:
        raise InvalidInputError(f"`calc` must be a PairDistribution, a Model or an atom source, got {type(calc).__name__}")
    fit = agreement(g_obs, g_calc, sigma, scale=scale, background=background, mask=mask)
    return fit, r, g_calc


__all__ = ["read_profile", "compare_powder", "compare_pdf"]
