"""Convert any model file kinemap reads into H5MD, streaming chunk by chunk."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .._shared.progress import Progress
from .._shared.validate import file_name
from ..errors import InvalidInputError, ModelFileError
from ._base import FileSource
from .h5md_write import H5MDWriter

_CONVERT_CHUNK = 1 << 18


def _runs(rows: np.ndarray):
    """Split sorted row indices into runs of consecutive values: (start_pos, stop_pos, first_row)."""
    if len(rows) == 0:
        return
    breaks = np.flatnonzero(np.diff(rows) != 1) + 1
    starts = np.concatenate([[0], breaks])
    stops = np.concatenate([breaks, [len(rows)]])
    for a, b in zip(starts, stops):
        yield int(a), int(b), int(rows[a])


def select_frames(frames, n_frames: int, where: str = "the file") -> list[int]:
    """Frame indices from None (all), an int, a slice, a sequence, or text like
    ``"all"``, ``"5"``, ``"0:50:5"``, ``"-10:"``, ``"0,3,7"``.

    Raises
    ------
    InvalidInputError
        Out-of-range or malformed selections, or one that selects nothing.
    """
    if frames is None or (isinstance(frames, str) and frames.strip().lower() in ("all", ":", "")):
        out = list(range(n_frames))
    elif isinstance(frames, slice):
        out = list(range(n_frames))[frames]
    elif isinstance(frames, str):
        text = frames.strip()
        if ":" in text:
            parts = text.split(":")
            if len(parts) > 3:
                raise InvalidInputError(f"frame selection {frames!r} must look like start:stop:step")
            try:
                nums = [int(x) if x.strip() else None for x in parts]
            except ValueError:
                raise InvalidInputError(
                    f"frame selection {frames!r} must look like start:stop:step with whole numbers") from None
            if len(nums) == 3 and nums[2] == 0:
                raise InvalidInputError(f"frame selection {frames!r}: the step cannot be 0")
            out = list(range(n_frames))[slice(*nums)]
        else:
            try:
                vals = [int(x) for x in text.split(",") if x.strip()]
            except ValueError:
                raise InvalidInputError(
                    f"frame selection {frames!r} must be 'all', start:stop:step or a list like 0,3,7") from None
            out = _check_list(vals, n_frames, where)
    elif isinstance(frames, (int, np.integer)) and not isinstance(frames, bool):
        out = _check_list([int(frames)], n_frames, where)
    else:
        try:
            vals = [int(x) for x in frames]
        except (TypeError, ValueError):
            raise InvalidInputError(
                f"`frames` must be None, an int, a slice, a list of ints or text like '0:50:5', got {frames!r}") from None
        out = _check_list(vals, n_frames, where)
    if not out:
        raise InvalidInputError(f"frame selection {frames!r} selects no frame of {where} ({n_frames} frame(s))")
    return out


def _check_list(vals, n_frames, where):
    out = []
    for v in vals:
        f = v + n_frames if v < 0 else v
        if not 0 <= f < n_frames:
            raise InvalidInputError(f"frame {v} is out of range: {where} has {n_frames} frame(s) (0 to {n_frames - 1})")
        out.append(f)
    return out


def convert(source_or_path, output, *, frames=None, species_map=None, format: str | None = None,
            position_dtype=np.float64, progress=False, overwrite: bool = False, species=None, cell=None,
            supercell=None, allow_external: bool = False, **options) -> Path:
    """Write a model file (any format :func:`kinemap.open_model` reads) as H5MD 1.1.

    Streams: memory stays bounded by one chunk of atoms (plus one species code per atom,
    and for LAMMPS dumps with an ``id`` column two integers per atom to put every frame in
    the same atom order; these are estimated and refused up front when they cannot fit).

    Parameters
    ----------
    source_or_path : str, path-like or atom source
        The input.
    output : str or path-like
        The H5MD file to write (atomically: temporary name, renamed when complete).
    frames : selection, optional
        Frames to convert (see :func:`select_frames`); default all.
    species_map : mapping or str, optional
        Labels of integer species codes (``{1: "Fe"}`` or ``"1=Fe,2=Ni"``).
    format : str, optional
        Input format when the file name does not tell it.
    position_dtype : dtype
        float64 (default) or float32 for the stored positions.
    progress : bool
        Show a progress bar over atoms written.
    overwrite : bool
        Replace an existing output (default: refuse and keep it). The output may never be
        the input.
    species, cell, supercell, allow_external :
        As for :func:`kinemap.open_model` (labels the input lacks, e.g. for H5MD files of
        general-purpose MD tools; the written file stores the box, not the cell).
    **options
        Passed to :func:`kinemap.open_model` (e.g. ``group``, dataset paths).

    Returns
    -------
    pathlib.Path
        The written file.

    Raises
    ------
    InvalidInputError
        An output that is the input, or whose name is not UTF-8; bad options.
    FileExistsError
        An existing output without ``overwrite=True``.
    ModelFileError
        When frames differ in atom count or in the species of an atom (H5MD stores species
        once), or the input is unreadable.
    OSError
        A full disk or another write failure (nothing is left behind).
    """
    from .._shared.memory import check_fits
    from .._shared.output import check_output
    from . import open_model

    if isinstance(source_or_path, FileSource):
        given = {k for k, v in dict(species_map=species_map, format=format, species=species, cell=cell,
                                     supercell=supercell, **options).items() if v is not None}
        if given or allow_external:
            raise InvalidInputError(f"options {sorted(given) or ['allow_external']} apply when the input is a file "
                                    "name; give them to kinemap.open_model for a source")
        input_path = source_or_path.path
    else:
        input_path = Path(file_name(source_or_path, "input"))
    check_output(output, overwrite=overwrite, inputs=[input_path], what="model file")
    if isinstance(source_or_path, FileSource):
        base = source_or_path
    else:
        base = open_model(source_or_path, format=format, species_map=species_map, species=species, cell=cell,
                          supercell=supercell, allow_external=allow_external, **options)
    chosen = select_frames(frames, base.n_frames, str(base.path))
    srcs = [base.at_frame(f) if f != base.frame else base for f in chosen]
    first = srcs[0]
    n = first.n_atoms
    for f, s in zip(chosen, srcs):
        if s.n_atoms != n:
            raise ModelFileError(f"{base.path}: frame {f} has {s.n_atoms} atoms but frame {chosen[0]} has {n}; "
                                 "H5MD needs the same atoms in every frame")
    with_ids = hasattr(first, "iter_chunks_with_ids")
    check_fits(n * (4 + (16 if with_ids else 0)), f"converting {n:,} atoms (codes{' and ids' if with_ids else ''} per atom)",
               hint="the input declares more atoms than this process can index; check the file")
    labels = first.species_labels()
    boxes = [s.box if s.box is not None else s.cell for s in srcs]
    has_cell = boxes[0] is not None
    if has_cell and any(c is None for c in boxes):
        raise ModelFileError(f"{base.path}: some frames have a box and some do not")
    box0 = boxes[0]
    td_box = box0 is not None and any(c is not None and not np.allclose(c, box0, rtol=0, atol=1e-12) for c in boxes)
    desc = first.describe()
    boundary = desc.get("boundary") or ("periodic" if first.box is not None else "none")
    if isinstance(boundary, list) and len(boundary) == 2:
        boundary = boundary + ["none"]
    with Progress(progress, n * len(srcs), unit="atom", desc="convert") as bar, \
            H5MDWriter(output, n, labels, boundary=boundary, time_dependent_box=td_box,
                       position_dtype=position_dtype, overwrite=overwrite, inputs=[input_path]) as w:
        _write_frames(w, base, chosen, srcs, boxes, labels, desc, with_ids, bar)
    return Path(output)


def _write_frames(w, base, chosen, srcs, boxes, labels, desc, with_ids, bar) -> None:
    n = srcs[0].n_atoms
    code_of = np.arange(len(labels))
    labels_arr = np.array(labels, dtype=str)
    codes0 = None
    id_sorted = None
    for k, (f, src) in enumerate(zip(chosen, srcs)):
        d = src.describe() if k else desc
        w.add_frame(None, cell=boxes[k], step=d.get("step", f), time=d.get("time", d.get("step", f)))
        if with_ids and k == 0:
            all_ids = [i for _, i in src.iter_chunks_with_ids(_CONVERT_CHUNK)]
            if all_ids and all_ids[0] is not None:
                id_sorted = np.sort(np.concatenate(all_ids))
                if len(np.unique(id_sorted)) != n:
                    raise ModelFileError(f"{base.path}: frame {f} has repeated atom ids")
            del all_ids
        it = src.iter_chunks_with_ids(_CONVERT_CHUNK) if with_ids else ((m, None) for m in src.iter_chunks(_CONVERT_CHUNK))
        start = 0
        occ_default = True
        for chunk, ids in it:
            m = chunk.n_atoms
            if id_sorted is not None:
                if ids is None:
                    raise ModelFileError(f"{base.path}: frame {f} has no atom ids but frame {chosen[0]} has them; "
                                         "give every frame an id column (or none)")
                rows = np.searchsorted(id_sorted, ids)
                rows_c = np.minimum(rows, n - 1)
                bad = id_sorted[rows_c] != ids
                if bad.any():
                    j = int(np.flatnonzero(bad)[0])
                    raise ModelFileError(
                        f"{base.path}: frame {f} has atom id {int(ids[j])}, which frame {chosen[0]} does not have")
                order = np.argsort(rows, kind="stable")
                rows = rows[order]
            else:
                rows = np.arange(start, start + m)
                order = np.arange(m)
            pos = chunk.positions[order]
            sp = np.asarray(chunk.species, dtype=str)[order]
            lab_codes = np.minimum(np.searchsorted(labels_arr, sp), len(labels) - 1)
            unknown = labels_arr[lab_codes] != sp
            if unknown.any():
                j = int(np.flatnonzero(unknown)[0])
                raise ModelFileError(f"{base.path}: frame {f} has species {str(sp[j])!r} (atom {int(rows[j])}), "
                                     f"which frame {chosen[0]} does not have; H5MD stores species once")
            if k == 0:
                if codes0 is None:
                    codes0 = np.zeros(n, dtype=np.int32)
                codes0[rows] = code_of[lab_codes]
            else:
                assert codes0 is not None  # filled by frame 0
                diff = codes0[rows] != lab_codes
                if diff.any():
                    j = int(np.flatnonzero(diff)[0])
                    raise ModelFileError(
                        f"{base.path}: the species of atom {int(rows[j])} is {labels[lab_codes[j]]!r} in frame {f} "
                        f"but {labels[codes0[rows[j]]]!r} in frame {chosen[0]}; H5MD stores species once")
            for a, b, r0 in _runs(rows):
                w.write_positions(pos[a:b], r0)
                if k == 0:
                    w.write_species_codes(lab_codes[a:b], r0)
                    if np.any(chunk.occupancy != 1.0) or not occ_default:
                        occ_default = False
                        w.write_occupancy(chunk.occupancy[order][a:b], r0)
                    if chunk.u_aniso is not None:
                        w.write_u_aniso(chunk.u_aniso[order][a:b], r0)
                    elif np.any(chunk.b_iso != 0.0):
                        w.write_b_iso(chunk.b_iso[order][a:b], r0)
            start += m
            bar.add(m)
        if start != n:
            raise ModelFileError(f"{base.path}: frame {f} yielded {start} atoms, expected {n}")


__all__ = ["convert", "select_frames"]
