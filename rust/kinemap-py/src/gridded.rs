//! Bindings of the gridded fast path: plans that keep one fine grid per scattering group,
//! fed atom chunk by atom chunk, then finished group by group.

use crate::arrays;
use crate::errors::{invalid, CoreErr};
use kinemap_core::gridded::{sizing, FactorTable, GroupFactor};
use numpy::{
    Complex64, IntoPyArray, PyArray1, PyReadonlyArray1, PyReadonlyArray2, PyReadwriteArray1,
};
use pyo3::prelude::*;

fn vec3(a: &PyReadonlyArray1<'_, f64>, name: &str) -> PyResult<[f64; 3]> {
    let s = arrays::slice1(a, name, Some(3))?;
    Ok([s[0], s[1], s[2]])
}

/// RegularPlan(origin, steps, shape, tol, upsample): gridded sums on the regular grid
/// origin + Σ i_a steps[a] (Å⁻¹), i_a < shape[a], to relative tolerance `tol`.
#[pyclass(name = "RegularPlan", module = "kinemap._core")]
pub struct PyRegularPlan {
    inner: kinemap_core::RegularPlan,
}

#[pymethods]
impl PyRegularPlan {
    #[new]
    fn new<'py>(
        origin: PyReadonlyArray1<'py, f64>,
        steps: PyReadonlyArray2<'py, f64>,
        shape: Vec<usize>,
        tol: f64,
        upsample: f64,
    ) -> PyResult<Self> {
        let o = vec3(&origin, "origin")?;
        let st = if shape.is_empty() {
            &[][..]
        } else {
            arrays::vectors(&steps, "steps")?
        };
        let inner =
            kinemap_core::RegularPlan::new(o, st, &shape, tol, upsample).map_err(CoreErr)?;
        Ok(PyRegularPlan { inner })
    }

    /// Complex values in one group's fine grid.
    #[getter]
    fn fine_len(&self) -> usize {
        self.inner.fine_len()
    }

    /// Fine-grid shape (3 entries; 1 on unused axes).
    #[getter]
    fn fine_dims(&self) -> (usize, usize, usize) {
        let d = self.inner.fine_dims();
        (d[0], d[1], d[2])
    }

    /// Kernel width in grid points.
    #[getter]
    fn width(&self) -> usize {
        self.inner.width()
    }

    /// add(positions, weights, slots, *, threads=None): spread atoms (Å) with q-independent
    /// weights into the fine grid of their slot (group).
    #[pyo3(signature = (positions, weights, slots, *, threads=None))]
    fn add<'py>(
        &mut self,
        py: Python<'py>,
        positions: PyReadonlyArray2<'py, f64>,
        weights: PyReadonlyArray1<'py, f64>,
        slots: PyReadonlyArray1<'py, u32>,
        threads: Option<usize>,
    ) -> PyResult<()> {
        let inner = &mut self.inner;
        spread(py, &positions, &weights, &slots, |p, w, s| {
            inner.add(p, w, s, threads)
        })
    }

    /// finish(slot, *, threads=None) -> complex128 (M,): the group sums Σ w_j exp(i q·r_j) on
    /// the grid (C order); frees the slot's fine grid.
    #[pyo3(signature = (slot, *, threads=None))]
    fn finish<'py>(
        &mut self,
        py: Python<'py>,
        slot: usize,
        threads: Option<usize>,
    ) -> PyResult<Bound<'py, PyArray1<Complex64>>> {
        let inner = &mut self.inner;
        finished(py, || inner.finish(slot, threads))
    }

    /// finish_into(slot, out, table, s0, h, *, u=None, threads=None): adds the group's
    /// amplitudes F(q)·S(q) to `out` (complex128, one value per grid point, C order), with
    /// F(q) = table(|q|/4π)·exp(−½ qᵀUq): `table` holds f(s) at s0 + k·h, interpolated by
    /// local cubics; `u` (3×3, Å²) only for anisotropic displacements. Frees the slot's grid.
    #[pyo3(signature = (slot, out, table, s0, h, *, u=None, threads=None))]
    #[allow(clippy::too_many_arguments)]
    fn finish_into<'py>(
        &mut self,
        py: Python<'py>,
        slot: usize,
        out: PyReadwriteArray1<'py, Complex64>,
        table: PyReadonlyArray1<'py, Complex64>,
        s0: f64,
        h: f64,
        u: Option<PyReadonlyArray2<'py, f64>>,
        threads: Option<usize>,
    ) -> PyResult<()> {
        let inner = &mut self.inner;
        accumulate(py, out, &table, s0, h, u.as_ref(), |f, o| {
            inner.finish_into(slot, f, o, threads)
        })
    }

    /// s_range(*, threads=None) -> (float, float): smallest and largest s = |q|/4π over the
    /// grid's points (Å⁻¹).
    #[pyo3(signature = (*, threads=None))]
    fn s_range(&self, py: Python<'_>, threads: Option<usize>) -> PyResult<(f64, f64)> {
        let inner = &self.inner;
        py.detach(|| inner.s_range(threads))
            .map_err(|e| CoreErr(e).into())
    }
}

