//! Atoms prepared for the kernels: structure of arrays, sorted by scattering group, padded.
//!
//! A *group* is a set of atoms that share one q-dependent factor: the form factor of their
//! species times their Debye–Waller factor. Inside a group only a q-independent weight (the
//! occupancy) multiplies each atom, so the kernels sum `w_j exp(i q·r_j)` per group and apply
//! the group factor once per q-point.

use crate::error::{Error, Result};
use rayon::prelude::*;

/// Most groups of one atom set (kinemap's models have at most 4096).
pub const MAX_GROUPS: usize = 1 << 16;

/// Atoms per block of the parallel preparation.
const PREP_BLOCK: usize = 1 << 16;

/// The four output arrays of the preparation, written at disjoint indices by its blocks.
struct Dest([*mut f64; 4]);
// SAFETY: only used in `AtomSet::new`, where each index of each array is written by exactly
// one task while the vectors are exclusively borrowed.
unsafe impl Sync for Dest {}

/// Refuses a non-finite position or weight of atom `j`, naming it.
pub(crate) fn check_finite(j: usize, p: [f64; 3], w: f64) -> Result<()> {
    if !(p[0].is_finite() && p[1].is_finite() && p[2].is_finite()) {
        return Err(Error::NonFinite(format!(
            "position of atom {j} is not finite: [{}, {}, {}]",
            p[0], p[1], p[2]
        )));
    }
    if !w.is_finite() {
        return Err(Error::NonFinite(format!(
            "weight of atom {j} is not finite: {w}"
        )));
    }
    Ok(())
}

fn check_atom(j: usize, p: [f64; 3], w: f64, g: u32, n_groups: usize) -> Result<()> {
    check_finite(j, p, w)?;
    if g as usize >= n_groups {
        return Err(Error::Range(format!(
            "group index of atom {j} is {g}, but there are only {n_groups} groups"
        )));
    }
    Ok(())
}

/// Atoms per padded block: groups are padded with zero-weight atoms to a multiple of this, so
/// the kernels never branch on a remainder. Four vectors of [`crate::sincos::LANES`] (the
/// widest interleave of the phase-stepping kernel).
pub const BLOCK: usize = 4 * crate::sincos::LANES;

/// Atom coordinates and weights in structure-of-arrays form, grouped and padded.
#[derive(Debug, Clone)]
pub struct AtomSet {
    pub(crate) x: Vec<f64>,
    pub(crate) y: Vec<f64>,
    pub(crate) z: Vec<f64>,
    pub(crate) w: Vec<f64>,
    /// Group `g` occupies `offsets[g]..offsets[g + 1]`; every range length is a multiple of
    /// [`BLOCK`].
    pub(crate) offsets: Vec<usize>,
    n_atoms: usize,
    /// Largest distance of an atom from the origin, Å (bounds the phases q·r).
    max_norm: f64,
}

impl AtomSet {
    /// Prepare atoms for the kernels.
    ///
    /// `positions` are Cartesian (Å), `weights` the q-independent per-atom factors (usually the
    /// occupancy), `groups[j]` the group index of atom `j` (`< n_groups`). Within a group the
    /// input order is kept, so sums run in a fixed order whatever the thread count.
    pub fn new(
        positions: &[[f64; 3]],
        weights: &[f64],
        groups: &[u32],
        n_groups: usize,
    ) -> Result<Self> {
        let n = positions.len();
        if weights.len() != n {
            return Err(Error::Shape(format!(
                "weights must have one value per atom ({n}), got {}",
                weights.len()
            )));
        }
        if groups.len() != n {
            return Err(Error::Shape(format!(
                "groups must have one value per atom ({n}), got {}",
                groups.len()
            )));
        }
        if n_groups == 0 || n_groups > MAX_GROUPS {
            return Err(Error::Range(format!(
                "n_groups must be 1 to {MAX_GROUPS}, got {n_groups}"
            )));
        }
        // Pass 1, parallel over fixed blocks of atoms (not threads, so the layout never
        // depends on the thread count): check every atom, count each block's atoms per group.
        let n_blocks = n.div_ceil(PREP_BLOCK);
        let per_block: Vec<Result<(Vec<usize>, f64)>> = (0..n_blocks)
            .into_par_iter()
            .map(|b| {
                let lo = b * PREP_BLOCK;
                let hi = (lo + PREP_BLOCK).min(n);
                let mut counts = vec![0usize; n_groups];
                let mut max_norm2 = 0.0f64;
                for j in lo..hi {
                    let (p, w, g) = (positions[j], weights[j], groups[j]);
                    check_atom(j, p, w, g, n_groups)?;
                    counts[g as usize] += 1;
                    max_norm2 = max_norm2.max(p[0] * p[0] + p[1] * p[1] + p[2] * p[2]);
                }
                Ok((counts, max_norm2))
            })
            .collect();
        let mut block_counts = crate::alloc::with_capacity(n_blocks, "group counts")?;
        let mut max_norm2 = 0.0f64;
        for r in per_block {
            let (c, m) = r?; // the first bad atom, in atom order
            block_counts.push(c);
            max_norm2 = max_norm2.max(m);
        }
        let mut offsets = crate::alloc::with_capacity(n_groups + 1, "group offsets")?;
        offsets.push(0usize);
        for g in 0..n_groups {
            let c: usize = block_counts.iter().map(|bc| bc[g]).sum();
            let padded = c.div_ceil(BLOCK) * BLOCK;
            offsets.push(offsets[g] + padded);
        }
        // Where each block's atoms of each group start (blocks in order within a group).
        let mut starts = block_counts;
        let mut next = offsets[..n_groups].to_vec();
        for bc in starts.iter_mut() {
            for (b, nx) in bc.iter_mut().zip(next.iter_mut()) {
                let c = *b;
                *b = *nx;
                *nx += c;
            }
        }
        let total = offsets[n_groups];
        let arr = |what| -> Result<Vec<f64>> {
            let mut v = crate::alloc::with_capacity(total, what)?;
            v.par_extend(rayon::iter::repeat_n(0.0f64, total));
            Ok(v)
        };
        let (mut x, mut y, mut z, mut wv) = (
            arr("atom x coordinates")?,
            arr("atom y coordinates")?,
            arr("atom z coordinates")?,
            arr("atom weights")?,
        );
        // Pass 2: every block writes its atoms to its own disjoint destinations.
        let out = Dest([
            x.as_mut_ptr(),
            y.as_mut_ptr(),
            z.as_mut_ptr(),
            wv.as_mut_ptr(),
        ]);
        starts
            .into_par_iter()
            .enumerate()
            .for_each(|(b, mut next)| {
                let out = &out;
                let lo = b * PREP_BLOCK;
                let hi = (lo + PREP_BLOCK).min(n);
                for j in lo..hi {
                    let (p, g) = (positions[j], groups[j] as usize);
                    let d = next[g];
                    next[g] += 1;
                    debug_assert!(d < total);
                    // SAFETY: d < total (offsets sum the padded counts) and every destination is
                    // produced by exactly one (block, atom): the blocks' ranges per group are
                    // disjoint by construction of `starts`.
                    unsafe {
                        *out.0[0].add(d) = p[0];
                        *out.0[1].add(d) = p[1];
                        *out.0[2].add(d) = p[2];
                        *out.0[3].add(d) = weights[j];
                    }
                }
            });
        Ok(AtomSet {
            x,
            y,
            z,
            w: wv,
            offsets,
            n_atoms: n,
            max_norm: max_norm2.sqrt(),
        })
    }

