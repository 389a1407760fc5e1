"""Fourier transforms of simplices: the numerical core of the window transforms.

For a d-simplex with vertices v_0..v_d, ``∫ exp(z·y) dy = d!·vol·E[t_0, …, t_d]`` with
t_i = z·v_i and E the divided difference of exp. The divided differences are evaluated as the
corner entry of the exponential of a bidiagonal matrix (Opitz's theorem) by scaling and
squaring, which stays accurate when several t_i coincide: the symmetric peaks of icosahedral
patterns, where the textbook formula divides zero by zero (McCurdy, Ng & Parlett, Math. Comp.
43 (1984) 501 — memory).
"""

from __future__ import annotations

import math

import numpy as np

from ..errors import InvalidInputError


def sinc(x):
    """sin(x)/x with the limit 1 at 0."""
    x = np.asarray(x, dtype=np.float64)
    out = np.ones_like(x)
    nz = np.abs(x) > 1e-8
    out[nz] = np.sin(x[nz]) / x[nz]
    small = ~nz
    out[small] = 1.0 - x[small] ** 2 / 6.0
    return out


def exp_divided_differences(t) -> np.ndarray:
    """Divided differences E[t_0, …, t_n] of exp, computed stably.

    Parameters
    ----------
    t : array_like, shape (M, n+1), complex
        Nodes (n ≤ 5). Nodes may coincide.

    Returns
    -------
    ndarray, shape (M,), complex128

    Notes
    -----
    E[t_0..t_n] is the (0, n) entry of exp(J) for the bidiagonal J with the t_i on the
    diagonal and ones above it (Opitz). The nodes are first shifted by their mean μ
    (E[t] = e^μ E[t − μ]); exp(J/2^s) is then summed as a Taylor series and squared s times.
    For coincident nodes the result is e^t / n!.
    """
    t = np.asarray(t, dtype=np.complex128)
    if t.ndim != 2:
        raise InvalidInputError(f"`t` must have shape (M, n+1), got {t.shape}")
    m, k = t.shape
    if m == 0:
        return np.zeros(0, dtype=np.complex128)
    mu = t.mean(axis=1)
    s = t - mu[:, None]
    r = float(np.abs(s).max()) if s.size else 0.0
    nsq = max(0, int(math.ceil(math.log2(r / 0.25)))) if r > 0.25 else 0
    scale = 2.0 ** (-nsq)
    x = np.zeros((m, k, k), dtype=np.complex128)
    idx = np.arange(k)
    x[:, idx, idx] = s * scale
    if k > 1:
        x[:, idx[:-1], idx[1:]] = scale
    # Horner form of the Taylor series, 30 terms (‖X‖ ≤ 1.25 → truncation < 1e-28).
    eye = np.broadcast_to(np.eye(k, dtype=np.complex128), (m, k, k))
    e = eye.copy()
    for j in range(30, 0, -1):
        e = eye + np.matmul(x, e) / j
    for _ in range(nsq):
        e = np.matmul(e, e)
    return np.exp(mu) * e[:, 0, k - 1]


def simplex_transforms(vertices: np.ndarray, k: np.ndarray) -> np.ndarray:
    """∫ exp(−2πi k·y) dy over each simplex, for each k.

    Parameters
    ----------
    vertices : ndarray, shape (S, d+1, d)
        Simplices (d = 1, 2, 3) in internal space.
    k : ndarray, shape (M, d)
        Wave vectors in cycles per unit length.

    Returns
    -------
    ndarray, shape (M,), complex: the sum over the simplices.
    """
    vertices = np.asarray(vertices, dtype=np.float64)
    k = np.asarray(k, dtype=np.float64)
    n_s, nv, d = vertices.shape
    edges = vertices[:, 1:, :] - vertices[:, :1, :]
    jac = np.abs(np.linalg.det(edges)) if d > 1 else np.abs(edges[:, 0, 0])
    out = np.zeros(len(k), dtype=np.complex128)
    # chunk over k to bound memory (M·S matrices of (d+1)²)
    per = max(1, 200_000 // max(n_s, 1))
    for a in range(0, len(k), per):
        kk = k[a:a + per]
        t = -2j * np.pi * np.einsum("md,svd->msv", kk, vertices)
        e = exp_divided_differences(t.reshape(-1, nv)).reshape(len(kk), n_s)
        out[a:a + per] = e @ jac
    return out


__all__ = ["sinc", "exp_divided_differences", "simplex_transforms"]