/// PointPlan(q, lo, hi, tol, upsample): gridded (type-3) sums at arbitrary q-points (M, 3)
/// for atoms inside the box lo ≤ r ≤ hi (Å).
#[pyclass(name = "PointPlan", module = "kinemap._core")]
pub struct PyPointPlan {
    inner: kinemap_core::PointPlan,
}

#[pymethods]
impl PyPointPlan {
    #[new]
    fn new<'py>(
        py: Python<'py>,
        q: PyReadonlyArray2<'py, f64>,
        lo: PyReadonlyArray1<'py, f64>,
        hi: PyReadonlyArray1<'py, f64>,
        tol: f64,
        upsample: f64,
    ) -> PyResult<Self> {
        let qv = arrays::vectors(&q, "q")?;
        let (l, h) = (vec3(&lo, "lo")?, vec3(&hi, "hi")?);
        let inner = py
            .detach(|| kinemap_core::PointPlan::new(qv, l, h, tol, upsample))
            .map_err(CoreErr)?;
        Ok(PyPointPlan { inner })
    }

    /// Complex values of the spreading grid (one per group) and of the interpolation grid.
    #[getter]
    fn fine_lens(&self) -> (usize, usize) {
        self.inner.fine_lens()
    }

    /// Shapes of the spreading and interpolation grids.
    #[getter]
    fn fine_dims(&self) -> ((usize, usize, usize), (usize, usize, usize)) {
        let (a, b) = self.inner.fine_dims();
        ((a[0], a[1], a[2]), (b[0], b[1], b[2]))
    }

    /// Kernel width in grid points.
    #[getter]
    fn width(&self) -> usize {
        self.inner.width()
    }

    /// add(positions, weights, slots, *, threads=None): spread atoms into their slot's grid.
    #[pyo3(signature = (positions, weights, slots, *, threads=None))]
    fn add<'py>(
        &mut self,
        py: Python<'py>,
        positions: PyReadonlyArray2<'py, f64>,
        weights: PyReadonlyArray1<'py, f64>,
        slots: PyReadonlyArray1<'py, u32>,
        threads: Option<usize>,
    ) -> PyResult<()> {
        let inner = &mut self.inner;
        spread(py, &positions, &weights, &slots, |p, w, s| {
            inner.add(p, w, s, threads)
        })
    }

    /// finish(slot, *, threads=None) -> complex128 (M,): group sums at the plan's q-points.
    #[pyo3(signature = (slot, *, threads=None))]
    fn finish<'py>(
        &mut self,
        py: Python<'py>,
        slot: usize,
        threads: Option<usize>,
    ) -> PyResult<Bound<'py, PyArray1<Complex64>>> {
        let inner = &mut self.inner;
        finished(py, || inner.finish(slot, threads))
    }

    /// finish_into(slot, out, table, s0, h, *, u=None, threads=None): adds the group's
    /// amplitudes F(q)·S(q) at the plan's q-points to `out`; F as for RegularPlan.finish_into.
    #[pyo3(signature = (slot, out, table, s0, h, *, u=None, threads=None))]
    #[allow(clippy::too_many_arguments)]
    fn finish_into<'py>(
        &mut self,
        py: Python<'py>,
        slot: usize,
        out: PyReadwriteArray1<'py, Complex64>,
        table: PyReadonlyArray1<'py, Complex64>,
        s0: f64,
        h: f64,
        u: Option<PyReadonlyArray2<'py, f64>>,
        threads: Option<usize>,
    ) -> PyResult<()> {
        let inner = &mut self.inner;
        accumulate(py, out, &table, s0, h, u.as_ref(), |f, o| {
            inner.finish_into(slot, f, o, threads)
        })
    }

    /// s_range(*, threads=None) -> (float, float): smallest and largest s = |q|/4π over the
    /// plan's q-points (Å⁻¹).
    #[pyo3(signature = (*, threads=None))]
    fn s_range(&self, py: Python<'_>, threads: Option<usize>) -> PyResult<(f64, f64)> {
        let inner = &self.inner;
        py.detach(|| inner.s_range(threads))
            .map_err(|e| CoreErr(e).into())
    }
}

