//! Spreading weighted points onto a periodic fine grid, and its adjoint, interpolation.
//!
//! The fine grid is a row-major array of `dims = [n0, n1, n2]` complex values; lines and
//! planes use trivial axes of length 1 (`[n, 1, 1]` and `[n0, 1, n2]`) so one code path serves
//! 1, 2 and 3 dimensions with the contiguous axis innermost. A point at grid coordinate
//! `(g0, g1, g2)` (in grid spacings, any real value, taken modulo `n_a`) adds
//! `c · Π_a φ_a(l_a − g_a)` to the `w0 × w1 × w2` points `l_a = ⌈g_a − w_a/2⌉ + i`.
//!
//! Parallel spreading without data races, and with a result that does not depend on the
//! thread count: axes 0 and 1 are cut into an even number of slabs at least `w` points thick
//! (a checkerboard of tiles), so a point whose first grid point lies in tile `(s0, s1)` only
//! writes into tiles `s0..=s0+1 × s1..=s1+1`. Points are sorted (stable counting sort) by
//! tile and, inside a tile, by small bins for cache reuse. The tiles are spread in four
//! phases by the parities of `(s0, s1)`; within a phase the tasks' footprints are disjoint
//! and each task adds its points in sorted order. Every grid value therefore receives its
//! contributions in one fixed order, whatever the number of threads.

use super::kernel::{first_point, Kernel, MAX_WIDTH};
use crate::alloc::filled;
use crate::dispatch::{multiversion, Level};
use crate::error::Result;
use crate::simd::{fma, F8};
use num_complex::Complex64;
use rayon::prelude::*;

/// Shape of a fine grid and the kernel width along each of its axes (1 on trivial axes).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Layout {
    /// Grid points along each axis (row-major, axis 2 contiguous).
    pub dims: [usize; 3],
    /// Kernel width along each axis (`w`, or 1 where `dims[a] == 1`).
    pub widths: [usize; 3],
}

impl Layout {
    /// A layout for grid `dims` with kernel width `w` on every axis longer than 1.
    pub fn new(dims: [usize; 3], w: usize) -> Self {
        let widths = dims.map(|n| if n > 1 { w } else { 1 });
        Layout { dims, widths }
    }

    /// Number of grid points.
    pub fn len(&self) -> usize {
        self.dims[0] * self.dims[1] * self.dims[2]
    }

    /// True when the grid has no points (never for a valid layout).
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
}

/// Bin sizes along axes 1 and 2 for the cache-friendly order inside a tile.
const BIN1: usize = 4;
const BIN2: usize = 16;

/// Per-axis first grid point (wrapped into `0..n`) and kernel values of one point.
#[inline(always)]
fn axis_setup<V: F8>(ker: &Kernel, g: f64, n: usize, w: usize, k: &mut [f64; MAX_WIDTH]) -> usize {
    if n == 1 {
        *k = [0.0; MAX_WIDTH];
        k[0] = 1.0;
        return 0;
    }
    let (l0, t) = first_point(g, w);
    ker.eval_with::<V>(t, k);
    l0.rem_euclid(n as i64) as usize
}

/// Slab partition of axis `a`: `(thickness, count)`; `count` is even or 1.
fn slabs(lay: &Layout, a: usize) -> (usize, usize) {
    let n = lay.dims[a];
    let t = lay.widths[a].max(8);
    let mut s = n / t;
    if s % 2 == 1 {
        s -= 1;
    }
    if s < 2 {
        (n, 1)
    } else {
        (t, s)
    }
}

/// Slab of a first grid point `i` along an axis partitioned as `(thick, count)`.
#[inline(always)]
fn slab_of(i: usize, thick: usize, count: usize) -> usize {
    (i / thick).min(count - 1)
}

/// View a complex slice as interleaved `re, im` doubles.
#[inline(always)]
fn as_f64_mut(v: &mut [Complex64]) -> &mut [f64] {
    // SAFETY: `Complex<f64>` is `#[repr(C)]` with exactly two `f64` fields (re, im), so a slice
    // of n complex values is a valid, aligned slice of 2n doubles with the same lifetime.
    unsafe { std::slice::from_raw_parts_mut(v.as_mut_ptr() as *mut f64, 2 * v.len()) }
}

#[inline(always)]
fn as_f64(v: &[Complex64]) -> &[f64] {
    // SAFETY: as in `as_f64_mut`: the layout of `Complex<f64>` is two consecutive doubles.
    unsafe { std::slice::from_raw_parts(v.as_ptr() as *const f64, 2 * v.len()) }
}

