//! Vectors of eight f64 lanes for the kernels, one implementation per kernel level.
//!
//! The kernels are written once, generic over [`F8`], and compiled per level by
//! [`crate::dispatch`]: AVX-512 (one 512-bit register), AVX2 (two 256-bit registers) and a
//! portable array of lanes that the compiler vectorises for the baseline of the architecture
//! (SSE2 on x86-64, NEON on aarch64). Writing the operations out keeps the vector dimension
//! where it belongs: left to itself, LLVM vectorised a loop over interleaved atom vectors
//! *across* them (gathers and scatters) and ran 10× slower.
//!
//! Every method is `#[inline(always)]`, so the intrinsics end up inside the
//! `#[target_feature]` functions of their level and compile to single instructions.
//! The x86 types must only be used inside kernels of their level (the dispatch checks the
//! CPU before calling those), which is why they are private to the crate.

use crate::dispatch::MulAdd;
use std::marker::PhantomData;

/// Eight f64 lanes and the operations the kernels need.
pub(crate) trait F8: Copy {
    /// True when [`F8::mul_add`] rounds once.
    const FUSED: bool;
    /// All lanes equal to `v`.
    fn splat(v: f64) -> Self;
    /// Load eight values.
    fn load(a: &[f64; 8]) -> Self;
    /// Store eight values.
    fn store(self, a: &mut [f64; 8]);
    /// Lane-wise sum.
    fn add(self, b: Self) -> Self;
    /// Lane-wise difference.
    fn sub(self, b: Self) -> Self;
    /// Lane-wise product.
    fn mul(self, b: Self) -> Self;
    /// `self·b + c` (fused at the levels with FMA).
    fn mul_add(self, b: Self, c: Self) -> Self;
    /// `c − self·b` (fused at the levels with FMA).
    fn neg_mul_add(self, b: Self, c: Self) -> Self;
    /// Sine and cosine selection of the branch-free sincos: from `t`, whose low mantissa bits
    /// hold the quadrant n, and the kernel values `s ≈ sin r`, `c ≈ cos r`, return
    /// `(sin, cos)` = `(s, c)`, `(c, −s)`, `(−s, −c)`, `(−c, s)` for n mod 4 = 0, 1, 2, 3.
    fn quadrant(t: Self, s: Self, c: Self) -> (Self, Self);
}

/// `a·b + c` in scalar code of a kernel level: fused where the level's vectors are.
#[inline(always)]
pub(crate) fn fma<V: F8>(a: f64, b: f64, c: f64) -> f64 {
    if V::FUSED {
        a.mul_add(b, c)
    } else {
        a * b + c
    }
}

/// Portable lanes with the multiply–add `M` (vectorised by the compiler).
#[derive(Clone, Copy)]
pub(crate) struct Lanes<M>([f64; 8], PhantomData<M>);

impl<M: MulAdd> Lanes<M> {
    #[inline(always)]
    fn map2(self, b: Self, f: impl Fn(f64, f64) -> f64) -> Self {
        let mut r = [0.0; 8];
        for l in 0..8 {
            r[l] = f(self.0[l], b.0[l]);
        }
        Lanes(r, PhantomData)
    }
}