/// factor_table_eval(table, s0, h, s) -> complex128 array: the factor table `table` (f at
/// s0 + k·h) interpolated at `s` exactly as the gridded path's read-out does.
#[pyfunction(name = "factor_table_eval")]
pub fn factor_table_eval_py<'py>(
    py: Python<'py>,
    table: PyReadonlyArray1<'py, Complex64>,
    s0: f64,
    h: f64,
    s: PyReadonlyArray1<'py, f64>,
) -> PyResult<Bound<'py, PyArray1<Complex64>>> {
    let t = factor_table(&table, s0, h)?;
    let sv = arrays::slice1(&s, "s", None)?;
    let out: Vec<Complex64> = py.detach(|| sv.iter().map(|&x| t.eval(x)).collect());
    Ok(out.into_pyarray(py))
}

fn factor_table(table: &PyReadonlyArray1<'_, Complex64>, s0: f64, h: f64) -> PyResult<FactorTable> {
    let values = arrays::slice1(table, "table", None)?.to_vec();
    Ok(FactorTable::new(s0, h, values).map_err(CoreErr)?)
}

/// Build a group's factor from its table and optional U, then run `finish` on `out` without
/// the GIL.
fn accumulate<'py, F>(
    py: Python<'py>,
    mut out: PyReadwriteArray1<'py, Complex64>,
    table: &PyReadonlyArray1<'py, Complex64>,
    s0: f64,
    h: f64,
    u: Option<&PyReadonlyArray2<'py, f64>>,
    finish: F,
) -> PyResult<()>
where
    F: FnOnce(&GroupFactor, &mut [Complex64]) -> kinemap_core::Result<()> + Send,
{
    let u = match u {
        None => None,
        Some(a) => {
            let m = arrays::slice2(a, "u", (3, 3))?;
            Some([[m[0], m[1], m[2]], [m[3], m[4], m[5]], [m[6], m[7], m[8]]])
        }
    };
    let factor = GroupFactor::new(factor_table(table, s0, h)?, u).map_err(CoreErr)?;
    let o = out
        .as_slice_mut()
        .map_err(|_| invalid("`out` must be C-contiguous and writable".to_string()))?;
    py.detach(|| finish(&factor, o)).map_err(CoreErr)?;
    Ok(())
}

/// gridded_kernel_width(tol, upsample, *, points=False) -> int: kernel points per axis the
/// gridded path uses for a tolerance and oversampling factor (regular grids, or arbitrary
/// points, whose two stages share the budget); may exceed the supported maximum.
#[pyfunction(name = "gridded_kernel_width")]
#[pyo3(signature = (tol, upsample, *, points=false))]
pub fn gridded_kernel_width_py(tol: f64, upsample: f64, points: bool) -> PyResult<usize> {
    if !(tol.is_finite() && tol > 0.0 && upsample.is_finite() && upsample > 1.0) {
        return Err(invalid(format!(
            "need tol > 0 and upsample > 1, got {tol}, {upsample}"
        )));
    }
    Ok(sizing::kernel_width(tol, upsample, points))
}

/// gridded_limits() -> (min_tol, max_width): the tightest tolerance the gridded path reaches
/// and the widest kernel it supports (grid points per axis).
#[pyfunction(name = "gridded_limits")]
pub fn gridded_limits_py() -> (f64, usize) {
    (sizing::MIN_TOL, kinemap_core::gridded::MAX_WIDTH)
}

/// gridded_upsample_choices(points=False) -> list[float]: the oversampling factors σ the
/// planner considers (regular grids, or arbitrary points), largest first.
#[pyfunction(name = "gridded_upsample_choices")]
#[pyo3(signature = (points=false))]
pub fn gridded_upsample_choices_py(points: bool) -> Vec<f64> {
    if points {
        sizing::UPSAMPLE_POINTS.to_vec()
    } else {
        sizing::UPSAMPLE_REGULAR.to_vec()
    }
}

