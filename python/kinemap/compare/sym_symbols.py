"""Reading Hermann–Mauguin symbols: elements, positions, systems, settings and the
symmetry directions of each position (see :mod:`kinemap.compare.pointgroups`)."""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

from ..errors import InvalidInputError

TAU = (1.0 + math.sqrt(5.0)) / 2.0

#: The 32 crystallographic point groups in their standard settings (monoclinic unique axis
#: b, trigonal groups on hexagonal axes in the orientation with 2-fold axes or mirror normals
#: along a).
POINT_GROUPS = (
    "1", "-1",
    "2", "m", "2/m",
    "222", "mm2", "mmm",
    "4", "-4", "4/m", "422", "4mm", "-42m", "4/mmm",
    "3", "-3", "321", "3m1", "-3m1",
    "6", "-6", "6/m", "622", "6mm", "-6m2", "6/mmm",
    "23", "m-3", "432", "-43m", "m-3m",
)

#: The 11 Laue classes (the centrosymmetric point groups).
LAUE_CLASSES = ("-1", "2/m", "mmm", "4/m", "4/mmm", "-3", "-3m1", "6/m", "6/mmm", "m-3", "m-3m")

#: Point groups of quasicrystals (operations act on Cartesian q in the kinemap.quasi frame).
QUASICRYSTAL_GROUPS = ("m-3-5", "235", "8/mmm", "10/mmm", "12/mmm")

# Symbols that name the same group in other orientations or spellings; each one's settings.
_VARIANTS = ("2mm", "m2m", "-4m2", "312", "31m", "-31m", "-62m")

_NUMBERS = ("10", "12", "1", "2", "3", "4", "5", "6", "8")
_N_GONAL = (5, 8, 10, 12)


# ----------------------------------------------------------------------------- parsing
@dataclass(frozen=True)
class _Token:
    order: int          # rotation order n (1 for 1 and -1, 2 for m)
    improper: bool      # -n (m is -2)
    with_mirror: bool   # n/m

    @property
    def text(self) -> str:
        if self.with_mirror:
            return f"{self.order}/m"
        if self.improper and self.order == 2:
            return "m"
        return ("-" if self.improper else "") + str(self.order)


def _normalise(text: str) -> str:
    s = text.strip()
    # overbars written after the digit (combining macron U+0304 or overline U+0305)
    s = re.sub(r"(\d+)[\u0304\u0305]", r"-\1", s)
    s = s.replace("\u2212", "-").replace("\u2012", "-").replace("\u2013", "-").replace("\u00af", "-")
    s = re.sub(r"\s*/\s*", "/", s)
    s = re.sub(r"-\s+", "-", s)
    return s


def _tokenisations(chunk: str) -> list[list[_Token]]:
    """Every way of reading `chunk` (no spaces) as a sequence of symbol elements."""
    if not chunk:
        return [[]]
    out = []
    if chunk[0] == "m":
        for rest in _tokenisations(chunk[1:]):
            out.append([_Token(2, True, False)] + rest)
        return out
    neg = chunk[0] == "-"
    body = chunk[1:] if neg else chunk
    for num in _NUMBERS:
        if not body.startswith(num):
            continue
        n = int(num)
        after = body[len(num):]
        if after.startswith("/m") and not neg and n not in (1, 3, 5):
            for rest in _tokenisations(after[2:]):
                out.append([_Token(n, False, True)] + rest)
        for rest in _tokenisations(after):
            out.append([_Token(n, neg, False)] + rest)
    return out


def _split_setting(symbol: str, setting) -> tuple[str, str | None]:
    if ":" in symbol:
        sym, _, suffix = symbol.partition(":")
        suffix = suffix.strip()
        if setting is not None and _setting_name(setting) != _setting_name(suffix):
            raise InvalidInputError(
                f"point group {symbol!r} names setting {suffix!r} but `setting` is {setting!r}; give one")
        return sym, _setting_name(suffix)
    return symbol, None if setting is None else _setting_name(setting)


