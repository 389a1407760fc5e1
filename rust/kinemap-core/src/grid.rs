//! Exact sum on regular grids by phase stepping.
//!
//! Along a grid row q_k = q_0 + k·Δq, so exp(i q_k·r) = exp(i q_0·r)·exp(i Δq·r)^k: one complex
//! multiply per atom–q pair instead of a sincos. The step factors exp(i Δq·r_j) are computed
//! once per call; the running phase is re-anchored with a fresh sincos every [`ANCHOR`] steps,
//! which keeps the accumulated rounding drift near `ANCHOR · 2⁻⁵³` relative (measured against
//! the C library's sin/cos in the tests: below 1e-13). Rows are cut into segments of
//! [`ANCHOR`] points, the unit of parallel work; every q-point is summed by one thread in a
//! fixed atom order, so results do not depend on the thread count.
//!
//! The hot loop keeps 4 (AVX-512), 2 (AVX2) or 1 (baseline) vectors of [`LANES`] atoms in
//! registers and, per step, adds them to the point's accumulators and advances each by a
//! three-multiply complex product (see `stepping_run`). It is written with the explicit
//! vector types of `simd.rs`: written as loops over lane arrays, LLVM once spilled the
//! phases to memory (15× slower) and once vectorised across the interleaved vectors
//! (gathers and scatters, 10× slower). The code of every level was checked with objdump.

use crate::atoms::{AtomSet, BLOCK};
use crate::dispatch::{kernel_level, multiversion, Level};
use crate::error::{Error, Result};
use crate::point::{check_factors, check_phase_range, check_vectors, lane_sum};
use crate::simd::F8;
use crate::sincos::{sincos_v, LANES};
use num_complex::Complex64;
use rayon::prelude::*;

/// Steps between fresh sincos anchors of the phase recurrence (and points per parallel task).
pub const ANCHOR: usize = 64;

/// Vectors of [`LANES`] atoms interleaved in the stepping loop, per level (AVX-512 has 32
/// vector registers, AVX2 and SSE2 16 of half and a quarter the width).
const VECS_V4: usize = 4;
const VECS_V3: usize = 2;
const VECS_BASE: usize = 1;
const _: () =
    assert!(BLOCK.is_multiple_of(VECS_V4 * LANES) && BLOCK.is_multiple_of(VECS_V3 * LANES));

/// Amplitudes on `rows.len()` rows of `n` points each: point `k` of row `r` is
/// `rows[r] + k·step`. Output and `factors` (per group) are row-major `(rows, n)`.
/// Uses the kernel level of [`kernel_level`].
pub fn grid_amplitudes(
    atoms: &AtomSet,
    rows: &[[f64; 3]],
    step: [f64; 3],
    n: usize,
    factors: &[Complex64],
    threads: Option<usize>,
) -> Result<Vec<Complex64>> {
    grid_amplitudes_at(kernel_level()?, atoms, rows, step, n, factors, threads)
}

