"""Neutron nuclear scattering: bound coherent scattering lengths b_c in fm."""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from ..errors import InvalidInputError
from ._species import Species, parse_species
from .base import Probe

NEUTRON_TABLE_CITATION = (
    "bound coherent scattering lengths from the periodictable library (periodictable.nsf): "
    "H. Rauch & W. Waschkowski, 'Neutron scattering lengths', ILL Neutron Data Booklet, 2nd "
    "ed. (2003) and Landolt-Boernstein I/16A (2000), doi:10.1007/10499706_6, with the later "
    "measurements listed in periodictable.nsf (e.g. 1H, 2H, 12C, 16O: Snow 2020; 6Li, 7Li: "
    "Gehlhaar 2025); imaginary parts from the tabulated absorption cross-section at 1.798 "
    "angstrom, Im b = sigma_a / (2 lambda). The compilation of V. F. Sears, Neutron News "
    "3(3) (1992) 26-37 (= ITC Vol. C Table 4.4.4.1) differs for a few entries (e.g. V, Ti, "
    "Li, Gd)"
)
LYNN_CITATION = (
    "J. E. Lynn & P. A. Seeger, 'Resonance effects in neutron scattering lengths of "
    "rare-earth nuclides', Atomic Data and Nuclear Data Tables 44 (1990) 191-207, "
    "doi:10.1016/0092-640X(90)90013-A (via periodictable)"
)
#: Wavelength (Å) at which the absorption cross-sections are tabulated (2200 m/s, 25.3 meV).
THERMAL_WAVELENGTH = 1.798


def _library_version() -> str:
    import periodictable

    return str(getattr(periodictable, "__version__", "unknown"))


def _atom(sp: Species):
    """periodictable element or isotope object for a species (charge ignored)."""
    import periodictable

    el = periodictable.elements[sp.z]
    if sp.mass_number is None:
        return el
    try:
        return el[sp.mass_number]
    except KeyError:
        known = _isotopes_with_data(sp.z)
        raise InvalidInputError(
            f"species {sp.label!r}: no isotope {sp.mass_number}{sp.symbol} in the neutron "
            f"table; isotopes of {sp.symbol} with a scattering length: "
            f"{', '.join(known) if known else 'none'}"
        ) from None


def _isotopes_with_data(z: int) -> list[str]:
    import periodictable

    el = periodictable.elements[z]
    out = []
    for m in el.isotopes:
        n = el[m].neutron
        if n is not None and n.b_c is not None:
            out.append(f"{m}{el.symbol}")
    return out


