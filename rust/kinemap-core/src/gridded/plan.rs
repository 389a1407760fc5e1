//! Gridded amplitudes: spreading + FFT + deconvolution for regular grids (type 1) and
//! arbitrary q-points (type 3).
//!
//! Both plans keep one fine grid per *slot* (the caller's scattering group: species ×
//! Debye–Waller), so atom chunks stream into the same grids and memory does not grow with the
//! atom count. `finish(slot)` turns a slot's grid into the group sums
//! `S_g(q) = Σ_{j in g} w_j exp(i q·r_j)` on the requested q-points and frees the grid.

use super::factor::GroupFactor;
use super::fft::{centred, fft3};
use super::kernel::Kernel;
use super::spread::{interp, spread, Layout};
use crate::alloc::{filled, zeroed_complex};
use crate::dispatch::{kernel_level, Level};
use crate::error::{Error, Result};
use crate::sincos::{mul_add, sincos};
use num_complex::Complex64;
use rayon::prelude::*;
use std::f64::consts::PI;

/// Where the real (length > 1) axes go in the 3-axis fine-grid layout: the last real axis is
/// always the contiguous one (`[a, ·, b]` for two axes, `[a, ·, ·]` for one).
fn layout_slots(n_real: usize) -> [Option<usize>; 3] {
    match n_real {
        0 => [None, None, None],
        1 => [Some(0), None, None],
        2 => [Some(0), None, Some(1)],
        _ => [Some(0), Some(1), Some(2)],
    }
}

/// Most slots (scattering groups) a plan keeps; each holds a whole fine grid.
pub const MAX_SLOTS: usize = 1 << 16;
/// Most points of a fine grid along one axis.
pub const MAX_AXIS: usize = 1 << 31;
/// Most points of a fine grid (16 TiB of complex values: far beyond any memory, so the
/// refusal that matters in practice is the allocation's, reported as an error).
pub const MAX_FINE: usize = 1 << 40;

fn check_atoms(positions: &[[f64; 3]], weights: &[f64], slots: &[u32]) -> Result<()> {
    let n = positions.len();
    if let Some((j, s)) = slots
        .iter()
        .enumerate()
        .find(|(_, &s)| s as usize >= MAX_SLOTS)
    {
        return Err(Error::Range(format!(
            "slot of atom {j} is {s}, but a plan keeps at most {MAX_SLOTS} slots"
        )));
    }
    if weights.len() != n || slots.len() != n {
        return Err(Error::Shape(format!(
            "weights and slots must have one value per atom ({n}), got {} and {}",
            weights.len(),
            slots.len()
        )));
    }
    for (j, (p, w)) in positions.iter().zip(weights).enumerate() {
        crate::atoms::check_finite(j, *p, *w)?;
    }
    Ok(())
}

/// Refuses an output of the wrong length for `m` points (`what`: what a point is).
fn check_out(out: &[Complex64], m: usize, what: &str) -> Result<()> {
    if out.len() != m {
        return Err(Error::Shape(format!(
            "the output must have one value per {what} ({m}), got {}",
            out.len()
        )));
    }
    Ok(())
}

/// Atoms per internal batch of `add`: bounds the temporaries (about 100 bytes per atom) and
/// lets the allocator recycle them, whatever the size of the caller's chunk.
const BATCH: usize = 1 << 20;

/// Indices (relative to the batch) of the atoms of every non-empty slot, in input order;
/// `None` for the indices when every atom is in the same slot.
fn by_slot(slots: &[u32]) -> Vec<(usize, Option<Vec<u32>>)> {
    let Some(&first) = slots.first() else {
        return Vec::new();
    };
    if slots.iter().all(|&s| s == first) {
        return vec![(first as usize, None)];
    }
    let n_slots = slots.iter().map(|&s| s as usize + 1).max().unwrap_or(0);
    let mut lists: Vec<Vec<u32>> = vec![Vec::new(); n_slots];
    for (j, &s) in slots.iter().enumerate() {
        lists[s as usize].push(j as u32);
    }
    lists
        .into_iter()
        .enumerate()
        .filter(|(_, l)| !l.is_empty())
        .map(|(s, l)| (s, Some(l)))
        .collect()
}

