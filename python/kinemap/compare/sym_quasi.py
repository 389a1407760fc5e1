"""Point groups on the higher-dimensional indices of cut-and-project schemes
(:mod:`kinemap.quasi`): integer index matrices and the indices that name one module vector."""

from __future__ import annotations

import numpy as np

from ..errors import InvalidInputError
from .pointgroups import PointGroup, describe_operation


def _scheme_parts(scheme):
    try:
        par = np.atleast_2d(np.asarray(scheme.parallel, dtype=np.float64))
        perp = np.atleast_2d(np.asarray(scheme.internal, dtype=np.float64))
        basis = np.asarray(scheme.index_basis, dtype=np.float64)
    except AttributeError:
        raise InvalidInputError(
            f"`scheme` must be a kinemap.quasi cut-and-project scheme (e.g. quasi.icosahedral()), "
            f"got {type(scheme).__name__}") from None
    return par, perp, basis


def index_operations(group: PointGroup, scheme) -> np.ndarray:
    """See :meth:`PointGroup.index_operations`."""
    par, perp, basis = _scheme_parts(scheme)
    d, big_d = par.shape
    if d not in (2, 3):
        raise InvalidInputError(f"point groups act on 2- or 3-dimensional schemes; this scheme is {d}-dimensional")
    emb = np.vstack([par, perp])
    emb_inv = np.linalg.inv(emb)
    dual = emb_inv.T @ basis
    scale = float(np.abs(par).max())
    out = []
    for r in group.cartesian:
        if d == 2:
            if np.abs(r[2, :2]).max() > 1e-9 or np.abs(r[:2, 2]).max() > 1e-9:
                raise InvalidInputError(
                    f"point group {group.name!r} does not map the plane of the planar scheme "
                    f"{getattr(scheme, 'name', '')!r} (the xy-plane) onto itself: operation "
                    f"{describe_operation(r, lattice=False)}")
            rp = r[:2, :2]
        else:
            rp = r
        img = rp @ par
        s = np.zeros((big_d, big_d))
        for j in range(big_d):
            diff_p = np.abs(par - img[:, j:j + 1]).max(axis=0)
            diff_m = np.abs(par + img[:, j:j + 1]).max(axis=0)
            kp, km = int(np.argmin(diff_p)), int(np.argmin(diff_m))
            if diff_p[kp] <= 1e-8 * scale:
                s[kp, j] = 1.0
            elif diff_m[km] <= 1e-8 * scale:
                s[km, j] = -1.0
            else:
                raise InvalidInputError(
                    f"point group {group.name!r} is not a symmetry of the scheme "
                    f"{getattr(scheme, 'name', '')!r} in its frame: the operation "
                    f"{describe_operation(r, lattice=False)} does not map its basis vector e_{j}∥ onto "
                    "± another one")
        b = emb @ s @ emb_inv
        if np.abs(b[:d, d:]).max() > 1e-8 or np.abs(b[d:, :d]).max() > 1e-8 or \
                np.abs(b @ b.T - np.eye(big_d)).max() > 1e-8:
            raise InvalidInputError(
                f"operation {describe_operation(r, lattice=False)} of {group.name!r} permutes the scheme's "
                "physical basis vectors but not its internal ones consistently")
        t = np.linalg.solve(basis, np.linalg.inv(s).T @ basis)
        ti = np.rint(t)
        if np.abs(t - ti).max() > 1e-8 or np.abs(dual @ ti - b @ dual).max() > 1e-8 * max(1.0, np.abs(dual).max()):
            raise InvalidInputError(
                f"operation {describe_operation(r, lattice=False)} of {group.name!r} is not an integer map "
                "of the scheme's indices")
        out.append(ti.astype(np.int64))
    return np.array(out)


def index_kernel(scheme) -> np.ndarray | None:
    """The integer vector v with k(h + v) = k(h) and the same dense perpendicular part and
    the same phases on discrete internal components (e.g. (1, 1, 1, 1, 1) for the Penrose
    scheme), or None when indices are unique."""
    par, perp, basis = _scheme_parts(scheme)
    d, big_d = par.shape
    dual = np.linalg.inv(np.vstack([par, perp])).T @ basis
    try:
        dense = np.asarray(scheme.window.dense, dtype=bool)
    except AttributeError:
        dense = np.ones(big_d - d, dtype=bool)
    rows = np.vstack([dual[:d], dual[d:][dense]])
    _u, sv, vt = np.linalg.svd(rows)
    null = vt[np.sum(sv > 1e-9 * sv.max()):]
    if len(null) == 0:
        return None
    if len(null) > 1:
        raise InvalidInputError("the scheme's indices are ambiguous in more than one direction; not supported")
    v = null[0] / np.abs(null[0])[np.abs(null[0]) > 1e-9].min()
    vi = np.rint(v)
    if np.abs(v - vi).max() > 1e-8:
        raise InvalidInputError("the scheme's index ambiguity is not an integer vector; not supported")
    disc = dual[d:][~dense] @ vi
    if np.abs(disc - np.rint(disc)).max() > 1e-8:
        return None
    j = int(np.flatnonzero(vi)[0])
    return (vi * np.sign(vi[j])).astype(np.int64)


def canonical_indices(h: np.ndarray, kernel: np.ndarray | None) -> np.ndarray:
    """Indices reduced modulo the kernel vector (first nonzero entry of v brought into
    [0, |v_j|)), so that equal module vectors have equal rows."""
    if kernel is None:
        return h
    j = int(np.flatnonzero(kernel)[0])
    t = np.floor_divide(h[:, j], kernel[j])
    return h - t[:, None] * kernel[None, :]


__all__ = ["index_operations", "index_kernel", "canonical_indices"]
