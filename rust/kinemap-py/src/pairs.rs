//! Bindings of the pair-distance histograms and the Debye sums over them.

use crate::arrays;
use crate::errors::{invalid, CoreErr};
use numpy::prelude::*;
use numpy::{IntoPyArray, PyArray2, PyReadonlyArray1, PyReadonlyArray2};
use pyo3::prelude::*;

/// PairHistogram(n_groups, n_nodes, dr, cutoff=None, box=None): weighted pair-distance
/// histograms per unordered group pair on nodes k·dr (Å), two-node binning, fixed-point
/// accumulation (identical for any thread count and chunking). `box` (3, 3): rows a, b, c
/// of a periodic box (minimum image; needs cutoff <= half its smallest width).
#[pyclass(name = "PairHistogram", module = "kinemap._core")]
pub struct PyPairHistogram {
    inner: kinemap_core::PairHistogram,
}

#[pymethods]
impl PyPairHistogram {
    #[new]
    #[pyo3(signature = (n_groups, n_nodes, dr, cutoff=None, r#box=None))]
    fn new<'py>(
        n_groups: usize,
        n_nodes: usize,
        dr: f64,
        cutoff: Option<f64>,
        r#box: Option<PyReadonlyArray2<'py, f64>>,
    ) -> PyResult<Self> {
        let rows = match &r#box {
            None => None,
            Some(b) => {
                let v = arrays::vectors(b, "box")?;
                if v.len() != 3 {
                    return Err(invalid(format!(
                        "`box` must have shape (3, 3), got ({}, 3)",
                        v.len()
                    )));
                }
                Some([v[0], v[1], v[2]])
            }
        };
        let inner = kinemap_core::PairHistogram::new(n_groups, n_nodes, dr, cutoff, rows)
            .map_err(CoreErr)?;
        Ok(PyPairHistogram { inner })
    }

    /// Number of groups.
    #[getter]
    fn n_groups(&self) -> usize {
        self.inner.n_groups()
    }

    /// Number of unordered group pairs (rows of `values()`).
    #[getter]
    fn n_pairs(&self) -> usize {
        self.inner.n_pairs()
    }

    /// Number of distance nodes.
    #[getter]
    fn n_nodes(&self) -> usize {
        self.inner.n_nodes()
    }

    /// Node spacing (Å).
    #[getter]
    fn dr(&self) -> f64 {
        self.inner.dr()
    }

    /// Atom pairs binned so far.
    #[getter]
    fn pairs_counted(&self) -> u128 {
        self.inner.pairs_counted()
    }

    /// add_within(positions, groups, weights, *, threads=None): add the pairs i < j of one
    /// atom set (positions (N, 3) Å, groups (N,) uint32, weights (N,) occupancies in [0, 1]).
    #[pyo3(signature = (positions, groups, weights, *, threads=None))]
    fn add_within<'py>(
        &mut self,
        py: Python<'py>,
        positions: PyReadonlyArray2<'py, f64>,
        groups: PyReadonlyArray1<'py, u32>,
        weights: PyReadonlyArray1<'py, f64>,
        threads: Option<usize>,
    ) -> PyResult<()> {
        let pos = arrays::vectors(&positions, "positions")?;
        let g = arrays::slice1(&groups, "groups", Some(pos.len()))?;
        let w = arrays::slice1(&weights, "weights", Some(pos.len()))?;
        let inner = &mut self.inner;
        py.detach(|| inner.add_within(pos, g, w, threads))
            .map_err(CoreErr)?;
        Ok(())
    }

    /// add_between(positions_a, groups_a, weights_a, positions_b, groups_b, weights_b, *,
    /// threads=None): add every pair across two disjoint atom sets.
    #[allow(clippy::too_many_arguments)]
    #[pyo3(signature = (positions_a, groups_a, weights_a, positions_b, groups_b, weights_b, *, threads=None))]
    fn add_between<'py>(
        &mut self,
        py: Python<'py>,
        positions_a: PyReadonlyArray2<'py, f64>,
        groups_a: PyReadonlyArray1<'py, u32>,
        weights_a: PyReadonlyArray1<'py, f64>,
        positions_b: PyReadonlyArray2<'py, f64>,
        groups_b: PyReadonlyArray1<'py, u32>,
        weights_b: PyReadonlyArray1<'py, f64>,
        threads: Option<usize>,
    ) -> PyResult<()> {
        let pa = arrays::vectors(&positions_a, "positions_a")?;
        let ga = arrays::slice1(&groups_a, "groups_a", Some(pa.len()))?;
        let wa = arrays::slice1(&weights_a, "weights_a", Some(pa.len()))?;
        let pb = arrays::vectors(&positions_b, "positions_b")?;
        let gb = arrays::slice1(&groups_b, "groups_b", Some(pb.len()))?;
        let wb = arrays::slice1(&weights_b, "weights_b", Some(pb.len()))?;
        let inner = &mut self.inner;
        py.detach(|| inner.add_between(pa, ga, wa, pb, gb, wb, threads))
            .map_err(CoreErr)?;
        Ok(())
    }

    /// values() -> float64 (n_pairs, n_nodes): the accumulated weights per group pair
    /// (row order: (0,0), (0,1), ..., (1,1), ...).
    fn values<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyArray2<f64>>> {
        let (p, k) = (self.inner.n_pairs(), self.inner.n_nodes());
        let v = self.inner.values();
        v.into_pyarray(py)
            .reshape([p, k])
            .map_err(|e| invalid(format!("cannot shape the histogram: {e}")))
    }
}

/// debye_sums(hist, dr, q, *, threads=None) -> float64 (P, M): Σ_k hist[p, k] sinc(q_m k dr)
/// for a histogram (P, K) on nodes k·dr (Å) and |Q| values q (Å⁻¹, >= 0).
#[pyfunction(name = "debye_sums")]
#[pyo3(signature = (hist, dr, q, *, threads=None))]
pub fn debye_sums_py<'py>(
    py: Python<'py>,
    hist: PyReadonlyArray2<'py, f64>,
    dr: f64,
    q: PyReadonlyArray1<'py, f64>,
    threads: Option<usize>,
) -> PyResult<Bound<'py, PyArray2<f64>>> {
    let shape = hist.shape();
    let (p, k) = (shape[0], shape[1]);
    let h = arrays::slice2(&hist, "hist", (p, k))?;
    let qs = arrays::slice1(&q, "q", None)?;
    let m = qs.len();
    let out = py
        .detach(|| kinemap_core::debye_sums(h, k, dr, qs, threads))
        .map_err(CoreErr)?;
    out.into_pyarray(py)
        .reshape([p, m])
        .map_err(|e| invalid(format!("cannot shape the sums: {e}")))
}

/// pair_index(g, h, n_groups) -> int: row of the group pair (g, h) in `values()`.
#[pyfunction(name = "pair_index")]
pub fn pair_index_py(g: usize, h: usize, n_groups: usize) -> PyResult<usize> {
    if g >= n_groups || h >= n_groups {
        return Err(invalid(format!(
            "group indices ({g}, {h}) must be below n_groups = {n_groups}"
        )));
    }
    Ok(kinemap_core::pairs::pair_index(g, h, n_groups))
}
