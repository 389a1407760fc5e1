//! A scattering group's factor `F_g(q) = f_g(s)·T_g(q)`, evaluated by the core while it reads
//! out the group sums, so the q-points never pass through Python.
//!
//! `f_g(s)·exp(−B s²)` depends on `s = |q|/4π` only and is smooth; the caller tabulates it on
//! uniform nodes in `s` (and checks the table, see `kinemap._engine.factors`), the core
//! interpolates with the 4-point Lagrange cubic of the nodes around `s` (error
//! `≤ 0.5625·h⁴·max|f⁗|/24` on the central interval). A group with anisotropic displacements
//! multiplies by `exp(−½ qᵀUq)`, evaluated at each point.

use crate::error::{Error, Result};
use num_complex::Complex64;
use std::f64::consts::PI;

/// `f(s)` on the nodes `s0 + k·h`, `k < values.len()`, interpolated by local cubics.
#[derive(Debug, Clone)]
pub struct FactorTable {
    s0: f64,
    inv_h: f64,
    /// Last usable stencil start (`len − 4`), as f64 for the clamp.
    last: f64,
    values: Vec<Complex64>,
}

impl FactorTable {
    /// A table of `values` at `s0 + k·h`; needs at least 4 finite values, `h > 0`.
    pub fn new(s0: f64, h: f64, values: Vec<Complex64>) -> Result<Self> {
        if values.len() < 4 {
            return Err(Error::Shape(format!(
                "a factor table needs at least 4 nodes, got {}",
                values.len()
            )));
        }
        if !(s0.is_finite() && h.is_finite() && h > 0.0) {
            return Err(Error::Range(format!(
                "a factor table needs a finite start and a step > 0, got s0 = {s0}, h = {h}"
            )));
        }
        if let Some(k) = values
            .iter()
            .position(|v| !(v.re.is_finite() && v.im.is_finite()))
        {
            return Err(Error::NonFinite(format!(
                "factor table node {k} (s = {}) is not finite: {}",
                s0 + k as f64 * h,
                values[k]
            )));
        }
        Ok(FactorTable {
            s0,
            inv_h: 1.0 / h,
            last: (values.len() - 4) as f64,
            values,
        })
    }

    /// The interpolated `f(s)`; `s` outside the nodes is clamped to the first or last one.
    #[inline]
    pub fn eval(&self, s: f64) -> Complex64 {
        let t = ((s - self.s0) * self.inv_h).clamp(0.0, self.last + 3.0);
        // Stencil nodes k..k+3 with t in [k+1, k+2] away from the ends.
        let k = (t.floor() - 1.0).clamp(0.0, self.last);
        let x = t - k;
        let (x1, x2, x3) = (x - 1.0, x - 2.0, x - 3.0);
        let w0 = -(x1 * x2 * x3) / 6.0;
        let w1 = 0.5 * x * x2 * x3;
        let w2 = -0.5 * x * x1 * x3;
        let w3 = x * x1 * x2 / 6.0;
        let v = &self.values[k as usize..k as usize + 4];
        v[0] * w0 + v[1] * w1 + v[2] * w2 + v[3] * w3
    }
}

/// One group's factor: its table in `s` and, for anisotropic displacements, `U` (Å²).
#[derive(Debug, Clone)]
pub struct GroupFactor {
    table: FactorTable,
    u: Option<[[f64; 3]; 3]>,
}

impl GroupFactor {
    /// The factor `table(|q|/4π)`, times `exp(−½ qᵀUq)` when `u` is given (finite, Å²).
    pub fn new(table: FactorTable, u: Option<[[f64; 3]; 3]>) -> Result<Self> {
        if let Some(m) = u {
            if m.iter().flatten().any(|v| !v.is_finite()) {
                return Err(Error::NonFinite(format!(
                    "the displacement tensor U is not finite: {m:?}"
                )));
            }
        }
        Ok(GroupFactor { table, u })
    }

    /// `F(q)` at the q-vector `q` (Å⁻¹).
    #[inline]
    pub fn at(&self, q: [f64; 3]) -> Complex64 {
        let q2 = q[0] * q[0] + q[1] * q[1] + q[2] * q[2];
        let f = self.table.eval(q2.sqrt() * (0.25 / PI));
        match &self.u {
            None => f,
            Some(u) => {
                let mut quq = 0.0;
                for i in 0..3 {
                    quq += q[i] * (u[i][0] * q[0] + u[i][1] * q[1] + u[i][2] * q[2]);
                }
                f * (-0.5 * quq).exp()
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn table_of(f: impl Fn(f64) -> Complex64, s0: f64, h: f64, n: usize) -> FactorTable {
        FactorTable::new(s0, h, (0..n).map(|k| f(s0 + k as f64 * h)).collect()).unwrap()
    }

    #[test]
    fn cubics_are_reproduced_exactly() {
        // A cubic polynomial is its own 4-point Lagrange interpolant, at the ends too.
        let f = |s: f64| Complex64::new(1.0 - 2.0 * s + 0.5 * s * s * s, s * s);
        let t = table_of(f, 0.0, 0.1, 12);
        for i in 0..=110 {
            let s = i as f64 * 0.01;
            assert!((t.eval(s) - f(s)).norm() < 1e-14, "s = {s}");
        }
    }

    #[test]
    fn gaussian_error_follows_the_fourth_power_of_the_step() {
        // f = exp(−b s²): halving h divides the cubic's error by ≈ 16.
        let f = |s: f64| Complex64::new((-10.0 * s * s).exp(), 0.0);
        let err = |n: usize| {
            let h = 1.0 / (n - 1) as f64;
            let t = table_of(f, 0.0, h, n);
            (0..1000)
                .map(|i| {
                    let s = i as f64 / 999.0;
                    (t.eval(s) - f(s)).norm()
                })
                .fold(0.0, f64::max)
        };
        let ratio = err(101) / err(201);
        assert!((12.0..20.0).contains(&ratio), "ratio {ratio}");
    }

    #[test]
    fn outside_points_are_clamped_and_bad_tables_refused() {
        let t = table_of(|s| Complex64::new(s, 0.0), 1.0, 0.5, 5);
        assert_eq!(t.eval(0.0), Complex64::new(1.0, 0.0));
        assert_eq!(t.eval(10.0), Complex64::new(3.0, 0.0));
        assert!(FactorTable::new(0.0, 0.1, vec![Complex64::new(1.0, 0.0); 3]).is_err());
        assert!(FactorTable::new(0.0, 0.0, vec![Complex64::new(1.0, 0.0); 4]).is_err());
        let mut v = vec![Complex64::new(1.0, 0.0); 4];
        v[2].im = f64::NAN;
        let e = FactorTable::new(0.0, 0.1, v).unwrap_err().to_string();
        assert!(e.contains("node 2"), "{e}");
    }

    #[test]
    fn anisotropic_factor_multiplies_exp_of_the_quadratic_form() {
        let t = table_of(|_| Complex64::new(2.0, 0.0), 0.0, 1.0, 4);
        let u = [[0.01, 0.002, 0.0], [0.002, 0.02, 0.0], [0.0, 0.0, 0.03]];
        let g = GroupFactor::new(t, Some(u)).unwrap();
        let q = [1.0, -2.0, 0.5];
        let quq = 0.01 * 1.0 + 0.02 * 4.0 + 0.03 * 0.25 + 2.0 * 0.002 * (1.0 * -2.0);
        assert!((g.at(q).re - 2.0 * (-0.5f64 * quq).exp()).abs() < 1e-15);
    }
}