/// Spread atoms batch by batch into the slots' grids; `prep(j)` gives atom `j`'s grid
/// coordinates and complex weight.
fn add_batches(
    level: Level,
    store: &mut Vec<Option<Vec<Complex64>>>,
    lay: &Layout,
    ker: &Kernel,
    slots: &[u32],
    prep: impl Fn(usize) -> ([f64; 3], Complex64) + Sync,
) -> Result<()> {
    let n = slots.len();
    let mut start = 0;
    while start < n {
        let end = (start + BATCH).min(n);
        for (s, idx) in by_slot(&slots[start..end]) {
            grow(store, s);
            if store[s].is_none() {
                store[s] = Some(zeroed_complex(lay.len(), &fine_grid_name(lay))?);
            }
            let Some(grid) = store[s].as_mut() else {
                continue;
            };
            let k = idx.as_ref().map_or(end - start, |v| v.len());
            let mut g = filled(k, [0.0; 3], "the atoms' grid coordinates")?;
            let mut c = filled(k, Complex64::new(0.0, 0.0), "the atoms' spreading weights")?;
            let gc = g.par_iter_mut().zip(c.par_iter_mut()).with_min_len(4096);
            match idx {
                None => gc
                    .enumerate()
                    .for_each(|(i, (g, c))| (*g, *c) = prep(start + i)),
                Some(idx) => gc
                    .zip(idx.par_iter())
                    .for_each(|((g, c), &i)| (*g, *c) = prep(start + i as usize)),
            }
            spread(level, grid, lay, ker, &g, &c)?;
        }
        start = end;
    }
    Ok(())
}

/// How an allocation error names a fine grid: its shape and size.
fn fine_grid_name(lay: &Layout) -> String {
    format!("a fine grid of {:?} points", lay.dims)
}

fn grow(slots: &mut Vec<Option<Vec<Complex64>>>, s: usize) {
    if slots.len() <= s {
        slots.resize_with(s + 1, || None);
    }
}

/// Type-1 plan for a regular grid `q = origin + Σ_a i_a·step_a`, `0 ≤ i_a < shape[a]`.
///
/// With `c_a = ⌊n_a/2⌋`, `k_a = i_a − c_a` and the centre `q_c = origin + Σ c_a step_a`,
/// `exp(i q·r) = exp(i q_c·r) Π_a exp(i k_a x_a)` with projected coordinates
/// `x_a = step_a·r`: a d-dimensional type-1 transform with weights `w_j exp(i q_c·r_j)`.
/// Axes of length 1 drop out; planes and lines in any orientation, and hkl grids of any cell,
/// are all of this form.
#[derive(Debug)]
pub struct RegularPlan {
    kernel: Kernel,
    layout: Layout,
    /// Step vector of each layout axis (zero on trivial axes), Å⁻¹.
    steps: [[f64; 3]; 3],
    /// Output points along each layout axis.
    out_dims: [usize; 3],
    centre: [f64; 3],
    /// Per layout axis: `1/ψ̃(2πk/nf)` for the output frequencies in increasing k.
    deconv: [Vec<f64>; 3],
    /// Bound on |q| over the grid (Å⁻¹), for the phase-range check of `add`.
    q_max: f64,
    slots: Vec<Option<Vec<Complex64>>>,
}

