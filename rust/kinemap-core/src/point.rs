//! Exact sum on arbitrary q-points: one vectorised sincos per atom–q pair.
//!
//! Work is split over blocks of q-points (each q is summed by one thread over all atoms in a
//! fixed order), so results are bit-identical for any thread count. Atoms are visited in tiles
//! that stay in cache while a whole q-block passes over them.

use crate::atoms::AtomSet;
use crate::dispatch::{kernel_level, multiversion, Level};
use crate::error::{Error, Result};
use crate::grid::lanes;
use crate::simd::F8;
use crate::sincos::{sincos_v, LANES, MAX_PHASE};
use num_complex::Complex64;
use rayon::prelude::*;

/// q-points handled together by one task.
const Q_BLOCK: usize = 16;
/// Atoms per cache tile (4 arrays × 8 bytes × 1024 = 32 KiB).
const TILE: usize = 1024;

/// Check that every vector is finite; `what` names them in the message ("q-point", "grid row").
pub(crate) fn check_vectors(v: &[[f64; 3]], what: &str) -> Result<()> {
    for (i, q) in v.iter().enumerate() {
        if !(q[0].is_finite() && q[1].is_finite() && q[2].is_finite()) {
            return Err(Error::NonFinite(format!(
                "{what} {i} is not finite: [{}, {}, {}]",
                q[0], q[1], q[2]
            )));
        }
    }
    Ok(())
}

/// Check the factor table: row-major `(n_groups, m)`, every value finite.
pub(crate) fn check_factors(factors: &[Complex64], n_groups: usize, m: usize) -> Result<()> {
    if n_groups.checked_mul(m) != Some(factors.len()) {
        return Err(Error::Shape(format!(
            "factors must have shape (n_groups, n_points) = ({n_groups}, {m}), got {} values",
            factors.len()
        )));
    }
    for (i, f) in factors.iter().enumerate() {
        if !(f.re.is_finite() && f.im.is_finite()) {
            return Err(Error::NonFinite(format!(
                "factor of group {} at point {} is not finite: {f}",
                i / m,
                i % m
            )));
        }
    }
    Ok(())
}

/// Refuse phases beyond [`MAX_PHASE`]: `q_max` is the largest |q| of the call (Å⁻¹) and
/// `r_max` the largest distance of an atom from the origin (Å), so |q·r| ≤ q_max·r_max.
pub(crate) fn check_phase_range(q_max: f64, r_max: f64) -> Result<()> {
    let bound = q_max * r_max;
    if bound > MAX_PHASE {
        return Err(Error::Range(format!(
            "phases q·r can reach {bound:.3e} rad (largest |q| {q_max:.4e} 1/Å, largest \
             atom distance from the origin {r_max:.4e} Å), beyond the {MAX_PHASE:.0e} rad for \
             which the sincos of the kernels is accurate; move the model's origin into the \
             model or use smaller coordinates"
        )));
    }
    Ok(())
}

/// Amplitudes `A(q_m) = Σ_g F[g, m] Σ_{j in g} w_j exp(i q_m·r_j)` at arbitrary q-points.
///
/// `factors` is row-major `(n_groups, q.len())`. Returns one amplitude per q-point. Uses the
/// kernel level of [`kernel_level`].
pub fn point_amplitudes(
    atoms: &AtomSet,
    q: &[[f64; 3]],
    factors: &[Complex64],
    threads: Option<usize>,
) -> Result<Vec<Complex64>> {
    point_amplitudes_at(kernel_level()?, atoms, q, factors, threads)
}

