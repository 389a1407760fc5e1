"""Species labels: element symbols, ions, isotopes and user aliases.

A species label names what scatters at a site. The forms understood are

* element symbols, case as in the periodic table: ``'Fe'``, ``'O'``;
* ions: ``'O2-'``, ``'Fe3+'``, ``'Na+'`` (same as ``'Na1+'``), ``'Fe+3'``;
* isotopes: ``'D'`` (deuterium), ``'T'`` (tritium), ``'2H'``, ``'58Ni'``, ``'58-Ni'``,
  ``'Ni-58'``;
* user labels (``'Fe_a'``, ``'O1'``) mapped to one of the above through an ``aliases``
  dictionary given to the probe.

Each probe decides what part of a species it uses: X-rays and electrons see the electron
cloud (element and charge; an isotope scatters like its element), neutrons see the nucleus
(element and mass number; a charge does not change the nuclear scattering length).
"""

from __future__ import annotations

import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

from ..errors import InvalidInputError

#: Element symbols by atomic number (index 0 is unused).
SYMBOLS: tuple[str, ...] = (
    "",
    "H", "He", "Li", "Be", "B", "C", "N", "O", "F", "Ne",
    "Na", "Mg", "Al", "Si", "P", "S", "Cl", "Ar", "K", "Ca",
    "Sc", "Ti", "V", "Cr", "Mn", "Fe", "Co", "Ni", "Cu", "Zn",
    "Ga", "Ge", "As", "Se", "Br", "Kr", "Rb", "Sr", "Y", "Zr",
    "Nb", "Mo", "Tc", "Ru", "Rh", "Pd", "Ag", "Cd", "In", "Sn",
    "Sb", "Te", "I", "Xe", "Cs", "Ba", "La", "Ce", "Pr", "Nd",
    "Pm", "Sm", "Eu", "Gd", "Tb", "Dy", "Ho", "Er", "Tm", "Yb",
    "Lu", "Hf", "Ta", "W", "Re", "Os", "Ir", "Pt", "Au", "Hg",
    "Tl", "Pb", "Bi", "Po", "At", "Rn", "Fr", "Ra", "Ac", "Th",
    "Pa", "U", "Np", "Pu", "Am", "Cm", "Bk", "Cf", "Es", "Fm",
    "Md", "No", "Lr", "Rf", "Db", "Sg", "Bh", "Hs", "Mt", "Ds",
    "Rg", "Cn", "Nh", "Fl", "Mc", "Lv", "Ts", "Og",
)
ATOMIC_NUMBER: dict[str, int] = {sym: z for z, sym in enumerate(SYMBOLS) if sym}

_ELEMENT = r"([A-Z][a-z]?)"
_ION_SUFFIX = re.compile(r"^" + _ELEMENT + r"(\d*)([+-])$")  # Fe3+, Na+, O2-
# Fe+3, O-2; also Ni-58 (an isotope: 'X-n' with n >= Z is read as a mass number)
_ION_PREFIX = re.compile(r"^" + _ELEMENT + r"([+-])(\d+)$")
_ISO_LEAD = re.compile(r"^(\d+)-?" + _ELEMENT + r"$")  # 58Ni, 58-Ni, 2H
_NAMED_ISOTOPES = {"D": 2, "T": 3}  # deuterium, tritium (hydrogen isotopes)


@dataclass(frozen=True)
class Species:
    """A parsed species label.

    Attributes
    ----------
    label : str
        The label as written by the user (before alias resolution).
    symbol : str
        Element symbol, e.g. ``'Fe'`` (``'H'`` for deuterium).
    z : int
        Atomic number.
    charge : int
        Ionic charge in units of e (0 for neutral atoms).
    mass_number : int or None
        Mass number for an isotope, None for the natural isotope mixture.
    """

    label: str
    symbol: str
    z: int
    charge: int = 0
    mass_number: int | None = None

    @property
    def ion_name(self) -> str:
        """Ion written as element + magnitude + sign, e.g. ``'Fe3+'``, ``'O2-'``."""
        if self.charge == 0:
            return self.symbol
        sign = "+" if self.charge > 0 else "-"
        return f"{self.symbol}{abs(self.charge)}{sign}"

    @property
    def isotope_name(self) -> str:
        """Isotope written as mass number + symbol, e.g. ``'58Ni'``; element otherwise."""
        if self.mass_number is None:
            return self.symbol
        return f"{self.mass_number}{self.symbol}"


def _element(symbol: str, label: str) -> int:
    z = ATOMIC_NUMBER.get(symbol)
    if z is None:
        raise InvalidInputError(
            f"species label {label!r}: {symbol!r} is not an element symbol "
            "(write symbols with the periodic-table case, e.g. 'Fe', 'O', 'Cl')"
        )
    return z


