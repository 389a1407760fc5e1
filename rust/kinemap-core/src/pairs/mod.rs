//! Pair-distance histograms per group pair, and the Debye sums over them.
//!
//! The powder pattern of a model by the Debye equation needs, for every pair of atoms, the
//! distance `r_ij` and the weight `o_i o_j`, sorted by the pair of *groups* (species ×
//! Debye–Waller) the two atoms belong to, because the q-dependent factor
//! `f_g(Q) f_h(Q)* T_g(Q) T_h(Q)` is shared by all pairs of a group pair. A
//! [`PairHistogram`] accumulates those weights on equally spaced distance nodes
//! `r_k = k·dr`, `k = 0 … n_nodes − 1`, one histogram per unordered group pair `g ≤ h`.
//!
//! * **Two-node (linear) binning.** A pair at `r = (k + t)·dr`, `0 ≤ t < 1`, puts `(1 − t)·w`
//!   on node `k` and `t·w` on node `k + 1`. A sum `Σ_k H[k] φ(r_k)` then equals the sum over
//!   pairs of the linear interpolant of `φ`; for `φ = sin(Qr)/(Qr)`, whose second derivative
//!   is bounded by `Q²/3`, the per-pair error is at most `(Q·dr)²/24` (nearest-node binning
//!   would give `0.22·Q·dr`). The number of pairs and their total weight are kept exactly.
//! * **Pairs.** With a cut-off, atoms are sorted into cells at least one cut-off wide
//!   ([`cells`]) and only the same and adjacent cells are searched; without one, all pairs
//!   are visited (one cell). Periodic boxes use the minimum image: with the cut-off at most
//!   half the smallest face-to-face width of the box, at most one image of each pair lies
//!   within it, and the cell search finds exactly that one (triclinic boxes included).
//! * **Streaming.** [`PairHistogram::add_within`] adds the pairs inside one atom set (`i < j`),
//!   [`PairHistogram::add_between`] the pairs across two sets; a model cut into chunks
//!   `C_1 … C_n` is covered by `within(C_a)` for every `a` and `between(C_a, C_b)` for `a < b`.
//! * **Identical results for any thread count and chunking.** Every contribution is turned
//!   into an integer (fixed point, 2⁻⁴⁸ of a unit weight, see [`FIXED_POINT_BITS`]) before
//!   it is added, and integers add exactly in any order. The distance of a pair is computed
//!   as `(r_j − r_i) + shift`, whose rounding is symmetric under swapping the atoms, so a pair
//!   gives the same integers whichever call, chunk or thread meets it. Each worker thread
//!   fills its own histogram (64-bit words flushed into 128-bit totals every 2¹⁶ − 1 pairs
//!   when the histogram is small, the totals directly otherwise); the histograms are added
//!   at the end.
//! * **Memory.** `O(atoms of the call) + threads × n_pairs × n_nodes × 24 bytes`.

pub(crate) mod cells;
mod debye;

pub use debye::debye_sums;

use crate::error::{Error, Result};
use cells::{Cells, Grid, PeriodicBox};
use rayon::prelude::*;
use std::sync::atomic::{AtomicUsize, Ordering};

/// Fixed-point resolution of the accumulated weights: a contribution `c` is stored as the
/// integer `round(c · 2^48)`, so each pair carries a rounding of at most 2⁻⁴⁹ of a unit
/// weight, and a 128-bit node holds the weight of 2⁸⁰ pairs.
pub const FIXED_POINT_BITS: i32 = 48;
const SCALE: f64 = (1u64 << FIXED_POINT_BITS) as f64;
/// Largest accumulator (group pairs × nodes) one histogram may hold (4 GiB of 128-bit nodes).
pub const MAX_ENTRIES: usize = 1 << 28;
/// Atoms of a cell handled by one work item.
const BLOCK: usize = 128;
/// Average atoms per cell above which cells half a cut-off wide are used.
const MIN_ATOMS_PER_CELL: usize = 16;
/// Squared distances computed together before the in-range ones are binned.
const D2_BUF: usize = 64; // one bit each in a u64 mask

/// Index of the unordered group pair (g, h) among the `n_groups (n_groups + 1) / 2` pairs,
/// row by row of the upper triangle: (0,0), (0,1) … (0,G−1), (1,1), (1,2) …
pub fn pair_index(g: usize, h: usize, n_groups: usize) -> usize {
    let (a, b) = if g <= h { (g, h) } else { (h, g) };
    a * (2 * n_groups - a + 1) / 2 + (b - a)
}

