"""Quasicrystal and approximant patches as atom sources for kinemap's engines.

A :class:`Patch` is what :meth:`CutProjectScheme.patch` returns: a
:class:`kinemap.model.AtomSource` (it subclasses :class:`kinemap.model.AtomSourceBase`) that
generates its atoms chunk by chunk every time they are asked for and keeps none of them, so a
patch of 10⁸ points scatters in the memory of one chunk. ``patch.read()`` gathers the atoms
into one :class:`kinemap.Model`.

Two kinds of patch:

* a round patch, the points within a radius of a centre: finite, ``box`` None (for an
  approximant ``cell`` is still its period cell, the lattice that h, k, l refer to);
* a block of whole period cells of an approximant: periodic, ``box`` = the block and
  ``cell`` = the period cell (both 3x3, rows in Å).
"""

from __future__ import annotations

from collections.abc import Callable, Iterator, Mapping
from typing import TYPE_CHECKING

import numpy as np

from .._shared.memory import check_fits
from .._shared.validate import real_number, whole_number
from ..errors import InvalidInputError
from ..model import AtomSourceBase, Model
from . import approximants as _approx
from .points import STREAM_HINT, PointSet

if TYPE_CHECKING:  # pragma: no cover
    from .scheme import CutProjectScheme

#: Bytes per atom of an in-memory Model (positions, species reference, occupancy, B) plus the
#: generation chunk, used to refuse a ``read()`` that cannot fit.
_MODEL_BYTES_PER_ATOM = 24 + 8 + 8 + 8 + 24


def _per_label(value, name: str, low: float, high: float | None):
    """A scalar or a {label: value} mapping, checked."""
    if value is None:
        return None
    if isinstance(value, Mapping):
        out = {}
        for key, v in value.items():
            if not isinstance(key, str):
                raise InvalidInputError(f"`{name}` keys must be species labels, got {key!r}")
            out[key] = real_number(v, f"{name}[{key!r}]", minimum=low, maximum=high)
        return out
    return real_number(value, name, minimum=low, maximum=high)


def _values(value, labels: np.ndarray | str, n: int, default: float):
    """Per-atom values for one chunk (a scalar when all atoms share one)."""
    if value is None:
        return default
    if not isinstance(value, dict):
        return value
    if isinstance(labels, str):
        return value.get(labels, default)
    out = np.full(n, default)
    for key, v in value.items():
        out[labels == key] = v
    return out


def _rule_name(rule: Callable) -> str:
    """A species rule's name for the file metadata (a function's name, else its type)."""
    try:
        return str(rule.__name__)
    except AttributeError:
        return type(rule).__name__


