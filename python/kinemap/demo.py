"""``kinemap demo``: a small scenario of our own, from model file to pictures.

The scenario: one flat layer of an invented two-element alloy on an octagonal
(Ammann–Beenker) tiling. The vertex set comes from :func:`kinemap.quasi.tilings.octagonal`
(cut-and-project from Z⁴, edge 2.6 Å, a round patch of radius 60 Å). The invented
decoration rule uses perpendicular space: a vertex whose internal coordinate lies within
0.6 of the window's inradius from the window centre is a Co site, every other vertex an Al
site (about one third Co). Twenty frames add thermal motion of two invented kinds: long
in-plane displacement waves with amplitudes ∝ 1/|k| (0.08 Å r.m.s.), which put thermal
diffuse scattering around the Bragg peaks, and independent Gaussian jitter (0.06 Å r.m.s.
along each axis), which gives a background rising with q as 1 − exp(−q²⟨u²⟩).

The demo writes the frames as H5MD, averages X-ray scattering over them on the
(q_x, q_y) plane — Bragg |⟨A⟩|², diffuse ⟨|A|²⟩ − |⟨A⟩|² and total ⟨|A|²⟩ — and along
the q_x axis, draws PNGs and prints where everything went. Nothing here is measured data.
"""

from __future__ import annotations

import time
from pathlib import Path

import numpy as np

from .errors import InvalidInputError

EDGE = 2.6  #: tile edge, Å
RADIUS = 80.0  #: patch radius, Å
CO_FRACTION_OF_INRADIUS = 0.6  #: invented rule: |x_perp| < 0.6 × window inradius → Co
JITTER = 0.06  #: r.m.s. uncorrelated thermal displacement along each axis, Å
WAVE_RMS = 0.08  #: r.m.s. of the correlated (long-wave) in-plane displacements per axis, Å
N_FRAMES = 20
Q_MAX = 6.5  #: half-width of the plane, 1/Å
PLANE_POINTS = 401
LINE_POINTS = 801
SEED = 20240611


def build_frames(edge: float = EDGE, radius: float = RADIUS, n_frames: int = N_FRAMES,
                 jitter: float = JITTER, wave_rms: float = WAVE_RMS, seed: int = SEED):
    """The demo's frames: a decorated octagonal layer with thermal jitter.

    Returns
    -------
    list of kinemap.Model
        `n_frames` models with the same atoms (same order and species), positions in Å.
    """
    from .model import Model
    from .quasi.tilings import octagonal

    inradius = edge * (1.0 + np.sqrt(2.0)) / 2.0  # regular octagon window of edge `edge`

    def cobalt_near_window_centre(points):
        return np.where(np.linalg.norm(points.perp, axis=1) < CO_FRACTION_OF_INRADIUS * inradius, "Co", "Al")

    layer = octagonal(edge).patch(radius, species=cobalt_near_window_centre).read()
    species = layer.species
    rng = np.random.default_rng(seed)
    base = np.asarray(layer.positions, dtype=np.float64)
    return [Model(base + _waves(base, rng, wave_rms) + rng.normal(0.0, jitter, base.shape), species)
            for _ in range(n_frames)]


def _waves(positions: np.ndarray, rng, rms: float, n_waves: int = 48) -> np.ndarray:
    """In-plane displacement waves with random directions, phases and polarisations and
    amplitudes ∝ 1/|k| (a crude acoustic-phonon picture, invented for the demo), scaled to
    `rms` Å per axis. They put thermal diffuse scattering around the Bragg peaks."""
    if rms <= 0:
        return np.zeros_like(positions)
    k = rng.uniform(2 * np.pi / 60.0, 2 * np.pi / 6.0, n_waves)
    theta = rng.uniform(0.0, 2 * np.pi, n_waves)
    pol = rng.uniform(0.0, 2 * np.pi, n_waves)
    phase = rng.uniform(0.0, 2 * np.pi, n_waves)
    kvec = k[:, None] * np.column_stack([np.cos(theta), np.sin(theta)])
    evec = np.column_stack([np.cos(pol), np.sin(pol)])
    arg = positions[:, :2] @ kvec.T + phase  # (N, waves)
    u2 = (np.cos(arg) / k) @ evec
    u2 *= rms / np.sqrt(np.mean(u2 * u2, axis=0)).mean()
    out = np.zeros_like(positions)
    out[:, :2] = u2
    return out