/// Raw pointer to the grid (interleaved doubles) shared by the spreading tasks of one phase.
#[derive(Clone, Copy)]
struct GridPtr(*mut f64, usize);
// SAFETY: used only inside `spread`, where the tasks of one phase write pairwise disjoint sets
// of grid points (see the module notes) while the grid is exclusively borrowed.
unsafe impl Send for GridPtr {}
// SAFETY: as above.
unsafe impl Sync for GridPtr {}

/// Add `c · φ ⊗ φ ⊗ φ` of the points `g` with weights `c` to the grid behind `grid`.
///
/// # Safety
/// `grid` must point to `2·lay.len()` valid doubles, and no other thread may access the
/// points these atoms' kernels cover while this runs.
#[inline(always)]
unsafe fn spread_points<V: F8, const W: usize>(
    grid: GridPtr,
    lay: &Layout,
    ker: &Kernel,
    g: &[[f64; 3]],
    c: &[Complex64],
) {
    let [n0, n1, n2] = lay.dims;
    let [w0, w1, _] = lay.widths;
    let plane = 2 * n1 * n2;
    let (mut k0, mut k1, mut k2) = ([0.0; MAX_WIDTH], [0.0; MAX_WIDTH], [0.0; MAX_WIDTH]);
    let mut kc = [0.0f64; 2 * MAX_WIDTH];
    let mut rows = [0usize; MAX_WIDTH];
    for (gp, cj) in g.iter().zip(c) {
        let i0 = axis_setup::<V>(ker, gp[0], n0, w0, &mut k0);
        let i1 = axis_setup::<V>(ker, gp[1], n1, w1, &mut k1);
        let i2 = axis_setup::<V>(ker, gp[2], n2, W, &mut k2);
        for i in 0..W {
            kc[2 * i] = cj.re * k2[i];
            kc[2 * i + 1] = cj.im * k2[i];
        }
        for (b, r) in rows.iter_mut().enumerate().take(w1) {
            let mut y = i1 + b;
            if y >= n1 {
                y -= n1;
            }
            *r = 2 * y * n2;
        }
        let contiguous = i2 + W <= n2;
        for (a, &ka) in k0.iter().enumerate().take(w0) {
            let mut p = i0 + a;
            if p >= n0 {
                p -= n0;
            }
            let base = p * plane;
            for b in 0..w1 {
                let f = ka * k1[b];
                if contiguous {
                    let o = base + rows[b] + 2 * i2;
                    debug_assert!(o + 2 * W <= grid.1);
                    // SAFETY: o + 2W ≤ 2·len (indices wrapped into the grid, contiguous run
                    // checked above); exclusive access by the caller's contract.
                    let row = unsafe { std::slice::from_raw_parts_mut(grid.0.add(o), 2 * W) };
                    for i in 0..2 * W {
                        row[i] = fma::<V>(f, kc[i], row[i]);
                    }
                } else {
                    for i in 0..W {
                        let mut z = i2 + i;
                        if z >= n2 {
                            z -= n2;
                        }
                        let o = base + rows[b] + 2 * z;
                        debug_assert!(o + 2 <= grid.1);
                        // SAFETY: as above, for one wrapped point.
                        unsafe {
                            *grid.0.add(o) = fma::<V>(f, kc[2 * i], *grid.0.add(o));
                            *grid.0.add(o + 1) = fma::<V>(f, kc[2 * i + 1], *grid.0.add(o + 1));
                        }
                    }
                }
            }
        }
    }
}

/// Points per block of the parallel counting sort.
const SORT_BLOCK: usize = 1 << 16;

/// Raw pointer to the sort's output arrays (disjoint writes, see `sort_points`).
#[derive(Clone, Copy)]
struct SortPtr(*mut f64);
// SAFETY: only used in `sort_points`, where every destination is written by exactly one task.
unsafe impl Send for SortPtr {}
// SAFETY: as above.
unsafe impl Sync for SortPtr {}

/// Points sorted for spreading: grid coordinates, weights, and the start of every tile's run.
type Sorted = (Vec<[f64; 3]>, Vec<Complex64>, Vec<usize>);

