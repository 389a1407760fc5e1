//! Run-time choice of the kernels' instruction set ("kernel level").
//!
//! One build runs on any CPU of its architecture: the hot kernels (phase stepping, the
//! per-pair sincos, spreading) are compiled several times, each copy inside a function marked
//! `#[target_feature(enable = ...)]`, and the copy for the best level this CPU offers is picked
//! once, at the first kernel call. On x86-64 the levels are
//!
//! * `avx512`: the x86-64-v4 feature set (AVX-512 F/BW/CD/DQ/VL with AVX2, FMA, BMI);
//! * `avx2`: x86-64-v3 (AVX2 + FMA, BMI);
//! * `baseline`: the architecture's baseline (SSE2 on x86-64), no FMA.
//!
//! On other architectures only `baseline` exists (on aarch64 it has NEON and FMA).
//!
//! The environment variable `KINEMAP_KERNEL` (`avx512`, `avx2`, `baseline`) forces a level;
//! a level the CPU lacks, or an unknown name, is refused with [`Error::Kernel`] by every kernel
//! call (and by [`kernel_level`]), never silently replaced. Levels differ only in rounding:
//! the fused multiply–add of the vector levels rounds once where the baseline rounds twice,
//! so amplitudes agree to about 1e-15 relative between levels (tests check 1e-13).

use crate::error::{Error, Result};
use std::sync::OnceLock;

/// An instruction-set level of the kernels.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Level {
    /// x86-64-v4: AVX-512 (F, BW, CD, DQ, VL) with AVX2 and FMA.
    Avx512,
    /// x86-64-v3: AVX2 and FMA.
    Avx2,
    /// The architecture's baseline (x86-64: SSE2 without FMA; aarch64: NEON with FMA).
    Baseline,
}

/// Environment variable that forces a kernel level.
pub const ENV_VAR: &str = "KINEMAP_KERNEL";

/// Every level, best first (whether or not this CPU has it).
pub const ALL_LEVELS: [Level; 3] = [Level::Avx512, Level::Avx2, Level::Baseline];

impl Level {
    /// The level's name as `KINEMAP_KERNEL` and the Python bindings spell it.
    pub fn name(self) -> &'static str {
        match self {
            Level::Avx512 => "avx512",
            Level::Avx2 => "avx2",
            Level::Baseline => "baseline",
        }
    }

    /// The level of a name (`avx512`, `avx2`, `baseline`, any case), or an error that lists
    /// the names.
    pub fn parse(name: &str) -> Result<Level> {
        let n = name.trim().to_ascii_lowercase();
        ALL_LEVELS
            .into_iter()
            .find(|l| l.name() == n)
            .ok_or_else(|| {
                Error::Kernel(format!(
                    "unknown kernel level {name:?}; use one of avx512, avx2, baseline"
                ))
            })
    }

    /// True when this CPU can run the level's kernels.
    pub fn is_available(self) -> bool {
        match self {
            Level::Baseline => true,
            #[cfg(target_arch = "x86_64")]
            Level::Avx2 => has_v3(),
            #[cfg(target_arch = "x86_64")]
            Level::Avx512 => has_v3() && has_v4(),
            #[cfg(not(target_arch = "x86_64"))]
            Level::Avx2 | Level::Avx512 => false,
        }
    }

    /// `Ok(self)` when this CPU has the level, otherwise an error naming what is missing.
    pub fn check(self) -> Result<Level> {
        if self.is_available() {
            Ok(self)
        } else {
            let have: Vec<&str> = available_levels().iter().map(|l| l.name()).collect();
            Err(Error::Kernel(format!(
                "kernel level {:?} is not supported by this CPU (available: {}); \
                 unset {ENV_VAR} or choose an available level",
                self.name(),
                have.join(", ")
            )))
        }
    }
}

#[cfg(target_arch = "x86_64")]
fn has_v3() -> bool {
    is_x86_feature_detected!("avx2")
        && is_x86_feature_detected!("fma")
        && is_x86_feature_detected!("bmi1")
        && is_x86_feature_detected!("bmi2")
        && is_x86_feature_detected!("lzcnt")
        && is_x86_feature_detected!("movbe")
        && is_x86_feature_detected!("f16c")
}

#[cfg(target_arch = "x86_64")]
fn has_v4() -> bool {
    is_x86_feature_detected!("avx512f")
        && is_x86_feature_detected!("avx512bw")
        && is_x86_feature_detected!("avx512cd")
        && is_x86_feature_detected!("avx512dq")
        && is_x86_feature_detected!("avx512vl")
}

/// The levels this CPU can run, best first (always ends with [`Level::Baseline`]).
pub fn available_levels() -> Vec<Level> {
    ALL_LEVELS
        .into_iter()
        .filter(|l| l.is_available())
        .collect()
}

/// The best level this CPU can run.
pub fn best_level() -> Level {
    ALL_LEVELS
        .into_iter()
        .find(|l| l.is_available())
        .unwrap_or(Level::Baseline)
}

static CHOSEN: OnceLock<std::result::Result<Level, String>> = OnceLock::new();

