"""Point sets and Fourier-module vectors of cut-and-project schemes.

A :class:`PointSet` holds generated points with their internal (perpendicular-space)
coordinates and, when asked for, their lattice coordinates: what decoration rules and tile
counting need. To scatter from a patch, use :meth:`CutProjectScheme.patch`, which streams
:class:`kinemap.Model` chunks; ``kinemap.Model(points.positions, labels)`` turns a point set
held in memory (decorated, jittered) into a model.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from ..errors import InvalidInputError

if TYPE_CHECKING:  # pragma: no cover
    from .scheme import CutProjectScheme

#: What to do when a patch does not fit in memory (the hint of the memory checks).
STREAM_HINT = ("stream it in chunks instead: pass scheme.patch(radius) to kinemap.scatter, or loop over "
               "scheme.iter_points / iter_positions; or use a smaller radius")


def embed3(x: np.ndarray) -> np.ndarray:
    """Pad (N, d) coordinates with zeros to (N, 3)."""
    x = np.asarray(x, dtype=np.float64)
    out = np.zeros((len(x), 3))
    out[:, : x.shape[1]] = x
    return out


@dataclass
class PointSet:
    """Points of a cut-and-project set.

    Attributes
    ----------
    positions : ndarray (N, 3)
        Cartesian positions in Å (chains on x, planar sets in the xy-plane).
    perp : ndarray (N, e)
        Internal (perpendicular-space) coordinates.
    indices : ndarray (N, D) of int64, or None
        Lattice coordinates n (kept when asked for; 8·D bytes per point).
    scheme : CutProjectScheme
        The scheme that produced the points.
    """

    positions: np.ndarray
    perp: np.ndarray
    indices: np.ndarray | None
    scheme: CutProjectScheme
    info: dict = field(default_factory=dict)

    def __len__(self) -> int:
        return len(self.positions)

    @property
    def n_points(self) -> int:
        return len(self.positions)

    def subset(self, index, *, with_indices: bool = True) -> PointSet:
        """Points selected by a mask, slice or index array (without the lattice coordinates
        when `with_indices` is False)."""
        idx = self.indices if with_indices else None
        return PointSet(self.positions[index], self.perp[index], None if idx is None else idx[index],
                        self.scheme, dict(self.info))

    @classmethod
    def concatenate(cls, parts, scheme: CutProjectScheme | None = None) -> PointSet:
        """One point set from several (of the same scheme); `scheme` is needed when `parts`
        may be empty."""
        parts = list(parts)
        if not parts:
            if scheme is None:
                raise InvalidInputError("no point chunks to concatenate")
            return cls(np.zeros((0, 3)), np.zeros((0, scheme.internal_dim)),
                       np.zeros((0, scheme.lattice_dim), dtype=np.int64), scheme)
        idx = None if any(p.indices is None for p in parts) else np.concatenate([p.indices for p in parts])
        return cls(np.concatenate([p.positions for p in parts]), np.concatenate([p.perp for p in parts]),
                   idx, parts[0].scheme, dict(parts[0].info))


@dataclass
class ModuleVectors:
    """Fourier-module vectors with integer indices.

    Attributes
    ----------
    indices : ndarray (M, D) int64
    k_par : ndarray (M, d)
        Physical components in cycles/Å.
    k_perp : ndarray (M, e)
        Internal components (cycles per internal Å).
    q : ndarray (M, 3)
        q = 2π k embedded in 3-D (Å⁻¹), ready for ``kinemap.QGrid.points``.
    """

    indices: np.ndarray
    k_par: np.ndarray
    k_perp: np.ndarray
    q: np.ndarray

    def __len__(self) -> int:
        return len(self.indices)


def as_indices(indices, big_d: int) -> np.ndarray:
    """Integer module indices as an (M, D) int64 array (whole-valued floats accepted)."""
    try:
        h = np.asarray(indices)
    except (TypeError, ValueError):
        raise InvalidInputError(f"`indices` must be integers of shape (M, {big_d})") from None
    if h.ndim == 1:
        h = h[None, :]
    if h.ndim != 2 or h.shape[1] != big_d:
        raise InvalidInputError(f"`indices` must have shape (M, {big_d}), got {np.shape(indices)}")
    if h.dtype.kind not in "iu":
        if h.dtype.kind not in "f":
            raise InvalidInputError(f"`indices` must be integers, got dtype {h.dtype}")
        hr = np.rint(h)
        if not (np.isfinite(h).all() and np.array_equal(hr, h)):
            raise InvalidInputError("`indices` must be integers")
        h = hr
    return h.astype(np.int64)


__all__ = ["PointSet", "ModuleVectors", "embed3", "as_indices", "STREAM_HINT"]
