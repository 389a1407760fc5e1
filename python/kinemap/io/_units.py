"""Length units of model files: H5MD-style unit strings turned into factors to Å or Å²."""

from __future__ import annotations

import math
import re
import unicodedata

import numpy as np

from ..errors import ModelFileError

# Length units understood in `unit` attributes, in Å per unit.
_LENGTH_UNITS = {
    "angstrom": 1.0, "angstroms": 1.0, "ang": 1.0, "a": 1.0, "aa": 1.0, "å": 1.0, "Å": 1.0,
    "nm": 10.0, "pm": 0.01, "um": 1.0e4, "µm": 1.0e4, "μm": 1.0e4, "mm": 1.0e7, "m": 1.0e10,
    "bohr": 0.529177210903, "a0": 0.529177210903,
}
_UNIT_RE = re.compile(r"^\s*([-+0-9.eE]+)?\s*([^\s0-9+-][^\s]*?)(\+?(\d+))?\s*$")


def length_scale(unit, where: str, power: int = 1) -> float:
    """Factor that turns values in `unit` into Å (``power=1``) or Å² (``power=2``).

    Accepts H5MD-style unit strings such as ``"nm"``, ``"0.1 nm"``, ``"angstrom"``,
    ``"Angstrom"``, ``"Å"``, ``"A"``, ``"0.01 nm+2"`` (for Å²). None or an empty string
    means Å.

    Raises
    ------
    ModelFileError
        For a unit kinemap does not know, or a factor that is zero, negative or not finite
        (it would collapse or mirror the model), naming `where` (dataset and attribute).
    """
    if unit is None:
        return 1.0
    if isinstance(unit, np.ndarray):
        if unit.size != 1:
            raise ModelFileError(f"{where}: unit must be one string, got {unit.size} values")
        unit = unit.reshape(-1)[0]
    if isinstance(unit, bytes):
        unit = unit.decode("utf-8", "replace")
    text = unicodedata.normalize("NFKC", str(unit)).strip()
    if text == "":
        return 1.0
    whole = _LENGTH_UNITS.get(text, _LENGTH_UNITS.get(text.lower()))
    if whole is not None and power == 1:
        return whole
    want = "length" if power == 1 else f"length^{power}"
    known = "(use e.g. 'angstrom', 'nm', '0.1 nm'" + (", '0.01 nm+2'" if power == 2 else "") + ")"
    m = _UNIT_RE.match(text)
    if not m:
        raise ModelFileError(f"{where}: unit {text!r} is not a {want} unit kinemap understands {known}")
    try:
        factor = float(m.group(1)) if m.group(1) else 1.0
    except ValueError:
        raise ModelFileError(f"{where}: unit {text!r} starts with {m.group(1)!r}, which is not a number") from None
    if not math.isfinite(factor) or factor <= 0.0:
        raise ModelFileError(f"{where}: unit {text!r} has the factor {factor!r}; a unit factor must be a positive "
                             "finite number (zero collapses the model, a negative one mirrors it)")
    sym = m.group(2)
    exponent = int(m.group(4)) if m.group(4) else 1
    per = _LENGTH_UNITS.get(sym, _LENGTH_UNITS.get(sym.lower()))
    if per is None or exponent != power:
        raise ModelFileError(f"{where}: unit {text!r} is not a {want} unit kinemap understands {known}")
    return factor * per**power


__all__ = ["length_scale"]
