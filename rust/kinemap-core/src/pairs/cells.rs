//! Cell lists: atoms sorted into a grid of cells at least `cutoff / reach` wide, so that every
//! pair closer than the cut-off lies in cells whose indices differ by at most `reach` along
//! each axis.
//!
//! Periodic boxes use cells along the box vectors (parallelepipeds): two points closer than
//! `c` differ in fractional coordinate `i` by less than `c / w_i` (`w_i` the face-to-face width
//! of the box across axis `i`), so with `n_i = ⌊reach·w_i / c⌋` cells along that axis their
//! cell indices differ by at most `reach`. Non-periodic models use cells along x, y, z over
//! the bounding box. Widths carry a relative margin of 10⁻⁹ so that rounding in the index
//! computation can never put two close atoms one cell too far apart. A reach of 2 (cells half
//! a cut-off wide) searches a volume of 125/8 cut-off³ instead of 27 for a reach of 1: 1.7×
//! fewer candidate pairs for the 4.19 cut-off³ of the sphere, when cells hold enough atoms to
//! pay for the extra cell visits.

use crate::error::{Error, Result};

/// Relative margin on cell widths (see the module notes).
const WIDTH_MARGIN: f64 = 1.0 + 1e-9;

/// The periodic box: rows a, b, c (Å), its inverse and face-to-face widths.
#[derive(Debug, Clone, Copy)]
pub(crate) struct PeriodicBox {
    pub(crate) rows: [[f64; 3]; 3],
    /// `inv[k][i]`: fractional coordinate `s_i = Σ_k r_k inv[k][i]` (the inverse matrix).
    pub(crate) inv: [[f64; 3]; 3],
    /// Face-to-face width across each axis, `1 / |b_i*|` (Å).
    pub(crate) widths: [f64; 3],
}

impl PeriodicBox {
    /// Check a box (finite, non-singular) and precompute its inverse and widths.
    pub(crate) fn new(rows: [[f64; 3]; 3]) -> Result<Self> {
        if rows.iter().flatten().any(|v| !v.is_finite()) {
            return Err(Error::NonFinite(format!(
                "periodic box has non-finite entries: {rows:?}"
            )));
        }
        let [a, b, c] = rows;
        let cross = |u: [f64; 3], v: [f64; 3]| {
            [
                u[1] * v[2] - u[2] * v[1],
                u[2] * v[0] - u[0] * v[2],
                u[0] * v[1] - u[1] * v[0],
            ]
        };
        let dot = |u: [f64; 3], v: [f64; 3]| u[0] * v[0] + u[1] * v[1] + u[2] * v[2];
        let bc = cross(b, c);
        let ca = cross(c, a);
        let ab = cross(a, b);
        let vol = dot(a, bc);
        let scale = dot(a, a).sqrt() * dot(b, b).sqrt() * dot(c, c).sqrt();
        // (also catches a NaN volume)
        if vol.abs().partial_cmp(&(1e-9 * scale.max(1e-300))) != Some(std::cmp::Ordering::Greater) {
            return Err(Error::Range(format!(
                "periodic box is singular (volume {vol:.3e} Å³): its rows must be independent"
            )));
        }
        // Reciprocal rows b_i* = (b × c)/V, ...; s_i = r · b_i*.
        let recip = [bc, ca, ab].map(|v| v.map(|x| x / vol));
        let mut inv = [[0.0; 3]; 3];
        for k in 0..3 {
            for i in 0..3 {
                inv[k][i] = recip[i][k];
            }
        }
        let widths = recip.map(|v| 1.0 / dot(v, v).sqrt());
        Ok(PeriodicBox { rows, inv, widths })
    }

    /// Smallest face-to-face width (Å).
    pub(crate) fn min_width(&self) -> f64 {
        self.widths[0].min(self.widths[1]).min(self.widths[2])
    }

