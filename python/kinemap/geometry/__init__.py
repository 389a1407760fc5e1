"""Detector geometry: pixels ↔ q, corrections, rotation series, frames into maps.

Lab frame, right-handed: z along the beam, x along increasing detector column, y along
increasing row (untilted detector, image seen from the sample); an integer pixel index is the
pixel's centre. ``q_lab = k(p̂ − ẑ)`` with k = 2π/λ; an orientation R turns sample
coordinates into lab coordinates, ``q_sample = Rᵀ q_lab``; a goniometer turns the sample
to ``R(φ) = Rot(â, φ)·R0``. Lengths in mm, wavelengths in Å, angles in degrees.

Modules: :mod:`.detector` (Detector), :mod:`.orientation` (rotations, UB matrices, Ewald
crossings, Lorentz factor), :mod:`.series` (q of frames, expected counts, predicted
reflections), :mod:`.binning` (frames into hkl maps), :mod:`.images` (frame files).
"""

from .binning import bin_frames
from .detector import Detector
from .images import FrameStack, read_frames, write_frames
from .orientation import (
                          busing_levy_b,
                          check_rotation,
                          crossing_angles,
                          lorentz_factor,
                          orientation_from_ub,
                          rotation_matrix,
                          tilt_matrix,
                          ub_from_orientation,
)
from .series import detector_grid, expected_counts, frame_width, predict_reflections, rotation_grid

__all__ = ["Detector", "expected_counts", "predict_reflections", "detector_grid", "rotation_grid", "frame_width",
           "bin_frames", "FrameStack", "read_frames", "write_frames", "rotation_matrix", "tilt_matrix",
           "check_rotation", "busing_levy_b", "orientation_from_ub", "ub_from_orientation", "crossing_angles",
           "lorentz_factor"]
