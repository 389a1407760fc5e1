//! Branch-free sine and cosine that the compiler vectorises.
//!
//! `f64::sin_cos` calls the C library's scalar routine, which cannot be vectorised and costs
//! tens of nanoseconds. The kernels here need one sincos per atom–q pair (point path) or per
//! re-anchoring step (grid path), so we use the classic fdlibm scheme written without
//! branches: reduce x by the nearest multiple k of π/2 with a three-part Cody–Waite split of
//! π/2, evaluate the degree-13/14 minimax polynomials on [−π/4, π/4], and pick and sign the
//! results from the two low bits of k with bit operations.
//!
//! Range and accuracy. The kernels accept phases up to [`MAX_PHASE`] = 10¹¹ rad and refuse
//! any call whose bound max|q|·max|r| exceeds it (with an error that names the bound): past
//! ~2⁵¹ rad the rounding trick no longer yields the quadrant and the results are wrong
//! (positions of 10¹⁸ Å once gave intensities of 10³⁹). Below the bound the reduction is
//! exact: with a fused multiply–add, x − k·PIO2_1 is exact for any |k| < 2⁵¹; without one,
//! k is split into a multiple of 2¹⁸ and a remainder so that every product with the 33-bit
//! pieces of π/2 is exact (|k| < 2³⁶). Measured against the C library (whose reduction is
//! exact at any size) on 1.7·10⁵ arguments up to 10¹¹ rad, including the doubles nearest to
//! multiples of π/2: within 2 ulp of the C library's result with FMA and 3 ulp without,
//! except near zeros of sin or cos, where the 99-bit π/2 leaves an absolute error below
//! 10⁻²⁰ (6·10⁻²¹ measured). The phase q·r itself carries a rounding error of |q·r|·2⁻⁵³,
//! so for large phases that, not the sincos, limits the accuracy of a sum.
#![allow(clippy::excessive_precision)]

use crate::dispatch::MulAdd;
use crate::simd::F8;

/// Number of lanes the kernels process together (one AVX-512 register of f64).
pub const LANES: usize = 8;

// The constants are fdlibm's, written with the digits it prints (they round to the intended
// doubles); clippy's excessive_precision is allowed for that reason.
// fdlibm's split of π/2 into 33-bit parts, so k·PIO2_1 and k·PIO2_2 are exact for k < 2^20.
const PIO2_1: f64 = 1.570_796_326_734_125_614_17e+00;
const PIO2_2: f64 = 6.077_100_506_303_965_976_60e-11;
const PIO2_3: f64 = 2.022_266_248_711_166_455_80e-21;
const INV_PIO2: f64 = std::f64::consts::FRAC_2_PI;
// 1.5·2^52: adding and subtracting it rounds to the nearest integer and leaves that integer
// in the low mantissa bits.
const ROUNDER: f64 = 6_755_399_441_055_744.0;
const TWO_M18: f64 = 1.0 / 262_144.0;
const TWO_P18: f64 = 262_144.0;

/// Largest phase |x| (radians) the kernels accept: below it the reduction above is exact at
/// every kernel level (the split reduction of the levels without FMA needs |x|·2/π < 2^36,
/// i.e. |x| < 1.08·10¹¹). Callers bound their phases by max|q|·max|r| and refuse beyond.
pub const MAX_PHASE: f64 = 1.0e11;

const S1: f64 = -1.666_666_666_666_663_243_48e-01;
const S2: f64 = 8.333_333_333_322_489_461_24e-03;
const S3: f64 = -1.984_126_982_985_794_931_34e-04;
const S4: f64 = 2.755_731_370_707_006_767_89e-06;
const S5: f64 = -2.505_076_025_340_686_341_95e-08;
const S6: f64 = 1.589_690_995_211_550_102_21e-10;
const C1: f64 = 4.166_666_666_666_660_190_37e-02;
const C2: f64 = -1.388_888_888_887_410_957_49e-03;
const C3: f64 = 2.480_158_728_947_672_941_78e-05;
const C4: f64 = -2.755_731_435_139_066_330_35e-07;
const C5: f64 = 2.087_572_321_298_174_827_90e-09;
const C6: f64 = -1.135_964_755_778_819_482_65e-11;

/// `a * b + c`, fused where the build targets FMA (one rounding, one instruction) or the
/// architecture always has it, otherwise plain; never the slow software `fma` of targets
/// without it. The dispatched kernels use [`MulAdd`] of their level instead.
#[inline(always)]
pub fn mul_add(a: f64, b: f64, c: f64) -> f64 {
    crate::dispatch::BaselineMulAdd::mul_add(a, b, c)
}

/// Sine and cosine of `x`, branch-free, with the build's multiply–add. See the module notes
/// for the accuracy and the range.
#[inline(always)]
pub fn sincos(x: f64) -> (f64, f64) {
    sincos_with::<crate::dispatch::BaselineMulAdd>(x)
}