    /// Fractional coordinates of `r`, wrapped into [0, 1).
    #[inline]
    fn wrapped_fraction(&self, r: [f64; 3]) -> [f64; 3] {
        let mut s = [0.0; 3];
        for i in 0..3 {
            let v = r[0] * self.inv[0][i] + r[1] * self.inv[1][i] + r[2] * self.inv[2][i];
            let mut w = v - v.floor();
            if w >= 1.0 {
                w = 0.0; // v a tiny negative number: v − ⌊v⌋ rounds to 1
            }
            s[i] = w;
        }
        s
    }
}

/// The cell grid shared by the two atom sets of a call.
#[derive(Debug, Clone)]
pub(crate) struct Grid {
    pub(crate) dims: [usize; 3],
    /// Largest index offset between the cells of a pair within the cut-off.
    pub(crate) reach: usize,
    /// Periodic box, or None for cells along x, y, z over `lo`.
    pub(crate) periodic: Option<PeriodicBox>,
    lo: [f64; 3],
    /// Cells per Å along each axis (non-periodic).
    per_length: [f64; 3],
}

impl Grid {
    /// Cells for a periodic box, each at least `cutoff / reach` wide, at most `max_cells`.
    pub(crate) fn periodic(pbox: PeriodicBox, cutoff: f64, reach: usize, max_cells: usize) -> Self {
        let mut dims = [0usize; 3];
        for i in 0..3 {
            dims[i] =
                ((reach as f64 * pbox.widths[i] / (cutoff * WIDTH_MARGIN)).floor() as usize).max(1);
        }
        cap_cells(&mut dims, max_cells);
        Grid {
            dims,
            reach,
            periodic: Some(pbox),
            lo: [0.0; 3],
            per_length: [0.0; 3],
        }
    }

    /// Cells over the bounding box `lo..hi`, at least `cutoff / reach` wide (one cell when
    /// None).
    pub(crate) fn open(
        lo: [f64; 3],
        hi: [f64; 3],
        cutoff: Option<f64>,
        reach: usize,
        max_cells: usize,
    ) -> Self {
        let mut dims = [1usize; 3];
        if let Some(c) = cutoff {
            for i in 0..3 {
                let extent = hi[i] - lo[i];
                dims[i] = ((reach as f64 * extent / (c * WIDTH_MARGIN)).floor() as usize).max(1);
            }
            cap_cells(&mut dims, max_cells);
        }
        let mut per_length = [0.0; 3];
        for i in 0..3 {
            let extent = hi[i] - lo[i];
            per_length[i] = if extent > 0.0 {
                dims[i] as f64 / extent
            } else {
                0.0
            };
        }
        Grid {
            dims,
            reach,
            periodic: None,
            lo,
            per_length,
        }
    }

    /// Number of cells.
    pub(crate) fn n_cells(&self) -> usize {
        self.dims[0] * self.dims[1] * self.dims[2]
    }

    /// Cell offsets to search: for pairs inside one set, those whose first non-zero component
    /// is positive (the zero offset is handled with `i < j`); across two sets, all of them.
    pub(crate) fn offsets(&self, within: bool) -> Vec<[i64; 3]> {
        let r = self.reach as i64;
        let mut out = Vec::new();
        for x in -r..=r {
            for y in -r..=r {
                for z in -r..=r {
                    let o = [x, y, z];
                    let first = o.iter().copied().find(|&v| v != 0);
                    if !within || first.is_some_and(|v| v > 0) {
                        out.push(o);
                    }
                }
            }
        }
        out
    }

    /// Linear index of cell (x, y, z).
    #[inline]
    pub(crate) fn index(&self, c: [usize; 3]) -> usize {
        (c[0] * self.dims[1] + c[1]) * self.dims[2] + c[2]
    }

    /// Cell coordinates of a linear index.
    #[inline]
    pub(crate) fn coords(&self, i: usize) -> [usize; 3] {
        let z = i % self.dims[2];
        let y = (i / self.dims[2]) % self.dims[1];
        [i / (self.dims[1] * self.dims[2]), y, z]
    }