impl RegularPlan {
    /// Plan for `shape` points along the `steps` (one per axis, ≤ 3 axes) from `origin`, to
    /// relative tolerance `tol` with fine-grid oversampling `upsample` (σ, 1.2–3).
    pub fn new(
        origin: [f64; 3],
        steps: &[[f64; 3]],
        shape: &[usize],
        tol: f64,
        upsample: f64,
    ) -> Result<Self> {
        if steps.len() != shape.len() || shape.len() > 3 {
            return Err(Error::Shape(format!(
                "a regular grid needs one step per axis and at most 3 axes, got {} steps and shape {shape:?}",
                steps.len()
            )));
        }
        if let Some(a) = shape.iter().position(|&n| n == 0) {
            return Err(Error::Range(format!("grid axis {a} has no points")));
        }
        crate::point::check_vectors(&[origin], "grid origin")?;
        crate::point::check_vectors(steps, "grid step")?;
        super::sizing::check_tol(tol)?;
        let kernel = Kernel::new(tol, upsample)?;
        let real: Vec<usize> = (0..shape.len()).filter(|&a| shape[a] > 1).collect();
        let place = layout_slots(real.len());
        let mut dims = [1usize; 3];
        let mut out_dims = [1usize; 3];
        let mut lsteps = [[0.0; 3]; 3];
        let mut centre = origin;
        for (a, &n) in shape.iter().enumerate() {
            let c = (n / 2) as f64;
            for d in 0..3 {
                centre[d] = mul_add(c, steps[a][d], centre[d]);
            }
        }
        for (l, p) in place.iter().enumerate() {
            if let Some(i) = p {
                let a = real[*i];
                let n = shape[a];
                if upsample * n as f64 > MAX_AXIS as f64 {
                    return Err(Error::Range(format!(
                        "grid axis {a} has {n} points: its fine grid of {:.3e} points exceeds \
                         the {MAX_AXIS} points per axis of the gridded path",
                        upsample * n as f64
                    )));
                }
                dims[l] = super::sizing::fine_size(n, upsample, kernel.w);
                out_dims[l] = n;
                lsteps[l] = steps[a];
            }
        }
        let total = dims.iter().try_fold(1usize, |acc, &n| acc.checked_mul(n));
        if total.is_none_or(|t| t > MAX_FINE) {
            return Err(Error::Range(format!(
                "fine grid {dims:?} ({:.3e} points) exceeds the {MAX_FINE} points of the \
                 gridded path",
                dims.iter().map(|&d| d as f64).product::<f64>()
            )));
        }
        let layout = Layout::new(dims, kernel.w);
        let mut deconv = [vec![1.0], vec![1.0], vec![1.0]];
        for l in 0..3 {
            let (m, nf) = (out_dims[l], dims[l]);
            if nf > 1 {
                let c = (m / 2) as i64;
                let mut d = filled(m, 0.0, "the deconvolution factors")?;
                d.par_iter_mut().enumerate().for_each(|(i, v)| {
                    *v = 1.0 / kernel.fourier(2.0 * PI * (i as i64 - c) as f64 / nf as f64)
                });
                deconv[l] = d;
            }
        }
        let norm = |v: &[f64; 3]| (v[0] * v[0] + v[1] * v[1] + v[2] * v[2]).sqrt();
        let q_max = norm(&centre)
            + steps
                .iter()
                .zip(shape)
                .map(|(st, &n)| norm(st) * (n / 2 + 1) as f64)
                .sum::<f64>();
        Ok(RegularPlan {
            q_max,
            kernel,
            layout,
            steps: lsteps,
            out_dims,
            centre,
            deconv,
            slots: Vec::new(),
        })
    }

    /// Complex values in one slot's fine grid (16 bytes each).
    pub fn fine_len(&self) -> usize {
        self.layout.len()
    }

    /// Fine-grid shape (trivial axes are 1).
    pub fn fine_dims(&self) -> [usize; 3] {
        self.layout.dims
    }

    /// Kernel width in grid points.
    pub fn width(&self) -> usize {
        self.kernel.w
    }

    /// Number of output q-points.
    pub fn n_points(&self) -> usize {
        self.out_dims.iter().product()
    }