/// Sort points by tile and bin (stable counting sort); returns the sorted coordinates and
/// weights and the start of every tile's run (tiles in row-major `(s0, s1)` order).
fn sort_points(
    lay: &Layout,
    g: &[[f64; 3]],
    c: &[Complex64],
    part0: (usize, usize),
    part1: (usize, usize),
) -> Result<Sorted> {
    let [n0, n1, n2] = lay.dims;
    let max1 = if part1.1 == 1 {
        n1
    } else {
        n1 - (part1.1 - 1) * part1.0
    };
    let nb1 = max1.div_ceil(BIN1);
    let nb2 = n2.div_ceil(BIN2);
    let per_tile = nb1 * nb2;
    let n_tiles = part0.1 * part1.1;
    let first = |x: f64, n: usize, w: usize| -> usize {
        if n == 1 {
            0
        } else {
            first_point(x, w).0.rem_euclid(n as i64) as usize
        }
    };
    let mut keys = filled(g.len(), 0u32, "the spreading sort keys")?;
    keys.par_iter_mut()
        .zip(g.par_iter())
        .with_min_len(4096)
        .for_each(|(k, p)| {
            let s0 = slab_of(first(p[0], n0, lay.widths[0]), part0.0, part0.1);
            let i1 = first(p[1], n1, lay.widths[1]);
            let s1 = slab_of(i1, part1.0, part1.1);
            let b1 = (i1 - s1 * part1.0) / BIN1;
            let b2 = first(p[2], n2, lay.widths[2]) / BIN2;
            *k = (((s0 * part1.1 + s1) * nb1 + b1) * nb2 + b2) as u32;
        });
    let n_bins = n_tiles * per_tile;
    // Stable counting sort, parallel over a fixed number of point blocks (not the thread
    // count): per-block histograms, offsets in (bin, block) order, then each block scatters
    // its points to its own destinations.
    let n = g.len();
    let n_blocks = n.div_ceil(SORT_BLOCK).max(1);
    let mut hist = filled(n_blocks * n_bins, 0u32, "the spreading sort histograms")?;
    hist.par_chunks_mut(n_bins)
        .zip(keys.par_chunks(SORT_BLOCK))
        .for_each(|(h, ks)| {
            for &k in ks {
                h[k as usize] += 1;
            }
        });
    let mut offsets = filled(n_blocks * n_bins, 0usize, "the spreading sort offsets")?;
    let mut tile_start = filled(n_tiles + 1, 0usize, "the spreading tiles")?;
    let mut acc = 0usize;
    for b in 0..n_bins {
        if b % per_tile == 0 {
            tile_start[b / per_tile] = acc;
        }
        for blk in 0..n_blocks {
            offsets[blk * n_bins + b] = acc;
            acc += hist[blk * n_bins + b] as usize;
        }
    }
    drop(hist);
    tile_start[n_tiles] = acc;
    let mut gs = filled(n, [0.0; 3], "the sorted grid coordinates")?;
    let mut cs = filled(n, Complex64::new(0.0, 0.0), "the sorted weights")?;
    let (gp, cp) = (
        SortPtr(gs.as_mut_ptr() as *mut f64),
        SortPtr(cs.as_mut_ptr() as *mut f64),
    );
    offsets
        .par_chunks_mut(n_bins)
        .zip(
            keys.par_chunks(SORT_BLOCK)
                .zip(g.par_chunks(SORT_BLOCK).zip(c.par_chunks(SORT_BLOCK))),
        )
        .for_each(|(next, (ks, (gb, cb)))| {
            let (gp, cp) = (gp, cp);
            for ((&k, p), cj) in ks.iter().zip(gb).zip(cb) {
                let d = next[k as usize];
                next[k as usize] += 1;
                debug_assert!(d < n);
                // SAFETY: every destination index d < n is produced exactly once over all
                // blocks (disjoint offset ranges per (bin, block)), so no two writes alias.
                unsafe {
                    *(gp.0.add(3 * d) as *mut [f64; 3]) = *p;
                    *(cp.0.add(2 * d) as *mut Complex64) = *cj;
                }
            }
        });
    Ok((gs, cs, tile_start))
}

macro_rules! dispatch_width {
    ($w:expr, $f:ident, $v:ty; $($arg:expr),*) => {
        match $w {
            1 => $f::<$v, 1>($($arg),*),
            2 => $f::<$v, 2>($($arg),*),
            3 => $f::<$v, 3>($($arg),*),
            4 => $f::<$v, 4>($($arg),*),
            5 => $f::<$v, 5>($($arg),*),
            6 => $f::<$v, 6>($($arg),*),
            7 => $f::<$v, 7>($($arg),*),
            8 => $f::<$v, 8>($($arg),*),
            9 => $f::<$v, 9>($($arg),*),
            10 => $f::<$v, 10>($($arg),*),
            11 => $f::<$v, 11>($($arg),*),
            12 => $f::<$v, 12>($($arg),*),
            13 => $f::<$v, 13>($($arg),*),
            14 => $f::<$v, 14>($($arg),*),
            15 => $f::<$v, 15>($($arg),*),
            _ => $f::<$v, 16>($($arg),*),
        }
    };
}

