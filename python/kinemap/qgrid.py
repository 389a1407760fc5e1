"""Sets of scattering vectors q (Å⁻¹) at which amplitudes are computed.

Two kinds: arbitrary points (for example detector pixels mapped to q) and regular grids
(line, plane, volume, or ranges of reciprocal-lattice coordinates h, k, l on a cell). A regular
grid is an origin plus one step vector per axis, so point ``(i, j, ...)`` is
``origin + i·step[0] + j·step[1] + ...``; the exact engine steps the phase along one of its
axes instead of evaluating a sincos per point.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .errors import InvalidInputError
from .model import as_cell, reciprocal_basis


def _vec3(v, name: str) -> np.ndarray:
    try:
        a = np.asarray(v, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise InvalidInputError(f"`{name}` must be a 3-vector of numbers: {exc}") from None
    if a.shape != (3,):
        raise InvalidInputError(f"`{name}` must be a 3-vector, got shape {a.shape}")
    if not np.isfinite(a).all():
        raise InvalidInputError(f"`{name}` is not finite: {a.tolist()}")
    return a


def _count(n, name: str) -> int:
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)):
        raise InvalidInputError(f"`{name}` must be a whole number of points, got {n!r}")
    if n < 1:
        raise InvalidInputError(f"`{name}` must be at least 1, got {n}")
    return int(n)


@dataclass
class QGrid:
    """A set of q-vectors (Å⁻¹), regular or arbitrary. Build one with the class methods.

    Attributes
    ----------
    kind : str
        "points", "line", "plane", "volume" or "hkl".
    shape : tuple of int
        Shape of every map computed on this grid (``pattern.intensity.shape``).
    origin : ndarray (3,)
        First point of a regular grid (Å⁻¹).
    steps : ndarray (ndim, 3)
        Step vector of each axis of a regular grid (Å⁻¹).
    axis_names, axis_values, axis_units
        Labels and 1-D coordinates of each axis for plots and output files: distance along
        the edge in Å⁻¹ for line/plane/volume, the reciprocal-lattice coordinate for hkl.
    """

    kind: str
    shape: tuple
    origin: np.ndarray | None = None
    steps: np.ndarray | None = None
    q: np.ndarray | None = None
    cell: np.ndarray | None = None
    axis_names: list = field(default_factory=list)
    axis_values: list = field(default_factory=list)
    axis_units: list = field(default_factory=list)
    hkl_origin: np.ndarray | None = None
    hkl_steps: np.ndarray | None = None

    # ----- constructors -------------------------------------------------------------
    @classmethod
    def points(cls, q) -> "QGrid":
        """Arbitrary q-points: an array of shape (..., 3) in Å⁻¹; the map has shape ``q.shape[:-1]``."""
        try:
            a = np.asarray(q, dtype=np.float64)
        except (TypeError, ValueError) as exc:
            raise InvalidInputError(f"`q` must be an array of 3-vectors: {exc}") from None
        if a.ndim < 1 or a.shape[-1] != 3:
            raise InvalidInputError(f"`q` must have shape (..., 3), got {a.shape}")
        flat = a.reshape(-1, 3)
        bad = ~np.isfinite(flat).all(axis=1)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise InvalidInputError(f"q-point {i} is not finite: {flat[i].tolist()}")
        shape = a.shape[:-1]
        if flat.shape[0] == 0:
            raise InvalidInputError("`q` holds no points")
        return cls(kind="points", shape=tuple(int(s) for s in shape),
                   q=np.ascontiguousarray(flat))

    @classmethod
    def line(cls, start, stop, n) -> "QGrid":
        """`n` points from `start` to `stop` (both included, like numpy.linspace), Å⁻¹."""
        a, b = _vec3(start, "start"), _vec3(stop, "stop")
        n = _count(n, "n")
        step = (b - a) / (n - 1) if n > 1 else np.zeros(3)
        length = float(np.linalg.norm(b - a))
        return cls(kind="line", shape=(n,), origin=a, steps=step[None, :],
                   axis_names=["distance"], axis_values=[np.linspace(0.0, length, n)],
                   axis_units=["1/angstrom"])

    @classmethod
    def plane(cls, origin, u, v, shape) -> "QGrid":
        """Points ``origin + i/(nu−1)·u + j/(nv−1)·v``: `origin` is a corner, `u`, `v` full edges (Å⁻¹)."""
        return cls._regular("plane", origin, [u, v], shape, ["u", "v"])

    @classmethod
    def volume(cls, origin, u, v, w, shape) -> "QGrid":
        """Points ``origin + i/(nu−1)·u + j/(nv−1)·v + k/(nw−1)·w`` (Å⁻¹)."""
        return cls._regular("volume", origin, [u, v, w], shape, ["u", "v", "w"])

    @classmethod
    def _regular(cls, kind, origin, edges, shape, names) -> "QGrid":
        o = _vec3(origin, "origin")
        e = [_vec3(x, nm) for x, nm in zip(edges, names)]
        try:
            shp = tuple(shape)
        except TypeError:
            raise InvalidInputError(f"`shape` must be a tuple of {len(edges)} counts, got {shape!r}") from None
        if len(shp) != len(edges):
            raise InvalidInputError(f"`shape` must have {len(edges)} entries for a {kind}, got {shp!r}")
        shp = tuple(_count(n, f"shape[{i}]") for i, n in enumerate(shp))
        steps = np.array([ei / (n - 1) if n > 1 else np.zeros(3) for ei, n in zip(e, shp)])
        values = [np.linspace(0.0, float(np.linalg.norm(ei)), n) for ei, n in zip(e, shp)]
        return cls(kind=kind, shape=shp, origin=o, steps=steps, axis_names=list(names),
                   axis_values=values, axis_units=["1/angstrom"] * len(edges))

    @classmethod
    def hkl(cls, cell, h=0.0, k=0.0, l=0.0) -> "QGrid":  # noqa: E741 (the trade's name)
        """A grid in reciprocal-lattice units of `cell`: q = 2π(h a* + k b* + l c*).

        Each of `h`, `k`, `l` is a single value or a range ``(lo, hi, n)`` (both ends
        included). The map's axes are the ranged ones, in h, k, l order.
        """
        c = as_cell(cell)
        recip = reciprocal_basis(c)
        origin_hkl = np.zeros(3)
        steps_hkl, names, values = [], [], []
        for i, (name, spec) in enumerate(zip("hkl", (h, k, l))):
            if np.ndim(spec) == 0:
                try:
                    origin_hkl[i] = float(spec)
                except (TypeError, ValueError):
                    raise InvalidInputError(f"`{name}` must be a number or (lo, hi, n), got {spec!r}") from None
                if not np.isfinite(origin_hkl[i]):
                    raise InvalidInputError(f"`{name}` is not finite: {spec!r}")
                continue
            try:
                lo, hi, n = spec
                lo, hi = float(lo), float(hi)
            except (TypeError, ValueError):
                raise InvalidInputError(f"`{name}` must be a number or (lo, hi, n), got {spec!r}") from None
            n = _count(n, f"{name}[2] (number of points)")
            if not (np.isfinite(lo) and np.isfinite(hi)):
                raise InvalidInputError(f"`{name}` range is not finite: {spec!r}")
            if n == 1 and lo != hi:
                raise InvalidInputError(f"`{name}` has 1 point but lo != hi ({lo} vs {hi})")
            origin_hkl[i] = lo
            st = np.zeros(3)
            st[i] = (hi - lo) / (n - 1) if n > 1 else 0.0
            steps_hkl.append(st)
            names.append(name)
            values.append(np.linspace(lo, hi, n))
        if not names:
            # A single reflection: a one-point grid.
            steps_hkl = []
        two_pi_recip = 2.0 * np.pi * recip
        origin = origin_hkl @ two_pi_recip
        steps = np.array([s @ two_pi_recip for s in steps_hkl]).reshape(len(steps_hkl), 3)
        shape = tuple(len(v) for v in values)
        return cls(kind="hkl", shape=shape, origin=origin, steps=steps, cell=c,
                   axis_names=names, axis_values=values, axis_units=["r.l.u."] * len(names),
                   hkl_origin=origin_hkl, hkl_steps=np.array(steps_hkl).reshape(len(steps_hkl), 3))

    # ----- queries --------------------------------------------------------------------
    @property
    def size(self) -> int:
        """Number of q-points."""
        return int(np.prod(self.shape, dtype=np.int64))

    @property
    def is_regular(self) -> bool:
        return self.kind != "points"

    def q_vectors(self, start: int = 0, stop: int | None = None) -> np.ndarray:
        """q-vectors (Å⁻¹) of the flattened (C-order) points ``start:stop``, shape (M, 3)."""
        stop = self.size if stop is None else min(stop, self.size)
        if not self.is_regular:
            return self.q[start:stop]
        idx = np.unravel_index(np.arange(start, stop), self.shape) if self.shape else ()
        out = np.broadcast_to(self.origin, (stop - start, 3)).copy()
        for ax, ix in enumerate(idx):
            out += ix[:, None].astype(np.float64) * self.steps[ax]
        return out

    def hkl_values(self, start: int = 0, stop: int | None = None) -> np.ndarray:
        """Reciprocal-lattice coordinates (h, k, l) of the points (needs a cell)."""
        if self.cell is None:
            raise InvalidInputError("this grid has no cell; build it with QGrid.hkl or give one")
        q = self.q_vectors(start, stop)
        return q @ self.cell.T / (2.0 * np.pi)

    # ----- the periodic box's reciprocal lattice ---------------------------------------
    def box_coordinates(self, box) -> tuple[np.ndarray, np.ndarray]:
        """Origin and steps of a regular grid in units of the box's reciprocal lattice:
        ``box·q/2π`` (rows of the box as vectors); integers on a commensurate grid."""
        if not self.is_regular:
            raise InvalidInputError("only regular grids (line, plane, volume, hkl) have steps; "
                                    "this is a set of arbitrary q-points")
        b = as_cell(box, "box")
        o = b @ self.origin / (2.0 * np.pi)
        st = (b @ np.asarray(self.steps, dtype=np.float64).reshape(-1, 3).T / (2.0 * np.pi)).T
        return o, st

    def is_commensurate(self, box, *, tol: float = 1e-6) -> bool:
        """True when every point lies on the reciprocal lattice of the periodic `box`: box·q/2π
        is an integer vector for the origin and for every step (within `tol`).

        Off that lattice, the finite-box interference ripple of every Bragg peak of a periodic
        model swamps its diffuse scattering."""
        o, st = self.box_coordinates(box)
        vals = np.concatenate([o.reshape(-1), st.reshape(-1)])
        return bool(np.all(np.abs(vals - np.round(vals)) <= tol))

    def snapped(self, box) -> "QGrid":
        """The nearest commensurate grid: origin moved to the nearest point of the box's
        reciprocal lattice, each step replaced by the nearest nonzero lattice vector along it,
        and the number of points changed so that each edge keeps its length to within one
        step. hkl grids stay hkl grids of the same cell.

        Raises
        ------
        InvalidInputError
            For arbitrary q-points (no steps to snap).
        """
        o, st = self.box_coordinates(box)
        b = as_cell(box, "box")
        to_q = 2.0 * np.pi * np.linalg.inv(b)  # box coordinates (column) -> q: q = to_q @ n
        o_new = np.round(o)
        steps, shape = [], []
        for m, n in zip(st, self.shape):
            if n == 1 or not np.any(m):
                steps.append(np.zeros(3))
                shape.append(1)
                continue
            m_int = np.round(m)
            if not np.any(m_int):  # finer than the lattice: the shortest lattice step along it
                m_int = np.round(m / np.abs(m).max())
            edge = m * (n - 1)
            count = int(round(float(edge @ m_int) / float(m_int @ m_int))) + 1
            steps.append(m_int)
            shape.append(max(count, 1))
        origin_q = to_q @ o_new
        steps_q = np.array([to_q @ m for m in steps])
        return self._with_layout(origin_q, steps_q, tuple(shape))

    def _with_layout(self, origin, steps, shape) -> "QGrid":
        """A grid of the same kind (and cell) with new origin, steps and shape."""
        if self.kind == "hkl":
            c = self.cell
            ho = origin @ c.T / (2.0 * np.pi)
            hs = np.array([s @ c.T / (2.0 * np.pi) for s in steps])
            values = [ho[np.argmax(np.abs(h))] + np.arange(n) * h[np.argmax(np.abs(h))]
                      for h, n in zip(hs, shape)]
            return QGrid(kind="hkl", shape=tuple(shape), origin=origin, steps=np.asarray(steps), cell=c,
                         axis_names=list(self.axis_names), axis_values=values,
                         axis_units=list(self.axis_units), hkl_origin=ho, hkl_steps=hs)
        values = [np.arange(n) * float(np.linalg.norm(s)) for s, n in zip(steps, shape)]
        return QGrid(kind=self.kind, shape=tuple(shape), origin=origin, steps=np.asarray(steps),
                     cell=self.cell, axis_names=list(self.axis_names), axis_values=values,
                     axis_units=list(self.axis_units))

    def describe(self) -> dict:
        """A summary for output files."""
        d = {"kind": self.kind, "shape": list(self.shape)}
        if self.is_regular:
            d["origin"] = self.origin.tolist()
            d["steps"] = self.steps.tolist()
        if self.cell is not None:
            d["cell"] = self.cell.tolist()
        return d

    def __repr__(self) -> str:
        return f"QGrid(kind={self.kind!r}, shape={self.shape})"

    # ----- detectors (built by kinemap.geometry) ---------------------------------------
    @classmethod
    def detector(cls, det, *, orientation=None) -> "QGrid":
        """q (sample frame, Å⁻¹) of every pixel centre of one detector frame: a points grid
        of shape (ny, nx), axes "row" and "column"; ``q_sample = Rᵀ k(p̂ − ẑ)`` for a sample
        at orientation R (sample → lab). See :class:`kinemap.Detector`."""
        from .geometry.series import detector_grid

        return detector_grid(det, orientation=orientation)

    @classmethod
    def rotation(cls, det, axis, angles, *, orientation=None) -> "QGrid":
        """q (sample frame, Å⁻¹) of every pixel of a rotation series about the lab `axis` at
        `angles` (degrees): a points grid of shape (n_frames, ny, nx); frame n has the sample
        at ``Rot(axis, angles[n])·orientation``. See :class:`kinemap.Detector`."""
        from .geometry.series import rotation_grid

        return rotation_grid(det, axis, angles, orientation=orientation)


__all__ = ["QGrid"]