/// [`point_amplitudes`] with the kernels of a chosen level (refused when this CPU lacks it).
pub fn point_amplitudes_at(
    level: Level,
    atoms: &AtomSet,
    q: &[[f64; 3]],
    factors: &[Complex64],
    threads: Option<usize>,
) -> Result<Vec<Complex64>> {
    let level = level.check()?;
    check_vectors(q, "q-point")?;
    check_factors(factors, atoms.n_groups(), q.len())?;
    let q_max = q
        .iter()
        .map(|v| (v[0] * v[0] + v[1] * v[1] + v[2] * v[2]).sqrt())
        .fold(0.0, f64::max);
    check_phase_range(q_max, atoms.max_norm())?;
    let m = q.len();
    let mut out = crate::alloc::filled(m, Complex64::new(0.0, 0.0), "the amplitudes")?;
    crate::pool::run(threads, || {
        out.par_chunks_mut(Q_BLOCK)
            .enumerate()
            .for_each(|(b, out_block)| {
                let q0 = b * Q_BLOCK;
                point_block(
                    level,
                    atoms,
                    &q[q0..q0 + out_block.len()],
                    factors,
                    m,
                    q0,
                    out_block,
                );
            });
    })?;
    Ok(out)
}

multiversion!(
    /// The amplitudes of one block of at most [`Q_BLOCK`] q-points starting at `q_first`.
    fn point_block => point_block_k(
        atoms: &AtomSet,
        q: &[[f64; 3]],
        factors: &[Complex64],
        m: usize,
        q_first: usize,
        out: &mut [Complex64],
    )
);

#[inline(always)]
fn point_block_k<V: F8>(
    atoms: &AtomSet,
    q: &[[f64; 3]],
    factors: &[Complex64],
    m: usize,
    q_first: usize,
    out: &mut [Complex64],
) {
    let nq = q.len();
    let (xs, ys, zs, ws) = (
        lanes(&atoms.x),
        lanes(&atoms.y),
        lanes(&atoms.z),
        lanes(&atoms.w),
    );
    for g in 0..atoms.n_groups() {
        let range = atoms.range(g);
        if range.is_empty() {
            continue;
        }
        let mut acc = [[[0.0f64; LANES]; 2]; Q_BLOCK];
        let (v0, v1) = (range.start / LANES, range.end / LANES);
        let mut tile_start = v0;
        while tile_start < v1 {
            let tile_end = (tile_start + TILE / LANES).min(v1);
            let t = tile_start..tile_end;
            for (qi, qv) in q.iter().enumerate() {
                tile_sum::<V>(
                    &xs[t.clone()],
                    &ys[t.clone()],
                    &zs[t.clone()],
                    &ws[t.clone()],
                    qv,
                    &mut acc[qi],
                );
            }
            tile_start = tile_end;
        }
        for qi in 0..nq {
            let sum = Complex64::new(lane_sum(&acc[qi][0]), lane_sum(&acc[qi][1]));
            out[qi] += factors[g * m + q_first + qi] * sum;
        }
    }
}

/// Add `w exp(i q·r)` of one tile of atoms to the lane accumulators of one q-point. The
/// accumulators are held in registers for the whole tile.
#[inline(always)]
fn tile_sum<V: F8>(
    xs: &[[f64; LANES]],
    ys: &[[f64; LANES]],
    zs: &[[f64; LANES]],
    ws: &[[f64; LANES]],
    qv: &[f64; 3],
    acc: &mut [[f64; LANES]; 2],
) {
    let (qx, qy, qz) = (V::splat(qv[0]), V::splat(qv[1]), V::splat(qv[2]));
    let (mut ar, mut ai) = (V::load(&acc[0]), V::load(&acc[1]));
    for (((x, y), z), w) in xs.iter().zip(ys).zip(zs).zip(ws) {
        let ph = qz.mul_add(V::load(z), qy.mul_add(V::load(y), qx.mul(V::load(x))));
        let (s, c) = sincos_v(ph);
        let w = V::load(w);
        ar = w.mul_add(c, ar);
        ai = w.mul_add(s, ai);
    }
    ar.store(&mut acc[0]);
    ai.store(&mut acc[1]);
}

/// Sum of the lanes in a fixed pairwise order.
#[inline(always)]
pub(crate) fn lane_sum(v: &[f64; LANES]) -> f64 {
    ((v[0] + v[4]) + (v[2] + v[6])) + ((v[1] + v[5]) + (v[3] + v[7]))
}
