"""X-ray atomic form factors: Waasmaier & Kirfel (1995) f0(s) plus optional Henke f′, f″."""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from ..errors import InvalidInputError
from ._species import Species
from .base import Probe

#: h·c in keV·Å (CODATA 2018, exact SI constants): λ[Å] = HC_KEV_ANGSTROM / E[keV].
HC_KEV_ANGSTROM = 12.398419843320026

WK_CITATION = (
    "D. Waasmaier & A. Kirfel, 'New analytical scattering-factor functions for free atoms "
    "and ions', Acta Cryst. A51 (1995) 416-431, doi:10.1107/S0108767394013292; "
    "f0(s) = c + sum_{i=1..5} a_i exp(-b_i s^2), 0 <= s = sin(theta)/lambda <= 6 1/angstrom"
)
HENKE_CITATION = (
    "B. L. Henke, E. M. Gullikson & J. C. Davis, 'X-ray interactions: photoabsorption, "
    "scattering, transmission, and reflection at E = 50-30,000 eV, Z = 1-92', Atomic Data "
    "and Nuclear Data Tables 54 (1993) 181-342, with the LBL CXRO updates carried by "
    "periodictable"
)
#: Validity limit of the Waasmaier–Kirfel fits (Å⁻¹).
WK_S_MAX = 6.0


def _library_version() -> str:
    import periodictable

    return str(getattr(periodictable, "__version__", "unknown"))


_WK_TABLE: dict[str, tuple[np.ndarray, np.ndarray, float]] | None = None


def wk_table() -> dict[str, tuple[np.ndarray, np.ndarray, float]]:
    """Waasmaier–Kirfel coefficients from periodictable, keyed by ``'Fe'``, ``'Fe3+'``, ``'O2-'``.

    Returns
    -------
    dict
        symbol -> (a[5], b[5] in Å², c); the valence-density entries of the source file
        ('Cval', 'Siva') are left out.
    """
    global _WK_TABLE
    if _WK_TABLE is None:
        from periodictable import cromermann

        from ._species import SYMBOLS

        # Only the public lookup is used: try every element and every ion form.
        table = {}
        for sym in SYMBOLS[1:]:
            for key in [sym] + [f"{sym}{n}{sign}" for n in range(1, 9) for sign in "+-"]:
                try:
                    cmf = cromermann.getCMformula(key)
                except KeyError:
                    continue
                table[key] = (
                    np.asarray(cmf.a, dtype=np.float64).copy(),
                    np.asarray(cmf.b, dtype=np.float64).copy(),
                    float(cmf.c),
                )
        _WK_TABLE = table
    return _WK_TABLE


def wk_f0(symbol: str, s: np.ndarray) -> np.ndarray:
    """Waasmaier–Kirfel f0(s) in electrons for a table symbol (``'Fe'``, ``'Fe3+'``).

    Parameters
    ----------
    symbol : str
        Key of :func:`wk_table`.
    s : numpy.ndarray
        sinθ/λ in Å⁻¹ (not range-checked here).

    Returns
    -------
    numpy.ndarray
        f0 in electrons, same shape as `s`.
    """
    a, b, c = wk_table()[symbol]
    s2 = np.asarray(s, dtype=np.float64) ** 2
    out = np.full(s2.shape, c, dtype=np.float64)
    for ai, bi in zip(a, b):
        out += ai * np.exp(-bi * s2)
    return out


def _henke_element(z: int):
    import periodictable

    el = periodictable.elements[z]
    table = el.xray.sftable if z <= 92 else None
    return el, table


def henke_range_kev(z: int) -> tuple[float, float]:
    """Energy range (keV) over which the Henke table gives f1 and f2 for element `z`."""
    el, table = _henke_element(z)
    if table is None:
        raise InvalidInputError(
            f"no Henke anomalous-scattering table for {el.symbol} (Z = {z}); the Henke tables "
            "cover Z = 1-92"
        )
    e, f1, f2 = table
    ok = np.isfinite(f1) & np.isfinite(f2) & (f2 > 0)
    return float(e[ok].min()), float(e[ok].max())