    /// Largest distance of an atom from the origin (Å).
    pub fn max_norm(&self) -> f64 {
        self.max_norm
    }

    /// Number of real (unpadded) atoms.
    pub fn n_atoms(&self) -> usize {
        self.n_atoms
    }

    /// Number of groups.
    pub fn n_groups(&self) -> usize {
        self.offsets.len() - 1
    }

    /// Index range of group `g` in the padded arrays.
    pub(crate) fn range(&self, g: usize) -> std::ops::Range<usize> {
        self.offsets[g]..self.offsets[g + 1]
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn groups_are_sorted_and_padded() {
        let pos = [[1.0, 0.0, 0.0], [2.0, 0.0, 0.0], [3.0, 0.0, 0.0]];
        let a = AtomSet::new(&pos, &[1.0, 0.5, 0.25], &[1, 0, 1], 2).unwrap();
        assert_eq!(a.n_atoms(), 3);
        assert_eq!(a.offsets, vec![0, BLOCK, 2 * BLOCK]);
        assert_eq!((a.x[0], a.w[0]), (2.0, 0.5));
        assert_eq!((a.x[BLOCK], a.x[BLOCK + 1]), (1.0, 3.0));
        assert_eq!(a.w[1], 0.0);
    }

    #[test]
    fn many_blocks_keep_the_input_order_within_groups() {
        // Three blocks of the parallel preparation: each group's atoms in input order, the
        // first bad atom (in atom order) named, whatever block it is in.
        let n = 2 * PREP_BLOCK + 123;
        let pos: Vec<[f64; 3]> = (0..n).map(|j| [j as f64, 0.0, 1.0]).collect();
        let groups: Vec<u32> = (0..n).map(|j| (j % 7 % 3) as u32).collect();
        let w = vec![1.0; n];
        let a = AtomSet::new(&pos, &w, &groups, 3).unwrap();
        for g in 0..3u32 {
            let want: Vec<f64> = (0..n)
                .filter(|&j| groups[j] == g)
                .map(|j| j as f64)
                .collect();
            let r = a.range(g as usize);
            assert_eq!(&a.x[r.start..r.start + want.len()], &want[..]);
            assert!(a.w[r.start + want.len()..r.end].iter().all(|&v| v == 0.0));
        }
        assert_eq!(a.max_norm(), ((n - 1) as f64).hypot(1.0));
        let mut bad = pos.clone();
        bad[PREP_BLOCK + 5][1] = f64::INFINITY;
        bad[2 * PREP_BLOCK + 1][0] = f64::NAN;
        let e = AtomSet::new(&bad, &w, &groups, 3).unwrap_err().to_string();
        assert!(e.contains(&format!("atom {}", PREP_BLOCK + 5)), "{e}");
        assert!(AtomSet::new(&pos, &w, &groups, MAX_GROUPS + 1).is_err());
    }

    #[test]
    fn bad_input_names_the_atom() {
        let pos = [[0.0; 3], [0.0, f64::NAN, 0.0]];
        let e = AtomSet::new(&pos, &[1.0, 1.0], &[0, 0], 1).unwrap_err();
        assert!(e.to_string().contains("atom 1"), "{e}");
        let e = AtomSet::new(&pos[..1], &[1.0], &[3], 2).unwrap_err();
        assert!(
            e.to_string().contains("atom 0") && e.to_string().contains("2 groups"),
            "{e}"
        );
        let e = AtomSet::new(&pos, &[1.0], &[0, 0], 1).unwrap_err();
        assert!(e.to_string().contains("weights"), "{e}");
    }
}
