"""Averaging indexed peak lists over integer operations on their indices.

A list holds M reflections with integer indices (h, k, l for a crystal, the D
higher-dimensional indices of a cut-and-project scheme for a quasicrystal). An operation T
maps row h to T h; the image is looked up exactly among the listed rows (after reducing
indices that name the same module vector to one form, e.g. h and h + (1, 1, 1, 1, 1) of the
Penrose scheme). Rows are encoded as single integers (mixed radix over the listed range), so
the look-up is a sort and a binary search per operation, with no Python loop over rows.
"""

from __future__ import annotations

import numpy as np

from ..errors import InvalidInputError
from .sym_grid import Sums
from .sym_quasi import canonical_indices


def as_index_rows(indices, n_rows: int, width: int | None, name: str = "indices") -> np.ndarray:
    """`indices` as an (M, D) int64 array of whole numbers, one row per listed point."""
    try:
        h = np.asarray(indices)
    except (TypeError, ValueError) as exc:
        raise InvalidInputError(f"`{name}` must be an (M, D) array of integers: {exc}") from None
    if h.dtype.kind == "c" or h.dtype.kind not in "biuf":
        raise InvalidInputError(f"`{name}` must hold integers, got dtype {h.dtype}")
    if h.ndim != 2 or h.shape[0] != n_rows or (width is not None and h.shape[1] != width):
        want = f"({n_rows}, {width if width is not None else 'D'})"
        raise InvalidInputError(f"`{name}` must have shape {want} (one row per point of the map), got {h.shape}")
    if h.dtype.kind == "f":
        if not np.isfinite(h).all():
            raise InvalidInputError(f"`{name}` has non-finite entries")
        hr = np.rint(h)
        bad = np.flatnonzero(np.abs(h - hr).max(axis=1) > 1e-9)
        if len(bad):
            raise InvalidInputError(f"`{name}` row {int(bad[0])} is not made of whole numbers: {h[bad[0]].tolist()}")
        h = hr
    return h.astype(np.int64)


class RowIndex:
    """Exact look-up of integer rows among a fixed list."""

    def __init__(self, rows: np.ndarray, what: str = "indices"):
        self.rows = rows
        self.lo = rows.min(axis=0) if len(rows) else np.zeros(rows.shape[1], dtype=np.int64)
        self.hi = rows.max(axis=0) if len(rows) else np.zeros(rows.shape[1], dtype=np.int64)
        span = (self.hi - self.lo + 1).astype(object)
        total = 1
        for s in span:
            total *= int(s)
        self.encoded = total < (1 << 62)
        if self.encoded:
            self.radix = np.array([int(np.prod(span[j + 1:], dtype=object)) for j in range(len(span))],
                                  dtype=np.int64)
            keys = self._encode(rows)
        else:
            keys = np.ascontiguousarray(rows).view(np.dtype((np.void, 8 * rows.shape[1]))).ravel()
        order = np.argsort(keys, kind="stable")
        sk = keys[order]
        dup = np.flatnonzero(sk[1:] == sk[:-1])
        if len(dup):
            i, j = int(order[dup[0]]), int(order[dup[0] + 1])
            raise InvalidInputError(
                f"`{what}` rows {i} and {j} name the same reflection {rows[i].tolist()}; list each once")
        self.order = order
        self.sorted_keys = sk

    def _encode(self, rows: np.ndarray) -> np.ndarray:
        return ((rows - self.lo) * self.radix).sum(axis=1)

    def find(self, rows: np.ndarray) -> np.ndarray:
        """Position of each row in the list, −1 where it is not listed."""
        out = np.full(len(rows), -1, dtype=np.int64)
        if not len(self.rows):
            return out
        if self.encoded:
            inside = np.asarray(((rows >= self.lo) & (rows <= self.hi)).all(axis=1))
            keys = self._encode(np.where(inside[:, None], rows, self.lo))
        else:
            inside = np.ones(len(rows), dtype=bool)
            keys = np.ascontiguousarray(rows).view(np.dtype((np.void, 8 * rows.shape[1]))).ravel()
        pos = np.searchsorted(self.sorted_keys, keys)
        pos_c = np.minimum(pos, len(self.sorted_keys) - 1)
        hit = inside & (self.sorted_keys[pos_c] == keys)
        out[hit] = self.order[pos_c[hit]]
        return out


def list_actions(ops: np.ndarray, rows: np.ndarray, kernel) -> tuple[list[np.ndarray], list[list[int]]]:
    """Positions of the images of every row under each distinct operation (−1: not listed).

    Operations with the same index matrix (e.g. the mirror normal to the plane of a planar
    tiling and the identity) act identically and are counted once.
    """
    canon = canonical_indices(rows, kernel)
    index = RowIndex(canon)
    seen: dict[bytes, int] = {}
    positions: list[np.ndarray] = []
    members: list[list[int]] = []
    for k, t in enumerate(ops):
        t = np.asarray(t, dtype=np.int64)
        key = t.tobytes()
        if key in seen:
            members[seen[key]].append(k)
            continue
        seen[key] = len(positions)
        positions.append(index.find(canonical_indices(rows @ t.T, kernel)))
        members.append([k])
    return positions, members


def accumulate_list(values0: np.ndarray, avail: np.ndarray, var0: np.ndarray | None, positions) -> Sums:
    """Sums over images for an indexed list (the same quantities as the grid engine)."""
    m = len(values0)
    total = np.zeros(m)
    count = np.zeros(m, dtype=np.uint16)
    stab = np.zeros(m, dtype=np.uint16)
    var = None if var0 is None else np.zeros(m)
    own = np.arange(m)
    for pos in positions:
        hit = pos >= 0
        p = np.where(hit, pos, 0)
        av = avail[p] * hit
        total += np.where(av > 0, values0[p], 0.0)
        count += av.astype(np.uint16)
        stab += (pos == own).astype(np.uint16)
        if var is not None and var0 is not None:  # (var is made when var0 is given)
            var += np.where(av > 0, var0[p], 0.0)
    return Sums(total, count, stab, var, None)


__all__ = ["as_index_rows", "RowIndex", "list_actions", "accumulate_list"]
