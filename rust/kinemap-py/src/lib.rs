//! Python bindings of kinemap-core: numpy in, numpy out, the GIL released during every
//! kernel call. No physics lives here; see `python/kinemap` for the public API.
#![deny(elided_lifetimes_in_paths)]

mod arrays;
mod errors;
mod gridded;
mod pairs;

use errors::CoreErr;
use kinemap_core::Level;
use numpy::{Complex64, IntoPyArray, PyArray1, PyReadonlyArray1, PyReadonlyArray2};
use pyo3::prelude::*;

/// Atoms prepared for the kernels: grouped by scattering factor, structure of arrays.
#[pyclass(name = "AtomSet", module = "kinemap._core", frozen)]
pub struct PyAtomSet {
    inner: kinemap_core::AtomSet,
}

#[pymethods]
impl PyAtomSet {
    /// AtomSet(positions, weights, groups, n_groups): positions (N, 3) float64 in Å,
    /// weights (N,) float64 (occupancies), groups (N,) uint32 < n_groups.
    #[new]
    fn new<'py>(
        py: Python<'py>,
        positions: PyReadonlyArray2<'py, f64>,
        weights: PyReadonlyArray1<'py, f64>,
        groups: PyReadonlyArray1<'py, u32>,
        n_groups: usize,
    ) -> PyResult<Self> {
        let pos = arrays::vectors(&positions, "positions")?;
        let w = arrays::slice1(&weights, "weights", Some(pos.len()))?;
        let g = arrays::slice1(&groups, "groups", Some(pos.len()))?;
        let inner = py
            .detach(|| kinemap_core::AtomSet::new(pos, w, g, n_groups))
            .map_err(CoreErr)?;
        Ok(PyAtomSet { inner })
    }

    /// Number of atoms (without padding).
    #[getter]
    fn n_atoms(&self) -> usize {
        self.inner.n_atoms()
    }

    /// Number of groups.
    #[getter]
    fn n_groups(&self) -> usize {
        self.inner.n_groups()
    }
}

/// The kernel level of a call: the given name, or the process's level (`KINEMAP_KERNEL` or
/// the best of this CPU); an unknown or unsupported level is an InvalidInputError.
fn level(kernel: Option<&str>) -> PyResult<Level> {
    let l = match kernel {
        Some(name) => Level::parse(name).and_then(Level::check),
        None => kinemap_core::kernel_level(),
    };
    Ok(l.map_err(CoreErr)?)
}

/// point_amplitudes(atoms, q, factors, *, threads=None, kernel=None) -> complex128 (M,):
/// A(q_m) = Σ_g factors[g, m] Σ_{j in g} w_j exp(i q_m·r_j) at arbitrary q-points (M, 3).
/// `kernel` forces a kernel level ("avx512", "avx2", "baseline").
#[pyfunction(name = "point_amplitudes")]
#[pyo3(signature = (atoms, q, factors, *, threads=None, kernel=None))]
fn point_amplitudes_py<'py>(
    py: Python<'py>,
    atoms: &Bound<'py, PyAtomSet>,
    q: PyReadonlyArray2<'py, f64>,
    factors: PyReadonlyArray2<'py, Complex64>,
    threads: Option<usize>,
    kernel: Option<&str>,
) -> PyResult<Bound<'py, PyArray1<Complex64>>> {
    let set = &atoms.get().inner;
    let lv = level(kernel)?;
    let qv = arrays::vectors(&q, "q")?;
    let f = arrays::slice2(&factors, "factors", (set.n_groups(), qv.len()))?;
    let out = py
        .detach(|| kinemap_core::point_amplitudes_at(lv, set, qv, f, threads))
        .map_err(CoreErr)?;
    Ok(out.into_pyarray(py))
}

/// grid_amplitudes(atoms, rows, step, n, factors, *, threads=None, kernel=None) ->
/// complex128 (R*n,): amplitudes at rows[r] + k*step for k < n, row-major, by phase stepping.
/// `kernel` forces a kernel level ("avx512", "avx2", "baseline").
#[pyfunction(name = "grid_amplitudes")]
#[pyo3(signature = (atoms, rows, step, n, factors, *, threads=None, kernel=None))]
#[allow(clippy::too_many_arguments)]
fn grid_amplitudes_py<'py>(
    py: Python<'py>,
    atoms: &Bound<'py, PyAtomSet>,
    rows: PyReadonlyArray2<'py, f64>,
    step: PyReadonlyArray1<'py, f64>,
    n: usize,
    factors: PyReadonlyArray2<'py, Complex64>,
    threads: Option<usize>,
    kernel: Option<&str>,
) -> PyResult<Bound<'py, PyArray1<Complex64>>> {
    let lv = level(kernel)?;
    let set = &atoms.get().inner;
    let rv = arrays::vectors(&rows, "rows")?;
    let st = arrays::slice1(&step, "step", Some(3))?;
    let step3 = [st[0], st[1], st[2]];
    let m = rv
        .len()
        .checked_mul(n)
        .ok_or_else(|| errors::invalid(format!("{} rows of {n} points: too many", rv.len())))?;
    let f = arrays::slice2(&factors, "factors", (set.n_groups(), m))?;
    let out = py
        .detach(|| kinemap_core::grid_amplitudes_at(lv, set, rv, step3, n, f, threads))
        .map_err(CoreErr)?;
    Ok(out.into_pyarray(py))
}

/// kernel_level() -> str: the kernel level the exact sums use in this process ("avx512",
/// "avx2" or "baseline"): `KINEMAP_KERNEL` if set, otherwise the best level of this CPU.
/// Raises InvalidInputError when `KINEMAP_KERNEL` names an unknown or unsupported level.
#[pyfunction(name = "kernel_level")]
fn kernel_level_py() -> PyResult<&'static str> {
    Ok(level(None)?.name())
}

/// kernel_levels() -> list[str]: the kernel levels this CPU can run, best first.
#[pyfunction(name = "kernel_levels")]
fn kernel_levels_py() -> Vec<&'static str> {
    kinemap_core::dispatch::available_levels()
        .into_iter()
        .map(Level::name)
        .collect()
}

/// The compiled core of kinemap.
#[pymodule]
mod _core {
    #[pymodule_export]
    use super::grid_amplitudes_py;
    #[pymodule_export]
    use super::gridded::{
        factor_table_eval_py, gridded_kernel_width_py, PyPointPlan, PyRegularPlan,
    };
    #[pymodule_export]
    use super::gridded::{
        gridded_fine_size_py, gridded_limits_py, gridded_point_dims_py,
        gridded_upsample_choices_py, gridded_usable_py,
    };
    #[pymodule_export]
    use super::pairs::{debye_sums_py, pair_index_py, PyPairHistogram};
    #[pymodule_export]
    use super::PyAtomSet;
    #[pymodule_export]
    use super::{kernel_level_py, kernel_levels_py, point_amplitudes_py};

    use pyo3::prelude::*;

    #[pymodule_init]
    fn init(m: &Bound<'_, PyModule>) -> PyResult<()> {
        m.add("__version__", env!("CARGO_PKG_VERSION"))?;
        Ok(())
    }
}
