//! The spreading kernel: the "exponential of semicircle" (ES) function
//! `φ(z) = exp(β(√(1−z²) − 1))` on `|z| ≤ 1` (Barnett, Magland & af Klinteberg, SIAM J. Sci.
//! Comput. 41 (2019) C479), scaled to cover `w` fine-grid spacings.
//!
//! Width and shape follow the requested tolerance and the oversampling factor σ: the aliasing
//! error of the ES kernel falls like `exp(−π w √(1 − 1/σ))`, so `w ≈ ln(1/tol)/(π√(1 − 1/σ))`
//! (for σ = 2 the slightly tighter empirical rule `w = ⌈log₁₀(10/tol)⌉`), with
//! `β = 2.30·w` (σ = 2) or `β = 0.97·π·(1 − 1/(2σ))·w`. The kernel is evaluated through one
//! polynomial per grid spacing ("piece"), fitted at construction by Chebyshev interpolation to
//! well below the tolerance, so spreading needs no exp or sqrt per atom: one Horner loop gives
//! all `w` values at once and vectorises across the pieces.

use crate::error::{Error, Result};
use crate::sincos::{mul_add, sincos_lanes, LANES};

/// Widest kernel supported (grid spacings); it bounds the fixed-size arrays of the spreader.
pub const MAX_WIDTH: usize = 16;
/// Highest polynomial degree of the piecewise fit.
const MAX_DEGREE: usize = 24;

/// A spreading kernel of width `w` grid spacings for one tolerance and oversampling factor.
#[derive(Debug, Clone)]
pub struct Kernel {
    /// Width in fine-grid spacings (number of grid points each atom touches per axis).
    pub w: usize,
    /// Shape parameter β of the ES function.
    pub beta: f64,
    /// Oversampling factor σ (fine-grid size over output size) the width was chosen for.
    pub upsample: f64,
    /// `coef[d][i]`: coefficient of `tᵈ` of piece `i` (unused pieces are zero).
    coef: Vec<[f64; MAX_WIDTH]>,
    /// Gauss–Legendre nodes and weights on [0, 1] for the kernel's Fourier transform.
    quad: Vec<(f64, f64)>,
    /// The same nodes prepared for [`Kernel::fourier_many`]: `z·w/2` and `weight·φ(z)·w`,
    /// in vectors of [`LANES`] (padded with zero weights).
    nodes: Vec<([f64; LANES], [f64; LANES])>,
}

/// The rules above give relative l2 errors of up to about 4·tol in practice (measured against
/// exact sums over random models, tol 1e-3 … 1e-12), so widths are chosen for tol/SAFETY to
/// keep the achieved error at or below the requested tolerance.
pub const SAFETY: f64 = 4.0;

/// Kernel width for a tolerance and oversampling factor (not clamped).
pub fn width_for(tol: f64, upsample: f64) -> usize {
    let tol = tol / SAFETY;
    let w = if (upsample - 2.0).abs() < 1e-12 {
        (-(tol / 10.0).log10()).ceil()
    } else {
        (-tol.ln() / (std::f64::consts::PI * (1.0 - 1.0 / upsample).sqrt())).ceil()
    };
    (w.max(2.0)) as usize
}

