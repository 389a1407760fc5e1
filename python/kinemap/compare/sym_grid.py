"""Averaging a regular grid over a set of operations: the engine behind ``symmetrize``.

A regular grid holds the points X(i) = o + Σ_a i_a s_a (o the origin, s_a the step of axis a,
in h, k, l or in Å⁻¹). An operation M maps X to M X; on the grid's indices that is the
affine map i' = c + i·A with A = (S Mᵀ) S⁺ and c = (o Mᵀ − o) S⁺ (S the matrix of steps, S⁺ its
pseudo-inverse). The map exists only when M carries the grid's line, plane or volume onto
itself; other operations are not used (a plane keeps the operations that map it onto itself).

Every point i gets the mean of the values at its images c + i·A over the operations whose
image lies on a grid point (within `tol` steps), inside the grid, and on an available
(measured, finite) value. Three exact kinds of map are evaluated without Python loops over
points:

* signed permutations of the axes (cubic groups on grids with equal steps): a transposed,
  flipped slice of the array is added to the sum — no index arrays at all;
* other integer maps (hexagonal groups, h' = h − k): the source of a point is an affine
  function of its index, so each slab i_o = t reads its valid images as one strided view;
  maps for which that does not hold use integer index arithmetic in slabs of bounded size;
* non-integer maps (unequal steps): rounded in slabs; images off the grid are left out.

The fixed points of every action (its stabiliser count) are found along the cycles of the
axis permutation or per slab, so that n = m·|stabiliser| separates the number m of distinct
images from the number n of operations that reach them.

Quasicrystal rotations are irrational: their images are read by multilinear interpolation
from the 2^d neighbouring grid points, with the leading-order error estimate
½ Σ_d t_d(1 − t_d)|Δ²_d I| per image (t_d the fractional position between grid points and
Δ²_d I the second difference of the map along axis d at the nearest grid point): the
interpolation-error theorem for linear interpolation, f − p = ½ f''(ξ)(x − x₀)(x − x₁).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from itertools import product

import numpy as np

from .._shared.memory import check_fits
from ..errors import InvalidInputError

#: Points per slab in the index-arithmetic and interpolation paths (bounds working memory).
SLAB_POINTS = 1 << 20


@dataclass
class GridAction:
    """The action of one or more operations on the grid indices: i' = c + i·A."""

    a: np.ndarray
    c: np.ndarray
    mode: str                       # "perm", "int", "float", "interp" or "none"
    ops: list = field(default_factory=list)   # indices of the operations with this action

    def is_identity(self) -> bool:
        return self.mode == "perm" and np.array_equal(self.a, np.eye(len(self.a))) and not np.any(self.c)


def active_axes(shape, steps) -> list[int]:
    """Axes with more than one point; a ranged axis with a zero step is refused."""
    out = []
    for ax, n in enumerate(shape):
        if n > 1:
            if not np.any(np.asarray(steps[ax])):
                raise InvalidInputError(f"grid axis {ax} has {n} points but a zero step")
            out.append(ax)
    return out


def grid_actions(ops, origin, steps, shape, *, tol: float, interpolate: bool) -> tuple[list[GridAction], list[int]]:
    """The distinct actions of `ops` (coordinate matrices, x' = M x) on a regular grid.

    Returns
    -------
    actions : list of GridAction
        One per distinct action of the operations that map the grid's line, plane or volume
        onto itself (identity first).
    excluded : list of int
        Indices of operations that do not map it onto itself.
    """
    act = active_axes(shape, steps)
    s = np.asarray(steps, dtype=np.float64).reshape(-1, 3)[act] if act else np.zeros((0, 3))
    o = np.asarray(origin, dtype=np.float64)
    n = np.array([shape[a] for a in act], dtype=np.int64)
    s_pinv = np.linalg.pinv(s) if len(act) else np.zeros((3, 0))
    h_min = float(np.linalg.norm(s, axis=1).min()) if len(act) else max(1.0, float(np.abs(o).max()))
    extent = float(np.sum(n - 1)) if len(act) else 0.0
    actions: dict[bytes, GridAction] = {}
    excluded = []
    for k, m in enumerate(np.asarray(ops, dtype=np.float64)):
        shift = o @ m.T - o
        sm = s @ m.T
        c = shift @ s_pinv
        a = sm @ s_pinv
        off = float(np.linalg.norm(shift - c @ s)) + sum(
            float(np.linalg.norm(sm[j] - a[j] @ s)) * float(n[j] - 1) for j in range(len(act)))
        if off > tol * h_min:
            excluded.append(k)
            continue
        a_r, c_r = np.rint(a), np.rint(c)
        a_err = float(np.abs(a - a_r).max()) * extent if len(act) else 0.0
        c_err = float(np.abs(c - c_r).max()) if len(act) else 0.0
        if a_err <= tol and c_err <= tol:
            a, c = a_r, c_r
            perm = (np.abs(a).sum(axis=0) == 1).all() and (np.abs(a).sum(axis=1) == 1).all() \
                and set(np.abs(a).ravel().tolist()) <= {0.0, 1.0}
            mode = "perm" if perm else "int"
        elif interpolate:
            mode = "interp"
        elif a_err <= tol:
            mode = "none"    # the image lattice is the grid's, shifted off it: no image on a point
        else:
            mode = "float"
        key = (np.round(np.concatenate([a.ravel(), c]), 9) + 0.0).tobytes() + mode.encode()   # no -0.0
        if key in actions:
            actions[key].ops.append(k)
        else:
            actions[key] = GridAction(a, c, mode, [k])
    out = sorted(actions.values(), key=lambda g: (not g.is_identity(), g.ops[0]))
    return out, excluded