/// [`sincos`] with the multiply–add of a kernel level (fused or split).
#[inline(always)]
pub fn sincos_with<M: MulAdd>(x: f64) -> (f64, f64) {
    let t = M::mul_add(x, INV_PIO2, ROUNDER);
    let quadrant = t.to_bits();
    let k = t - ROUNDER;
    let r = if M::FUSED {
        // With a fused multiply–add, x − k·PIO2_1 is exact for |k| < 2^51 (both are
        // multiples of 2^-32·ulp-scale and the difference has fewer than 53 bits), and the
        // later steps round once each: accurate far beyond MAX_PHASE.
        M::mul_add(
            -k,
            PIO2_3,
            M::mul_add(-k, PIO2_2, M::mul_add(-k, PIO2_1, x)),
        )
    } else {
        // Without FMA, k·PIO2_1 is exact only for |k| < 2^20. Split k = kh + kl with kh a
        // multiple of 2^18 (at most 18 significant bits for |k| < 2^36) and |kl| ≤ 2^17: every
        // product of a part with a 33-bit piece of π/2 is then exact, and so are the first
        // three differences (their operands share a grid fine enough; see the module notes).
        let kh = ((k * TWO_M18 + ROUNDER) - ROUNDER) * TWO_P18;
        let kl = k - kh;
        let r = (x - kh * PIO2_1) - kl * PIO2_1;
        let r = (r - kh * PIO2_2) - kl * PIO2_2;
        (r - kh * PIO2_3) - kl * PIO2_3
    };
    let z = r * r;
    let ps = M::mul_add(
        z,
        M::mul_add(
            z,
            M::mul_add(z, M::mul_add(z, M::mul_add(z, S6, S5), S4), S3),
            S2,
        ),
        S1,
    );
    let s = M::mul_add(r * z, ps, r);
    let pc = M::mul_add(
        z,
        M::mul_add(
            z,
            M::mul_add(z, M::mul_add(z, M::mul_add(z, C6, C5), C4), C3),
            C2,
        ),
        C1,
    );
    let c = M::mul_add(z * z, pc, M::mul_add(-0.5, z, 1.0));
    // Quadrant n = k mod 4: (sin, cos) = (s, c), (c, −s), (−s, −c), (−c, s).
    let swap = (quadrant & 1).wrapping_neg(); // all ones when n is odd
    let sb = s.to_bits();
    let cb = c.to_bits();
    let sin_b = (sb & !swap) | (cb & swap);
    let cos_b = (cb & !swap) | (sb & swap);
    let sin_sign = (quadrant & 2) << 62;
    let cos_sign = (quadrant.wrapping_add(1) & 2) << 62;
    (
        f64::from_bits(sin_b ^ sin_sign),
        f64::from_bits(cos_b ^ cos_sign),
    )
}

/// Sine and cosine of [`LANES`] values at once (written so that it becomes vector code).
#[inline(always)]
pub fn sincos_lanes(x: &[f64; LANES], s: &mut [f64; LANES], c: &mut [f64; LANES]) {
    sincos_lanes_with::<crate::dispatch::BaselineMulAdd>(x, s, c)
}

/// [`sincos_lanes`] with the multiply–add of a kernel level.
#[inline(always)]
pub fn sincos_lanes_with<M: MulAdd>(x: &[f64; LANES], s: &mut [f64; LANES], c: &mut [f64; LANES]) {
    for l in 0..LANES {
        let (a, b) = sincos_with::<M>(x[l]);
        s[l] = a;
        c[l] = b;
    }
}

