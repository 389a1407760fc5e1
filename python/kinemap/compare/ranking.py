"""Several models (or frames, or maps) against one measurement, best first."""

from __future__ import annotations

import math
from collections.abc import Sequence
from pathlib import Path

from ..errors import InvalidInputError
from ..pattern import Pattern
from .core import _compare_one, _is_model, needs_memory
from .maps import MapSource
from .measured import Measured

RANK_BY = ("chi2", "wr_factor", "r_factor", "r_factor_bg")


class Ranking:
    """Figures of several models against one measurement, best first.

    Attributes
    ----------
    rows : list of dict
        name, rank and the figures of each model, sorted by `by` (ascending).
    by : str
        The figure ranked by.
    best : Comparison
        The comparison of the best model.
    comparisons : list of Comparison
        All comparisons in rank order (``keep="all"``), else only the best.
    """

    def __init__(self, rows, by, comparisons):
        self.rows = rows
        self.by = by
        self.comparisons = comparisons
        self.best = comparisons[0]

    @property
    def names(self) -> list[str]:
        return [r["name"] for r in self.rows]

    def __len__(self) -> int:
        return len(self.rows)

    def __str__(self) -> str:
        w = max(8, max(len(r["name"]) for r in self.rows))
        head = f"{'rank':>4}  {'model':<{w}} {'R':>8} {'R_b':>8} {'wR':>8} {'chi2_nu':>10} {'scale':>12} {'points':>10}"
        lines = [head]
        for r in self.rows:
            lines.append(f"{r['rank']:>4}  {r['name']:<{w}} {r['r_factor']:8.4f} {r['r_factor_bg']:8.4f} "
                         f"{r['wr_factor']:8.4f} {r['chi2']:10.4g} {r['scale']:12.5g} {r['n_points']:10d}")
        lines.append(f"(ranked by {self.by}, best first)")
        return "\n".join(lines)


def _name_of(calc, i: int) -> str:
    if isinstance(calc, (str, Path)):
        return Path(calc).name
    if isinstance(calc, Pattern):
        f = calc.metadata.get("file") or (calc.metadata.get("provenance") or {}).get("input_file", "")
        return Path(f).name if f else f"map {i}"
    if isinstance(calc, MapSource):
        return calc.path.name
    d = calc.describe() if _is_model(calc) else {}
    if d.get("file"):
        return f"{Path(d['file']).name}[{d.get('frame', 0)}]"
    return f"model {i}"


def _rank(calcs, meas, *, names, by, mask, symmetry, exclude_bragg, stream, keep, **options) -> Ranking:
    calcs = list(calcs)
    if not calcs:
        raise InvalidInputError("no models to rank: `calcs` is empty")
    if names is None:
        names = [_name_of(c, i) for i, c in enumerate(calcs)]
    names = [str(n) for n in names]
    if len(names) != len(calcs):
        raise InvalidInputError(f"`names` has {len(names)} entries for {len(calcs)} models")
    if keep not in ("best", "all"):
        raise InvalidInputError(f"`keep` must be 'best' or 'all', got {keep!r}")
    m = Measured(meas, mask=mask, exclude_bragg=exclude_bragg, symmetry=symmetry, stream=stream,
                 needs_memory=needs_memory(calcs, symmetry, options.get("resolution")))
    if by is None:
        by = "chi2" if m.weighted else "wr_factor"
    if by not in RANK_BY:
        raise InvalidInputError(f"`by` must be one of {', '.join(RANK_BY)}, got {by!r}")
    if by == "chi2" and not m.weighted:
        raise InvalidInputError("cannot rank by chi2: the measured map has no sigma; use by='wr_factor'")
    entries = []
    best, best_key = None, math.inf
    for i, (name, calc) in enumerate(zip(names, calcs)):
        c = _compare_one(m, calc, **options)
        key = getattr(c, by)
        key = key if math.isfinite(key) else math.inf
        row = {"name": name, **{k: getattr(c, k) for k in ("r_factor", "r_factor_bg", "wr_factor", "chi2", "r_exp",
                                                           "scale", "background", "n_points")}}
        row["model_sampling"] = c.metadata.get("model_sampling", {}).get("mode", "")
        entries.append((key, i, row, c if keep == "all" else None))
        if best is None or key < best_key:
            best, best_key = c, key
    entries.sort(key=lambda e: (e[0], e[1]))
    rows = []
    for rank, (_k, _i, row, _c) in enumerate(entries, start=1):
        row["rank"] = rank
        rows.append(row)
    comps = [e[3] for e in entries] if keep == "all" else [best]
    return Ranking(rows, by, comps)


def rank_models(calcs: Sequence, meas, *, names=None, by: str | None = None, keep: str = "best", mask=None,
                symmetry=None, exclude_bragg=None, stream=None, scale="fit", background="flat", resolution=None,
                resolution_max=None, sampling: str = "auto", probe="xray", method: str = "auto", tol: float = 1e-6,
                threads: int | None = None, chunk_atoms: int | None = None, progress=False,
                **probe_options) -> Ranking:
    """Compare several models (or frames, or maps) with one measurement; best first.

    Parameters
    ----------
    calcs : sequence
        Models, atom sources (e.g. ``[src.at_frame(i) for i in range(src.n_frames)]``),
        Patterns or map files, each as `calc` of :func:`compare`.
    meas
        The measured map (prepared once: masks, Bragg exclusion and symmetry are shared).
    names : sequence of str, optional
        Row names (default: file names and frames, else "model i").
    by : {"chi2", "wr_factor", "r_factor", "r_factor_bg"}, optional
        Figure to rank by, lower is better (default χ²_ν when the measurement has σ, else wR).
    keep : {"best", "all"}
        Keep the full comparison (maps) of the best model only, or of all.
    **options
        As for :func:`compare`.

    Returns
    -------
    Ranking
        ``rows`` (name, rank, figures), ``best`` (Comparison), ``str(ranking)`` a table.

    Raises
    ------
    InvalidInputError
        No models, names that do not match, an unknown figure, chi2 without σ; and what
        :func:`compare` raises.
    """
    scatter_options = dict(probe=probe, method=method, tol=tol, threads=threads, chunk_atoms=chunk_atoms,
                           **probe_options)
    return _rank(calcs, meas, names=names, by=by, mask=mask, symmetry=symmetry, exclude_bragg=exclude_bragg,
                 stream=stream, keep=keep, scale=scale, background=background, resolution=resolution,
                 resolution_max=resolution_max, sampling=sampling, scatter_options=scatter_options,
                 progress=progress)


__all__ = ["rank_models", "Ranking", "RANK_BY"]