class NeutronProbe(Probe):
    """Neutron nuclear scattering lengths in fm (bound coherent b_c, s-independent).

    Parameters
    ----------
    wavelength : float, optional
        Neutron wavelength in Å. It matters only for the resonant rare-earth nuclides (Sm,
        Eu, Gd and some of their isotopes), whose b_c is then taken from the Lynn & Seeger
        (1990) energy-dependent tables; without it the tabulated thermal values (1.798 Å,
        25.3 meV) are used. Recorded in the metadata.
    absorption : bool, optional
        Include the imaginary part of b_c (default True). False keeps only Re b_c.
    lengths : dict of str to complex, optional
        User scattering lengths in fm that replace the table for given labels, written as the
        tables print them, b′ − i b″ (e.g. ``{'V': -0.3824}`` to use the Sears 1992 value for
        vanadium). A key applies to that label and to aliases that point to it; a key need
        not be a species (``{'vacancy': 0.0}``). They are recorded in the metadata.
    aliases : dict of str to str, optional
        User labels mapped to species labels, e.g. ``{'Ni_a': '58Ni', 'Dw': 'D'}``.

    Notes
    -----
    * Species: elements (natural isotope mixture), isotopes ('D', '2H', '58Ni', '7Li');
      an ion scatters like its atom, as nuclear scattering does not see the charge.
    * Sign convention. The tables (Sears 1992) write b = b′ − i b″ (b″ > 0 for absorption)
      in the physics convention, in which the Born amplitude carries exp(−i q·r). kinemap
      sums exp(+i q·r) (the crystallographic convention), so the factor returned is the
      complex conjugate b′ + i b″: the same convention as X-ray f0 + f′ + i f″. |A(q)|²
      is the same up to q → −q.
    * Magnetic scattering is not included.
    """

    name = "neutron"
    units = "fm"
    s_max = None

    def __init__(
        self,
        wavelength: float | None = None,
        *,
        absorption: bool = True,
        lengths: Mapping[str, complex] | None = None,
        aliases: Mapping[str, str] | None = None,
    ) -> None:
        super().__init__(aliases)
        self.wavelength: float | None = None
        if wavelength is not None:
            try:
                w = float(wavelength)
            except (TypeError, ValueError):
                raise InvalidInputError(f"`wavelength` must be a number in Å, got {wavelength!r}") from None
            if not np.isfinite(w) or w <= 0:
                raise InvalidInputError(f"`wavelength` must be a positive finite number in Å, got {wavelength!r}")
            self.wavelength = w
        self.absorption = bool(absorption)
        self.lengths: dict[str, complex] = {}
        if lengths is not None:
            if not isinstance(lengths, Mapping):
                raise InvalidInputError(
                    f"`lengths` must be a dict of label -> scattering length (fm), got {type(lengths).__name__}"
                )
            for key, val in lengths.items():
                if not isinstance(key, str):
                    raise InvalidInputError(f"`lengths` keys must be labels (str), got {key!r}")
                try:
                    b = complex(val)
                except (TypeError, ValueError):
                    raise InvalidInputError(
                        f"`lengths`[{key!r}] must be a number in fm, got {val!r}"
                    ) from None
                if not (np.isfinite(b.real) and np.isfinite(b.imag)):
                    raise InvalidInputError(f"`lengths`[{key!r}] = {val!r} is not finite")
                self.lengths[key] = b
        self._resonant_used: set[str] = set()
        self._cache: dict[tuple[str, str], complex] = {}

    def __repr__(self) -> str:
        return f"NeutronProbe(wavelength={self.wavelength!r}, absorption={self.absorption})"

    # -- species -------------------------------------------------------------------------
    def _user_key(self, label: str) -> str | None:
        """Key of `lengths` that applies to `label` (the label itself, else its alias target)."""
        if label in self.lengths:
            return label
        target = self.aliases.get(label)
        if target is not None and target in self.lengths:
            return target
        return None

    def _resolve_checked(self, label: str) -> Species:
        if self._user_key(label) is not None:
            # a user length needs no table entry; the label need not be a species at all
            return Species(label, label, 0)
        return super()._resolve_checked(label)

    def _check_species(self, sp: Species) -> None:
        self.table_length(sp)

    def table_length(self, sp: Species) -> complex:
        """Scattering length of a resolved species, in the tables' convention b′ − i b″ (fm).

        Raises
        ------
        InvalidInputError
            If the table has no value for the species, or the wavelength lies outside an
            energy-dependent table.
        """
        key = (sp.symbol, sp.isotope_name)
        if key in self._cache:
            return self._cache[key]
        atom = _atom(sp)
        n = atom.neutron
        if n is None or n.b_c is None:
            if sp.mass_number is None:
                known = _isotopes_with_data(sp.z)
                raise InvalidInputError(
                    f"species {sp.label!r}: the neutron table has no scattering length for "
                    f"{sp.symbol} (Z = {sp.z}); isotopes of {sp.symbol} with one: "
                    f"{', '.join(known) if known else 'none'}. Give a value with "
                    f"lengths={{{sp.label!r}: ...}}"
                )
            known = _isotopes_with_data(sp.z)
            raise InvalidInputError(
                f"species {sp.label!r}: the neutron table has no scattering length for the "
                f"isotope {sp.isotope_name}; isotopes of {sp.symbol} with one: "
                f"{', '.join(known) if known else 'none'}"
            )
        if n.nsf_table is not None and self.wavelength is not None:
            lam = n.nsf_table[0]
            lo, hi = float(np.min(lam)), float(np.max(lam))
            if not (lo <= self.wavelength <= hi):
                raise InvalidInputError(
                    f"neutron wavelength {self.wavelength:g} Å is outside the energy-dependent "
                    f"scattering-length table of {sp.isotope_name} (species {sp.label!r}), "
                    f"which covers {lo:.4g}-{hi:.4g} Å; give no wavelength to use the "
                    "thermal (1.798 Å) value"
                )
            b = complex(n.scattering_by_wavelength(self.wavelength)[0])
        else:
            b = complex(n.b_c_complex) if n.b_c_complex is not None else complex(n.b_c)
        if n.is_energy_dependent:
            self._resonant_used.add(sp.isotope_name)
        self._cache[key] = b
        return b

    def _factors(self, sp: Species, s: np.ndarray, s2: np.ndarray) -> np.ndarray:
        key = self._user_key(sp.label)
        if key is not None:
            b = self.lengths[key]
        else:
            b = self.table_length(sp)
        if not self.absorption:
            b = complex(b.real, 0.0)
        # tables: b' - i b''; kinemap sums exp(+i q.r): return the conjugate b' + i b''
        return np.full(s.shape, b.conjugate(), dtype=np.complex128)

    # -- description ---------------------------------------------------------------------
    def _metadata(self) -> dict[str, str | float | int]:
        meta: dict[str, str | float | int] = {
            "table": "periodictable-nsf",
            "table_source": NEUTRON_TABLE_CITATION,
            "table_library": f"periodictable {_library_version()} (periodictable.nsf)",
            "sign_convention": (
                "returned factor is b' + i b'' (complex conjugate of the tabulated b' - i b''), "
                "for amplitudes summed with exp(+i q.r)"
            ),
            "absorption": "included (imaginary part)" if self.absorption else "excluded (real part only)",
            "scattering": "nuclear only; magnetic neutron scattering is not included",
        }
        if self.wavelength is not None:
            meta["wavelength_angstrom"] = self.wavelength
            meta["energy_dependent_source"] = LYNN_CITATION
        else:
            meta["wavelength_angstrom"] = "not given (thermal values, 1.798 angstrom)"
        if self.lengths:
            meta["user_lengths_fm"] = ", ".join(f"{k}={v}" for k, v in sorted(self.lengths.items()))
        return meta

    def cautions(self) -> list[str]:
        """Cautions for the species checked so far: energy-dependent (resonant) nuclei.

        Call after :meth:`check_labels` or :meth:`scattering_factors`; the list names the
        resonant nuclides among the labels seen (Sm, Eu, Gd, Cd and some isotopes).
        """
        out: list[str] = []
        if self._resonant_used:
            names = ", ".join(sorted(self._resonant_used))
            if self.wavelength is None:
                out.append(
                    f"Scattering lengths of {names} depend strongly on neutron energy "
                    "(absorption resonances); thermal 1.798 angstrom values were used. Give the "
                    "wavelength to use the Lynn & Seeger (1990) energy-dependent tables."
                )
            else:
                out.append(
                    f"Scattering lengths of {names} depend strongly on neutron energy; values "
                    f"at {self.wavelength:g} angstrom from Lynn & Seeger (1990) were used."
                )
        return out


def scattering_length(label: str) -> complex:
    """Tabulated bound coherent scattering length (fm) of a species, as b′ − i b″.

    Parameters
    ----------
    label : str
        Element or isotope ('Ni', '58Ni', 'D').

    Returns
    -------
    complex
        b_c in fm, thermal values, in the tables' sign convention.
    """
    return NeutronProbe().table_length(parse_species(label))