def _setting_name(value) -> str:
    if not isinstance(value, str):
        raise InvalidInputError(f"`setting` must be text such as 'b', 'c', 'H' or 'R', got {value!r}")
    v = value.strip()
    table = {"a": "a", "b": "b", "c": "c", "H": "H", "R": "R", "h": "H", "r": "R",
             "hexagonal": "H", "rhombohedral": "R", "unique_a": "a", "unique_b": "b", "unique_c": "c"}
    if v not in table:
        raise InvalidInputError(
            f"unknown setting {value!r}: use 'a', 'b' or 'c' (the unique axis of a monoclinic group) "
            "or 'H'/'R' (hexagonal or rhombohedral axes of a trigonal group)")
    return table[v]


@dataclass(frozen=True)
class _Reading:
    system: str
    setting: str | None
    tokens: tuple
    directions: tuple  # one direction per token (lattice [uvw] or Cartesian for quasi systems)


_MONO_AXES = {"a": (1, 0, 0), "b": (0, 1, 0), "c": (0, 0, 1)}


def _classify(tokens: list[_Token], setting: str | None, shown: str) -> _Reading | str:
    """The system and symmetry directions of a token list, or the reason it is not a symbol."""
    k = len(tokens)
    orders = [t.order for t in tokens]
    lattice_setting_ok = {"monoclinic": ("a", "b", "c"), "trigonal": ("H", "R")}

    def reading(system, dirs, sett=None):
        if setting is not None and system not in lattice_setting_ok:
            return f"a {system} group takes no setting (got {setting!r})"
        if setting is not None and setting not in lattice_setting_ok[system]:
            return f"setting {setting!r} does not apply to the {system} group {shown!r}"
        return _Reading(system, sett, tuple(tokens), tuple(tuple(d) for d in dirs))

    if k == 1:
        n = orders[0]
        if n == 1:
            return reading("triclinic", [(0, 0, 1)])
        if n == 2:
            axis = setting or "b"
            if axis not in _MONO_AXES:
                return f"setting {setting!r} does not apply to the monoclinic group {shown!r}"
            return reading("monoclinic", [_MONO_AXES[axis]], axis)
        if n == 3:
            sett = setting or "H"
            if sett not in ("H", "R"):
                return f"setting {setting!r} does not apply to the trigonal group {shown!r}"
            return reading("trigonal", [(0, 0, 1) if sett == "H" else (1, 1, 1)], sett)
        if n == 4:
            return reading("tetragonal", [(0, 0, 1)])
        if n == 6:
            return reading("hexagonal", [(0, 0, 1)])
        if n in _N_GONAL:
            return reading(f"{n}-gonal", [(0, 0, 1)])
        return "no such rotation order"
    if k == 2:
        if orders[1] == 3 and orders[0] == 2:
            return reading("cubic", [(0, 0, 1), (1, 1, 1)])
        if orders[0] == 3 and orders[1] == 2:
            if setting == "R":
                return reading("trigonal", [(1, 1, 1), (1, -1, 0)], "R")
            if setting not in (None, "H"):
                return f"setting {setting!r} does not apply to the trigonal group {shown!r}"
            return ("ambiguous on hexagonal axes: the 2-fold axes (or mirror normals) lie either "
                    "along a, b ([100], secondary position) or along a-b ([1-10], tertiary "
                    "position); write e.g. '-3m1' or '-31m', '321' or '312', '3m1' or '31m', "
                    "or add ':R' for rhombohedral axes")
        if orders[0] == 5 and orders[1] == 2:
            return reading("5-gonal", [(0, 0, 1), (1, 0, 0)])
        return "not a point-group symbol"
    if k == 3:
        if orders[1] == 3:
            if orders[2] == 5 and orders[0] == 2:
                return reading("icosahedral", [(0, 0, 1), (1, 1, 1), (0, 1, TAU)])
            if orders[2] == 2 and orders[0] in (2, 4):
                return reading("cubic", [(0, 0, 1), (1, 1, 1), (1, -1, 0)])
            return "not a cubic or icosahedral symbol"
        if orders.count(1) == 2:
            j = next(i for i, n in enumerate(orders) if n != 1)
            if orders[j] != 2 or any(t.improper for i, t in enumerate(tokens) if i != j):
                return "not a monoclinic full symbol"
            axis = "abc"[j]
            if setting is not None and setting != axis:
                return f"the full symbol puts the unique axis along {axis}, but the setting says {setting!r}"
            return _Reading("monoclinic", axis, (tokens[j],), (_MONO_AXES[axis],))
        if all(n == 2 for n in orders):
            return reading("orthorhombic", [(1, 0, 0), (0, 1, 0), (0, 0, 1)])
        if orders[0] == 4 and orders[1] == 2 and orders[2] == 2:
            return reading("tetragonal", [(0, 0, 1), (1, 0, 0), (1, -1, 0)])
        if orders[0] == 6 and orders[1] == 2 and orders[2] == 2:
            return reading("hexagonal", [(0, 0, 1), (1, 0, 0), (1, -1, 0)])
        if orders[0] == 3 and sorted(orders[1:]) == [1, 2]:
            if setting == "R":
                return ("on rhombohedral axes a trigonal group has one orientation: write e.g. "
                        "'-3m:R', '32:R' or '3m:R'")
            if setting not in (None, "H"):
                return f"setting {setting!r} does not apply to the trigonal group {shown!r}"
            return reading("trigonal", [(0, 0, 1), (1, 0, 0), (1, -1, 0)], "H")
        if orders[0] in _N_GONAL and orders[1] == 2 and orders[2] == 2:
            n = orders[0]
            return reading(f"{n}-gonal", [(0, 0, 1), (1, 0, 0),
                                          (math.cos(math.pi / n), math.sin(math.pi / n), 0.0)])
        return "not a point-group symbol"
    return "too many positions for a point-group symbol"