/// Weighted pair-distance histograms, one per unordered group pair, on nodes `k·dr`.
#[derive(Debug, Clone)]
pub struct PairHistogram {
    n_groups: usize,
    n_nodes: usize,
    dr: f64,
    cutoff: Option<f64>,
    pbox: Option<PeriodicBox>,
    /// `pair_offset[g * n_groups + h]` = `pair_index(g, h) * n_nodes`.
    pair_offset: Vec<usize>,
    acc: Vec<u128>,
    pairs: u128,
}

impl PairHistogram {
    /// An empty histogram.
    ///
    /// * `n_groups`: atoms carry group indices `< n_groups`;
    /// * `n_nodes`, `dr`: nodes at `k·dr` (Å), `k < n_nodes`;
    /// * `cutoff`: pairs farther apart are left out (Å); None counts all pairs, which then
    ///   must lie within the last node;
    /// * `periodic_box`: rows a, b, c (Å) of a periodic box, pairs by the minimum image; needs
    ///   a cut-off of at most half its smallest face-to-face width.
    pub fn new(
        n_groups: usize,
        n_nodes: usize,
        dr: f64,
        cutoff: Option<f64>,
        periodic_box: Option<[[f64; 3]; 3]>,
    ) -> Result<Self> {
        if n_groups == 0 {
            return Err(Error::Range("n_groups must be at least 1, got 0".into()));
        }
        if n_nodes < 2 {
            return Err(Error::Range(format!(
                "the histogram needs at least 2 nodes, got {n_nodes}"
            )));
        }
        if !(dr.is_finite() && dr > 0.0) {
            return Err(Error::Range(format!(
                "node spacing dr must be a positive number of Å, got {dr}"
            )));
        }
        let r_last = (n_nodes - 1) as f64 * dr;
        if let Some(c) = cutoff {
            if !(c.is_finite() && c > 0.0) {
                return Err(Error::Range(format!(
                    "cutoff must be a positive number of Å, got {c}"
                )));
            }
            if c > r_last * (1.0 + 1e-12) {
                return Err(Error::Range(format!(
                    "cutoff {c} Å lies beyond the last node (n_nodes − 1)·dr = {r_last} Å"
                )));
            }
        }
        let pbox = periodic_box.map(PeriodicBox::new).transpose()?;
        if let Some(p) = &pbox {
            let half = 0.5 * p.min_width();
            match cutoff {
                None => {
                    return Err(Error::Range(format!(
                        "a periodic box needs a cutoff of at most half its smallest \
                         face-to-face width ({half} Å)"
                    )))
                }
                Some(c) if c > half * (1.0 + 1e-12) => {
                    return Err(Error::Range(format!(
                        "cutoff {c} Å exceeds half the smallest face-to-face width of the \
                         periodic box ({half} Å): the minimum image would not be unique"
                    )))
                }
                _ => {}
            }
        }
        let n_pairs = n_groups
            .checked_mul(n_groups + 1)
            .map(|v| v / 2)
            .ok_or_else(|| Error::Range(format!("too many groups: {n_groups}")))?;
        let entries = n_pairs
            .checked_mul(n_nodes)
            .filter(|&e| e <= MAX_ENTRIES)
            .ok_or_else(|| {
                Error::Range(format!(
                    "histogram of {n_pairs} group pairs × {n_nodes} nodes exceeds the limit \
                     of {MAX_ENTRIES} entries; use fewer groups or a wider node spacing"
                ))
            })?;
        let mut pair_offset = vec![0usize; n_groups * n_groups];
        for g in 0..n_groups {
            for h in 0..n_groups {
                pair_offset[g * n_groups + h] = pair_index(g, h, n_groups) * n_nodes;
            }
        }
        Ok(PairHistogram {
            n_groups,
            n_nodes,
            dr,
            cutoff,
            pbox,
            pair_offset,
            acc: vec![0u128; entries],
            pairs: 0,
        })
    }

    /// Number of groups.
    pub fn n_groups(&self) -> usize {
        self.n_groups
    }

    /// Number of unordered group pairs (rows of [`values`](Self::values)).
    pub fn n_pairs(&self) -> usize {
        self.n_groups * (self.n_groups + 1) / 2
    }

    /// Number of distance nodes.
    pub fn n_nodes(&self) -> usize {
        self.n_nodes
    }

    /// Node spacing (Å).
    pub fn dr(&self) -> f64 {
        self.dr
    }

    /// Atom pairs binned so far.
    pub fn pairs_counted(&self) -> u128 {
        self.pairs
    }