/// [`grid_amplitudes`] with the kernels of a chosen level (refused when this CPU lacks it).
pub fn grid_amplitudes_at(
    level: Level,
    atoms: &AtomSet,
    rows: &[[f64; 3]],
    step: [f64; 3],
    n: usize,
    factors: &[Complex64],
    threads: Option<usize>,
) -> Result<Vec<Complex64>> {
    let level = level.check()?;
    if n == 0 {
        return Err(Error::Range(
            "points per row must be at least 1, got 0".into(),
        ));
    }
    if !(step[0].is_finite() && step[1].is_finite() && step[2].is_finite()) {
        return Err(Error::NonFinite(format!(
            "grid step is not finite: [{}, {}, {}]",
            step[0], step[1], step[2]
        )));
    }
    let m = rows
        .len()
        .checked_mul(n)
        .ok_or_else(|| Error::Range("grid too large".into()))?;
    check_vectors(rows, "grid row")?;
    check_factors(factors, atoms.n_groups(), m)?;
    // |q| is convex along a row, so its largest value is at one of the row's ends.
    let norm = |v: [f64; 3]| (v[0] * v[0] + v[1] * v[1] + v[2] * v[2]).sqrt();
    let last = (n - 1) as f64;
    let q_max = rows.iter().fold(norm(step), |acc, r| {
        let end = [
            r[0] + last * step[0],
            r[1] + last * step[1],
            r[2] + last * step[2],
        ];
        acc.max(norm(*r)).max(norm(end))
    });
    check_phase_range(q_max, atoms.max_norm())?;
    let mut out = crate::alloc::filled(m, Complex64::new(0.0, 0.0), "the grid amplitudes")?;
    if m == 0 {
        return Ok(out);
    }
    let len = atoms.x.len();
    let mut e = crate::alloc::filled(3 * len / LANES, [0.0; LANES], "the phase step factors")?;
    crate::pool::run(threads, || {
        e.par_chunks_mut(3 * BLOCK / LANES)
            .enumerate()
            .for_each(|(b, eb)| step_factors(level, atoms, b * BLOCK, step, eb));
        let e = &e[..];
        out.par_chunks_mut(n)
            .enumerate()
            .flat_map(|(r, row_out)| {
                row_out
                    .par_chunks_mut(ANCHOR)
                    .enumerate()
                    .map(move |(si, seg)| (r, si * ANCHOR, seg))
            })
            .for_each(|(r, k0, seg)| {
                let origin = rows[r];
                let q0 = [
                    origin[0] + k0 as f64 * step[0],
                    origin[1] + k0 as f64 * step[1],
                    origin[2] + k0 as f64 * step[2],
                ];
                let mut acc = [[[0.0; LANES]; 2]; ANCHOR];
                segment(level, atoms, e, q0, factors, m, r * n + k0, seg, &mut acc);
            });
    })?;
    Ok(out)
}

multiversion!(
    /// Step factors of one block of atoms: `exp(i Δq·r_j) = c + i s` stored as `c`, `c + s`
    /// and `s − c` (the three-multiply complex product of [`stepping_run`]).
    fn step_factors => step_factors_k(
        atoms: &AtomSet,
        start: usize,
        step: [f64; 3],
        e: &mut [[f64; LANES]],
    )
);

#[inline(always)]
fn step_factors_k<V: F8>(atoms: &AtomSet, start: usize, step: [f64; 3], e: &mut [[f64; LANES]]) {
    let (xs, ys, zs) = (lanes(&atoms.x), lanes(&atoms.y), lanes(&atoms.z));
    let (sx, sy, sz) = (V::splat(step[0]), V::splat(step[1]), V::splat(step[2]));
    for (v, ev) in e.chunks_exact_mut(3).enumerate() {
        let j = start / LANES + v;
        let ph = sz.mul_add(
            V::load(&zs[j]),
            sy.mul_add(V::load(&ys[j]), sx.mul(V::load(&xs[j]))),
        );
        let (s, c) = sincos_v(ph);
        c.store(&mut ev[0]);
        c.add(s).store(&mut ev[1]);
        s.sub(c).store(&mut ev[2]);
    }
}

/// A padded atom array as vectors of [`LANES`] (its length is a multiple of [`BLOCK`]).
#[inline(always)]
pub(crate) fn lanes(a: &[f64]) -> &[[f64; LANES]] {
    a.as_chunks::<LANES>().0
}

multiversion!(
    /// One segment of at most [`ANCHOR`] points of a row starting at `q0`, over all groups:
    /// `out[i] += F[g, flat0 + i] Σ_{j∈g} w_j exp(i (q0 + i Δq)·r_j)`.
    fn segment => segment_k [VECS_V4, VECS_V3, VECS_BASE] (
        atoms: &AtomSet,
        e: &[[f64; LANES]],
        q0: [f64; 3],
        factors: &[Complex64],
        m: usize,
        flat0: usize,
        out: &mut [Complex64],
        acc: &mut [[[f64; LANES]; 2]; ANCHOR],
    )
);