    /// Spread atoms (`positions` Å, q-independent `weights`, slot index per atom) into the
    /// slots' fine grids; grids are created on first use.
    pub fn add(
        &mut self,
        positions: &[[f64; 3]],
        weights: &[f64],
        slots: &[u32],
        threads: Option<usize>,
    ) -> Result<()> {
        check_atoms(positions, weights, slots)?;
        let level = kernel_level()?;
        let r_max = positions
            .iter()
            .map(|r| r[0] * r[0] + r[1] * r[1] + r[2] * r[2])
            .fold(0.0, f64::max)
            .sqrt();
        crate::point::check_phase_range(self.q_max, r_max)?;
        let (lay, ker, steps, centre) = (&self.layout, &self.kernel, self.steps, self.centre);
        let scale: [f64; 3] = lay.dims.map(|n| n as f64 / (2.0 * PI));
        let store = &mut self.slots;
        crate::pool::run(threads, || {
            add_batches(level, store, lay, ker, slots, |j| {
                let r = positions[j];
                let mut gp = [0.0; 3];
                for l in 0..3 {
                    if lay.dims[l] > 1 {
                        let st = steps[l];
                        gp[l] = mul_add(st[2], r[2], mul_add(st[1], r[1], st[0] * r[0])) * scale[l];
                    }
                }
                let ph = mul_add(centre[2], r[2], mul_add(centre[1], r[1], centre[0] * r[0]));
                let (sn, cs) = sincos(ph);
                (gp, Complex64::new(weights[j] * cs, weights[j] * sn))
            })
        })?
    }

    /// Group sums `S(q)` of slot `slot` on the grid (row-major over the grid shape); frees the
    /// slot's fine grid. A slot that received no atoms gives zeros.
    pub fn finish(&mut self, slot: usize, threads: Option<usize>) -> Result<Vec<Complex64>> {
        let mut out = zeroed_complex(self.n_points(), "the group sums")?;
        self.readout(slot, None, &mut out, threads)?;
        Ok(out)
    }

    /// Adds the group's amplitudes `F(q)·S(q)` of slot `slot` to `out` (row-major over the
    /// grid shape), computing `F` at each point from its q-vector; frees the slot's fine grid.
    pub fn finish_into(
        &mut self,
        slot: usize,
        factor: &GroupFactor,
        out: &mut [Complex64],
        threads: Option<usize>,
    ) -> Result<()> {
        self.readout(slot, Some(factor), out, threads)
    }

    /// q-vector of every output point of row `r` (layout axes 0 and 1), as a function of the
    /// index along the last layout axis.
    fn row_q(&self, r: usize) -> impl Fn(usize) -> [f64; 3] + use<> {
        let od = self.out_dims;
        let (st, c) = (self.steps, self.centre);
        let k = [
            (r / od[1]) as f64 - (od[0] / 2) as f64,
            (r % od[1]) as f64 - (od[1] / 2) as f64,
        ];
        let base: [f64; 3] =
            [0, 1, 2].map(|d| mul_add(k[1], st[1][d], mul_add(k[0], st[0][d], c[d])));
        let c2 = (od[2] / 2) as f64;
        move |i2| [0, 1, 2].map(|d| mul_add(i2 as f64 - c2, st[2][d], base[d]))
    }

    /// Smallest and largest `s = |q|/4π` over the grid's points (Å⁻¹).
    pub fn s_range(&self, threads: Option<usize>) -> Result<(f64, f64)> {
        let od = self.out_dims;
        crate::pool::run(threads, || {
            (0..od[0] * od[1])
                .into_par_iter()
                .map(|r| {
                    let q = self.row_q(r);
                    (0..od[2]).fold((f64::INFINITY, 0.0f64), |(lo, hi), i2| {
                        let v = q(i2);
                        let s = (v[0] * v[0] + v[1] * v[1] + v[2] * v[2]).sqrt() * (0.25 / PI);
                        (lo.min(s), hi.max(s))
                    })
                })
                .reduce(|| (f64::INFINITY, 0.0), |a, b| (a.0.min(b.0), a.1.max(b.1)))
        })
    }