def parse_species(label: str) -> Species:
    """Parse one species label (element, ion or isotope).

    Parameters
    ----------
    label : str
        ``'Fe'``, ``'Fe3+'``, ``'O2-'``, ``'Na+'``, ``'Fe+3'``, ``'D'``, ``'T'``, ``'2H'``,
        ``'58Ni'``, ``'58-Ni'`` or ``'Ni-58'``. In the form ``'X-n'`` a number n >= Z is a
        mass number (``'Ni-58'``, ``'H-2'``) and a smaller one a charge (``'O-2'``).

    Returns
    -------
    Species
        The parsed species.

    Raises
    ------
    InvalidInputError
        If the label is not a string or not one of the forms above; the message names the
        label.
    """
    if not isinstance(label, str):
        raise InvalidInputError(
            f"species label {label!r} must be a str, got {type(label).__name__}"
        )
    text = label.strip()
    if text in ATOMIC_NUMBER:
        return Species(label, text, ATOMIC_NUMBER[text])
    if text in _NAMED_ISOTOPES:
        return Species(label, "H", 1, 0, _NAMED_ISOTOPES[text])
    m = _ION_SUFFIX.match(text)
    if m:
        sym, mag, sign = m.groups()
        z = _element(sym, label)
        charge = int(mag) if mag else 1
        if charge == 0:
            raise InvalidInputError(
                f"species label {label!r}: charge 0 written as an ion; write {sym!r}"
            )
        return Species(label, sym, z, charge if sign == "+" else -charge)
    m = _ION_PREFIX.match(text)
    if m:
        sym, sign, mag = m.groups()
        z = _element(sym, label)
        charge = int(mag)
        if sign == "-" and charge >= z:
            # 'Ni-58', 'H-2', 'Li-7': a mass number (>= Z), not a charge
            return _isotope(label, sym, z, charge)
        if charge == 0:
            raise InvalidInputError(
                f"species label {label!r}: charge 0 written as an ion; write {sym!r}"
            )
        return Species(label, sym, z, charge if sign == "+" else -charge)
    m = _ISO_LEAD.match(text)
    if m:
        mass, sym = m.groups()
        z = _element(sym, label)
        return _isotope(label, sym, z, int(mass))
    raise InvalidInputError(
        f"species label {label!r} is not an element ('Fe'), ion ('Fe3+', 'O2-'), or isotope "
        "('D', '2H', '58Ni'); map site labels such as 'Fe_a' to one of these with the "
        "probe's `aliases` argument, e.g. aliases={'Fe_a': 'Fe3+'}"
    )


def _isotope(label: str, sym: str, z: int, mass: int) -> Species:
    if mass < z:
        raise InvalidInputError(
            f"species label {label!r}: mass number {mass} is smaller than the atomic "
            f"number {z} of {sym}"
        )
    return Species(label, sym, z, 0, mass)


def check_aliases(aliases: Mapping[str, str] | None) -> dict[str, str]:
    """Validate an alias mapping (user label -> species label) and return a plain dict.

    Raises
    ------
    InvalidInputError
        If `aliases` is not a mapping of str to str, or a target does not parse.
    """
    if aliases is None:
        return {}
    if not isinstance(aliases, Mapping):
        raise InvalidInputError(
            f"`aliases` must be a dict mapping user labels to species labels, got "
            f"{type(aliases).__name__}"
        )
    out: dict[str, str] = {}
    for key, target in aliases.items():
        if not isinstance(key, str) or not isinstance(target, str):
            raise InvalidInputError(
                f"`aliases` must map str to str; entry {key!r}: {target!r} does not"
            )
        if target in aliases and target != key:
            raise InvalidInputError(
                f"`aliases`[{key!r}] = {target!r} points to another alias; aliases must map "
                "directly to an element, ion or isotope label"
            )
        try:
            parse_species(target)
        except InvalidInputError as exc:
            raise InvalidInputError(f"`aliases`[{key!r}] = {target!r}: {exc}") from None
        out[key] = target
    return out


def resolve(label: str, aliases: Mapping[str, str]) -> Species:
    """Resolve a label through `aliases` and parse it.

    The returned :class:`Species` keeps the user's label in ``label``.
    """
    if not isinstance(label, str):
        raise InvalidInputError(
            f"species label {label!r} must be a str, got {type(label).__name__}"
        )
    target = aliases.get(label, label)
    try:
        sp = parse_species(target)
    except InvalidInputError as exc:
        if target != label:
            raise InvalidInputError(f"alias {label!r} -> {target!r}: {exc}") from None
        raise
    return Species(label, sp.symbol, sp.z, sp.charge, sp.mass_number)


def as_label_list(labels: Sequence[str] | str) -> list[str]:
    """Turn `labels` into a list of str, refusing a bare string (a common slip)."""
    if isinstance(labels, str):
        raise InvalidInputError(
            f"`labels` must be a sequence of species labels, got the single string {labels!r}; "
            f"write [{labels!r}]"
        )
    try:
        out = list(labels)
    except TypeError:
        raise InvalidInputError(
            f"`labels` must be a sequence of species labels, got {type(labels).__name__}"
        ) from None
    for i, lab in enumerate(out):
        if not isinstance(lab, str):
            raise InvalidInputError(
                f"`labels`[{i}] = {lab!r} must be a str, got {type(lab).__name__}"
            )
    return out