impl<M: MulAdd> F8 for Lanes<M> {
    const FUSED: bool = M::FUSED;
    #[inline(always)]
    fn splat(v: f64) -> Self {
        Lanes([v; 8], PhantomData)
    }
    #[inline(always)]
    fn load(a: &[f64; 8]) -> Self {
        Lanes(*a, PhantomData)
    }
    #[inline(always)]
    fn store(self, a: &mut [f64; 8]) {
        *a = self.0;
    }
    #[inline(always)]
    fn add(self, b: Self) -> Self {
        self.map2(b, |x, y| x + y)
    }
    #[inline(always)]
    fn sub(self, b: Self) -> Self {
        self.map2(b, |x, y| x - y)
    }
    #[inline(always)]
    fn mul(self, b: Self) -> Self {
        self.map2(b, |x, y| x * y)
    }
    #[inline(always)]
    fn mul_add(self, b: Self, c: Self) -> Self {
        let mut r = [0.0; 8];
        for l in 0..8 {
            r[l] = M::mul_add(self.0[l], b.0[l], c.0[l]);
        }
        Lanes(r, PhantomData)
    }
    #[inline(always)]
    fn neg_mul_add(self, b: Self, c: Self) -> Self {
        let mut r = [0.0; 8];
        for l in 0..8 {
            r[l] = M::mul_add(-self.0[l], b.0[l], c.0[l]);
        }
        Lanes(r, PhantomData)
    }
    #[inline(always)]
    fn quadrant(t: Self, s: Self, c: Self) -> (Self, Self) {
        let (mut so, mut co) = ([0.0; 8], [0.0; 8]);
        for l in 0..8 {
            let q = t.0[l].to_bits();
            let swap = (q & 1).wrapping_neg(); // all ones when n is odd
            let (sb, cb) = (s.0[l].to_bits(), c.0[l].to_bits());
            let sin_b = (sb & !swap) | (cb & swap);
            let cos_b = (cb & !swap) | (sb & swap);
            so[l] = f64::from_bits(sin_b ^ ((q & 2) << 62));
            co[l] = f64::from_bits(cos_b ^ ((q.wrapping_add(1) & 2) << 62));
        }
        (Lanes(so, PhantomData), Lanes(co, PhantomData))
    }
}

#[cfg(target_arch = "x86_64")]
pub(crate) use x86::{Avx2, Avx512};

#[cfg(target_arch = "x86_64")]
mod x86 {
    use super::F8;
    use std::arch::x86_64::*;

    /// One AVX-512 register. Only used inside kernels compiled for the `avx512` level.
    #[derive(Clone, Copy)]
    pub(crate) struct Avx512(__m512d);

    // SAFETY (every unsafe block of this impl): the intrinsics need AVX-512F; values of this
    // type exist only inside kernels of the avx512 level, which the dispatch runs only after
    // checking the CPU's features. Loads and stores go through references to 8 doubles.
    impl F8 for Avx512 {
        const FUSED: bool = true;
        #[inline(always)]
        fn splat(v: f64) -> Self {
            unsafe { Avx512(_mm512_set1_pd(v)) }
        }
        #[inline(always)]
        fn load(a: &[f64; 8]) -> Self {
            unsafe { Avx512(_mm512_loadu_pd(a.as_ptr())) }
        }
        #[inline(always)]
        fn store(self, a: &mut [f64; 8]) {
            unsafe { _mm512_storeu_pd(a.as_mut_ptr(), self.0) }
        }
        #[inline(always)]
        fn add(self, b: Self) -> Self {
            unsafe { Avx512(_mm512_add_pd(self.0, b.0)) }
        }
        #[inline(always)]
        fn sub(self, b: Self) -> Self {
            unsafe { Avx512(_mm512_sub_pd(self.0, b.0)) }
        }
        #[inline(always)]
        fn mul(self, b: Self) -> Self {
            unsafe { Avx512(_mm512_mul_pd(self.0, b.0)) }
        }
        #[inline(always)]
        fn mul_add(self, b: Self, c: Self) -> Self {
            unsafe { Avx512(_mm512_fmadd_pd(self.0, b.0, c.0)) }
        }
        #[inline(always)]
        fn neg_mul_add(self, b: Self, c: Self) -> Self {
            unsafe { Avx512(_mm512_fnmadd_pd(self.0, b.0, c.0)) }
        }
        #[inline(always)]
        fn quadrant(t: Self, s: Self, c: Self) -> (Self, Self) {
            unsafe {
                let q = _mm512_castpd_si512(t.0);
                let odd = _mm512_test_epi64_mask(q, _mm512_set1_epi64(1));
                let sin = _mm512_mask_blend_pd(odd, s.0, c.0);
                let cos = _mm512_mask_blend_pd(odd, c.0, s.0);
                let two = _mm512_set1_epi64(2);
                let ss = _mm512_slli_epi64::<62>(_mm512_and_si512(q, two));
                let q1 = _mm512_add_epi64(q, _mm512_set1_epi64(1));
                let cs = _mm512_slli_epi64::<62>(_mm512_and_si512(q1, two));
                (
                    Avx512(_mm512_castsi512_pd(_mm512_xor_si512(
                        _mm512_castpd_si512(sin),
                        ss,
                    ))),
                    Avx512(_mm512_castsi512_pd(_mm512_xor_si512(
                        _mm512_castpd_si512(cos),
                        cs,
                    ))),
                )
            }
        }
    }

