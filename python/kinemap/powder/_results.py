"""Result objects of the powder functions, their NeXus files and pictures.

A :class:`PowderPattern` is a :class:`kinemap.Pattern` on a 1-D |Q| axis (q-points along q_x
whose one axis is named ``Q``); its file holds the intensity and, beside it in the same NXdata group, the self and
distinct terms, S(Q), F(Q) and the incoherent term. A :class:`PairDistribution` holds G(r),
g(r) and the partial g_αβ(r) on an r axis (Å) and writes its own NXdata.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .._shared.nexus import nexus_entry
from .._shared.output import atomic_write
from ..pattern import Pattern, save_pattern
from ..qgrid import QGrid


def q_grid(q: np.ndarray) -> QGrid:
    """The q-points (|Q|, 0, 0) of a powder pattern, with one axis ``Q`` (Å⁻¹)."""
    q = np.asarray(q, dtype=np.float64)
    return QGrid.points(np.column_stack([q, np.zeros(len(q)), np.zeros(len(q))]), axes=[("Q", q, "1/angstrom")])


class PowderPattern(Pattern):
    """A powder pattern I(Q) on a 1-D |Q| axis, with its parts and normalisations.

    Attributes
    ----------
    q : ndarray (M,)
        |Q| in Å⁻¹.
    intensity : ndarray (M,)
        Coherent I(Q) = self + distinct (total for the model, not per atom), probe units².
    self_scattering : ndarray (M,)
        Σ_i o_i |f_i|² (no Debye–Waller factor).
    distinct : ndarray (M,)
        Σ_{i≠j} o_i o_j f_i f_j* T_i T_j sin(Q r_ij)/(Q r_ij) (periodic boxes: the windowed
        ρ₀[g(r) − 1] form).
    structure_factor : ndarray (M,) or None
        S(Q) = 1 + [I/N − ⟨|f|²⟩]/|⟨f⟩|² (None when ⟨f⟩ = 0).
    reduced : ndarray (M,) or None
        F(Q) = Q[S(Q) − 1] (Å⁻¹).
    incoherent : ndarray (M,) or None
        Neutron incoherent or X-ray Compton intensity when asked for.
    error_bound : ndarray (M,) or None
        Bound on |binned − exact| of the distinct term (particles).
    """

    def __init__(self, q, intensity, *, self_scattering, distinct, structure_factor, reduced,
                 incoherent, error_bound, metadata, units):
        q = np.asarray(q, dtype=np.float64)
        super().__init__(q_grid(q), intensity=intensity, metadata=metadata, units=units)
        self.q = q
        self.self_scattering = np.asarray(self_scattering, dtype=np.float64)
        self.distinct = np.asarray(distinct, dtype=np.float64)
        self.structure_factor = structure_factor
        self.reduced = reduced
        self.incoherent = incoherent
        self.error_bound = error_bound

    @property
    def total(self) -> np.ndarray:
        """Coherent plus incoherent intensity (the coherent one when none was computed)."""
        return self.intensity if self.incoherent is None else self.intensity + self.incoherent

    def __repr__(self) -> str:
        return (f"PowderPattern(n={len(self.q)}, q={self.q[0]:.4g}..{self.q[-1]:.4g} 1/angstrom, "
                f"units={self.units!r})")

    def save(self, path, *, keep_amplitude: bool = False, overwrite: bool = False) -> Path:
        """Write a NeXus file (atomically): the intensity as signal over ``q_magnitude``, and
        the self and distinct terms, S(Q), F(Q) and the incoherent term beside it."""
        import h5py

        final = Path(path)
        u2 = f"{self.units}^2" if self.units != "1" else "1"
        extras = [
            ("q_magnitude", self.q, "1/angstrom", "|Q| = 4 pi sin(theta)/lambda"),
            ("self_scattering", self.self_scattering, u2, "sum_i o_i |f_i|^2"),
            ("distinct", self.distinct, u2, "sum_{i!=j} o_i o_j f_i f_j* T_i T_j sin(Q r)/(Q r)"),
        ]
        if self.structure_factor is not None:
            extras.append(("structure_factor", self.structure_factor, "1", "S(Q) (Faber-Ziman)"))
            extras.append(("reduced_structure_factor", self.reduced, "1/angstrom", "F(Q) = Q [S(Q) - 1]"))
        if self.incoherent is not None:
            extras.append(("incoherent", self.incoherent, u2, "incoherent (Compton or nuclear) intensity"))
        if self.error_bound is not None:
            extras.append(("binning_error_bound", self.error_bound, u2, "bound on the binning error"))
        with atomic_write(final, overwrite=overwrite) as tmp:
            save_pattern(self, tmp, keep_amplitude=False, overwrite=True)
            with h5py.File(tmp, "a") as f:
                data = f["entry/data"]
                for name, arr, units, long in extras:
                    ds = data.create_dataset(name, data=np.asarray(arr, dtype=np.float64))
                    ds.attrs["units"] = units
                    ds.attrs["long_name"] = long
                data.attrs["axes"] = np.array(["q_magnitude"], dtype=h5py.string_dtype())
                data.attrs["q_magnitude_indices"] = 0
        return final

    def plot(self, ax=None, *, quantity: str = "intensity"):
        """Draw I(Q) (or ``"structure_factor"``, ``"reduced"``, ``"total"``) against Q."""
        y, label = {
            "intensity": (self.intensity, f"I(Q) ({self.units}$^2$)"),
            "total": (self.total, f"I(Q) + incoherent ({self.units}$^2$)"),
            "structure_factor": (self.structure_factor, "S(Q)"),
            "reduced": (self.reduced, "F(Q) = Q[S(Q) − 1] (Å$^{-1}$)"),
        }.get(quantity, (None, None))
        if label is None:
            raise ValueError(f"`quantity` must be intensity, total, structure_factor or reduced, got {quantity!r}")
        if y is None:
            raise ValueError(f"this pattern has no {quantity} (see its metadata cautions)")
        ax = _axes(ax)
        ax.plot(self.q, y, lw=1.0)
        ax.set_xlabel("Q (Å$^{-1}$)")
        ax.set_ylabel(label)
        return ax


@dataclass
class PairDistribution:
    """A pair distribution function on an r axis.

    Attributes
    ----------
    r : ndarray (K,)
        Distances in Å.
    G : ndarray (K,)
        G(r) = 4πrρ₀[g(r) − 1] (Å⁻²).
    g : ndarray (K,) or None
        g(r), weighted as ``metadata["weighting"]`` says.
    rho0 : float
        Number density ρ₀ (atoms/Å³).
    partials : dict
        ``{"A-B": g_AB(r)}`` per species pair (direct route only).
    weights : dict
        ``{"A-B": w_AB}``, with g = Σ w_AB g_AB (w summed over ordered pairs).
    metadata : dict
    """

    r: np.ndarray
    G: np.ndarray
    g: np.ndarray | None
    rho0: float
    partials: dict = field(default_factory=dict)
    weights: dict = field(default_factory=dict)
    metadata: dict = field(default_factory=dict)

    @property
    def radial(self) -> np.ndarray | None:
        """R(r) = 4πr²ρ₀ g(r) (atoms per Å of shell): its integral over a peak is the
        coordination number."""
        return None if self.g is None else 4.0 * np.pi * self.r**2 * self.rho0 * self.g

    def coordination(self, r_min: float, r_max: float) -> float:
        """∫ 4πr²ρ₀ g(r) dr from `r_min` to `r_max` (trapezoid rule on the r grid)."""
        radial = self.radial
        if radial is None:  # (no g(r))
            raise ValueError("this pair distribution has no g(r)")
        from scipy.integrate import trapezoid

        sel = (self.r >= r_min) & (self.r <= r_max)
        return float(trapezoid(radial[sel], self.r[sel]))

    def __repr__(self) -> str:
        return (f"PairDistribution(n={len(self.r)}, r={self.r[0]:.4g}..{self.r[-1]:.4g} angstrom, "
                f"rho0={self.rho0:.6g}, partials={sorted(self.partials)})")

    def save(self, path, *, overwrite: bool = False) -> Path:
        """Write NeXus NXdata (atomically): signal ``G`` over ``r``, with ``g`` and the partials."""
        import h5py

        from ..pattern import _write_params

        final = Path(path)
        with atomic_write(final, overwrite=overwrite) as tmp, h5py.File(tmp, "w") as f:
            entry = nexus_entry(f, final.name, version=str(self.metadata.get("kinemap_version", "")))
            data = entry.create_group("data")
            data.attrs["NX_class"] = "NXdata"
            data.attrs["signal"] = "G"
            data.attrs["axes"] = np.array(["r"], dtype=h5py.string_dtype())
            data.attrs["r_indices"] = 0
            ds = data.create_dataset("r", data=self.r)
            ds.attrs["units"] = "angstrom"
            ds = data.create_dataset("G", data=self.G)
            ds.attrs["units"] = "1/angstrom^2"
            ds.attrs["long_name"] = "G(r) = 4 pi r rho0 [g(r) - 1]"
            if self.g is not None:
                data.create_dataset("g", data=self.g).attrs["units"] = "1"
            for name, arr in self.partials.items():
                data.create_dataset(f"g_{name}", data=arr).attrs["units"] = "1"
            params = entry.create_group("parameters")
            params.attrs["NX_class"] = "NXcollection"
            meta = dict(self.metadata)
            meta["rho0_per_cubic_angstrom"] = float(self.rho0)
            meta["partial_weights"] = {k: float(v) for k, v in self.weights.items()}
            _write_params(params, meta)
        return final

    def plot(self, ax=None, *, quantity: str = "G"):
        """Draw G(r) (or ``"g"``, ``"radial"``) against r."""
        y, label = {"G": (self.G, "G(r) (Å$^{-2}$)"), "g": (self.g, "g(r)"),
                    "radial": (self.radial, "4πr²ρ₀g(r) (Å$^{-1}$)")}.get(quantity, (None, None))
        if label is None:
            raise ValueError(f"`quantity` must be G, g or radial, got {quantity!r}")
        if y is None:
            raise ValueError(f"this pair distribution has no {quantity}")
        ax = _axes(ax)
        ax.plot(self.r, y, lw=1.0)
        ax.axhline(0.0, color="0.6", lw=0.5)
        ax.set_xlabel("r (Å)")
        ax.set_ylabel(label)
        return ax


def _axes(ax):
    if ax is not None:
        return ax
    from ..plot import new_figure

    return new_figure(6.4, 4.0).add_subplot()


def save_plot(result, path, *, quantity: str, title: str = "") -> Path:
    """Draw `result` (PowderPattern or PairDistribution) into a PNG with the Agg renderer."""
    from ..plot import new_figure, save_figure

    fig = new_figure(6.4, 4.0)
    ax = fig.add_subplot()
    result.plot(ax, quantity=quantity)
    if title:
        ax.set_title(title, fontsize=9)
    return save_figure(fig, path)
