"""Electron scattering factors in Å: Mott–Bethe from the X-ray fits (default) or Peng et al. (1996).

See :mod:`kinemap.probes._electron_tables` for the two tables and docs/electron_factors.md
for their comparison, element by element.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from ..errors import InvalidInputError
from ._electron_tables import (
    BOHR_RADIUS,
    MOTT_BETHE_CITATION,
    MOTT_BETHE_CONSTANT,
    MOTT_BETHE_S_MAX,
    PENG_CITATION,
    PENG_DATA_FILE,
    PENG_S_MAX,
    mott_bethe_fe,
    peng_agreement,
    peng_agreement_table,
    peng_fe,
    peng_table,
)
from ._species import Species
from .base import Probe
from .xray import _library_version, wk_table

#: Electron rest energy m0 c² in keV (CODATA 2018).
ELECTRON_REST_KEV = 510.99895000
#: h·c in keV·Å (CODATA 2018).
HC_KEV_ANGSTROM = 12.398419843320026
#: Names of the electron tables, for ``ElectronProbe(table=...)``.
TABLES = ("mott-bethe", "peng1996")
#: Kept for callers of the earlier module: the shipped Peng data file.
DATA_FILE = PENG_DATA_FILE

DYNAMICAL_CAUTION = (
    "Electron scattering is strong: the kinematic (single-scattering) approximation "
    "understates dynamical (multiple) scattering for all but very thin or weakly scattering "
    "specimens. For crystals thicker than a fraction of the extinction distance (often a few "
    "to tens of nm), or with heavy atoms, intensities computed here are not quantitative; "
    "use them for geometry and for thin or weakly scattering samples."
)


def relativistic_gamma(voltage_kv: float) -> float:
    """Lorentz factor γ = 1 + eV/(m0 c²) of electrons accelerated through `voltage_kv` kV."""
    return 1.0 + float(voltage_kv) / ELECTRON_REST_KEV


def electron_wavelength(voltage_kv: float) -> float:
    """Relativistic electron wavelength in Å: λ = hc / sqrt(eV (2 m0c² + eV))."""
    e = float(voltage_kv)
    return HC_KEV_ANGSTROM / np.sqrt(e * (2.0 * ELECTRON_REST_KEV + e))


class ElectronProbe(Probe):
    """Electron scattering factors in Å: Mott–Bethe from Waasmaier–Kirfel, or Peng et al. (1996).

    Parameters
    ----------
    voltage_kv : float
        Accelerating voltage in kV (default 200). Sets γ and the wavelength.
    table : {"mott-bethe", "peng1996"}
        Which f_e(s) to use (default ``"mott-bethe"``):

        * ``"mott-bethe"``: the Mott–Bethe formula f_e(s) = (Z − f_x(s))/(8π² a0 s²) applied
          to the Waasmaier & Kirfel (1995) X-ray form factors f_x of the `periodictable`
          library (the X-ray probe's table). Neutral atoms H–Cf and the ions of that table;
          0 ≤ s ≤ 6 Å⁻¹.
        * ``"peng1996"``: the 5-Gaussian fits of Peng, Ren, Dudarev & Whelan (1996) (ITC Vol.
          C Table 4.3.2.2), neutral atoms H–Cf, 0 ≤ s ≤ 2 Å⁻¹. The shipped coefficients were
          typed from memory of the published table; each row agrees with the Mott–Bethe table
          within 1 % (median) and 7.5 % (worst, Rb and Cs) over 0.2 ≤ s ≤ 1.5 Å⁻¹, as listed
          per element in docs/electron_factors.md.
    include_gamma : bool
        Multiply f_e(s) by γ = 1 + eV/(m0 c²) (default True), giving the amplitudes an
        electron beam of this voltage actually sees. False returns the non-relativistic
        f_e(s) of the table.
    aliases : dict of str to str, optional
        User labels mapped to species labels, e.g. ``{'Si_t': 'Si'}``.

    Raises
    ------
    InvalidInputError
        For a voltage that is not a positive number, or an unknown `table`.

    Notes
    -----
    * Mott–Bethe is evaluated with an analytic s → 0 limit: with the fit's electron count
      c + Σa_i in place of Z − charge, Z − f_x(s) = charge + Σ_i a_i (1 − exp(−b_i s²)), so
      f_e(s) = Σ_i a_i b_i g(b_i s²)/(8π² a0) + charge/(8π² a0 s²), g(x) = (1 − e^{−x})/x,
      and a neutral atom has f_e(0) = Σ_i a_i b_i/(8π² a0), 1/(8π² a0) = 0.0239337 Å⁻¹.
    * Ions (``'O2-'``, ``'Fe3+'``; Mott–Bethe table only) keep their Coulomb term
      charge/(8π² a0 s²): it diverges as s → 0, so a map of ions that includes q = 0 raises
      (leave q = 0 out, or map the ion to its neutral atom with `aliases`). The Coulomb
      term of a neutral crystal's cations and anions cancels only in the sum over a cell.
    * Isotopes scatter like their element.
    * The kinematic approximation understates dynamical scattering; see :meth:`cautions`.
    * ``pattern.metadata["probe"]`` records the table (``"table"``) and its citation
      (``"table_source"``).

    Examples
    --------
    >>> p = ElectronProbe(voltage_kv=200, include_gamma=False)
    >>> round(float(p.scattering_factors(["H"], [0.0]).real[0, 0]), 3)   # ≈ a0 for hydrogen
    0.529
    """

    name = "electron"
    units = "angstrom"

    def __init__(
        self,
        voltage_kv: float = 200.0,
        *,
        table: str = "mott-bethe",
        include_gamma: bool = True,
        aliases: Mapping[str, str] | None = None,
    ) -> None:
        super().__init__(aliases)
        try:
            v = float(voltage_kv)
        except (TypeError, ValueError):
            raise InvalidInputError(f"`voltage_kv` must be a number in kV, got {voltage_kv!r}") from None
        if not np.isfinite(v) or v <= 0:
            raise InvalidInputError(f"`voltage_kv` must be a positive finite number in kV, got {voltage_kv!r}")
        if not isinstance(table, str) or table not in TABLES:
            raise InvalidInputError(
                f"`table` must be one of {', '.join(repr(t) for t in TABLES)}, got {table!r}"
            )
        self.voltage_kv = v
        self.table = table
        self.s_max: float = MOTT_BETHE_S_MAX if table == "mott-bethe" else PENG_S_MAX
        self.gamma = relativistic_gamma(v)
        self.wavelength = electron_wavelength(v)
        self.include_gamma = bool(include_gamma)

    def __repr__(self) -> str:
        return (f"ElectronProbe(voltage_kv={self.voltage_kv!r}, table={self.table!r}, "
                f"include_gamma={self.include_gamma})")

    def _check_species(self, sp: Species) -> None:
        if self.table == "peng1996":
            self._check_peng(sp)
            return
        key = sp.ion_name
        table = wk_table()
        if key in table:
            return
        if sp.charge != 0 and sp.symbol in table:
            ions = sorted(k for k in table if k.rstrip("0123456789+-") == sp.symbol and k != sp.symbol)
            raise InvalidInputError(
                f"species {sp.label!r}: the Mott-Bethe electron table (from the "
                f"Waasmaier-Kirfel X-ray table) has no ion {key!r}; ions of {sp.symbol} in the "
                f"table: {', '.join(ions) if ions else 'none'}. Map the label to one of these "
                f"or to the neutral atom with `aliases`, e.g. aliases={{{sp.label!r}: {sp.symbol!r}}}"
            )
        raise InvalidInputError(
            f"species {sp.label!r}: element {sp.symbol} (Z = {sp.z}) is not in the Mott-Bethe "
            "electron table (from the Waasmaier-Kirfel X-ray table), which covers Z = 1-98 "
            "(H to Cf); give it a custom table with CustomProbe"
        )

    def _check_peng(self, sp: Species) -> None:
        table = peng_table()
        if sp.charge != 0:
            raise InvalidInputError(
                f"species {sp.label!r}: the Peng et al. (1996) electron table holds neutral "
                f"atoms only, not the ion {sp.ion_name}; use table='mott-bethe' (which has "
                f"ions), map the label to the neutral atom with `aliases`, e.g. "
                f"aliases={{{sp.label!r}: {sp.symbol!r}}}, or supply the ion's factors with "
                "CustomProbe"
            )
        if sp.symbol not in table:
            zs = sorted(z for z, _, _ in table.values())
            raise InvalidInputError(
                f"species {sp.label!r}: element {sp.symbol} (Z = {sp.z}) is not in the Peng "
                f"et al. (1996) electron table, which covers Z = {zs[0]}-{zs[-1]}"
            )

    def _factors(self, sp: Species, s: np.ndarray, s2: np.ndarray) -> np.ndarray:
        if self.table == "peng1996":
            f = peng_fe(sp.symbol, s)
        else:
            try:
                f = mott_bethe_fe(sp.ion_name, s)
            except InvalidInputError as exc:
                raise InvalidInputError(
                    f"species {sp.label!r}: {exc}. Leave q = 0 out of the grid, or map the "
                    f"label to the neutral atom with aliases={{{sp.label!r}: {sp.symbol!r}}}"
                ) from None
        if self.include_gamma:
            f = f * self.gamma
        return f.astype(np.complex128)

    def _table_name(self) -> str:
        if self.table == "peng1996":
            return "the Peng et al. (1996) electron scattering-factor fits"
        return "the Mott-Bethe electron table (Waasmaier-Kirfel X-ray fits)"

    def _metadata(self) -> dict[str, str | float | int]:
        meta: dict[str, str | float | int] = {"table": self.table}
        if self.table == "peng1996":
            meta["table_source"] = PENG_CITATION
            meta["table_file"] = f"kinemap/probes/data/{PENG_DATA_FILE}"
        else:
            meta["table_source"] = MOTT_BETHE_CITATION
            meta["table_library"] = f"periodictable {_library_version()} (periodictable.cromermann)"
            meta["ions"] = (
                "ions include the Coulomb term charge/(8 pi^2 a0 s^2), which diverges as s -> 0"
            )
        meta.update({
            "s_max_inv_angstrom": self.s_max,
            "voltage_kv": self.voltage_kv,
            "wavelength_angstrom": float(self.wavelength),
            "gamma": self.gamma,
            "gamma_applied": (
                "yes: factors are gamma * f_e(s)" if self.include_gamma
                else "no: factors are the non-relativistic f_e(s)"
            ),
        })
        return meta

    def cautions(self) -> list[str]:
        return [DYNAMICAL_CAUTION]


__all__ = [
    "ElectronProbe",
    "TABLES",
    "BOHR_RADIUS",
    "MOTT_BETHE_CONSTANT",
    "mott_bethe_fe",
    "peng_fe",
    "peng_table",
    "peng_agreement",
    "peng_agreement_table",
    "relativistic_gamma",
    "electron_wavelength",
]