    /// The accumulated weights as floats, row-major `(n_pairs, n_nodes)`.
    pub fn values(&self) -> Vec<f64> {
        self.acc.iter().map(|&v| v as f64 / SCALE).collect()
    }

    /// The accumulated weights as fixed-point integers (units of 2⁻⁴⁸), for exact
    /// comparisons.
    pub fn raw(&self) -> &[u128] {
        &self.acc
    }

    /// Add the pairs `i < j` inside one atom set: positions (Å), group indices, weights
    /// (occupancies, in [0, 1]).
    pub fn add_within(
        &mut self,
        positions: &[[f64; 3]],
        groups: &[u32],
        weights: &[f64],
        threads: Option<usize>,
    ) -> Result<()> {
        self.check_atoms(positions, groups, weights, "")?;
        if positions.len() < 2 {
            return Ok(());
        }
        let grid = self.grid(&[positions], 2 * positions.len())?;
        let cells = Cells::build(&grid, positions, weights, groups);
        self.accumulate(&grid, &cells, &cells, true, threads)
    }

    /// Add every pair (i in set A, j in set B). The sets must not share atoms.
    #[allow(clippy::too_many_arguments)]
    pub fn add_between(
        &mut self,
        positions_a: &[[f64; 3]],
        groups_a: &[u32],
        weights_a: &[f64],
        positions_b: &[[f64; 3]],
        groups_b: &[u32],
        weights_b: &[f64],
        threads: Option<usize>,
    ) -> Result<()> {
        self.check_atoms(positions_a, groups_a, weights_a, "first set: ")?;
        self.check_atoms(positions_b, groups_b, weights_b, "second set: ")?;
        if positions_a.is_empty() || positions_b.is_empty() {
            return Ok(());
        }
        let grid = self.grid(
            &[positions_a, positions_b],
            2 * (positions_a.len() + positions_b.len()),
        )?;
        let a = Cells::build(&grid, positions_a, weights_a, groups_a);
        let b = Cells::build(&grid, positions_b, weights_b, groups_b);
        self.accumulate(&grid, &a, &b, false, threads)
    }

    fn check_atoms(&self, pos: &[[f64; 3]], g: &[u32], w: &[f64], set: &str) -> Result<()> {
        let n = pos.len();
        if g.len() != n || w.len() != n {
            return Err(Error::Shape(format!(
                "{set}groups and weights must have one value per atom ({n}), got {} and {}",
                g.len(),
                w.len()
            )));
        }
        for (j, p) in pos.iter().enumerate() {
            if !(p[0].is_finite() && p[1].is_finite() && p[2].is_finite()) {
                return Err(Error::NonFinite(format!(
                    "{set}position of atom {j} is not finite: [{}, {}, {}]",
                    p[0], p[1], p[2]
                )));
            }
            if !(0.0..=1.0).contains(&w[j]) {
                return Err(Error::Range(format!(
                    "{set}weight (occupancy) of atom {j} is {}, outside [0, 1]",
                    w[j]
                )));
            }
            if g[j] as usize >= self.n_groups {
                return Err(Error::Range(format!(
                    "{set}group index of atom {j} is {}, but there are only {} groups",
                    g[j], self.n_groups
                )));
            }
        }
        Ok(())
    }

    /// The cell grid for the atom sets of one call: cells half a cut-off wide (reach 2) when
    /// they hold at least [`MIN_ATOMS_PER_CELL`] atoms on average, else a cut-off wide.
    fn grid(&self, sets: &[&[[f64; 3]]], max_cells: usize) -> Result<Grid> {
        let n_atoms: usize = sets.iter().map(|s| s.len()).sum();
        let max_cells = max_cells.max(27);
        if let Some(p) = &self.pbox {
            // `new` guarantees a cut-off with a periodic box.
            let c = self.cutoff.unwrap_or(0.5 * p.min_width());
            let fine = Grid::periodic(*p, c, 2, max_cells);
            if n_atoms >= MIN_ATOMS_PER_CELL * fine.n_cells() {
                return Ok(fine);
            }
            return Ok(Grid::periodic(*p, c, 1, max_cells));
        }
        let mut lo = [f64::INFINITY; 3];
        let mut hi = [f64::NEG_INFINITY; 3];
        for set in sets {
            for r in set.iter() {
                for i in 0..3 {
                    lo[i] = lo[i].min(r[i]);
                    hi[i] = hi[i].max(r[i]);
                }
            }
        }
        if self.cutoff.is_none() {
            let diag =
                ((hi[0] - lo[0]).powi(2) + (hi[1] - lo[1]).powi(2) + (hi[2] - lo[2]).powi(2))
                    .sqrt();
            let r_last = (self.n_nodes - 1) as f64 * self.dr;
            if diag > r_last {
                return Err(Error::Range(format!(
                    "the atoms span {diag} Å (bounding-box diagonal), beyond the last node at \
                     {r_last} Å; give a cutoff or more nodes"
                )));
            }
        }
        let fine = Grid::open(lo, hi, self.cutoff, 2, max_cells);
        if n_atoms >= MIN_ATOMS_PER_CELL * fine.n_cells() {
            return Ok(fine);
        }
        Ok(Grid::open(lo, hi, self.cutoff, 1, max_cells))
    }

