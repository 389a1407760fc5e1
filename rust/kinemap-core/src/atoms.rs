//! Atoms prepared for the kernels: structure of arrays, sorted by scattering group, padded.
//!
//! A *group* is a set of atoms that share one q-dependent factor: the form factor of their
//! species times their Debye–Waller factor. Inside a group only a q-independent weight (the
//! occupancy) multiplies each atom, so the kernels sum `w_j exp(i q·r_j)` per group and apply
//! the group factor once per q-point.

use crate::error::{Error, Result};

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
        if n_groups == 0 {
            return Err(Error::Range("n_groups must be at least 1".into()));
        }
        let mut counts = crate::alloc::filled(n_groups, 0usize, "group counts")?;
        let mut max_norm2 = 0.0f64;
        for (j, (p, (&w, &g))) in positions.iter().zip(weights.iter().zip(groups)).enumerate() {
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
            let gi = g as usize;
            if gi >= n_groups {
                return Err(Error::Range(format!(
                    "group index of atom {j} is {g}, but there are only {n_groups} groups"
                )));
            }
            counts[gi] += 1;
            max_norm2 = max_norm2.max(p[0] * p[0] + p[1] * p[1] + p[2] * p[2]);
        }
        let mut offsets = crate::alloc::with_capacity(n_groups + 1, "group offsets")?;
        offsets.push(0usize);
        for &c in &counts {
            let padded = c.div_ceil(BLOCK) * BLOCK;
            offsets.push(offsets.last().copied().unwrap_or(0) + padded);
        }
        let total = offsets[n_groups];
        let arr = |what| crate::alloc::filled(total, 0.0f64, what);
        let (mut x, mut y, mut z, mut wv) = (
            arr("atom x coordinates")?,
            arr("atom y coordinates")?,
            arr("atom z coordinates")?,
            arr("atom weights")?,
        );
        let mut next = counts;
        next.copy_from_slice(&offsets[..n_groups]);
        for (p, (&w, &g)) in positions.iter().zip(weights.iter().zip(groups)) {
            let slot = &mut next[g as usize];
            x[*slot] = p[0];
            y[*slot] = p[1];
            z[*slot] = p[2];
            wv[*slot] = w;
            *slot += 1;
        }
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