    /// The cell reached from `c` by `offset`, and the lattice shift (Å) to add to the
    /// positions of its atoms; None when it lies outside a non-periodic grid.
    #[inline]
    pub(crate) fn neighbour(&self, c: [usize; 3], offset: [i64; 3]) -> Option<(usize, [f64; 3])> {
        let mut out = [0usize; 3];
        let mut wraps = [0i64; 3];
        for i in 0..3 {
            let n = self.dims[i] as i64;
            let u = c[i] as i64 + offset[i];
            let m = u.div_euclid(n);
            if m != 0 && self.periodic.is_none() {
                return None;
            }
            wraps[i] = m;
            out[i] = u.rem_euclid(n) as usize;
        }
        let mut shift = [0.0; 3];
        if let Some(p) = &self.periodic {
            for (i, &m) in wraps.iter().enumerate() {
                if m != 0 {
                    let m = m as f64;
                    for k in 0..3 {
                        shift[k] += m * p.rows[i][k];
                    }
                }
            }
        }
        Some((self.index(out), shift))
    }
}

/// Shrink the largest dimension until the grid has at most `max_cells` cells (cells only
/// grow wider, so the adjacency property holds).
fn cap_cells(dims: &mut [usize; 3], max_cells: usize) {
    let max_cells = max_cells.max(1);
    while dims[0].saturating_mul(dims[1]).saturating_mul(dims[2]) > max_cells {
        let i = (0..3).max_by_key(|&i| dims[i]).unwrap_or(0);
        dims[i] = (dims[i] / 2).max(1);
    }
}

/// Atoms sorted by cell (counting sort, input order kept within a cell), structure of arrays.
#[derive(Debug, Clone)]
pub(crate) struct Cells {
    /// Cell `c` holds atoms `start[c]..start[c + 1]`.
    pub(crate) start: Vec<usize>,
    pub(crate) x: Vec<f64>,
    pub(crate) y: Vec<f64>,
    pub(crate) z: Vec<f64>,
    pub(crate) w: Vec<f64>,
    pub(crate) g: Vec<u32>,
}

impl Cells {
    /// Sort atoms into the cells of `grid`. Periodic positions are wrapped into the box.
    pub(crate) fn build(grid: &Grid, pos: &[[f64; 3]], w: &[f64], g: &[u32]) -> Self {
        let n = pos.len();
        let mut cell_of = Vec::with_capacity(n);
        let mut wrapped: Vec<[f64; 3]> = Vec::new();
        match &grid.periodic {
            Some(p) => {
                wrapped.reserve(n);
                for r in pos {
                    let s = p.wrapped_fraction(*r);
                    let mut c = [0usize; 3];
                    for i in 0..3 {
                        c[i] = ((s[i] * grid.dims[i] as f64) as usize).min(grid.dims[i] - 1);
                    }
                    cell_of.push(grid.index(c));
                    let mut rw = [0.0; 3];
                    for k in 0..3 {
                        rw[k] = s[0] * p.rows[0][k] + s[1] * p.rows[1][k] + s[2] * p.rows[2][k];
                    }
                    wrapped.push(rw);
                }
            }
            None => {
                for r in pos {
                    let mut c = [0usize; 3];
                    for i in 0..3 {
                        let t = ((r[i] - grid.lo[i]) * grid.per_length[i]).max(0.0);
                        c[i] = (t as usize).min(grid.dims[i] - 1);
                    }
                    cell_of.push(grid.index(c));
                }
            }
        }
        let positions: &[[f64; 3]] = if wrapped.is_empty() { pos } else { &wrapped };
        let nc = grid.n_cells();
        let mut start = vec![0usize; nc + 1];
        for &c in &cell_of {
            start[c + 1] += 1;
        }
        for c in 0..nc {
            start[c + 1] += start[c];
        }
        let mut next = start[..nc].to_vec();
        let (mut x, mut y, mut z) = (vec![0.0; n], vec![0.0; n], vec![0.0; n]);
        let (mut ws, mut gs) = (vec![0.0; n], vec![0u32; n]);
        for (j, &c) in cell_of.iter().enumerate() {
            let slot = next[c];
            next[c] += 1;
            x[slot] = positions[j][0];
            y[slot] = positions[j][1];
            z[slot] = positions[j][2];
            ws[slot] = w[j];
            gs[slot] = g[j];
        }
        Cells {
            start,
            x,
            y,
            z,
            w: ws,
            g: gs,
        }
    }

