"""Planar and icosahedral cut-and-project schemes and their models.

* :func:`octagonal` — Ammann–Beenker vertex set from Z⁴ (regular-octagon window).
* :func:`penrose` — Penrose rhombic vertex set from Z⁵ (pentagon windows on four levels).
* :func:`icosahedral` — three-dimensional Penrose (Ammann–Kramer) vertex set from Z⁶
  (rhombic-triacontahedron window).

Bases follow docs/references.md (Baake & Grimm 2013; de Bruijn 1981; Elser 1985):
octagonal e_j∥ = (cos πj/4, sin πj/4), e_j⊥ = (cos 3πj/4, sin 3πj/4); Penrose
e_j∥ = (cos 2πj/5, sin 2πj/5), e_j⊥ = (cos 4πj/5, sin 4πj/5) plus the level Σn_j;
icosahedral e_j∥ ∝ (±1, τ, 0), (0, ±1, τ), (±τ, 0, 1), e_j⊥ their Galois conjugates
(τ → −1/τ), all of unit length. Edge lengths scale both spaces.

Each scheme streams points (:meth:`CutProjectScheme.iter_points`), makes patches of atoms for
kinemap's engines (:meth:`CutProjectScheme.patch`), gives its Fourier module and window
transform, and makes periodic approximants (:meth:`CutProjectScheme.approximant`).
"""

from __future__ import annotations

import math

import numpy as np

from .._shared.validate import real_array, real_number, whole_number
from ._precise import metallic_mean
from .scheme import CutProjectScheme
from .windows import canonical_window

TAU = (1.0 + math.sqrt(5.0)) / 2.0
SILVER = 1.0 + math.sqrt(2.0)


def _edge(edge) -> float:
    return real_number(edge, "edge", minimum=0.0, exclusive_minimum=True)


def _shift(shift, n: int) -> np.ndarray:
    if shift is None:
        return np.zeros(n)
    return real_array(shift, "shift", shape=(n,))


def octagonal(edge: float = 1.0, shift=None) -> CutProjectScheme:
    """Ammann–Beenker (octagonal) vertex set from Z⁴.

    Parameters
    ----------
    edge : float
        Rhombus/square edge length in Å.
    shift : array_like (2,), optional
        Phason shift of the window (internal-space Å). The window is the regular octagon
        Σ_j [−½, ½] e_j⊥ (area 2(1+√2)·edge²) moved by `shift`.

    Returns
    -------
    CutProjectScheme
        Density (1+√2)/2 = 1.207107 points per edge² (docs/references.md); module
        k = ½ Σ h_j e_j∥ / edge² (cycles/Å), inflation factor 1+√2.
    """
    a = _edge(edge)
    j = np.arange(4)
    par = a * np.array([np.cos(np.pi * j / 4), np.sin(np.pi * j / 4)])
    perp = a * np.array([np.cos(3 * np.pi * j / 4), np.sin(3 * np.pi * j / 4)])
    offset = np.full(4, -0.5)
    s = _shift(shift, 2)
    window = canonical_window(perp, offset, "zonotope").translated(s)
    # parallel = edge · (U + √2 V)
    u = [[1, 0, 0, 0], [0, 0, 1, 0]]
    v = [[0, 0.5, 0, -0.5], [0, 0.5, 0, 0.5]]
    return CutProjectScheme("octagonal (Ammann–Beenker)", par, perp, window, hypercube_offset=offset,
                            window_kind="zonotope", shift=s, inflation_factor=SILVER,
                            rational_form=(u, v, [a, a], math.sqrt(2.0)), edge_length=a)


def penrose(edge: float = 1.0, shift=None) -> CutProjectScheme:
    """Penrose rhombic vertex set from Z⁵ (de Bruijn 1981).

    Parameters
    ----------
    edge : float
        Rhombus edge length in Å.
    shift : array_like (2,), optional
        Phason shift of the pentagon windows within the perpendicular plane. Shift zero is a
        singular tiling; boundary points are then decided by the regularisation rule of
        :mod:`kinemap.quasi.windows` (the limit of a generic shift).

    Returns
    -------
    CutProjectScheme
        Internal space (perpendicular plane, level ι = Σ n_j); windows P, −τP, τP, −P on
        levels 1–4 with P = conv{e_j⊥}; density 1.231073 per edge²; module
        k = (2/5) Σ h_j e_j∥ / edge² (docs/references.md). Indices h and h + (1,1,1,1,1) are the
        same module vector.
    """
    a = _edge(edge)
    j = np.arange(5)
    par = a * np.array([np.cos(2 * np.pi * j / 5), np.sin(2 * np.pi * j / 5)])
    perp = np.vstack([a * np.cos(4 * np.pi * j / 5), a * np.sin(4 * np.pi * j / 5), np.ones(5)])
    offset = np.zeros(5)
    s2 = _shift(shift, 2)
    s = np.array([s2[0], s2[1], 0.0])
    window = canonical_window(perp, offset, "sliced").translated(s)
    sin72 = math.sin(2 * math.pi / 5)
    u = [[1, -0.5, 0, 0, -0.5], [0, 1, -1, 1, -1]]
    v = [[0, 0.5, -0.5, -0.5, 0.5], [0, 0, 1, -1, 0]]
    return CutProjectScheme("Penrose rhombic", par, perp, window, hypercube_offset=offset,
                            window_kind="sliced", shift=s, inflation_factor=TAU,
                            rational_form=(u, v, [a, a * sin72], TAU), edge_length=a)


