"""Powder patterns by the Debye scattering equation, from binned pair histograms.

    I(Q) = Σ_i o_i |f_i|²  +  Σ_{i≠j} o_i o_j f_i f_j* T_i T_j sin(Q r_ij)/(Q r_ij)

The pair sum is evaluated as Σ_{g≤h} 2 Re(f_g f_h*) T_g T_h Σ_k H_gh[k] sin(Q r_k)/(Q r_k)
over the group-pair histograms H_gh (two-node binning on nodes r_k = k·dr, see
:mod:`kinemap.powder._pairs`); the last sum runs in the Rust core (``_core.debye_sums``).
"""

from __future__ import annotations

import datetime as _dt
import math
import warnings

import numpy as np

from .. import _core
from .._shared.validate import real_number
from ..errors import InvalidInputError
from ..probes import get_probe
from ..scatter import KinematicApproximationWarning
from . import _pairs
from ._results import PowderPattern

#: Default bound on the per-pair binning error (Q_max·dr)²/24 that sets dr.
DEFAULT_BIN_TOL = 1e-4
#: Widest node spacing used whatever the Q range (Å).
MAX_DR = 0.05
WINDOWS = ("lorch", "none")


class PowderCautionWarning(UserWarning):
    """A powder pattern or pair distribution function is not meaningful somewhere."""