    fn accumulate(
        &mut self,
        grid: &Grid,
        a: &Cells,
        b: &Cells,
        within: bool,
        threads: Option<usize>,
    ) -> Result<()> {
        let offsets = grid.offsets(within);
        let mut items: Vec<(usize, usize, usize)> = Vec::new();
        for c in 0..grid.n_cells() {
            let r = a.range(c);
            let mut i0 = r.start;
            while i0 < r.end {
                let i1 = (i0 + BLOCK).min(r.end);
                items.push((c, i0, i1));
                i0 = i1;
            }
        }
        if items.is_empty() {
            return Ok(());
        }
        let ctx = Ctx {
            n_groups: self.n_groups,
            inv_dr: 1.0 / self.dr,
            last: self.n_nodes - 2,
            cut2: self.cutoff.map_or(f64::INFINITY, |c| c * c),
            pair_offset: &self.pair_offset,
        };
        let len = self.acc.len();
        let job = Job {
            ctx: &ctx,
            grid,
            a,
            b,
            within,
            offsets: &offsets,
            items: &items,
            next: AtomicUsize::new(0),
        };
        let results: Vec<(Vec<u128>, u128)> = crate::pool::run(threads, || {
            let workers = rayon::current_num_threads().max(1).min(items.len());
            (0..workers)
                .into_par_iter()
                .map(|_| {
                    if len <= LOCAL_MAX {
                        let mut sink = Local::new(len);
                        let count = job.drain(&mut sink);
                        (sink.into_total(), count)
                    } else {
                        let mut sink = Direct(vec![0u128; len]);
                        let count = job.drain(&mut sink);
                        (sink.0, count)
                    }
                })
                .collect()
        })?;
        for (acc, count) in results {
            for (s, v) in self.acc.iter_mut().zip(acc) {
                *s += v;
            }
            self.pairs += count;
        }
        Ok(())
    }
}

/// The work of one call, shared by the worker threads: items are taken from `next`.
struct Job<'a> {
    ctx: &'a Ctx<'a>,
    grid: &'a Grid,
    a: &'a Cells,
    b: &'a Cells,
    within: bool,
    offsets: &'a [[i64; 3]],
    items: &'a [(usize, usize, usize)],
    next: AtomicUsize,
}

impl Job<'_> {
    /// Take work items until none is left; returns the number of pairs binned.
    fn drain<S: Sink>(&self, sink: &mut S) -> u128 {
        let mut count = 0u128;
        loop {
            let it = self.next.fetch_add(1, Ordering::Relaxed);
            let Some(&(c, i0, i1)) = self.items.get(it) else {
                break;
            };
            let cc = self.grid.coords(c);
            let (a, b) = (self.a, self.b);
            if self.within {
                let r = a.range(c);
                self.ctx
                    .block(a, i0, i1, a, r, [0.0; 3], true, sink, &mut count);
            }
            for &o in self.offsets {
                if let Some((cb, shift)) = self.grid.neighbour(cc, o) {
                    let r = b.range(cb);
                    if !r.is_empty() {
                        self.ctx
                            .block(a, i0, i1, b, r, shift, false, sink, &mut count);
                    }
                }
            }
        }
        count
    }
}

/// Where a worker adds its fixed-point contributions.
trait Sink {
    /// Make room for `hits` more pairs (each adds at most 2⁴⁸ to two nodes).
    fn reserve(&mut self, hits: u32);
    /// Add `v` to node `idx`.
    fn add(&mut self, idx: usize, v: u64);
}

/// Histograms up to this many entries are accumulated in 64-bit words and flushed into
/// 128-bit totals at least every 2¹⁶ − 1 pairs (a pair adds at most 2⁴⁸ to a node, so no word
/// can overflow in between). One add instead of two per node; a flush is one pass over the
/// histogram, cheap for histograms this small. Integers: the totals are exact either way.
const LOCAL_MAX: usize = 1 << 16;

