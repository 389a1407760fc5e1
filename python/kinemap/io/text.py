"""Text outputs of simulation codes: extended XYZ and LAMMPS dump files.

Both readers first scan the file once to find where every frame starts (byte offsets, atom
counts, cells); after that a frame's atoms are parsed in bounded blocks of lines, so even a
large text file streams with memory proportional to the block. For repeated work on large
models convert the file to H5MD once (:func:`kinemap.io.convert`): binary hyperslab reads are
far faster than parsing text.

Extended XYZ (one frame)::

    2
    Lattice="5.0 0 0 0 5.0 0 0 0 5.0" Properties=species:S:1:pos:R:3 pbc="T T T" Time=0.5
    Fe 0.0 0.0 0.0
    Ni 2.5 2.5 2.5

``Lattice`` holds the rows a, b, c (Å); ``Properties`` names the columns (``species`` or
``element`` as S, ``pos`` as R:3, optional ``occupancy`` and ``b_iso`` as R:1; other columns
are skipped). Without ``Properties`` the columns are ``species x y z``.

LAMMPS dump (``dump atom``/``custom``): items TIMESTEP, NUMBER OF ATOMS, BOX BOUNDS (with
``xy xz yz`` tilts for triclinic boxes) and ATOMS with columns among ``id``, ``type``,
``element``, ``x y z`` / ``xu yu zu`` (Cartesian) or ``xs ys zs`` / ``xsu ysu zsu`` (scaled).
Species come from ``element`` or from ``type`` with a species map (``{1: "Fe", 2: "Ni"}``).
Lengths are taken as Å (LAMMPS ``units metal`` or ``real``).
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from .._shared.validate import file_name
from ..errors import ModelFileError
from ._base import (
    DEFAULT_READ_ATOMS,
    ChunkModel,
    FileSource,
    cell_from_edges,
    check_chunk,
    check_chunk_atoms,
    check_values,
    normalise_frame,
)
from ._species import SPECIES_HINT, SpeciesTable, parse_species_map

# Lines parsed per block when a chunk is read.
_BLOCK_LINES = 1 << 18


@dataclass
class _Frame:
    offset: int  # byte offset of the first atom line
    line: int  # 1-based line number of the first atom line
    n_atoms: int
    ncols: int
    pos_cols: tuple
    scaled: bool = False
    species_col: int | None = None
    species_codes: bool = False  # integer types that need a map
    occ_col: int | None = None
    b_col: int | None = None
    id_col: int | None = None
    cell: np.ndarray | None = None
    origin: np.ndarray = field(default_factory=lambda: np.zeros(3))
    pbc: list | None = None
    step: int | None = None
    time: float | None = None


_KV = re.compile(r'(\w+)\s*=\s*("([^"]*)"|\'([^\']*)\'|\{([^}]*)\}|(\S+))')


def _parse_comment(text: str) -> dict:
    out = {}
    for m in _KV.finditer(text):
        key = m.group(1)
        val = next(g for g in (m.group(3), m.group(4), m.group(5), m.group(6)) if g is not None)
        out[key] = val
    return out


class _TextIndex:
    """Frame offsets and column layout of a text trajectory (one scan of the file)."""

    fmt = "?"

    def __init__(self, path, species_map):
        self.path = Path(file_name(path, "path"))
        if not self.path.exists():
            raise FileNotFoundError(f"no such file: {str(self.path)!r}")
        if self.path.is_dir():
            raise IsADirectoryError(f"{str(self.path)!r} is a folder, not a model file")
        self.table = None
        user = parse_species_map(species_map)
        if user:
            self.table = SpeciesTable(list(user), list(user.values()), f"{self.path}: species map")
        self.frames: list[_Frame] = []
        try:
            with open(self.path, "rb") as fh:
                self._scan(fh)
        except UnicodeDecodeError as exc:
            raise ModelFileError(f"{self.path}: not a text file ({exc})") from None
        if not self.frames:
            raise ModelFileError(f"{self.path}: no frames found in this {self.fmt} file")

    def _scan(self, fh) -> None:
        """Index the frames of the open file `fh` into ``self.frames`` (one per format)."""
        raise NotImplementedError

    def _err(self, line: int, msg: str) -> ModelFileError:
        return ModelFileError(f"{self.path}, line {line}: {msg}")

    def _skip(self, fh, n: int, line: int, what: str) -> None:
        for i in range(n):
            if not fh.readline():
                raise self._err(line + i, f"the file ends inside {what} ({i} of {n} atom lines present): "
                                          "truncated file?")


class _XYZIndex(_TextIndex):
    fmt = "extended XYZ"

    def _scan(self, fh):
        line = 1
        while True:
            head = fh.readline()
            if not head:
                break
            if not head.strip():
                line += 1
                continue  # blank lines between frames
            try:
                n = int(head.split()[0])
            except ValueError:
                got = head[:60].decode(errors="replace")
                raise self._err(line, f"expected the atom count of frame {len(self.frames)}, got {got!r}") from None
            if n < 0:
                raise self._err(line, f"negative atom count {n}")
            comment = fh.readline()
            if not comment and n:
                raise self._err(line + 1, "the file ends after the atom count: truncated file?")
            info = _parse_comment(comment.decode("utf-8", "replace"))
            fr = self._layout(info, line + 1)
            fr.n_atoms = n
            fr.offset = fh.tell()
            fr.line = line + 2
            self.frames.append(fr)
            self._skip(fh, n, fr.line, f"frame {len(self.frames) - 1}")
            line += 2 + n

    def _layout(self, info: dict, line: int) -> _Frame:
        props = info.get("Properties", info.get("properties", "species:S:1:pos:R:3"))
        parts = props.split(":")
        if len(parts) % 3:
            raise self._err(line, f"Properties={props!r} must be name:type:count triples")
        col = 0
        cols = {}
        for i in range(0, len(parts), 3):
            name, typ, cnt = parts[i].lower(), parts[i + 1].upper(), parts[i + 2]
            try:
                cnt = int(cnt)
            except ValueError:
                raise self._err(line, f"Properties={props!r}: column count {cnt!r} is not a number") from None
            cols[name] = (col, typ, cnt)
            col += cnt
        fr = _Frame(offset=0, line=0, n_atoms=0, ncols=col, pos_cols=())
        if "pos" not in cols or cols["pos"][2] != 3:
            raise self._err(line, f"Properties={props!r} has no 'pos:R:3' column")
        fr.pos_cols = tuple(range(cols["pos"][0], cols["pos"][0] + 3))
        for name in ("species", "element", "symbols"):
            if name in cols:
                fr.species_col = cols[name][0]
                fr.species_codes = cols[name][1] == "I"
                break
        else:
            if "z" in cols:
                fr.species_col, fr.species_codes = cols["z"][0], True
            else:
                raise self._err(line, f"Properties={props!r} has no 'species:S:1' column")
        for name, attr in (("occupancy", "occ_col"), ("occ", "occ_col"), ("b_iso", "b_col")):
            if name in cols:
                setattr(fr, attr, cols[name][0])
        lat = info.get("Lattice", info.get("lattice"))
        if lat is not None:
            try:
                vals = np.array(lat.replace(",", " ").split(), dtype=np.float64)
            except ValueError:
                raise self._err(line, f"Lattice={lat!r} must be 9 numbers") from None
            if vals.size != 9:
                raise self._err(line, f"Lattice={lat!r} must be 9 numbers (rows a, b, c), got {vals.size}")
            fr.cell = cell_from_edges(vals.reshape(3, 3), f"{self.path}, line {line}: Lattice")
        pbc = info.get("pbc")
        if pbc is not None:
            fr.pbc = ["periodic" if t.upper() in ("T", "TRUE", "1") else "none" for t in pbc.split()]
        for key in ("Time", "time"):
            if key in info:
                try:
                    fr.time = float(info[key])
                except ValueError:
                    pass
        for key in ("Step", "step", "timestep", "Timestep"):
            if key in info:
                try:
                    fr.step = int(float(info[key]))
                except ValueError:
                    pass
        return fr


class _DumpIndex(_TextIndex):
    fmt = "LAMMPS dump"

    def _scan(self, fh):
        line = 0
        step = None
        n = None
        cell = origin = pbc = None

        def next_line():
            nonlocal line
            raw = fh.readline()
            line += 1
            return raw

        while True:
            raw = next_line()
            if not raw:
                break
            s = raw.strip()
            if not s:
                continue
            if not s.startswith(b"ITEM:"):
                raise self._err(line, f"expected an 'ITEM:' line, got {s[:60].decode(errors='replace')!r}")
            item = s[5:].strip().decode("utf-8", "replace")
            if item.startswith("TIMESTEP"):
                v = next_line()
                try:
                    step = int(v.split()[0])
                except (ValueError, IndexError):
                    raise self._err(line, f"TIMESTEP value {v[:40]!r} is not a whole number") from None
            elif item.startswith("NUMBER OF ATOMS"):
                v = next_line()
                try:
                    n = int(v.split()[0])
                except (ValueError, IndexError):
                    raise self._err(line, f"NUMBER OF ATOMS value {v[:40]!r} is not a whole number") from None
                if n < 0:
                    raise self._err(line, f"NUMBER OF ATOMS is {n}; an atom count cannot be negative")
            elif item.startswith("BOX BOUNDS"):
                words = item.split()[2:]
                tilt = words[:3] == ["xy", "xz", "yz"]
                flags = words[3:] if tilt else words
                pbc = ["periodic" if w == "pp" else "none" for w in flags] if len(flags) == 3 else None
                rows = []
                lines = []
                for _ in range(3):
                    v = next_line()
                    try:
                        rows.append([float(x) for x in v.split()])
                    except ValueError:
                        raise self._err(line, f"BOX BOUNDS line {v[:60]!r} must hold numbers") from None
                    lines.append(line)
                cell, origin = self._box(rows, tilt, lines)
            elif item.startswith("ATOMS"):
                if n is None:
                    raise self._err(line, "ITEM: ATOMS before ITEM: NUMBER OF ATOMS")
                fr = self._layout(item.split()[1:], line)
                fr.n_atoms, fr.offset, fr.line = n, fh.tell(), line + 1
                fr.cell, fr.origin, fr.pbc, fr.step = cell, (np.zeros(3) if origin is None else origin), pbc, step
                if fr.scaled and cell is None:
                    raise self._err(line, "scaled coordinates need ITEM: BOX BOUNDS before ITEM: ATOMS")
                self.frames.append(fr)
                self._skip(fh, n, line + 1, f"frame {len(self.frames) - 1} (timestep {step})")
                line += n
            else:
                continue  # unknown items (e.g. UNITS, TIME) are skipped

    def _box(self, rows, tilt, lines):
        need = 3 if tilt else 2
        for r, ln in zip(rows, lines):
            if len(r) < need:
                raise self._err(ln, "BOX BOUNDS needs 3 lines of 'lo hi' (and a tilt for triclinic boxes)")
            if not all(np.isfinite(r[:need])):
                raise self._err(ln, f"BOX BOUNDS line has non-finite values {r[:need]}")
        if tilt:
            (xlb, xhb, xy), (ylb, yhb, xz), (zlo, zhi, yz) = [r[:3] for r in rows]
            # LAMMPS writes the bounding box of the tilted cell; recover lo/hi.
            xlo = xlb - min(0.0, xy, xz, xy + xz)
            xhi = xhb - max(0.0, xy, xz, xy + xz)
            ylo = ylb - min(0.0, yz)
            yhi = yhb - max(0.0, yz)
        else:
            (xlo, xhi), (ylo, yhi), (zlo, zhi) = [r[:2] for r in rows]
        for axis, lo, hi, ln in (("x", xlo, xhi, lines[0]), ("y", ylo, yhi, lines[1]), ("z", zlo, zhi, lines[2])):
            if not hi > lo:
                raise self._err(ln, f"BOX BOUNDS: {axis}hi = {hi!r} is not above {axis}lo = {lo!r}"
                                + (" (after removing the tilts from the bounding box)" if tilt else ""))
        if tilt:
            cell = np.array([[xhi - xlo, 0, 0], [xy, yhi - ylo, 0], [xz, yz, zhi - zlo]], dtype=np.float64)
        else:
            cell = np.diag([xhi - xlo, yhi - ylo, zhi - zlo]).astype(np.float64)
        origin = np.array([xlo, ylo, zlo])
        return cell_from_edges(cell, f"{self.path}, line {lines[-1]}: BOX BOUNDS"), origin

    def _layout(self, names, line) -> _Frame:
        pos = {nm: i for i, nm in enumerate(names)}
        fr = _Frame(offset=0, line=0, n_atoms=0, ncols=len(names), pos_cols=())
        for trio, scaled in ((("x", "y", "z"), False), (("xu", "yu", "zu"), False),
                             (("xs", "ys", "zs"), True), (("xsu", "ysu", "zsu"), True)):
            if all(t in pos for t in trio):
                fr.pos_cols = tuple(pos[t] for t in trio)
                fr.scaled = scaled
                break
        else:
            raise self._err(line, "ITEM: ATOMS has no position columns (x y z, xu yu zu, xs ys zs or xsu ysu zsu); "
                                  f"it has {names}")
        if "element" in pos:
            fr.species_col = pos["element"]
        elif "type" in pos:
            fr.species_col, fr.species_codes = pos["type"], True
        else:
            raise self._err(line, f"ITEM: ATOMS has neither 'element' nor 'type' columns; it has {names}")
        fr.id_col = pos.get("id")
        return fr


class TextSource(FileSource):
    """One frame of an extended-XYZ or LAMMPS-dump file, parsed in blocks of lines."""

    def __init__(self, index: _TextIndex, frame=None):
        self._ix = index
        self.format = "extxyz" if isinstance(index, _XYZIndex) else "lammps-dump"
        self.path = index.path
        self.n_frames = len(index.frames)
        self.frame = normalise_frame(frame, self.n_frames, str(self.path))
        self._fr = index.frames[self.frame]
        self.n_atoms = self._fr.n_atoms
        self.box = self._fr.cell
        self._label_cache = None

    def _at_frame(self, frame: int) -> TextSource:
        return TextSource(self._ix, frame)

    def _blocks(self, chunk_atoms, stop: int | None = None):
        fr = self._fr
        end = fr.n_atoms if stop is None else min(stop, fr.n_atoms)
        with open(self.path, "rb") as fh:
            fh.seek(fr.offset)
            done = 0
            while done < end:
                n = min(chunk_atoms, end - done)
                lines = [fh.readline() for _ in range(n)]
                if not lines[-1]:
                    raise ModelFileError(f"{self.path}: the file changed or ends early in frame {self.frame} "
                                         f"(line {fr.line + done}): truncated file?")
                yield done, self._tokens(lines, fr.line + done)
                done += n

    def _tokens(self, lines, first_line) -> np.ndarray:
        ncols = self._fr.ncols
        toks = b" ".join(lines).split()
        if len(toks) != len(lines) * ncols:
            for i, ln in enumerate(lines):
                if len(ln.split()) != ncols:
                    raise ModelFileError(f"{self.path}, line {first_line + i}: expected {ncols} columns, got "
                                         f"{len(ln.split())}: {ln[:80].decode(errors='replace').rstrip()!r}")
        return np.array(toks).reshape(len(lines), ncols)

    def _numbers(self, tok: np.ndarray, cols, first_line, what) -> np.ndarray:
        try:
            return tok[:, list(cols)].astype(np.float64)
        except ValueError:
            for i, row in enumerate(tok[:, list(cols)]):
                try:
                    row.astype(np.float64)
                except ValueError:
                    shown = [x.decode(errors="replace") for x in row]
                    raise ModelFileError(f"{self.path}, line {first_line + i}: {what} {shown} are not numbers") from None
            raise

    def _missing_species(self) -> str | None:
        if self._fr.species_codes and self._ix.table is None:
            return (f"{self.path}: species are integer types without names; give a species map such as "
                    "{1: 'Fe', 2: 'Ni'} (command line: --species-map 1=Fe,2=Ni), or " + SPECIES_HINT)
        return None

    def _declared_labels(self) -> list[str] | None:
        if self._fr.species_codes and self._ix.table is not None:
            return list(self._ix.table.distinct)
        return None

    def _species(self, tok, done):
        fr = self._fr
        col = tok[:, fr.species_col]
        if fr.species_codes:
            miss = self._missing_species()
            if miss:
                raise ModelFileError(miss)
            table = self._ix.table
            assert table is not None  # (else `miss`)
            try:
                codes = col.astype(np.int64)
            except ValueError:
                raise ModelFileError(f"{self.path}, frame {self.frame}: species types near line {fr.line + done} "
                                     "are not whole numbers") from None
            return table.label_index(codes, done, self.frame), table.distinct
        uniq, inv = np.unique(col, return_inverse=True)
        return inv.reshape(-1), [u.decode("utf-8", "replace") for u in uniq]

    def _scan_labels(self) -> list[str]:
        return self._labels_in_first(self.n_atoms)

    def _labels_in_first(self, n: int) -> list[str]:
        present: set[str] = set()
        for done, tok in self._blocks(min(_BLOCK_LINES, max(n, 1)), stop=n):
            idx, labels = self._species(tok, done)
            present.update(lab for lab, c in zip(labels, np.bincount(idx, minlength=len(labels))) if c)
        return sorted(present)

    def iter_chunks(self, chunk_atoms: int = DEFAULT_READ_ATOMS):
        chunk_atoms = check_chunk_atoms(chunk_atoms)
        yield from (m for m, _ids in self._iter(chunk_atoms))

    def iter_chunks_with_ids(self, chunk_atoms: int = DEFAULT_READ_ATOMS):
        """Like :meth:`iter_chunks`, also yielding the atom ids (None without an id column)."""
        chunk_atoms = check_chunk_atoms(chunk_atoms)
        yield from self._iter(chunk_atoms)

    def _iter(self, chunk_atoms):
        fr = self._fr
        where = f"{self.path} (frame {self.frame}, lines {fr.line}..)"
        for done, tok in self._blocks(min(chunk_atoms, _BLOCK_LINES) if chunk_atoms > _BLOCK_LINES else chunk_atoms):
            line = fr.line + done
            p = self._numbers(tok, fr.pos_cols, line, "coordinates")
            check_chunk(p, done, where, None)
            if fr.scaled:
                with np.errstate(over="ignore", invalid="ignore"):  # overflow to inf is caught next
                    p = p @ fr.cell + fr.origin
                check_chunk(p, done, where, None)
            idx, labels = self._chunk_labels(done, done + len(tok), None, lambda: self._species(tok, done))
            occ = b = ids = None
            if fr.occ_col is not None:
                occ = self._numbers(tok, [fr.occ_col], line, "occupancy")[:, 0]
                check_values(occ, "occupancy", 0.0, 1.0, done, where)
            if fr.b_col is not None:
                b = self._numbers(tok, [fr.b_col], line, "b_iso")[:, 0]
                check_values(b, "b_iso", 0.0, None, done, where)
            if fr.id_col is not None:
                try:
                    ids = tok[:, fr.id_col].astype(np.int64)
                except ValueError:
                    raise ModelFileError(f"{self.path}: atom ids near line {line} are not whole numbers") from None
            yield ChunkModel.build(p, idx, labels, occ, b, self.cell, self.box), ids

    def _extra_description(self) -> dict:
        fr = self._fr
        d: dict[str, Any] = {"boundary": fr.pbc, "first_line": fr.line}
        if fr.step is not None:
            d["step"] = fr.step
        if fr.time is not None:
            d["time"] = fr.time
        return d


def open_extxyz(path, frame=None, species_map=None, *, species=None, cell=None, supercell=None) -> TextSource:
    """Open one frame of an (extended) XYZ file as an atom source (see the module notes).

    `species`, `cell` and `supercell` are as for :func:`kinemap.open_model`.

    Raises
    ------
    FileNotFoundError, ModelFileError
        Missing file; malformed header, truncated frame or bad numbers (naming the line).
    """
    from ._options import configure

    return configure(TextSource(_XYZIndex(path, species_map), frame), species=species, cell=cell,
                     supercell=supercell, species_map=species_map)


def open_lammps_dump(path, frame=None, species_map=None, *, species=None, cell=None, supercell=None) -> TextSource:
    """Open one frame of a LAMMPS dump file as an atom source (see the module notes).

    `species`, `cell` and `supercell` are as for :func:`kinemap.open_model`.

    Raises
    ------
    FileNotFoundError, ModelFileError
        Missing file; missing items or columns, a negative atom count, box bounds with
        hi <= lo, truncated frame or bad numbers (naming the line); integer types without a
        species map are reported when atoms are read.
    """
    from ._options import configure

    return configure(TextSource(_DumpIndex(path, species_map), frame), species=species, cell=cell,
                     supercell=supercell, species_map=species_map)


__all__ = ["TextSource", "open_extxyz", "open_lammps_dump"]