def henke_fprime(z: int, energy_kev: float) -> tuple[float, float]:
    """Anomalous terms f′ and f″ (electrons) of element `z` at `energy_kev` from Henke tables.

    Notes
    -----
    The Henke f1 is the total forward-scattering factor including the energy-independent
    relativistic correction, f1 = Z* + f′_Henke with Z* = Z − (Z/82.5)^2.37. It is combined
    with the Waasmaier–Kirfel f0 (which tends to Z at s = 0) as
    f(s, E) = f0(s) + [f1(E) − Z] + i f2(E), so that f(0, E) equals the tabulated total
    f1 + i f2. Values are linearly interpolated in the table (f2 log-log), as periodictable does.
    """
    el, _ = _henke_element(z)
    lo, hi = henke_range_kev(z)
    if not (lo <= energy_kev <= hi):
        raise InvalidInputError(
            f"X-ray energy {energy_kev:.6g} keV (wavelength "
            f"{HC_KEV_ANGSTROM / energy_kev:.6g} Å) is outside the Henke anomalous-scattering "
            f"table for {el.symbol}, which covers {lo:.6g}-{hi:.6g} keV "
            f"({HC_KEV_ANGSTROM / hi:.4g}-{HC_KEV_ANGSTROM / lo:.4g} Å); give no energy to use "
            "f0 alone (f′, f″ are small far above absorption edges)"
        )
    f1, f2 = el.xray.scattering_factors(energy=energy_kev)
    f1 = float(f1)
    f2 = float(f2)
    if not (np.isfinite(f1) and np.isfinite(f2)):  # pragma: no cover - range checked above
        raise InvalidInputError(
            f"Henke table has no value for {el.symbol} at {energy_kev:.6g} keV"
        )
    return f1 - z, f2