@dataclass
class Sums:
    """Per-point sums over the images of every action (see :func:`accumulate`)."""

    total: np.ndarray      # Σ I(image) over available images
    count: np.ndarray      # number of available images (with multiplicity)
    stab: np.ndarray       # number of actions that fix the point
    var: np.ndarray | None  # Σ σ²(image)
    err: np.ndarray | None  # Σ interpolation-error estimates


def _perm_parts(a: np.ndarray):
    """For a signed permutation A: source axis d reads output axis e = pi[d] with sign s[d]."""
    k = len(a)
    pi = np.zeros(k, dtype=np.int64)
    sg = np.zeros(k, dtype=np.int64)
    for d in range(k):
        e = int(np.flatnonzero(a[:, d])[0])
        pi[d] = e
        sg[d] = int(a[e, d])
    return pi, sg


def _perm_ranges(c, pi, sg, n):
    """Output ranges [lo_e, hi_e) and source slices (in transposed order) of a signed permutation."""
    k = len(n)
    out_sl = [slice(0, 0)] * k
    src_sl = [slice(0, 0)] * k
    for d in range(k):
        e = int(pi[d])
        cd, s = int(c[d]), int(sg[d])
        if s > 0:
            lo, hi = max(0, -cd), min(int(n[e]), int(n[d]) - cd)
        else:
            lo, hi = max(0, cd - int(n[d]) + 1), min(int(n[e]), cd + 1)
        if hi <= lo:
            return None
        out_sl[e] = slice(lo, hi)
        start = cd + s * lo
        if s > 0:
            src_sl[e] = slice(start, start + (hi - lo))
        else:
            stop = start - (hi - lo)
            src_sl[e] = slice(start, stop if stop >= 0 else None, -1)
    return tuple(out_sl), tuple(src_sl)


def _perm_fixed(c, pi, sg, n):
    """Index of the points that the action fixes (usable as ``stab[index] += 1``), or None.

    The conditions i_d = c_d + s_d·i_π(d) couple only the axes of one cycle of the
    permutation π. Along a cycle d0 → d1 = π(d0) → … each index follows from the previous one,
    i_π(d) = s_d (i_d − c_d), so a cycle's fixed points form a line, a point or nothing,
    found in O(n) from t = i_d0; the index combines the cycles by broadcasting and never
    builds a full-size mask.
    """
    k = len(n)
    if k == 0:
        return ()
    index: list = [slice(None)] * k
    seen = np.zeros(k, dtype=bool)
    factors = []
    for start in range(k):
        if seen[start]:
            continue
        cyc = []
        d = start
        while not seen[d]:
            seen[d] = True
            cyc.append(d)
            d = int(pi[d])
        if len(cyc) == 1 and sg[start] == 1 and c[start] == 0:
            continue                       # the axis is left as it is: every index fixed
        t = np.arange(int(n[start]), dtype=np.int64)
        vals = {start: t}
        ok = np.ones(len(t), dtype=bool)
        cur = t
        for d in cyc:
            nxt = int(sg[d]) * (cur - int(c[d]))           # i_π(d)
            e = int(pi[d])
            if e == start:
                ok &= nxt == t                             # back at the start: consistency
            else:
                ok &= (nxt >= 0) & (nxt < n[e])
                vals[e] = nxt
            cur = nxt
        if not ok.any():
            return None
        factors.append((cyc, [vals[d][ok] for d in cyc]))
    for j, (cyc, arrs) in enumerate(factors):
        shape = [1] * len(factors)
        shape[j] = -1
        for d, arr in zip(cyc, arrs):
            index[d] = arr.reshape(shape)
    return tuple(index)


