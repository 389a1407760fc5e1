"""Sets of scattering vectors q (Å⁻¹) at which amplitudes are computed.

Two kinds behind one interface, :class:`QGrid`:

* :class:`RegularGrid` — an origin plus one step vector per axis, so point ``(i, j, ...)`` is
  ``origin + i·step[0] + j·step[1] + ...`` (lines, planes, volumes in any orientation, and
  grids in reciprocal-lattice units h, k, l of a cell). The exact engine steps the phase along
  one axis instead of evaluating a sincos per point, and the gridded engine maps the grid onto
  FFTs.
* :class:`PointGrid` — arbitrary points, for example detector pixels mapped to q.

Grids are immutable values (their arrays are read-only). Conventions: q in Å⁻¹,
|q| = 4π sinθ/λ; in reciprocal-lattice units q = 2π(h a* + k b* + l c*) with a*·a = 1.

Axis coordinates (for plots and files) are the coordinates a reader expects: h, k or l (or
the multiple of a named lattice direction such as [h h 0]) on hkl grids, and the coordinate
along each edge's direction measured from q = 0 (Å⁻¹) on other grids, so an axis of a plane
through the origin runs from negative to positive values.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ._shared.validate import real_array, whole_number
from .errors import InvalidInputError
from .model import as_cell, reciprocal_basis

_HKL = "hkl"


def _vec3(v, name: str) -> np.ndarray:
    return real_array(v, name, shape=(3,))


def _count(n, name: str) -> int:
    return whole_number(n, name, minimum=1)


def _readonly(a: np.ndarray | None) -> np.ndarray | None:
    if a is not None:
        a = np.array(a, dtype=np.float64)
        a.flags.writeable = False
    return a


def _fmt(x: float) -> str:
    """A rounded component for axis labels: 1, -0.5, 0.333 (no "-0")."""
    v = round(float(x), 3)
    if v == 0:
        return "0"
    return f"{v:g}"


def _hkl_axis(step_hkl: np.ndarray) -> tuple[str, str, int]:
    """(name, label, component) of an hkl axis: 'h' for a step along h; otherwise a lattice
    direction written with the letter of its largest component, e.g. '[h h 0]'."""
    c = int(np.argmax(np.abs(step_hkl)))
    d = step_hkl / step_hkl[c]
    letter = _HKL[c]
    if np.allclose(np.delete(d, c), 0.0, atol=1e-12):
        return letter, letter, c
    parts = []
    for j in range(3):
        coef = d[j]
        if abs(coef) < 1e-12:
            parts.append("0")
        elif abs(coef - 1) < 1e-12:
            parts.append(letter)
        elif abs(coef + 1) < 1e-12:
            parts.append("-" + letter)
        else:
            parts.append(_fmt(coef) + letter)
    return "", "[" + " ".join(parts) + "]", c


@dataclass(frozen=True, eq=False)
class QGrid:
    """A set of q-vectors (Å⁻¹). Build one with the class methods
    (:meth:`points`, :meth:`line`, :meth:`plane`, :meth:`volume`, :meth:`hkl`).

    Attributes
    ----------
    kind : str
        "points", "line", "plane", "volume" or "hkl".
    shape : tuple of int
        Shape of every map computed on this grid (``pattern.intensity.shape``).
    cell : ndarray (3, 3) or None
        The cell of h, k, l (rows a, b, c in Å), when the grid has one.
    axis_names, axis_values, axis_units, axis_labels
        Per axis of a regular grid: a short name ("h", "u", ...), the 1-D coordinates, their
        units ("r.l.u." or "1/angstrom") and a label for plots ("[h h 0]", "q along
        [1 0 0]"). Empty for arbitrary points.
    """

    kind: str
    shape: tuple
    cell: np.ndarray | None = None

    axis_names: list = field(default_factory=list, init=False)
    axis_values: list = field(default_factory=list, init=False)
    axis_units: list = field(default_factory=list, init=False)
    axis_labels: list = field(default_factory=list, init=False)

    is_regular = False

    # ----- constructors -------------------------------------------------------------
    @staticmethod
    def points(q, *, axes=None) -> PointGrid:
        """Arbitrary q-points: an array of shape (..., 3) in Å⁻¹; the map has shape ``q.shape[:-1]``.

        `axes` optionally names the map's axes for plots and files: one (name, values,
        units) per axis, e.g. ("row", rows, "pixel") for detector frames.
        """
        a = real_array(q, "q", finite=False)
        if a.ndim < 1 or a.shape[-1] != 3:
            raise InvalidInputError(f"`q` must have shape (..., 3), got {a.shape}")
        flat = a.reshape(-1, 3)
        bad = ~np.isfinite(flat).all(axis=1)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise InvalidInputError(f"q-point {i} is not finite: {flat[i].tolist()}")
        if flat.shape[0] == 0:
            raise InvalidInputError("`q` holds no points")
        grid = PointGrid(kind="points", shape=tuple(int(s) for s in a.shape[:-1]), q=flat)
        if axes is not None:
            axes = list(axes)
            if len(axes) != grid.ndim:
                raise InvalidInputError(f"`axes` must describe {grid.ndim} axes, got {len(axes)}")
            for name, values, units in axes:
                grid.axis_names.append(str(name))
                grid.axis_labels.append(str(name))
                grid.axis_values.append(np.asarray(values, dtype=np.float64))
                grid.axis_units.append(str(units))
        return grid

    @staticmethod
    def regular(origin, steps, shape, *, cell=None, kind: str | None = None) -> RegularGrid:
        """A regular grid from its origin (Å⁻¹), one step vector per axis (Å⁻¹) and its shape.

        With a `cell` the grid is an hkl grid of that cell (axes in reciprocal-lattice units).
        """
        o = _vec3(origin, "origin")
        st = real_array(steps, "steps").reshape(-1, 3) if np.size(steps) else np.zeros((0, 3))
        shp = tuple(_count(n, f"shape[{i}]") for i, n in enumerate(shape))
        if len(shp) != len(st):
            raise InvalidInputError(f"`shape` {shp} must have one entry per step vector ({len(st)})")
        c = None if cell is None else as_cell(cell)
        if kind == "hkl" and c is None:
            raise InvalidInputError("a grid of kind 'hkl' needs the `cell` its h, k, l refer to")
        if kind is None:
            kind = "hkl" if c is not None else {0: "line", 1: "line", 2: "plane", 3: "volume"}[len(shp)]
        return RegularGrid(kind=kind, shape=shp, cell=c, origin=o, steps=st)

    @staticmethod
    def line(start, stop, n, *, cell=None) -> RegularGrid:
        """`n` points from `start` to `stop` (both included, like numpy.linspace).

        Vectors are in Å⁻¹, or in h, k, l of `cell` when one is given.
        """
        a, b = _vec3(start, "start"), _vec3(stop, "stop")
        n = _count(n, "n")
        step = (b - a) / (n - 1) if n > 1 else np.zeros(3)
        return QGrid._edges("line", a, [step], (n,), cell)

    @staticmethod
    def plane(origin, u, v, shape, *, cell=None) -> RegularGrid:
        """Points ``origin + i/(nu−1)·u + j/(nv−1)·v``: `origin` is a corner, `u`, `v` full
        edges (Å⁻¹, or h, k, l of `cell` when one is given)."""
        return QGrid._from_edges("plane", origin, [u, v], shape, ["u", "v"], cell)

    @staticmethod
    def volume(origin, u, v, w, shape, *, cell=None) -> RegularGrid:
        """Points ``origin + i/(nu−1)·u + j/(nv−1)·v + k/(nw−1)·w`` (Å⁻¹, or h, k, l of
        `cell` when one is given)."""
        return QGrid._from_edges("volume", origin, [u, v, w], shape, ["u", "v", "w"], cell)

    @staticmethod
    def _from_edges(kind, origin, edges, shape, names, cell) -> RegularGrid:
        o = _vec3(origin, "origin")
        e = [_vec3(x, nm) for x, nm in zip(edges, names)]
        try:
            shp = tuple(shape)
        except TypeError:
            raise InvalidInputError(f"`shape` must be a tuple of {len(edges)} counts, got {shape!r}") from None
        if len(shp) != len(edges):
            raise InvalidInputError(f"`shape` must have {len(edges)} entries for a {kind}, got {shp!r}")
        shp = tuple(_count(n, f"shape[{i}]") for i, n in enumerate(shp))
        steps = [ei / (n - 1) if n > 1 else np.zeros(3) for ei, n in zip(e, shp)]
        return QGrid._edges(kind, o, steps, shp, cell)

    @staticmethod
    def _edges(kind, origin, steps, shape, cell) -> RegularGrid:
        if cell is None:
            return RegularGrid(kind=kind, shape=tuple(shape), origin=origin, steps=np.array(steps).reshape(-1, 3))
        c = as_cell(cell)
        to_q = 2.0 * np.pi * reciprocal_basis(c)
        return RegularGrid(kind="hkl", shape=tuple(shape), cell=c, origin=origin @ to_q,
                           steps=np.array([s @ to_q for s in steps]).reshape(-1, 3))

    @staticmethod
    def hkl(cell, h=0.0, k=0.0, l=0.0) -> RegularGrid:
        """A grid in reciprocal-lattice units of `cell`: q = 2π(h a* + k b* + l c*).

        Each of `h`, `k`, `l` is a single value or a range ``(lo, hi, n)`` (both ends
        included). The map's axes are the ranged ones, in h, k, l order.
        """
        c = as_cell(cell)
        origin_hkl = np.zeros(3)
        steps_hkl, shape = [], []
        for i, (name, spec) in enumerate(zip(_HKL, (h, k, l))):
            if np.ndim(spec) == 0:
                origin_hkl[i] = _scalar(spec, name)
                continue
            try:
                lo, hi, n = spec
            except (TypeError, ValueError):
                raise InvalidInputError(f"`{name}` must be a number or (lo, hi, n), got {spec!r}") from None
            lo, hi = _scalar(lo, name), _scalar(hi, name)
            n = _count(n, f"{name}[2] (number of points)")
            if n == 1 and lo != hi:
                raise InvalidInputError(f"`{name}` has 1 point but lo != hi ({lo} vs {hi})")
            origin_hkl[i] = lo
            st = np.zeros(3)
            st[i] = (hi - lo) / (n - 1) if n > 1 else 1.0  # a one-point axis keeps its direction
            steps_hkl.append(st)
            shape.append(n)
        to_q = 2.0 * np.pi * reciprocal_basis(c)
        steps = np.array([s @ to_q for s in steps_hkl]).reshape(len(steps_hkl), 3)
        return RegularGrid(kind="hkl", shape=tuple(shape), cell=c, origin=origin_hkl @ to_q, steps=steps)

    # ----- detectors (built by kinemap.geometry) ---------------------------------------
    @staticmethod
    def detector(det, *, orientation=None) -> QGrid:
        """q (sample frame, Å⁻¹) of every pixel centre of one detector frame: a points grid
        of shape (ny, nx), axes "row" and "column"; ``q_sample = Rᵀ k(p̂ − ẑ)`` for a sample
        at orientation R (sample → lab). See :class:`kinemap.Detector`."""
        from .geometry.series import detector_grid

        return detector_grid(det, orientation=orientation)

    @staticmethod
    def rotation(det, axis, angles, *, orientation=None) -> QGrid:
        """q (sample frame, Å⁻¹) of every pixel of a rotation series about the lab `axis` at
        `angles` (degrees): a points grid of shape (n_frames, ny, nx); frame n has the sample
        at ``Rot(axis, angles[n])·orientation``. See :class:`kinemap.Detector`."""
        from .geometry.series import rotation_grid

        return rotation_grid(det, axis, angles, orientation=orientation)

    # ----- the interface ---------------------------------------------------------------
    @property
    def size(self) -> int:
        """Number of q-points."""
        return int(np.prod(self.shape, dtype=np.int64))

    @property
    def ndim(self) -> int:
        return len(self.shape)

    def q_vectors(self, start: int = 0, stop: int | None = None) -> np.ndarray:
        """q-vectors (Å⁻¹) of the flattened (C-order) points ``start:stop``, shape (M, 3)."""
        raise NotImplementedError

    def q_norms(self, start: int = 0, stop: int | None = None) -> np.ndarray:
        """|q| (Å⁻¹) of the flattened points ``start:stop``."""
        q = self.q_vectors(start, stop)
        return np.sqrt(np.einsum("mi,mi->m", q, q))

    def hkl_values(self, start: int = 0, stop: int | None = None) -> np.ndarray:
        """Reciprocal-lattice coordinates (h, k, l) of the points (needs a cell)."""
        if self.cell is None:
            raise InvalidInputError("this grid has no cell; build it with QGrid.hkl or give one")
        q = self.q_vectors(start, stop)
        return q @ self.cell.T / (2.0 * np.pi)

    def describe(self) -> dict:
        """A summary for output files."""
        d: dict = {"kind": self.kind, "shape": list(self.shape)}
        if self.cell is not None:
            d["cell"] = self.cell.tolist()
        return d

    def __repr__(self) -> str:
        return f"QGrid(kind={self.kind!r}, shape={self.shape})"


def _tidy(x: np.ndarray) -> np.ndarray:
    """Reciprocal-lattice coordinates within 1e-9 of a whole number become that number (they
    went through q and back; -3.9999999999999996 is meant to be -4)."""
    r = np.round(x)
    return np.where(np.abs(x - r) < 1e-9, r, x)


def _scalar(v, name: str) -> float:
    try:
        x = float(v)
    except (TypeError, ValueError):
        raise InvalidInputError(f"`{name}` must be a number or (lo, hi, n), got {v!r}") from None
    if not np.isfinite(x):
        raise InvalidInputError(f"`{name}` is not finite: {v!r}")
    return x


@dataclass(frozen=True, eq=False, repr=False)
class PointGrid(QGrid):
    """Arbitrary q-points (Å⁻¹), flattened to (M, 3); maps have shape :attr:`shape`."""

    q: np.ndarray = field(default_factory=lambda: np.zeros((0, 3)))

    def __post_init__(self):
        q = np.ascontiguousarray(self.q, dtype=np.float64)
        q.flags.writeable = False
        object.__setattr__(self, "q", q)
        object.__setattr__(self, "cell", _readonly(self.cell))

    def q_vectors(self, start: int = 0, stop: int | None = None) -> np.ndarray:
        return self.q[start:stop]


@dataclass(frozen=True, eq=False, repr=False)
class RegularGrid(QGrid):
    """``origin + Σ_a i_a·steps[a]`` for ``0 <= i_a < shape[a]`` (Å⁻¹)."""

    origin: np.ndarray = field(default_factory=lambda: np.zeros(3))
    steps: np.ndarray = field(default_factory=lambda: np.zeros((0, 3)))
    hkl_origin: np.ndarray | None = field(default=None, init=False)
    hkl_steps: np.ndarray | None = field(default=None, init=False)

    is_regular = True

    def __post_init__(self):
        set_ = object.__setattr__
        set_(self, "origin", _readonly(self.origin))
        set_(self, "steps", _readonly(np.asarray(self.steps, dtype=np.float64).reshape(-1, 3)))
        set_(self, "cell", _readonly(self.cell))
        names, values, units, labels = [], [], [], []
        if self.cell is not None:
            ho = _tidy(self.origin @ self.cell.T / (2.0 * np.pi))
            hs = _tidy(self.steps @ self.cell.T / (2.0 * np.pi))
            set_(self, "hkl_origin", _readonly(ho))
            set_(self, "hkl_steps", _readonly(hs))
        hkl_origin, hkl_steps = self.hkl_origin, self.hkl_steps  # set with a cell
        for a, n in enumerate(self.shape):
            idx = np.arange(n, dtype=np.float64)
            if hkl_origin is not None and hkl_steps is not None and self.kind == "hkl":
                hs = hkl_steps[a]
                if not np.any(hs):
                    name, label, comp = "", "(one point)", 0
                else:
                    name, label, comp = _hkl_axis(hs)
                values.append(hkl_origin[comp] + idx * hs[comp])
                units.append("r.l.u.")
            else:
                st = self.steps[a]
                length = float(np.linalg.norm(st))
                direction = st / length if length > 0 else np.zeros(3)
                name, label = "", "q along [" + " ".join(_fmt(x) for x in direction) + "]"
                values.append(float(self.origin @ direction) + idx * length)
                units.append("1/angstrom")
            names.append(name)
            labels.append(label)
        # Axes without a letter of their own are u, v, w (unique names for files and options).
        spare = iter(n for n in "uvw" if n not in names)
        names = [nm or next(spare) for nm in names]
        for v in values:
            v.flags.writeable = False
        set_(self, "axis_names", names)
        set_(self, "axis_values", values)
        set_(self, "axis_units", units)
        set_(self, "axis_labels", labels)

    def q_vectors(self, start: int = 0, stop: int | None = None) -> np.ndarray:
        stop = self.size if stop is None else min(stop, self.size)
        out = np.broadcast_to(self.origin, (stop - start, 3)).copy()
        if self.shape:
            idx = np.unravel_index(np.arange(start, stop), self.shape)
            for ax, ix in enumerate(idx):
                out += ix[:, None].astype(np.float64) * self.steps[ax]
        return out

    def q_norms(self, start: int = 0, stop: int | None = None) -> np.ndarray:
        """|q| of the flattened points ``start:stop``, without forming the q-vectors:
        |o + Σ i_a s_a|² expanded in the grid indices (for the whole grid, as sums of
        per-axis and per-pair-of-axes terms broadcast over the shape)."""
        stop = self.size if stop is None else min(stop, self.size)
        if not self.shape:
            return np.full(stop - start, float(np.linalg.norm(self.origin)))
        o, s = self.origin, self.steps
        if start == 0 and stop == self.size:
            nd = len(self.shape)
            idx = [np.arange(n, dtype=np.float64) for n in self.shape]

            def along(terms, axes):
                view = [1] * nd
                for ax, n in zip(axes, terms.shape):
                    view[ax] = n
                return terms.reshape(view)

            q2 = np.full(self.shape, float(o @ o))
            for a in range(nd):
                q2 += along(idx[a] * (2.0 * float(o @ s[a]) + idx[a] * float(s[a] @ s[a])), (a,))
                for b in range(a):
                    q2 += along(2.0 * float(s[a] @ s[b]) * np.outer(idx[b], idx[a]), (b, a))
            np.maximum(q2, 0.0, out=q2)
            return np.sqrt(q2, out=q2).reshape(-1)
        idx_list = [ix.astype(np.float64) for ix in np.unravel_index(np.arange(start, stop), self.shape)]
        q2 = np.full(stop - start, float(o @ o))
        for a, ia in enumerate(idx_list):
            q2 += ia * (2.0 * float(o @ s[a]) + ia * float(s[a] @ s[a]))
            for b in range(a):
                q2 += 2.0 * float(s[a] @ s[b]) * ia * idx_list[b]
        np.maximum(q2, 0.0, out=q2)
        return np.sqrt(q2)

    def describe(self) -> dict:
        d = super().describe()
        d["origin"] = self.origin.tolist()
        d["steps"] = self.steps.tolist()
        d["axes"] = [{"name": n, "label": lab, "units": u, "first": float(v[0]), "last": float(v[-1])}
                     for n, lab, u, v in zip(self.axis_names, self.axis_labels, self.axis_units, self.axis_values)]
        return d

    # ----- the periodic box's reciprocal lattice ---------------------------------------
    def box_coordinates(self, box) -> tuple[np.ndarray, np.ndarray]:
        """Origin and steps in units of the box's reciprocal lattice: ``box·q/2π`` (rows of
        the box as vectors); integers on a commensurate grid."""
        b = as_cell(box, "box")
        o = b @ self.origin / (2.0 * np.pi)
        st = (b @ self.steps.T / (2.0 * np.pi)).T
        return o, st

    def is_commensurate(self, box, *, tol: float = 1e-6) -> bool:
        """True when every point lies on the reciprocal lattice of the periodic `box`: box·q/2π
        is an integer vector for the origin and for every step (within `tol`).

        Off that lattice, the finite-box interference ripple of every Bragg peak of a periodic
        model swamps its diffuse scattering."""
        o, st = self.box_coordinates(box)
        used = [m for m, n in zip(st, self.shape) if n > 1]  # a one-point axis never steps
        vals = np.concatenate([o.reshape(-1)] + [m.reshape(-1) for m in used])
        return bool(np.all(np.abs(vals - np.round(vals)) <= tol))

    def snapped(self, box) -> RegularGrid:
        """The nearest commensurate grid: the origin moved to the nearest point of the box's
        reciprocal lattice, each step replaced by the nearest nonzero lattice vector along it,
        and the number of points changed so that each edge keeps its length to within one
        step. hkl grids stay hkl grids of the same cell."""
        o, st = self.box_coordinates(box)
        to_q = 2.0 * np.pi * np.linalg.inv(as_cell(box, "box"))  # q = to_q @ (box coordinates)
        steps, shape = [], []
        for m, n in zip(st, self.shape):
            if n == 1 or not np.any(m):
                steps.append(m)
                shape.append(n)
                continue
            m_int = np.round(m)
            if not np.any(m_int):  # finer than the lattice: the shortest lattice step along it
                m_int = np.round(m / np.abs(m).max())
            edge = m * (n - 1)
            steps.append(m_int)
            shape.append(max(int(round(float(edge @ m_int) / float(m_int @ m_int))) + 1, 1))
        return RegularGrid(kind=self.kind, shape=tuple(shape), cell=self.cell, origin=to_q @ np.round(o),
                           steps=np.array([to_q @ m for m in steps]).reshape(-1, 3))


__all__ = ["QGrid", "RegularGrid", "PointGrid"]