def run_demo(output="kinemap-demo-output", *, threads=None, progress: bool = True, quiet: bool = False,
             plane_points: int = PLANE_POINTS, line_points: int = LINE_POINTS, radius: float = RADIUS,
             n_frames: int = N_FRAMES) -> dict[str, Path]:
    """Run the demonstration and return the files it wrote.

    Parameters
    ----------
    output : str or path-like
        Folder for everything (created when missing).
    threads : int, optional
        Worker threads.
    progress : bool
        Show progress bars.
    quiet : bool
        Print nothing.
    plane_points, line_points, radius, n_frames
        Size of the scenario (smaller values for quick tests).

    Returns
    -------
    dict of str to pathlib.Path
        ``model``, ``total``, ``bragg``, ``diffuse`` (maps), ``*_png`` pictures, ``profile_png``,
        ``model_png``.
    """
    from . import __version__
    from .frames import average_frames
    from .io import open_model, write_h5md
    from .plot import new_figure, plot_profile, render, save_figure
    from .qgrid import QGrid

    say = (lambda *a: None) if quiet else print
    out = Path(output)
    if out.exists() and not out.is_dir():
        raise InvalidInputError(f"demo output {str(out)!r} exists and is not a folder")
    out.mkdir(parents=True, exist_ok=True)
    t0 = time.perf_counter()
    files: dict[str, Path] = {}

    say(f"kinemap {__version__} demo: an invented Al-Co layer on an octagonal (Ammann-Beenker) tiling")
    frames = build_frames(radius=radius, n_frames=n_frames)
    n_co = int(np.sum(frames[0].species == "Co"))
    say(f"  model: {frames[0].n_atoms} atoms ({n_co} Co, {frames[0].n_atoms - n_co} Al), edge {EDGE} A, "
        f"{n_frames} frames with thermal waves ({WAVE_RMS} A) and jitter ({JITTER} A)")
    files["model"] = write_h5md(out / "octagonal_layer.h5md", frames, times=[0.5 * i for i in range(n_frames)],
                                author="kinemap demo", overwrite=True)
    source = open_model(files["model"])

    plane = QGrid.plane([-Q_MAX, -Q_MAX, 0.0], [2 * Q_MAX, 0.0, 0.0], [0.0, 2 * Q_MAX, 0.0],
                        (plane_points, plane_points))
    say(f"  computing X-ray maps of the (q_x, q_y) plane, {plane_points}x{plane_points} points, "
        f"|q_x|, |q_y| <= {Q_MAX} 1/A, averaged over {n_frames} frames ...")
    avg = average_frames(source, plane, probe="xray", method="exact", threads=threads, progress=progress)
    provenance = {"provenance": {
        "input_file": str(files["model"].resolve()), "frames": avg.frames, "probe": "xray",
        "grid": plane.describe(), "method": avg.total.metadata.get("method"), "tolerance": 0.0,
        "kinemap_version": __version__, "command": "kinemap demo",
        "scenario": "invented Al-Co decoration of an Ammann-Beenker vertex set with thermal jitter (demo data)",
    }}
    import datetime as _dt

    provenance["provenance"]["date"] = _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")
    files.update(avg.save(out / "plane", extra=provenance, overwrite=True))

    line = QGrid.line([0.0, 0.0, 0.0], [Q_MAX, 0.0, 0.0], line_points)
    lavg = average_frames(source, line, probe="xray", method="exact", threads=threads, progress=False)

    say("  drawing pictures ...")
    for name, pat in avg.parts().items():
        files[f"{name}_png"] = render(pat, out / f"plane_{name}.png", scale="log", overwrite=True,
                                      title=f"{name}: invented Al-Co octagonal layer, {n_frames} frames")
    fig = new_figure(6.4, 4.0)
    ax = fig.add_subplot()
    plot_profile(lavg.bragg, ax, scale="log", label="Bragg |<A>|^2")
    plot_profile(lavg.diffuse, ax, scale="log", label="diffuse <|A|^2> - |<A>|^2",
                 title="along q_x: Bragg peaks and the diffuse background rising with q")
    ax.set_ylabel("intensity (electrons²)")
    files["profile_png"] = save_figure(fig, out / "profile_qx.png")
    fig = new_figure(6.0, 6.0)
    ax = fig.add_subplot()
    m = frames[0]
    for lab, colour, size in (("Al", "#8fa3bf", 6), ("Co", "#c0392b", 9)):
        sel = m.species == lab
        ax.scatter(m.positions[sel, 0], m.positions[sel, 1], s=size, c=colour, label=lab, linewidths=0)
    ax.set_aspect("equal")
    ax.set_xlabel("x (Å)")
    ax.set_ylabel("y (Å)")
    ax.set_title("frame 0 of the demo model (invented Al-Co decoration)", fontsize=10)
    ax.legend(loc="upper right", markerscale=2)
    files["model_png"] = save_figure(fig, out / "model.png")

    dt = time.perf_counter() - t0
    say(f"done in {dt:.1f} s. Files in {out.resolve()}:")
    notes = {
        "model": "model, H5MD (kinemap info / kinemap map read it)",
        "total": "total <|A|^2> map, NeXus/HDF5",
        "bragg": "Bragg |<A>|^2 map (amplitude <A> kept), NeXus/HDF5",
        "diffuse": "diffuse <|A|^2> - |<A>|^2 map, NeXus/HDF5",
        "total_png": "picture of the total map",
        "bragg_png": "picture of the Bragg map",
        "diffuse_png": "picture of the diffuse map",
        "profile_png": "Bragg and diffuse profiles along q_x",
        "model_png": "picture of the atoms of frame 0",
    }
    for key, path in files.items():
        say(f"  {path}    {notes.get(key, '')}")
    say("next: kinemap info " + str(files["bragg"]) + "   |   kinemap render " + str(files["diffuse"])
        + " --scale linear -o diffuse_linear.png")
    return files


__all__ = ["run_demo", "build_frames"]
