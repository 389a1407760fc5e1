"""Point groups by Hermann–Mauguin symbol, with explicit settings.

A symbol lists symmetry elements along the *symmetry directions* of its crystal system, one
position per set of directions (International Tables for Crystallography Vol. A, the part on
point groups and the table of symmetry directions; see docs/references.md):

=========================  ===================  ==================  ==================
system (setting)           primary              secondary           tertiary
=========================  ===================  ==================  ==================
monoclinic                 [010] (unique b),
                           [001] (c), [100] (a)
orthorhombic               [100]                [010]               [001]
tetragonal                 [001]                [100]               [1-10]
trigonal, hexagonal axes   [001]                [100]               [1-10]
trigonal, rhombohedral     [111]                [1-10]
hexagonal                  [001]                [100]               [1-10]
cubic                      [001]                [111]               [1-10]
icosahedral (Cartesian)    [001] (a 2-fold)     [111]               (0, 1, τ)
n-gonal, n = 5, 8, 10, 12  z                    x                   x turned by π/n
=========================  ===================  ==================  ==================

An element ``n`` is a rotation by 2π/n about the direction, ``-n`` that rotation followed by
the inversion, ``m`` a mirror normal to the direction (= ``-2``) and ``n/m`` both ``n`` and
``m``. The group is the closure of the elements the symbol names (one direction per position
suffices: the other directions of a set follow from the closure). Each element is built as a
Cartesian rotation (Rodrigues' formula) about the direction in a reference cell of the system
and turned into the direct-lattice basis, W = C⁻ᵀ R Cᵀ (C the reference cell, rows a, b, c),
which is an integer matrix in the conventional setting. W acts on fractional coordinates,
x' = W x; reflections transform as h' = W⁻ᵀ h, so that h'·x' = h·x.

Settings: ``"2/m"`` is unique axis b unless ``":c"`` (or ``":a"``) is appended or given as
``setting=``; trigonal groups use hexagonal axes unless ``":R"``. On hexagonal axes the two
orientations of 32, 3m and −3m are written out (``"321"``/``"312"``, ``"3m1"``/``"31m"``,
``"-3m1"``/``"-31m"``); the bare short symbol is refused there as ambiguous.

The quasicrystal groups (m-3-5, 235, and n/mmm, nmm, n22, … for n = 5, 8, 10, 12) have no
lattice basis: their operations are Cartesian matrices in the frame of :mod:`kinemap.quasi`
(icosahedral 2-fold axes along x, y, z and 5-fold axes along (0, ±1, ±τ) and their cyclic
permutations; the n-fold axis of planar tilings along z with x in a mirror line). On a
cut-and-project scheme they become integer matrices on the higher-dimensional indices
(:meth:`PointGroup.index_operations`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import cache, lru_cache

import numpy as np

from ..errors import InvalidInputError
from .sym_symbols import _VARIANTS, LAUE_CLASSES, POINT_GROUPS, QUASICRYSTAL_GROUPS, TAU, _Reading, _Token, read_symbol

_MAX_ORDER = 240


# ----------------------------------------------------------------------------- geometry
def rotation_matrix(axis, angle: float) -> np.ndarray:
    """Cartesian rotation by `angle` (radians, right-handed) about `axis` (Rodrigues' formula)."""
    u = np.asarray(axis, dtype=np.float64)
    u = u / np.linalg.norm(u)
    k = np.array([[0.0, -u[2], u[1]], [u[2], 0.0, -u[0]], [-u[1], u[0], 0.0]])
    return np.eye(3) + math.sin(angle) * k + (1.0 - math.cos(angle)) * (k @ k)


def _reference_cell(system: str, setting: str | None) -> np.ndarray:
    """A cell with the full symmetry of the system (rows a, b, c); the directions of a
    symbol are lattice directions of this cell."""
    if system in ("hexagonal", "trigonal") and setting != "R":
        return np.array([[1.0, 0.0, 0.0], [-0.5, math.sqrt(3.0) / 2.0, 0.0], [0.0, 0.0, 1.6]])
    if system == "trigonal":  # rhombohedral axes, a = b = c, alpha = beta = gamma = 70 deg
        ca = math.cos(math.radians(70.0))
        sa = math.sin(math.radians(70.0))
        cy = (ca - ca * ca) / sa
        return np.array([[1.0, 0.0, 0.0], [ca, sa, 0.0], [ca, cy, math.sqrt(1.0 - ca * ca - cy * cy)]])
    return np.eye(3)


# ----------------------------------------------------------------------------- groups
def _key_int(m: np.ndarray) -> bytes:
    return np.ascontiguousarray(m, dtype=np.int64).tobytes()


def _key_float(m: np.ndarray) -> bytes:
    return (np.round(m, 7) + 0.0).tobytes()


def _closure(generators, key, integer: bool) -> list[np.ndarray]:
    eye = np.eye(3, dtype=np.int64 if integer else np.float64)
    seen = {key(eye): eye}
    frontier = [eye]
    gens = list(generators)
    while frontier:
        nxt = []
        for a in frontier:
            for g in gens:
                p = a @ g
                if not integer:
                    p = np.where(np.abs(p) < 1e-14, 0.0, p)
                kp = key(p)
                if kp not in seen:
                    seen[kp] = p
                    nxt.append(p)
                    if len(seen) > _MAX_ORDER:
                        raise InvalidInputError("the symbol's elements do not close to a finite point group")
        frontier = nxt
    return list(seen.values())


def _element_matrices(token: _Token, axis) -> list[np.ndarray]:
    """Cartesian matrices of one symbol element along `axis`."""
    out = []
    if token.order == 1:
        return [-np.eye(3)] if token.improper else []
    rot = rotation_matrix(axis, 2.0 * math.pi / token.order)
    out.append(-rot if token.improper else rot)
    if token.with_mirror:
        out.append(-rotation_matrix(axis, math.pi))
    return out


def _sort_ops(ops: list[np.ndarray]) -> np.ndarray:
    """Identity first, then proper before improper, then by rotation order and entries."""
    def rank(m):
        det = float(np.linalg.det(m))
        tr = float(np.trace(m)) * (1 if det > 0 else -1)
        return (0 if det > 0 else 1, -round(tr, 6), tuple(np.round(np.asarray(m, dtype=float).ravel(), 6)))
    return np.array(sorted(ops, key=rank))


def describe_operation(w: np.ndarray, *, lattice: bool = True) -> str:
    """A short name of an operation: '1', '-1', '4 along [001]', 'm normal to [1-10]', '-3 along [111]'.

    `w` acts on direct-lattice coordinates (``lattice=True``) or on Cartesian vectors.
    """
    w = np.asarray(w, dtype=np.float64)
    det = float(np.linalg.det(w))
    proper = w * (1.0 if det > 0 else -1.0)
    tr = float(np.trace(proper))
    if abs(tr - 3.0) < 1e-6:
        return "1" if det > 0 else "-1"
    # rotation order from the trace 1 + 2 cos(2π/n)
    ang = math.acos(max(-1.0, min(1.0, (tr - 1.0) / 2.0)))
    n = int(round(2.0 * math.pi / ang)) if ang > 1e-9 else 1
    vals, vecs = np.linalg.eig(proper)
    axis = np.real(vecs[:, int(np.argmin(np.abs(vals - 1.0)))])
    axis = axis / np.abs(axis).max()
    axis[np.abs(axis) < 1e-9] = 0.0
    if lattice:
        for scale in range(1, 7):
            cand = axis * scale
            if np.allclose(cand, np.round(cand), atol=1e-6):
                axis = np.round(cand)
                break
        if axis[np.flatnonzero(np.abs(axis) > 1e-9)[0]] < 0:
            axis = -axis
        text = "[" + "".join(str(int(v)) if v >= 0 else f"-{int(-v)}" for v in axis) + "]"
    else:
        if axis[np.flatnonzero(np.abs(axis) > 1e-9)[0]] < 0:
            axis = -axis
        text = "(" + ", ".join(f"{v:.4g}" for v in axis) + ")"
    if det > 0:
        return f"{n} along {text}"
    if n == 2:
        return f"m normal to {text}"
    return f"-{n} along {text}"


def _frozen(a: np.ndarray) -> np.ndarray:
    a = np.ascontiguousarray(a)
    a.setflags(write=False)      # groups are cached and shared: their matrices stay fixed
    return a


@dataclass(frozen=True, eq=False)
class PointGroup:
    """A point group: its symbol, setting and operations.

    Attributes
    ----------
    symbol : str
        Hermann–Mauguin symbol in the standard short form where one exists (``"m-3m"``,
        ``"-31m"``, ``"2/m"``), else the normalised input.
    setting : str or None
        ``"a"``, ``"b"``, ``"c"`` (unique axis of a monoclinic group), ``"H"``/``"R"``
        (hexagonal/rhombohedral axes of a trigonal group), None otherwise.
    system : str
        "triclinic", …, "cubic", or "icosahedral", "8-gonal", … for quasicrystal groups.
    operations : ndarray (n, 3, 3)
        Direct-lattice matrices W (integers, x' = W x) for crystallographic groups; Cartesian
        matrices for quasicrystal groups. The identity comes first.
    cartesian : ndarray (n, 3, 3)
        Cartesian matrices in the reference frame (for a crystallographic group: in the
        system's reference cell; use :meth:`cartesian_operations` for a given cell).
    """

    symbol: str
    setting: str | None
    system: str
    operations: np.ndarray = field(repr=False)
    cartesian: np.ndarray = field(repr=False)
    given: str = field(default="", repr=False, compare=False)

    # -- basic facts -------------------------------------------------------------------
    @property
    def order(self) -> int:
        """Number of operations."""
        return len(self.operations)

    @property
    def is_crystallographic(self) -> bool:
        return self.system not in ("icosahedral",) and not self.system.endswith("-gonal")

    @property
    def name(self) -> str:
        """Symbol with its setting, e.g. ``"2/m:c"``, ``"-3m:R"``, ``"m-3m"``."""
        return self.symbol + (f":{self.setting}" if self.setting else "")

    @property
    def has_inversion(self) -> bool:
        """True when the group contains the inversion −1 (a centrosymmetric group)."""
        return any(np.allclose(op, -np.eye(3)) for op in self.operations)

    @property
    def hkl_operations(self) -> np.ndarray:
        """The operations on reciprocal-lattice coordinates: h' = (W⁻¹)ᵀ h, integers.

        Only for crystallographic groups (quasicrystal groups act on Cartesian q or, through
        :meth:`index_operations`, on higher-dimensional indices).
        """
        self._need_lattice("hkl_operations")
        inv = np.linalg.inv(self.operations.astype(np.float64))
        return np.rint(np.transpose(inv, (0, 2, 1))).astype(np.int64)

    @property
    def reference_cell(self) -> np.ndarray:
        """A cell (rows a, b, c) with the full symmetry of the group's system and setting."""
        return _reference_cell(self.system, self.setting)

    def _need_lattice(self, what: str) -> None:
        if not self.is_crystallographic:
            raise InvalidInputError(
                f"{what} needs a crystallographic group; {self.symbol!r} is a quasicrystal group "
                "whose operations act on Cartesian q (or on higher-dimensional indices)")

    # -- cells ------------------------------------------------------------------------
    def check_cell(self, cell, *, tol: float = 1e-4, name: str = "cell") -> np.ndarray:
        """Check that every operation preserves the metric tensor G = cell·cellᵀ.

        Parameters
        ----------
        cell : array_like (3, 3)
            Rows a, b, c in Å.
        tol : float
            Largest relative change of G allowed: max|WᵀGW − G| ≤ tol·max|G|.

        Returns
        -------
        ndarray (3, 3)
            The cell as float64.

        Raises
        ------
        InvalidInputError
            Naming the cell's parameters, the first operation that does not fit and what
            the group needs (e.g. a = b = c and 90° angles for a cubic group).
        """
        from ..model import as_cell

        self._need_lattice("check_cell")
        c = as_cell(cell, name)
        g = c @ c.T
        scale = float(np.abs(g).max())
        for w in self.operations:
            wf = w.astype(np.float64)
            dev = float(np.abs(wf.T @ g @ wf - g).max()) / scale
            if dev > tol:
                raise InvalidInputError(
                    f"`{name}` ({cell_parameters_text(c)}) does not have the symmetry of point group "
                    f"{self.name!r}: the operation {describe_operation(w)} changes its metric tensor "
                    f"by {dev:.3g} (relative; tolerance {tol:g}). A {self.system} group "
                    f"{_metric_rule(self.system, self.setting)}; choose a group the cell supports")
        return c

    def cartesian_operations(self, cell) -> np.ndarray:
        """Cartesian matrices R = Cᵀ W C⁻ᵀ of the operations for `cell` (rows a, b, c).

        R is orthogonal when the cell supports the group (see :meth:`check_cell`).
        """
        from ..model import as_cell

        self._need_lattice("cartesian_operations")
        c = as_cell(cell)
        return np.einsum("ij,njk,kl->nil", c.T, self.operations.astype(np.float64), np.linalg.inv(c).T)

    # -- relatives --------------------------------------------------------------------
    def laue_class(self) -> PointGroup:
        """The group with the inversion added (its Laue class), in the same setting."""
        ops = list(self.operations) + [(-np.eye(3)).astype(self.operations.dtype)]
        return _named_group(ops, self.system, self.setting, self.is_crystallographic)

    def acentric_groups(self) -> list[str]:
        """Symbols of the point groups without the inversion whose Laue class is this group's
        Laue class, in the same setting (for maps whose Bijvoet pairs differ)."""
        if not self.is_crystallographic:
            base = {"icosahedral": ["235"]}.get(self.system)
            if base is None and self.system.endswith("-gonal"):
                n = self.system.split("-")[0]
                base = [f"{n}22", f"{n}mm", f"-{n}m2", f"-{n}2m"] if int(n) % 2 == 0 else [f"{n}2", f"{n}m"]
            return base or []
        laue = self.laue_class()
        lkeys = {_key_int(w) for w in laue.operations}
        out = []
        for sym in POINT_GROUPS + _VARIANTS + ("32", "3m"):
            try:
                g = point_group(sym, setting=self.setting if self.setting else None)
            except InvalidInputError:
                continue
            if g.system != self.system or g.setting != self.setting or g.has_inversion:
                continue
            keys = {_key_int(w) for w in g.operations}
            if keys <= lkeys and {_key_int(w) for w in g.laue_class().operations} == lkeys:
                if g.symbol not in out:
                    out.append(g.symbol)
        return out

    # -- quasicrystals ----------------------------------------------------------------
    def index_operations(self, scheme) -> np.ndarray:
        """Integer matrices T acting on the higher-dimensional indices of `scheme`.

        For every operation R (Cartesian, in the scheme's frame) the lattice basis vectors
        e_j∥ of the scheme must be permuted up to sign, R e_j∥ = ±e_π(j)∥ (a signed
        permutation S with R P = P S); the embedding then carries S to an orthogonal map of
        both spaces, and module vectors transform as k(T h) = R k(h) with T = C⁻¹ S⁻ᵀ C
        (C the scheme's index basis). Checked numerically for every operation.

        Parameters
        ----------
        scheme : kinemap.quasi.CutProjectScheme

        Returns
        -------
        ndarray (n, D, D) of int64

        Raises
        ------
        InvalidInputError
            When an operation does not map the scheme's star of basis vectors onto itself
            (the group is not a symmetry of its Fourier module in this frame).
        """
        from .sym_quasi import index_operations

        return index_operations(self, scheme)

    def __repr__(self) -> str:
        return f"PointGroup({self.name!r}, system={self.system!r}, order={self.order})"

    def _key(self) -> tuple:
        return (self.system, self.setting, frozenset(_key_float(np.asarray(w, dtype=np.float64))
                                                     for w in self.operations))

    def __eq__(self, other) -> bool:
        """Groups are equal when they have the same operations in the same setting."""
        if not isinstance(other, PointGroup):
            return NotImplemented
        return self._key() == other._key()

    def __hash__(self) -> int:
        return hash(self._key())


def cell_parameters_text(cell: np.ndarray) -> str:
    a, b, c = (float(np.linalg.norm(v)) for v in cell)

    def ang(u, v):
        return math.degrees(math.acos(max(-1.0, min(1.0, float(u @ v) / float(np.linalg.norm(u) * np.linalg.norm(v))))))

    return (f"a={a:.5g} Å, b={b:.5g} Å, c={c:.5g} Å, alpha={ang(cell[1], cell[2]):.4g}°, "
            f"beta={ang(cell[0], cell[2]):.4g}°, gamma={ang(cell[0], cell[1]):.4g}°")


def _metric_rule(system: str, setting: str | None) -> str:
    return {
        "triclinic": "fits any cell",
        "monoclinic": {"b": "with unique axis b needs alpha = gamma = 90°",
                       "c": "with unique axis c needs alpha = beta = 90°",
                       "a": "with unique axis a needs beta = gamma = 90°"}.get(setting or "b", ""),
        "orthorhombic": "needs alpha = beta = gamma = 90°",
        "tetragonal": "needs a = b and alpha = beta = gamma = 90°",
        "trigonal": ("on rhombohedral axes needs a = b = c and alpha = beta = gamma" if setting == "R"
                     else "on hexagonal axes needs a = b, alpha = beta = 90° and gamma = 120°"),
        "hexagonal": "needs a = b, alpha = beta = 90° and gamma = 120°",
        "cubic": "needs a = b = c and alpha = beta = gamma = 90°",
    }.get(system, "")


def _named_group(ops, system, setting, crystallographic) -> PointGroup:
    """A PointGroup from operations closed under multiplication, named from the catalogue."""
    if crystallographic:
        full = _closure([np.asarray(o, dtype=np.int64) for o in ops], _key_int, True)
        keys = frozenset(_key_int(w) for w in full)
        cat = _catalogue(system, setting)
        symbol = cat.get(keys, "?")
        ref = _reference_cell(system, setting)
        w = _sort_ops(full).astype(np.int64)
        cart = np.einsum("ij,njk,kl->nil", ref.T, w.astype(np.float64), np.linalg.inv(ref).T)
        return PointGroup(symbol, setting, system, _frozen(w), _frozen(cart))
    full = _closure([np.asarray(o, dtype=np.float64) for o in ops], _key_float, False)
    keys = frozenset(_key_float(w) for w in full)
    symbol = _quasi_catalogue(system).get(keys, "?")
    w = _frozen(_sort_ops(full))
    return PointGroup(symbol, setting, system, w, w)


@cache
def _catalogue(system: str, setting: str | None) -> dict:
    """Operation sets -> standard symbol, for the groups of one system and setting."""
    out: dict[frozenset, str] = {}
    for sym in POINT_GROUPS + _VARIANTS + ("32", "3m", "-3m"):
        for sett in ([setting] if setting else [None]):
            try:
                reading = read_symbol(sym, sett)
            except InvalidInputError:
                continue
            if reading.system != system or reading.setting != setting:
                continue
            ops = _build_lattice(reading)
            out.setdefault(frozenset(_key_int(w) for w in ops), sym)
    return out


@cache
def _quasi_catalogue(system: str) -> dict:
    out: dict[frozenset, str] = {}
    n = system.split("-")[0]
    names = ["m-3-5", "235"] if system == "icosahedral" else \
        [f"{n}/mmm", f"{n}22", f"{n}mm", f"{n}/m", n, f"-{n}", f"-{n}m2", f"-{n}2m"]
    for sym in names:
        try:
            reading = read_symbol(sym, None)
        except InvalidInputError:
            continue
        if reading.system != system:
            continue
        ops = _closure([m for t, d in zip(reading.tokens, reading.directions) for m in _element_matrices(t, d)],
                       _key_float, False)
        out.setdefault(frozenset(_key_float(w) for w in ops), sym)
    return out


def _build_lattice(reading: _Reading) -> list[np.ndarray]:
    ref = _reference_cell(reading.system, reading.setting)
    inv_t = np.linalg.inv(ref).T
    gens = []
    for tok, d in zip(reading.tokens, reading.directions):
        axis = ref.T @ np.asarray(d, dtype=np.float64)
        for r in _element_matrices(tok, axis):
            w = inv_t @ r @ ref.T
            wi = np.rint(w)
            if np.abs(w - wi).max() > 1e-9:  # pragma: no cover - a defect of the direction table
                raise InvalidInputError(f"internal: element {tok.text} along {d} is not a lattice operation")
            gens.append(wi.astype(np.int64))
    return _closure(gens, _key_int, True)


@lru_cache(maxsize=256)
def _point_group_cached(symbol: str, setting) -> PointGroup:
    reading = read_symbol(symbol, setting)
    if reading.system == "icosahedral" or reading.system.endswith("-gonal"):
        gens = [m for t, d in zip(reading.tokens, reading.directions) for m in _element_matrices(t, d)]
        g = _named_group(gens if gens else [np.eye(3)], reading.system, None, False)
        if g.symbol == "?":
            g = PointGroup("".join(t.text for t in reading.tokens), None, g.system, g.operations, g.cartesian)
        return PointGroup(g.symbol, None, g.system, g.operations, g.cartesian, given=symbol)
    ops = _build_lattice(reading)
    g = _named_group(ops, reading.system, reading.setting, True)
    sym = g.symbol if g.symbol != "?" else "".join(t.text for t in reading.tokens)
    return PointGroup(sym, g.setting, g.system, g.operations, g.cartesian, given=symbol)


def point_group(symbol, *, setting: str | None = None) -> PointGroup:
    """The point group of a Hermann–Mauguin symbol.

    Parameters
    ----------
    symbol : str or PointGroup
        E.g. ``"m-3m"``, ``"m -3 m"``, ``"m3̄m"``, ``"4/m -3 2/m"``, ``"4/mmm"``,
        ``"-43m"``, ``"6/mmm"``, ``"-3m1"``, ``"-31m"``, ``"2/m:c"``, ``"-3m:R"``, ``"1 1 2/m"``;
        quasicrystal groups ``"m-3-5"``, ``"235"``, ``"8/mmm"``, ``"10/mmm"``, ``"12/mmm"``.
        A setting may follow a colon: ``:a``/``:b``/``:c`` (unique axis of a monoclinic
        group, default b) or ``:H``/``:R`` (hexagonal or rhombohedral axes of a trigonal
        group, default H).
    setting : str, optional
        The setting, instead of the colon suffix.

    Returns
    -------
    PointGroup

    Raises
    ------
    InvalidInputError
        For text that is not a point-group symbol, a setting that does not apply, or the
        ambiguous trigonal short symbols 32, 3m, -3m on hexagonal axes (the message says
        how to write the orientation).

    Examples
    --------
    >>> point_group("m-3m").order
    48
    >>> point_group("2/m:c").operations[1].tolist()
    [[-1, 0, 0], [0, -1, 0], [0, 0, 1]]
    """
    if isinstance(symbol, PointGroup):
        if setting is not None:
            raise InvalidInputError("`setting` applies to a symbol, not to a PointGroup object")
        return symbol
    if not isinstance(symbol, str):
        raise InvalidInputError(f"`group` must be a Hermann–Mauguin symbol (text) or a PointGroup, got {symbol!r}")
    if setting is not None and not isinstance(setting, str):
        raise InvalidInputError(f"`setting` must be text such as 'b', 'c', 'H' or 'R', got {setting!r}")
    return _point_group_cached(symbol, setting)


__all__ = ["PointGroup", "point_group", "POINT_GROUPS", "LAUE_CLASSES", "QUASICRYSTAL_GROUPS",
           "rotation_matrix", "describe_operation", "cell_parameters_text", "TAU"]