def _transposed(a: np.ndarray, axes, block: int = 16) -> np.ndarray:
    """A C-contiguous copy of ``a.transpose(axes)``, copied in tiles (a plain copy of a
    transposed 3-D view runs several times slower, reading memory far apart)."""
    view = a.transpose(axes)
    out = np.empty(view.shape, dtype=a.dtype)
    if view.ndim < 2:
        out[...] = view
        return out
    for i in range(0, view.shape[0], block):
        for j in range(0, view.shape[1], block):
            out[i:i + block, j:j + block] = view[i:i + block, j:j + block]
    return out


def _sign_product(group, pi) -> list | None:
    """For the actions of one axis permutation: the flip centre c of each output axis (None
    where the axis is left as it is) when the actions are exactly every combination of
    'left as it is' and 'i -> c - i' per axis; otherwise None."""
    k = len(pi)
    options: list[set] = [set() for _ in range(k)]
    for g in group:
        _, sg = _perm_parts(g.a)
        for d in range(k):
            options[int(pi[d])].add((int(sg[d]), int(round(float(g.c[d])))))
    flips: list[int | None] = []
    size = 1
    for opt in options:
        if opt == {(1, 0)}:
            flips.append(None)
        elif len(opt) == 2 and (1, 0) in opt:
            (s, c), = opt - {(1, 0)}
            if s != -1:
                return None
            flips.append(c)
            size *= 2
        else:
            return None
    return flips if size == len(group) else None


def _flip_all(y: np.ndarray, flips) -> None:
    """y ← Π_e (1 + F_e) y in place, F_e y[…, i, …] = y[…, c_e − i, …] (0 where c_e − i is
    off the grid). Pairs (i, c − i) are summed through a half-size buffer, so numpy never
    needs a full temporary for the overlapping operands."""
    for axis, c in enumerate(flips):
        if c is None:
            continue
        n_ax = y.shape[axis]
        lo, hi = max(0, c - (n_ax - 1)), min(n_ax - 1, c)
        if hi < lo:
            continue
        length = hi - lo + 1
        m = length // 2
        pre = (slice(None),) * axis
        if m:
            a = y[pre + (slice(lo, lo + m),)]
            stop = hi - m
            b = y[pre + (slice(hi, stop if stop >= 0 else None, -1),)]
            tmp = a + b
            a[...] = tmp
            b[...] = tmp
            del tmp
        if length % 2:
            y[pre + (lo + m,)] *= 2