/// gridded_usable(tol, upsample, *, points=False) -> bool: whether the gridded path reaches
/// `tol` at oversampling `upsample` (tolerance floor, kernel width, σ < 2 limits).
#[pyfunction(name = "gridded_usable")]
#[pyo3(signature = (tol, upsample, *, points=false))]
pub fn gridded_usable_py(tol: f64, upsample: f64, points: bool) -> bool {
    sizing::usable(tol, upsample, points)
}

/// gridded_fine_size(n, upsample, width) -> int: fine-grid points along an axis of n points
/// (the smallest even 2,3,5-smooth size ≥ max(σ·n, 2·width), skipping multiples of 64 above
/// 128).
#[pyfunction(name = "gridded_fine_size")]
pub fn gridded_fine_size_py(n: usize, upsample: f64, width: usize) -> PyResult<usize> {
    check_sizing(upsample, width)?;
    if upsample * n as f64 > kinemap_core::gridded::plan::MAX_AXIS as f64 {
        return Err(invalid(format!(
            "an axis of {n} points at oversampling {upsample} is too large for the gridded path"
        )));
    }
    Ok(sizing::fine_size(n, upsample, width))
}

/// gridded_point_dims(upsample, width, extent, qrange) -> (list[int], list[int]): spreading
/// and interpolation grid sizes of the arbitrary-point path for atoms spanning `extent` Å and
/// q-points spanning `qrange` Å⁻¹ per Cartesian axis (axes where either is 0 drop out).
#[pyfunction(name = "gridded_point_dims")]
pub fn gridded_point_dims_py(
    upsample: f64,
    width: usize,
    extent: [f64; 3],
    qrange: [f64; 3],
) -> PyResult<(Vec<usize>, Vec<usize>)> {
    check_sizing(upsample, width)?;
    let (mut d1, mut d2) = (Vec::new(), Vec::new());
    for a in 0..3 {
        let (x, s) = (extent[a], qrange[a]);
        if !(x.is_finite() && s.is_finite() && x >= 0.0 && s >= 0.0) {
            return Err(invalid(format!(
                "`extent` and `qrange` must be finite and ≥ 0, got {x} and {s} on axis {a}"
            )));
        }
        if x > 0.0 && s > 0.0 {
            let (n1, n2) = sizing::point_axis(upsample, width, x, s).map_err(CoreErr)?;
            d1.push(n1);
            d2.push(n2);
        }
    }
    Ok((d1, d2))
}

fn check_sizing(upsample: f64, width: usize) -> PyResult<()> {
    if !(upsample.is_finite() && (1.0..=4.0).contains(&upsample)) {
        return Err(invalid(format!(
            "`upsample` must be in [1, 4], got {upsample}"
        )));
    }
    if width == 0 || width > 64 {
        return Err(invalid(format!("`width` must be in 1..=64, got {width}")));
    }
    Ok(())
}

/// Check and borrow the atoms of an `add` call, then run the spreading without the GIL.
fn spread<'py, F>(
    py: Python<'py>,
    positions: &PyReadonlyArray2<'py, f64>,
    weights: &PyReadonlyArray1<'py, f64>,
    slots: &PyReadonlyArray1<'py, u32>,
    add: F,
) -> PyResult<()>
where
    F: FnOnce(&[[f64; 3]], &[f64], &[u32]) -> kinemap_core::Result<()> + Send,
{
    let pos = arrays::vectors(positions, "positions")?;
    let w = arrays::slice1(weights, "weights", Some(pos.len()))?;
    let s = arrays::slice1(slots, "slots", Some(pos.len()))?;
    py.detach(|| add(pos, w, s)).map_err(CoreErr)?;
    Ok(())
}

/// Run a plan's `finish` without the GIL and move its result into a numpy array.
fn finished<'py, F>(py: Python<'py>, finish: F) -> PyResult<Bound<'py, PyArray1<Complex64>>>
where
    F: FnOnce() -> kinemap_core::Result<Vec<Complex64>> + Send,
{
    let out = py.detach(finish).map_err(CoreErr)?;
    Ok(out.into_pyarray(py))
}