/// [`sincos`] of eight lanes at once with the vector type of a kernel level (the same
/// operations in the same order as [`sincos_with`], so the same results lane by lane).
#[inline(always)]
pub(crate) fn sincos_v<V: F8>(x: V) -> (V, V) {
    let c = V::splat;
    let t = x.mul_add(c(INV_PIO2), c(ROUNDER));
    let k = t.sub(c(ROUNDER));
    let r = if V::FUSED {
        k.neg_mul_add(
            c(PIO2_3),
            k.neg_mul_add(c(PIO2_2), k.neg_mul_add(c(PIO2_1), x)),
        )
    } else {
        let kh = k
            .mul(c(TWO_M18))
            .add(c(ROUNDER))
            .sub(c(ROUNDER))
            .mul(c(TWO_P18));
        let kl = k.sub(kh);
        let r = x.sub(kh.mul(c(PIO2_1))).sub(kl.mul(c(PIO2_1)));
        let r = r.sub(kh.mul(c(PIO2_2))).sub(kl.mul(c(PIO2_2)));
        r.sub(kh.mul(c(PIO2_3))).sub(kl.mul(c(PIO2_3)))
    };
    let z = r.mul(r);
    let ps = z.mul_add(
        z.mul_add(
            z.mul_add(z.mul_add(z.mul_add(c(S6), c(S5)), c(S4)), c(S3)),
            c(S2),
        ),
        c(S1),
    );
    let sn = r.mul(z).mul_add(ps, r);
    let pc = z.mul_add(
        z.mul_add(
            z.mul_add(z.mul_add(z.mul_add(c(C6), c(C5)), c(C4)), c(C3)),
            c(C2),
        ),
        c(C1),
    );
    let cs = z.mul(z).mul_add(pc, c(-0.5).mul_add(z, c(1.0)));
    V::quadrant(t, sn, cs)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::dispatch::{Fused, Split};
    use crate::simd::Lanes;

    /// Pseudo-random arguments spread log-uniformly over [2⁻²⁰, 2^e_max], both signs.
    fn arguments(n: usize, e_max: f64, seed: u64) -> Vec<f64> {
        let mut s = seed;
        (0..n)
            .map(|i| {
                s = s
                    .wrapping_mul(6364136223846793005)
                    .wrapping_add(1442695040888963407);
                let u = (s >> 11) as f64 / (1u64 << 53) as f64;
                let x = (2.0f64).powf(-20.0 + u * (e_max + 20.0));
                if i % 2 == 0 {
                    x
                } else {
                    -x
                }
            })
            .collect()
    }

    /// All test arguments: log-uniform over [2⁻²⁰, 1e11], the range near MAX_PHASE, and the
    /// doubles nearest to multiples of π/2 (the hard cases of the reduction).
    fn all_arguments() -> Vec<f64> {
        let mut xs = arguments(100_000, MAX_PHASE.log2(), 1);
        xs.extend(
            arguments(20_000, 36.5, 3)
                .iter()
                .map(|x| x.signum() * (MAX_PHASE - x.abs() / 1e3)),
        );
        xs.extend(
            arguments(50_000, 35.0, 2)
                .iter()
                .map(|k| k.round() * std::f64::consts::FRAC_PI_2),
        );
        xs.extend([
            0.0,
            -0.0,
            1e-300,
            std::f64::consts::FRAC_PI_4,
            MAX_PHASE,
            -MAX_PHASE,
        ]);
        xs
    }

    /// Check `f` against the C library: at most `max_ulps` ulps of the C library's result
    /// plus 2e-20 absolute. The absolute part matters only near zeros of sin or cos, where
    /// the three-part π/2 (99 bits; the remainder, 8.5e-32, times k < 2^36) limits the
    /// reduced argument to about 6e-21 absolute; the ulp part is fdlibm's polynomial error.
    fn check(name: &str, f: impl Fn(f64) -> (f64, f64), max_ulps: f64) {
        for x in all_arguments() {
            let (s, c) = f(x);
            // Reference: the C library's sin and cos (glibc: < 1 ulp, with an exact
            // Payne–Hanek reduction for large arguments).
            let (s0, c0) = x.sin_cos();
            for (got, want, what) in [(s, s0, "sin"), (c, c0, "cos")] {
                let a = want.abs().max(f64::MIN_POSITIVE);
                let ulp = f64::from_bits(a.to_bits() + 1) - a;
                assert!(
                    (got - want).abs() <= max_ulps * ulp + 2e-20,
                    "{name}: {what}({x:e}) = {got:e}, C library {want:e} ({:.1} ulp)",
                    (got - want).abs() / ulp
                );
            }
        }
    }

    #[test]
    fn scalar_sincos_agrees_with_libm_to_2_ulp_fused_and_3_ulp_split() {
        check("fused", sincos_with::<Fused>, 2.0);
        check("split", sincos_with::<Split>, 3.0);
    }

    fn lanes_of<V: F8>(x: f64) -> (f64, f64) {
        let (s, c) = sincos_v(V::splat(x));
        let (mut so, mut co) = ([0.0; LANES], [0.0; LANES]);
        s.store(&mut so);
        c.store(&mut co);
        (so[3], co[3])
    }

    #[test]
    fn vector_sincos_of_every_level_agrees_with_libm() {
        check("lanes fused", lanes_of::<Lanes<Fused>>, 2.0);
        check("lanes split", lanes_of::<Lanes<Split>>, 3.0);
        #[cfg(target_arch = "x86_64")]
        {
            use crate::dispatch::Level;
            if Level::Avx2.is_available() {
                check("avx2", lanes_of::<crate::simd::Avx2>, 2.0);
            }
            if Level::Avx512.is_available() {
                check("avx512", lanes_of::<crate::simd::Avx512>, 2.0);
            }
        }
    }

    #[test]
    fn exact_values_at_quadrant_points() {
        // Analytic values: sin(0) = 0, cos(0) = 1 exactly; sin and cos of the double nearest
        // kπ/2 are within one rounding of 0 or ±1.
        assert_eq!(sincos(0.0), (0.0, 1.0));
        for k in -8i32..=8 {
            let x = k as f64 * std::f64::consts::FRAC_PI_2;
            let (s, c) = sincos(x);
            let (ws, wc) = match k.rem_euclid(4) {
                0 => (0.0, 1.0),
                1 => (1.0, 0.0),
                2 => (0.0, -1.0),
                _ => (-1.0, 0.0),
            };
            assert!((s - ws).abs() < 2e-15 && (c - wc).abs() < 2e-15, "k = {k}");
        }
    }
}