#[allow(clippy::too_many_arguments)]
#[inline(always)]
fn segment_k<V: F8, const U: usize>(
    atoms: &AtomSet,
    e: &[[f64; LANES]],
    q0: [f64; 3],
    factors: &[Complex64],
    m: usize,
    flat0: usize,
    out: &mut [Complex64],
    acc: &mut [[[f64; LANES]; 2]; ANCHOR],
) {
    let len = out.len();
    let acc = &mut acc[..len];
    let (xs, ys, zs, ws) = (
        lanes(&atoms.x),
        lanes(&atoms.y),
        lanes(&atoms.z),
        lanes(&atoms.w),
    );
    let (qx, qy, qz) = (V::splat(q0[0]), V::splat(q0[1]), V::splat(q0[2]));
    for g in 0..atoms.n_groups() {
        let range = atoms.range(g);
        if range.is_empty() {
            continue;
        }
        for a in acc.iter_mut() {
            *a = [[0.0; LANES]; 2];
        }
        for b in (range.start / LANES..range.end / LANES).step_by(U) {
            // Anchor: p = w exp(i q0·r).
            let mut p_re = [V::splat(0.0); U];
            let mut p_im = [V::splat(0.0); U];
            for u in 0..U {
                let j = b + u;
                let ph = qz.mul_add(
                    V::load(&zs[j]),
                    qy.mul_add(V::load(&ys[j]), qx.mul(V::load(&xs[j]))),
                );
                let (s, c) = sincos_v(ph);
                let w = V::load(&ws[j]);
                p_re[u] = w.mul(c);
                p_im[u] = w.mul(s);
            }
            stepping_run::<V, U>(acc, p_re, p_im, &e[3 * b..3 * (b + U)]);
        }
        for (o, (i, a)) in out.iter_mut().zip(acc.iter().enumerate()) {
            let sum = Complex64::new(lane_sum(&a[0]), lane_sum(&a[1]));
            *o += factors[g * m + flat0 + i] * sum;
        }
    }
}

/// The hot loop: for each step, add the current phases of all interleaved atom vectors to the
/// accumulators, then advance every phase by its step factor `c + i s` with three multiplies
/// (Gauss): `k = c (p_re + p_im)`, `p_re' = k − p_im (c + s)`, `p_im' = k + p_re (s − c)`.
/// That moves one of the four multiplies of the plain product to an addition, which runs on
/// separate pipes on CPUs that have them (Zen 4); the rounding error per step stays a few
/// units of 2⁻⁵³ relative, as for the plain product.
#[inline(always)]
fn stepping_run<V: F8, const U: usize>(
    acc: &mut [[[f64; LANES]; 2]],
    mut p_re: [V; U],
    mut p_im: [V; U],
    e: &[[f64; LANES]],
) {
    let mut ec = [V::splat(0.0); U];
    let mut ea = [V::splat(0.0); U];
    let mut eb = [V::splat(0.0); U];
    for u in 0..U {
        ec[u] = V::load(&e[3 * u]);
        ea[u] = V::load(&e[3 * u + 1]);
        eb[u] = V::load(&e[3 * u + 2]);
    }
    for a in acc.iter_mut() {
        let mut sr = V::load(&a[0]);
        let mut si = V::load(&a[1]);
        for u in 0..U {
            sr = sr.add(p_re[u]);
            si = si.add(p_im[u]);
        }
        sr.store(&mut a[0]);
        si.store(&mut a[1]);
        for u in 0..U {
            let k = ec[u].mul(p_re[u].add(p_im[u]));
            let re = p_im[u].neg_mul_add(ea[u], k);
            let im = p_re[u].mul_add(eb[u], k);
            p_re[u] = re;
            p_im[u] = im;
        }
    }
}