class XRayProbe(Probe):
    """X-ray atomic form factors in electrons.

    f(s) = f0(s) of Waasmaier & Kirfel (1995) for neutral atoms and ions, read from the
    `periodictable` library; with an energy or wavelength, plus the anomalous terms
    f′(E) + i f″(E) of Henke, Gullikson & Davis (1993), also from `periodictable`.

    Parameters
    ----------
    energy_kev : float, optional
        Photon energy in keV. Give this or `wavelength` to include f′ + i f″.
    wavelength : float, optional
        Wavelength in Å (λ = 12.3984198 keV·Å / E).
    anomalous : bool, optional
        Include f′ + i f″ when an energy or wavelength is given (default True). With
        ``anomalous=False`` the energy is only recorded in the metadata.
    aliases : dict of str to str, optional
        User labels mapped to species labels, e.g. ``{'Fe_a': 'Fe3+'}``.

    Notes
    -----
    * s = sinθ/λ in Å⁻¹, valid for 0 ≤ s ≤ 6 Å⁻¹ (the range of the fits); larger s raises.
    * Isotopes scatter like their element ('D' → 'H'); ions use their own f0 where the table
      has one ('Fe3+', 'O2-'); an ion the table lacks raises, naming the ions it has.
    * The Henke tables hold neutral atoms (Z = 1–92, about 0.03–30 keV); ions get the f′, f″
      of their neutral atom. Energies outside the table raise.
    * f′ = f1 − Z and f″ = f2, where f1 is the Henke total forward factor (it includes the
      relativistic correction Z − Z*). Do not mix with Chantler-table f′ values, whose
      convention differs.
    """

    name = "xray"
    units = "electrons"
    s_max = WK_S_MAX

    def __init__(
        self,
        energy_kev: float | None = None,
        wavelength: float | None = None,
        *,
        anomalous: bool = True,
        aliases: Mapping[str, str] | None = None,
    ) -> None:
        super().__init__(aliases)
        if energy_kev is not None and wavelength is not None:
            raise InvalidInputError(
                f"give either `energy_kev` ({energy_kev!r}) or `wavelength` ({wavelength!r}), not both"
            )
        self.energy_kev: float | None = None
        self.wavelength: float | None = None
        if energy_kev is not None:
            e = _positive_float(energy_kev, "energy_kev", "keV")
            self.energy_kev, self.wavelength = e, HC_KEV_ANGSTROM / e
        elif wavelength is not None:
            w = _positive_float(wavelength, "wavelength", "Å")
            self.energy_kev, self.wavelength = HC_KEV_ANGSTROM / w, w
        self.anomalous = bool(anomalous) and self.energy_kev is not None
        self._fprime_cache: dict[int, tuple[float, float]] = {}

    def __repr__(self) -> str:
        if self.energy_kev is None:
            return "XRayProbe()"
        return f"XRayProbe(energy_kev={self.energy_kev!r}, anomalous={self.anomalous})"

    # -- species -------------------------------------------------------------------------
    def table_symbol(self, sp: Species) -> str:
        """Key of the Waasmaier–Kirfel table used for species `sp`."""
        return sp.ion_name

    def _check_species(self, sp: Species) -> None:
        table = wk_table()
        key = self.table_symbol(sp)
        if key not in table:
            if sp.charge != 0 and sp.symbol in table:
                ions = sorted(k for k in table if _base(k) == sp.symbol and k != sp.symbol)
                have = ", ".join(ions) if ions else "none"
                raise InvalidInputError(
                    f"species {sp.label!r}: the Waasmaier-Kirfel X-ray table has no ion "
                    f"{key!r}; ions of {sp.symbol} in the table: {have}. Map the label to one "
                    f"of these or to the neutral atom with `aliases`, e.g. "
                    f"aliases={{{sp.label!r}: {sp.symbol!r}}}"
                )
            raise InvalidInputError(
                f"species {sp.label!r}: element {sp.symbol} (Z = {sp.z}) is not in the "
                "Waasmaier-Kirfel X-ray table, which covers Z = 1-98 (H to Cf); give it a "
                "custom table with CustomProbe"
            )
        if self.anomalous:
            self._fprime(sp.z)

    def _fprime(self, z: int) -> tuple[float, float]:
        if z not in self._fprime_cache:
            assert self.energy_kev is not None
            self._fprime_cache[z] = henke_fprime(z, self.energy_kev)
        return self._fprime_cache[z]

    def _factors(self, sp: Species, s: np.ndarray, s2: np.ndarray) -> np.ndarray:
        a, b, c = wk_table()[self.table_symbol(sp)]
        f = np.full(s.shape, c, dtype=np.float64)
        for ai, bi in zip(a, b):
            f += ai * np.exp(-bi * s2)
        if self.anomalous:
            fp, fpp = self._fprime(sp.z)
            return (f + fp) + 1j * fpp
        return f.astype(np.complex128)

    # -- description ---------------------------------------------------------------------
    def _table_name(self) -> str:
        return "the Waasmaier-Kirfel X-ray form-factor fits"

    def _metadata(self) -> dict[str, str | float | int]:
        meta: dict[str, str | float | int] = {
            "table": "waasmaier-kirfel-1995",
            "table_source": WK_CITATION,
            "table_library": f"periodictable {_library_version()} (periodictable.cromermann)",
            "s_max_inv_angstrom": WK_S_MAX,
        }
        if self.energy_kev is not None and self.wavelength is not None:  # (set together)
            meta["energy_kev"] = self.energy_kev
            meta["wavelength_angstrom"] = float(self.wavelength)
        if self.anomalous:
            meta["anomalous_source"] = HENKE_CITATION
            meta["anomalous_library"] = f"periodictable {_library_version()} (periodictable.xsf)"
            meta["anomalous_convention"] = (
                "f = f0(s) + (f1(E) - Z) + i f2(E); f1, f2 Henke neutral-atom values, "
                "also used for ions"
            )
        else:
            meta["anomalous_source"] = "none (f0 only)"
        return meta


def _base(symbol: str) -> str:
    return symbol.rstrip("0123456789+-")


def _positive_float(value: object, name: str, unit: str) -> float:
    try:
        v = float(value)  # type: ignore[arg-type]  # any input: float() refuses what it cannot convert
    except (TypeError, ValueError):
        raise InvalidInputError(f"`{name}` must be a number in {unit}, got {value!r}") from None
    if not np.isfinite(v) or v <= 0:
        raise InvalidInputError(f"`{name}` must be a positive finite number in {unit}, got {value!r}")
    return v