    /// Transform slot `slot`'s fine grid and add its deconvolved sums, times `factor` when
    /// given, to `out`.
    fn readout(
        &mut self,
        slot: usize,
        factor: Option<&GroupFactor>,
        out: &mut [Complex64],
        threads: Option<usize>,
    ) -> Result<()> {
        check_out(out, self.n_points(), "grid point")?;
        let Some(mut grid) = self.slots.get_mut(slot).and_then(|g| g.take()) else {
            return Ok(());
        };
        let dims = self.layout.dims;
        let od = self.out_dims;
        let full: Vec<Vec<usize>> = dims.iter().map(|&n| (0..n).collect()).collect();
        let win: Vec<Vec<usize>> = (0..3).map(|l| centred(od[l], dims[l])).collect();
        let dc = &self.deconv;
        let this = &*self;
        crate::pool::run(threads, || {
            fft3(
                &mut grid,
                dims,
                [&full[0], &full[1], &full[2]],
                [&win[0], &win[1], &win[2]],
            );
            out.par_chunks_mut(od[2]).enumerate().for_each(|(r, row)| {
                let (i0, i1) = (r / od[1], r % od[1]);
                let f01 = dc[0][i0] * dc[1][i1];
                let base = (win[0][i0] * dims[1] + win[1][i1]) * dims[2];
                match factor {
                    None => {
                        for (i2, o) in row.iter_mut().enumerate() {
                            *o += grid[base + win[2][i2]] * (f01 * dc[2][i2]);
                        }
                    }
                    Some(f) => {
                        let q = this.row_q(r);
                        for (i2, o) in row.iter_mut().enumerate() {
                            *o += grid[base + win[2][i2]] * (f01 * dc[2][i2]) * f.at(q(i2));
                        }
                    }
                }
            });
        })
    }
}

/// Type-3 plan for arbitrary q-points (Lee & Greengard's scheme as in Barnett et al.).
///
/// Per Cartesian axis, atoms lie in `C ± X` and targets in `D ± S`. Atoms are spread, with
/// weights `w_j exp(i D·(r_j − C))`, onto a grid of `nf ≈ 2σXS/π + w` points at coordinates
/// `(r − C)/(γh)` (`h = 2π/nf`, `γ = nf/(2σS)`); the grid's transform at the scaled target
/// frequencies `τ = (q − D)γh` is a type-2 problem, done by deconvolving, zero-padding to a
/// second grid `σ` times larger, one FFT and interpolation with the same kernel. Finally
/// `S(q) = exp(i q·C) F(τ) / Π_a ψ̃(τ_a)`. Axes along which all atoms or all targets share one
/// coordinate drop out.
#[derive(Debug)]
pub struct PointPlan {
    kernel: Kernel,
    /// First (spreading) grid and second (interpolation) grid.
    lay1: Layout,
    lay2: Layout,
    /// Cartesian axis of each layout axis (None: trivial).
    axis: [Option<usize>; 3],
    centre_r: [f64; 3],
    centre_q: [f64; 3],
    /// Per layout axis: atom coordinate → first-grid coordinate factor `1/(γh)`.
    to_grid: [f64; 3],
    /// Per layout axis: `γh` (target frequency factor).
    gam_h: [f64; 3],
    lo: [f64; 3],
    hi: [f64; 3],
    q: Vec<[f64; 3]>,
    slots: Vec<Option<Vec<Complex64>>>,
}

