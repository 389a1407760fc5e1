"""Atomistic models: positions, species, occupancies and displacement parameters.

Conventions: positions are Cartesian in Å (fractional coordinates are converted with the
cell before anything else); a cell is a 3x3 array whose rows are the lattice vectors a, b, c.
Isotropic displacements are given as B (Å²) or U_iso (Å², B = 8π²U); anisotropic ones as a
Cartesian 3x3 U tensor (Å²), whose Debye–Waller factor is T(q) = exp(−½ qᵀUq) and which
reduces to exp(−B s²) for U = U_iso·I.
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping
from dataclasses import dataclass
from typing import Protocol, runtime_checkable

import numpy as np

from . import _core
from ._shared.memory import check_fits
from ._shared.validate import real_array
from .errors import InvalidInputError

#: Bytes of working memory per atom of an in-memory model (arrays, labels, grouping).
_BYTES_PER_ATOM = 96

#: Largest number of distinct (species, displacement) groups a model may have. Each group
#: costs one factor table per q-chunk; per-atom B values that all differ should be rounded.
MAX_GROUPS = 4096


def _as_positions(positions, name: str = "positions") -> np.ndarray:
    p = real_array(positions, name, finite=False)
    if p.ndim != 2 or p.shape[1] != 3:
        raise InvalidInputError(f"`{name}` must be an (N, 3) array, got shape {p.shape}")
    # Per atom: positions, occupancy, B, species (object) and grouping work arrays.
    check_fits(len(p) * _BYTES_PER_ATOM, f"a model of {len(p):,} atoms in memory",
               hint="stream it from a file with kinemap.open_model instead")
    bad = ~np.isfinite(p).all(axis=1)
    if bad.any():
        j = int(np.flatnonzero(bad)[0])
        raise InvalidInputError(
            f"`{name}` of atom {j} is not finite: {p[j].tolist()} "
            f"({int(bad.sum())} atoms have non-finite coordinates)"
        )
    return np.require(p, dtype=np.float64, requirements=["C", "A"])  # contiguous and aligned for the core


def as_cell(cell, name: str = "cell") -> np.ndarray:
    """Validate a cell: a 3x3 array whose rows are the lattice vectors a, b, c (Å)."""
    try:
        c = np.asarray(cell, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise InvalidInputError(f"`{name}` must be a 3x3 array of numbers: {exc}") from None
    if c.shape != (3, 3):
        raise InvalidInputError(f"`{name}` must be a 3x3 array (rows a, b, c), got shape {c.shape}")
    if not np.isfinite(c).all():
        raise InvalidInputError(f"`{name}` has non-finite entries: {c.tolist()}")
    vol = float(np.linalg.det(c))
    if abs(vol) < 1e-9:
        raise InvalidInputError(f"`{name}` is singular (volume {vol:.3g} Å³): rows must be independent")
    return c


def cell_from_parameters(a: float, b: float, c: float, alpha: float, beta: float, gamma: float) -> np.ndarray:
    """The cell (rows a, b, c in Å) of lattice parameters, angles in degrees.

    Setting: a along x, b in the xy plane (the usual crystallographic convention).

    Raises
    ------
    InvalidInputError
        For non-positive lengths or angles that do not make a cell.
    """
    for name, v in (("a", a), ("b", b), ("c", c)):
        if not (np.isfinite(v) and v > 0):
            raise InvalidInputError(f"cell length {name} must be a positive number of Å, got {v!r}")
    for name, v in (("alpha", alpha), ("beta", beta), ("gamma", gamma)):
        if not (np.isfinite(v) and 0 < v < 180):
            raise InvalidInputError(f"cell angle {name} must be between 0 and 180 degrees, got {v!r}")
    al, be, ga = np.radians([alpha, beta, gamma])
    cx = c * np.cos(be)
    cy = c * (np.cos(al) - np.cos(be) * np.cos(ga)) / np.sin(ga)
    cz2 = c * c - cx * cx - cy * cy
    if cz2 <= 1e-12 * c * c:
        raise InvalidInputError(f"cell angles alpha={alpha}, beta={beta}, gamma={gamma} do not make a cell")
    return np.array([[a, 0.0, 0.0], [b * np.cos(ga), b * np.sin(ga), 0.0], [cx, cy, np.sqrt(cz2)]])


def supercell_matrix(supercell, name: str = "supercell") -> np.ndarray:
    """An integer 3x3 matrix P (box = P·cell) from (n1, n2, n3) or a 3x3 array of integers.

    Raises
    ------
    InvalidInputError
        For non-integer entries or a singular matrix.
    """
    a = real_array(supercell, name)
    if a.shape == (3,):
        a = np.diag(a)
    if a.shape != (3, 3):
        raise InvalidInputError(f"`{name}` must be (n1, n2, n3) or an integer 3x3 matrix, got shape {a.shape}")
    if not np.allclose(a, np.round(a), rtol=0, atol=1e-9):
        raise InvalidInputError(f"`{name}` must hold whole numbers (box = P·cell with integer P), got {a.tolist()}")
    p = np.round(a)
    if round(abs(float(np.linalg.det(p)))) < 1:
        raise InvalidInputError(f"`{name}` is singular: {p.astype(int).tolist()}")
    return p


def resolve_box_and_cell(box, cell, supercell) -> tuple[np.ndarray | None, np.ndarray | None]:
    """(box, cell) from what was given: cell defaults to box; box = P·cell with a supercell.

    Raises
    ------
    InvalidInputError
        When a supercell is given without a cell or box, or box, cell and supercell disagree.
    """
    b = None if box is None else as_cell(box, "box")
    c = None if cell is None else as_cell(cell, "cell")
    if supercell is None:
        return b, (c if c is not None else b)
    p = supercell_matrix(supercell)
    if c is None:
        if b is None:
            raise InvalidInputError("`supercell` needs a `cell` (the parent cell) or a `box`")
        return b, np.linalg.solve(p, b)
    implied = p @ c
    if b is None:
        return implied, c
    if not np.allclose(implied, b, rtol=1e-6, atol=1e-6):
        raise InvalidInputError(f"`box` {b.tolist()} is not `supercell` × `cell` = {implied.tolist()}")
    return b, c


def _per_atom(value, codes: tuple[np.ndarray, np.ndarray], n: int, name: str, default: float) -> np.ndarray:
    """Broadcast a scalar, an (N,) array or a {species: value} mapping to one value per atom
    (`codes`: the model's distinct labels and each atom's index into them)."""
    if value is None:
        return np.full(n, default, dtype=np.float64)
    if isinstance(value, Mapping):
        labels, index = codes
        per_label = np.full(len(labels), default, dtype=np.float64)
        known = {str(lab): i for i, lab in enumerate(labels)}
        for key, v in value.items():
            if key not in known:
                raise InvalidInputError(
                    f"`{name}` names species {key!r}, which the model does not have "
                    f"(it has {sorted(known)})"
                )
            per_label[known[key]] = float(v)
        return per_label[index] if n else np.zeros(0)
    a = np.asarray(value, dtype=np.float64)
    if a.ndim == 0:
        return np.full(n, float(a))
    if a.shape != (n,):
        raise InvalidInputError(
            f"`{name}` must be a number, a per-species mapping or an array of {n} values, got shape {a.shape}")
    return np.ascontiguousarray(a)


def _factorize_labels(species: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Sorted distinct labels and each atom's index into them.

    Models have few distinct labels, so one vectorised comparison per label beats sorting a
    million Python strings.
    """
    if len(species) == 0:
        return np.array([], dtype=str), np.zeros(0, dtype=np.int64)
    distinct = sorted(set(species.tolist()))
    if len(distinct) > 64:
        labels, codes = np.unique(species.astype(str), return_inverse=True)
        return labels, codes.reshape(-1)
    codes = np.zeros(len(species), dtype=np.int64)
    for i, lab in enumerate(distinct[1:], start=1):
        codes[species == lab] = i
    return np.array(distinct, dtype=str), codes


