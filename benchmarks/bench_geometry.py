"""Expected counts on detector frames: what the geometry adds to the structure-factor sums.

A model of N random atoms (default 20 000, X-ray form factors of Fe) on a 128×128 detector,
one frame of a rotation series with s = 2 sub-pixels per edge and m = 3 sub-angles, so
128·128·4·3 = 196 608 q-points. Reported side by side, in one run:

* ``km.scatter`` on the same q-points as one ``QGrid.points`` (the sums alone),
* ``km.expected_counts`` (geometry, sub-sampling, solid angle, polarisation, blocks),

and their ratio: the overhead of the geometry layer. Also the time of
``QGrid.rotation`` for 90 frames of 128×128 pixels (no sums) and of ``bin_frames`` binning
those 90 frames into a 101³ hkl volume.

Run:  python benchmarks/bench_geometry.py            (about half a minute on 2 cores)
      python benchmarks/bench_geometry.py --atoms 2000
"""

from __future__ import annotations

import argparse
import time

import numpy as np

import kinemap as km
from kinemap.geometry import rotation_matrix


def _median_time(fn, repeat: int) -> float:
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return float(np.median(times))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--atoms", type=int, default=20_000)
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args()

    rng = np.random.default_rng(0)
    a = 4.0
    model = km.Model(rng.uniform(0, 60.0, (args.atoms, 3)), "Fe", cell=np.eye(3) * a)
    det = km.Detector(shape=(128, 128), pixel_size=0.172, distance=120.0, beam_center=(64.0, -40.0), wavelength=0.7)
    axis, phi, width, s, m = [0.0, 1.0, 0.0], 10.0, 0.5, 2, 3

    # the same sub-sampled q-points, built here independently of expected_counts
    offs = (np.arange(s) + 0.5) / s - 0.5
    dv, du = (x.ravel() for x in np.meshgrid(offs, offs, indexing="ij"))
    rr = np.arange(128.0)[:, None, None] + dv
    cc = np.arange(128.0)[None, :, None] + du
    q_lab = det.q_lab(*np.broadcast_arrays(rr, cc))
    sub = phi + ((np.arange(m) + 0.5) / m - 0.5) * width
    q = np.concatenate([q_lab.reshape(-1, 3) @ rotation_matrix(axis, p) for p in sub])
    grid = km.QGrid.points(q)
    n_q = len(q)

    t_sum = _median_time(lambda: km.scatter(model, grid, probe="xray", method="exact"), args.repeat)
    t_exp = _median_time(lambda: km.expected_counts(model, det, axis=axis, angles=[phi], width=width,
                                                    pixel_subsamples=s, angle_subsamples=m), args.repeat)
    print(f"{args.atoms} atoms, {n_q} sub-sampled q-points (128x128 pixels, s={s}, m={m})")
    print(f"{'km.scatter on the q-points':<40s} {t_sum:8.3f} s   {args.atoms * n_q / t_sum:.3g} pairs/s")
    print(f"{'km.expected_counts (one frame)':<40s} {t_exp:8.3f} s   ratio {t_exp / t_sum:.3f}")

    angles = np.arange(90) * 1.0
    t_grid = _median_time(lambda: km.QGrid.rotation(det, axis, angles), args.repeat)
    frames = rng.poisson(5.0, (90, 128, 128)).astype(np.float64)
    vol = km.QGrid.hkl(model.cell, h=(-3, 3, 101), k=(-3, 3, 101), l=(-3, 3, 101))
    t_bin = _median_time(lambda: km.bin_frames(frames, det, grid=vol, axis=axis, angles=angles), args.repeat)
    print(f"{'QGrid.rotation, 90 frames':<40s} {t_grid:8.3f} s   {90 * 128 * 128 / t_grid:.3g} pixels/s")
    print(f"{'bin_frames, 90 frames into 101^3':<40s} {t_bin:8.3f} s   {90 * 128 * 128 / t_bin:.3g} pixels/s")


if __name__ == "__main__":
    main()
