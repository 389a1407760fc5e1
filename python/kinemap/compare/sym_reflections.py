"""Reflections: the symmetry equivalents (orbit) of one reflection, and the reflections a
lattice centring allows (for punching Bragg positions out of a diffuse map)."""

from __future__ import annotations

import numpy as np

from .._shared.validate import one_of, real_number, whole_number
from ..errors import InvalidInputError
from .pointgroups import point_group
from .sym_lists import as_index_rows
from .sym_quasi import canonical_indices, index_kernel


def equivalent_reflections(hkl, group, cell=None, *, setting: str | None = None, scheme=None,
                           cell_tol: float = 1e-4) -> np.ndarray:
    """The distinct symmetry equivalents (the orbit) of one integer reflection.

    Parameters
    ----------
    hkl : array_like (3,) or (D,) of int
        h, k, l — or the D higher-dimensional indices of `scheme`'s module for a quasicrystal
        group.
    group : str or PointGroup
        Hermann–Mauguin symbol (see :func:`symmetrize`).
    cell : array_like (3, 3), optional
        When given, checked to support the group.
    setting : str, optional
    scheme : kinemap.quasi.CutProjectScheme, optional
        For quasicrystal groups (or any group acting in the frame of the scheme).

    Returns
    -------
    ndarray (m, 3) or (m, D) of int64
        The orbit, sorted (lexicographically, descending), the reflection itself included;
        m = |G| / |stabiliser| is its multiplicity.

    Raises
    ------
    InvalidInputError
        For non-integer indices, a wrong length, or a cell that does not support the group.

    Examples
    --------
    >>> len(equivalent_reflections([1, 0, 0], "m-3m"))
    6
    """
    g = point_group(group, setting=setting)
    if scheme is not None:
        ops = g.index_operations(scheme)
        width = ops.shape[1]
        kernel = index_kernel(scheme)
    else:
        if not g.is_crystallographic:
            raise InvalidInputError(f"the quasicrystal group {g.name!r} needs `scheme=` (the indices' scheme)")
        if cell is not None:
            g.check_cell(cell, tol=cell_tol)
        ops = g.hkl_operations
        width = 3
        kernel = None
    h = as_index_rows(np.asarray(hkl).reshape(1, -1), 1, width, "hkl")
    img = canonical_indices(np.einsum("nij,j->ni", ops, h[0]), kernel)
    uniq = np.unique(img, axis=0)
    return uniq[np.lexsort(uniq.T[::-1])][::-1].copy()


#: Reflection conditions of the lattice centrings (integral reflections hkl).
CENTRING_CONDITIONS = {
    "P": "none",
    "I": "h + k + l = 2n",
    "F": "h + k, h + l, k + l = 2n (all even or all odd)",
    "A": "k + l = 2n",
    "B": "h + l = 2n",
    "C": "h + k = 2n",
    "R": "-h + k + l = 3n (obverse setting, hexagonal axes)",
}


def allowed_reflections(cell, hkl_max=None, *, q_max: float | None = None, centring: str = "P") -> np.ndarray:
    """Integer reflections allowed by a lattice centring, within an index or |q| limit.

    Parameters
    ----------
    cell : array_like (3, 3)
        Rows a, b, c in Å (the conventional, centred cell).
    hkl_max : int or sequence of 3 int, optional
        Largest |h|, |k|, |l|.
    q_max : float, optional
        Largest |q| = 2π|h a* + k b* + l c*| in Å⁻¹. Give `hkl_max`, `q_max` or both.
    centring : {"P", "I", "F", "A", "B", "C", "R"}
        Lattice centring; R is the obverse rhombohedral centring on hexagonal axes
        (−h + k + l = 3n). A rhombohedral cell on rhombohedral axes is primitive ("P").

    Returns
    -------
    ndarray (M, 3) of int64
        The allowed h, k, l (0 0 0 included), sorted by |q| then lexicographically.

    Raises
    ------
    InvalidInputError
        For an unknown centring, missing or negative limits, or a list too large for memory.

    Notes
    -----
    Conditions (integral reflections of centred lattices): I: h + k + l = 2n;
    F: h, k, l all even or all odd; A: k + l = 2n; B: h + l = 2n; C: h + k = 2n;
    R (obverse): −h + k + l = 3n.

    Examples
    --------
    >>> import numpy as np
    >>> allowed_reflections(np.eye(3) * 4.0, 1, centring="F").tolist()
    [[0, 0, 0], [1, 1, 1], [1, 1, -1], [1, -1, 1], [1, -1, -1], [-1, 1, 1], [-1, 1, -1], [-1, -1, 1], [-1, -1, -1]]
    """
    from .._shared.memory import check_fits
    from ..model import as_cell

    c = as_cell(cell)
    centring = one_of(centring, "centring", tuple(CENTRING_CONDITIONS))
    if hkl_max is None and q_max is None:
        raise InvalidInputError("give `hkl_max` (largest |h|, |k|, |l|) or `q_max` (largest |q| in Å⁻¹)")
    lim = np.full(3, np.iinfo(np.int64).max // 4, dtype=np.int64)
    if hkl_max is not None:
        if np.ndim(hkl_max) == 0:
            lim[:] = whole_number(hkl_max, "hkl_max", minimum=0)
        else:
            vals = list(hkl_max)
            if len(vals) != 3:
                raise InvalidInputError(f"`hkl_max` must be one number or three, got {hkl_max!r}")
            lim = np.array([whole_number(v, f"hkl_max[{i}]", minimum=0) for i, v in enumerate(vals)], dtype=np.int64)
    if q_max is not None:
        q_max = real_number(q_max, "q_max", minimum=0.0)
        # |h| = |a·q|/2π ≤ |a| q_max / 2π
        qlim = np.floor(np.linalg.norm(c, axis=1) * q_max / (2.0 * np.pi) + 1e-9).astype(np.int64)
        lim = np.minimum(lim, qlim)
    count = int(np.prod(2 * lim + 1, dtype=np.float64))
    check_fits(count * 8 * 3 * 4, f"a list of up to {count:,} reflections", hint="lower `hkl_max` or `q_max`")
    ax = [np.arange(-int(m), int(m) + 1, dtype=np.int64) for m in lim]
    h, k, l = (x.reshape(-1) for x in np.meshgrid(*ax, indexing="ij"))
    keep = {
        "P": np.ones(h.shape, dtype=bool),
        "I": (h + k + l) % 2 == 0,
        "F": ((h + k) % 2 == 0) & ((h + l) % 2 == 0),
        "A": (k + l) % 2 == 0,
        "B": (h + l) % 2 == 0,
        "C": (h + k) % 2 == 0,
        "R": (-h + k + l) % 3 == 0,
    }[centring]
    hkl = np.stack([h[keep], k[keep], l[keep]], axis=1)
    q = 2.0 * np.pi * hkl @ np.linalg.inv(c).T
    qn = np.linalg.norm(q, axis=1)
    if q_max is not None:
        inside = qn <= q_max * (1.0 + 1e-12)
        hkl, qn = hkl[inside], qn[inside]
    order = np.lexsort((-hkl[:, 2], -hkl[:, 1], -hkl[:, 0], np.round(qn, 9)))
    return hkl[order]


__all__ = ["equivalent_reflections", "allowed_reflections", "CENTRING_CONDITIONS"]