/// 64-bit accumulators flushed into 128-bit totals.
struct Local {
    words: Vec<u64>,
    total: Vec<u128>,
    since: u32,
}

impl Local {
    fn new(len: usize) -> Self {
        Local {
            words: vec![0; len],
            total: vec![0; len],
            since: 0,
        }
    }

    fn flush(&mut self) {
        for (t, w) in self.total.iter_mut().zip(self.words.iter_mut()) {
            *t += *w as u128;
            *w = 0;
        }
        self.since = 0;
    }

    fn into_total(mut self) -> Vec<u128> {
        self.flush();
        self.total
    }
}

impl Sink for Local {
    #[inline(always)]
    fn reserve(&mut self, hits: u32) {
        if self.since + hits > u16::MAX as u32 {
            self.flush();
        }
        self.since += hits;
    }

    #[inline(always)]
    fn add(&mut self, idx: usize, v: u64) {
        self.words[idx] += v;
    }
}

/// 128-bit totals updated directly (large histograms).
struct Direct(Vec<u128>);

impl Sink for Direct {
    #[inline(always)]
    fn reserve(&mut self, _hits: u32) {}

    #[inline(always)]
    fn add(&mut self, idx: usize, v: u64) {
        self.0[idx] += v as u128;
    }
}

/// What the inner loop needs, borrowed from the histogram.
struct Ctx<'a> {
    n_groups: usize,
    inv_dr: f64,
    /// Highest lower node of a pair (`n_nodes − 2`).
    last: usize,
    cut2: f64,
    pair_offset: &'a [usize],
}

impl Ctx<'_> {
    /// Bin the pairs of atoms `i0..i1` of `a` with atoms `jr` of `b` shifted by `shift`
    /// (`triangle`: the same cell of the same set, only `j > i`).
    #[allow(clippy::too_many_arguments)]
    #[inline]
    fn block<S: Sink>(
        &self,
        a: &Cells,
        i0: usize,
        i1: usize,
        b: &Cells,
        jr: std::ops::Range<usize>,
        shift: [f64; 3],
        triangle: bool,
        acc: &mut S,
        count: &mut u128,
    ) {
        let mut d2 = [0.0f64; D2_BUF];
        for i in i0..i1 {
            let (xi, yi, zi, wi) = (a.x[i], a.y[i], a.z[i], a.w[i]);
            let gi = a.g[i] as usize;
            let row = &self.pair_offset[gi * self.n_groups..(gi + 1) * self.n_groups];
            let mut j0 = if triangle {
                (i + 1).max(jr.start)
            } else {
                jr.start
            };
            while j0 < jr.end {
                let n = (jr.end - j0).min(D2_BUF);
                let (bx, by, bz) = (&b.x[j0..j0 + n], &b.y[j0..j0 + n], &b.z[j0..j0 + n]);
                // (r_j − r_i) + shift: symmetric rounding under swapping i and j.
                for l in 0..n {
                    let dx = (bx[l] - xi) + shift[0];
                    let dy = (by[l] - yi) + shift[1];
                    let dz = (bz[l] - zi) + shift[2];
                    d2[l] = dx * dx + dy * dy + dz * dz;
                }
                // One bit per candidate within the cut-off (a vector compare), then only the
                // set bits are visited: no branch per candidate.
                let mut mask = 0u64;
                for l in 0..n {
                    mask |= ((d2[l] <= self.cut2) as u64) << l;
                }
                let hits = mask.count_ones();
                *count += hits as u128;
                acc.reserve(hits);
                while mask != 0 {
                    let l = mask.trailing_zeros() as usize;
                    mask &= mask - 1;
                    let j = j0 + l;
                    // t ∈ [0, n_nodes − 1] (up to rounding): distances are bounded by the
                    // cut-off, or by the bounding-box diagonal checked against the last node.
                    let t = d2[l].sqrt() * self.inv_dr;
                    let k = (t as i64).clamp(0, self.last as i64) as usize;
                    let frac = (t - k as f64).clamp(0.0, 1.0);
                    let wfix = round_to_u64(wi * b.w[j] * SCALE);
                    let upper = round_to_u64(wfix as f64 * frac);
                    let base = row[b.g[j] as usize] + k;
                    acc.add(base, wfix - upper);
                    acc.add(base + 1, upper);
                }
                j0 += n;
            }
        }
    }
}