/// The level the kernels use: `KINEMAP_KERNEL` if set (and supported), otherwise the best
/// level of this CPU. Decided once per process.
pub fn kernel_level() -> Result<Level> {
    CHOSEN
        .get_or_init(|| match std::env::var(ENV_VAR) {
            Ok(v) if !v.trim().is_empty() => Level::parse(&v)
                .and_then(Level::check)
                .map_err(|e| format!("{ENV_VAR}={v:?}: {e}")),
            Ok(_) | Err(std::env::VarError::NotPresent) => Ok(best_level()),
            Err(std::env::VarError::NotUnicode(v)) => {
                Err(format!("{ENV_VAR} is not valid text: {v:?}"))
            }
        })
        .clone()
        .map_err(Error::Kernel)
}

/// `a·b + c` inside a kernel: fused (one rounding) at the levels with FMA, a multiply and an
/// add at the x86-64 baseline (whose software `fma` would be slow).
pub trait MulAdd: Copy + Send + Sync + 'static {
    /// True when `mul_add` rounds once.
    const FUSED: bool;
    /// `a·b + c`.
    fn mul_add(a: f64, b: f64, c: f64) -> f64;
}

/// Fused multiply–add (FMA instructions).
#[derive(Debug, Clone, Copy)]
pub struct Fused;

impl MulAdd for Fused {
    const FUSED: bool = true;
    #[inline(always)]
    fn mul_add(a: f64, b: f64, c: f64) -> f64 {
        a.mul_add(b, c)
    }
}

/// Separate multiply and add (two roundings).
#[derive(Debug, Clone, Copy)]
pub struct Split;

impl MulAdd for Split {
    const FUSED: bool = false;
    #[inline(always)]
    fn mul_add(a: f64, b: f64, c: f64) -> f64 {
        a * b + c
    }
}

/// The multiply–add of the baseline level: fused where the architecture always has FMA
/// (aarch64) or the build enables it, split otherwise.
#[cfg(any(target_arch = "aarch64", target_feature = "fma"))]
pub type BaselineMulAdd = Fused;
/// The multiply–add of the baseline level: fused where the architecture always has FMA
/// (aarch64) or the build enables it, split otherwise.
#[cfg(not(any(target_arch = "aarch64", target_feature = "fma")))]
pub type BaselineMulAdd = Split;

/// Define `$name(level, args…)` that runs the generic kernel `$kernel::<V, …>(args…)`
/// compiled for `level`, with `V` the level's vector type ([`crate::simd::F8`]): inside `#[target_feature]` functions on x86-64 (the kernel and
/// everything it calls must be `#[inline(always)]` so the features reach the inner loops),
/// plainly for the baseline. The caller has checked `level` with [`Level::check`] (see
/// [`kernel_level`]). An optional `[v4, v3, base]` list gives each level's value of the
/// kernel's second generic parameter (a const, e.g. how many vectors it interleaves: the
/// 32 AVX-512 registers hold twice as many as the 16 of AVX2 or SSE2).
macro_rules! multiversion {
    ($(#[$m:meta])* $vis:vis fn $name:ident => $kernel:ident ( $($arg:ident : $ty:ty),* $(,)? )) => {
        $crate::dispatch::multiversion!($(#[$m])* $vis fn $name => $kernel [] ($($arg: $ty),*));
    };
    ($(#[$m:meta])* $vis:vis fn $name:ident => $kernel:ident [$($v4:expr, $v3:expr, $vb:expr)?] ( $($arg:ident : $ty:ty),* $(,)? )) => {
        $(#[$m])*
        #[allow(clippy::too_many_arguments)]
        $vis fn $name(level: $crate::dispatch::Level, $($arg: $ty),*) {
            #[cfg(target_arch = "x86_64")]
            #[target_feature(
                enable = "avx512f,avx512bw,avx512cd,avx512dq,avx512vl,avx2,fma,bmi1,bmi2,lzcnt,movbe,f16c,popcnt"
            )]
            #[allow(clippy::too_many_arguments)]
            fn v4($($arg: $ty),*) {
                $kernel::<$crate::simd::Avx512 $(, $v4)?>($($arg),*)
            }
            #[cfg(target_arch = "x86_64")]
            #[target_feature(enable = "avx2,fma,bmi1,bmi2,lzcnt,movbe,f16c,popcnt")]
            #[allow(clippy::too_many_arguments)]
            fn v3($($arg: $ty),*) {
                $kernel::<$crate::simd::Avx2 $(, $v3)?>($($arg),*)
            }
            match level {
                #[cfg(target_arch = "x86_64")]
                // SAFETY: the level was checked against the CPU's features (Level::check).
                $crate::dispatch::Level::Avx512 => unsafe { v4($($arg),*) },
                #[cfg(target_arch = "x86_64")]
                // SAFETY: as above.
                $crate::dispatch::Level::Avx2 => unsafe { v3($($arg),*) },
                _ => $kernel::<$crate::simd::Lanes<$crate::dispatch::BaselineMulAdd> $(, $vb)?>($($arg),*),
            }
        }
    };
}
pub(crate) use multiversion;

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_round_trip_and_unknown_names_are_refused() {
        for l in ALL_LEVELS {
            assert_eq!(Level::parse(l.name()).unwrap(), l);
        }
        assert_eq!(Level::parse(" AVX2 ").unwrap(), Level::Avx2);
        let e = Level::parse("sse9").unwrap_err();
        assert!(e.to_string().contains("avx512, avx2, baseline"), "{e}");
    }

    #[test]
    fn baseline_is_always_available_and_last() {
        let a = available_levels();
        assert_eq!(a.last(), Some(&Level::Baseline));
        assert_eq!(a[0], best_level());
        for l in ALL_LEVELS {
            assert_eq!(l.check().is_ok(), a.contains(&l));
        }
    }
}