impl Kernel {
    /// The kernel for relative tolerance `tol` (1e-15 ≤ tol < 1) at oversampling `upsample`
    /// (1.2 ≤ σ ≤ 3). Refuses when the width would exceed [`MAX_WIDTH`].
    pub fn new(tol: f64, upsample: f64) -> Result<Self> {
        if !(tol.is_finite() && (1e-15..1.0).contains(&tol)) {
            return Err(Error::Range(format!(
                "tol must be in [1e-15, 1), got {tol}"
            )));
        }
        if !(upsample.is_finite() && (1.2..=3.0).contains(&upsample)) {
            return Err(Error::Range(format!(
                "upsampling factor must be in [1.2, 3], got {upsample}"
            )));
        }
        let w = width_for(tol, upsample);
        if w > MAX_WIDTH {
            return Err(Error::Range(format!(
                "tol {tol:e} at oversampling {upsample} needs a kernel of {w} points, more than \
                 {MAX_WIDTH}; use a larger oversampling factor or a looser tolerance"
            )));
        }
        let beta = if (upsample - 2.0).abs() < 1e-12 {
            let b = match w {
                2 => 2.20,
                3 => 2.26,
                4 => 2.38,
                _ => 2.30,
            };
            b * w as f64
        } else {
            0.97 * std::f64::consts::PI * (1.0 - 0.5 / upsample) * w as f64
        };
        let mut k = Kernel {
            w,
            beta,
            upsample,
            coef: Vec::new(),
            quad: gauss_legendre(3 * w + 30),
            nodes: Vec::new(),
        };
        let half = 0.5 * w as f64;
        for chunk in k.quad.chunks(LANES) {
            let (mut zh, mut a) = ([0.0; LANES], [0.0; LANES]);
            for (l, &(z, wq)) in chunk.iter().enumerate() {
                zh[l] = z * half;
                a[l] = wq * k.phi(z) * w as f64;
            }
            k.nodes.push((zh, a));
        }
        k.fit(tol);
        Ok(k)
    }

    /// The ES function itself, `φ(z)` for `|z| ≤ 1`, zero outside.
    pub fn phi(&self, z: f64) -> f64 {
        if z.abs() >= 1.0 {
            return if z.abs() == 1.0 {
                (-self.beta).exp()
            } else {
                0.0
            };
        }
        (self.beta * ((1.0 - z * z).sqrt() - 1.0)).exp()
    }

    /// Value of piece `i` at local coordinate `t ∈ [−1, 1]`, exactly (for fitting and tests).
    fn piece_exact(&self, i: usize, t: f64) -> f64 {
        let s = 0.5 * (t + 1.0);
        self.phi(-1.0 + 2.0 * (i as f64 + s) / self.w as f64)
    }

    /// Fit each piece by Chebyshev interpolation, raising the degree until the largest error
    /// on a dense sample is below tol/50 (or the degree cap).
    fn fit(&mut self, tol: f64) {
        let w = self.w;
        let target = (tol / 50.0).max(2e-16);
        let mut best: Option<(f64, Vec<[f64; MAX_WIDTH]>)> = None;
        for p in (w.min(MAX_DEGREE))..=MAX_DEGREE {
            let mut coef = vec![[0.0; MAX_WIDTH]; p + 1];
            for i in 0..w {
                let mono = cheb_fit(|t| self.piece_exact(i, t), p);
                for (d, c) in mono.iter().enumerate() {
                    coef[d][i] = *c;
                }
            }
            self.coef = coef.clone();
            let mut err = 0.0f64;
            let mut vals = [0.0; MAX_WIDTH];
            for n in 0..=400 {
                let t = -1.0 + 2.0 * n as f64 / 400.0;
                self.eval(t, &mut vals);
                for (i, v) in vals.iter().enumerate().take(w) {
                    err = err.max((v - self.piece_exact(i, t)).abs());
                }
            }
            if best.as_ref().is_none_or(|b| err < b.0) {
                best = Some((err, coef));
            }
            if err <= target {
                break;
            }
        }
        if let Some((_, c)) = best {
            self.coef = c;
        }
    }

    /// Degree of the piecewise polynomials.
    pub fn degree(&self) -> usize {
        self.coef.len() - 1
    }

    /// Kernel values at the `w` grid points an atom touches: `out[i] = φ(−1 + 2(i + s)/w)`
    /// for `t = 2s − 1 ∈ [−1, 1]`, where `s ∈ [0, 1)` is the offset returned by
    /// [`first_point`]. Lanes `i ≥ w` are zero.
    #[inline(always)]
    pub fn eval(&self, t: f64, out: &mut [f64; MAX_WIDTH]) {
        self.eval_with::<crate::simd::Lanes<crate::dispatch::BaselineMulAdd>>(t, out)
    }