/// Round `x` ∈ [0, 2⁵¹) to the nearest integer (ties to even), branch-free: adding 2⁵²
/// leaves the integer in the low mantissa bits.
#[inline(always)]
fn round_to_u64(x: f64) -> u64 {
    const MAGIC: f64 = 4_503_599_627_370_496.0; // 2^52
    (x + MAGIC).to_bits() - MAGIC.to_bits()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Largest |a − b| over two histograms of the same shape.
    fn max_abs_diff(a: &[f64], b: &[f64]) -> f64 {
        a.iter()
            .zip(b)
            .map(|(x, y)| (x - y).abs())
            .fold(0.0, f64::max)
    }

    /// Independent reference: every pair by brute force. In a periodic box the fractional
    /// difference is first reduced to [−½, ½) and then all 27 neighbouring images are tried
    /// (the shortest one is among them for the boxes used here); two-node binning in f64.
    #[allow(clippy::too_many_arguments)]
    fn brute(
        pos: &[[f64; 3]],
        g: &[u32],
        w: &[f64],
        n_groups: usize,
        n_nodes: usize,
        dr: f64,
        cutoff: f64,
        cell: Option<[[f64; 3]; 3]>,
    ) -> Vec<f64> {
        let mut h = vec![0.0; n_groups * (n_groups + 1) / 2 * n_nodes];
        // Inverse of the box by cofactors: frac = r · inv.
        let inv = cell.map(|c| {
            let det = c[0][0] * (c[1][1] * c[2][2] - c[1][2] * c[2][1])
                - c[0][1] * (c[1][0] * c[2][2] - c[1][2] * c[2][0])
                + c[0][2] * (c[1][0] * c[2][1] - c[1][1] * c[2][0]);
            let mut m = [[0.0; 3]; 3];
            for i in 0..3 {
                for j in 0..3 {
                    let (a, b) = ((j + 1) % 3, (j + 2) % 3);
                    let (p, q) = ((i + 1) % 3, (i + 2) % 3);
                    m[i][j] = (c[a][p] * c[b][q] - c[a][q] * c[b][p]) / det;
                }
            }
            m
        });
        for i in 0..pos.len() {
            for j in i + 1..pos.len() {
                let d0 = [0, 1, 2].map(|k| pos[j][k] - pos[i][k]);
                let best = match (cell, inv) {
                    (Some(c), Some(m)) => {
                        let f = [0, 1, 2].map(|a| {
                            let v = d0[0] * m[0][a] + d0[1] * m[1][a] + d0[2] * m[2][a];
                            v - v.round()
                        });
                        let mut best = f64::INFINITY;
                        for a in -1..=1 {
                            for b in -1..=1 {
                                for e in -1..=1 {
                                    let s = [f[0] + a as f64, f[1] + b as f64, f[2] + e as f64];
                                    let d: f64 = (0..3)
                                        .map(|k| {
                                            (s[0] * c[0][k] + s[1] * c[1][k] + s[2] * c[2][k])
                                                .powi(2)
                                        })
                                        .sum::<f64>()
                                        .sqrt();
                                    best = best.min(d);
                                }
                            }
                        }
                        best
                    }
                    _ => (d0[0] * d0[0] + d0[1] * d0[1] + d0[2] * d0[2]).sqrt(),
                };
                if best <= cutoff {
                    let t = best / dr;
                    let k = t.floor() as usize;
                    let f = t - k as f64;
                    let p = pair_index(g[i] as usize, g[j] as usize, n_groups) * n_nodes;
                    h[p + k] += w[i] * w[j] * (1.0 - f);
                    h[p + k + 1] += w[i] * w[j] * f;
                }
            }
        }
        h
    }

    fn lcg(seed: &mut u64) -> f64 {
        *seed = seed
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        (*seed >> 11) as f64 / (1u64 << 53) as f64
    }

    fn random_atoms(
        n: usize,
        span: f64,
        n_groups: u32,
        seed: u64,
    ) -> (Vec<[f64; 3]>, Vec<u32>, Vec<f64>) {
        let mut s = seed;
        let pos: Vec<[f64; 3]> = (0..n)
            .map(|_| [span * lcg(&mut s), span * lcg(&mut s), span * lcg(&mut s)])
            .collect();
        let g: Vec<u32> = (0..n)
            .map(|_| (lcg(&mut s) * n_groups as f64) as u32)
            .collect();
        let w: Vec<f64> = (0..n).map(|_| 0.5 + 0.5 * lcg(&mut s)).collect();
        (pos, g, w)
    }

    #[test]
    fn pair_index_enumerates_the_upper_triangle() {
        let mut seen = Vec::new();
        for g in 0..4 {
            for h in g..4 {
                seen.push(pair_index(g, h, 4));
                assert_eq!(pair_index(g, h, 4), pair_index(h, g, 4));
            }
        }
        assert_eq!(seen, (0..10).collect::<Vec<_>>());
    }

    #[test]
    fn open_model_matches_brute_force() {
        let (pos, g, w) = random_atoms(300, 12.0, 3, 1);
        let dr = 0.01;
        // Cut-offs below and near a third of the span (cells), and none (all pairs).
        for cutoff in [Some(3.5), Some(7.99), None] {
            let mut h = PairHistogram::new(3, 2200, dr, cutoff, None).unwrap();
            h.add_within(&pos, &g, &w, Some(2)).unwrap();
            let c = cutoff.unwrap_or(f64::INFINITY);
            let want = brute(&pos, &g, &w, 3, 2200, dr, c, None);
            let got = h.values();
            let err = max_abs_diff(&got, &want);
            assert!(err < 1e-9, "cutoff {cutoff:?}: max error {err}");
        }
    }

    #[test]
    fn large_histograms_take_the_direct_path() {
        // More than LOCAL_MAX entries: 128-bit totals updated directly; same brute force.
        let (pos, g, w) = random_atoms(300, 12.0, 2, 5);
        let (n_nodes, dr) = (30_000, 0.0002);
        assert!(3 * n_nodes > LOCAL_MAX);
        let mut h = PairHistogram::new(2, n_nodes, dr, Some(5.5), None).unwrap();
        h.add_within(&pos, &g, &w, Some(2)).unwrap();
        let want = brute(&pos, &g, &w, 2, n_nodes, dr, 5.5, None);
        let err = max_abs_diff(&h.values(), &want);
        assert!(err < 1e-9, "max error {err}");
    }

    #[test]
    fn triclinic_box_matches_brute_force_minimum_image() {
        let cell = [[9.0, 0.0, 0.0], [3.5, 8.0, 0.0], [-2.0, 2.5, 10.0]];
        let (frac, g, w) = random_atoms(200, 1.0, 2, 7);
        // Cartesian positions, some outside the box (wrapping must not matter).
        let pos: Vec<[f64; 3]> = frac
            .iter()
            .enumerate()
            .map(|(j, s)| {
                let s = [s[0] + (j % 3) as f64 - 1.0, s[1], s[2] - (j % 2) as f64];
                [0, 1, 2].map(|k| s[0] * cell[0][k] + s[1] * cell[1][k] + s[2] * cell[2][k])
            })
            .collect();
        let p = PeriodicBox::new(cell).unwrap();
        let cutoff = 0.5 * p.min_width();
        let (n_nodes, dr) = (((cutoff / 0.02) as usize) + 2, 0.02);
        let mut h = PairHistogram::new(2, n_nodes, dr, Some(cutoff), Some(cell)).unwrap();
        h.add_within(&pos, &g, &w, Some(2)).unwrap();
        let want = brute(&pos, &g, &w, 2, n_nodes, dr, cutoff, Some(cell));
        let got = h.values();
        let err = max_abs_diff(&got, &want);
        assert!(err < 1e-9, "max error {err}");
        let total: f64 = want.iter().sum();
        assert!(total > 100.0, "the test needs pairs: {total}");
    }

    #[test]
    fn dense_triclinic_box_with_half_cutoff_cells_matches_brute_force() {
        // Enough atoms per cell for cells half a cut-off wide (reach 2).
        let cell = [[14.0, 0.0, 0.0], [3.0, 13.0, 0.0], [-2.0, 1.5, 12.5]];
        let (frac, g, w) = random_atoms(1100, 1.0, 2, 11);
        let pos: Vec<[f64; 3]> = frac
            .iter()
            .map(|s| [0, 1, 2].map(|k| s[0] * cell[0][k] + s[1] * cell[1][k] + s[2] * cell[2][k]))
            .collect();
        // Smallest face-to-face width 12.5 Å: the largest cut-off is 6.25 Å.
        let cutoff = 6.0;
        let (n_nodes, dr) = (310, 0.02);
        let mut h = PairHistogram::new(2, n_nodes, dr, Some(cutoff), Some(cell)).unwrap();
        let grid = h.grid(&[&pos], 2 * pos.len()).unwrap();
        assert_eq!(grid.reach, 2, "the test is meant for half-cut-off cells");
        h.add_within(&pos, &g, &w, Some(2)).unwrap();
        let want = brute(&pos, &g, &w, 2, n_nodes, dr, cutoff, Some(cell));
        let err = max_abs_diff(&h.values(), &want);
        assert!(err < 1e-9, "max error {err}");
    }

    #[test]
    fn small_periodic_box_counts_every_image_once() {
        // A cubic box of 4 Å with one atom: no pair (the atom's own images are 4 Å away,
        // beyond the largest allowed cut-off of 2 Å). Two atoms 1 Å apart along x: one pair
        // at 1 Å (the other image at 3 Å is beyond the cut-off).
        let cell = [[4.0, 0.0, 0.0], [0.0, 4.0, 0.0], [0.0, 0.0, 4.0]];
        let mut h = PairHistogram::new(1, 101, 0.02, Some(2.0), Some(cell)).unwrap();
        h.add_within(&[[0.1, 0.2, 0.3]], &[0], &[1.0], None)
            .unwrap();
        assert_eq!(h.pairs_counted(), 0);
        h.add_within(
            &[[3.5, 0.0, 0.0], [0.5, 0.0, 0.0]],
            &[0, 0],
            &[1.0, 1.0],
            None,
        )
        .unwrap();
        assert_eq!(h.pairs_counted(), 1);
        let v = h.values();
        assert!(
            (v[50] - 1.0).abs() < 1e-12,
            "pair at 1 Å: node 50 = {}",
            v[50]
        );
    }

    #[test]
    fn thread_count_and_chunking_do_not_change_the_integers() {
        let (pos, g, w) = random_atoms(2000, 20.0, 3, 3);
        let cell = [[20.0, 0.0, 0.0], [0.0, 20.0, 0.0], [1.0, 0.0, 20.0]];
        for pbox in [None, Some(cell)] {
            let new = || PairHistogram::new(3, 700, 0.0125, Some(8.0), pbox).unwrap();
            let mut one = new();
            one.add_within(&pos, &g, &w, Some(1)).unwrap();
            let mut two = new();
            two.add_within(&pos, &g, &w, Some(3)).unwrap();
            assert_eq!(one.raw(), two.raw());
            // chunks 0..700, 700..2000: within both, between them
            let mut split = new();
            let (a, b) = (0..700, 700..2000);
            split
                .add_within(&pos[a.clone()], &g[a.clone()], &w[a.clone()], Some(2))
                .unwrap();
            split
                .add_within(&pos[b.clone()], &g[b.clone()], &w[b.clone()], Some(2))
                .unwrap();
            split
                .add_between(
                    &pos[b.clone()],
                    &g[b.clone()],
                    &w[b.clone()],
                    &pos[a.clone()],
                    &g[a.clone()],
                    &w[a],
                    Some(2),
                )
                .unwrap();
            assert_eq!(one.raw(), split.raw());
            assert_eq!(one.pairs_counted(), split.pairs_counted());
        }
    }

    #[test]
    fn bad_input_is_refused_with_the_place() {
        let cell = [[10.0, 0.0, 0.0], [0.0, 10.0, 0.0], [0.0, 0.0, 6.0]];
        let e = PairHistogram::new(1, 400, 0.01, Some(3.5), Some(cell)).unwrap_err();
        assert!(e.to_string().contains("half the smallest"), "{e}");
        let e = PairHistogram::new(1, 400, 0.01, None, Some(cell)).unwrap_err();
        assert!(e.to_string().contains("needs a cutoff"), "{e}");
        let e = PairHistogram::new(1, 100, 0.01, Some(3.0), None).unwrap_err();
        assert!(e.to_string().contains("beyond the last node"), "{e}");
        assert!(PairHistogram::new(0, 100, 0.01, None, None).is_err());
        assert!(PairHistogram::new(1, 100, f64::NAN, None, None).is_err());
        let mut h = PairHistogram::new(2, 100, 0.01, None, None).unwrap();
        let pos = [[0.0; 3], [0.0, f64::NAN, 0.0]];
        let e = h.add_within(&pos, &[0, 0], &[1.0, 1.0], None).unwrap_err();
        assert!(e.to_string().contains("atom 1"), "{e}");
        let e = h
            .add_within(&[[0.0; 3], [0.5; 3]], &[0, 2], &[1.0, 1.0], None)
            .unwrap_err();
        assert!(
            e.to_string().contains("atom 1") && e.to_string().contains("2 groups"),
            "{e}"
        );
        let e = h
            .add_within(&[[0.0; 3], [0.5; 3]], &[0, 1], &[1.0, 1.5], None)
            .unwrap_err();
        assert!(e.to_string().contains("outside [0, 1]"), "{e}");
        let e = h
            .add_within(&[[0.0; 3], [5.0; 3]], &[0, 1], &[1.0, 1.0], None)
            .unwrap_err();
        assert!(e.to_string().contains("beyond the last node"), "{e}");
    }
}