impl PointPlan {
    /// Plan for the q-points `q` (Å⁻¹) and atoms inside the box `lo ≤ r ≤ hi` (Å).
    pub fn new(
        q: &[[f64; 3]],
        lo: [f64; 3],
        hi: [f64; 3],
        tol: f64,
        upsample: f64,
    ) -> Result<Self> {
        crate::point::check_vectors(q, "q-point")?;
        crate::point::check_vectors(&[lo, hi], "atom bound")?;
        if q.is_empty() || q.len() > u32::MAX as usize {
            return Err(Error::Range(format!(
                "the arbitrary-point plan takes 1 to {} q-points, got {}",
                u32::MAX,
                q.len()
            )));
        }
        if (0..3).any(|a| lo[a] > hi[a]) {
            return Err(Error::Range(format!(
                "atom bounds are inverted: lo {lo:?}, hi {hi:?}"
            )));
        }
        // Two approximation stages (spreading and interpolation) share the error budget.
        super::sizing::check_tol(tol)?;
        let kernel = Kernel::new(0.5 * tol, upsample)?;
        let w = kernel.w;
        let (mut qlo, mut qhi) = ([f64::INFINITY; 3], [f64::NEG_INFINITY; 3]);
        for v in q {
            for a in 0..3 {
                qlo[a] = qlo[a].min(v[a]);
                qhi[a] = qhi[a].max(v[a]);
            }
        }
        let norm = |v: &[f64; 3]| (v[0] * v[0] + v[1] * v[1] + v[2] * v[2]).sqrt();
        let q_max = q.iter().map(norm).fold(0.0, f64::max);
        let corner: [f64; 3] = [0, 1, 2].map(|a| lo[a].abs().max(hi[a].abs()));
        crate::point::check_phase_range(q_max, norm(&corner))?;
        let centre_r: [f64; 3] = [0, 1, 2].map(|a| 0.5 * (lo[a] + hi[a]));
        let centre_q: [f64; 3] = [0, 1, 2].map(|a| 0.5 * (qlo[a] + qhi[a]));
        let x: [f64; 3] = [0, 1, 2].map(|a| 0.5 * (hi[a] - lo[a]));
        let s: [f64; 3] = [0, 1, 2].map(|a| 0.5 * (qhi[a] - qlo[a]));
        let real: Vec<usize> = (0..3).filter(|&a| x[a] > 0.0 && s[a] > 0.0).collect();
        let place = layout_slots(real.len());
        let (mut d1, mut d2) = ([1usize; 3], [1usize; 3]);
        let (mut to_grid, mut gam_h) = ([0.0; 3], [0.0; 3]);
        let mut axis = [None; 3];
        for (l, p) in place.iter().enumerate() {
            if let Some(i) = p {
                let a = real[*i];
                // Margins as in Barnett et al.: the spread support stays inside one period.
                let (nf, n2) = super::sizing::point_axis(upsample, w, 2.0 * x[a], 2.0 * s[a])?;
                let h = 2.0 * PI / nf as f64;
                let gam = nf as f64 / (2.0 * upsample * s[a]);
                d1[l] = nf;
                d2[l] = n2;
                to_grid[l] = 1.0 / (gam * h);
                gam_h[l] = gam * h;
                axis[l] = Some(a);
            }
        }
        let total = d2.iter().try_fold(1usize, |acc, &n| acc.checked_mul(n));
        if total.is_none_or(|t| t > MAX_FINE) {
            return Err(Error::Range(format!(
                "interpolation grid {d2:?} is too large"
            )));
        }
        Ok(PointPlan {
            lay1: Layout::new(d1, w),
            lay2: Layout::new(d2, w),
            kernel,
            axis,
            centre_r,
            centre_q,
            to_grid,
            gam_h,
            lo,
            hi,
            q: {
                let mut v = crate::alloc::with_capacity(q.len(), "the q-points")?;
                v.extend_from_slice(q);
                v
            },
            slots: Vec::new(),
        })
    }

    /// Complex values of the spreading grid (one per slot) and of the interpolation grid
    /// (one at a time, during `finish`).
    pub fn fine_lens(&self) -> (usize, usize) {
        (self.lay1.len(), self.lay2.len())
    }

    /// Spreading and interpolation grid shapes.
    pub fn fine_dims(&self) -> ([usize; 3], [usize; 3]) {
        (self.lay1.dims, self.lay2.dims)
    }

    /// Kernel width in grid points.
    pub fn width(&self) -> usize {
        self.kernel.w
    }