def as_q(q, name: str = "q") -> np.ndarray:
    """Validate |Q| values: a 1-D array of finite numbers >= 0 (Å⁻¹)."""
    try:
        a = np.asarray(q, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise InvalidInputError(f"`{name}` must be a 1-D array of |Q| values (1/angstrom): {exc}") from None
    if a.ndim != 1 or a.size == 0:
        raise InvalidInputError(f"`{name}` must be a non-empty 1-D array of |Q| values, got shape {a.shape}")
    bad = ~np.isfinite(a) | (a < 0)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise InvalidInputError(f"`{name}`[{i}] = {a[i]!r}: |Q| must be finite and >= 0 (1/angstrom)")
    return np.ascontiguousarray(a)


def choose_dr(q_max: float, bin_tol: float, dr=None) -> float:
    """Node spacing: `dr` when given, else sqrt(24·bin_tol)/Q_max (at most MAX_DR), so that
    the per-pair binning error (Q dr)²/24 stays below `bin_tol` up to Q_max."""
    if dr is not None:
        return real_number(dr, "dr", minimum=0.0, exclusive_minimum=True)
    bin_tol = real_number(bin_tol, "bin_tol", minimum=0.0, exclusive_minimum=True, maximum=0.1)
    if q_max <= 0:
        return MAX_DR
    return min(MAX_DR, math.sqrt(24.0 * bin_tol) / q_max)


def _window(data, window: str) -> np.ndarray:
    r = data.nodes
    if window == "none" or not data.periodic:
        return np.ones_like(r)
    x = np.pi * r / data.cutoff
    return np.sinc(x / np.pi)  # sin(x)/x


def group_factors(data, probe, q: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """f_g(Q) (complex, (G, M)) and T_g(Q) = exp(−B_g s²) ((G, M)) of every group."""
    s = q / (4.0 * np.pi)
    labels = sorted(set(data.groups.labels))
    f = probe.scattering_factors(labels, s)
    row = {lab: i for i, lab in enumerate(labels)}
    fg = np.stack([f[row[lab]] for lab in data.groups.labels])
    tg = np.exp(-np.outer(data.groups.b_iso, s * s))
    return fg, tg


def coherent_parts(data, probe, q: np.ndarray, *, window: str, threads) -> dict:
    """Self and distinct terms (per frame) and the averages ⟨|f|²⟩, ⟨f⟩ at each Q."""
    fg, tg = group_factors(data, probe, q)
    nf = data.n_frames
    occ = data.group_occupancy / nf
    self_term = (occ[:, None] * (fg.real**2 + fg.imag**2)).sum(axis=0)
    pairs = data.groups.pairs()
    gi = np.array([p[0] for p in pairs])
    hi = np.array([p[1] for p in pairs])
    ft = fg * tg
    w = 2.0 * (ft[gi] * np.conj(ft[hi])).real  # (P, M)
    d = data.hist if data.uniform is None else data.hist - data.uniform
    d = np.ascontiguousarray(d * _window(data, window)[None, :] / nf)
    sums = _core.debye_sums(d, data.dr, q, threads=threads)
    distinct = (w * sums).sum(axis=0)
    bound = None
    if not data.periodic:
        per_pair = (q * data.dr) ** 2 / 24.0
        bound = per_pair * (np.abs(w) * (data.hist.sum(axis=1) / nf)[:, None]).sum(axis=0)
    return {"self": self_term, "distinct": distinct, "bound": bound} | averages(data, probe, q, fg)


def averages(data, probe, q: np.ndarray, fg: np.ndarray | None = None) -> dict:
    """N = Σ o_i (per frame), ⟨|f|²⟩ and |⟨f⟩|² (occupancy-weighted, no Debye–Waller)."""
    if fg is None:
        fg, _ = group_factors(data, probe, q)
    n_scat = data.occupancy_sum / data.n_frames
    c = data.group_occupancy / data.n_frames / n_scat
    f_sq = (c[:, None] * (fg.real**2 + fg.imag**2)).sum(axis=0)
    f_mean = (c[:, None] * fg).sum(axis=0)
    return {"n": n_scat, "f_sq": f_sq, "f_mean_sq": np.abs(f_mean) ** 2}


def normalise(intensity, parts, q):
    """S(Q) = 1 + [I/N − ⟨|f|²⟩]/|⟨f⟩|² and F(Q) = Q[S − 1]; None when ⟨f⟩ vanishes."""
    fm2 = parts["f_mean_sq"]
    if np.any(fm2 <= 1e-12 * np.maximum(parts["f_sq"], 1e-300)):
        return None, None
    s = 1.0 + (intensity / parts["n"] - parts["f_sq"]) / fm2
    return s, q * (s - 1.0)


def _resolution_grid(q: np.ndarray, fwhm: float) -> tuple[np.ndarray, np.ndarray]:
    """Auxiliary |Q| grid and the Gaussian weight matrix mapping it onto `q`."""
    sigma = fwhm / (2.0 * math.sqrt(2.0 * math.log(2.0)))
    step = sigma / 6.0
    lo, hi = float(q.min()) - 6.0 * sigma, float(q.max()) + 6.0 * sigma
    n = math.ceil((hi - lo) / step) + 1
    if n > 200_000:
        raise InvalidInputError(
            f"`resolution` = {fwhm:g} 1/angstrom is too fine for the Q range {q.min():g}..{q.max():g} "
            f"({n} auxiliary points); widen it or narrow the range"
        )
    aux = np.linspace(lo, hi, n)
    kern = np.exp(-0.5 * ((q[:, None] - aux[None, :]) / sigma) ** 2)
    kern /= kern.sum(axis=1, keepdims=True)
    return aux, kern


def incoherent_term(data, probe, q: np.ndarray) -> tuple[np.ndarray, str]:
    """Neutron incoherent (Σ o σ_inc/4π, fm²) or X-ray Compton (Σ o S_inc(s), electrons²).

    X-ray: S_inc(s) = Z_e − f0(s)²/Z_e (Z_e electrons of the atom or ion, f0 of
    Waasmaier & Kirfel), the Waller–Hartree incoherent function when all electrons share one
    orbital density and exchange is neglected; exact for hydrogen's one electron. No
    Breit–Dirac recoil factor, polarisation or absorption is applied.
    """
    from ..probes._species import resolve

    nf = data.n_frames
    occ = data.group_occupancy / nf
    out = np.zeros(len(q))
    s = q / (4.0 * np.pi)
    if probe.name == "neutron":
        import periodictable

        for lab, o in zip(data.groups.labels, occ):
            sp = resolve(lab, probe.aliases)
            el = periodictable.elements[sp.z]
            atom = el if sp.mass_number is None else el[sp.mass_number]
            sig = getattr(getattr(atom, "neutron", None), "incoherent", None)
            if sig is None or not np.isfinite(sig):
                raise InvalidInputError(
                    f"species {lab!r}: the neutron table (periodictable) has no incoherent cross "
                    "section; leave out `incoherent=True`"
                )
            out += o * float(sig) * 100.0 / (4.0 * np.pi)  # barn = 100 fm²
        return out, ("neutron incoherent: sum_i o_i sigma_inc,i / (4 pi), sigma_inc from periodictable "
                     "(Sears 1992 compilation); isotropic, no inelasticity correction")
    if probe.name == "xray":
        from ..probes.xray import wk_f0

        for lab, o in zip(data.groups.labels, occ):
            sp = probe._resolve_checked(lab)
            ze = float(sp.z - sp.charge)
            if ze <= 0:
                raise InvalidInputError(f"species {lab!r} has no electrons; no Compton scattering")
            f0 = wk_f0(probe.table_symbol(sp), s)
            out += o * (ze - f0 * f0 / ze)
        return out, ("X-ray Compton: sum_i o_i [Z_e - f0(s)^2/Z_e], the Waller-Hartree (1929) incoherent "
                     "function with one shared orbital density and no exchange term; no Breit-Dirac "
                     "recoil factor, polarisation or absorption")
    raise InvalidInputError(
        f"`incoherent=True` is available for the 'xray' (Compton) and 'neutron' probes, not {probe.name!r}"
    )


def powder(model_or_source, q, *, probe="xray", box="model", r_max: float | None = None,
           dr: float | None = None, bin_tol: float = DEFAULT_BIN_TOL, window: str = "lorch",
           resolution: float | None = None, incoherent: bool = False, frames=None,
           threads: int | None = None, chunk_atoms: int = _pairs.DEFAULT_CHUNK_ATOMS,
           progress=False, **probe_options) -> PowderPattern:
    """Powder pattern I(Q) of a model by the Debye scattering equation.

    Parameters
    ----------
    model_or_source : Model, atom source, or list of them
        The atoms: a :class:`kinemap.Model`, a source from :func:`kinemap.open_model`, or a
        list of models/sources whose patterns are averaged (frames).
    q : array_like (M,)
        |Q| values in Å⁻¹ (≥ 0), |Q| = 4π sinθ/λ.
    probe : str or Probe
        "xray" (electrons), "neutron" (fm), "electron" (Å), "unit" or a probe object; extra
        keyword arguments go to the probe.
    box : "model", None or array (3, 3)
        Periodic box (rows a, b, c, Å): "model" takes the model's box (its cell; an H5MD file
        whose boundary is not periodic gives none); None treats the model as a particle.
    r_max : float, optional
        Largest pair distance (Å). Periodic boxes: at most (and by default) half the smallest
        face-to-face width of the box. Particles: default all pairs; a value truncates the
        sum (a caution is issued).
    dr : float, optional
        Node spacing of the pair histograms (Å); default from `bin_tol`.
    bin_tol : float
        Bound on the per-pair binning error (Q_max dr)²/24 (default 1e-4), which sets
        dr = sqrt(24·bin_tol)/Q_max (at most 0.05 Å).
    window : {"lorch", "none"}
        Periodic boxes: window W(r) = sin(πr/r_max)/(πr/r_max) on ρ₀[g(r) − 1] (or none).
    resolution : float, optional
        FWHM (Å⁻¹) of a Gaussian instrumental resolution in Q, constant over Q.
    incoherent : bool
        Also compute the neutron incoherent or X-ray Compton intensity (``pattern.incoherent``;
        ``pattern.total`` adds it).
    frames : selection, optional
        Frames of a trajectory source to average ("all", "0:50:5", [0, 3], ...), or items of
        a list.
    threads : int, optional
        Worker threads (default ``KINEMAP_NUM_THREADS`` or all cores); results do not depend
        on it.
    chunk_atoms : int
        Atoms per streamed chunk (memory); results do not depend on it.
    progress : bool or callable
        True: a progress bar over chunk pairs; a callable receives (done, total).

    Returns
    -------
    PowderPattern
        A :class:`kinemap.Pattern` on the |Q| axis with ``intensity`` (total coherent I(Q) of
        the model, not per atom, in probe units²), ``self_scattering``, ``distinct``,
        ``structure_factor`` S(Q), ``reduced`` F(Q), ``incoherent``, ``error_bound`` and
        ``metadata``.

    Raises
    ------
    InvalidInputError
        Bad arguments, unknown species, an r_max beyond half the box, histograms too large for
        memory (with the estimate).

    Notes
    -----
    I(Q) = Σ_i o_i|f_i|² + Σ_{i≠j} o_i o_j f_i f_j* T_i T_j sin(Q r_ij)/(Q r_ij), with
    T = exp(−B s²), s = Q/4π. The self term has no Debye–Waller factor (the atoms' own thermal
    motion scatters elastically-plus-diffusely into all directions), the pair terms have
    T_iT_j. The orientation average of |A(q)|² of the 3-D engine has the self term
    Σ o_i²|f_i|²T_i² instead, so the two differ by Σ_i |f_i|²(o_i − o_i²T_i²) (Σ|f|²(1 − T²)
    for full occupancy). I(Q) includes the powder Lorentz factor (it is the average over the
    sphere |q| = Q, not an integrated ring intensity).

    Pairs are binned on nodes k·dr with linear two-node binning: the per-pair error of
    sin(Qr)/(Qr) is at most (Q·dr)²/24 (nearest-node binning would give 0.22·Q·dr);
    ``error_bound`` holds (Q dr)²/24 Σ_pairs |o_i o_j f_i f_j T_i T_j| for particles.

    Periodic boxes: the pair sum runs over minimum images within r_max and uses
    ρ₀[g(r) − 1], i.e. the binned weight of a uniform density O_gO_h/V is subtracted for
    every group pair (a plain truncation would add 4πρ₀[sin x − x cos x]/Q³, x = Q·r_max),
    times the window. Features narrower than about 2π/r_max in Q are smoothed, and values
    below Q ≈ 2π/r_max are not meaningful (a caution is issued).

    S(Q) = 1 + [I/N − ⟨|f|²⟩]/|⟨f⟩|² with N = Σ o_i, ⟨|f|²⟩ = Σ o_i|f_i|²/N and
    ⟨f⟩ = Σ o_i f_i/N (no Debye–Waller factor in the normalisation); F(Q) = Q[S(Q) − 1].

    Streaming and memory: atoms are read in chunks of `chunk_atoms`; two chunks are held at a
    time (about 100 bytes per atom each, with the core's cell lists), plus one histogram per
    worker thread (group pairs × nodes × 16 bytes). A frame of N atoms in n = ⌈N/chunk_atoms⌉
    chunks costs n(n + 1)/2 + n chunk reads (one pass to learn the groups and bounding boxes,
    then each chunk paired with every later one); a model that fits in one chunk is read twice.

    Examples
    --------
    >>> import numpy as np, kinemap as km
    >>> m = km.Model([[0, 0, 0], [1.5, 0, 0]], "C")
    >>> p = km.powder(m, [0.0, 2.0], probe="unit")
    >>> np.round(p.intensity, 3)           # 2 + 2·sin(Qr)/(Qr), r = 1.5 Å
    array([4.   , 2.094])
    """
    qv = as_q(q)
    if window not in WINDOWS:
        raise InvalidInputError(f"`window` must be one of {WINDOWS}, got {window!r}")
    probe = get_probe(probe, **probe_options)
    frame_ids, sources = _pairs.frame_sources(model_or_source, frames)
    labels = sorted({lab for s in sources for lab in s.species_labels()})
    probe.check_labels(labels)
    if resolution is not None:
        resolution = real_number(resolution, "resolution", minimum=0.0, exclusive_minimum=True)
        aux, kern = _resolution_grid(qv, resolution)
        q_eval = np.abs(aux)
    else:
        aux, kern, q_eval = None, None, qv
    if r_max is not None:
        r_max = real_number(r_max, "r_max", minimum=0.0, exclusive_minimum=True)
    step = choose_dr(float(q_eval.max()), bin_tol, dr)
    data = _pairs.collect(sources, frame_ids, box=box, r_max=r_max, dr=step, threads=threads,
                          chunk_atoms=chunk_atoms, progress=progress)
    parts = coherent_parts(data, probe, q_eval, window=window, threads=threads)
    inten = parts["self"] + parts["distinct"]
    bound = parts["bound"]
    inc, inc_note = (incoherent_term(data, probe, q_eval) if incoherent else (None, None))
    if kern is not None:
        inten = kern @ inten
        bound = None if bound is None else kern @ bound
        inc = None if inc is None else kern @ inc
        parts = averages(data, probe, qv) | {"self": kern @ parts["self"],
                                             "distinct": kern @ parts["distinct"]}
    if not np.all(np.isfinite(inten)):
        raise InvalidInputError("the computed powder pattern has non-finite values; check the probe tables and inputs")
    s_q, f_q = normalise(inten, parts, qv)

    cautions = list(probe.cautions())
    for text in cautions:
        warnings.warn(text, KinematicApproximationWarning, stacklevel=2)
    own = _cautions(data, qv, r_max, s_q)
    for text in own:
        warnings.warn(text, PowderCautionWarning, stacklevel=2)
    meta = _metadata(data, probe, window, bin_tol, dr, resolution, inc_note, qv)
    meta["cautions"] = cautions + own
    return PowderPattern(qv, inten, self_scattering=parts["self"], distinct=parts["distinct"],
                         structure_factor=s_q, reduced=f_q, incoherent=inc, error_bound=bound,
                         metadata=meta, units=probe.units)


def _cautions(data, q, r_max, s_q) -> list[str]:
    out = []
    if data.periodic:
        q_min = 2.0 * np.pi / data.cutoff
        if np.any(q < q_min):
            out.append(
                f"periodic box: pairs are summed up to r_max = {data.cutoff:.4g} angstrom, so the pattern "
                f"below Q = 2 pi/r_max = {q_min:.4g} 1/angstrom is not meaningful (and features narrower "
                "than about that are smoothed by the window)"
            )
    elif r_max is not None:
        out.append(
            f"particle: pairs farther apart than r_max = {r_max:g} angstrom were left out, so this is a "
            "truncated Debye sum, not the particle's pattern"
        )
    if data.aniso:
        out.append("anisotropic displacements were replaced by their isotropic equivalent B = 8 pi^2 tr(U)/3")
    if s_q is None:
        out.append("the average scattering factor <f> is zero (a null alloy): S(Q) and F(Q) in the "
                   "Faber-Ziman normalisation are undefined and were not computed")
    return out


def _metadata(data, probe, window, bin_tol, dr, resolution, inc_note, q) -> dict:
    q_max = float(q.max())
    return {
        "method": "debye",
        "intensity": ("Debye equation: I(Q) = sum_i o_i |f_i|^2 + sum_{i!=j} o_i o_j f_i f_j* T_i T_j "
                      "sin(Q r_ij)/(Q r_ij); total for the model, not per atom. The orientation average "
                      "of |A|^2 of the 3-D map differs by sum_i |f_i|^2 (o_i - o_i^2 T_i^2)"),
        "normalisation": ("S(Q) = 1 + [I/N - <|f|^2>]/|<f>|^2, N = sum o_i, <|f|^2> = sum o_i |f_i|^2/N, "
                          "<f> = sum o_i f_i/N; F(Q) = Q [S(Q) - 1]"),
        "probe": probe.metadata(),
        "binning": "linear two-node binning on nodes k dr; per-pair error <= (Q dr)^2/24",
        "dr_angstrom": data.dr,
        "dr_rule": ("given" if dr is not None else
                    f"dr = min(0.05, sqrt(24 bin_tol)/Q_max), bin_tol = {bin_tol:g}"),
        "binning_bound_per_pair_at_q_max": (q_max * data.dr) ** 2 / 24.0,
        "n_nodes": data.n_nodes,
        "r_max_angstrom": data.cutoff if data.cutoff is not None else "all pairs",
        "periodic": bool(data.periodic),
        "boxes": data.boxes,
        "window": (window if data.periodic else "none (particle)"),
        "resolution_fwhm": float(resolution) if resolution is not None else 0.0,
        "incoherent": inc_note or "not computed",
        "frames": data.frames,
        "n_frames": data.n_frames,
        "n_atoms": data.n_atoms_sum // max(data.n_frames, 1),
        "groups": [f"{lab} (B={b:g})" for lab, b in zip(data.groups.labels, data.groups.b_iso)],
        "pairs_binned": data.pairs,
        "models": data.descriptions,
        "created": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
        "kinemap_version": _core.__version__,
        "conventions": "|Q| = 4 pi sin(theta)/lambda in 1/angstrom; s = Q/(4 pi); T = exp(-B s^2)",
    }
