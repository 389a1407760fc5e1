"""What an H5MD file holds, learned once per file: the particle group, the position
element, the box, species and the optional per-atom elements, checked for shapes, units,
frame counts and links out of the file. :mod:`kinemap.io.h5md_read` streams atoms from it.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .._shared.validate import file_name
from ..errors import KinemapError, ModelFileError
from ._base import cell_from_edges, length_scale
from ._hdf5 import attr_numbers, attr_str, attr_strs, get_checked, h5py_module, open_h5, read_small, tree
from ._species import SPECIES_HINT, LabelColumn, file_names_attribute

#: Errors that a damaged or unexpected file layout can raise inside h5py/NumPy; turned into
#: ModelFileError naming the file. (Programming errors such as AttributeError stay visible.)
LAYOUT_ERRORS = (ValueError, TypeError, KeyError, IndexError, OSError, RuntimeError, OverflowError,
                 ZeroDivisionError, np.linalg.LinAlgError)

#: Top-level groups of H5MD files besides /h5md and /particles, listed by describe().
_OTHER_GROUPS = ("observables", "connectivity", "parameters")


class _Element:
    """An H5MD data element: a time-independent dataset, or a time-dependent group with
    ``value`` and optional ``step``/``time`` (read per frame, never whole)."""

    def __init__(self, f, obj, path: str, where: str, allow_external: bool):
        h5py = h5py_module()
        self.path = path
        self.where = where
        self.step_path = self.time_path = None
        self.step_rule = self.time_rule = None  # (offset, interval) of a fixed-interval step/time
        if isinstance(obj, h5py.Group):
            ds = get_checked(f, path + "/value", where, allow_external)
            if not isinstance(ds, h5py.Dataset):
                raise ModelFileError(f"{where}: {path} is a group without a 'value' dataset (it has: "
                                     f"{', '.join(obj.keys()) or 'nothing'})")
            self.value_path = path + "/value"
            self.time_dependent = True
        elif isinstance(obj, h5py.Dataset):
            ds = obj
            self.value_path = path
            self.time_dependent = False
        else:
            raise ModelFileError(f"{where}: {path} is neither a dataset nor a group")
        self.shape = tuple(ds.shape)
        self.dtype = ds.dtype
        self.unit = ds.attrs.get("unit")
        self.n_frames = self.shape[0] if (self.time_dependent and self.shape) else None
        if self.time_dependent and not self.shape:
            raise ModelFileError(f"{where}: {self.value_path} is a scalar; a time-dependent value needs a frame axis")
        if self.time_dependent:
            for name in ("step", "time"):
                sds = get_checked(f, f"{path}/{name}", where, allow_external)
                if sds is None:
                    continue
                if not isinstance(sds, h5py.Dataset) or sds.dtype.kind not in "iuf":
                    raise ModelFileError(f"{where}: {path}/{name} must be a dataset of numbers")
                if sds.ndim == 1:
                    if sds.shape[0] != self.n_frames:
                        raise ModelFileError(f"{where}: {path}/{name} has {sds.shape[0]} entries but {self.value_path} "
                                             f"has {self.n_frames} frames (mismatched frame counts)")
                    setattr(self, f"{name}_path", f"{path}/{name}")
                elif sds.ndim == 0:  # fixed interval, H5MD 1.1 (offset attribute optional)
                    off = attr_numbers(sds.attrs.get("offset", 0), f"{where}: {path}/{name} attribute 'offset'")
                    rule = (float(off[0]) if off.size else 0.0, float(np.asarray(sds[()], dtype=np.float64)))
                    setattr(self, f"{name}_rule", rule)
                else:
                    raise ModelFileError(f"{where}: {path}/{name} must be a scalar or [frame], got shape {list(sds.shape)}")

    def at(self, f, name: str, frame: int):
        """The step or time of `frame` (None when the element has none)."""
        rule = getattr(self, f"{name}_rule")
        if rule is not None:
            v = rule[0] + rule[1] * frame
            return int(v) if name == "step" else float(v)
        p = getattr(self, f"{name}_path")
        if p is None:
            return None
        v = np.asarray(f[p][frame])
        return int(v) if name == "step" else float(v)


def _numeric(el: _Element, where: str, kinds: str = "iuf") -> None:
    if el.dtype.kind not in kinds:
        want = "whole numbers" if kinds == "iu" else "real numbers"
        raise ModelFileError(f"{where}: {el.value_path} must hold {want}, got type {el.dtype}")


class H5MDIndex:
    """What the reader learned from the file once; shared by the sources of all frames."""

    def __init__(self, path, group, species_map, unwrap: bool, allow_external: bool):
        self.path = Path(file_name(path, "path"))
        self.allow_external = bool(allow_external)
        where = str(self.path)
        self.where = where
        with open_h5(self.path) as f:
            try:
                self._build(f, group, species_map, unwrap, where)
            except KinemapError:
                raise
            except LAYOUT_ERRORS as exc:
                raise ModelFileError(f"{where}: cannot read the file's layout ({type(exc).__name__}: {exc})") from None

    def _get(self, f, path):
        return get_checked(f, path, self.where, self.allow_external)

    def _build(self, f, group, species_map, unwrap, where):
        h5py = h5py_module()
        particles = self._get(f, "/particles")
        if not isinstance(particles, h5py.Group):
            raise ModelFileError(f"{where}: no '/particles' group, so not an H5MD model; the file has: {tree(f)}")
        names = list(particles.keys())
        if group is None:
            if len(names) == 1:
                group = names[0]
            elif "all" in names:
                group = "all"
            else:
                raise ModelFileError(f"{where}: /particles has {len(names)} groups ({', '.join(names) or 'none'}); "
                                     "choose one with group=... (command line: --group)")
        gpath = f"/particles/{group}"
        g = self._get(f, gpath)
        if not isinstance(g, h5py.Group):
            raise ModelFileError(f"{where}: no particle group '{gpath}' (it has: {', '.join(names) or 'none'})")
        self.group = group
        self.gpath = gpath
        self.h5md_version = self.creator = None
        h = self._get(f, "/h5md")
        if isinstance(h, h5py.Group):
            try:
                if "version" in h.attrs:
                    self.h5md_version = attr_numbers(h.attrs["version"], "version", whole=True)[:4].tolist()
            except ModelFileError:
                self.h5md_version = None  # only reported, never needed
            cr = self._get(f, "/h5md/creator")
            if cr is not None:
                self.creator = attr_str(cr.attrs.get("name", ""))[:200] or None
        self.other = [k for k in _OTHER_GROUPS if k in f]
        self.elements = sorted(k for _, k in zip(range(64), g.keys()))  # what else the group holds (first 64)
        pobj = self._get(f, f"{gpath}/position")
        if pobj is None:
            raise ModelFileError(f"{where}: dataset '{gpath}/position' is missing; {gpath} has: "
                                 f"{', '.join(g.keys()) or 'nothing'}")
        pos = _Element(f, pobj, f"{gpath}/position", where, self.allow_external)
        self.position = pos
        if pos.time_dependent:
            if len(pos.shape) != 3:
                raise ModelFileError(f"{where}: {pos.value_path} must have shape [frame][N][D], got {list(pos.shape)}")
            self.n_frames, self.n_atoms, self.dim = pos.shape
        else:
            if len(pos.shape) != 2:
                raise ModelFileError(f"{where}: {pos.value_path} must have shape [N][D], got {list(pos.shape)}")
            self.n_frames = 1
            self.n_atoms, self.dim = pos.shape
        if self.dim not in (2, 3):
            raise ModelFileError(f"{where}: {pos.value_path} has D = {self.dim} coordinates per atom; kinemap reads D = 2 or 3")
        if self.n_frames == 0:
            raise ModelFileError(f"{where}: {pos.value_path} holds no frames")
        _numeric(pos, where)
        self.scale = length_scale(pos.unit, f"{where}: {pos.value_path} attribute 'unit'")
        self.unit_note = "angstrom (no unit attribute)" if pos.unit is None else attr_str(pos.unit)
        self._read_box(f, g, gpath, where)
        self._read_species(f, g, gpath, where, species_map)
        self.occupancy = self._optional(f, g, gpath, "occupancy", where)
        self.b_iso = self._optional(f, g, gpath, "b_iso", where)
        self.u_aniso = self._optional(f, g, gpath, "u_aniso", where, per_atom_dims=(3, 3))
        self.b_scale = self.u_scale = 1.0
        if self.b_iso is not None:
            self.b_scale = length_scale(self.b_iso.unit, f"{where}: {self.b_iso.value_path} attribute 'unit'", power=2)
        if self.u_aniso is not None:
            self.u_scale = length_scale(self.u_aniso.unit, f"{where}: {self.u_aniso.value_path} attribute 'unit'", power=2)
            if self.b_iso is not None:
                raise ModelFileError(f"{where}: {gpath} has both b_iso and u_aniso; keep one kind of displacement")
        self.image = None
        if unwrap:
            if "image" not in g:
                raise ModelFileError(f"{where}: unwrap=True needs '{gpath}/image', which is missing")
            self.image = self._optional(f, g, gpath, "image", where, per_atom_dims=(self.dim,), kinds="iuf")
            if self.edges is None:
                raise ModelFileError(f"{where}: unwrap=True needs box edges in '{gpath}/box'")
        self.unwrap = bool(unwrap)
        self.static_labels: list[str] | None = None

    # ------------------------------------------------------------------------------
    def _optional(self, f, g, gpath, name, where, per_atom_dims=(), kinds="iuf"):
        if name not in g:
            return None
        obj = self._get(f, f"{gpath}/{name}")
        if obj is None:
            return None
        el = _Element(f, obj, f"{gpath}/{name}", where, self.allow_external)
        want = (self.n_atoms,) + tuple(per_atom_dims)
        shape = el.shape[1:] if el.time_dependent else el.shape
        if tuple(shape) != want:
            raise ModelFileError(f"{where}: {el.value_path} has shape {list(el.shape)}, which does not match "
                                 f"{self.n_atoms} atoms in {self.position.value_path} (mismatched shapes)")
        if el.time_dependent and el.n_frames != self.n_frames:
            raise ModelFileError(f"{where}: {el.value_path} has {el.n_frames} frames but "
                                 f"{self.position.value_path} has {self.n_frames} (mismatched frame counts)")
        if kinds:
            _numeric(el, where, kinds)
        return el

    def _read_box(self, f, g, gpath, where):
        h5py = h5py_module()
        self.boundary = None
        self.edges: _Element | str | None = None  # _Element (per-frame reads), or "attribute" (a fixed cell)
        self.fixed_cell = None
        self.box_note = ""
        box = self._get(f, f"{gpath}/box")
        if box is None:
            self.box_note = "no box: open boundaries"
            return
        if not isinstance(box, h5py.Group):
            raise ModelFileError(f"{where}: {gpath}/box must be a group")
        bpath = f"{gpath}/box"
        dim = box.attrs.get("dimension")
        if dim is not None:
            dims = attr_numbers(dim, f"{where}: {bpath} attribute 'dimension'", whole=True)
            if dims.size != 1:
                raise ModelFileError(f"{where}: {bpath} attribute 'dimension' must be one whole number, got {dims[:6].tolist()}")
            dval = int(dims[0])
            if dval != self.dim:
                raise ModelFileError(f"{where}: {bpath} attribute 'dimension' is {dval} "
                                     f"but {self.position.value_path} has D = {self.dim}")
        if "boundary" in box.attrs:
            self.boundary = attr_strs(box.attrs["boundary"])
            if len(self.boundary) != self.dim or any(b not in ("periodic", "none") for b in self.boundary):
                raise ModelFileError(f"{where}: {bpath} attribute 'boundary' must be {self.dim} of "
                                     f"'periodic'/'none', got {self.boundary[:6]}")
        epath = f"{bpath}/edges"
        obj = self._get(f, epath) if "edges" in box else None
        if obj is not None:
            el = _Element(f, obj, epath, where, self.allow_external)
            _numeric(el, where, "iuf")
            scale = self.scale if el.unit is None else length_scale(el.unit, f"{where}: {el.value_path} attribute 'unit'")
            self.edges_scale = scale
            self.edges_where = f"{where}: {el.value_path}"
            if el.time_dependent:
                if el.shape[1:] not in ((self.dim,), (self.dim, self.dim)):
                    raise ModelFileError(f"{self.edges_where} has shape {list(el.shape)}; expected "
                                         f"[frame][{self.dim}] or [frame][{self.dim}][{self.dim}]")
                if el.n_frames != self.n_frames and self.n_frames > 1:
                    raise ModelFileError(f"{where}: {el.value_path} has {el.n_frames} frames but "
                                         f"{self.position.value_path} has {self.n_frames} (mismatched frame counts)")
                if el.n_frames == 0:
                    raise ModelFileError(f"{where}: {el.value_path} holds no frames")
                self.edges = el
                triclinic = len(el.shape) == 3
            else:
                raw = read_small(f[el.value_path], where, limit=16).astype(np.float64)
                with np.errstate(over="ignore", invalid="ignore"):
                    raw = raw * scale
                self.fixed_cell = self._cell(raw, self.edges_where)
                self.edges = el
                triclinic = raw.ndim == 2
        elif "edges" in box.attrs:
            raw = np.asarray(box.attrs["edges"])
            shape = raw.shape
            raw = attr_numbers(raw, f"{where}: {bpath} attribute 'edges'").reshape(shape)
            self.edges_where = f"{where}: {bpath} attribute 'edges'"
            with np.errstate(over="ignore", invalid="ignore"):
                raw = raw * self.scale
            self.fixed_cell = self._cell(raw, self.edges_where)
            self.edges = "attribute"
            triclinic = raw.ndim == 2
        else:
            if self.boundary and "periodic" in self.boundary:
                raise ModelFileError(f"{where}: {bpath} says the boundary is periodic but has no 'edges'")
            self.box_note = "box without edges: open boundaries"
            return
        self.box_note = ("triclinic" if triclinic else "cuboid") + (
            ", time-dependent" if self.fixed_cell is None else "")
        if self.dim == 2:
            self.box_note += "; 2-D box, c = (0, 0, 1) angstrom added"

    def _cell(self, e: np.ndarray, where_e: str) -> np.ndarray:
        if e.shape not in ((self.dim,), (self.dim, self.dim)):
            raise ModelFileError(f"{where_e} has shape {list(e.shape)}; expected [{self.dim}] or [{self.dim}][{self.dim}]")
        return cell_from_edges(e, where_e)

    def edges_for(self, frame: int) -> np.ndarray | None:
        """The box edges (3x3 rows, Å) of `frame`, or None without edges."""
        if self.edges is None:
            return None
        if self.fixed_cell is not None:
            return self.fixed_cell
        el = self.edges
        # edges given as an attribute or a time-independent dataset make a fixed cell
        assert isinstance(el, _Element) and el.n_frames is not None
        i = frame if el.n_frames > 1 else 0
        with open_h5(self.path) as f:
            try:
                raw = np.asarray(f[el.value_path][i], dtype=np.float64)
            except LAYOUT_ERRORS as exc:
                raise ModelFileError(f"{self.edges_where}: cannot read the edges of frame {frame}: {exc}") from None
        with np.errstate(over="ignore", invalid="ignore"):
            raw = raw * self.edges_scale
        return self._cell(raw, f"{self.edges_where} (frame {frame})")

    def _read_species(self, f, g, gpath, where, species_map):
        h5py = h5py_module()
        self.species = None
        self.species_column = None
        if "species" not in g:
            return
        obj = self._get(f, f"{gpath}/species")
        if obj is None:
            return
        el = self._optional(f, g, gpath, "species", where, kinds=None)
        self.species = el
        ds = f[el.value_path]
        names = file_names_attribute(obj if isinstance(obj, h5py.Group) else ds, f"{where}: {el.path}")
        if names is None and isinstance(obj, h5py.Group):
            names = file_names_attribute(ds, f"{where}: {el.value_path}")
        self.species_column = LabelColumn(ds, el.time_dependent, f"{where}: {el.value_path}", species_map=species_map,
                                          names=names, path=el.value_path)

    def missing_species(self) -> str | None:
        if self.species_column is None:
            return (f"{self.where}: the particle group {self.gpath} has no 'species' (the file keeps no labels of "
                    f"what scatters); {SPECIES_HINT}")
        return self.species_column.missing()


__all__ = ["H5MDIndex", "LAYOUT_ERRORS"]