    /// Spread atoms into the slots' grids; every atom must lie inside the plan's box.
    pub fn add(
        &mut self,
        positions: &[[f64; 3]],
        weights: &[f64],
        slots: &[u32],
        threads: Option<usize>,
    ) -> Result<()> {
        check_atoms(positions, weights, slots)?;
        let level = kernel_level()?;
        for (j, p) in positions.iter().enumerate() {
            for a in 0..3 {
                let slack = 1e-9 * (1.0 + (self.hi[a] - self.lo[a]).abs() + self.hi[a].abs());
                if p[a] < self.lo[a] - slack || p[a] > self.hi[a] + slack {
                    return Err(Error::Range(format!(
                        "atom {j} at [{}, {}, {}] lies outside the bounds given to the plan ({:?} to {:?})",
                        p[0], p[1], p[2], self.lo, self.hi
                    )));
                }
            }
        }
        let (lay, ker) = (&self.lay1, &self.kernel);
        let (axis, cr, cq, tg) = (self.axis, self.centre_r, self.centre_q, self.to_grid);
        let store = &mut self.slots;
        crate::pool::run(threads, || {
            add_batches(level, store, lay, ker, slots, |j| {
                let r = positions[j];
                let xr = [r[0] - cr[0], r[1] - cr[1], r[2] - cr[2]];
                let mut gp = [0.0; 3];
                for l in 0..3 {
                    if let Some(a) = axis[l] {
                        gp[l] = xr[a] * tg[l];
                    }
                }
                let ph = mul_add(cq[2], xr[2], mul_add(cq[1], xr[1], cq[0] * xr[0]));
                let (sn, cs) = sincos(ph);
                (gp, Complex64::new(weights[j] * cs, weights[j] * sn))
            })
        })?
    }

    /// Group sums `S(q)` of slot `slot` at the plan's q-points (in their order); frees the
    /// slot's grid.
    pub fn finish(&mut self, slot: usize, threads: Option<usize>) -> Result<Vec<Complex64>> {
        match self.sums(slot, threads)? {
            Some(out) => Ok(out),
            None => filled(self.q.len(), Complex64::new(0.0, 0.0), "the group sums"),
        }
    }

    /// Adds the group's amplitudes `F(q)·S(q)` of slot `slot` to `out` (the plan's q-points
    /// in their order); frees the slot's grid.
    pub fn finish_into(
        &mut self,
        slot: usize,
        factor: &GroupFactor,
        out: &mut [Complex64],
        threads: Option<usize>,
    ) -> Result<()> {
        check_out(out, self.q.len(), "q-point")?;
        let Some(sums) = self.sums(slot, threads)? else {
            return Ok(());
        };
        let q = &self.q;
        crate::pool::run(threads, || {
            out.par_iter_mut()
                .zip(sums.par_iter())
                .zip(q.par_iter())
                .with_min_len(1024)
                .for_each(|((o, s), v)| *o += s * factor.at(*v))
        })
    }

    /// Smallest and largest `s = |q|/4π` over the plan's q-points (Å⁻¹).
    pub fn s_range(&self, threads: Option<usize>) -> Result<(f64, f64)> {
        let q = &self.q;
        let (lo, hi) = crate::pool::run(threads, || {
            q.par_iter()
                .with_min_len(4096)
                .map(|v| v[0] * v[0] + v[1] * v[1] + v[2] * v[2])
                .fold(
                    || (f64::INFINITY, 0.0f64),
                    |(lo, hi), x| (lo.min(x), hi.max(x)),
                )
                .reduce(|| (f64::INFINITY, 0.0), |a, b| (a.0.min(b.0), a.1.max(b.1)))
        })?;
        Ok((lo.sqrt() * (0.25 / PI), hi.sqrt() * (0.25 / PI)))
    }