multiversion!(
    /// Spread one tile's points (the unit of parallel work) with the kernels of a level.
    fn spread_tile => spread_tile_k(grid: GridPtr, lay: &Layout, ker: &Kernel, g: &[[f64; 3]], c: &[Complex64])
);

#[inline(always)]
fn spread_tile_k<V: F8>(
    grid: GridPtr,
    lay: &Layout,
    ker: &Kernel,
    g: &[[f64; 3]],
    c: &[Complex64],
) {
    // SAFETY: the caller (`spread`) passes a pointer covering the whole grid and runs tiles
    // with disjoint footprints concurrently (see the module notes). Widths above 16 never
    // reach here (Kernel::new refuses them); the last arm only keeps the match total.
    unsafe { dispatch_width!(lay.widths[2], spread_points, V; grid, lay, ker, g, c) }
}

multiversion!(
    /// Interpolate at one chunk of points with the kernels of a level.
    fn interp_chunk => interp_chunk_k(flat: &[f64], lay: &Layout, ker: &Kernel, g: &[[f64; 3]], out: &mut [Complex64])
);

#[inline(always)]
fn interp_chunk_k<V: F8>(
    flat: &[f64],
    lay: &Layout,
    ker: &Kernel,
    g: &[[f64; 3]],
    out: &mut [Complex64],
) {
    dispatch_width!(lay.widths[2], interp_points, V; flat, lay, ker, g, out)
}

/// Add the spread of points at grid coordinates `g` with weights `c` to `grid`
/// (`lay.len()` values, row-major). Runs on the current rayon pool.
/// Fails only when its temporaries (about 60 bytes per point) cannot be allocated.
pub fn spread(
    level: Level,
    grid: &mut [Complex64],
    lay: &Layout,
    ker: &Kernel,
    g: &[[f64; 3]],
    c: &[Complex64],
) -> Result<()> {
    debug_assert_eq!(grid.len(), lay.len(), "grid and layout sizes differ");
    if g.is_empty() {
        return Ok(());
    }
    let part0 = slabs(lay, 0);
    let part1 = slabs(lay, 1);
    let (gs, cs, tile_start) = sort_points(lay, g, c, part0, part1)?;
    let flat = as_f64_mut(grid);
    let ptr = GridPtr(flat.as_mut_ptr(), flat.len());
    let run = |t: usize| {
        let r = tile_start[t]..tile_start[t + 1];
        // `ptr` covers the whole grid; the tiles of one phase have disjoint footprints (tile
        // thickness ≥ kernel width, even tile counts), and phases run one after another, so
        // no grid point is touched by two threads at once (the contract of spread_tile).
        spread_tile(level, ptr, lay, ker, &gs[r.clone()], &cs[r]);
    };
    let (s0n, s1n) = (part0.1, part1.1);
    let p0s: &[usize] = if s0n > 1 { &[0, 1] } else { &[0] };
    let p1s: &[usize] = if s1n > 1 { &[0, 1] } else { &[0] };
    if s0n == 1 && s1n == 1 {
        run(0);
        return Ok(());
    }
    for &p0 in p0s {
        for &p1 in p1s {
            let tiles: Vec<usize> = (0..s0n)
                .filter(|s0| s0n == 1 || s0 % 2 == p0)
                .flat_map(|s0| {
                    (0..s1n)
                        .filter(move |s1| s1n == 1 || s1 % 2 == p1)
                        .map(move |s1| s0 * s1n + s1)
                })
                .collect();
            tiles.into_par_iter().for_each(run);
        }
    }
    Ok(())
}