class Patch(AtomSourceBase):
    """A patch of a cut-and-project set (or a block of an approximant) as an atom source.

    Made by :meth:`CutProjectScheme.patch`, which documents the arguments.

    Attributes
    ----------
    scheme : CutProjectScheme
    radius : float or None
        Radius in Å of a round patch (None for a block of cells).
    center : ndarray (d,) or None
    cells : tuple of int or None
        Cells along each period of an approximant block (None for a round patch).
    n_atoms : int
        Number of points (for round patches counted by one generation pass, then kept).
    box : ndarray (3, 3) or None
        The periodic box: the block of cells, or None for a round patch.
    cell : ndarray (3, 3) or None
        The approximant's period cell (h, k, l refer to it); None for a quasicrystal.

    Notes
    -----
    Every call to :meth:`iter_chunks` generates the points again; nothing is kept, so the
    memory use is one chunk however large the patch. Chunks never exceed `chunk_atoms`, and
    their concatenation does not depend on `chunk_atoms`.
    """

    def __init__(self, scheme: CutProjectScheme, radius=None, *, center=None, cells=None,
                 species: str | Callable = "A", occupancy=None, b_iso=None, pad: float = 1.0):
        from .scheme import CutProjectScheme  # the scheme module makes patches: imported late

        if not isinstance(scheme, CutProjectScheme):
            raise InvalidInputError(f"`scheme` must be a CutProjectScheme (e.g. quasi.octagonal()), "
                                    f"got {type(scheme).__name__}")
        self.scheme = scheme
        if (radius is None) == (cells is None):
            raise InvalidInputError("give either `radius` (a round patch) or `cells` (a block of an "
                                    "approximant's period cells), not both or neither")
        if isinstance(species, str):
            if not species:
                raise InvalidInputError("`species` must be a non-empty label or a rule")
        elif not callable(species):
            raise InvalidInputError(f"`species` must be one label or a rule species(points) -> labels, "
                                    f"got {type(species).__name__}")
        self.species = species
        self.occupancy = _per_label(occupancy, "occupancy", 0.0, 1.0)
        self.b_iso = _per_label(b_iso, "b_iso", 0.0, None)
        self.radius: float | None = None
        self.center: np.ndarray | None = None
        self.cells: tuple[int, ...] | None = None
        self._unit: PointSet | None = None
        self._count: int | None = None
        self._labels: list[str] | None = None
        if cells is not None:
            if center is not None:
                raise InvalidInputError("`center` applies to round patches (with `radius`), not to `cells`")
            if not scheme.is_periodic:
                raise InvalidInputError(f"`cells` needs a periodic scheme (an approximant); {scheme.name!r} "
                                        "is not periodic: use `radius`, or scheme.approximant(...) first")
            self.cells = _approx.check_repeats(scheme, cells, "cells")
            self.cell = scheme.cell3(pad)
            scale = np.ones(3)
            scale[: scheme.dim] = self.cells
            self.box = scale[:, None] * self.cell
        else:
            self.radius, self.center = scheme.check_region(radius, center)
            self.cell = scheme.cell3(pad) if scheme.is_periodic else None
            self.box = None
        if isinstance(species, str):
            self._check_keys([species])

    # ------------------------------------------------------------------ protocol
    @property
    def n_atoms(self) -> int:  # type: ignore[override]  # computed (read-only) where the base has an attribute
        """Number of atoms (round patches: counted by one generation pass, then kept)."""
        if self._count is None:
            if self.cells is not None:
                self._count = len(self._unit_cell()) * int(np.prod(self.cells))
            else:
                self._survey()
        assert self._count is not None
        return self._count

    def species_labels(self) -> list[str]:
        """The species labels of the patch, sorted (a rule: found by one generation pass)."""
        if isinstance(self.species, str):
            return [self.species]
        if self._labels is None:
            self._survey()
        assert self._labels is not None
        return list(self._labels)

    def iter_chunks(self, chunk_atoms: int) -> Iterator[Model]:
        """Yield the patch as :class:`kinemap.Model` pieces of at most `chunk_atoms` atoms
        (Cartesian Å; each with the patch's ``cell`` and ``box``)."""
        chunk_atoms = whole_number(chunk_atoms, "chunk_atoms", minimum=1)
        for ps in self._iter_points(chunk_atoms):
            labels = self._labels_of(ps)
            n = len(ps)
            yield Model(ps.positions, labels, occupancy=_values(self.occupancy, labels, n, 1.0),
                        b_iso=_values(self.b_iso, labels, n, 0.0), cell=self.cell, box=self.box)

    def read(self, max_atoms: int = 50_000_000) -> Model:
        """All atoms as one in-memory :class:`kinemap.Model`.

        Raises
        ------
        InvalidInputError
            Above `max_atoms` atoms, or when the model would not fit in the memory this
            process may still allocate (the estimate is in the message): stream the patch
            with :meth:`iter_chunks` or pass it to :func:`kinemap.scatter` instead.
        """
        max_atoms = whole_number(max_atoms, "max_atoms", minimum=1)
        if self.cells is not None:
            expected = float(self.n_atoms)
        else:
            assert self.radius is not None
            expected = self.scheme.expected_count(self.radius) * 1.02 + 64
        check_fits(_MODEL_BYTES_PER_ATOM * expected, f"a model of about {int(expected):,} atoms", hint=STREAM_HINT)
        return super().read(max_atoms)

    def _extra_description(self) -> dict:
        d: dict = {"generator": self.scheme.name, "density": self.scheme.density,
                   "species_rule": None if isinstance(self.species, str) else _rule_name(self.species)}
        if self.cells is not None:
            d["cells"] = list(self.cells)
        else:
            assert self.center is not None
            d["radius"] = self.radius
            d["center"] = self.center.tolist()
        return d

    def __repr__(self) -> str:
        where = f"cells={self.cells}" if self.cells is not None else f"radius={self.radius:g}"
        return f"Patch({self.scheme.name!r}, {where})"

    # ------------------------------------------------------------------ generation
    def _unit_cell(self) -> PointSet:
        if self._unit is None:
            self._unit = self.scheme.unit_cell(with_indices=True)
        return self._unit

    def _iter_points(self, chunk: int) -> Iterator[PointSet]:
        """Point sets of at most `chunk` points (with indices when a species rule needs them)."""
        rule = not isinstance(self.species, str)
        if self.cells is None:
            yield from self.scheme.iter_points(self.radius, self.center, chunk_points=chunk, with_indices=rule)
            return
        held: list[PointSet] = []
        count = 0
        for ps in _approx.iter_cells(self.scheme, self.cells, self._unit_cell()):
            if not rule:
                ps = ps.subset(slice(None), with_indices=False)
            held.append(ps)
            count += len(ps)
            while count >= chunk:
                joined = PointSet.concatenate(held)
                yield joined.subset(slice(0, chunk))
                rest = joined.subset(slice(chunk, None))
                held, count = ([rest] if len(rest) else []), len(rest)
        if count:
            yield PointSet.concatenate(held)

    def _labels_of(self, ps: PointSet) -> np.ndarray | str:
        if isinstance(self.species, str):
            return self.species
        labels = np.asarray(self.species(ps), dtype=object)
        if labels.shape != (len(ps),):
            raise InvalidInputError(f"the species rule must return {len(ps)} labels (one per point), "
                                    f"got shape {labels.shape}")
        return labels

    def _survey(self) -> None:
        """One generation pass: count the points and collect the labels a rule gives."""
        count = 0
        found: set[str] = set()
        for ps in self._iter_points(1 << 18):
            count += len(ps)
            chunk_labels = self._labels_of(ps)
            if not isinstance(chunk_labels, str):
                found.update(str(v) for v in np.unique(chunk_labels.astype(str)))
        self._count = count
        labels = [self.species] if isinstance(self.species, str) else sorted(found)
        self._check_keys(labels)
        self._labels = labels

    def _check_keys(self, labels) -> None:
        for name, value in (("occupancy", self.occupancy), ("b_iso", self.b_iso)):
            if isinstance(value, dict):
                unknown = sorted(set(value) - set(labels))
                if unknown:
                    raise InvalidInputError(f"`{name}` names species {unknown}, which the patch does not have "
                                            f"(it has {sorted(labels)})")


__all__ = ["Patch"]
