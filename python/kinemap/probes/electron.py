"""Electron scattering factors: Peng, Ren, Dudarev & Whelan (1996), shipped as a data file."""

from __future__ import annotations

from importlib import resources
from typing import Mapping

import numpy as np

from ..errors import InvalidInputError
from ._species import Species
from .base import Probe

PENG_CITATION = (
    "L.-M. Peng, G. Ren, S. L. Dudarev & M. J. Whelan, 'Robust parameterization of elastic "
    "and absorptive electron atomic scattering factors', Acta Cryst. A52 (1996) 257-276, "
    "doi:10.1107/S0108767395014371 (= International Tables for Crystallography Vol. C, "
    "Table 4.3.2.2); f_e(s) = sum_{i=1..5} a_i exp(-b_i s^2), neutral atoms, "
    "0 <= s <= 2 1/angstrom"
)
#: Validity limit of the 5-Gaussian fits of ITC Vol. C Table 4.3.2.2 (Å⁻¹).
PENG_S_MAX = 2.0
#: Electron rest energy m0 c² in keV (CODATA 2018).
ELECTRON_REST_KEV = 510.99895000
#: h·c in keV·Å (CODATA 2018).
HC_KEV_ANGSTROM = 12.398419843320026
DATA_FILE = "peng1996_elastic_s2.txt"

DYNAMICAL_CAUTION = (
    "Electron scattering is strong: the kinematic (single-scattering) approximation "
    "understates dynamical (multiple) scattering for all but very thin or weakly scattering "
    "specimens. For crystals thicker than a fraction of the extinction distance (often a few "
    "to tens of nm), or with heavy atoms, intensities computed here are not quantitative; "
    "use them for geometry and for thin or weakly scattering samples."
)

_PENG: dict[str, tuple[int, np.ndarray, np.ndarray]] | None = None


def peng_table() -> dict[str, tuple[int, np.ndarray, np.ndarray]]:
    """Peng et al. (1996) coefficients, read from the shipped data file.

    Returns
    -------
    dict
        symbol -> (Z, a[5] in Å, b[5] in Å²).
    """
    global _PENG
    if _PENG is None:
        text = resources.files(__package__).joinpath("data").joinpath(DATA_FILE).read_text(encoding="utf-8")
        table: dict[str, tuple[int, np.ndarray, np.ndarray]] = {}
        for lineno, line in enumerate(text.splitlines(), 1):
            line = line.strip()
            if not line or line.startswith("#"):
                continue
            parts = line.split()
            if len(parts) != 12:  # pragma: no cover - guards the shipped file
                raise RuntimeError(f"{DATA_FILE} line {lineno}: expected 12 columns, got {len(parts)}")
            z, sym = int(parts[0]), parts[1]
            vals = np.array([float(x) for x in parts[2:]], dtype=np.float64)
            table[sym] = (z, vals[:5], vals[5:])
        _PENG = table
    return _PENG


def peng_fe(symbol: str, s: np.ndarray) -> np.ndarray:
    """Non-relativistic electron scattering factor f_e(s) in Å (no γ), Peng et al. (1996).

    Parameters
    ----------
    symbol : str
        Element symbol present in the table.
    s : numpy.ndarray
        sinθ/λ in Å⁻¹ (not range-checked here).

    Returns
    -------
    numpy.ndarray
        f_e in Å, same shape as `s`.
    """
    _, a, b = peng_table()[symbol]
    s2 = np.asarray(s, dtype=np.float64) ** 2
    out = np.zeros(s2.shape, dtype=np.float64)
    for ai, bi in zip(a, b):
        out += ai * np.exp(-bi * s2)
    return out


def relativistic_gamma(voltage_kv: float) -> float:
    """Lorentz factor γ = 1 + eV/(m0 c²) of electrons accelerated through `voltage_kv` kV."""
    return 1.0 + float(voltage_kv) / ELECTRON_REST_KEV