/// Interpolation (the adjoint of spreading): `out[j] = Σ_l grid[l] Π_a φ_a(l_a − g_a)`.
/// Points are visited in bin order (for cache reuse on large grids) and the values put back in
/// input order; each value is summed by one thread in a fixed order.
pub fn interp(
    level: Level,
    grid: &[Complex64],
    lay: &Layout,
    ker: &Kernel,
    g: &[[f64; 3]],
    out: &mut [Complex64],
) -> Result<()> {
    let flat = as_f64(grid);
    let order = bin_order(lay, g)?;
    let mut gs = filled(g.len(), [0.0; 3], "the sorted target coordinates")?;
    gs.par_iter_mut()
        .zip(order.par_iter())
        .with_min_len(4096)
        .for_each(|(d, &j)| *d = g[j as usize]);
    let mut vals = filled(g.len(), Complex64::new(0.0, 0.0), "the interpolated values")?;
    vals.par_chunks_mut(1024)
        .zip(gs.par_chunks(1024))
        .for_each(|(o, gp)| {
            interp_chunk(level, flat, lay, ker, gp, o);
        });
    for (&j, v) in order.iter().zip(&vals) {
        out[j as usize] = *v;
    }
    Ok(())
}

/// Indices of the points sorted (stably) by cubes of 16 grid points along each axis.
fn bin_order(lay: &Layout, g: &[[f64; 3]]) -> Result<Vec<u32>> {
    const B: usize = 16;
    let nb = lay.dims.map(|n| n.div_ceil(B));
    let mut keys = filled(g.len(), 0u32, "the interpolation sort keys")?;
    keys.par_iter_mut()
        .zip(g.par_iter())
        .with_min_len(4096)
        .for_each(|(key, p)| {
            let mut k = 0usize;
            for a in 0..3 {
                let i = if lay.dims[a] == 1 {
                    0
                } else {
                    first_point(p[a], lay.widths[a])
                        .0
                        .rem_euclid(lay.dims[a] as i64) as usize
                };
                k = k * nb[a] + i / B;
            }
            *key = k as u32;
        });
    let n_bins = nb[0] * nb[1] * nb[2];
    let mut next = filled(n_bins + 1, 0usize, "the interpolation bins")?;
    for &k in &keys {
        next[k as usize + 1] += 1;
    }
    for b in 0..n_bins {
        next[b + 1] += next[b];
    }
    let mut order = filled(g.len(), 0u32, "the interpolation order")?;
    for (j, &k) in keys.iter().enumerate() {
        let d = &mut next[k as usize];
        order[*d] = j as u32;
        *d += 1;
    }
    Ok(order)
}