def accumulate(values0: np.ndarray, avail: np.ndarray, var0: np.ndarray | None, actions, *, tol: float,
               second_diff=None, progress=None) -> Sums:
    """Sum the values at the images of every action (arrays over the active axes).

    Parameters
    ----------
    values0 : ndarray
        Intensities with unavailable points set to 0.
    avail : ndarray of uint8
        1 where a value is available (finite, measured).
    var0 : ndarray or None
        σ² with unavailable points set to 0.
    actions : list of GridAction
    second_diff : list of ndarray, optional
        |Δ²_d I| per axis, for the interpolation-error estimate.
    """
    shape = values0.shape
    n = np.array(shape, dtype=np.int64)
    cdt = np.uint8 if len(actions) < 255 else np.uint16
    total = np.zeros(shape)
    count = np.zeros(shape, dtype=cdt)
    stab = np.zeros(shape, dtype=cdt)
    var = None if var0 is None else np.zeros(shape)
    err = None
    if any(g.mode == "interp" for g in actions):
        err = np.zeros(shape)

    perms: dict[tuple, list[GridAction]] = {}
    others = []
    for g in actions:
        if g.mode == "perm":
            pi, _ = _perm_parts(g.a)
            perms.setdefault(tuple(pi.tolist()), []).append(g)
        elif g.mode != "none":
            others.append(g)
        elif progress is not None:
            progress(1)             # no image of this action lies on the grid

    all_avail = bool(avail.all())
    for pi_key, group in perms.items():
        pi = np.array(pi_key, dtype=np.int64)
        inv = np.argsort(pi)             # output axis e reads source axis inv[e]
        same = np.array_equal(inv, np.arange(len(n)))
        # the product form needs the permuted axes to have equal lengths
        flips = _sign_product(group, pi) if all(n[inv[e]] == n[e] for e in range(len(n))) else None
        if flips is not None:
            # every sign pattern of this permutation is present: Σ_s (images) = Π_e (1 + F_e) J
            tv = values0.copy() if same else _transposed(values0, inv)
            _flip_all(tv, flips)
            total += tv
            del tv
            if all_avail:
                factor: np.ndarray = np.ones((), dtype=count.dtype)
                for e, cf in enumerate(flips):
                    f = np.ones(int(n[e]), dtype=count.dtype)
                    if cf is not None:
                        t = np.arange(int(n[e]))
                        f += ((cf - t >= 0) & (cf - t < n[e])).astype(count.dtype)
                    factor = np.multiply.outer(factor, f) if factor.ndim else f
                count += factor
            else:
                ta = avail.copy() if same else _transposed(avail, inv)
                _flip_all(ta, flips)
                count += ta
                del ta
            if var is not None and var0 is not None:  # (var is made when var0 is given)
                tq = var0.copy() if same else _transposed(var0, inv)
                _flip_all(tq, flips)
                var += tq
                del tq
        else:
            if same:
                tv, ta, tq = values0, avail, var0
            else:
                tv = _transposed(values0, inv)
                ta = None if all_avail else _transposed(avail, inv)
                tq = None if var0 is None else _transposed(var0, inv)
            for g in group:
                _, sg = _perm_parts(g.a)
                rng = _perm_ranges(g.c.astype(np.int64), pi, sg, n)
                if rng is not None:
                    out_sl, src_sl = rng
                    total[out_sl] += tv[src_sl]
                    if all_avail:
                        count[out_sl] += 1
                    else:
                        assert ta is not None  # made unless every point is available
                        count[out_sl] += ta[src_sl]
                    if var is not None:
                        assert tq is not None  # made with var
                        var[out_sl] += tq[src_sl]
            del tv, ta, tq
        for g in group:
            _, sg = _perm_parts(g.a)
            fixed = _perm_fixed(g.c.astype(np.int64), pi, sg, n)
            if fixed is not None:
                stab[fixed] += 1
            if progress is not None:
                progress(1)

    if others:
        flat_v = values0.reshape(-1)
        flat_a = avail.reshape(-1)
        flat_q = None if var0 is None else var0.reshape(-1)
        flat_a_all = bool(avail.all())
        rest = int(np.prod(n[1:])) if len(n) > 1 else 1
        rows = max(1, SLAB_POINTS // max(rest, 1))
        for g in others:
            if g.mode == "int" and _int_by_rows(g, n, flat_v, flat_a, flat_q, flat_a_all, total, count, stab, var):
                if progress is not None:
                    progress(1)
                continue
            for r0 in range(0, int(n[0]) if len(n) else 1, rows):
                r1 = min(int(n[0]), r0 + rows) if len(n) else 1
                _slab(g, r0, r1, n, tol, values0, flat_v, flat_a, flat_q, var0, flat_a_all,
                      second_diff, total, count, stab, var, err)
            if progress is not None:
                progress(1)
    return Sums(total, count, stab, var, err)


def _outer_axis(a: np.ndarray) -> int | None:
    """An axis o such that, with i_o fixed, every source index depends on at most one of the
    other axes (then the valid images of a slab i_o = t form a box), or None."""
    k = len(a)
    for o in range(k):
        if all(np.count_nonzero([a[e, d] for e in range(k) if e != o]) <= 1 for d in range(k)):
            return o
    return None


def _int_by_rows(g, n, flat_v, flat_a, flat_q, all_avail, total, count, stab, var) -> bool:
    """An integer action as strided views, one slab i_o = t at a time (False: not applicable).

    The source of point i is the flat index C + Σ_e i_e B_e with B_e = Σ_d A[e,d]·stride_d:
    affine in i, so the images of a box are a strided view of the map. With i_o fixed, each
    source index x_d = c_d + t·A[o,d] + i_e A[e,d] depends on at most one other axis e, and
    0 ≤ x_d < n_d bounds i_e to an interval: the valid points of the slab form a box, read as
    one ``as_strided`` view whose elements all lie inside the map (no index arrays, no
    out-of-bounds reads). Used for hexagonal operations such as h' = h − k.
    """
    from numpy.lib.stride_tricks import as_strided

    k = len(n)
    if k < 2:
        return False
    a = np.rint(g.a).astype(np.int64)
    c = np.rint(g.c).astype(np.int64)
    o = _outer_axis(a)
    if o is None:
        return False
    inner = [e for e in range(k) if e != o]
    strides = [int(np.prod(n[d + 1:])) for d in range(k)]
    b = [int(sum(int(a[e, d]) * strides[d] for d in range(k))) for e in range(k)]
    c0 = int(sum(int(c[d]) * strides[d] for d in range(k)))
    dep: list[int | None] = []
    for d in range(k):
        nz = [e for e in inner if a[e, d] != 0]
        dep.append(nz[0] if nz else None)
    for t in range(int(n[o])):
        lo = {e: 0 for e in inner}
        hi = {e: int(n[e]) - 1 for e in inner}
        empty = False
        for d in range(k):
            base = int(c[d]) + t * int(a[o, d])
            e = dep[d]
            if e is None:
                if not 0 <= base < n[d]:
                    empty = True
                    break
                continue
            s = int(a[e, d])
            # 0 <= base + s·i_e <= n_d − 1
            lo_d, hi_d = sorted(((-base) / s, (int(n[d]) - 1 - base) / s))
            lo[e] = max(lo[e], int(np.ceil(lo_d - 1e-12)))
            hi[e] = min(hi[e], int(np.floor(hi_d + 1e-12)))
            if lo[e] > hi[e]:
                empty = True
                break
        if empty:
            continue
        shape = tuple(hi[e] - lo[e] + 1 for e in inner)
        start = c0 + t * b[o] + sum(lo[e] * b[e] for e in inner)
        region = tuple(t if e == o else slice(lo[e], hi[e] + 1) for e in range(k))

        steps = [b[e] for e in inner]

        def view(flat, start=start, shape=shape, steps=steps):
            # every element of this view is a valid image inside the map (see above)
            return as_strided(flat[start:], shape=shape, strides=tuple(s * flat.itemsize for s in steps),
                              writeable=False)

        total[region] += view(flat_v)
        if all_avail:
            count[region] += 1
        else:
            count[region] += view(flat_a)
        if var is not None:
            var[region] += view(flat_q)
        # fixed points in the box: x_d = i_d for every d
        og = dict(zip(inner, np.ogrid[tuple(slice(lo[e], hi[e] + 1) for e in inner)]))
        fixed = np.bool_(True)
        for d in range(k):
            e_d = dep[d]
            lhs = int(c[d]) + t * int(a[o, d]) + (0 if e_d is None else int(a[e_d, d]) * og[e_d])
            rhs = t if d == o else og[d]
            fixed = fixed & (lhs == rhs)
            if not np.any(fixed):
                break
        else:
            hits = np.nonzero(np.broadcast_to(fixed, shape))
            if len(hits[0]):
                idx = tuple(t if e == o else hits[inner.index(e)] + lo[e] for e in range(k))
                stab[idx] += 1
    return True


def _slab(g, r0, r1, n, tol, values0, flat_v, flat_a, flat_q, var0, flat_a_all, second_diff,
          total, count, stab, var, err):
    k = len(n)
    if k == 0:
        # a single point: only actions that fix it were kept
        total += values0
        count += flat_a.reshape(count.shape)
        stab += 1
        if var is not None:
            var += var0
        return
    og = list(np.ogrid[tuple([slice(r0, r1)] + [slice(0, int(x)) for x in n[1:]])])
    slab_shape = (r1 - r0,) + tuple(int(x) for x in n[1:])
    sl = (slice(r0, r1),)
    x = []
    for d in range(k):
        xd = np.full(slab_shape, float(g.c[d]))
        for e in range(k):
            if g.a[e, d] != 0:
                xd = xd + og[e] * g.a[e, d]
        x.append(xd)
    if g.mode in ("int", "float"):
        xi = [np.rint(xd).astype(np.int64) for xd in x]
        ok = np.ones(slab_shape, dtype=bool)
        for d in range(k):
            ok &= (xi[d] >= 0) & (xi[d] < n[d])
            if g.mode == "float":
                ok &= np.abs(x[d] - xi[d]) <= tol
        fixed = np.ones(slab_shape, dtype=bool)
        for d in range(k):
            fixed &= np.abs(x[d] - og[d]) <= tol
        stab[sl] += fixed.astype(stab.dtype)
        if not ok.any():
            return
        flat = np.ravel_multi_index([np.where(ok, xd, 0) for xd in xi], tuple(int(v) for v in n))
        av = flat_a[flat] * ok
        total[sl] += np.where(av > 0, flat_v[flat], 0.0)
        count[sl] += av.astype(count.dtype)
        if var is not None:
            var[sl] += np.where(av > 0, flat_q[flat], 0.0)
        return
    # interpolation (multilinear), on the images that fall inside the grid
    ok = np.ones(slab_shape, dtype=bool)
    fixed = np.ones(slab_shape, dtype=bool)
    for d in range(k):
        ok &= (x[d] >= -1e-9) & (x[d] <= n[d] - 1 + 1e-9)
        fixed &= np.abs(x[d] - og[d]) <= tol
    stab[sl] += fixed.astype(stab.dtype)
    if not ok.any():
        return
    inside = np.flatnonzero(ok.reshape(-1))
    strides = [int(np.prod(n[d + 1:])) for d in range(k)]
    base = np.zeros(len(inside), dtype=np.int64)
    nearest = np.zeros(len(inside), dtype=np.int64)
    frac = []
    for d in range(k):
        xd = np.clip(x[d].reshape(-1)[inside], 0.0, float(n[d] - 1))
        i0 = np.minimum(np.floor(xd).astype(np.int64), int(n[d]) - 2)
        t = xd - i0
        base += i0 * strides[d]
        nearest += np.rint(xd).astype(np.int64) * strides[d]
        frac.append(t)
    v_int = np.zeros(len(inside))
    bad = None if flat_a_all else np.zeros(len(inside))
    q_int = None if var is None else np.zeros(len(inside))
    for corner in product((0, 1), repeat=k):
        w = np.ones(len(inside))
        off = 0
        for d, b in enumerate(corner):
            w *= frac[d] if b else 1.0 - frac[d]
            off += b * strides[d]
        at = base + off
        v_int += w * flat_v[at]
        if bad is not None:
            bad += w * (1 - flat_a[at])
        if q_int is not None:
            q_int += w * flat_q[at]
    good = slice(None) if bad is None else bad <= 1e-9
    idx = inside[good]
    # each output point appears once per action, so plain fancy-index adds are safe;
    # slabs along axis 0 of C-ordered arrays are contiguous, so the reshapes are views
    total[sl].reshape(-1)[idx] += v_int[good]
    count[sl].reshape(-1)[idx] += 1
    if var is not None and q_int is not None:  # (q_int is made with var)
        var[sl].reshape(-1)[idx] += q_int[good]       # Σ w σ² >= Σ w² σ²: an upper bound
    if second_diff is not None and err is not None:
        near = nearest[good]
        estimate = np.zeros(len(near))
        for d in range(k):
            t = frac[d][good]
            estimate += 0.5 * t * (1.0 - t) * second_diff[d].reshape(-1)[near]
        err[sl].reshape(-1)[idx] += estimate


def second_differences(values0: np.ndarray, avail: np.ndarray) -> list[np.ndarray]:
    """|I[j+1] − 2I[j] + I[j−1]| along each axis (edges copy their neighbour; 0 where a
    neighbour is unavailable, so the estimate there is a lower bound)."""
    out = []
    for d in range(values0.ndim):
        v = np.moveaxis(values0, d, 0)
        a = np.moveaxis(avail, d, 0).astype(bool)
        dd = np.zeros_like(v)
        if v.shape[0] >= 3:
            inner = np.abs(v[2:] - 2.0 * v[1:-1] + v[:-2])
            okk = a[2:] & a[1:-1] & a[:-2]
            dd[1:-1] = np.where(okk, inner, 0.0)
            dd[0] = dd[1]
            dd[-1] = dd[-2]
        out.append(np.moveaxis(dd, 0, d))
    return out


def memory_estimate(n_points: int, *, with_sigma: bool, interpolate: bool, ndim: int) -> int:
    """Bytes of working memory of :func:`accumulate` plus the outputs, before allocating."""
    per = 8 + 1 + 8 + 1 + 1 + 8 + 1      # values0, avail, total, count, stab, a transposed copy (+avail)
    per += 8                              # the mean handed back
    if with_sigma:
        per += 8 * 4
    if interpolate:
        per += 4 + 8 + 8 * ndim
    return int(per * n_points + 64 * SLAB_POINTS)


def check_memory(n_points: int, **kw) -> None:
    check_fits(memory_estimate(n_points, **kw), f"symmetrising a map of {n_points:,} points",
               hint="symmetrise a smaller region or a plane at a time")


__all__ = ["GridAction", "grid_actions", "accumulate", "Sums", "second_differences", "memory_estimate",
           "check_memory", "active_axes", "SLAB_POINTS"]
