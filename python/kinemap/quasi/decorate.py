"""Decoration and disorder of cut-and-project point sets.

* Species by a rule on the internal (perpendicular-space) coordinate — the usual way
  quasicrystal structure models put different atoms on different parts of the window — or
  by vertex type (number of tiling edges meeting at the vertex).
* Tiles and vertex configurations read from the lattice coordinates: two vertices n and
  n + e_j are joined by a tiling edge exactly when both are in the set, which for a
  canonical window can be decided in internal space (y ± e_j⊥ ∈ W).
* Phonon-like disorder: independent Gaussian displacements of the physical positions; the
  average amplitude drops by the Debye–Waller factor exp(−q²⟨u²⟩/2) (ITC Vol. C §8.1).
* Phason-like disorder: every lattice point's internal coordinate is jittered by an
  independent Gaussian before the window test, so points near the window boundary flip in or
  out (tile flips); the average amplitude drops by the phason Debye–Waller factor
  exp(−2π²σ²|k⊥|²). The jitter of a lattice point is a fixed function of its indices and
  the seed, so it does not depend on the patch or on chunking.
"""

from __future__ import annotations

from itertools import combinations, product

import numpy as np

from .._shared.validate import real_number, whole_number
from ..errors import InvalidInputError
from ._enumerate import StripEnumerator
from .points import PointSet, embed3
from .scheme import CutProjectScheme
from .windows import BoxWindow


def _check_points(points) -> PointSet:
    if not isinstance(points, PointSet):
        raise InvalidInputError(f"`points` must be a PointSet from a quasi generator, got {type(points).__name__}")
    return points


def species_by_perp(points: PointSet, radii=None, labels=None, center=None, rule=None) -> np.ndarray:
    """Species labels from the internal coordinate of every point.

    Parameters
    ----------
    points : PointSet
    radii : sequence of float, optional
        Increasing shell radii (internal-space Å) of the dense internal components,
        measured from `center`.
    labels : sequence of str, optional
        ``len(radii) + 1`` labels: ``labels[i]`` for radii[i−1] ≤ r < radii[i].
    center : array_like, optional
        Centre in internal space (default: the window's bounding-box centre).
    rule : callable, optional
        ``rule(perp) -> sequence of labels`` instead of shells.

    Returns
    -------
    ndarray of object (N,)
    """
    points = _check_points(points)
    if rule is not None:
        out = np.asarray(rule(points.perp), dtype=object)
        if out.shape != (len(points),):
            raise InvalidInputError(f"`rule` must return {len(points)} labels, got shape {out.shape}")
        return out
    if radii is None or labels is None:
        raise InvalidInputError("give `radii` and `labels`, or a `rule`")
    r_edges = np.asarray(radii, dtype=np.float64).reshape(-1)
    labels = list(labels)
    if len(labels) != len(r_edges) + 1:
        raise InvalidInputError(f"`labels` needs len(radii) + 1 = {len(r_edges) + 1} entries, got {len(labels)}")
    if (np.diff(r_edges) <= 0).any() or (r_edges < 0).any():
        raise InvalidInputError(f"`radii` must be increasing and >= 0, got {r_edges.tolist()}")
    w = points.scheme.window
    dense = np.array(w.dense, dtype=bool)
    c = w.center if center is None else np.asarray(center, dtype=np.float64).reshape(-1)
    if c.shape != (w.dim,):
        raise InvalidInputError(f"`center` must have {w.dim} components, got {c.shape}")
    r = np.linalg.norm((points.perp - c)[:, dense], axis=1)
    shell = np.searchsorted(r_edges, r, side="right")
    return np.asarray(labels, dtype=object)[shell]


def neighbour_signature(points: PointSet) -> np.ndarray:
    """Which of the 2D possible tiling edges ±e_j leave every vertex, as a bit mask.

    Bit j is set when n + e_j is in the set, bit D + j when n − e_j is. Decided in internal
    space: y ± e_j⊥ ∈ W (exact for the canonical windows built here, including sheared
    approximant windows).

    Returns
    -------
    ndarray (N,) of int64
    """
    points = _check_points(points)
    sch = points.scheme
    big_d = sch.lattice_dim
    mask = np.zeros(len(points), dtype=np.int64)
    for j in range(big_d):
        col = sch.internal[:, j]
        for sgn, bit in ((1.0, j), (-1.0, big_d + j)):
            inside = sch.window.contains(points.perp + sgn * col)
            mask |= inside.astype(np.int64) << bit
    return mask