#[inline(always)]
fn interp_points<V: F8, const W: usize>(
    flat: &[f64],
    lay: &Layout,
    ker: &Kernel,
    g: &[[f64; 3]],
    out: &mut [Complex64],
) {
    let [n0, n1, n2] = lay.dims;
    let [w0, w1, _] = lay.widths;
    let (mut k0, mut k1, mut k2) = ([0.0; MAX_WIDTH], [0.0; MAX_WIDTH], [0.0; MAX_WIDTH]);
    let mut k2d = [0.0f64; 2 * MAX_WIDTH];
    let plane = 2 * n1 * n2;
    for (gp, o) in g.iter().zip(out.iter_mut()) {
        let i0 = axis_setup::<V>(ker, gp[0], n0, w0, &mut k0);
        let i1 = axis_setup::<V>(ker, gp[1], n1, w1, &mut k1);
        let i2 = axis_setup::<V>(ker, gp[2], n2, W, &mut k2);
        for i in 0..W {
            k2d[2 * i] = k2[i];
            k2d[2 * i + 1] = k2[i];
        }
        let contiguous = i2 + W <= n2;
        let mut acc = [0.0f64; 2 * MAX_WIDTH];
        for (a, &ka) in k0.iter().enumerate().take(w0) {
            let mut p = i0 + a;
            if p >= n0 {
                p -= n0;
            }
            let base = p * plane;
            for (b, &kb) in k1.iter().enumerate().take(w1) {
                let mut y = i1 + b;
                if y >= n1 {
                    y -= n1;
                }
                let f = ka * kb;
                let rb = base + 2 * y * n2;
                if contiguous {
                    let row = &flat[rb + 2 * i2..rb + 2 * i2 + 2 * W];
                    for i in 0..2 * W {
                        acc[i] = fma::<V>(f * k2d[i], row[i], acc[i]);
                    }
                } else {
                    for i in 0..W {
                        let mut z = i2 + i;
                        if z >= n2 {
                            z -= n2;
                        }
                        let fk = f * k2d[2 * i];
                        acc[2 * i] = fma::<V>(fk, flat[rb + 2 * z], acc[2 * i]);
                        acc[2 * i + 1] = fma::<V>(fk, flat[rb + 2 * z + 1], acc[2 * i + 1]);
                    }
                }
            }
        }
        let (mut re, mut im) = (0.0, 0.0);
        for i in 0..W {
            re += acc[2 * i];
            im += acc[2 * i + 1];
        }
        *o = Complex64::new(re, im);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn direct(lay: &Layout, ker: &Kernel, g: &[[f64; 3]], c: &[Complex64]) -> Vec<Complex64> {
        // Reference: the definition, point by point with the closed-form kernel and modulo.
        let mut out = vec![Complex64::new(0.0, 0.0); lay.len()];
        for (p, cj) in g.iter().zip(c) {
            let mut idx = [[0usize; MAX_WIDTH]; 3];
            let mut val = [[0.0; MAX_WIDTH]; 3];
            for a in 0..3 {
                let (n, w) = (lay.dims[a], lay.widths[a]);
                if n == 1 {
                    val[a][0] = 1.0;
                    continue;
                }
                let l0 = (p[a] - 0.5 * w as f64).ceil();
                for i in 0..w {
                    let l = l0 + i as f64;
                    idx[a][i] = (l as i64).rem_euclid(n as i64) as usize;
                    val[a][i] = ker.phi((l - p[a]) / (0.5 * w as f64));
                }
            }
            for a in 0..lay.widths[0] {
                for b in 0..lay.widths[1] {
                    for e in 0..lay.widths[2] {
                        let o = (idx[0][a] * lay.dims[1] + idx[1][b]) * lay.dims[2] + idx[2][e];
                        out[o] += cj * (val[0][a] * val[1][b] * val[2][e]);
                    }
                }
            }
        }
        out
    }

    fn points(n: usize, dims: [usize; 3], seed: u64) -> (Vec<[f64; 3]>, Vec<Complex64>) {
        let mut s = seed;
        let mut r = || {
            s = s
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            (s >> 11) as f64 / (1u64 << 53) as f64
        };
        let g = (0..n)
            .map(|_| {
                [
                    r() * dims[0] as f64 * 1.5 - 3.0,
                    r() * dims[1] as f64,
                    r() * dims[2] as f64 - 2.0,
                ]
            })
            .collect();
        let c = (0..n)
            .map(|_| Complex64::new(r() - 0.5, r() - 0.5))
            .collect();
        (g, c)
    }

    #[test]
    fn spread_matches_the_definition_in_1_2_3_dimensions() {
        let ker = Kernel::new(1e-9, 2.0).unwrap();
        for dims in [[40, 1, 1], [36, 1, 20], [32, 18, 24], [20, 12, 12]] {
            let lay = Layout::new(dims, ker.w);
            let (g, c) = points(300, dims, 7);
            let mut grid = vec![Complex64::new(0.0, 0.0); lay.len()];
            spread(crate::dispatch::best_level(), &mut grid, &lay, &ker, &g, &c).unwrap();
            let want = direct(&lay, &ker, &g, &c);
            let err = grid
                .iter()
                .zip(&want)
                .map(|(a, b)| (a - b).norm())
                .fold(0.0, f64::max);
            assert!(err < 1e-9, "dims {dims:?}: max error {err}");
            // Interpolation is the adjoint: <spread(c), v> = <c, interp(v)>.
            let v: Vec<Complex64> = (0..lay.len())
                .map(|i| Complex64::new((i as f64 * 0.37).sin(), (i as f64 * 0.11).cos()))
                .collect();
            let mut iv = vec![Complex64::new(0.0, 0.0); g.len()];
            interp(crate::dispatch::best_level(), &v, &lay, &ker, &g, &mut iv).unwrap();
            let lhs: Complex64 = grid.iter().zip(&v).map(|(a, b)| a * b).sum();
            let rhs: Complex64 = c.iter().zip(&iv).map(|(a, b)| a * b).sum();
            assert!(
                (lhs - rhs).norm() < 1e-10 * lhs.norm().max(1.0),
                "{lhs} vs {rhs}"
            );
        }
    }

    #[test]
    fn spread_is_identical_for_1_and_2_threads() {
        let ker = Kernel::new(1e-6, 2.0).unwrap();
        let lay = Layout::new([64, 32, 32], ker.w);
        let (g, c) = points(20_000, lay.dims, 3);
        let run = |t: usize| {
            let mut grid = vec![Complex64::new(0.0, 0.0); lay.len()];
            crate::pool::run(Some(t), || {
                spread(crate::dispatch::best_level(), &mut grid, &lay, &ker, &g, &c)
            })
            .unwrap()
            .unwrap();
            grid
        };
        assert_eq!(run(1), run(2));
    }
}
