"""User-supplied scattering tables: Gaussian sums, sampled f(s) grids, constants."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from ..errors import InvalidInputError
from ._species import Species, as_label_list
from .base import Probe, as_s_array


class CustomProbe(Probe):
    """Scattering factors from user tables, one entry per label.

    Any label (a species, a site name such as ``'Fe_a'``, a tile-vertex class) can be given
    its own scattering strength in one of three forms:

    * ``gaussians={label: (a, b, c)}``: f(s) = c + Σ_i a_i exp(−b_i s²), with b_i in Å² and
      s = sinθ/λ in Å⁻¹ (the Waasmaier–Kirfel / Peng form; ``c`` may be left out, ``(a, b)``);
    * ``grids={label: (s_values, f_values)}``: f sampled at increasing s_values (Å⁻¹) and
      interpolated (``interpolation='linear'`` or ``'cubic'``: a cubic spline with f′(0) = 0
      when the grid starts at s = 0, as f is even in s, and not-a-knot ends otherwise);
      s outside the sampled range raises;
    * ``constants={label: value}``: s-independent, e.g. a neutron length in fm.

    Values may be complex. Labels not found in these tables go to `fallback`, a probe whose
    units must equal `units`.

    Parameters
    ----------
    gaussians, grids, constants : dict, optional
        The tables described above.
    units : str
        Units of the values, recorded in the metadata (e.g. ``'electrons'``, ``'fm'``,
        ``'angstrom'``). Defaults to the fallback's units, else ``'1'``.
    source : str
        Where the numbers come from (a citation), recorded in the metadata.
    fallback : Probe, optional
        Probe for labels without a custom entry (e.g. ``XRayProbe()``).
    interpolation : {'linear', 'cubic'}
        Interpolation of the `grids` entries.

    Raises
    ------
    InvalidInputError
        For malformed tables (names the label and the problem), or a units mismatch with
        `fallback`.
    """

    name = "custom"

    def __init__(
        self,
        gaussians: Mapping[str, Any] | None = None,
        grids: Mapping[str, Any] | None = None,
        constants: Mapping[str, Any] | None = None,
        *,
        units: str | None = None,
        source: str = "user-supplied table",
        fallback: Probe | None = None,
        interpolation: str = "linear",
    ) -> None:
        super().__init__(None)
        if fallback is not None and not isinstance(fallback, Probe):
            raise InvalidInputError(
                f"`fallback` must be a Probe instance (e.g. XRayProbe()), got {type(fallback).__name__}"
            )
        if units is None:
            units = fallback.units if fallback is not None else "1"
        if not isinstance(units, str):
            raise InvalidInputError(f"`units` must be a str, got {units!r}")
        if fallback is not None and fallback.units != units:
            raise InvalidInputError(
                f"`units` = {units!r} differs from the fallback probe's units "
                f"{fallback.units!r}; factors of one pattern must share units"
            )
        if interpolation not in ("linear", "cubic"):
            raise InvalidInputError(
                f"`interpolation` must be 'linear' or 'cubic', got {interpolation!r}"
            )
        self.units = units
        self.source = str(source)
        self.fallback = fallback
        self.interpolation = interpolation
        self._gauss: dict[str, tuple[np.ndarray, np.ndarray, complex]] = {}
        self._grids: dict[str, tuple[np.ndarray, Any]] = {}
        self._const: dict[str, complex] = {}
        for label, entry in _mapping(gaussians, "gaussians").items():
            self._gauss[label] = _gaussian_entry(label, entry)
        for label, entry in _mapping(grids, "grids").items():
            self._grids[label] = self._grid_entry(label, entry)
        for label, entry in _mapping(constants, "constants").items():
            self._const[label] = _complex_scalar(entry, f"`constants`[{label!r}]")
        seen: dict[str, str] = {}
        for kind, table in (("gaussians", self._gauss), ("grids", self._grids), ("constants", self._const)):
            for label in table:
                if label in seen:
                    raise InvalidInputError(
                        f"label {label!r} is given in both `{seen[label]}` and `{kind}`"
                    )
                seen[label] = kind
        if not seen and fallback is None:
            raise InvalidInputError(
                "CustomProbe needs at least one table entry (`gaussians`, `grids` or "
                "`constants`) or a `fallback` probe"
            )

    def __repr__(self) -> str:
        return f"CustomProbe(labels={self.labels!r}, units={self.units!r})"

    @property
    def labels(self) -> list[str]:
        """Labels that have a custom entry."""
        return sorted([*self._gauss, *self._grids, *self._const])

    def _grid_entry(self, label: str, entry: Any) -> tuple[np.ndarray, Any]:
        where = f"`grids`[{label!r}]"
        try:
            s_vals, f_vals = entry
        except (TypeError, ValueError):
            raise InvalidInputError(f"{where} must be a pair (s_values, f_values)") from None
        s_arr = np.asarray(s_vals, dtype=np.float64).reshape(-1)
        f_arr = np.asarray(f_vals).reshape(-1)
        if s_arr.size < 2 or s_arr.size != f_arr.size:
            raise InvalidInputError(
                f"{where}: s_values and f_values must have the same length >= 2, got "
                f"{s_arr.size} and {f_arr.size}"
            )
        try:
            f_arr = f_arr.astype(np.complex128)
        except (TypeError, ValueError):
            raise InvalidInputError(f"{where}: f_values must be numbers") from None
        if not (np.all(np.isfinite(s_arr)) and np.all(np.isfinite(f_arr))):
            raise InvalidInputError(f"{where}: s_values and f_values must be finite")
        if np.any(np.diff(s_arr) <= 0) or s_arr[0] < 0:
            raise InvalidInputError(f"{where}: s_values must be >= 0 and strictly increasing")
        if self.interpolation == "cubic":
            try:
                from scipy.interpolate import CubicSpline
            except ImportError:  # pragma: no cover - scipy is installed with the tests
                raise InvalidInputError(
                    f"{where}: interpolation='cubic' needs scipy (pip install scipy); "
                    "use interpolation='linear' without it"
                ) from None

            # f(s) is even in s, so f'(0) = 0 when the grid starts at s = 0;
            # otherwise (and at the far end) the not-a-knot condition
            bc = ((1, 0.0), "not-a-knot") if s_arr[0] == 0.0 else "not-a-knot"
            spline = CubicSpline(s_arr, f_arr, bc_type=bc)
            return s_arr, spline
        return s_arr, f_arr

    # -- probe hooks ---------------------------------------------------------------------
    def _has(self, label: str) -> bool:
        return label in self._gauss or label in self._grids or label in self._const

    def check_labels(self, labels: Sequence[str]) -> None:
        for lab in as_label_list(labels):
            if self._has(lab):
                continue
            if self.fallback is None:
                raise InvalidInputError(
                    f"species {lab!r} has no entry in the custom table; labels available: "
                    f"{', '.join(self.labels)}"
                )
            self.fallback.check_labels([lab])

    def scattering_factors(self, labels: Sequence[str], s: Any) -> np.ndarray:
        labs = as_label_list(labels)
        self.check_labels(labs)
        s_flat = as_s_array(s)
        out = np.empty((len(labs), s_flat.size), dtype=np.complex128)
        if s_flat.size == 0:
            return out
        s2 = s_flat * s_flat
        rest = [i for i, lab in enumerate(labs) if not self._has(lab)]
        if rest:
            assert self.fallback is not None
            out[rest] = self.fallback.scattering_factors([labs[i] for i in rest], s_flat)
        for i, lab in enumerate(labs):
            if self._has(lab):
                out[i] = self._factors(Species(lab, lab, 0), s_flat, s2)
        return out

    def _factors(self, sp: Species, s: np.ndarray, s2: np.ndarray) -> np.ndarray:
        label = sp.label
        if label in self._const:
            return np.full(s.shape, self._const[label], dtype=np.complex128)
        if label in self._gauss:
            a, b, c = self._gauss[label]
            f = np.full(s.shape, c, dtype=np.complex128)
            for ai, bi in zip(a, b):
                f += ai * np.exp(-bi * s2)
            return f
        s_grid, table = self._grids[label]
        lo, hi = float(s_grid[0]), float(s_grid[-1])
        smin, smax = float(s.min()), float(s.max())
        if smin < lo * (1 - 1e-12) or smax > hi * (1 + 1e-12):
            bad = smin if smin < lo else smax
            raise InvalidInputError(
                f"s = sinθ/λ = {bad:.6g} Å⁻¹ is outside the sampled range of the custom "
                f"table for {label!r}, {lo:g} <= s <= {hi:g} Å⁻¹"
            )
        sc = np.clip(s, lo, hi)
        if self.interpolation == "cubic":
            return np.asarray(table(sc), dtype=np.complex128)
        return np.interp(sc, s_grid, table.real) + 1j * np.interp(sc, s_grid, table.imag)

    def _metadata(self) -> dict[str, str | float | int]:
        meta: dict[str, str | float | int] = {
            "table": "custom",
            "table_source": self.source,
            "custom_labels": ", ".join(self.labels),
        }
        if self._grids:
            meta["interpolation"] = self.interpolation
        if self.fallback is not None:
            for k, v in self.fallback.metadata().items():
                meta[f"fallback_{k}"] = v
        return meta

    def cautions(self) -> list[str]:
        return list(self.fallback.cautions()) if self.fallback is not None else []


def _mapping(obj: Any, name: str) -> dict[str, Any]:
    if obj is None:
        return {}
    if not isinstance(obj, Mapping):
        raise InvalidInputError(f"`{name}` must be a dict keyed by label, got {type(obj).__name__}")
    for k in obj:
        if not isinstance(k, str):
            raise InvalidInputError(f"`{name}` keys must be labels (str), got {k!r}")
    return dict(obj)


def _complex_scalar(value: Any, where: str) -> complex:
    try:
        v = complex(value)
    except (TypeError, ValueError):
        raise InvalidInputError(f"{where} must be a number, got {value!r}") from None
    if not (np.isfinite(v.real) and np.isfinite(v.imag)):
        raise InvalidInputError(f"{where} = {value!r} is not finite")
    return v


def _gaussian_entry(label: str, entry: Any) -> tuple[np.ndarray, np.ndarray, complex]:
    where = f"`gaussians`[{label!r}]"
    if isinstance(entry, Mapping):
        a, b, c = entry.get("a"), entry.get("b"), entry.get("c", 0.0)
        if a is None or b is None:
            raise InvalidInputError(f"{where} must have keys 'a' and 'b' (and optionally 'c')")
    else:
        try:
            parts = tuple(entry)
        except TypeError:
            raise InvalidInputError(f"{where} must be (a, b) or (a, b, c)") from None
        if len(parts) == 2:
            (a, b), c = parts, 0.0
        elif len(parts) == 3:
            a, b, c = parts
        else:
            raise InvalidInputError(f"{where} must be (a, b) or (a, b, c), got {len(parts)} items")
    try:
        a_arr = np.asarray(a, dtype=np.complex128).reshape(-1)
        b_arr = np.asarray(b, dtype=np.float64).reshape(-1)
    except (TypeError, ValueError):
        raise InvalidInputError(f"{where}: a and b must be sequences of numbers") from None
    if a_arr.size != b_arr.size or a_arr.size == 0:
        raise InvalidInputError(
            f"{where}: a and b must have the same nonzero length, got {a_arr.size} and {b_arr.size}"
        )
    if not (np.all(np.isfinite(a_arr)) and np.all(np.isfinite(b_arr))):
        raise InvalidInputError(f"{where}: coefficients must be finite")
    if np.any(b_arr < 0):
        # a negative width makes f grow without bound with s; WK carbon has one small
        # negative b, so allow it only when tiny
        i = int(np.argmin(b_arr))
        if b_arr[i] < -1.0:
            raise InvalidInputError(
                f"{where}: b[{i}] = {float(b_arr[i])!r} Å² is negative; f(s) would grow without bound"
            )
    return a_arr, b_arr, _complex_scalar(c, f"{where} c")