    /// [`Kernel::eval`] with the multiply–add of a kernel level.
    #[inline(always)]
    pub(crate) fn eval_with<V: crate::simd::F8>(&self, t: f64, out: &mut [f64; MAX_WIDTH]) {
        let n = self.coef.len();
        *out = self.coef[n - 1];
        for d in (0..n - 1).rev() {
            let c = &self.coef[d];
            for i in 0..MAX_WIDTH {
                out[i] = crate::simd::fma::<V>(out[i], t, c[i]);
            }
        }
    }

    /// Fourier transform of the kernel in grid units,
    /// `ψ̃(θ) = ∫ φ(2u/w) e^{iθu} du = w ∫₀¹ φ(z) cos(θ w z / 2) dz`, θ in radians per grid
    /// spacing (Gauss–Legendre quadrature).
    pub fn fourier(&self, theta: f64) -> f64 {
        let half = 0.5 * theta * self.w as f64;
        let mut sum = 0.0;
        for &(z, wq) in &self.quad {
            sum += wq * self.phi(z) * (half * z).cos();
        }
        self.w as f64 * sum
    }

    /// [`Kernel::fourier`] at many frequencies, with the vectorised sincos (used per target
    /// point by the arbitrary-point path).
    pub fn fourier_many(&self, theta: &[f64], out: &mut [f64]) {
        let (mut ph, mut sn, mut cs) = ([0.0; LANES], [0.0; LANES], [0.0; LANES]);
        for (o, &th) in out.iter_mut().zip(theta) {
            // Lane-wise partial sums, so the loop vectorises (a single running sum would not).
            let mut acc = [0.0; LANES];
            for (zh, a) in &self.nodes {
                for l in 0..LANES {
                    ph[l] = th * zh[l];
                }
                sincos_lanes(&ph, &mut sn, &mut cs);
                for l in 0..LANES {
                    acc[l] = mul_add(a[l], cs[l], acc[l]);
                }
            }
            *o = acc.iter().sum();
        }
    }
}

/// First grid point and local coordinate for an atom at grid coordinate `g` (grid spacings):
/// the kernel covers points `l0 .. l0 + w` with `l0 = ⌈g − w/2⌉`, and `t = 2s − 1` with
/// `s = l0 − g + w/2 ∈ [0, 1)` is the argument of [`Kernel::eval`].
#[inline(always)]
pub fn first_point(g: f64, w: usize) -> (i64, f64) {
    let a = g - 0.5 * w as f64;
    let l0 = a.ceil();
    (l0 as i64, 2.0 * (l0 - a) - 1.0)
}

/// Monomial coefficients (in t on [−1, 1]) of the degree-`p` Chebyshev interpolant of `f`.
fn cheb_fit(f: impl Fn(f64) -> f64, p: usize) -> Vec<f64> {
    let n = p + 1;
    let pi = std::f64::consts::PI;
    let fv: Vec<f64> = (0..n)
        .map(|m| f((pi * (m as f64 + 0.5) / n as f64).cos()))
        .collect();
    let mut a = vec![0.0; n];
    for (k, ak) in a.iter_mut().enumerate() {
        let mut s = 0.0;
        for (m, v) in fv.iter().enumerate() {
            s += v * (pi * k as f64 * (m as f64 + 0.5) / n as f64).cos();
        }
        *ak = 2.0 * s / n as f64;
    }
    a[0] *= 0.5;
    // T_k as monomials by the recurrence T_{k+1} = 2t T_k − T_{k−1}.
    let mut mono = vec![0.0; n];
    let mut t_prev = vec![0.0; n];
    let mut t_cur = vec![0.0; n];
    t_prev[0] = 1.0;
    if n > 1 {
        t_cur[1] = 1.0;
    }
    for (k, ak) in a.iter().enumerate() {
        let tk = if k == 0 { &t_prev } else { &t_cur };
        for d in 0..n {
            mono[d] += ak * tk[d];
        }
        if k >= 1 && k + 1 < n {
            let mut next = vec![0.0; n];
            for d in 0..n {
                if d >= 1 {
                    next[d] += 2.0 * t_cur[d - 1];
                }
                next[d] -= t_prev[d];
            }
            t_prev = std::mem::replace(&mut t_cur, next);
        }
    }
    mono
}