def _check_range(values: np.ndarray, name: str, lo: float, hi: float | None) -> None:
    bad = ~np.isfinite(values) | (values < lo)
    if hi is not None:
        bad |= values > hi
    if bad.any():
        j = int(np.flatnonzero(bad)[0])
        allowed = f"[{lo}, {hi}]" if hi is not None else f">= {lo}"
        raise InvalidInputError(
            f"`{name}` of atom {j} is {values[j]!r}, outside the allowed range {allowed}"
        )


def _species_array(species, n: int) -> np.ndarray:
    if isinstance(species, str):
        if not species:
            raise InvalidInputError("`species` must be a non-empty string")
        return np.full(n, species, dtype=object)
    s = np.asarray(species, dtype=object)
    if s.shape != (n,):
        raise InvalidInputError(f"`species` must be one label or {n} labels (one per atom), got shape {s.shape}")
    # Checked per distinct value (models have few labels), not per atom.
    for lab in set(s.tolist()):
        if not isinstance(lab, str) or not lab:
            j = next(i for i, x in enumerate(s) if x == lab and type(x) is type(lab))
            raise InvalidInputError(f"`species` of atom {j} must be a non-empty string, got {lab!r}")
    return s


@dataclass(frozen=True)
class Groups:
    """Atoms sorted into groups that share one q-dependent factor (species × Debye–Waller)."""

    index: np.ndarray  #: (N,) uint32 group index of every atom
    labels: list[str]  #: species label of every group
    b_iso: np.ndarray  #: (G,) B (Å²) of every group (isotropic part)
    u_aniso: np.ndarray | None  #: (G, 3, 3) Cartesian U of every group, or None

    @property
    def n_groups(self) -> int:
        return len(self.labels)