def coordination(points: PointSet) -> np.ndarray:
    """Number of tiling edges at every vertex (vertex degree), from :func:`neighbour_signature`."""
    sig = neighbour_signature(points)
    out = np.zeros(len(sig), dtype=np.int64)
    for b in range(2 * points.scheme.lattice_dim):
        out += (sig >> b) & 1
    return out


def species_by_coordination(points: PointSet, mapping, default=None) -> np.ndarray:
    """Species labels by vertex degree, e.g. ``{8: "Mn", 3: "Al"}``.

    Parameters
    ----------
    points : PointSet
    mapping : dict[int, str] or callable
        Degree → label, or ``f(degrees) -> labels``.
    default : str, optional
        Label for degrees not in `mapping` (an error if None and one occurs).
    """
    deg = coordination(points)
    if callable(mapping):
        return np.asarray(mapping(deg), dtype=object)
    out = np.empty(len(deg), dtype=object)
    for k in np.unique(deg):
        if int(k) in mapping:
            out[deg == k] = mapping[int(k)]
        elif default is not None:
            out[deg == k] = default
        else:
            j = int(np.flatnonzero(deg == k)[0])
            raise InvalidInputError(f"vertex {j} has {int(k)} edges, which `mapping` does not name (give `default`)")
    return out


def _keys(indices: np.ndarray, lo: np.ndarray, span: np.ndarray) -> np.ndarray:
    k = np.zeros(len(indices), dtype=np.int64)
    for j in range(indices.shape[1]):
        k = k * span[j] + (indices[:, j] - lo[j])
    return k


def count_tiles(points: PointSet) -> dict:
    """Count the tiles of a canonical tiling in a patch.

    A tile spanned by unit directions J (|J| = d) with lowest corner n is present when all
    2^d corners n + Σ_{j∈S} e_j, S ⊆ J, are vertices of the patch.

    Returns
    -------
    dict
        ``{J: count}`` for every set J of d directions (J a tuple of indices).
    """
    points = _check_points(points)
    if points.indices is None:
        raise InvalidInputError("`points` must carry lattice indices (generate with with_indices=True)")
    n = points.indices
    d = points.scheme.dim
    big_d = points.scheme.lattice_dim
    lo = n.min(axis=0) - 1
    span = n.max(axis=0) - lo + 2
    if np.sum(np.log2(span.astype(float))) > 62:
        raise InvalidInputError("patch too large for tile counting keys")
    keys = np.sort(_keys(n, lo, span))
    out = {}
    for dirs in combinations(range(big_d), d):
        present = np.ones(len(n), dtype=bool)
        for sub in product((0, 1), repeat=d):
            if not any(sub):
                continue
            off = np.zeros(big_d, dtype=np.int64)
            for s, j in zip(sub, dirs):
                off[j] += s
            k2 = _keys(n + off, lo, span)
            pos = np.searchsorted(keys, k2)
            pos = np.minimum(pos, len(keys) - 1)
            present &= keys[pos] == k2
        out[dirs] = int(present.sum())
    return out


def tile_volumes(scheme: CutProjectScheme) -> dict:
    """Physical size (length/area/volume) of the tile spanned by each set of directions."""
    d = scheme.dim
    out = {}
    for dirs in combinations(range(scheme.lattice_dim), d):
        m = scheme.parallel[:, list(dirs)]
        out[dirs] = float(abs(np.linalg.det(m)))
    return out


def phonon_displacements(points, u_rms: float, seed=0) -> np.ndarray:
    """Positions with independent Gaussian displacements (phonon-like disorder).

    Parameters
    ----------
    points : PointSet or array_like (N, 3)
    u_rms : float
        Root-mean-square displacement per Cartesian component (Å); ⟨u_x²⟩ = u_rms².
        Only the physical dimensions of a PointSet are displaced (x for chains, x–y for
        planar sets).
    seed : int or numpy Generator

    Returns
    -------
    ndarray (N, 3): displaced positions. The mean amplitude is multiplied by
    exp(−q² u_rms²/2) = exp(−B s²) with B = 8π² u_rms².
    """
    if isinstance(points, PointSet):
        pos, dim = points.positions, points.scheme.dim
    else:
        pos = np.asarray(points, dtype=np.float64)
        dim = 3
        if pos.ndim != 2 or pos.shape[1] != 3:
            raise InvalidInputError(f"`points` must be a PointSet or an (N, 3) array, got shape {pos.shape}")
    u_rms = real_number(u_rms, "u_rms", minimum=0.0)
    rng = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)
    out = pos.copy()
    out[:, :dim] += rng.normal(0.0, float(u_rms), size=(len(pos), dim))
    return out