/// Gauss–Legendre nodes and weights on [0, 1] (Newton iteration on Legendre polynomials).
fn gauss_legendre(n: usize) -> Vec<(f64, f64)> {
    let pi = std::f64::consts::PI;
    let mut out = Vec::with_capacity(n);
    for i in 0..n {
        let mut x = (pi * (i as f64 + 0.75) / (n as f64 + 0.5)).cos();
        let mut dp = 1.0;
        for _ in 0..100 {
            let (mut p0, mut p1) = (1.0, x);
            for k in 2..=n {
                let p2 = ((2 * k - 1) as f64 * x * p1 - (k - 1) as f64 * p0) / k as f64;
                p0 = p1;
                p1 = p2;
            }
            dp = n as f64 * (x * p1 - p0) / (x * x - 1.0);
            let dx = p1 / dp;
            x -= dx;
            if dx.abs() < 1e-16 {
                break;
            }
        }
        let wgt = 2.0 / ((1.0 - x * x) * dp * dp);
        out.push((0.5 * (x + 1.0), 0.5 * wgt));
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn quadrature_integrates_polynomials_and_cosines() {
        // Analytic: ∫₀¹ z⁷ dz = 1/8, ∫₀¹ cos(5z) dz = sin(5)/5.
        let q = gauss_legendre(40);
        let s7: f64 = q.iter().map(|&(z, w)| w * z.powi(7)).sum();
        assert!((s7 - 0.125).abs() < 1e-15, "{s7}");
        let sc: f64 = q.iter().map(|&(z, w)| w * (5.0 * z).cos()).sum();
        assert!((sc - 5f64.sin() / 5.0).abs() < 1e-15, "{sc}");
    }

    #[test]
    fn piecewise_fit_matches_the_es_function() {
        for &(tol, sigma) in &[
            (1e-3, 2.0),
            (1e-6, 2.0),
            (1e-12, 2.0),
            (1e-6, 1.25),
            (1e-9, 1.5),
        ] {
            let k = Kernel::new(tol, sigma).unwrap();
            let mut v = [0.0; MAX_WIDTH];
            for n in 0..997 {
                let g = 10.0 + n as f64 * 0.001_003;
                let (l0, t) = first_point(g, k.w);
                k.eval(t, &mut v);
                for (i, vi) in v.iter().enumerate() {
                    // Reference: the closed form φ(z) evaluated with the C library's exp/sqrt.
                    let want = if i < k.w {
                        k.phi((l0 as f64 + i as f64 - g) / (0.5 * k.w as f64))
                    } else {
                        0.0
                    };
                    assert!(
                        (vi - want).abs() <= tol / 20.0,
                        "tol {tol} i {i} g {g}: {vi} vs {want}"
                    );
                }
            }
        }
    }

    #[test]
    fn fourier_transform_matches_brute_force_integral() {
        // Reference: a midpoint-rule integral of φ(2u/w) cos(θu) over [−w/2, w/2] with 2·10⁵ cells.
        let k = Kernel::new(1e-6, 2.0).unwrap();
        for &theta in &[0.0, 0.3, 1.0, 2.5] {
            let n = 200_000;
            let h = k.w as f64 / n as f64;
            let mut s = 0.0;
            for i in 0..n {
                let u = -0.5 * k.w as f64 + (i as f64 + 0.5) * h;
                s += k.phi(2.0 * u / k.w as f64) * (theta * u).cos() * h;
            }
            let got = k.fourier(theta);
            assert!(
                (got - s).abs() < 1e-8 * s.abs().max(1.0),
                "θ {theta}: {got} vs {s}"
            );
            let mut many = [0.0];
            k.fourier_many(&[theta], &mut many);
            assert!(
                (many[0] - got).abs() < 1e-13 * got.abs(),
                "{} vs {got}",
                many[0]
            );
        }
    }

    #[test]
    fn refuses_too_wide_kernels() {
        let e = Kernel::new(1e-12, 1.2).unwrap_err();
        assert!(e.to_string().contains("kernel of"), "{e}");
    }
}