def icosahedral(edge: float = 1.0, shift=None) -> CutProjectScheme:
    """Three-dimensional Penrose (Ammann–Kramer) vertex set from Z⁶.

    Parameters
    ----------
    edge : float
        Rhombohedron edge length in Å.
    shift : array_like (3,), optional
        Phason shift of the rhombic-triacontahedron window.

    Returns
    -------
    CutProjectScheme
        Window Σ_j [−½, ½] e_j⊥ with volume 4√(5+2√5) = 12.310734 edge³ (docs/references.md);
        module k = ½ Σ h_j e_j∥ / edge²; density 12.310734/8 = 1.538842 per edge³.
    """
    a = _edge(edge)
    t = TAU
    par_raw = np.array([[1, t, 0], [-1, t, 0], [0, 1, t], [0, -1, t], [t, 0, 1], [-t, 0, 1]], dtype=float)
    tc = -1.0 / t  # Galois conjugate of τ
    perp_raw = np.array([[1, tc, 0], [-1, tc, 0], [0, 1, tc], [0, -1, tc], [tc, 0, 1], [-tc, 0, 1]], dtype=float)
    par = a * (par_raw / np.linalg.norm(par_raw, axis=1)[:, None]).T
    perp = a * (perp_raw / np.linalg.norm(perp_raw, axis=1)[:, None]).T
    offset = np.full(6, -0.5)
    s = _shift(shift, 3)
    window = canonical_window(perp, offset, "zonotope").translated(s)
    norm = math.sqrt(1 + t * t)
    u = [[1, -1, 0, 0, 0, 0], [0, 0, 1, -1, 0, 0], [0, 0, 0, 0, 1, 1]]
    v = [[0, 0, 0, 0, 1, -1], [1, 1, 0, 0, 0, 0], [0, 0, 1, 1, 0, 0]]
    return CutProjectScheme("icosahedral (Ammann–Kramer)", par, perp, window, hypercube_offset=offset,
                            window_kind="zonotope", shift=s, inflation_factor=TAU,
                            rational_form=(u, v, [a / norm] * 3, TAU), edge_length=a)


def fibonacci_ratio(n: int) -> tuple[int, int]:
    """(F_{n+1}, F_n) with F_1 = F_2 = 1: the n-th rational approximation of τ."""
    n = whole_number(n, "n", minimum=1)
    a, b = 1, 1
    for _ in range(n - 1):
        a, b = a + b, a
    return a, b


def pell_ratio(n: int) -> tuple[int, int]:
    """(p, q) with p/q the n-th convergent of √2: 1/1, 3/2, 7/5, 17/12, …"""
    n = whole_number(n, "n", minimum=1)
    p, q = 1, 1
    for _ in range(n - 1):
        p, q = p + 2 * q, p + q
    return p, q


def icosahedral_approximant(p: int, q: int, edge: float = 1.0, shift=None) -> CutProjectScheme:
    """Cubic p/q approximant of the icosahedral set (τ replaced by p/q: 1/1, 2/1, 3/2, …).

    Parameters
    ----------
    p, q : int
        The rational replacement p/q of τ (consecutive Fibonacci numbers).
    edge : float
        Rhombohedron edge in Å.
    shift : array_like (3,), optional
        Phason shift. Rational internal projections put many lattice points on window
        faces; they are decided by the regularisation rule, but a small generic shift gives
        the usual approximant structures.

    Returns
    -------
    CutProjectScheme
        Periodic: cube edge 2(pτ + q)/√(2+τ)·edge; for p + q even the lattice is
        body-centred and :meth:`~CutProjectScheme.cell` gives primitive vectors.
    """
    p = whole_number(p, "p", minimum=1)
    q = whole_number(q, "q", minimum=1)
    return icosahedral(edge, shift).approximant((p, q), name=f"icosahedral {p}/{q} approximant")


__all__ = ["octagonal", "penrose", "icosahedral", "icosahedral_approximant", "fibonacci_ratio", "pell_ratio", "TAU",
           "SILVER", "metallic_mean"]