    /// The sums of slot `slot` (None when it received no atoms); frees the slot's grid.
    fn sums(&mut self, slot: usize, threads: Option<usize>) -> Result<Option<Vec<Complex64>>> {
        let m = self.q.len();
        let level = kernel_level()?;
        let Some(grid1) = self.slots.get_mut(slot).and_then(|g| g.take()) else {
            return Ok(None);
        };
        let (d1, d2) = (self.lay1.dims, self.lay2.dims);
        let ker = &self.kernel;
        let lay2 = &self.lay2;
        let (axis, gam_h, cr, cq) = (self.axis, self.gam_h, self.centre_r, self.centre_q);
        let q = &self.q;
        crate::pool::run(threads, || {
            // Pre-correct by 1/ψ̃ of the second grid and embed centred into it.
            let inv: Vec<Vec<f64>> = (0..3)
                .map(|l| {
                    if d2[l] == 1 {
                        return vec![1.0];
                    }
                    (0..d1[l])
                        .map(|i| {
                            let k = if i < d1[l] / 2 {
                                i as f64
                            } else {
                                i as f64 - d1[l] as f64
                            };
                            1.0 / ker.fourier(2.0 * PI * k / d2[l] as f64)
                        })
                        .collect()
                })
                .collect();
            let place: Vec<Vec<usize>> = (0..3)
                .map(|l| {
                    (0..d1[l])
                        .map(|i| {
                            if i < d1[l] / 2 {
                                i
                            } else {
                                d2[l] - (d1[l] - i)
                            }
                        })
                        .collect()
                })
                .collect();
            let mut grid2 = zeroed_complex(lay2.len(), "the interpolation grid")?;
            for i0 in 0..d1[0] {
                for i1 in 0..d1[1] {
                    let f = inv[0][i0] * inv[1][i1];
                    let src = &grid1[(i0 * d1[1] + i1) * d1[2]..(i0 * d1[1] + i1 + 1) * d1[2]];
                    let base = (place[0][i0] * d2[1] + place[1][i1]) * d2[2];
                    for (i2, v) in src.iter().enumerate() {
                        grid2[base + place[2][i2]] = v * (f * inv[2][i2]);
                    }
                }
            }
            drop(grid1);
            let full: Vec<Vec<usize>> = d2.iter().map(|&n| (0..n).collect()).collect();
            fft3(
                &mut grid2,
                d2,
                [&place[0], &place[1], &place[2]],
                [&full[0], &full[1], &full[2]],
            );
            // Target coordinates in the second grid and the final deconvolution.
            let mut p2 = filled(m, [0.0; 3], "the targets' grid coordinates")?;
            let mut post = filled(m, Complex64::new(0.0, 0.0), "the targets' factors")?;
            p2.par_iter_mut()
                .zip(post.par_iter_mut())
                .zip(q.par_iter())
                .with_min_len(1024)
                .for_each(|((p2v, postv), v)| {
                    let mut p = [0.0; 3];
                    let mut tau = [0.0; 3];
                    let mut nt = 0;
                    for l in 0..3 {
                        if let Some(a) = axis[l] {
                            tau[nt] = (v[a] - cq[a]) * gam_h[l];
                            p[l] = tau[nt] * d2[l] as f64 / (2.0 * PI);
                            nt += 1;
                        }
                    }
                    let mut psi = [1.0; 3];
                    ker.fourier_many(&tau[..nt], &mut psi[..nt]);
                    let ph = mul_add(v[2], cr[2], mul_add(v[1], cr[1], v[0] * cr[0]));
                    let (sn, cs) = sincos(ph);
                    let d = 1.0 / (psi[0] * psi[1] * psi[2]);
                    (*p2v, *postv) = (p, Complex64::new(cs * d, sn * d));
                });
            let mut out = zeroed_complex(m, "the group sums")?;
            interp(level, &grid2, lay2, ker, &p2, &mut out)?;
            out.par_iter_mut()
                .zip(post.par_iter())
                .for_each(|(o, f)| *o *= f);
            Ok(Some(out))
        })?
    }
}
