//! The planner's sizing rules, in one place: which tolerances the gridded path reaches, the
//! oversampling factors it considers, kernel widths and fine-grid sizes. The plans use these
//! functions and the Python planner calls the same ones (through the bindings) to estimate
//! costs before it builds a plan, so the two cannot disagree.

use super::fft::next_smooth;
use super::kernel::{width_for, MAX_WIDTH};
use crate::error::{Error, Result};
use std::f64::consts::PI;

/// Tightest relative tolerance the gridded path accepts: rounding in the FFTs and
/// deconvolutions puts a floor near 1e-13 under the achieved error, so tighter requests must
/// use the exact sum.
pub const MIN_TOL: f64 = 1e-12;

/// Oversampling factors σ considered for regular grids (fine grid = σ × output grid per
/// axis), largest first. Each was checked to meet the tolerance for 1e-3 … 1e-12 (σ < 2 only
/// down to [`MIN_TOL_SMALL_SIGMA_REGULAR`]); σ = 1.75, 2.5 and 3 were not reliable with the
/// width rules and are left out.
pub const UPSAMPLE_REGULAR: [f64; 4] = [2.25, 2.0, 1.5, 1.25];
/// The same for arbitrary q-points (two approximation stages).
pub const UPSAMPLE_POINTS: [f64; 3] = [2.0, 1.5, 1.25];
/// Below this tolerance regular grids use only σ ≥ 2: at σ = 1.5 and tol 1e-12 the achieved
/// error reached 1.2·tol on 64³ and 128³ grids (the wide kernel's deconvolution amplifies
/// rounding).
pub const MIN_TOL_SMALL_SIGMA_REGULAR: f64 = 1e-10;
/// Below this tolerance arbitrary points use only σ ≥ 2 (measured as above, two stages).
pub const MIN_TOL_SMALL_SIGMA_POINTS: f64 = 1e-8;

/// Kernel width (grid points per axis) for a tolerance and σ; the arbitrary-point path splits
/// the budget between its two stages (spreading and interpolation). Not clamped.
pub fn kernel_width(tol: f64, upsample: f64, points: bool) -> usize {
    width_for(if points { 0.5 * tol } else { tol }, upsample)
}

/// True when the gridded path reaches `tol` at oversampling `upsample` (regular grids, or
/// arbitrary points when `points`).
pub fn usable(tol: f64, upsample: f64, points: bool) -> bool {
    let small = if points {
        MIN_TOL_SMALL_SIGMA_POINTS
    } else {
        MIN_TOL_SMALL_SIGMA_REGULAR
    };
    tol.is_finite()
        && (MIN_TOL..1.0).contains(&tol)
        && upsample.is_finite()
        && (1.2..=3.0).contains(&upsample)
        && (upsample >= 2.0 || tol >= small)
        && kernel_width(tol, upsample, points) <= MAX_WIDTH
}

/// Refuse a tolerance below [`MIN_TOL`] with the message the Python layer shows.
pub fn check_tol(tol: f64) -> Result<()> {
    if !(tol.is_finite() && tol > 0.0 && tol < 1.0) {
        return Err(Error::Range(format!(
            "tol must be a relative tolerance in (0, 1), got {tol}"
        )));
    }
    if tol < MIN_TOL {
        return Err(Error::Range(format!(
            "tol = {tol:e} is below what the gridded path reaches ({MIN_TOL:e}); use the exact sum"
        )));
    }
    Ok(())
}

/// Fine-grid points along an axis of `n` output points (regular grids) or of an `n`-point
/// spreading grid (the interpolation grid of arbitrary points): the smallest even 2,3,5-smooth
/// size ≥ max(σ·n, 2w) (see [`next_smooth`]).
pub fn fine_size(n: usize, upsample: f64, width: usize) -> usize {
    next_smooth(((upsample * n as f64).ceil() as usize).max(2 * width))
}

/// Spreading and interpolation grid sizes along one axis of the arbitrary-point path, for
/// atoms spanning `extent` Å and q-points spanning `qrange` Å⁻¹ along it (both > 0): with
/// half-widths X and S, `nf = next_smooth(max(2σXS/π + w + 1, 2w))` (the margins of Barnett,
/// Magland & af Klinteberg 2019) and `σ·nf` for the second grid.
pub fn point_axis(upsample: f64, width: usize, extent: f64, qrange: f64) -> Result<(usize, usize)> {
    let nfd = 2.0 * upsample * (0.5 * qrange) * (0.5 * extent) / PI + (width + 1) as f64;
    if nfd.is_nan() || nfd >= 1e9 {
        return Err(Error::Range(format!(
            "q-points span {qrange:.3e} 1/Å and atoms {extent:.3e} Å along an axis: too large \
             for the gridded path"
        )));
    }
    let nf = next_smooth((nfd.ceil() as usize).max(2 * width));
    Ok((nf, fine_size(nf, upsample, width)))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sizes_follow_the_smooth_rule() {
        // Hand-checked: 2·100 = 200 = 2³·5² (even, 5-smooth); 2.25·128 = 288 = 2⁵·3²;
        // 2·128 = 256 is a multiple of 64 above 128 and is skipped for 270 = 2·3³·5;
        // 2w = 14 = 2·7 is not 5-smooth, 16 is.
        assert_eq!(fine_size(100, 2.0, 7), 200);
        assert_eq!(fine_size(128, 2.25, 7), 288);
        assert_eq!(fine_size(128, 2.0, 7), 270);
        assert_eq!(fine_size(3, 2.0, 7), 16);
    }

    #[test]
    fn the_reachable_range_is_one_rule() {
        // The documented limits, measured with benchmarks/bench_gridded.py and the tolerance
        // tests: 1e-12 overall, σ < 2 only down to 1e-10 (regular) and 1e-8 (points).
        assert!(usable(1e-6, 2.0, false) && usable(1e-12, 2.0, false));
        assert!(!usable(0.9e-12, 2.0, false));
        assert!(!usable(1e-11, 1.5, false) && usable(1e-10, 1.5, false));
        assert!(!usable(1e-9, 1.5, true) && usable(1e-8, 1.5, true));
        assert!(check_tol(1e-13)
            .unwrap_err()
            .to_string()
            .contains("exact sum"));
    }
}