class Model:
    """An atomistic model held in memory.

    Parameters
    ----------
    positions : array_like, shape (N, 3)
        Cartesian positions in Å, or fractional coordinates when ``fractional=True``.
    species : str or sequence of str
        One label for all atoms or one per atom: element symbols ('Fe'), ions ('O2-'),
        isotopes ('D', '58Ni') or site labels ('Fe_a'); the probe decides what they mean.
    occupancy : float, array_like (N,) or mapping, optional
        Site occupancy in [0, 1] per atom or per species (default 1).
    b_iso : float, array_like (N,) or mapping, optional
        Isotropic Debye–Waller parameter B in Å² (≥ 0), per atom or per species.
    u_iso : float, array_like (N,) or mapping, optional
        The same as mean-square displacement U_iso in Å² (B = 8π²U). Give B or U, not both.
    u_aniso : array_like (3, 3), (N, 3, 3) or mapping of species to (3, 3), optional
        Anisotropic Cartesian displacement tensor U in Å² (symmetric, positive semi-definite);
        T(q) = exp(−½ qᵀUq). Exclusive with `b_iso`/`u_iso`.
    cell : array_like (3, 3), optional
        The lattice that h, k, l refer to: rows a, b, c in Å (default: the box). Needed for
        fractional input and hkl grids.
    box : array_like (3, 3), optional
        The periodic box of the model (rows, Å), e.g. the simulation box of a supercell.
        None (default, unless `supercell` gives one) means a finite, non-periodic model.
    supercell : (n1, n2, n3) or integer 3x3 array, optional
        box = P·cell: give the parent `cell` and the repetitions instead of the box.
    fractional : bool
        Treat `positions` as fractional coordinates of `cell`.

    Notes
    -----
    Arrays of a model are read-only once it is built (cached groupings depend on them): make
    a new model, e.g. with :meth:`subset` or :meth:`translated`, to change atoms.

    Raises
    ------
    InvalidInputError
        On wrong shapes, non-finite coordinates (naming the atom), empty labels, occupancy
        outside [0, 1], negative B or U, or a tensor that is not symmetric positive
        semi-definite.
    """

    def __init__(self, positions, species, *, occupancy=None, b_iso=None, u_iso=None,
                 u_aniso=None, cell=None, box=None, supercell=None, fractional: bool = False):
        p = _as_positions(positions)
        self.box, self.cell = resolve_box_and_cell(box, cell, supercell)
        if fractional:
            if self.cell is None:
                raise InvalidInputError("`fractional=True` needs a `cell` to convert the coordinates")
            p = np.ascontiguousarray(p @ self.cell)
        self.positions = p
        n = len(p)
        self.species = _species_array(species, n)
        codes = _factorize_labels(self.species)
        self.occupancy = _per_atom(occupancy, codes, n, "occupancy", 1.0)
        _check_range(self.occupancy, "occupancy", 0.0, 1.0)
        if b_iso is not None and u_iso is not None:
            raise InvalidInputError("give either `b_iso` or `u_iso`, not both (B = 8π²U)")
        if u_aniso is not None and (b_iso is not None or u_iso is not None):
            raise InvalidInputError("`u_aniso` replaces `b_iso`/`u_iso`: give one kind of displacement")
        if u_iso is not None:
            u = _per_atom(u_iso, codes, n, "u_iso", 0.0)
            _check_range(u, "u_iso", 0.0, None)
            self.b_iso = 8.0 * np.pi**2 * u
        else:
            self.b_iso = _per_atom(b_iso, codes, n, "b_iso", 0.0)
            _check_range(self.b_iso, "b_iso", 0.0, None)
        self.u_aniso = None if u_aniso is None else self._aniso(u_aniso, n)
        self._freeze(codes)

    def _freeze(self, codes: tuple[np.ndarray, np.ndarray] | None = None) -> None:
        """Make the arrays read-only and reset the cached groupings (`codes`: the label
        factorisation when it is already known)."""
        for arr in (self.positions, self.species, self.occupancy, self.b_iso, self.u_aniso):
            if isinstance(arr, np.ndarray):
                arr.flags.writeable = False
        self._groups: Groups | None = None
        self._counts: dict[str, int] | None = None
        self._codes: tuple[np.ndarray, np.ndarray] | None = codes
        self._core_atoms: tuple[Groups, _core.AtomSet] | None = None

    def __getstate__(self) -> dict:
        state = dict(self.__dict__)
        state["_core_atoms"] = None  # the core's copy stays in this process (rebuilt on use)
        return state

    def core_atoms(self) -> tuple[Groups, _core.AtomSet]:
        """The groups and the core's padded copy of the atoms (positions, occupancy, group
        of each atom) that the exact kernels read, built once and kept while the model lives
        (32 bytes an atom), so repeated calls on the same model (lines, q-blocks, peaks) do
        not rebuild it."""
        if self._core_atoms is None:
            groups = self.groups()
            # Aligned, C-ordered float64 (arrays rebuilt from pickled buffers can be unaligned).
            atoms = _core.AtomSet(np.require(self.positions, np.float64, ["C", "A"]),
                                  np.require(self.occupancy, np.float64, ["C", "A"]),
                                  groups.index, max(groups.n_groups, 1))
            self._core_atoms = (groups, atoms)
        return self._core_atoms

    def _label_codes(self) -> tuple[np.ndarray, np.ndarray]:
        """Sorted distinct labels and each atom's index into them (computed once)."""
        if self._codes is None:
            self._codes = _factorize_labels(self.species)
        return self._codes

    def _aniso(self, u_aniso, n: int) -> np.ndarray:
        if isinstance(u_aniso, Mapping):
            out = np.zeros((n, 3, 3))
            labels = set(self.species.tolist())
            for key, v in u_aniso.items():
                if key not in labels:
                    raise InvalidInputError(
                        f"`u_aniso` names species {key!r}, which the model does not have (it has {sorted(labels)})")
                out[self.species == key] = np.asarray(v, dtype=np.float64)
        else:
            u = np.asarray(u_aniso, dtype=np.float64)
            if u.shape == (3, 3):
                out = np.broadcast_to(u, (n, 3, 3)).copy()
            elif u.shape == (n, 3, 3):
                out = u.copy()
            else:
                raise InvalidInputError(f"`u_aniso` must have shape (3, 3) or ({n}, 3, 3), got {u.shape}")
        if not np.isfinite(out).all():
            j = int(np.flatnonzero(~np.isfinite(out).reshape(n, 9).all(axis=1))[0])
            raise InvalidInputError(f"`u_aniso` of atom {j} has non-finite entries")
        asym = np.abs(out - out.transpose(0, 2, 1)).max(axis=(1, 2)) if n else np.zeros(0)
        if (asym > 1e-12).any():
            j = int(np.flatnonzero(asym > 1e-12)[0])
            raise InvalidInputError(f"`u_aniso` of atom {j} is not symmetric: {out[j].tolist()}")
        if n:
            eig = np.linalg.eigvalsh(out)
            bad = eig.min(axis=1) < -1e-12
            if bad.any():
                j = int(np.flatnonzero(bad)[0])
                raise InvalidInputError(
                    f"`u_aniso` of atom {j} is not positive semi-definite (eigenvalues {eig[j].tolist()})"
                )
        return out

    def __len__(self) -> int:
        return len(self.positions)

    @property
    def n_atoms(self) -> int:
        """Number of atoms."""
        return len(self.positions)

    def species_counts(self) -> dict[str, int]:
        """Atoms per species label, sorted by label (computed once)."""
        if self._counts is None:
            labels, codes = self._label_codes()
            counts = np.bincount(codes, minlength=len(labels)) if len(codes) else np.zeros(0, int)
            self._counts = {str(k): int(v) for k, v in zip(labels, counts)}
        return dict(self._counts)

    def species_labels(self) -> list[str]:
        """Distinct species labels, sorted."""
        return list(self.species_counts())

    def groups(self) -> Groups:
        """Sort atoms into (species, displacement) groups that share one factor f(q)·T(q).

        Raises
        ------
        InvalidInputError
            When there are more than ``MAX_GROUPS`` distinct combinations (for example a
            different B for every atom): round the displacement parameters.
        """
        if self._groups is None:
            self._groups = self._make_groups()
        return self._groups

    def _make_groups(self) -> Groups:
        if self.n_atoms == 0:
            return Groups(index=np.zeros(0, np.uint32), labels=[], b_iso=np.zeros(0), u_aniso=None)
        labels, sp_index = self._label_codes()
        if self.u_aniso is None:
            # The common case, one B per species (or per model): the species are the groups,
            # found without sorting a million values.
            first = np.array([int(np.argmax(sp_index == i)) for i in range(len(labels))])
            b_of_label = self.b_iso[first]
            if np.array_equal(self.b_iso, b_of_label[sp_index]):  # (the labels are those present)
                return Groups(index=np.ascontiguousarray(sp_index, dtype=np.uint32),
                              labels=[str(lab) for lab in labels], b_iso=b_of_label.copy(), u_aniso=None)
            # Integer keys (species code × distinct-B index): sorting integers is much faster
            # than a row-wise unique of a float table, and a model with one B is one pass.
            b_values, b_index = np.unique(self.b_iso, return_inverse=True)
            key = sp_index.astype(np.int64) * len(b_values) + b_index.reshape(-1)
            ukey, index = np.unique(key, return_inverse=True)
            uniq = np.column_stack([(ukey // len(b_values)).astype(np.float64), b_values[ukey % len(b_values)]])
        else:
            iu = np.triu_indices(3)
            key = np.column_stack([sp_index.astype(np.float64), self.u_aniso[:, iu[0], iu[1]]])
            uniq, index = np.unique(key, axis=0, return_inverse=True)
        if len(uniq) > MAX_GROUPS:
            raise InvalidInputError(
                f"the model has {len(uniq)} distinct (species, displacement) combinations, more "
                f"than the {MAX_GROUPS} kinemap sums separately; round the B/U values "
                "(e.g. np.round(b_iso, 3)) or give them per species"
            )
        g_labels = [str(labels[int(k)]) for k in uniq[:, 0]]
        if self.u_aniso is None:
            b = uniq[:, 1].copy()
            u = None
        else:
            b = np.zeros(len(uniq))
            u = np.zeros((len(uniq), 3, 3))
            iu = np.triu_indices(3)
            u[:, iu[0], iu[1]] = uniq[:, 1:]
            u[:, iu[1], iu[0]] = uniq[:, 1:]
        return Groups(index=np.ascontiguousarray(index.reshape(-1), dtype=np.uint32),
                      labels=g_labels, b_iso=b, u_aniso=u)

    def iter_chunks(self, chunk_atoms: int):
        """Yield the model in consecutive pieces of at most `chunk_atoms` atoms."""
        if chunk_atoms >= self.n_atoms:
            yield self
            return
        for start in range(0, self.n_atoms, chunk_atoms):
            yield self.subset(slice(start, start + chunk_atoms))

    def subset(self, index) -> Model:
        """A new model with the atoms selected by `index` (slice, mask or integer array)."""
        return self._derived(np.ascontiguousarray(self.positions[index]), index)

    def _derived(self, positions: np.ndarray, index=slice(None)) -> Model:
        m = Model.__new__(Model)
        m.cell, m.box = self.cell, self.box
        m.positions = positions
        m.species = self.species[index]
        m.occupancy = np.ascontiguousarray(self.occupancy[index])
        m.b_iso = np.ascontiguousarray(self.b_iso[index])
        m.u_aniso = None if self.u_aniso is None else self.u_aniso[index]
        if isinstance(index, slice) and index == slice(None):  # same atoms: same groups
            m._freeze(self._codes)
            m._groups, m._counts = self._groups, self._counts
            return m
        # The labels of a piece follow from this model's (factorised once, kept): integer
        # work instead of comparing every string label of every piece again.
        labels, codes = self._label_codes()
        sub = codes[index]
        present = np.flatnonzero(np.bincount(sub, minlength=len(labels))) if len(sub) else np.zeros(0, int)
        if len(present) < len(labels):
            remap = np.zeros(len(labels), dtype=np.int64)
            remap[present] = np.arange(len(present))
            labels, sub = labels[present], remap[sub]
        m._freeze((labels, sub))
        return m

    def tiled(self, reps) -> Model:
        """A supercell: this model (a unit cell with its `cell`) repeated n1 × n2 × n3 times
        along the cell vectors. The result keeps the cell for h, k, l and has box = P·cell.

        Parameters
        ----------
        reps : (n1, n2, n3)
            Repetitions along a, b, c (whole numbers >= 1).

        Raises
        ------
        InvalidInputError
            Without a cell, or for repetitions that are not whole numbers >= 1.
        """
        if self.cell is None:
            raise InvalidInputError("`tiled` repeats a unit cell: give the model a `cell`")
        p = supercell_matrix(reps, "reps")
        n = np.diag(p).astype(int)
        if np.shape(reps) != (3,) or (n < 1).any():
            raise InvalidInputError(f"`reps` must be three whole numbers >= 1, got {reps!r}")
        total = int(np.prod(n)) * self.n_atoms
        check_fits(total * _BYTES_PER_ATOM, f"a supercell of {total:,} atoms")
        shifts = np.stack(np.meshgrid(*[np.arange(k) for k in n], indexing="ij"), -1).reshape(-1, 3) @ self.cell
        pos = (shifts[:, None, :] + self.positions[None, :, :]).reshape(-1, 3)
        k = len(shifts)
        u = None if self.u_aniso is None else np.tile(self.u_aniso, (k, 1, 1))
        return Model(pos, np.tile(self.species, k), occupancy=np.tile(self.occupancy, k),
                     b_iso=None if u is not None else np.tile(self.b_iso, k), u_aniso=u,
                     cell=self.cell, supercell=p)

    def moved(self, positions) -> Model:
        """A copy with the same atoms at new Cartesian `positions` (N, 3), Å."""
        p = _as_positions(positions)
        if p.shape != self.positions.shape:
            raise InvalidInputError(f"`positions` must have shape {self.positions.shape}, got {p.shape}")
        return self._derived(np.ascontiguousarray(p))

    def translated(self, shift) -> Model:
        """A copy shifted by the Cartesian vector `shift` (Å)."""
        s = real_array(shift, "shift", shape=(3,))
        return self._derived(self.positions + s)

    def describe(self) -> dict:
        """A short summary for output files and the command line."""
        return {
            "n_atoms": int(self.n_atoms),
            "species": self.species_counts(),
            "cell": None if self.cell is None else self.cell.tolist(),
            "box": None if self.box is None else self.box.tolist(),
        }

    def __repr__(self) -> str:
        d = self.describe()
        return f"Model(n_atoms={d['n_atoms']}, species={d['species']})"


@runtime_checkable
class AtomSource(Protocol):
    """What kinemap's engines need of a model: a :class:`Model`, a file opened with
    :func:`kinemap.open_model`, a quasicrystal patch, or any object of your own with these
    members.

    ``iter_chunks(chunk_atoms)`` yields the atoms as consecutive :class:`Model` pieces of at
    most `chunk_atoms` atoms (Cartesian Å); ``n_atoms`` may be None when a source cannot tell
    its size before streaming; ``cell`` is the lattice of h, k, l and ``box`` the periodic
    box (each a 3x3 array of rows, or None).
    """

    @property
    def n_atoms(self) -> int | None: ...

    @property
    def cell(self) -> np.ndarray | None: ...

    @property
    def box(self) -> np.ndarray | None: ...

    def species_labels(self) -> list[str]: ...

    def describe(self) -> dict: ...

    def iter_chunks(self, chunk_atoms: int) -> Iterator[Model]: ...


class AtomSourceBase:
    """A small base class for atom sources: subclasses set ``n_atoms``, ``box`` (and
    ``cell`` when it differs from the box) and implement ``species_labels`` and
    ``iter_chunks``; ``describe`` and ``read`` come from here."""

    n_atoms: int | None = None
    box: np.ndarray | None = None
    _cell: np.ndarray | None = None

    @property
    def cell(self) -> np.ndarray | None:
        """The lattice that h, k, l refer to (default: the box)."""
        return self._cell if self._cell is not None else self.box

    @cell.setter
    def cell(self, value) -> None:
        self._cell = None if value is None else as_cell(value)

    def species_labels(self) -> list[str]:
        raise NotImplementedError

    def iter_chunks(self, chunk_atoms: int) -> Iterator[Model]:
        raise NotImplementedError

    def iter_range(self, start: int, stop: int, chunk_atoms: int) -> Iterator[Model]:
        """The atoms ``start:stop`` as chunks of at most `chunk_atoms` (used by the tasks of a
        cluster run). This default streams from the first atom and keeps what falls in the
        range; readers that can seek (HDF5) read only the range."""
        pos = 0
        for chunk in self.iter_chunks(chunk_atoms):
            n = chunk.n_atoms
            lo, hi = max(start - pos, 0), min(stop - pos, n)
            if lo < hi:
                yield chunk if (lo, hi) == (0, n) else chunk.subset(slice(lo, hi))
            pos += n
            if pos >= stop:
                return

    def _extra_description(self) -> dict:
        return {}

    def describe(self) -> dict:
        """Summary for output files and ``kinemap info``."""
        d = {
            "n_atoms": None if self.n_atoms is None else int(self.n_atoms),
            "species": self.species_labels(),
            "cell": None if self.cell is None else np.asarray(self.cell).tolist(),
            "box": None if self.box is None else np.asarray(self.box).tolist(),
        }
        d.update(self._extra_description())
        return d

    def read(self, max_atoms: int = 50_000_000) -> Model:
        """All atoms as one in-memory :class:`Model` (refused above `max_atoms`)."""
        n = self.n_atoms
        if n is not None and n > max_atoms:
            raise InvalidInputError(f"{self!r} has {n:,} atoms, more than `max_atoms`={max_atoms:,} to hold "
                                    "in memory; stream it with iter_chunks()")
        chunks = [c for c in self.iter_chunks(max(int(n or max_atoms), 1)) if c.n_atoms]
        if not chunks:
            return Model(np.zeros((0, 3)), [], cell=self.cell, box=self.box)
        if len(chunks) == 1:
            return chunks[0]
        return concatenate(chunks)


def concatenate(models) -> Model:
    """One model holding the atoms of several (cell and box of the first)."""
    models = list(models)
    if not models:
        raise InvalidInputError("nothing to concatenate")
    first = models[0]
    if any(m.u_aniso is not None for m in models) and not all(m.u_aniso is not None for m in models):
        raise InvalidInputError("cannot join models with and without anisotropic displacements")
    u = None if first.u_aniso is None else np.concatenate([m.u_aniso for m in models])
    return Model(np.concatenate([m.positions for m in models]), np.concatenate([m.species for m in models]),
                 occupancy=np.concatenate([m.occupancy for m in models]),
                 b_iso=None if u is not None else np.concatenate([m.b_iso for m in models]),
                 u_aniso=u, cell=first.cell, box=first.box)


def fractional_to_cartesian(fractional, cell) -> np.ndarray:
    """Convert fractional coordinates (N, 3) to Cartesian Å with the cell rows a, b, c."""
    return _as_positions(fractional, "fractional") @ as_cell(cell)


def reciprocal_basis(cell) -> np.ndarray:
    """Rows a*, b*, c* with a*·a = 1 (no 2π), in Å⁻¹."""
    return np.linalg.inv(as_cell(cell)).T


__all__ = ["Model", "Groups", "AtomSource", "AtomSourceBase", "concatenate", "fractional_to_cartesian",
           "reciprocal_basis", "as_cell", "cell_from_parameters", "supercell_matrix", "resolve_box_and_cell",
           "MAX_GROUPS"]
