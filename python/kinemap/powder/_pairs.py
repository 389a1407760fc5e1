"""Binned pair-distance histograms of a model, a file or several frames, per group pair.

Atoms are sorted into *groups* that share one Debye–Waller factor and one species label
(species × B, as :meth:`kinemap.Model.groups` does for the 3-D engine), because the powder
pattern needs the factor f_g(Q) f_h(Q)* T_g(Q) T_h(Q) of every group pair. The table of
groups is built over all frames in a first pass over the atoms, so every chunk and frame uses
the same group indices.

Streaming: with chunks C_1 … C_n of a frame, the Rust core adds the pairs inside every chunk
and across every pair of chunks (a < b). An atom source can only be read from its start, so
pass a reads the chunks up to C_a again (and skips them), keeps C_a in memory and pairs it
with each later chunk: a frame costs n(n + 1)/2 + n chunk reads beyond the first pass
(n = ⌈N / chunk_atoms⌉; one pass for a model that fits in one chunk). Chunk pairs that the
first pass shows to be farther apart than the cut-off (bounding boxes, or fractional
intervals in a periodic box) are read but not paired.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from .. import _core
from .._shared.memory import check_fits, human_bytes
from .._shared.progress import Progress
from .._shared.validate import thread_count as resolve_threads
from .._shared.validate import whole_number
from ..errors import InvalidInputError
from ..model import Model, as_cell

#: Atoms per chunk for pair histograms (both chunks of a pair are in memory, ~100 B per atom
#: each with the core's cell lists: about 0.4 GB at this size).
DEFAULT_CHUNK_ATOMS = 1 << 21


def as_atom_source(obj, name: str = "model"):
    """A Model or atom source (anything with ``iter_chunks`` and ``species_labels``)."""
    if isinstance(obj, Model) or (hasattr(obj, "iter_chunks") and hasattr(obj, "species_labels")):
        return obj
    raise InvalidInputError(
        f"`{name}` must be a kinemap.Model, an atom source from kinemap.open_model(), or a list "
        f"of those (frames), got {type(obj).__name__}"
    )


def frame_sources(model_or_source, frames) -> tuple[list, list]:
    """(frame labels, sources) from one model/source, a list of them, or a trajectory source.

    `frames` None uses the given frame (or every item of a list); otherwise a selection as in
    :func:`kinemap.io.select_frames` ("all", "0:50:5", a list ...) of a trajectory source's
    frames or of the list's items.
    """
    from ..io.convert import select_frames

    if isinstance(model_or_source, (list, tuple)):
        items = list(model_or_source)
        if not items:
            raise InvalidInputError("`model` is an empty list: give at least one model or source")
        idx = select_frames(frames, len(items), "the list of models")
        return idx, [as_atom_source(items[i], f"model[{i}]") for i in idx]
    src = as_atom_source(model_or_source)
    if frames is None:
        return [int(getattr(src, "frame", 0))], [src]
    n_frames = getattr(src, "n_frames", None)
    if n_frames is None or not hasattr(src, "at_frame"):
        raise InvalidInputError(
            "`frames` needs a trajectory source from kinemap.open_model() (it has no frames) or a "
            "list of models"
        )
    idx = select_frames(frames, int(n_frames), str(getattr(src, "path", "the source")))
    return idx, [src if i == getattr(src, "frame", None) else src.at_frame(i) for i in idx]


def resolve_box(source, box):
    """The periodic box of a frame: ``box="model"`` takes the model's ``box`` (None for a
    finite particle); None means a particle; or a 3x3 array of rows."""
    if box is None:
        return None
    if isinstance(box, str):
        if box != "model":
            raise InvalidInputError(f"`box` must be 'model', None (a particle) or a 3x3 array, got {box!r}")
        b = source.box
        return None if b is None else as_cell(b, "box")
    return as_cell(box, "box")


@dataclass
class GroupTable:
    """Distinct (species label, B) groups over all frames, in sorted order."""

    labels: list[str]
    b_iso: np.ndarray
    index: dict = field(default_factory=dict)
    aniso: bool = False

    @property
    def n_groups(self) -> int:
        return len(self.labels)

    @property
    def n_pairs(self) -> int:
        return self.n_groups * (self.n_groups + 1) // 2

    def pairs(self) -> list[tuple[int, int]]:
        """Group pairs (g, h), g ≤ h, in the row order of the histograms."""
        return [(g, h) for g in range(self.n_groups) for h in range(g, self.n_groups)]


def _chunk_groups(chunk) -> tuple[list[str], np.ndarray, np.ndarray, bool]:
    """(labels, B of each local group, local index of each atom, anisotropic?) of a chunk."""
    if getattr(chunk, "u_aniso", None) is not None:
        # Orientation averages see the isotropic equivalent B = 8π² tr(U)/3.
        b = 8.0 * np.pi**2 * np.trace(chunk.u_aniso, axis1=1, axis2=2) / 3.0
        m = Model(chunk.positions, chunk.species, occupancy=chunk.occupancy, b_iso=np.round(b, 10),
                  cell=chunk.cell, box=chunk.box)
        g = m.groups()
        return g.labels, g.b_iso, g.index, True
    g = chunk.groups()
    return g.labels, g.b_iso, g.index, False


@dataclass
class FrameScan:
    """What the first pass learns about one frame."""

    n_atoms: int
    occupancy_sum: float
    box: np.ndarray | None
    lo: np.ndarray
    hi: np.ndarray
    chunk_bounds: list  # per chunk: (lo, hi) Cartesian, or fractional intervals (periodic)
    group_occupancy: dict  # (label, B) -> Σ o
    aniso: bool = False  # some atoms had anisotropic displacements (replaced by their B)


def scan_frame(source, box, chunk_atoms: int) -> FrameScan:
    """First pass: atoms, occupancy sums per (label, B), bounding boxes of every chunk."""
    n = 0
    lo = np.full(3, np.inf)
    hi = np.full(3, -np.inf)
    bounds: list = []  # per chunk: None (no atoms), (lo, hi) or fractional intervals
    group_occ: dict = {}
    inv = None if box is None else np.linalg.inv(box)
    aniso = False
    for chunk in source.iter_chunks(chunk_atoms):
        if chunk.n_atoms == 0:
            bounds.append(None)
            continue
        labels, b, index, an = _chunk_groups(chunk)
        aniso |= an
        sums = _fixed_sums(index, chunk.occupancy, len(labels))
        for lab, bb, s in zip(labels, b, sums):
            key = (str(lab), float(bb))
            group_occ[key] = group_occ.get(key, 0) + s
        p = chunk.positions
        n += chunk.n_atoms
        clo, chi = p.min(axis=0), p.max(axis=0)
        lo, hi = np.minimum(lo, clo), np.maximum(hi, chi)
        if inv is None:
            bounds.append((clo, chi))
        else:
            f = p @ inv
            f -= np.floor(f)
            bounds.append(_circular_intervals(f))
    # occupancy sums as exact integers (units of 2⁻³²): independent of the chunking
    occ_sum = sum(group_occ.values()) / OCC_SCALE
    group_occ = {k: v / OCC_SCALE for k, v in group_occ.items()}
    return FrameScan(n, occ_sum, box, lo, hi, bounds, group_occ, aniso)


OCC_SCALE = float(1 << 32)


def _fixed_sums(index: np.ndarray, occupancy: np.ndarray, n_groups: int) -> list[int]:
    """Σ occupancy per group as exact integers in units of 2⁻³² (order-independent sums)."""
    ints = np.rint(np.asarray(occupancy, dtype=np.float64) * OCC_SCALE).astype(np.int64)
    order = np.argsort(index, kind="stable")
    idx = np.asarray(index)[order]
    starts = np.searchsorted(idx, np.arange(n_groups))
    ends = np.searchsorted(idx, np.arange(n_groups), side="right")
    sorted_ints = ints[order]
    out = []
    for a, b in zip(starts, ends):
        # int64 holds 2³¹ atoms of occupancy 1; Python ints add the chunks exactly
        out.append(int(sorted_ints[a:b].sum(dtype=np.int64)) if b > a else 0)
    return out


def _circular_intervals(frac: np.ndarray) -> list[tuple[float, float]]:
    """Smallest arc [start, start + length] (mod 1) holding each fractional coordinate."""
    out = []
    for i in range(3):
        v = np.sort(frac[:, i])
        gaps = np.diff(np.concatenate([v, [v[0] + 1.0]]))
        k = int(np.argmax(gaps))
        start = v[(k + 1) % len(v)]
        out.append((float(start), float(1.0 - gaps[k])))
    return out


def _far_apart(a, b, cutoff: float | None, box) -> bool:
    """True when no pair across two chunks can lie within the cut-off (skip the pair)."""
    if cutoff is None or a is None or b is None:
        return a is None or b is None
    if box is None:
        (alo, ahi), (blo, bhi) = a, b
        gap = np.maximum(0.0, np.maximum(alo - bhi, blo - ahi))
        return float(np.sqrt((gap * gap).sum())) > cutoff
    widths = 1.0 / np.linalg.norm(np.linalg.inv(box).T, axis=1)
    for i in range(3):
        (sa, la), (sb, lb) = a[i], b[i]
        # Arcs [sa, sa + la] and [sb, sb + lb] on a circle of length 1: the forward gaps
        # from the end of one to the start of the other; disjoint when arcs and gaps add up
        # to the whole circle. Any pair across them differs in s_i by at least the smaller
        # gap, so it is at least gap · w_i apart.
        d1 = (sb - (sa + la)) % 1.0
        d2 = (sa - (sb + lb)) % 1.0
        disjoint = abs(la + lb + d1 + d2 - 1.0) < 1e-9
        if disjoint and min(d1, d2) * widths[i] > cutoff * (1 + 1e-9):
            return True
    return False


@dataclass
class PairData:
    """Histograms summed over frames, with what the formulas need.

    Attributes
    ----------
    groups : GroupTable
    hist : ndarray (n_pairs, n_nodes)
        Σ over frames of the binned pair weights Σ o_i o_j (unordered pairs, two-node
        binning) on nodes ``k·dr``.
    dr, n_nodes, cutoff : node spacing (Å), node count, cut-off (Å or None: all pairs)
    group_occupancy : ndarray (n_groups,)
        Σ over frames of Σ_{i∈g} o_i.
    uniform : ndarray (n_pairs, n_nodes) or None
        Σ over frames of the expected binned weights of a uniform density O_g O_h/V
        (periodic frames only): what ρ₀ contributes, to subtract.
    volume_inverse_sum : float
        Σ over frames of 1/V (0 for particles).
    n_frames, frames, n_atoms_sum, occupancy_sum, pairs, boxes
    """

    groups: GroupTable
    hist: np.ndarray
    dr: float
    n_nodes: int
    cutoff: float | None
    group_occupancy: np.ndarray
    uniform: np.ndarray | None
    volume_inverse_sum: float
    n_frames: int
    frames: list
    n_atoms_sum: int
    occupancy_sum: float
    pairs: int
    boxes: list
    aniso: bool = False
    descriptions: list = field(default_factory=list)

    @property
    def periodic(self) -> bool:
        return self.uniform is not None

    @property
    def nodes(self) -> np.ndarray:
        return np.arange(self.n_nodes) * self.dr


def shell_volumes(n_nodes: int, dr: float, cutoff: float | None) -> np.ndarray:
    """S[k] = ∫ 4πr² φ_k(r) dr over r ≤ cutoff, φ_k the hat function of node k (two-node
    binning): the binned weight of a unit density. Exact polynomial integrals."""
    k = np.arange(n_nodes, dtype=np.float64)
    c = np.inf if cutoff is None else float(cutoff)

    def piece(a, b, p0, p1):
        # ∫_a^b r² (p0 + p1 r) dr with a, b clipped to [0, c]
        a = np.clip(a, 0.0, c)
        b = np.clip(b, 0.0, c)
        return (p0 * (b**3 - a**3) / 3.0 + p1 * (b**4 - a**4) / 4.0) * (b > a)

    rk = k * dr
    # rising side r ∈ [r_k − dr, r_k]: φ = (r − r_{k−1})/dr; falling side: (r_{k+1} − r)/dr
    rise = piece(rk - dr, rk, -(rk - dr) / dr, 1.0 / dr)
    fall = piece(rk, rk + dr, (rk + dr) / dr, -1.0 / dr)
    return 4.0 * np.pi * (rise + fall)


def histogram_bytes(n_groups: int, n_nodes: int, threads: int | None) -> int:
    """Memory of the accumulators: one per worker thread (24 B per node: 64-bit words and
    128-bit totals), the merged result and its float copies (32 B per node)."""
    import os

    workers = threads if threads is not None else (os.cpu_count() or 1)
    return n_groups * (n_groups + 1) // 2 * n_nodes * (24 * workers + 32)


def collect(sources: list, frames: list, *, box, r_max: float | None, dr: float,
            threads, chunk_atoms: int, progress=False, extra_nodes: int = 2) -> PairData:
    """Pair histograms of every frame, summed (see the module notes).

    `r_max` is the cut-off (Å): required with a periodic box (default there: half the
    smallest face-to-face width), None for all pairs of a particle.
    """
    threads = resolve_threads(threads)
    chunk_atoms = whole_number(chunk_atoms, "chunk_atoms", minimum=1)
    boxes = [resolve_box(s, box) for s in sources]
    if any(b is None for b in boxes) and any(b is not None for b in boxes):
        raise InvalidInputError("some frames have a periodic box and some do not; give `box=` explicitly")
    periodic = boxes[0] is not None
    scans = [scan_frame(s, b, chunk_atoms) for s, b in zip(sources, boxes)]
    for f, sc in zip(frames, scans):
        if sc.n_atoms == 0:
            raise InvalidInputError(f"frame {f} of the model has no atoms")
        if sc.occupancy_sum <= 0:
            raise InvalidInputError(f"frame {f} of the model has only atoms of occupancy 0: nothing scatters")
    keys = sorted({k for sc in scans for k in sc.group_occupancy})
    table = GroupTable(labels=[k[0] for k in keys], b_iso=np.array([k[1] for k in keys]),
                       index={k: i for i, k in enumerate(keys)},
                       aniso=any(getattr(sc, "aniso", False) for sc in scans))

    cutoff = r_max
    if periodic:
        half = min(0.5 * float(np.min(1.0 / np.linalg.norm(np.linalg.inv(b).T, axis=1))) for b in boxes)
        if cutoff is None:
            cutoff = half
        elif cutoff > half * (1 + 1e-12):
            raise InvalidInputError(
                f"`r_max` = {cutoff:g} Å exceeds half the smallest face-to-face width of the periodic "
                f"box ({half:g} Å): pairs by the minimum image are unique only up to there; use a "
                "smaller r_max or a larger box (supercell)"
            )
        span = cutoff
    else:
        span = cutoff if cutoff is not None else max(
            float(np.sqrt(((sc.hi - sc.lo) ** 2).sum())) for sc in scans)
    if cutoff is not None and not (math.isfinite(cutoff) and cutoff > 0):
        raise InvalidInputError(f"`r_max` must be a positive number of Å, got {cutoff!r}")
    n_nodes = math.floor(span / dr) + extra_nodes
    need = histogram_bytes(table.n_groups, n_nodes, threads)
    check_fits(need, f"pair histograms of {table.n_pairs} group pairs × {n_nodes} nodes "
                     f"(dr = {dr:.3g} Å up to {span:.4g} Å)")
    if table.n_pairs * n_nodes > (1 << 28):
        raise InvalidInputError(
            f"pair histograms of {table.n_pairs} group pairs × {n_nodes} nodes (about "
            f"{human_bytes(need)}) are too large; use fewer (species, B) groups (round B), a smaller "
            "r_max or a larger dr"
        )

    hist = np.zeros((table.n_pairs, n_nodes))
    uniform = np.zeros((table.n_pairs, n_nodes)) if periodic else None
    group_occ = np.zeros(table.n_groups)
    shells = shell_volumes(n_nodes, dr, cutoff) if periodic else None
    inv_v = 0.0
    pairs = 0
    n_calls = sum(len(sc.chunk_bounds) * (len(sc.chunk_bounds) + 1) // 2 for sc in scans)
    prog = Progress(progress, n_calls, unit="chunk pair", desc="kinemap pairs")
    for src, b, sc in zip(sources, boxes, scans):
        h = _core.PairHistogram(table.n_groups, n_nodes, float(dr), cutoff, b)
        _stream_pairs(h, src, sc, table, cutoff, b, threads, chunk_atoms, prog)
        hist += h.values()
        pairs += int(h.pairs_counted)
        occ = np.zeros(table.n_groups)
        for key, s in sc.group_occupancy.items():
            occ[table.index[key]] += s
        group_occ += occ
        if periodic:
            assert uniform is not None and shells is not None  # made for periodic models
            vol = abs(float(np.linalg.det(b)))
            inv_v += 1.0 / vol
            for p, (g, hh) in enumerate(table.pairs()):
                w = occ[g] * occ[hh] / vol
                uniform[p] += (0.5 * w if g == hh else w) * shells
    prog.close()
    return PairData(groups=table, hist=hist, dr=float(dr), n_nodes=n_nodes, cutoff=cutoff,
                    group_occupancy=group_occ, uniform=uniform, volume_inverse_sum=inv_v,
                    n_frames=len(sources), frames=list(frames),
                    n_atoms_sum=sum(sc.n_atoms for sc in scans),
                    occupancy_sum=sum(sc.occupancy_sum for sc in scans), pairs=pairs,
                    boxes=[None if b is None else b.tolist() for b in boxes], aniso=table.aniso,
                    descriptions=[_describe(s) for s in sources])


def _describe(source) -> dict:
    try:
        d = source.describe()
    except Exception:
        return {}
    return {k: v for k, v in d.items() if k != "species" or len(v) < 50}


def _global_index(chunk, table: GroupTable) -> np.ndarray:
    labels, b, index, _ = _chunk_groups(chunk)
    lut = np.array([table.index[(str(lab), float(bb))] for lab, bb in zip(labels, b)], dtype=np.uint32)
    return np.ascontiguousarray(lut[index], dtype=np.uint32)


def _stream_pairs(h, src, scan: FrameScan, table: GroupTable, cutoff, box, threads, chunk_atoms, prog):
    n_chunks = len(scan.chunk_bounds)
    for a in range(n_chunks):
        held = None
        for idx, chunk in enumerate(src.iter_chunks(chunk_atoms)):
            if idx < a:
                continue
            if idx == a:
                if chunk.n_atoms == 0:
                    break
                held = (np.ascontiguousarray(chunk.positions), _global_index(chunk, table),
                        np.ascontiguousarray(chunk.occupancy, dtype=np.float64))
                h.add_within(*held, threads=threads)
                prog.add(1)
                continue
            if chunk.n_atoms and not _far_apart(scan.chunk_bounds[a], scan.chunk_bounds[idx], cutoff, box):
                assert held is not None  # chunk a (idx > a here) had atoms
                h.add_between(*held, np.ascontiguousarray(chunk.positions), _global_index(chunk, table),
                              np.ascontiguousarray(chunk.occupancy, dtype=np.float64), threads=threads)
            prog.add(1)

