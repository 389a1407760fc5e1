"""A measured map prepared for comparisons, and the walk through its slabs.

Every sum of a comparison runs through :func:`walk`: slab by slab along grid axis 0, it
reads the measured map and the model's map, computes |q|, and marks the points that take
part (finite I_o and I_c, σ_o > 0 when given, not masked by the user, outside the excluded
Bragg neighbourhoods), counting the points left out per reason.
"""

from __future__ import annotations

import numpy as np

from .._shared.progress import Progress
from ..errors import InvalidInputError
from ..pattern import Pattern
from ..qgrid import QGrid, RegularGrid
from .bragg import BraggExclusion, ExclusionTree
from .maps import ArrayMap, MapSource, SlabMasks, SlabQ, as_map, rows_per_slab, should_stream

#: Counted reasons for leaving a point out, in the order they are checked.
EXCLUSION_REASONS = ("unmeasured", "bad_sigma", "no_model", "user_mask", "bragg")


def _q_ref(grid: QGrid) -> float:
    if isinstance(grid, RegularGrid):
        from .bragg import _corners

        c = _corners(grid)
        return float(np.linalg.norm(c, axis=1).max())
    return float(np.linalg.norm(grid.q_vectors(), axis=1).max())


def _symmetry_spec(symmetry) -> tuple[str, dict] | None:
    if symmetry is None:
        return None
    if isinstance(symmetry, str):
        return symmetry, {}
    if isinstance(symmetry, dict) and "group" in symmetry:
        opts = {k: v for k, v in symmetry.items() if k != "group"}
        return symmetry["group"], opts
    raise InvalidInputError("`symmetry` must be a point-group symbol (e.g. 'm-3m') or a dict with 'group' and "
                            f"options of kinemap.symmetrize, got {symmetry!r}")


def _symmetrize(pattern: Pattern, spec) -> Pattern:
    from .symmetry import symmetrize

    group, opts = spec
    return symmetrize(pattern, group, **opts)


class Measured:
    """A measured map prepared for comparisons: its slabs, the user's mask, the Bragg
    exclusion and the symmetry average (shared by every model compared with it)."""

    def __init__(self, meas, *, mask=None, exclude_bragg=None, symmetry=None, stream=None,
                 needs_memory: bool = False):
        src = as_map(meas, "meas")
        if stream is None and needs_memory:  # left to decide: by slabs only when nothing needs the map whole
            stream = False
        self.streamed = should_stream(src, stream)
        self.sym_spec = _symmetry_spec(symmetry)
        if self.streamed and self.sym_spec is not None:
            raise InvalidInputError("symmetry averaging needs the whole map in memory; it cannot be combined with "
                                    "stream=True")
        if not self.streamed and isinstance(src, MapSource):
            src = ArrayMap(src.read())
        self.grid = src.grid
        self.mask = self._user_mask(mask)
        self.exclusion = BraggExclusion.coerce(exclude_bragg)
        self.tree = ExclusionTree(self.grid, self.exclusion) if self.exclusion is not None else None
        self.independent_fraction = 1.0
        self.symmetry_info: dict = {}
        if isinstance(src, ArrayMap) and src.pattern.sigma is not None:
            from .agreement import check_sigma

            check_sigma(src.pattern.sigma, "sigma of the measured map")
        if self.sym_spec is not None:
            sym = _symmetrize(src.pattern, self.sym_spec)
            info = dict(sym.metadata.get("symmetry", {}))
            n_fin = int(np.isfinite(sym.intensity).sum())
            n_ind = info.get("n_independent")
            if n_ind is not None and n_fin > 0:
                self.independent_fraction = min(1.0, float(n_ind) / n_fin)
            self.symmetry_info = info
            src = ArrayMap(sym)
        self.src = src
        self.rows = rows_per_slab(self.grid)
        self.per_row = int(np.prod(self.grid.shape[1:], dtype=np.int64)) if len(self.grid.shape) > 1 else 1
        self.q_ref = _q_ref(self.grid)
        self._bragg = SlabMasks()
        self.slab_q = SlabQ(self.grid)

    @property
    def weighted(self) -> bool:
        return self.src.has_sigma

    def _user_mask(self, mask):
        if mask is None:
            return None
        m = np.asarray(mask)
        if m.size == 0:
            raise InvalidInputError(f"`mask` is empty (shape {m.shape}); give a boolean array of the map's shape "
                                    f"{tuple(self.grid.shape)} (True = leave out) or None")
        if m.dtype != bool:
            raise InvalidInputError(f"`mask` must be a boolean array (True = leave out), got dtype {m.dtype}")
        if m.shape != tuple(self.grid.shape):
            raise InvalidInputError(f"`mask` has shape {m.shape}, but the measured map has shape "
                                    f"{tuple(self.grid.shape)}")
        return m

    def bragg_slab(self, a: int, q: np.ndarray) -> np.ndarray | None:
        if self.tree is None:
            return None
        if a not in self._bragg:
            self._bragg.put(a, self.tree.excluded(q))
        return self._bragg.get(a)

    def source_description(self) -> dict:
        md = self.src.metadata if hasattr(self.src, "metadata") else {}
        return {k: md[k] for k in ("file", "group", "signal", "errors", "source") if k in md}


def walk(meas: Measured, calc_src, counts: dict | None = None, progress: Progress | None = None):
    """Yield per slab: (a, b, I_o, σ_o, I_c, σ_c, |q|, keep), flattened (σ None when absent)."""
    rows = meas.rows
    for (a, b, io, so), (_a2, _b2, ic, sc) in zip(meas.src.slabs(rows), calc_src.slabs(rows)):
        fa = a * meas.per_row
        io = np.ravel(io)
        ic = np.ravel(ic)
        so = None if so is None else np.ravel(so)
        sc = None if (sc is None or so is None) else np.ravel(sc)
        if so is not None:
            neg = so < 0
            if neg.any():
                j = np.unravel_index(fa + int(np.flatnonzero(neg)[0]), tuple(meas.grid.shape))
                raise InvalidInputError(f"the measured map's sigma is negative at index {tuple(int(i) for i in j)}: "
                                        f"{float(so[neg][0])!r}; uncertainties are >= 0 (mark unmeasured points "
                                        "with NaN intensity)")
        qv = meas.slab_q.get(a, b, meas.per_row)
        q = np.sqrt(np.einsum("ij,ij->i", qv, qv))
        keep = np.isfinite(io)
        if counts is not None:
            counts["unmeasured"] += int((~keep).sum())
        if so is not None:
            ok = np.isfinite(so) & (so > 0)
            if counts is not None:
                counts["bad_sigma"] += int((keep & ~ok).sum())
            keep &= ok
        ok = np.isfinite(ic) & (np.isfinite(sc) if sc is not None else True)
        if counts is not None:
            counts["no_model"] += int((keep & ~ok).sum())
        keep &= ok
        if meas.mask is not None:
            um = ~np.ravel(meas.mask[a:b])
            if counts is not None:
                counts["user_mask"] += int((keep & ~um).sum())
            keep &= um
        bm = meas.bragg_slab(a, qv)
        if bm is not None:
            if counts is not None:
                counts["bragg"] += int((keep & bm).sum())
            keep &= ~bm
        if progress is not None:
            progress.add(1)
        yield a, b, io, so, ic, sc, q, keep



__all__ = ["Measured", "walk", "EXCLUSION_REASONS"]