def electron_wavelength(voltage_kv: float) -> float:
    """Relativistic electron wavelength in Å: λ = hc / sqrt(eV (2 m0c² + eV))."""
    e = float(voltage_kv)
    return HC_KEV_ANGSTROM / np.sqrt(e * (2.0 * ELECTRON_REST_KEV + e))


class ElectronProbe(Probe):
    """Electron scattering factors in Å from the Peng et al. (1996) table.

    Parameters
    ----------
    voltage_kv : float
        Accelerating voltage in kV (default 200). Sets γ and the wavelength.
    include_gamma : bool
        Multiply f_e(s) by γ = 1 + eV/(m0 c²) (default True), giving the amplitudes an
        electron beam of this voltage actually sees. False returns the tabulated
        (non-relativistic) f_e(s).
    aliases : dict of str to str, optional
        User labels mapped to species labels, e.g. ``{'Si_t': 'Si'}``.

    Notes
    -----
    * f_e(s) = Σ_{i=1..5} a_i exp(−b_i s²), neutral atoms H–Cf (Z = 1–98), valid for
      0 ≤ s = sinθ/λ ≤ 2 Å⁻¹ (ITC Vol. C Table 4.3.2.2); larger s raises.
    * The table is shipped in ``kinemap/probes/data/peng1996_elastic_s2.txt``.
    * Ions are not in the table and raise (their f_e diverges as s → 0); map them to the
      neutral atom with `aliases` if a neutral-atom approximation is acceptable. Isotopes
      scatter like their element.
    * The kinematic approximation understates dynamical scattering; see :meth:`cautions`.
    """

    name = "electron"
    units = "angstrom"
    s_max = PENG_S_MAX

    def __init__(
        self,
        voltage_kv: float = 200.0,
        *,
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
        self.voltage_kv = v
        self.gamma = relativistic_gamma(v)
        self.wavelength = electron_wavelength(v)
        self.include_gamma = bool(include_gamma)

    def __repr__(self) -> str:
        return f"ElectronProbe(voltage_kv={self.voltage_kv!r}, include_gamma={self.include_gamma})"

    def _check_species(self, sp: Species) -> None:
        table = peng_table()
        if sp.charge != 0:
            raise InvalidInputError(
                f"species {sp.label!r}: the Peng et al. (1996) electron table holds neutral "
                f"atoms only, not the ion {sp.ion_name}; map the label to the neutral atom with "
                f"`aliases`, e.g. aliases={{{sp.label!r}: {sp.symbol!r}}}, or supply the ion's "
                "factors with CustomProbe"
            )
        if sp.symbol not in table:
            zs = sorted(z for z, _, _ in table.values())
            raise InvalidInputError(
                f"species {sp.label!r}: element {sp.symbol} (Z = {sp.z}) is not in the Peng "
                f"et al. (1996) electron table, which covers Z = {zs[0]}-{zs[-1]}"
            )

    def _factors(self, sp: Species, s: np.ndarray, s2: np.ndarray) -> np.ndarray:
        _, a, b = peng_table()[sp.symbol]
        f = np.zeros(s.shape, dtype=np.float64)
        for ai, bi in zip(a, b):
            f += ai * np.exp(-bi * s2)
        if self.include_gamma:
            f *= self.gamma
        return f.astype(np.complex128)

    def _table_name(self) -> str:
        return "the Peng et al. (1996) electron scattering-factor fits"

    def _metadata(self) -> dict[str, str | float | int]:
        return {
            "table_source": PENG_CITATION,
            "table_file": f"kinemap/probes/data/{DATA_FILE}",
            "s_max_inv_angstrom": PENG_S_MAX,
            "voltage_kv": self.voltage_kv,
            "wavelength_angstrom": float(self.wavelength),
            "gamma": self.gamma,
            "gamma_applied": (
                "yes: factors are gamma * f_e(s)" if self.include_gamma
                else "no: factors are the tabulated non-relativistic f_e(s)"
            ),
        }

    def cautions(self) -> list[str]:
        return [DYNAMICAL_CAUTION]
