//! The gridded fast path: structure-factor sums by spreading + FFT, to a stated tolerance.
//!
//! An exact sum over N atoms and M q-points costs N·M. The non-uniform FFT family of methods
//! (Dutt & Rokhlin 1993; Greengard & Lee 2004; Barnett, Magland & af Klinteberg 2019) spreads
//! the weighted atoms onto an oversampled fine grid with a compact kernel, transforms the grid
//! with FFTs and divides out the kernel's transform, for about N·wᵈ + M log M operations; the
//! kernel width w follows the requested relative tolerance (1e-3 … 1e-12).
//!
//! * [`RegularPlan`]: regular q-grids (lines, planes, volumes in any orientation, hkl grids of
//!   any cell) as d-dimensional type-1 transforms of the projected coordinates `step_a·r`.
//! * [`PointPlan`]: arbitrary q-points by the type-3 transform.
//!
//! Plans keep one fine grid per scattering group ("slot"), so atom chunks stream into the
//! same grids; at the end the group sums are combined with each group's factor (a table in
//! `s = |q|/4π`, see [`factor`]) while they are read out.
//! Spreading is parallel without data races and gives the same result for any thread count
//! (see [`spread`]).

pub mod factor;
pub mod fft;
pub mod kernel;
pub mod plan;
pub mod sizing;
pub mod spread;

pub use factor::{FactorTable, GroupFactor};
pub use kernel::{width_for, Kernel, MAX_WIDTH};
pub use plan::{PointPlan, RegularPlan};