def read_symbol(symbol: str, setting) -> _Reading:
    """The system, setting, elements and directions of a symbol (raises for bad text)."""
    if not isinstance(symbol, str):
        raise InvalidInputError(f"`group` must be a Hermann–Mauguin symbol (text) or a PointGroup, got {symbol!r}")
    raw, sett = _split_setting(_normalise(symbol), setting)
    shown = symbol.strip()
    if not raw:
        raise InvalidInputError("`group` is empty; give a Hermann–Mauguin symbol such as 'm-3m' or '6/mmm'")
    aliases = {"m35": "m-3-5", "-53m": "m-3-5", "-5-3m": "m-3-5", "-5-32/m": "m-3-5", "2/m-3-5": "m-3-5",
               "532": "235", "53": "235", "m-5-3": "m-3-5"}
    compact = raw.replace(" ", "")
    if compact in aliases:
        raw = aliases[compact]
    odd = re.search(r"(?<![0-9])([135])/m", raw)
    if odd:
        n = int(odd.group(1))
        better = {1: "-1", 3: "-6", 5: "-10"}[n]
        raise InvalidInputError(
            f"cannot read point-group symbol {shown!r}: {n}/m is written {better} in Hermann–Mauguin notation")
    chunks = raw.split()
    readings: list[list[_Token]] = [[]]
    for ch in chunks:
        parts = _tokenisations(ch)
        if not parts:
            raise InvalidInputError(
                f"cannot read point-group symbol {shown!r}: {ch!r} is not made of the elements "
                "1, 2, 3, 4, 6 (or 5, 8, 10, 12 for quasicrystals), their rotoinversions -n, m and n/m")
        readings = [r + p for r in readings for p in parts]
    reasons, found = [], []
    for toks in readings:
        res = _classify(toks, sett, shown)
        if isinstance(res, _Reading):
            found.append(res)
        else:
            reasons.append(res)
    if not found:
        why = next((r for r in reasons if r.startswith("ambiguous") or "setting" in r or "orientation" in r),
                   reasons[0] if reasons else "not a point-group symbol")
        raise InvalidInputError(
            f"cannot read point-group symbol {shown!r}: {why}. Known groups: the 32 crystallographic "
            f"point groups ({', '.join(POINT_GROUPS)}; also -31m, 312, 31m, -4m2, -62m, 2mm, m2m) "
            f"with settings ':a'/':b'/':c' (monoclinic unique axis) and ':H'/':R' (trigonal axes), "
            f"and the quasicrystal groups {', '.join(QUASICRYSTAL_GROUPS)}")
    if len({(f.system, f.tokens) for f in found}) > 1:
        # e.g. '12/m1' (monoclinic) read also as a 12-gonal group: prefer crystallographic
        found.sort(key=lambda f: f.system.endswith("-gonal"))
    return found[0]


__all__ = ["POINT_GROUPS", "LAUE_CLASSES", "QUASICRYSTAL_GROUPS", "TAU", "read_symbol"]
