"""The probe interface shared by every radiation, and the point-scatterer probe.

A probe turns species labels and scattering-vector magnitudes into scattering factors. The
amplitude that kinemap sums is

    A(q) = Σ_j o_j f_j(s) T_j exp(+i q·r_j),   s = sinθ/λ = |q| / (4π)  (Å⁻¹),

and a probe supplies f_j(s) only: no Debye–Waller factor T_j and no occupancy o_j.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from ..errors import InvalidInputError
from ._species import Species, as_label_list, check_aliases, resolve


def as_s_array(s: Any, *, s_max: float | None = None, table: str = "") -> np.ndarray:
    """Validate and flatten sinθ/λ values.

    Parameters
    ----------
    s : array_like
        sinθ/λ in Å⁻¹, any shape.
    s_max : float, optional
        Largest s the table is valid for; larger values raise.
    table : str
        Name of the table, used in the error message.

    Returns
    -------
    numpy.ndarray
        1-D float64 copy-free view (or copy) of `s`.

    Raises
    ------
    InvalidInputError
        If `s` holds non-finite or negative values, or values above `s_max`.
    """
    try:
        arr = np.asarray(s, dtype=np.float64).reshape(-1)
    except (TypeError, ValueError) as exc:
        raise InvalidInputError(f"`s` (sinθ/λ, Å⁻¹) must be an array of real numbers: {exc}") from None
    if arr.size:
        if not np.all(np.isfinite(arr)):
            i = int(np.flatnonzero(~np.isfinite(arr))[0])
            raise InvalidInputError(f"`s` (sinθ/λ, Å⁻¹) holds a non-finite value {arr[i]!r} at flat index {i}")
        smin = float(arr.min())
        if smin < 0.0:
            i = int(np.argmin(arr))
            raise InvalidInputError(
                f"`s` (sinθ/λ, Å⁻¹) must be >= 0; got {smin!r} at flat index {i}"
            )
        if s_max is not None:
            smax = float(arr.max())
            if smax > s_max * (1.0 + 1e-12):
                i = int(np.argmax(arr))
                raise InvalidInputError(
                    f"`s` = sinθ/λ = {smax:.6g} Å⁻¹ (flat index {i}, |q| = {4 * np.pi * smax:.6g} Å⁻¹) "
                    f"is outside the range of {table or 'the table'}, which is valid for "
                    f"0 <= s <= {s_max:g} Å⁻¹ (|q| <= {4 * np.pi * s_max:.4g} Å⁻¹)"
                )
    return arr


class Probe:
    """Base class of the probes (X-ray, neutron, electron, custom, unit).

    Subclasses set :attr:`name` and :attr:`units` and implement :meth:`_factors` for one
    resolved species, :meth:`_check_species`, which raises for a species the table lacks, and
    :meth:`_metadata`, which names the table (``table``) and cites it (``table_source``).

    Parameters
    ----------
    aliases : dict of str to str, optional
        User labels mapped to species labels, e.g. ``{'Fe_a': 'Fe3+', 'Ow': 'O'}``.
    """

    name: str = "probe"
    units: str = ""
    #: Largest sinθ/λ (Å⁻¹) for which the tables hold; None for no limit.
    s_max: float | None = None

    def __init__(self, aliases: Mapping[str, str] | None = None) -> None:
        self.aliases: dict[str, str] = check_aliases(aliases)

    # -- public interface ---------------------------------------------------------------
    def check_labels(self, labels: Sequence[str]) -> None:
        """Check that every label can be given a scattering factor.

        Parameters
        ----------
        labels : sequence of str
            Species labels (elements, ions, isotopes or aliases).

        Raises
        ------
        InvalidInputError
            Naming the first label that cannot be resolved or that the table lacks, and what
            is available.
        """
        for lab in as_label_list(labels):
            self._resolve_checked(lab)

    def scattering_factors(self, labels: Sequence[str], s: Any) -> np.ndarray:
        """Scattering factors f_j(s) for each label, without Debye–Waller or occupancy.

        Parameters
        ----------
        labels : sequence of str
            Distinct species labels.
        s : array_like of float
            sinθ/λ = |q|/(4π) in Å⁻¹, any shape; it is flattened.

        Returns
        -------
        numpy.ndarray of complex128, shape (len(labels), s.size)
            Scattering factors in :attr:`units`.

        Raises
        ------
        InvalidInputError
            For an unknown label, a species the table lacks, or `s` outside the table's
            range, negative or non-finite.
        """
        labs = as_label_list(labels)
        species = [self._resolve_checked(lab) for lab in labs]
        s_flat = as_s_array(s, s_max=self.s_max, table=self._table_name())
        out = np.empty((len(species), s_flat.size), dtype=np.complex128)
        if s_flat.size == 0:
            return out
        s2 = s_flat * s_flat
        for i, sp in enumerate(species):
            out[i] = self._factors(sp, s_flat, s2)
        return out

    def metadata(self) -> dict[str, str | float | int]:
        """Description of the probe for pattern metadata.

        Returns
        -------
        dict of str to str, float or int
            At least ``probe`` (name), ``units``, ``table`` (short name of the table used)
            and ``table_source`` (its full citation); probe-specific entries follow.
        """
        meta: dict[str, str | float | int] = {"probe": self.name, "units": self.units}
        if self.aliases:
            meta["aliases"] = ", ".join(f"{k}->{v}" for k, v in sorted(self.aliases.items()))
        meta.update(self._metadata())
        return meta

    def cautions(self) -> list[str]:
        """Cautions a user should read with results from this probe (may be empty)."""
        return []

    def __repr__(self) -> str:
        return f"{type(self).__name__}()"

    # -- hooks for subclasses -----------------------------------------------------------
    def _resolve_checked(self, label: str) -> Species:
        sp = resolve(label, self.aliases)
        self._check_species(sp)
        return sp

    def _check_species(self, sp: Species) -> None:  # pragma: no cover - overridden
        raise NotImplementedError

    def _factors(self, sp: Species, s: np.ndarray, s2: np.ndarray) -> np.ndarray:  # pragma: no cover
        raise NotImplementedError

    def _metadata(self) -> dict[str, str | float | int]:
        return {}

    def _table_name(self) -> str:
        return self.name + " table"


class UnitProbe(Probe):
    """Point scatterers: f = 1 (dimensionless) for every label and every s.

    Used for geometry tests of lattices and tilings, where only positions matter. Any string
    label is accepted, so tiling vertex classes can be given free names.
    """

    name = "unit"
    units = "1"

    def __init__(self) -> None:
        super().__init__(None)

    def check_labels(self, labels: Sequence[str]) -> None:
        as_label_list(labels)

    def scattering_factors(self, labels: Sequence[str], s: Any) -> np.ndarray:
        labs = as_label_list(labels)
        s_flat = as_s_array(s)
        return np.ones((len(labs), s_flat.size), dtype=np.complex128)

    def _metadata(self) -> dict[str, str | float | int]:
        return {"table": "unit", "table_source": "none: every scatterer has f = 1 (point scatterers)"}