    /// Two AVX2 registers. Only used inside kernels compiled for the `avx2` level.
    #[derive(Clone, Copy)]
    pub(crate) struct Avx2(__m256d, __m256d);

    // SAFETY (every unsafe block of this impl): the intrinsics need AVX2 and FMA; values of
    // this type exist only inside kernels of the avx2 level, which the dispatch runs only
    // after checking the CPU's features. Loads and stores go through references to 8 doubles.
    impl F8 for Avx2 {
        const FUSED: bool = true;
        #[inline(always)]
        fn splat(v: f64) -> Self {
            unsafe { Avx2(_mm256_set1_pd(v), _mm256_set1_pd(v)) }
        }
        #[inline(always)]
        fn load(a: &[f64; 8]) -> Self {
            unsafe {
                Avx2(
                    _mm256_loadu_pd(a.as_ptr()),
                    _mm256_loadu_pd(a.as_ptr().add(4)),
                )
            }
        }
        #[inline(always)]
        fn store(self, a: &mut [f64; 8]) {
            unsafe {
                _mm256_storeu_pd(a.as_mut_ptr(), self.0);
                _mm256_storeu_pd(a.as_mut_ptr().add(4), self.1);
            }
        }
        #[inline(always)]
        fn add(self, b: Self) -> Self {
            unsafe { Avx2(_mm256_add_pd(self.0, b.0), _mm256_add_pd(self.1, b.1)) }
        }
        #[inline(always)]
        fn sub(self, b: Self) -> Self {
            unsafe { Avx2(_mm256_sub_pd(self.0, b.0), _mm256_sub_pd(self.1, b.1)) }
        }
        #[inline(always)]
        fn mul(self, b: Self) -> Self {
            unsafe { Avx2(_mm256_mul_pd(self.0, b.0), _mm256_mul_pd(self.1, b.1)) }
        }
        #[inline(always)]
        fn mul_add(self, b: Self, c: Self) -> Self {
            unsafe {
                Avx2(
                    _mm256_fmadd_pd(self.0, b.0, c.0),
                    _mm256_fmadd_pd(self.1, b.1, c.1),
                )
            }
        }
        #[inline(always)]
        fn neg_mul_add(self, b: Self, c: Self) -> Self {
            unsafe {
                Avx2(
                    _mm256_fnmadd_pd(self.0, b.0, c.0),
                    _mm256_fnmadd_pd(self.1, b.1, c.1),
                )
            }
        }
        #[inline(always)]
        fn quadrant(t: Self, s: Self, c: Self) -> (Self, Self) {
            #[inline(always)]
            unsafe fn half(t: __m256d, s: __m256d, c: __m256d) -> (__m256d, __m256d) {
                let q = _mm256_castpd_si256(t);
                let one = _mm256_set1_epi64x(1);
                let two = _mm256_set1_epi64x(2);
                // all ones where n is odd
                let swap = _mm256_castsi256_pd(_mm256_sub_epi64(
                    _mm256_setzero_si256(),
                    _mm256_and_si256(q, one),
                ));
                let sin = _mm256_blendv_pd(s, c, swap);
                let cos = _mm256_blendv_pd(c, s, swap);
                let ss = _mm256_slli_epi64::<62>(_mm256_and_si256(q, two));
                let cs = _mm256_slli_epi64::<62>(_mm256_and_si256(_mm256_add_epi64(q, one), two));
                (
                    _mm256_xor_pd(sin, _mm256_castsi256_pd(ss)),
                    _mm256_xor_pd(cos, _mm256_castsi256_pd(cs)),
                )
            }
            unsafe {
                let (s0, c0) = half(t.0, s.0, c.0);
                let (s1, c1) = half(t.1, s.1, c.1);
                (Avx2(s0, s1), Avx2(c0, c1))
            }
        }
    }
}
