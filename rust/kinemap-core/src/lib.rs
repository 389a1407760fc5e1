//! # kinemap-core
//!
//! Exact kinematic structure-factor sums over atoms, in parallel on the CPU.
//!
//! Conventions (shared with the Python package): lengths in Å, Cartesian positions, q in Å⁻¹,
//! amplitude `A(q) = Σ_j o_j f_j(q) T_j(q) exp(+i q·r_j)`. The core does not know about
//! species or probes: the caller sorts atoms into *groups* that share one q-dependent factor
//! `F_g(q) = f_g(q) T_g(q)` and passes the table `F[g, m]`; per-atom weights that do not
//! depend on q (occupancies) go straight into the sums. The kernels are
//!
//! * [`point_amplitudes`]: arbitrary q-points, one vectorised sincos per atom–q pair;
//! * [`grid_amplitudes`]: rows of equally spaced q-points (lines, planes, volumes in any
//!   orientation) by phase stepping, one complex multiply per atom–q pair.
//!
//! Both parallelise over q-points with rayon, so every amplitude is summed by one thread in a
//! fixed order and results are identical for any thread count. Memory is O(atoms + outputs);
//! no atoms × q matrix is ever formed, and every large allocation fails as
//! [`Error::Memory`] rather than aborting ([`alloc`]).
//!
//! One build serves every CPU of its architecture: the kernels are compiled per instruction
//! set (AVX-512, AVX2+FMA, baseline) and the best level is chosen at run time
//! ([`dispatch`]; `KINEMAP_KERNEL` forces one). Phases q·r are bounded by
//! [`sincos::MAX_PHASE`]; calls that could exceed it are refused.
#![deny(missing_docs)]
// The kernels index several lane arrays with one counter; iterator chains over four or more
// arrays obscure the vector loops without changing the generated code.
#![allow(clippy::needless_range_loop)]

pub mod alloc;
pub mod atoms;
pub mod dispatch;
pub mod error;
pub mod grid;
pub mod gridded;
pub mod pairs;
pub mod point;
pub mod pool;
mod simd;
pub mod sincos;

pub use atoms::AtomSet;
pub use dispatch::{kernel_level, Level};
pub use error::{Error, Result};
pub use grid::{grid_amplitudes, grid_amplitudes_at};
pub use gridded::{PointPlan, RegularPlan};
pub use num_complex::Complex64;
pub use pairs::{debye_sums, PairHistogram};
pub use point::{point_amplitudes, point_amplitudes_at};
