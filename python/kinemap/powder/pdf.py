"""Pair distribution functions of a model: directly from the pair histograms, or through a
computed F(Q) over a chosen Q range, as a measurement gives them.

Direct route, on nodes r_k = k·dr (dr the spacing of the requested r):

    g_αβ(r_k) = P_αβ[k] / (N c_α c_β ρ₀ S[k]),     G(r) = 4πrρ₀[g(r) − 1],

P_αβ the binned number of ordered (α, β) pairs per frame (weights o_i o_j), N = Σ o_i,
c_α = Σ_{i∈α} o_i / N, ρ₀ = N/V and S[k] = ∫ 4πr² φ_k(r) dr the binned volume of the shell
of node k (φ_k the two-node hat function), so that a uniform density gives g = 1 exactly.
g = Σ_αβ w_αβ g_αβ with number weights w_αβ = c_α c_β, or probe weights
c_α c_β Re(f_α f_β*)/|⟨f⟩|² at Q = 0.

Fourier route: G(r) = (2/π) ∫_{Q_min}^{Q_max} F(Q) M(Q) sin(Qr) dQ · exp(−(Q_damp r)²/2),
F(Q) = Q[S(Q) − 1] from :func:`kinemap.powder`'s Debye sum, M(Q) = sin(πQ/Q_max)/(πQ/Q_max)
the Lorch window (or 1).
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
from . import _pairs
from ._results import PairDistribution
from .debye import PowderCautionWarning, as_q, coherent_parts, normalise

#: Extra distance (Å) binned beyond the last r so that thermal broadening near it is complete
#: (covers 5σ for B up to about 6 Å²).
THERMAL_MARGIN = 2.0


def _as_r(r) -> np.ndarray:
    try:
        a = np.asarray(r, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise InvalidInputError(f"`r` must be a 1-D array of distances (angstrom): {exc}") from None
    if a.ndim != 1 or a.size < 2:
        raise InvalidInputError(f"`r` must be a 1-D array of at least 2 distances, got shape {a.shape}")
    bad = ~np.isfinite(a) | (a < 0)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise InvalidInputError(f"`r`[{i}] = {a[i]!r}: distances must be finite and >= 0 (angstrom)")
    d = np.diff(a)
    if d[0] <= 0 or not np.allclose(d, d[0], rtol=1e-9, atol=1e-12):
        raise InvalidInputError("`r` must be equally spaced and increasing (e.g. numpy.linspace(0, 20, 2001))")
    return a


def _thermal(h: np.ndarray, dr: float, b_sum: float) -> np.ndarray:
    """Broaden binned pair weights of one group pair by the Gaussian of variance
    σ² = (B_g + B_h)/(8π²): the real-space form of T_gT_h = exp(−σ²Q²/2). The Debye term
    sin(Qr)/(Qr) makes P(r)/r the function whose odd extension is convolved."""
    sigma = math.sqrt(b_sum / (8.0 * np.pi**2)) if b_sum > 0 else 0.0
    if sigma < 0.5 * dr:
        return h
    n = len(h)
    r = np.arange(n) * dr
    u = np.zeros(n)
    u[1:] = h[1:] / r[1:]
    half = math.ceil(6.0 * sigma / dr)
    x = np.arange(-half, half + 1) * dr
    kern = np.exp(-0.5 * (x / sigma) ** 2)
    kern /= kern.sum()
    ext = np.concatenate([-u[1:][::-1], u])  # odd extension: u(−r) = −u(r)
    full = np.convolve(ext, kern, mode="full")
    conv = full[half:half + len(ext)][n - 1:]  # centred, back on the nodes r ≥ 0
    out = r * conv
    out[0] = h[0]
    return out


def _species_pairs(data, thermal: bool, nf: int):
    """Per frame, ordered-pair weights P_αβ on the nodes, by sorted species pair."""
    table = data.groups
    species = sorted(set(table.labels))
    out: dict[tuple[str, str], np.ndarray] = {}
    for p, (g, h) in enumerate(table.pairs()):
        row = data.hist[p] / nf
        if thermal:
            row = _thermal(row, data.dr, float(table.b_iso[g] + table.b_iso[h]))
        a, b = sorted((table.labels[g], table.labels[h]))
        factor = 2.0 if a == b else 1.0  # unordered pairs of one species count twice as ordered
        out[(a, b)] = out.get((a, b), 0.0) + factor * row
    return species, out


def _weights(data, species, probe, nf) -> tuple[dict, str]:
    occ: dict[str, float] = {}
    for lab, o in zip(data.groups.labels, data.group_occupancy / nf):
        occ[lab] = occ.get(lab, 0.0) + o
    n = sum(occ.values())
    c = {k: v / n for k, v in occ.items()}
    if probe is None:
        return {(a, b): c[a] * c[b] for a in species for b in species}, "number (c_a c_b)"
    f0 = probe.scattering_factors(species, [0.0])[:, 0]
    fmap = dict(zip(species, f0))
    mean = sum(c[s] * fmap[s] for s in species)
    if abs(mean) ** 2 <= 1e-12 * max(sum(c[s] * abs(fmap[s]) ** 2 for s in species), 1e-300):
        raise InvalidInputError("the average scattering factor <f> is zero (a null alloy): probe-weighted g(r) "
                                "is undefined; use number weighting (probe=None)")
    w = {(a, b): c[a] * c[b] * (fmap[a] * np.conj(fmap[b])).real / abs(mean) ** 2
         for a in species for b in species}
    return w, f"probe {probe.name} at Q = 0 (c_a c_b Re(f_a f_b*)/|<f>|^2)"


def _on_r(values: np.ndarray, dr: float, r: np.ndarray) -> np.ndarray:
    nodes = np.arange(len(values)) * dr
    return np.interp(r, nodes, values)


def pair_distribution(model_or_source, r, *, box="model", density: float | None = None, probe=None,
                      thermal: bool = True, q_range=None, q_damp: float = 0.0, lorch: bool = True,
                      dq: float | None = None, frames=None, threads: int | None = None,
                      chunk_atoms: int = _pairs.DEFAULT_CHUNK_ATOMS, progress=False,
                      **probe_options) -> PairDistribution:
    """Pair distribution function G(r), g(r) and the partial g_αβ(r) of a model.

    Parameters
    ----------
    model_or_source : Model, atom source, or list of them
        The atoms (a list or `frames` averages frames).
    r : array_like (K,)
        Equally spaced distances in Å (≥ 0); their spacing is the histogram node spacing.
    box : "model", None or array (3, 3)
        Periodic box (see :func:`kinemap.powder`); None treats the model as a particle.
    density : float, optional
        Number density ρ₀ (atoms/Å³); needed for a particle (no box), taken from the box
        (N/V) otherwise.
    probe : str or Probe, optional
        Direct route: None weights g(r) by the numbers of atoms (c_α c_β); a probe weights it
        by c_α c_β Re(f_α f_β*)/|⟨f⟩|² at Q = 0. Fourier route: the probe of F(Q) (default
        "xray").
    thermal : bool
        Direct route: broaden each group pair by the Gaussian of variance (B_g + B_h)/(8π²)
        Å², the real-space form of the Debye–Waller factors T_gT_h (no effect when B = 0).
    q_range : (float, float), optional
        Take the Fourier route over Q_min … Q_max (Å⁻¹) instead of the direct one.
    q_damp : float
        Fourier route: damping exp(−(q_damp·r)²/2) of G(r), as a finite Q resolution gives.
    lorch : bool
        Fourier route: Lorch window M(Q) = sin(πQ/Q_max)/(πQ/Q_max) (default True).
    dq : float, optional
        Fourier route: Q step of the integral (default min(0.01, π/(20 r_max)) Å⁻¹).
    frames, threads, chunk_atoms, progress
        As in :func:`kinemap.powder`.

    Returns
    -------
    PairDistribution
        ``r``, ``G`` (Å⁻²), ``g``, ``rho0``, ``partials`` {"A-B": g_AB} (direct route),
        ``weights``, ``metadata``; ``coordination(r1, r2)`` integrates 4πr²ρ₀g(r).

    Raises
    ------
    InvalidInputError
        Bad arguments; a particle without `density`; r beyond half the periodic box.

    Notes
    -----
    G(r) = 4πrρ₀[g(r) − 1] = (2/π)∫F(Q) sin(Qr) dQ. Below the first neighbour distance
    g = 0 and G(r) = −4πρ₀r. The integral of 4πr²ρ₀g(r) over a peak is the number of
    neighbours in it (coordination number). In a periodic box pairs are counted by the
    minimum image, so r may reach half the smallest face-to-face width of the box.

    Examples
    --------
    >>> import numpy as np, kinemap as km
    >>> a = 4.05
    >>> fcc = np.array([[0, 0, 0], [0, .5, .5], [.5, 0, .5], [.5, .5, 0]])
    >>> cells = np.array([[i, j, k] for i in range(4) for j in range(4) for k in range(4)])
    >>> m = km.Model((cells[:, None] + fcc[None]).reshape(-1, 3) / 4, "Al",
    ...              cell=np.eye(3) * 4 * a, fractional=True)
    >>> pdf = km.pair_distribution(m, np.linspace(0, 8, 801))
    >>> round(pdf.coordination(2.5, 3.2), 3)    # 12 nearest neighbours in fcc
    12.0
    """
    rv = _as_r(r)
    frame_ids, sources = _pairs.frame_sources(model_or_source, frames)
    labels = sorted({lab for s in sources for lab in s.species_labels()})
    if density is not None:
        density = real_number(density, "density", minimum=0.0, exclusive_minimum=True)
    if q_range is not None:
        return _fourier(sources, frame_ids, labels, rv, box=box, density=density,
                        probe=probe if probe is not None else "xray", q_range=q_range, q_damp=q_damp,
                        lorch=lorch, dq=dq, threads=threads, chunk_atoms=chunk_atoms,
                        progress=progress, probe_options=probe_options)
    if probe_options and probe is None:
        raise InvalidInputError(f"probe options {sorted(probe_options)} need a `probe`")
    pr = None if probe is None else get_probe(probe, **probe_options)
    if pr is not None:
        pr.check_labels(labels)
    step = float(rv[1] - rv[0])
    periodic = _pairs.resolve_box(sources[0], box) is not None
    cutoff = float(rv[-1]) + step
    if thermal:
        cutoff += THERMAL_MARGIN
    if periodic:
        b = _pairs.resolve_box(sources[0], box)
        half = 0.5 * float(np.min(1.0 / np.linalg.norm(np.linalg.inv(b).T, axis=1)))
        if rv[-1] > half * (1 + 1e-12):
            raise InvalidInputError(
                f"`r` reaches {rv[-1]:g} angstrom, beyond half the smallest face-to-face width of the "
                f"periodic box ({half:g} angstrom), where pairs by the minimum image stop being unique; "
                "use a larger box (supercell) or a shorter r"
            )
        cutoff = min(cutoff, half)
    elif density is None:
        raise InvalidInputError(
            "the model has no periodic box (a particle): give its number density `density=` "
            "(atoms/angstrom^3) for g(r) and G(r)"
        )
    data = _pairs.collect(sources, frame_ids, box=box, r_max=cutoff, dr=step, threads=threads,
                          chunk_atoms=chunk_atoms, progress=progress)
    nf = data.n_frames
    n = data.occupancy_sum / nf
    rho0 = float(density) if density is not None else n * data.volume_inverse_sum / nf
    species, pairs = _species_pairs(data, thermal, nf)
    weights, how = _weights(data, species, pr, nf)
    shells = _pairs.shell_volumes(data.n_nodes, data.dr, data.cutoff)
    occ: dict[str, float] = {}
    for lab, o in zip(data.groups.labels, data.group_occupancy / nf):
        occ[lab] = occ.get(lab, 0.0) + o
    c = {k: v / n for k, v in occ.items()}
    keep = shells > 0
    partials, total = {}, np.zeros(data.n_nodes)
    for (a, b2), p in pairs.items():
        expect = n * c[a] * c[b2] * rho0 * shells
        gab = np.zeros(data.n_nodes)
        gab[keep] = p[keep] / expect[keep]
        # P counts ordered (a, b) pairs; (b, a) is the same function
        partials[f"{a}-{b2}"] = _on_r(gab, data.dr, rv)
        total += (weights[(a, b2)] + (weights[(b2, a)] if a != b2 else 0.0)) * gab
    g = _on_r(total, data.dr, rv)
    G = 4.0 * np.pi * rv * rho0 * (g - 1.0)
    meta = _meta(data, "direct (pair histograms)", rho0, density, how)
    meta["thermal_broadening"] = ("Gaussian of variance (B_g + B_h)/(8 pi^2) per group pair" if thermal else "none")
    wdict = {f"{a}-{b2}": float(weights[(a, b2)] + (weights[(b2, a)] if a != b2 else 0.0)) for a, b2 in pairs}
    return PairDistribution(r=rv, G=G, g=g, rho0=rho0, partials=partials, weights=wdict, metadata=meta)


def _fourier(sources, frame_ids, labels, rv, *, box, density, probe, q_range, q_damp, lorch, dq, threads,
             chunk_atoms, progress, probe_options) -> PairDistribution:
    try:
        q_min, q_max = (float(v) for v in q_range)
    except (TypeError, ValueError):
        raise InvalidInputError(f"`q_range` must be (Q_min, Q_max) in 1/angstrom, got {q_range!r}") from None
    if not (math.isfinite(q_min) and math.isfinite(q_max) and 0 <= q_min < q_max):
        raise InvalidInputError(f"`q_range` must satisfy 0 <= Q_min < Q_max, got {q_range!r}")
    q_damp = real_number(q_damp, "q_damp", minimum=0.0)
    if dq is None:
        dq = min(0.01, np.pi / (20.0 * float(rv[-1]))) if rv[-1] > 0 else 0.01
    dq = real_number(dq, "dq", minimum=0.0, exclusive_minimum=True)
    n_q = math.ceil((q_max - q_min) / dq) + 1
    if n_q > 1_000_000:
        raise InvalidInputError(f"`dq` = {dq:g} gives {n_q} Q points over {q_min:g}..{q_max:g}; use a larger dq")
    q = as_q(np.linspace(q_min, q_max, n_q))
    pr = get_probe(probe, **probe_options)
    pr.check_labels(labels)
    from .debye import DEFAULT_BIN_TOL, choose_dr

    data = _pairs.collect(sources, frame_ids, box=box, r_max=None, dr=choose_dr(q_max, DEFAULT_BIN_TOL),
                          threads=threads, chunk_atoms=chunk_atoms, progress=progress)
    parts = coherent_parts(data, pr, q, window="lorch", threads=threads)
    _, f_q = normalise(parts["self"] + parts["distinct"], parts, q)
    if f_q is None:
        raise InvalidInputError("the average scattering factor <f> is zero (a null alloy): F(Q) and G(r) in "
                                "the Faber-Ziman normalisation are undefined for this probe")
    m = np.sinc(q / q_max) if lorch else np.ones_like(q)  # np.sinc(x) = sin(πx)/(πx)
    wq = np.full(n_q, q[1] - q[0])
    wq[0] *= 0.5
    wq[-1] *= 0.5
    fw = f_q * m * wq
    G = np.empty(len(rv))
    for i0 in range(0, len(rv), 512):
        rr = rv[i0:i0 + 512]
        G[i0:i0 + 512] = (2.0 / np.pi) * (np.sin(np.outer(rr, q)) @ fw)
    G *= np.exp(-0.5 * (q_damp * rv) ** 2)
    nf = data.n_frames
    if data.periodic:
        rho0 = (data.occupancy_sum / nf) * data.volume_inverse_sum / nf
    else:
        rho0 = density
    g = None
    if rho0 is not None:
        g = np.zeros(len(rv))
        pos = rv > 0
        g[pos] = 1.0 + G[pos] / (4.0 * np.pi * rv[pos] * rho0)
    cautions = list(pr.cautions())
    if data.periodic and data.cutoff is not None and q_min < 2.0 * np.pi / data.cutoff:
        cautions.append(f"F(Q) below 2 pi/r_max = {2 * np.pi / data.cutoff:.4g} 1/angstrom comes from the "
                        "windowed box sum and is not meaningful there")
    for text in cautions:
        warnings.warn(text, PowderCautionWarning, stacklevel=3)
    meta = _meta(data, "Fourier transform of the computed F(Q)", rho0 if rho0 is not None else 0.0, density,
                 f"probe {pr.name}: Faber-Ziman S(Q)")
    meta.update({"q_range": [q_min, q_max], "dq": float(q[1] - q[0]), "q_damp": float(q_damp),
                 "lorch_window": bool(lorch), "probe": pr.metadata(), "cautions": cautions,
                 "formula": "G(r) = (2/pi) int_{Qmin}^{Qmax} F(Q) M(Q) sin(Q r) dQ exp(-(q_damp r)^2/2)"})
    return PairDistribution(r=rv, G=G, g=g, rho0=float(rho0) if rho0 is not None else 0.0, metadata=meta)


def _meta(data, route: str, rho0: float, density, weighting: str) -> dict:
    return {
        "route": route,
        "weighting": weighting,
        "rho0_source": "given" if density is not None else "box (N/V)",
        "rho0": float(rho0),
        "dr_angstrom": data.dr,
        "r_max_angstrom": data.cutoff if data.cutoff is not None else "all pairs",
        "periodic": bool(data.periodic),
        "boxes": data.boxes,
        "frames": data.frames,
        "n_frames": data.n_frames,
        "n_atoms": data.n_atoms_sum // max(data.n_frames, 1),
        "pairs_binned": data.pairs,
        "models": data.descriptions,
        "created": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
        "kinemap_version": _core.__version__,
        "conventions": "G(r) = 4 pi r rho0 [g(r) - 1] in 1/angstrom^2; r in angstrom",
    }