    /// Atom range of cell `c`.
    #[inline]
    pub(crate) fn range(&self, c: usize) -> std::ops::Range<usize> {
        self.start[c]..self.start[c + 1]
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn widths_of_a_triclinic_box() {
        // Analytic: rows a = (4,0,0), b = (1,5,0), c = (0,0,6), volume V = 120 Å³; the
        // face-to-face width across axis a is V/|b × c| = 120/|(30,-6,0)| = 120/√936, across
        // b it is V/|c × a| = 120/24 = 5, across c V/|a × b| = 120/20 = 6.
        let p = PeriodicBox::new([[4.0, 0.0, 0.0], [1.0, 5.0, 0.0], [0.0, 0.0, 6.0]]).unwrap();
        assert!((p.widths[0] - 120.0 / 936f64.sqrt()).abs() < 1e-12);
        assert!((p.widths[1] - 5.0).abs() < 1e-12);
        assert!((p.widths[2] - 6.0).abs() < 1e-12);
    }

    #[test]
    fn singular_box_is_refused() {
        let e = PeriodicBox::new([[1.0, 0.0, 0.0], [2.0, 0.0, 0.0], [0.0, 0.0, 1.0]]).unwrap_err();
        assert!(e.to_string().contains("singular"), "{e}");
    }

    #[test]
    fn periodic_neighbours_wrap_with_shifts() {
        let p = PeriodicBox::new([[10.0, 0.0, 0.0], [0.0, 10.0, 0.0], [0.0, 0.0, 10.0]]).unwrap();
        let g = Grid::periodic(p, 3.0, 1, 1000);
        assert_eq!(g.dims, [3, 3, 3]);
        let (c, shift) = g.neighbour([2, 0, 1], [1, -1, 0]).unwrap();
        assert_eq!(g.coords(c), [0, 2, 1]);
        assert_eq!(shift, [10.0, -10.0, 0.0]);
    }

    #[test]
    fn sorting_keeps_every_atom_once() {
        let g = Grid::open([0.0; 3], [9.0, 9.0, 9.0], Some(3.0), 1, 1000);
        assert_eq!(g.dims, [2, 2, 2]);
        let pos = [
            [0.5, 0.5, 0.5],
            [8.9, 0.0, 0.0],
            [4.6, 4.6, 4.6],
            [9.0, 9.0, 9.0],
        ];
        let cells = Cells::build(&g, &pos, &[1.0; 4], &[0, 1, 2, 3]);
        assert_eq!(cells.start.len(), 9);
        assert_eq!(*cells.start.last().unwrap(), 4);
        let mut seen: Vec<u32> = cells.g.clone();
        seen.sort();
        assert_eq!(seen, vec![0, 1, 2, 3]);
        assert_eq!(cells.range(g.index([1, 1, 1])).len(), 2);
    }

    #[test]
    fn offsets_cover_each_neighbour_once() {
        let g = Grid::open([0.0; 3], [9.0, 9.0, 9.0], Some(3.0), 2, 1000);
        assert_eq!(g.dims, [5, 5, 5]);
        let half = g.offsets(true);
        let all = g.offsets(false);
        assert_eq!((half.len(), all.len()), (62, 125));
        for o in &half {
            assert!(!half.contains(&[-o[0], -o[1], -o[2]]));
        }
    }
}
