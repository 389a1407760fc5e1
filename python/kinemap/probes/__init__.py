"""Probes: scattering factors of X-rays, neutrons and electrons, and user tables.

A probe maps species labels and s = sinθ/λ (Å⁻¹) to scattering factors f_j(s), without
Debye–Waller factor and without occupancy:

================  ============  =============================================================
probe             units         table
================  ============  =============================================================
``"xray"``        electrons     Waasmaier & Kirfel (1995) f0 (+ Henke f′, f″ at an energy)
``"neutron"``     fm            bound coherent lengths b_c (periodictable: Rauch &
                                Waschkowski 2003 with later updates), complex b' − i b''
``"electron"``    Å             Mott–Bethe transform of the Waasmaier & Kirfel (1995) X-ray
                                f0 (atoms and ions, s ≤ 6 Å⁻¹), or with ``table="peng1996"``
                                Peng, Ren, Dudarev & Whelan (1996), 5 Gaussians, s ≤ 2 Å⁻¹
                                (typed from memory, see docs/electron_factors.md);
                                multiplied by γ (see ElectronProbe)
``"unit"``        1             f = 1 for every label (point scatterers)
CustomProbe       user's        per-label Gaussian sums, constants or sampled f(s) grids
================  ============  =============================================================

Examples
--------
>>> from kinemap.probes import get_probe
>>> p = get_probe("xray")
>>> round(float(p.scattering_factors(["Fe"], [0.25]).real[0, 0]), 4)
18.3594
"""

from __future__ import annotations

from typing import Any

from ..errors import InvalidInputError
from ._species import Species, parse_species
from .base import Probe, UnitProbe
from .custom import CustomProbe
from .electron import ElectronProbe
from .neutron import NeutronProbe
from .xray import XRayProbe

_BY_NAME: dict[str, type[Probe]] = {
    "xray": XRayProbe,
    "x-ray": XRayProbe,
    "neutron": NeutronProbe,
    "electron": ElectronProbe,
    "unit": UnitProbe,
}


def get_probe(probe: str | Probe = "xray", **kwargs: Any) -> Probe:
    """Return a probe chosen by name, or pass a probe instance through.

    Parameters
    ----------
    probe : str or Probe
        ``"xray"``, ``"neutron"``, ``"electron"`` or ``"unit"`` (case-insensitive), or a
        :class:`Probe` instance (returned unchanged; `kwargs` must then be empty).
    **kwargs
        Passed to the probe class, e.g. ``get_probe("electron", voltage_kv=300)`` or
        ``get_probe("xray", energy_kev=8.048, aliases={"Fe_a": "Fe3+"})``.

    Returns
    -------
    Probe

    Raises
    ------
    InvalidInputError
        For an unknown name, keyword arguments given with a probe instance, or keyword
        arguments the probe class does not take.
    """
    if isinstance(probe, Probe):
        if kwargs:
            raise InvalidInputError(
                f"`probe` is already a {type(probe).__name__} instance; keyword arguments "
                f"{sorted(kwargs)} cannot be applied to it"
            )
        return probe
    if not isinstance(probe, str):
        raise InvalidInputError(
            f"`probe` must be a name ({', '.join(sorted(_BY_NAME))}) or a Probe instance, "
            f"got {type(probe).__name__}"
        )
    cls = _BY_NAME.get(probe.strip().lower())
    if cls is None:
        raise InvalidInputError(
            f"unknown probe {probe!r}; available: 'xray', 'neutron', 'electron', 'unit', or a "
            "Probe instance (e.g. CustomProbe for user tables)"
        )
    try:
        return cls(**kwargs)
    except TypeError as exc:
        raise InvalidInputError(f"probe {probe!r}: {exc}") from None


__all__ = [
    "Probe",
    "get_probe",
    "XRayProbe",
    "NeutronProbe",
    "ElectronProbe",
    "CustomProbe",
    "UnitProbe",
    "Species",
    "parse_species",
]