# ------------------------------------------------------------------------------ phasons
_M1 = np.uint64(0x9E3779B97F4A7C15)
_M2 = np.uint64(0xBF58476D1CE4E5B9)
_M3 = np.uint64(0x94D049BB133111EB)


def _splitmix(x: np.ndarray) -> np.ndarray:
    with np.errstate(over="ignore"):
        z = x + _M1
        z = (z ^ (z >> np.uint64(30))) * _M2
        z = (z ^ (z >> np.uint64(27))) * _M3
        return z ^ (z >> np.uint64(31))


def _lattice_normals(indices: np.ndarray, seed: int, count: int) -> np.ndarray:
    """Standard normal numbers (K, count), a fixed function of (indices, seed)."""
    with np.errstate(over="ignore"):
        h = np.full(len(indices), np.uint64(seed & 0xFFFFFFFFFFFFFFFF), dtype=np.uint64)
        for j in range(indices.shape[1]):
            h = _splitmix(h ^ indices[:, j].astype(np.int64).view(np.uint64))
        out = np.empty((len(indices), count))
        for c in range(0, count, 2):
            h = _splitmix(h)
            u1 = ((h >> np.uint64(11)).astype(np.float64) + 0.5) / 2.0 ** 53
            h = _splitmix(h)
            u2 = ((h >> np.uint64(11)).astype(np.float64) + 0.5) / 2.0 ** 53
            r = np.sqrt(-2.0 * np.log(u1))
            out[:, c] = r * np.cos(2 * np.pi * u2)
            if c + 1 < count:
                out[:, c + 1] = r * np.sin(2 * np.pi * u2)
    return out


def phason_jitter_points(scheme: CutProjectScheme, radius, sigma: float, seed: int = 0, center=None,
                         with_indices: bool = True) -> PointSet:
    """A patch with random phason disorder (tile flips).

    Each lattice point n is accepted when y(n) + δ(n) ∈ W, with δ an independent Gaussian
    of standard deviation `sigma` per dense internal component (internal-space Å). Physical
    positions are not moved: disorder shows as flipped tiles.

    Parameters
    ----------
    scheme : CutProjectScheme
    radius : float
        Patch radius (Å).
    sigma : float
        Jitter in internal-space Å (≥ 0).
    seed : int
    center : array_like, optional

    Returns
    -------
    PointSet
        Its mean per-point amplitude at module vector k tends to
        T_W(k⊥)·exp(−2π²σ²|k⊥|²) (convolution of the window with the jitter law).
    """
    sigma = real_number(sigma, "sigma", minimum=0.0)
    seed = whole_number(seed, "seed")
    radius, c = scheme.check_region(radius, center)
    w = scheme.window
    dense = np.array(w.dense, dtype=bool)
    lo, hi = w.bounds()
    margin = np.where(dense, 7.0 * sigma, 0.0)
    bound = BoxWindow(lo - margin - 1e-9, hi + margin + 1e-9)
    enum = StripEnumerator(scheme.parallel, scheme.internal, bound)
    e = scheme.internal_dim

    def accept(n, x, y):
        z = _lattice_normals(n, seed, e) * sigma
        z[:, ~dense] = 0.0
        return w.contains(y + z)

    parts = []
    for n, x, y in enum.iter_chunks(c, radius, 1 << 22, accept=accept):
        parts.append(PointSet(embed3(x), y, n if with_indices else None, scheme))
    return PointSet.concatenate(parts, scheme=scheme)


def phason_debye_waller(k_perp, sigma: float, dense=None) -> np.ndarray:
    """exp(−2π²σ²|k⊥|²) over the dense internal components (see :func:`phason_jitter_points`)."""
    k = np.atleast_2d(np.asarray(k_perp, dtype=np.float64))
    if dense is not None:
        k = k[:, np.asarray(dense, dtype=bool)]
    return np.exp(-2 * np.pi ** 2 * sigma ** 2 * np.einsum("ij,ij->i", k, k))


__all__ = ["species_by_perp", "species_by_coordination", "coordination", "neighbour_signature", "count_tiles",
           "tile_volumes", "phonon_displacements", "phason_jitter_points", "phason_debye_waller"]
